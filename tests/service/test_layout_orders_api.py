"""``GET /v1/layouts`` and ``earfold layouts`` list each layout's named channel orders,
and a render request takes an order's name as its ``channel_order``."""

from __future__ import annotations

import json

from earfold.service.cli import main


def test_layouts_route_lists_orders(client):
    layouts = {entry["name"]: entry for entry in client.get("/v1/layouts").json()}
    assert layouts["5.1"]["orders"]["film"] == ["L", "C", "R", "Ls", "Rs", "LFE"]
    assert layouts["5.1"]["orders"]["wav"] == [s["label"] for s in layouts["5.1"]["speakers"]]
    assert list(layouts["22.2"]["orders"]) == ["wav"]
    assert layouts["LCRS"]["speakers"][3]["spread"] == [
        {"azimuth": 110.0, "elevation": 0.0},
        {"azimuth": -110.0, "elevation": 0.0},
    ]


def test_layouts_cli_json_and_text_list_orders(capsys):
    assert main(["layouts", "--json"]) == 0
    entries = {e["name"]: e for e in json.loads(capsys.readouterr().out)}
    assert entries["7.1"]["orders"]["film"] == ["L", "C", "R", "Ls", "Rs", "Lrs", "Rrs", "LFE"]
    assert main(["layouts"]) == 0
    out = capsys.readouterr().out
    assert "order film: L,C,R,Ls,Rs,LFE" in out
    assert "--channel-order NAME" in out


def test_render_request_takes_an_order_name(client, tmp_path):
    from stem_factory import FS, files_field, write_stem

    path = write_stem(tmp_path / "take.wav", FS // 10, 6)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    ok = client.post(
        "/v1/renders", json={"stem_id": stem["id"], "layout": "5.1", "channel_order": "film"}
    )
    assert ok.status_code == 202, ok.text
    bad = client.post(
        "/v1/renders", json={"stem_id": stem["id"], "layout": "5.1", "channel_order": "smpte"}
    )
    assert bad.status_code == 422
    assert (
        "unknown channel order 'smpte' for layout '5.1'; its orders are wav, film"
        in (bad.json()["detail"])
    )


def test_cli_render_takes_an_order_name_fold_and_solo(tmp_path):
    import numpy as np

    from earfold.renderer.io import read_audio, write_audio

    rng = np.random.default_rng(4)
    film = (0.05 * rng.standard_normal((4800, 6))).astype(np.float32)  # L C R Ls Rs LFE
    write_audio(tmp_path / "film.wav", film, 48000, subtype="FLOAT")
    out, report = tmp_path / "o.wav", tmp_path / "o.json"
    args = ["render", str(tmp_path / "film.wav"), "-o", str(out), "--layout", "5.1"]
    args += ["--channel-order", "film", "--fold", "stereo", "--solo", "C"]
    args += ["--loudness", "none", "--true-peak", "off", "--subtype", "FLOAT"]
    args += ["--report", str(report)]
    assert main(args) == 0
    data = json.loads(report.read_text())
    assert data["solo"] == {"label": "C", "channel": 1, "lfe": False}
    assert data["channel_order"]["source"] == "channel order 'film'"
    y, _ = read_audio(out)
    # The centre alone, folded: 0.7071 to both sides (ITU-R BS.775).
    np.testing.assert_allclose(y[:, 0], 0.7071 * film[:, 1], atol=1e-6)
    np.testing.assert_allclose(y[:, 1], 0.7071 * film[:, 1], atol=1e-6)


def test_http_render_with_fold_stereo_and_solo(client, tmp_path):
    from stem_factory import FS, files_field, write_stem

    from earfold.service.jobs.worker import Worker

    path = write_stem(tmp_path / "take.wav", FS // 2, 6)
    stem = client.post("/v1/stems", files=files_field([path])).json()
    body = {"stem_id": stem["id"], "layout": "5.1", "fold": "stereo", "solo": "Ls"}
    job = client.post("/v1/renders", json=body)
    assert job.status_code == 202, job.text
    Worker(client.app.state.settings, queue=client.app.state.queue, name="w").run(once=True)
    done = client.get(f"/v1/renders/{job.json()['id']}").json()
    assert done["state"] == "done", done
    report = client.get(done["links"]["report"]).json()
    assert report["fold"]["mode"] == "stereo"
    assert report["solo"] == {"label": "Ls", "channel": 4, "lfe": False}
    assert report["hrtf"] is None
    # The service's default HRTF set is not reported as left out; the solo's level is.
    assert len(report["notes"]) == 1 and report["notes"][0].startswith("solo 'Ls': the loudness")
    bad = client.post("/v1/renders", json={**body, "fold": "mono"})
    assert bad.status_code == 422
