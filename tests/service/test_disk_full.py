"""A full disk is answered 507 with a problem body, and leaves nothing behind.

The disk is made full by simulation: a file write that fails with ``ENOSPC`` part way,
and an SQLite job store held at its current size with ``PRAGMA max_page_count``, which
makes SQLite answer "database or disk is full" (SQLITE_FULL) exactly as on a full disk
(https://www.sqlite.org/pragma.html#pragma_max_page_count). The job store being down
(503) must likewise create nothing.
"""

from __future__ import annotations

import errno
import sqlite3

import pytest
from starlette.testclient import TestClient

from earfold.service import uploads
from earfold.service.jobs import QueueUnavailable
from earfold.service.jobs.worker import Worker
from earfold.service.problems import out_of_space
from earfold.service.routes import comparisons
from tests.service.stem_factory import FS, files_field, write_stem


def _stem(client, tmp_path) -> dict:
    path = write_stem(tmp_path / "mix.wav", FS // 2, 6, seed=5)
    resp = client.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 201, resp.text
    return resp.json()


def _disk_full(resp) -> dict:
    assert resp.status_code == 507, resp.text
    assert resp.headers["content-type"] == "application/problem+json"
    body = resp.json()
    assert body["status"] == 507 and body["title"] == "Disk full"
    assert "disk is full" in body["detail"] and "nothing was stored" in body["detail"]
    return body


def _leftovers(client, kind: str) -> list[str]:
    root = client.app.state.storage.root
    return sorted(p.name for p in (root / kind).iterdir()) + sorted(
        str(p.relative_to(root)) for p in (root / "tmp").rglob("*")
    )


def _fill_job_store(client) -> None:
    """Make the SQLite job store's disk full for new jobs: it may not grow past its
    current size, and a trigger makes every new job need a megabyte more, so SQLite
    itself fails the job's transaction with SQLITE_FULL, as on a full disk."""
    db = client.app.state.queue._db
    db.execute("CREATE TABLE ballast (x BLOB)")
    db.execute(
        "CREATE TRIGGER ballast_per_job BEFORE INSERT ON jobs "
        "BEGIN INSERT INTO ballast VALUES (zeroblob(1000000)); END"
    )
    pages = db.execute("PRAGMA page_count").fetchone()[0]
    db.execute(f"PRAGMA max_page_count = {pages}")


class _FillingFile:
    """A file that takes ``room`` bytes and then fails with ENOSPC, as on a full disk."""

    def __init__(self, real, room: int) -> None:
        self.real, self.room = real, room

    def write(self, data: bytes) -> int:
        if len(data) > self.room:
            raise OSError(errno.ENOSPC, "No space left on device")
        self.room -= len(data)
        return self.real.write(data)

    def __getattr__(self, name):
        return getattr(self.real, name)


def test_chunked_upload_on_a_full_disk_is_507_and_leaves_no_part_file(
    client, tmp_path, monkeypatch
):
    path = write_stem(tmp_path / "mix.wav", FS, 6, seed=1)
    data = path.read_bytes()
    real_open = open
    monkeypatch.setattr(
        uploads, "open", lambda p, mode: _FillingFile(real_open(p, mode), 100_000), raising=False
    )
    boundary = b"xyz"
    body = (
        b'--xyz\r\nContent-Disposition: form-data; name="file"; filename="mix.wav"\r\n'
        b"Content-Type: audio/wav\r\n\r\n" + data + b"\r\n--xyz--\r\n"
    )
    # an iterator: sent chunked, without Content-Length, so no space check beforehand
    resp = client.post(
        "/v1/stems",
        content=iter([body[i : i + 65536] for i in range(0, len(body), 65536)]),
        headers={"content-type": f"multipart/form-data; boundary={boundary.decode()}"},
    )
    _disk_full(resp)
    assert _leftovers(client, "stems") == []


def test_render_submit_when_sqlite_is_full_is_507_and_no_job_is_recorded(client, tmp_path):
    stem = _stem(client, tmp_path)
    _fill_job_store(client)
    resp = client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "5.1"})
    _disk_full(resp)
    assert client.app.state.queue.list() == []
    assert client.get("/v1/renders").json() == []


def test_comparison_when_sqlite_is_full_is_507_and_no_session_is_left(client, tmp_path):
    stem = _stem(client, tmp_path)
    _fill_job_store(client)
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "5.1"}, {"layout": "5.1", "lfe_gain": 4}],
    }
    _disk_full(client.post("/v1/comparisons", json=body))
    assert _leftovers(client, "comparisons") == []
    assert client.get("/v1/comparisons").json() == []


def test_comparison_record_write_on_a_full_disk_is_507_and_leaves_no_part_file(
    client, tmp_path, monkeypatch
):
    stem = _stem(client, tmp_path)

    def full_write(path, data, **kw):
        # what a write cut short leaves: a temporary file beside the target
        (path.parent / f".{path.name}.0badf00d.part").write_bytes(b"{")
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(comparisons, "write_json_atomic", full_write)
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "5.1"}, {"layout": "5.1", "lfe_gain": 4}],
    }
    _disk_full(client.post("/v1/comparisons", json=body))
    assert _leftovers(client, "comparisons") == []
    assert client.app.state.queue.list() == []


def test_comparison_while_the_job_store_is_down_creates_nothing(client, tmp_path, monkeypatch):
    stem = _stem(client, tmp_path)

    def down(*args, **kwargs):
        raise QueueUnavailable("the job store at redis://127.0.0.1:1/0 does not answer")

    monkeypatch.setattr(client.app.state.queue, "submit", down)
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "5.1"}, {"layout": "5.1", "lfe_gain": 4}],
    }
    resp = client.post("/v1/comparisons", json=body)
    assert resp.status_code == 503, resp.text
    assert "nothing was changed" in resp.json()["detail"]
    monkeypatch.undo()
    # true: no record, not now and not later as a failed comparison
    assert _leftovers(client, "comparisons") == []
    assert client.get("/v1/comparisons").json() == []


def test_other_write_errors_stay_internal_errors(client, tmp_path, monkeypatch):
    """Only a full disk is 507; a permission error is a fault of the server (500)."""
    path = write_stem(tmp_path / "mix.wav", FS // 4, 2, seed=2)

    def denied(p, mode):
        raise PermissionError(errno.EACCES, "Permission denied")

    monkeypatch.setattr(uploads, "open", denied, raising=False)
    client_500 = TestClient(client.app, raise_server_exceptions=False)
    resp = client_500.post("/v1/stems", files=files_field([path]))
    assert resp.status_code == 500, resp.text
    assert "internal error" in resp.json()["detail"]
    assert _leftovers(client, "stems") == []


@pytest.mark.parametrize(
    "exc, full",
    [
        (OSError(errno.ENOSPC, "No space left on device"), True),
        (OSError(errno.EDQUOT, "Disk quota exceeded"), True),
        (sqlite3.OperationalError("database or disk is full"), True),
        (OSError(errno.EACCES, "Permission denied"), False),
        (sqlite3.OperationalError("database is locked"), False),
    ],
)
def test_out_of_space_recognises_a_full_disk_and_nothing_else(exc, full):
    assert out_of_space(exc) is full
    try:
        try:
            raise exc
        except Exception as inner:
            raise RuntimeError("wrapped") from inner
    except RuntimeError as outer:
        assert out_of_space(outer) is full


def test_hrtf_upload_on_a_full_disk_is_507_and_leaves_nothing(client, monkeypatch):
    real_open = open
    monkeypatch.setattr(
        uploads, "open", lambda p, mode: _FillingFile(real_open(p, mode), 1000), raising=False
    )
    body = (
        b'--xyz\r\nContent-Disposition: form-data; name="file"; filename="set.sofa"\r\n\r\n'
        + b"\x89HDF" * 10_000
        + b"\r\n--xyz--\r\n"
    )
    resp = client.post(
        "/v1/hrtf-sets",
        content=iter([body[:20_000], body[20_000:]]),
        headers={"content-type": "multipart/form-data; boundary=xyz"},
    )
    _disk_full(resp)
    assert _leftovers(client, "hrtf") == []


def test_saving_an_answer_on_a_full_disk_is_507_and_keeps_the_session(
    client, tmp_path, monkeypatch
):
    from earfold.service.comparisons import session as sessions

    stem = _stem(client, tmp_path)
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "5.1"}, {"layout": "5.1", "lfe_gain": 4}],
    }
    created = client.post("/v1/comparisons", json=body)
    assert created.status_code == 202, created.text
    cid = created.json()["id"]
    Worker(client.app.state.settings, queue=client.app.state.queue, name="test").run(once=True)
    assert client.get(f"/v1/comparisons/{cid}").json()["state"] == "ready"
    before = client.get(f"/v1/comparisons/{cid}").json()

    def full_write(path, data, **kw):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(sessions, "write_json_atomic", full_write)
    _disk_full(client.post(f"/v1/comparisons/{cid}/finish"))
    _disk_full(client.post(f"/v1/comparisons/{cid}/trials/0/answer", json={"choice": "A"}))
    monkeypatch.undo()
    assert client.get(f"/v1/comparisons/{cid}").json() == before


def test_redis_with_a_full_disk_is_507_and_leaves_nothing(
    make_client, redis_queue_url, tmp_path, monkeypatch
):
    """Redis refuses every write once its disk is full ("MISCONF Errors writing to the
    AOF file: No space left on device"); simulated at the script call."""
    import redis

    client = make_client(queue_url=redis_queue_url)
    stem = _stem(client, tmp_path)

    def refused(*args, **kwargs):
        raise redis.exceptions.ResponseError(
            "MISCONF Errors writing to the AOF file: No space left on device"
        )

    monkeypatch.setitem(client.app.state.queue._scripts, "submit", refused)
    _disk_full(client.post("/v1/renders", json={"stem_id": stem["id"], "layout": "5.1"}))
    body = {
        "stem_id": stem["id"],
        "variants": [{"layout": "5.1"}, {"layout": "5.1", "lfe_gain": 4}],
    }
    _disk_full(client.post("/v1/comparisons", json=body))
    assert _leftovers(client, "comparisons") == []
    monkeypatch.undo()
    assert client.app.state.queue.list() == []
