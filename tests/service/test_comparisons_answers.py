"""Comparisons: the "no preference" answer, identical variants refused, the list's items.

References
----------
* Preference p-value: two-sided sign test (binomial, p = 0.5) over the trials with a
  preference; ties ("none") left out, as the sign test drops ties (common practice).
  Checked against ``scipy.stats.binomtest``.
"""

from __future__ import annotations

import csv
import io

import pytest
from scipy import stats

from earfold.renderer.io import write_audio
from earfold.service.comparisons.stats import preference_counts
from earfold.service.jobs.worker import Worker
from tests.service.stem_factory import FS, files_field, noise

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}


def _stem(client, tmp_path, seconds=2.0, channels=6, name="harbour-walk.wav") -> dict:
    path = tmp_path / name
    write_audio(path, noise(int(FS * seconds), channels, seed=3), FS)
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    return resp.json()


def _create(client, stem_id, variants, **extra):
    body = {
        "stem_id": stem_id,
        "variants": variants,
        "trials": 6,
        "excerpt": {"start": 0.0, "length": 1.0},
        **extra,
    }
    return client.post("/v1/comparisons", json=body)


def _build(client) -> None:
    Worker(client.app.state.settings, queue=client.app.state.queue, name="t").run(once=True)


def _problem(resp, status, *patterns) -> dict:
    assert resp.status_code == status, resp.text
    assert resp.headers["content-type"].startswith("application/problem+json")
    for p in patterns:
        assert p in resp.json()["detail"], resp.json()
    return resp.json()


DIFFERENT = [{"layout": "5.1", "name": "plain"}, {"layout": "5.1", "lfe_gain": 4, "name": "hot"}]


def test_no_preference_is_counted_apart_and_left_out_of_the_sign_test(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path)
    resp = _create(client, stem["id"], DIFFERENT)
    assert resp.status_code == 202, resp.text
    cid = resp.json()["id"]
    _build(client)
    assert client.get(f"/v1/comparisons/{cid}").json()["state"] == "ready"
    answers = ["A", "none", "B", "none", "A", "none"]
    for i, choice in enumerate(answers):
        r = client.post(f"/v1/comparisons/{cid}/trials/{i}/answer", json={"choice": choice})
        assert r.status_code == 200, r.text
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert [t["answer"] for t in view["trials"]] == answers
    assert view["answered"] == 6 and view["state"] == "finished"
    # every trial answered (ties too) finishes the session
    again = client.post(f"/v1/comparisons/{cid}/trials/1/answer", json={"choice": "A"})
    _problem(again, 409, "finished")

    result = client.get(f"/v1/comparisons/{cid}/results").json()
    assert result["answered"] == 6 and result["no_preference"] == 3
    assert [v["summary"] for v in result["variants"]] == ["5.1", "5.1, lfe_gain 4 dB"]
    assert "sign test" in result["ties"]
    rows = result["trials"]
    assert [r["no_preference"] for r in rows] == [a == "none" for a in answers]
    assert all(r["preferred_variant"] is None for r in rows if r["no_preference"])
    chosen = [r["variants"][r["answer"]] for r in rows if not r["no_preference"]]
    for v in result["variants"]:
        assert v["no_preference"] == 3  # two variants: each heard in every trial
        assert v["answered_trials"] == 3
        assert v["preferred"] == chosen.count(v["index"])
        assert v["preferred_share"] == pytest.approx(v["preferred"] / 3, abs=1e-4)
    k = result["variants"][0]["preferred"]
    assert result["preference_p_value"] == pytest.approx(stats.binomtest(k, 3, 0.5).pvalue)

    text = client.get(f"/v1/comparisons/{cid}/results?format=csv").text
    csv_rows = list(csv.DictReader(io.StringIO(text)))
    assert [r["answer"] for r in csv_rows] == answers
    assert all(r["chosen_variant"] == "" for r in csv_rows if r["answer"] == "none")


def test_abx_stays_a_forced_choice(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path)
    resp = _create(client, stem["id"], DIFFERENT, mode="abx")
    assert resp.status_code == 202, resp.text
    cid = resp.json()["id"]
    _build(client)
    problem = _problem(
        client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "none"}),
        422,
        "'none'",
        "forced choice",
    )
    assert problem["errors"][0]["field"] == "choice"
    assert client.get(f"/v1/comparisons/{cid}").json()["answered"] == 0
    ok = client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "B"})
    assert ok.status_code == 200
    assert client.get("/v1/options").json()["comparison"]["answers"] == {
        "ab": ["A", "B", "none"],
        "abx": ["A", "B"],
    }


@pytest.mark.parametrize(
    ("variants", "first", "second"),
    [
        # the same request twice
        ([{"layout": "5.1"}, {"layout": "5.1"}], 1, 2),
        # the block size changes speed, not the sound
        ([{"layout": "5.1"}, {"layout": "5.1", "block_size": 4096}], 1, 2),
        # the room mode does nothing without a room; the default HRTF set by its name
        ([{"layout": "5.1"}, {"layout": "5.1", "room_mode": "exact", "hrtf": "MIT-KEMAR"}], 1, 2),
        # without a room the seed draws nothing (comparison renders are float, undithered)
        ([{"layout": "5.1"}, {"layout": "5.1", "seed": 7}], 1, 2),
        # the stereo fold-down uses no HRTF set, room or LFE
        (
            [
                {"layout": "5.1", "fold": "stereo"},
                {"layout": "5.1", "fold": "stereo", "room": "small", "hrtf": "rigid-sphere"},
                {"layout": "5.1", "fold": "stereo", "lfe_gain": 0, "eq": "none"},
            ],
            1,
            2,
        ),
        # the suggested layout left out is the layout named
        ([{"room": "small"}, {"layout": "5.1"}, {"layout": "5.1", "room": "small"}], 1, 3),
    ],
)
def test_variants_that_render_identically_are_refused_naming_both(
    client, tmp_path, variants, first, second
):
    stem = _stem(client, tmp_path)
    assert stem["suggested_layout"] == "5.1"
    problem = _problem(
        _create(client, stem["id"], variants),
        422,
        f"variant {first} ('variant {first}') and variant {second} ('variant {second}')",
        "would render identically",
    )
    fields = [e["field"] for e in problem["errors"]]
    assert fields == [f"variants.{first - 1}", f"variants.{second - 1}"]
    assert client.app.state.queue.counts().get("queued", 0) == 0
    assert client.get("/v1/comparisons").json() == []


def test_what_does_change_the_sound_is_let_through(client, tmp_path):
    stem = _stem(client, tmp_path)
    for variants in (
        [{"layout": "5.1", "room": "small"}, {"layout": "5.1", "room": "small", "seed": 7}],
        [{"layout": "5.1"}, {"layout": "5.1", "fold": "stereo"}],
        [{"layout": "5.1", "fold": "stereo"}, {"layout": "5.1", "fold": "stereo", "solo": "C"}],
    ):
        resp = _create(client, stem["id"], variants)
        assert resp.status_code == 202, (variants, resp.text)


def test_lfe_options_count_only_where_the_layout_has_an_lfe(client, tmp_path):
    stereo = _stem(client, tmp_path, channels=2, name="duet.wav")
    same = [{"layout": "2.0"}, {"layout": "2.0", "lfe_gain": 0}]
    _problem(_create(client, stereo["id"], same), 422, "would render identically")
    surround = _stem(client, tmp_path, name="deck.wav")
    differ = [{"layout": "5.1"}, {"layout": "5.1", "lfe_gain": 0}]
    assert _create(client, surround["id"], differ).status_code == 202


def test_preference_counts_keep_ties_apart():
    presented = [[0, 1], [1, 2], [0, 2], [0, 1]]
    chosen = [0, None, 2, None]
    ties = [False, True, False, False]  # the last: not answered
    counts = preference_counts(3, presented, chosen, ties)
    assert [c["answered_trials"] for c in counts] == [2, 1, 1]
    assert [c["preferred"] for c in counts] == [1, 0, 1]
    assert [c["no_preference"] for c in counts] == [0, 1, 1]
    assert [c["preferred_share"] for c in counts] == [0.5, 0.0, 1.0]


def test_an_unknown_choice_is_still_refused(client, tmp_path):
    stem = _stem(client, tmp_path)
    cid = _create(client, stem["id"], DIFFERENT).json()["id"]
    r = client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "neither"})
    assert r.status_code == 422


def test_list_items_carry_the_stem_and_the_variants_in_words(client, tmp_path):
    stem = _stem(client, tmp_path)
    variants = [
        {"layout": "5.1", "name": "plain"},
        {"layout": "5.1", "lfe_gain": 4, "room": "small", "name": "hot"},
    ]
    cid = _create(client, stem["id"], variants).json()["id"]
    other = _stem(client, tmp_path, name="second-take.wav")
    _create(client, other["id"], DIFFERENT)
    listed = client.get("/v1/comparisons").json()
    assert len(listed) == 2
    item = next(c for c in listed if c["id"] == cid)
    assert item["stem_id"] == stem["id"] and item["stem_name"] == "harbour-walk.wav"
    assert [v["name"] for v in item["variants"]] == ["plain", "hot"]
    assert [v["summary"] for v in item["variants"]] == ["5.1", "5.1, room small, lfe_gain 4 dB"]
    assert item["variants"][1]["settings"] == {"layout": "5.1", "room": "small", "lfe_gain": 4.0}
    assert {c["stem_id"] for c in listed} == {stem["id"], other["id"]}
    # the single view says the same
    assert client.get(f"/v1/comparisons/{cid}").json()["variants"] == item["variants"]


def test_variant_summaries_of_objects_and_uploads():
    from earfold.service.comparisons.summary import variant_summary

    room = {"name": "boat-shed", "dimensions": [8.2, 4.6, 3.6], "rt60": 0.4}
    layout = {"name": "trio", "speakers": [{"label": x} for x in "LRC"]}
    text = variant_summary(
        {"layout": layout, "room": room, "headphone_eq": "a" * 32, "hrtf": "b" * 32}
    )
    assert text == (
        "custom layout 'trio' (3 speakers), HRTF set (uploaded), "
        "room 'boat-shed' 8.2 x 4.6 x 3.6 m, headphone EQ (uploaded)"
    )
    bands = [{"type": "peaking", "frequency": 1000.0}]
    assert (
        variant_summary({"headphone_eq": bands, "eq": "none"}) == "eq none, headphone EQ (1 band)"
    )
