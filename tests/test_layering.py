"""Layering rules (DESIGN.md, DEVELOPERS.md): the renderer's wings import only downward, no
module imports another in a circle, the renderer imports no web or queue code, and each
outside library stays behind one door."""

from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
PACKAGES = {
    "renderer": "earfold.renderer",
    "service": "earfold.service",
    "hrtf_sets": "earfold.hrtf_sets",
}
FORBIDDEN = ("fastapi", "starlette", "uvicorn", "redis", "dramatiq", "httpx", "sqlite3", "pydantic")

#: The renderer's foundation: modules every wing may import.
FOUNDATION = {"errors", "defaults", "geometry", "blocks", "files", "pipeline", "signals"}

#: Each wing and the wings it may import (besides itself and the foundation). A new input
#: kind (scenes, objects) is a wing of the same rank as ``room``.
WINGS: dict[str, set[str]] = {
    "io": set(),
    "layouts": set(),
    "hrtf": set(),
    "engine": set(),
    "loudness": {"io", "layouts"},
    "room": {"hrtf", "layouts"},
    "scenes": {"hrtf", "layouts", "room"},
    "objects": {"io", "layouts", "scenes"},
    "eq": {"hrtf", "engine", "io", "loudness"},
    "render": {"io", "layouts", "hrtf", "engine", "loudness", "room", "eq", "scenes"},
    "tools": {"io", "layouts", "hrtf", "engine", "loudness", "room", "eq", "scenes", "render"},
}


def _module_name(path: Path) -> str:
    rel = path.relative_to(REPO).with_suffix("")
    parts = list(rel.parts)
    parts[0] = PACKAGES[parts[0]]
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _all_modules() -> dict[str, Path]:
    modules = {}
    for top in PACKAGES:
        for path in sorted((REPO / top).rglob("*.py")):
            modules[_module_name(path)] = path
    return modules


MODULES = _all_modules()


def _imports(name: str, path: Path) -> set[str]:
    """Every module ``name`` imports, anywhere in its body (lazy imports included)."""
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - node.level + 1]
                module = ".".join(base + ([node.module] if node.module else []))
            else:
                module = node.module or ""
            found.add(module)
            # "from package import submodule" imports the submodule
            for alias in node.names:
                if f"{module}.{alias.name}" in MODULES:
                    found.add(f"{module}.{alias.name}")
    return found


GRAPH = {name: {m for m in _imports(name, path) if m in MODULES} for name, path in MODULES.items()}


def _wing(module: str) -> str | None:
    parts = module.split(".")
    if parts[:2] != ["earfold", "renderer"] or len(parts) < 3:
        return None
    return parts[2]


def test_no_module_imports_another_in_a_circle():
    cycles = []
    state: dict[str, int] = {}  # 1 on the stack, 2 done

    def visit(node: str, stack: list[str]) -> None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(GRAPH[node]):
            if state.get(nxt) == 1:
                cycles.append(" -> ".join(stack[stack.index(nxt) :] + [nxt]))
            elif nxt not in state:
                visit(nxt, stack)
        stack.pop()
        state[node] = 2

    for name in sorted(GRAPH):
        if name not in state:
            visit(name, [])
    assert not cycles, "import circles:\n" + "\n".join(cycles)


def test_every_renderer_module_lives_in_a_wing_or_the_foundation():
    for name in MODULES:
        wing = _wing(name)
        if wing is None or name == "earfold.renderer":
            continue
        assert wing in WINGS or wing in FOUNDATION, (
            f"{name} is in neither a wing ({', '.join(WINGS)}) nor the foundation "
            f"({', '.join(sorted(FOUNDATION))}); add it to one and to this test's table"
        )


def test_wings_import_only_downward_and_through_each_others_surface():
    problems = []
    for name, targets in GRAPH.items():
        wing = _wing(name)
        if wing is None:
            continue
        for target in targets:
            other = _wing(target)
            if other is None or other == wing or target == "earfold.renderer":
                continue
            if other in FOUNDATION:
                continue
            if wing in FOUNDATION:
                problems.append(f"{name} (foundation) imports {target} (wing {other!r})")
            elif other not in WINGS[wing]:
                problems.append(
                    f"{name} (wing {wing!r}) imports {target} (wing {other!r}), "
                    "which is not below it"
                )
            elif any(part.startswith("_") for part in target.split(".")[3:]):
                problems.append(
                    f"{name} imports {target}, a private module of wing {other!r}; "
                    "import from the wing's __init__"
                )
    assert not problems, "\n".join(sorted(problems))


def test_renderer_never_imports_the_service():
    for name, targets in GRAPH.items():
        if name.startswith("earfold.renderer"):
            bad = [t for t in targets if t.startswith("earfold.service")]
            assert not bad, (
                f"{name} imports {bad}; the service imports the renderer, never the reverse"
            )


def test_importing_renderer_pulls_in_no_web_or_queue_package():
    code = (
        "import sys, importlib\n"
        f"for m in {sorted(n for n in MODULES if n.startswith('earfold.renderer'))!r}:\n"
        "    importlib.import_module(m)\n"
        f"bad = [m for m in sys.modules if m.split('.')[0] in {FORBIDDEN!r} "
        "or m.startswith('earfold.service')]\n"
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def _top_level_imports(path: Path) -> set[str]:
    names: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            names.update(a.name.split(".")[0] for a in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module.split(".")[0])
    return names


def test_each_library_behind_one_door():
    doors = {
        "netCDF4": REPO / "renderer" / "hrtf" / "sofa.py",
        "soundfile": REPO / "renderer" / "io" / "_codec.py",
        "dramatiq": REPO / "service" / "jobs" / "redis_delivery.py",
        "redis": REPO / "service" / "jobs" / "redis_store.py",
    }
    for path in MODULES.values():
        used = _top_level_imports(path)
        for lib, door in doors.items():
            if lib in used:
                assert path == door, (
                    f"{path.relative_to(REPO)} imports {lib}; only {door.relative_to(REPO)} may"
                )
