"""Bodies meet the token check and the JSON size limit before a byte of them is read.

A body without a token once grew the server by 1.1 GB (160 MB of JSON read whole before
the 401). These tests count the body bytes the app pulls (ASGI) and, on a real server on
a loopback port, measure its resident memory while a large body is sent without a token.
"""

from __future__ import annotations

import asyncio
import json
import socket
import time

import pytest

from earfold.service.app import create_app
from earfold.service.settings import DEFAULT_MAX_JSON_BYTES, ServiceSettings
from earfold.service.tools.local_server import LocalServer, status_kib

TOKEN = "gate-test-token-0123456789"
MB = 1024 * 1024


def _call(app, method: str, path: str, headers: dict[str, str], chunks: int, chunk: bytes):
    """Run one request through ``app`` with a body of ``chunks`` x ``chunk`` made lazily;
    returns (status, body JSON, body bytes the app pulled)."""
    pulled = 0
    sent = 0
    out: dict = {"body": b""}

    async def receive():
        nonlocal pulled, sent
        if sent >= chunks:
            await asyncio.sleep(3600)  # nothing more: a client waiting for its answer
        sent += 1
        pulled += len(chunk)
        return {"type": "http.request", "body": chunk, "more_body": sent < chunks}

    async def send(message):
        if message["type"] == "http.response.start":
            out["status"] = message["status"]
            out["headers"] = {k.decode(): v.decode() for k, v in message["headers"]}
        elif message["type"] == "http.response.body":
            out["body"] += message.get("body", b"")

    scope = {
        "type": "http",
        "asgi": {"version": "3.0"},
        "http_version": "1.1",
        "method": method,
        "scheme": "http",
        "path": path,
        "raw_path": path.encode(),
        "root_path": "",
        "query_string": b"",
        "headers": [(k.lower().encode(), v.encode()) for k, v in headers.items()],
        "client": ("127.0.0.1", 50000),
        "server": ("127.0.0.1", 8000),
        "state": {},
    }

    async def run():
        await asyncio.wait_for(app(scope, receive, send), 10)

    asyncio.run(run())
    return out["status"], json.loads(out["body"]), out["headers"], pulled


@pytest.fixture
def guarded_app(tmp_path):
    app = create_app(ServiceSettings(data_dir=tmp_path / "data", tokens=(TOKEN,), min_free_bytes=0))
    yield app
    app.state.queue.close()


@pytest.mark.parametrize("path", ["/v1/renders", "/v1/comparisons", "/v1/stems"])
@pytest.mark.parametrize("chunked", [False, True])
def test_large_body_without_token_is_refused_before_any_of_it_is_read(guarded_app, path, chunked):
    headers = {"content-type": "application/json"}
    if path == "/v1/stems":
        headers["content-type"] = "multipart/form-data; boundary=xyz"
    if chunked:
        headers["transfer-encoding"] = "chunked"
    else:
        headers["content-length"] = str(160 * MB)
    status, body, resp_headers, pulled = _call(guarded_app, "POST", path, headers, 160, b" " * MB)
    assert status == 401, body
    assert body["status"] == 401 and "token" in body["detail"]
    assert resp_headers["www-authenticate"] == "Bearer"
    assert pulled == 0, f"{pulled} body bytes were read before the token was checked"


def test_wrong_token_is_refused_before_the_body_is_read(guarded_app):
    headers = {"content-type": "application/json", "authorization": "Bearer nope"}
    headers["transfer-encoding"] = "chunked"
    status, body, _, pulled = _call(guarded_app, "POST", "/v1/renders", headers, 50, b" " * MB)
    assert status == 401 and "not valid" in body["detail"]
    assert pulled == 0


def test_json_body_over_the_limit_by_content_length_is_413_unread(guarded_app):
    headers = {
        "content-type": "application/json",
        "authorization": f"Bearer {TOKEN}",
        "content-length": str(160 * MB),
    }
    status, body, _, pulled = _call(guarded_app, "POST", "/v1/renders", headers, 160, b" " * MB)
    assert status == 413, body
    assert body["type"] == "about:blank" and str(DEFAULT_MAX_JSON_BYTES) in body["detail"]
    assert pulled == 0


def test_chunked_json_body_over_the_limit_is_cut_off_at_the_limit(guarded_app):
    headers = {
        "content-type": "application/json",
        "authorization": f"Bearer {TOKEN}",
        "transfer-encoding": "chunked",
    }
    status, body, _, pulled = _call(guarded_app, "POST", "/v1/comparisons", headers, 160, b" " * MB)
    assert status == 413, body
    assert "at most" in body["detail"]
    # read at most one chunk past the limit, not the 160 MB
    assert pulled <= DEFAULT_MAX_JSON_BYTES + MB


def test_json_limit_is_a_setting_and_bodies_under_it_pass(make_client):
    client = make_client(max_json_bytes=1000)
    big = client.post("/v1/renders", content=b"{" + b" " * 2000 + b"}")
    assert big.status_code == 413
    assert big.headers["content-type"] == "application/problem+json"
    assert "at most 1000 bytes" in big.json()["detail"]
    # A body under the limit reaches validation as before (chunked: no Content-Length).
    small = client.post(
        "/v1/renders",
        content=iter([b'{"stem_id": ', b'"nope"}']),
        headers={"content-type": "application/json"},
    )
    assert small.status_code == 422, small.text
    chunked_big = client.post(
        "/v1/renders",
        content=iter([b"{", b" " * 600, b" " * 600, b"}"]),
        headers={"content-type": "application/json"},
    )
    assert chunked_big.status_code == 413


def test_uploads_keep_their_own_limit_not_the_json_one(make_client, tmp_path):
    client = make_client(max_json_bytes=1000)
    body = (
        b'--xyz\r\nContent-Disposition: form-data; name="file"; filename="x.wav"\r\n\r\n'
        + b"\0" * 5000
        + b"\r\n--xyz--\r\n"
    )
    resp = client.post(
        "/v1/stems", content=body, headers={"content-type": "multipart/form-data; boundary=xyz"}
    )
    # read in full and refused as audio, not as an oversized JSON body
    assert resp.status_code == 415, resp.text


def _rss_mb(pid: int) -> float:
    return status_kib(pid, "VmRSS") / 1024


def test_server_memory_does_not_grow_by_a_large_body_sent_without_token(tmp_path):
    """Real server, real socket: 160 MB of chunked JSON, no token (bounded: one request,
    at most 20 s)."""
    tokens = tmp_path / "tokens"
    tokens.write_text(TOKEN + "\n")
    with LocalServer(1, ["--tokens-file", str(tokens)]) as server:
        before = _rss_mb(server.pid)
        with socket.create_connection(("127.0.0.1", server.port), timeout=20) as sock:
            sock.sendall(
                b"POST /v1/renders HTTP/1.1\r\nHost: 127.0.0.1\r\n"
                b"Content-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\n"
            )
            started = time.monotonic()
            chunk = b"100000\r\n" + b" " * MB + b"\r\n"
            sent_mb = 0
            try:
                for _ in range(160):
                    sock.sendall(chunk)
                    sent_mb += 1
                sock.sendall(b"0\r\n\r\n")
            except OSError:
                pass  # the server answered and closed: the rest is never read
            answer = b""
            try:
                while b"\r\n\r\n" not in answer:
                    data = sock.recv(65536)
                    if not data:
                        break
                    answer += data
            except OSError:
                pass
            elapsed = time.monotonic() - started
        after = _rss_mb(server.pid)
    assert after - before < 32, (
        f"server RSS grew {after - before:.0f} MB ({before:.0f} -> {after:.0f}) for a "
        f"body of which {sent_mb} MB were sent"
    )
    assert answer.startswith(b"HTTP/1.1 401"), answer[:200]
    assert elapsed < 10, f"the 401 took {elapsed:.1f} s"
