"""The documentation names only things that exist: modules to run, files and folders."""

from __future__ import annotations

import importlib.util
import re
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DOCS = [REPO / "README.md", REPO / "DEVELOPERS.md", *sorted((REPO / "hrtf_sets").glob("*.md"))]


def _text() -> str:
    return "\n".join(p.read_text() for p in DOCS)


def test_docs_have_no_old_names():
    # The project's earlier name, spelled backwards so that this file does not hold it.
    assert "elcisso"[::-1] not in _text().lower()


@pytest.mark.parametrize(
    "module", sorted(set(re.findall(r"python -m (earfold(?:\.\w+)+)", _text())))
)
def test_modules_the_docs_tell_you_to_run_exist(module: str):
    assert importlib.util.find_spec(module) is not None, f"the docs name {module}, which is gone"


@pytest.mark.parametrize(
    "path",
    sorted(
        set(
            m
            for m in re.findall(
                r"`((?:renderer|service|hrtf_sets|tests|docker|examples)/[\w./-]*)`", _text()
            )
            if "*" not in m
        )
    ),
)
def test_paths_the_docs_name_exist(path: str):
    assert (REPO / path.split("::")[0]).exists(), f"the docs name {path}, which is not there"
