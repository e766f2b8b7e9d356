"""Fixtures of the web tests: apps built with explicit settings on a fresh data folder (tmp_path)."""

from __future__ import annotations

import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from fastapi.testclient import TestClient

sys.path.insert(0, str(Path(__file__).parent))  # web_scenarios.py and web_helpers.py

from exomap.web.app import create_app  # noqa: E402
from exomap.web.settings import Settings  # noqa: E402


@pytest.fixture
def make_client(tmp_path: Path) -> Iterator[Callable[..., TestClient]]:
    """Factory of test clients; each call builds a new app on the same data folder unless told otherwise."""
    opened: list[TestClient] = []

    def make(data_dir: Path | None = None, raise_server_exceptions: bool = True, **overrides: Any) -> TestClient:
        overrides.setdefault("executor", "thread")
        overrides.setdefault("allowed_hosts", ["testserver"])  # the TestClient's Host
        settings = Settings(data_dir=data_dir or tmp_path / "data", **overrides)
        client = TestClient(create_app(settings), raise_server_exceptions=raise_server_exceptions)
        client.__enter__()  # runs the lifespan (pool shutdown and store close on exit)
        opened.append(client)
        return client

    yield make
    for client in reversed(opened):
        client.__exit__(None, None, None)


@pytest.fixture
def client(make_client: Callable[..., TestClient]) -> TestClient:
    return make_client()


@pytest.fixture
def saved_id(client: TestClient) -> str:
    """Id of the invented test scenario, saved in the client's store."""
    from web_scenarios import ADIABATIC

    response = client.post("/api/v1/scenarios", json=ADIABATIC)
    assert response.status_code == 201, response.text
    return response.json()["id"]
