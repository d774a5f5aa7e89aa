"""The listening side of the API: queue position, progress events, listen links, windows.

Event streams never end by themselves (the all-renders one) or end only after a render
finishes, and Starlette's TestClient buffers a whole response before returning it, so
the stream tests talk to a real uvicorn server on a free port, run in a thread.
"""

from __future__ import annotations

import pytest
from stem_factory import FS, files_field, write_stem


def _stem(client, tmp_path, channels=6, frames=FS // 10, name="take.wav") -> dict:
    path = write_stem(tmp_path / name, frames, channels)
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    return resp.json()


def _problem(resp, status: int, pattern: str) -> None:
    assert resp.status_code == status, resp.text
    assert resp.headers["content-type"].startswith("application/problem+json")
    assert pattern in resp.json()["detail"], resp.json()


@pytest.fixture(params=["sqlite", "redis"])
def backend_client(request, make_client):
    if request.param == "redis":
        return make_client(queue_url=request.getfixturevalue("redis_queue_url"))
    return make_client()


def test_queue_position_in_the_render_view(backend_client, tmp_path):
    client = backend_client
    stem = _stem(client, tmp_path)
    body = {"stem_id": stem["id"], "layout": "5.1"}
    first = client.post("/v1/renders", json=body).json()
    second = client.post("/v1/renders", json=body).json()
    assert (first["queue_position"], second["queue_position"]) == (1, 2)
    assert client.get(f"/v1/renders/{second['id']}").json()["queue_position"] == 2
    listed = {r["id"]: r["queue_position"] for r in client.get("/v1/renders").json()}
    assert listed == {first["id"]: 1, second["id"]: 2}
    # The first leaves the line (cancelled): the second is next, the first has no place.
    assert client.delete(f"/v1/renders/{first['id']}").json()["queue_position"] is None
    assert client.get(f"/v1/renders/{second['id']}").json()["queue_position"] == 1
