"""The service without the ``[redis]`` extra: the embedded queue works; ``--queue redis://``
and ``earfold worker`` say in one line what to install.

The interpreter under test is made to lack the Redis client and Dramatiq (``None`` in
``sys.modules`` makes their import fail, as where they are not installed).
"""

from __future__ import annotations

import subprocess
import sys

_WITHOUT = "import sys\nsys.modules['redis'] = None\nsys.modules['dramatiq'] = None\n"

_CLI = _WITHOUT + "from earfold.service.cli import main\nsys.exit(main(sys.argv[1:]))\n"

HINT = "pip install 'earfold[redis]'"


def _cli(*args: str, cwd) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-c", _CLI, *args], capture_output=True, text=True, timeout=60, cwd=cwd
    )


def _one_line(proc: subprocess.CompletedProcess) -> str:
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    lines = [line for line in proc.stderr.splitlines() if line.strip()]
    assert len(lines) == 1, proc.stderr
    return lines[0]


def test_worker_needs_the_extra(tmp_path):
    line = _one_line(
        _cli(
            "worker", "--queue", "redis://127.0.0.1:1/0", "--data-dir", str(tmp_path), cwd=tmp_path
        )
    )
    assert line.startswith("earfold: error:") and HINT in line and "earfold worker" in line


def test_serve_with_a_redis_queue_needs_the_extra(tmp_path):
    line = _one_line(
        _cli(
            "serve",
            "--queue",
            "redis://127.0.0.1:1/0",
            "--port",
            "0",
            "--workers",
            "0",
            "--data-dir",
            str(tmp_path / "data"),
            cwd=tmp_path,
        )
    )
    assert line.startswith("earfold: error:") and HINT in line


def test_the_embedded_queue_works_without_the_extra(tmp_path):
    code = _WITHOUT + (
        "import warnings\n"
        "warnings.simplefilter('ignore')\n"
        "from starlette.testclient import TestClient\n"
        "from earfold.service.app import create_app\n"
        "from earfold.service.settings import ServiceSettings\n"
        f"settings = ServiceSettings(data_dir={str(tmp_path / 'data')!r}, min_free_bytes=0)\n"
        "with TestClient(create_app(settings)) as client:\n"
        "    assert client.get('/v1/health').status_code == 200\n"
        "    assert client.get('/v1/layouts').status_code == 200\n"
        "assert 'redis' not in [m.split('.')[0] for m in sys.modules if sys.modules[m]]\n"
        "print('ok')\n"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, cwd=tmp_path
    )
    assert proc.returncode == 0 and proc.stdout.strip() == "ok", proc.stderr
