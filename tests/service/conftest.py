"""Fixtures of the service tests: an app on a temporary data directory."""

from __future__ import annotations

import warnings

import pytest

# Starlette 1.x prefers the httpx2 package for its TestClient and warns once, at import,
# when it falls back to httpx (which this project declares); the client works the same.
with warnings.catch_warnings():
    warnings.filterwarnings("ignore", message="Using `httpx` with `starlette.testclient`")
    from starlette.testclient import TestClient

from earfold.service.app import create_app
from earfold.service.settings import ServiceSettings


@pytest.fixture
def make_client(tmp_path):
    """Build a TestClient for settings overrides; the data dir is tmp_path / 'data'."""
    opened = []

    def make(**overrides) -> TestClient:
        settings = ServiceSettings(data_dir=tmp_path / "data", **{"min_free_bytes": 0, **overrides})
        client = TestClient(create_app(settings))
        client.__enter__()
        opened.append(client)
        return client

    yield make
    for client in opened:
        client.__exit__(None, None, None)
        client.app.state.queue.close()


@pytest.fixture
def client(make_client):
    return make_client()
