"""Packaging: everything installs under the one namespace ``earfold``, from a real wheel."""

from __future__ import annotations

import os
import subprocess
import sys
import sysconfig
import tomllib
import zipfile
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
PROJECT = tomllib.loads((REPO / "pyproject.toml").read_text())
FOLDERS = {
    "renderer": "earfold.renderer",
    "service": "earfold.service",
    "hrtf_sets": "earfold.hrtf_sets",
}


#: Folders of data only (no Python), installed as packages for their files.
DATA_PACKAGES = {"earfold.service.static"}


def _folder_packages() -> set[str]:
    found = set(DATA_PACKAGES)
    for folder, name in FOLDERS.items():
        for init in (REPO / folder).rglob("__init__.py"):
            rel = init.parent.relative_to(REPO / folder)
            found.add(".".join([name, *rel.parts]))
    return found


def test_every_package_folder_is_listed_in_pyproject():
    listed = set(PROJECT["tool"]["setuptools"]["packages"])
    assert listed == _folder_packages()
    assert PROJECT["tool"]["setuptools"]["package-dir"] == {v: k for k, v in FOLDERS.items()}


@pytest.fixture(scope="module")
def wheel(tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    done = subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--quiet", "-w", str(out), str(REPO)],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert done.returncode == 0, done.stderr
    (path,) = out.glob("earfold-*.whl")
    return path


def test_the_wheel_installs_nothing_but_earfold_at_the_top(wheel: Path):
    with zipfile.ZipFile(wheel) as z:
        tops = {name.split("/")[0] for name in z.namelist()}
        names = z.namelist()
    assert tops == {"earfold", next(t for t in tops if t.endswith(".dist-info"))}
    assert "earfold/__init__.py" not in names  # an implicit namespace package
    for needed in (
        "earfold/renderer/py.typed",
        "earfold/hrtf_sets/MIT_KEMAR_normal_pinna.sofa",
        "earfold/hrtf_sets/rigid_sphere.sofa",
        "earfold/service/static/index.html",
    ):
        assert needed in names


def test_the_wheel_imports_from_an_empty_target(wheel: Path, tmp_path: Path):
    target = tmp_path / "site"
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "pip",
            "install",
            "--no-deps",
            "--quiet",
            "--target",
            str(target),
            str(wheel),
        ],
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    assert sorted(p.name for p in target.iterdir() if p.name != "bin")[0] == "earfold"
    assert {p.name for p in target.iterdir()} - {"bin"} == {
        "earfold",
        next(p.name for p in target.iterdir() if p.name.endswith(".dist-info")),
    }
    # -S: no site-packages processing, so the editable install of this checkout is not seen;
    # the dependencies come from this interpreter's site-packages, after the target.
    code = (
        "import earfold.renderer, earfold.service.cli, earfold.hrtf_sets\n"
        "from earfold.renderer.layouts import get_layout\n"
        "print(earfold.renderer.__file__)\n"
        "print(earfold.hrtf_sets.get_shipped('mit-kemar').path)\n"
        "print(get_layout('7.1.4').channels)\n"
    )
    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join(
            [str(target), sysconfig.get_paths()["purelib"], sysconfig.get_paths()["platlib"]]
        ),
    }
    out = subprocess.run(
        [sys.executable, "-S", "-c", code],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        env=env,
        timeout=120,
    )
    assert out.returncode == 0, out.stderr
    renderer_file, sofa, channels = out.stdout.split()
    assert Path(renderer_file).is_relative_to(target)
    assert Path(sofa).is_relative_to(target) and Path(sofa).is_file()
    assert channels == "12"
