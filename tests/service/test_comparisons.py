"""``/v1/comparisons``: requests, states, blindness, answers, resuming, reveal and export.

Builds run through the real queue: the test's worker claims the comparison job and runs
the build child, as ``earfold serve`` does.

References
----------
* ABX scoring: one-sided binomial test, p = 0.5 (checked against scipy.stats.binomtest).
* Blindness: the issue's criteria (same headers but for content, same lengths, URLs
  that reveal nothing) and common practice for capability URLs (random tokens).
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pytest
from scipy import stats

from earfold.renderer.io import write_audio
from earfold.service.jobs.worker import Worker
from tests.service.stem_factory import FS, files_field, noise, write_stem

FAST = {"tick_s": 0.05, "poll_s": 0.02, "lease_s": 5.0}


def _stem(client, tmp_path, seconds=4.0, channels=6, headers=None, silent=False) -> dict:
    path = tmp_path / "rehearsal.wav"
    x = (
        np.zeros((int(FS * seconds), channels), np.float32)
        if silent
        else noise(int(FS * seconds), channels, seed=7)
    )
    write_audio(path, x, FS)
    resp = client.post("/v1/stems", files=files_field([path]), headers=headers or {})
    assert resp.status_code == 201, resp.text
    return resp.json()


def _problem(resp, status: int, pattern: str) -> dict:
    assert resp.status_code == status, resp.text
    assert resp.headers["content-type"].startswith("application/problem+json")
    assert pattern in resp.json()["detail"], resp.json()
    return resp.json()


def _build(client) -> None:
    Worker(client.app.state.settings, queue=client.app.state.queue, name="test-worker").run(
        once=True
    )


def _body(stem: str, **extra) -> dict:
    body = {
        "stem_id": stem,
        "variants": [
            {"layout": "5.1", "name": "near"},
            {"layout": "5.1", "room": "small", "name": "small room"},
        ],
        "trials": 4,
        "excerpt": {"start": 0.5, "length": 2.0},
    }
    body.update(extra)
    return body


@pytest.mark.parametrize(
    ("change", "status", "pattern"),
    [
        ({"mode": "abx", "variants": [{"layout": "5.1"}] * 3}, 422, "abx compares exactly 2"),
        ({"variants": [{"layout": "5.1"}]}, 422, "variants"),
        ({"variants": [{"layout": "5.1"}] * 9}, 422, "variants"),
        ({"trials": 0}, 422, "trials"),
        ({"trials": 101}, 422, "trials"),
        ({"mode": "mushra"}, 422, "mode"),
        ({"excerpt": {"start": 9.0, "length": 2.0}}, 422, "the stem is only 4.000 s long"),
        ({"excerpt": {"start": 3.0, "length": 2.0}}, 422, "runs past the end of the stem"),
        ({"excerpt": {"length": 0.2}}, 422, "excerpt.length"),
        ({"excerpt": {"length": 600}}, 422, "excerpt.length"),
        (
            {"variants": [{"layout": "5.1"}, {"layout": "7.1.4"}]},
            422,
            "variant 2: the stem has 6 channel(s) but layout '7.1.4' has 12",
        ),
        (
            {"variants": [{"layout": "5.1"}, {"layout": "5.1", "room": "cathedral"}]},
            422,
            "variant 2: unknown room 'cathedral'",
        ),
        (
            {"variants": [{"layout": "5.1"}, {"layout": "5.1", "loudness": -14}]},
            422,
            "variants.1.loudness",
        ),
        ({"stem_id": "0" * 32}, 404, "no stem"),
    ],
)
def test_bad_requests_are_refused_before_anything_is_queued(
    client, tmp_path, change, status, pattern
):
    stem = _stem(client, tmp_path)
    _problem(client.post("/v1/comparisons", json=_body(stem["id"], **change)), status, pattern)
    assert client.app.state.queue.counts().get("queued", 0) == 0
    assert client.get("/v1/comparisons").json() == []


def test_an_ab_session_from_start_to_reveal(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path)
    resp = client.post("/v1/comparisons", json=_body(stem["id"]))
    assert resp.status_code == 202, resp.text
    view = resp.json()
    cid = view["id"]
    assert resp.headers["location"] == f"/v1/comparisons/{cid}"
    assert view["state"] == "preparing" and view["progress"] == 0.0
    assert view["links"]["page"] == f"/compare/{cid}"
    assert view["trials"][0]["audio"] is None  # nothing to hear yet
    _problem(
        client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "A"}),
        409,
        "still being prepared",
    )
    _problem(client.get(f"/v1/comparisons/{cid}/results"), 409, "results open once")
    # The build job is no render: it does not show among them.
    assert client.get("/v1/renders").json() == []
    assert client.get(f"/v1/renders/{cid}").status_code == 404

    _build(client)
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "ready", view
    assert view["progress"] == 1.0 and view["next_trial"] == 0
    assert view["excerpt"] == {"start": 0.5, "length": 2.0, "automatic": False}
    assert isinstance(view["level_lufs"], float)
    assert client.get("/compare/" + cid).status_code == 200

    # Answers: trial 0 A, trial 1 B; the same answer again is harmless, a change is not.
    assert (
        client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "A"}).json()[
            "next_trial"
        ]
        == 1
    )
    assert (
        client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "A"}).status_code
        == 200
    )
    _problem(
        client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "B"}),
        409,
        "already answered",
    )
    answered = client.post(f"/v1/comparisons/{cid}/trials/1/answer", json={"choice": "B"}).json()
    assert "correct" not in json.dumps(answered)  # nothing judged before the reveal
    _problem(
        client.post(f"/v1/comparisons/{cid}/trials/9/answer", json={"choice": "A"}),
        404,
        "no trial 9",
    )
    assert (
        client.post(f"/v1/comparisons/{cid}/trials/2/answer", json={"choice": "X"}).status_code
        == 422
    )

    # Resuming: a fresh look at the session carries on where the listener stopped.
    resumed = client.get(f"/v1/comparisons/{cid}").json()
    assert resumed["answered"] == 2 and resumed["next_trial"] == 2
    assert [t["answer"] for t in resumed["trials"]] == ["A", "B", None, None]

    finished = client.post(f"/v1/comparisons/{cid}/finish").json()
    assert finished["state"] == "finished" and finished["links"]["results"]
    _problem(
        client.post(f"/v1/comparisons/{cid}/trials/2/answer", json={"choice": "A"}), 409, "finished"
    )

    result = client.get(f"/v1/comparisons/{cid}/results").json()
    meta = client.app.state.storage.read_meta("comparisons", cid)
    assert result["answered"] == 2 and result["trial_count"] == 4
    for row, stored in zip(result["trials"], meta["trials"]):
        assert row["variants"] == stored["labels"]  # the reveal is the stored mapping
    chosen = [result["trials"][0]["variants"]["A"], result["trials"][1]["variants"]["B"]]
    assert [r["preferred_variant"] for r in result["trials"][:2]] == chosen
    for v in result["variants"]:
        assert v["preferred"] == chosen.count(v["index"])
        assert v["matched_lufs"] == pytest.approx(result["level_lufs"], abs=0.1)
        assert v["gain_db"] == pytest.approx(result["level_lufs"] - v["measured_lufs"], abs=0.01)
    assert [v["name"] for v in result["variants"]] == ["near", "small room"]
    k = result["variants"][0]["preferred"]
    assert result["preference_p_value"] == pytest.approx(stats.binomtest(k, 2, 0.5).pvalue)

    resp = client.get(f"/v1/comparisons/{cid}/results?format=csv")
    assert resp.headers["content-type"].startswith("text/csv")
    rows = list(csv.DictReader(io.StringIO(resp.text)))
    assert len(rows) == 4
    names = ["near", "small room"]
    for row, r in zip(rows, result["trials"]):
        assert row["A"] == names[r["variants"]["A"]] and row["B"] == names[r["variants"]["B"]]
        assert row["answer"] == (r["answer"] or "")

    listed = client.get("/v1/comparisons").json()
    assert [c["id"] for c in listed] == [cid]
    assert client.delete(f"/v1/comparisons/{cid}").status_code == 204
    assert client.get(f"/v1/comparisons/{cid}").status_code == 404


def test_trial_audio_tells_nothing_but_the_sound(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path)
    view = client.post("/v1/comparisons", json=_body(stem["id"], mode="abx", trials=6)).json()
    cid = view["id"]
    _problem(client.get(f"/v1/comparisons/{cid}/audio/{'0' * 32}"), 409, "being prepared")
    _build(client)
    view = client.get(f"/v1/comparisons/{cid}").json()
    meta = client.app.state.storage.read_meta("comparisons", cid)

    # Before the reveal the session's JSON holds no mapping and no per-variant figure.
    text = json.dumps(view)
    for secret in ("gain_db", "measured_lufs", "true_peak", '"X": 0', '"X": 1', 'labels": {'):
        assert secret not in text
    urls, by_variant = [], {0: [], 1: []}
    for trial, stored in zip(view["trials"], meta["trials"]):
        assert trial["labels"] == ["A", "B", "X"]
        for label, url in trial["audio"].items():
            token = url.rsplit("/", 1)[1]
            assert url == f"/v1/comparisons/{cid}/audio/{token}"
            # A random token only: no variant index, name or label in the address.
            assert len(token) == 32 and int(token, 16) >= 0
            # (Regression: the check once looked for "a/" in the whole URL, which a
            # session id ending in the hex digit a or b contains by chance.)
            assert not any(word in token for word in ("near", "room", "variant"))
            assert token != cid
            urls.append(url)
            by_variant[stored["labels"][label]].append(url)
    assert len(set(urls)) == len(urls) == 18  # a fresh token for every label of every trial

    answers = {url: client.get(url) for url in urls}
    first = answers[urls[0]]
    for url, resp in answers.items():
        assert resp.status_code == 200
        assert dict(resp.headers) == dict(first.headers), url  # identical but for content
        assert len(resp.content) == len(first.content)
        assert "etag" not in resp.headers and "last-modified" not in resp.headers
        assert resp.headers["cache-control"] == "no-store"
    # ... and the content really differs between the two variants.
    a, b = answers[by_variant[0][0]].content, answers[by_variant[1][0]].content
    assert a != b
    _problem(client.get(f"/v1/comparisons/{cid}/audio/{'f' * 32}"), 404, "no such trial audio")

    # Answer every trial with the right label: 6 of 6, p = 1/64 (binomial, p = 0.5).
    for i, stored in enumerate(meta["trials"]):
        right = "A" if stored["labels"]["X"] == stored["labels"]["A"] else "B"
        state = client.post(
            f"/v1/comparisons/{cid}/trials/{i}/answer", json={"choice": right}
        ).json()["state"]
    assert state == "finished"  # the last answer finishes the session
    result = client.get(f"/v1/comparisons/{cid}/results").json()
    assert result["abx"]["correct"] == 6 and result["abx"]["answered"] == 6
    assert result["abx"]["p_value"] == pytest.approx(
        stats.binomtest(6, 6, 0.5, alternative="greater").pvalue
    )
    assert all(r["correct"] for r in result["trials"])


def test_a_silent_excerpt_fails_with_a_reason(make_client, tmp_path):
    client = make_client(**FAST)
    stem = _stem(client, tmp_path, silent=True)
    cid = client.post("/v1/comparisons", json=_body(stem["id"])).json()["id"]
    _build(client)
    view = client.get(f"/v1/comparisons/{cid}").json()
    assert view["state"] == "failed"
    assert "silent" in view["message"] and "choose another excerpt" in view["message"]
    _problem(client.post(f"/v1/comparisons/{cid}/finish"), 409, "still being prepared")


def test_sessions_belong_to_their_token(make_client, tmp_path):
    a, b = "a" * 20, "b" * 20
    client = make_client(tokens=(a, b))
    ha, hb = {"Authorization": f"Bearer {a}"}, {"Authorization": f"Bearer {b}"}
    stem = _stem(client, tmp_path, headers=ha)
    resp = client.post("/v1/comparisons", json=_body(stem["id"]), headers=ha)
    assert resp.status_code == 202
    view = resp.json()
    cid = view["id"]
    _problem(client.get(f"/v1/comparisons/{cid}"), 401, "API token")
    token = client.app.state.storage.read_meta("comparisons", cid)["trials"][0]["tokens"]["A"]
    for method, url in [
        ("GET", f"/v1/comparisons/{cid}"),
        ("GET", f"/v1/comparisons/{cid}/audio/{token}"),
        ("POST", f"/v1/comparisons/{cid}/finish"),
        ("GET", f"/v1/comparisons/{cid}/results"),
        ("DELETE", f"/v1/comparisons/{cid}"),
    ]:
        assert client.request(method, url, headers=hb).status_code == 404, (method, url)
    assert client.get("/v1/comparisons", headers=hb).json() == []
    _problem(client.post("/v1/comparisons", json=_body(stem["id"]), headers=hb), 404, "no stem")
    assert client.get(f"/v1/comparisons/{cid}", headers=ha).status_code == 200


def test_an_unknown_or_malformed_id_is_404(client):
    _problem(client.get("/v1/comparisons/nope"), 404, "no comparison")
    _problem(client.get(f"/v1/comparisons/{'a' * 32}"), 404, "no comparison")
    assert client.get("/compare/..%2Fetc").status_code == 404


def test_retention_removes_old_sessions_but_not_one_being_built(make_client, tmp_path):
    from earfold.service.retention import sweep

    client = make_client()
    stem = _stem(client, tmp_path)
    cid = client.post("/v1/comparisons", json=_body(stem["id"])).json()["id"]
    storage, queue = client.app.state.storage, client.app.state.queue
    assert sweep(storage, queue, max_age_s=-1)["comparisons"] == 0  # its build is queued
    queue.cancel(cid)
    assert client.get(f"/v1/comparisons/{cid}").json()["state"] == "failed"
    removed = sweep(storage, queue, max_age_s=-1)
    assert removed["comparisons"] == 1 and removed["renders"] == 0
    assert client.get(f"/v1/comparisons/{cid}").status_code == 404


def test_a_real_server_builds_in_a_forked_warm_worker(tmp_path):
    """``earfold serve`` forks builds from its warmed-up worker (comparisons.forked)."""
    import time

    import httpx

    from earfold.service.tools.local_server import LocalServer

    path = write_stem(tmp_path / "tide.wav", FS * 3, 6)
    with LocalServer(workers=1) as server, httpx.Client(base_url=server.url, timeout=30) as http:
        stem = http.post("/v1/stems", files=files_field([path])).json()
        view = http.post(
            "/v1/comparisons", json=_body(stem["id"], mode="abx", trials=2, excerpt={"length": 2.0})
        ).json()
        deadline = time.monotonic() + 60
        seen = {view["state"]}
        while view["state"] == "preparing" and time.monotonic() < deadline:
            time.sleep(0.05)
            view = http.get(f"/v1/comparisons/{view['id']}").json()
            seen.add(view["state"])
        assert view["state"] == "ready", view
        assert view["excerpt"]["automatic"] and view["excerpt"]["length"] == 2.0
        sizes = {len(http.get(u).content) for t in view["trials"] for u in t["audio"].values()}
        assert len(sizes) == 1
        # Cancelling a build in progress: a second session, deleted at once.
        other = http.post("/v1/comparisons", json=_body(stem["id"])).json()
        assert http.delete(f"/v1/comparisons/{other['id']}").status_code == 204
        assert http.get("/v1/health").json()["status"] == "ok"


def test_the_build_spec_points_an_uploaded_hrtf_set_at_its_stored_file(client, tmp_path):
    from earfold.service.comparisons.build_child import child_spec
    from earfold.service.storage import write_json_atomic

    storage = client.app.state.storage
    stem = _stem(client, tmp_path)
    tmp = storage.new_tmp()
    write_json_atomic(
        tmp / "meta.json", {"id": "c" * 32, "owner": "", "name": "mine.sofa", "stored": "set.sofa"}
    )
    storage.commit(tmp, "hrtf", "c" * 32)
    payload = {
        "comparison_id": "d" * 32,
        "stem_id": stem["id"],
        "excerpt": {"start": None, "length": 2.0},
        "variants": [
            {"options": {"layout": "5.1"}, "hrtf_id": None},
            {"options": {"layout": "5.1", "hrtf": None}, "hrtf_id": "c" * 32},
        ],
    }
    spec = child_spec(storage, payload, "d" * 32)
    assert "hrtf" not in spec["variants"][0]
    assert spec["variants"][1]["hrtf"] == str(storage.path("hrtf", "c" * 32) / "set.sofa")
    assert spec["names"][spec["variants"][1]["hrtf"]] == "mine.sofa"  # for error messages
    assert spec["output"].endswith("prepared.json")


def test_variants_take_every_option_that_shapes_the_sound(client, tmp_path):
    """A variant may set room mode, LFE and equalisation; each reaches its render job's
    options (and the worker's check of them)."""
    from earfold.service.jobs.render_child import build_settings

    stem = _stem(client, tmp_path)
    variants = [
        {"layout": "5.1", "room": "small", "room_mode": "exact", "lfe_gain": 4, "eq": "none"},
        {
            "layout": "5.1",
            "lfe_cutoff": 60,
            "headphone_eq": [{"type": "high_shelf", "frequency": 8000.0}],
        },
    ]
    resp = client.post("/v1/comparisons", json=_body(stem["id"], variants=variants))
    assert resp.status_code == 202, resp.text
    job = client.app.state.queue.get(resp.json()["id"])
    first, second = (build_settings(v["options"]) for v in job.payload["variants"])
    assert first.room_mode == "exact" and first.lfe.gain_db == 4.0 and first.eq == "none"
    assert first.loudness is None and first.true_peak is None
    assert second.lfe.cutoff_hz == 60.0 and second.headphone_eq[0]["type"] == "high_shelf"
