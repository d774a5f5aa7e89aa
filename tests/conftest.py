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


@pytest.fixture(scope="session", autouse=True)
def _filter_cache_dir(tmp_path_factory):
    """Renders under test keep prepared filters in the session's own folder, not the user's."""
    folder = tmp_path_factory.mktemp("filter-cache")
    before = os.environ.get("EARFOLD_CACHE_DIR")
    os.environ["EARFOLD_CACHE_DIR"] = str(folder)
    yield folder
    if before is None:
        os.environ.pop("EARFOLD_CACHE_DIR", None)
    else:
        os.environ["EARFOLD_CACHE_DIR"] = before


@pytest.fixture(scope="session")
def shared_sofa_dir() -> Path:
    """The SOFA corpus in ../shared/sofa: skipped where absent, required when CI=true."""
    return _require_shared()


#: Redis the tests use: $EARFOLD_TEST_REDIS_URL (set by .ci/run) or the local default.
#: Every test works under its own key prefix and deletes its keys afterwards.
REDIS_URL_ENV = "EARFOLD_TEST_REDIS_URL"
DEFAULT_TEST_REDIS = "redis://127.0.0.1:6379/0"


@pytest.fixture(scope="session")
def redis_server_url() -> str:
    """A Redis that answers: skipped where none runs, required when CI=true."""
    import redis

    url = os.environ.get(REDIS_URL_ENV) or DEFAULT_TEST_REDIS
    try:
        client = redis.Redis.from_url(url, socket_connect_timeout=2)
        client.ping()
        client.close()
    except redis.exceptions.RedisError as exc:
        reason = f"no Redis answers at {url} ({exc}); set ${REDIS_URL_ENV} or start redis-server"
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI=true but {reason}")
        pytest.skip(reason)
    return url


@pytest.fixture
def redis_queue_url(redis_server_url):
    """``redis://...?prefix=UNIQUE`` for one test; its keys are deleted afterwards."""
    import uuid

    from earfold.service.jobs.redis_store import RedisJobQueue

    url = f"{redis_server_url}?prefix=earfold-test-{uuid.uuid4().hex[:12]}"
    yield url
    q = RedisJobQueue(url, deliver=False)
    q.purge()
    q.close()


@pytest.fixture(scope="session")
def repo_root() -> Path:
    return REPO_ROOT
