"""``earfold serve`` options: limits reach the settings; loopback-only by default; the port
is bound before success is announced, and a port in use is one line and exit status 2."""

from __future__ import annotations

import argparse
import re
import signal
import socket
import subprocess
import sys

import pytest

from earfold.service.serve_cli import (
    PortUnavailable,
    add_serve_parser,
    bind_socket,
    is_loopback,
    settings_from_args,
)


def _parse(*argv: str) -> argparse.Namespace:
    parser = argparse.ArgumentParser(prog="earfold")
    add_serve_parser(parser.add_subparsers(dest="command"))
    return parser.parse_args(["serve", *argv])


def test_limit_options_reach_the_settings(tmp_path, monkeypatch):
    monkeypatch.delenv("EARFOLD_TOKENS", raising=False)
    s = settings_from_args(
        _parse(
            "--data-dir",
            str(tmp_path),
            "--max-upload-gb",
            "2",
            "--max-channels",
            "24",
            "--max-duration-hours",
            "0.5",
            "--max-hrtf-mb",
            "64",
            "--max-queued",
            "7",
            "--min-free-mb",
            "10",
            "--retention-hours",
            "2",
            "--max-json-mb",
            "0.5",
        )
    )
    assert (s.max_upload_bytes, s.max_channels, s.max_duration_s) == (2 * 10**9, 24, 1800.0)
    assert (s.max_hrtf_bytes, s.max_queued, s.min_free_bytes) == (64 * 2**20, 7, 10 * 2**20)
    assert s.retention_s == 7200.0
    assert s.max_json_bytes == 2**19


def test_limits_must_be_positive(capsys):
    with pytest.raises(SystemExit):
        _parse("--max-channels", "0")
    assert "must be > 0" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("host", "loopback"),
    [
        ("127.0.0.1", True),
        ("localhost", True),
        ("::1", True),
        ("0.0.0.0", False),
        ("192.168.1.20", False),
    ],
)
def test_loopback_addresses(host, loopback):
    assert is_loopback(host) is loopback


def _serve(*args: str, data_dir) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "earfold.service.cli", "serve", "--workers", "0"]
        + ["--data-dir", str(data_dir), *args],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )


def test_port_in_use_is_one_line_and_exit_2(tmp_path):
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        proc = _serve("--port", str(port), data_dir=tmp_path / "data")
        try:
            _, err = proc.communicate(timeout=60)
        finally:
            proc.kill()
    assert proc.returncode == 2, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    assert lines[0].startswith("earfold: error:")
    assert f"port {port}" in lines[0] and "in use" in lines[0] and "--port" in lines[0]
    # nothing was started: no data directory, no job store
    assert not (tmp_path / "data").exists()


def test_serve_announces_the_page_and_the_docs_once_it_listens(tmp_path):
    proc = _serve("--port", "0", data_dir=tmp_path / "data")
    try:
        assert proc.stderr is not None
        line = proc.stderr.readline()
        match = re.search(r"http://127\.0\.0\.1:(\d+)/\s", line)
        assert match, line
        base = f"http://127.0.0.1:{match.group(1)}"
        assert f"{base}/docs" in line
        # announced only once it listens: the first request after the line is answered
        with socket.create_connection(("127.0.0.1", int(match.group(1))), timeout=5) as s:
            s.sendall(b"GET /docs HTTP/1.0\r\nHost: 127.0.0.1\r\n\r\n")
            reply = s.recv(64)
        assert reply.startswith(b"HTTP/1.1 200"), reply
    finally:
        proc.send_signal(signal.SIGTERM)
        try:
            proc.wait(20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        if proc.stderr is not None:
            proc.stderr.close()
    # uvicorn ends on SIGTERM by raising it again once it has shut down
    assert proc.returncode in (0, -signal.SIGTERM)


def test_bind_socket_names_the_problem():
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        with pytest.raises(PortUnavailable, match=f"port {port} .* in use.*--port"):
            bind_socket("127.0.0.1", port)
    with pytest.raises(PortUnavailable, match="cannot listen on 192.0.2.1"):
        bind_socket("192.0.2.1", 0)  # TEST-NET-1 (RFC 5737): never this machine's address


def test_ctrl_c_stops_the_server_with_a_line_of_its_own(tmp_path):
    # Ctrl-C ended `serve` with the render's "no partial output was kept".
    proc = _serve("--port", "0", data_dir=tmp_path / "data")
    try:
        assert proc.stderr is not None
        assert "earfold serving" in proc.stderr.readline()
        proc.send_signal(signal.SIGINT)
        rest = proc.stderr.read()
        proc.wait(20)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        if proc.stderr is not None:
            proc.stderr.close()
    assert "Traceback" not in rest
    assert "no partial output" not in rest
    assert [line for line in rest.splitlines() if line.strip()] in ([], ["earfold: stopped"])
