"""Layering rules from DESIGN.md: renderer imports no web or queue code; libraries stay
behind one door each."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

RENDERER = Path(__file__).resolve().parents[1] / "renderer"
FORBIDDEN = ("fastapi", "starlette", "uvicorn", "redis", "dramatiq", "service", "httpx", "sqlite3")


def test_importing_renderer_pulls_in_no_web_or_queue_package():
    code = (
        "import sys, earfold.renderer, earfold.renderer.render, earfold.renderer.bench, earfold.renderer.demo, earfold.renderer.inspect\n"
        f"bad = [m for m in sys.modules if m.split('.')[0] in {FORBIDDEN!r}]\n"
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def _imports(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(a.name.split(".")[0] for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module.split(".")[0])
    return names


def test_each_library_behind_one_door():
    doors = {"netCDF4": "sofa.py", "soundfile": "audio_io.py"}
    for path in RENDERER.glob("*.py"):
        used = _imports(path)
        for lib, door in doors.items():
            if lib in used:
                assert path.name == door, f"{path.name} imports {lib}; only {door} may"


def test_queue_libraries_behind_one_door_each():
    service = RENDERER.parent / "service"
    doors = {"dramatiq": "redis_delivery.py", "redis": "redis_store.py"}
    for path in service.rglob("*.py"):
        used = _imports(path)
        for lib, door in doors.items():
            if lib in used:
                assert path.name == door, f"{path.name} imports {lib}; only {door} may"
