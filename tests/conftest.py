"""Shared test fixtures."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO_ROOT = Path(__file__).resolve().parents[1]
SHARED_SOFA = REPO_ROOT.parent / "shared" / "sofa"


def _require_shared() -> Path:
    if SHARED_SOFA.is_dir():
        return SHARED_SOFA
    reason = f"the SOFA test corpus is not at {SHARED_SOFA} (../shared/sofa beside the repo)"
    if os.environ.get("CI") == "true":
        pytest.fail(f"CI=true but {reason}")
    pytest.skip(reason)


@pytest.fixture(scope="session")
def shared_sofa_dir() -> Path:
    """The SOFA corpus in ../shared/sofa: skipped where absent, required when CI=true."""
    return _require_shared()


@pytest.fixture(scope="session")
def repo_root() -> Path:
    return REPO_ROOT
