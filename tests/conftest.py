"""Fixtures shared by every test folder: where the demo scenarios are and how to read one."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
SCENARIOS = REPO / "scenarios"


def demo_paths() -> list[Path]:
    """Every demo scenario file in ``scenarios/`` (sorted)."""
    return sorted(SCENARIOS.glob("*.json"))


@pytest.fixture(scope="session")
def scenarios_dir() -> Path:
    return SCENARIOS


@pytest.fixture(scope="session")
def load_demo():
    """``load_demo(name)`` -> the JSON document of ``scenarios/<name>.json`` (a fresh dict each call)."""

    def load(name: str) -> dict:
        return json.loads((SCENARIOS / f"{name}.json").read_text(encoding="utf-8"))

    return load


@pytest.fixture(scope="session", autouse=True)
def _test_client_host():
    """Apps built in tests answer the Host name of Starlette's TestClient ('testserver') besides the loopback
    names (the Host check against DNS rebinding; EXOMAP_ALLOWED_HOSTS). An explicit ``allowed_hosts=`` in a
    test's Settings still wins over this environment value."""
    import os

    before = os.environ.get("EXOMAP_ALLOWED_HOSTS")
    os.environ["EXOMAP_ALLOWED_HOSTS"] = "testserver,localhost,127.0.0.1,::1"
    yield
    if before is None:
        os.environ.pop("EXOMAP_ALLOWED_HOSTS", None)
    else:
        os.environ["EXOMAP_ALLOWED_HOSTS"] = before


# -- PostgreSQL (the shared store of DESIGN.md §14) ----------------------------------------------------------
@pytest.fixture(scope="session")
def postgres_server():
    """One real PostgreSQL server for the whole session (tests/pgserver.py), stopped at the end.

    Missing server binaries FAIL the tests that need them (never a skip): `make install` and `.ci/run` install
    the postgresql-15 package when /usr/lib/postgresql/15/bin/initdb is missing.
    """
    import sys

    sys.path.insert(0, str(Path(__file__).parent))
    from pgserver import PostgresServer, find_bindir

    bindir = find_bindir()
    if bindir is None:
        pytest.fail(
            "PostgreSQL server binaries (initdb, pg_ctl) not found: install them with "
            "`apt-get install -y postgresql-15` (make install and .ci/run do this)"
        )
    server = PostgresServer(bindir)
    try:
        server.start()
    except BaseException:
        server.stop()
        raise
    yield server
    server.stop()


@pytest.fixture
def postgres_url(postgres_server):
    """URL of a fresh, empty database on the session's PostgreSQL server, dropped after the test."""
    url = postgres_server.new_database()
    yield url
    postgres_server.drop_database(url)


@pytest.fixture(params=["sqlite", "postgresql"])
def database_url(request, tmp_path: Path) -> str:
    """A fresh store on each backend: an SQLite file under tmp_path, or a new PostgreSQL database."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'db' / 'scenarios.sqlite3'}"
    return request.getfixturevalue("postgres_url")
