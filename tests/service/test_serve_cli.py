"""``earfold serve`` options: limits reach the settings; loopback-only by default."""

from __future__ import annotations

import argparse

import pytest

from earfold.service.serve_cli import add_serve_parser, is_loopback, settings_from_args


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
        )
    )
    assert (s.max_upload_bytes, s.max_channels, s.max_duration_s) == (2 * 10**9, 24, 1800.0)
    assert (s.max_hrtf_bytes, s.max_queued, s.min_free_bytes) == (64 * 2**20, 7, 10 * 2**20)
    assert s.retention_s == 7200.0


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
