"""The scenario store: content ids, idempotent saves, persistence across restarts, concurrent saves, demos.

Every test here runs on both backends (the ``database_url`` fixture: an SQLite file, and a fresh database on the
session's real PostgreSQL server).
"""

from __future__ import annotations

import copy
import json
import re
import threading
from importlib import resources
from pathlib import Path

import pytest
from exomap import schema
from exomap.web.store import ScenarioStore, SQLiteDatabase, load_demos, open_database
from web_scenarios import ADIABATIC, variant

HEX16 = re.compile(r"^[0-9a-f]{16}$")


@pytest.fixture
def client(make_client, database_url):
    """An app on the test's backend (overrides the SQLite-only fixture of conftest.py)."""
    return make_client(database_url=database_url)


def test_save_restart_load_round_trip(make_client, tmp_path: Path, database_url: str) -> None:
    data = tmp_path / "shared"
    first = make_client(data_dir=data, database_url=database_url)
    saved = first.post("/api/v1/scenarios", json=ADIABATIC)
    assert saved.status_code == 201
    sid = saved.json()["id"]
    assert saved.headers["location"] == f"/api/v1/scenarios/{sid}"
    before = first.get(f"/api/v1/scenarios/{sid}").text
    first.__exit__(None, None, None)

    second = make_client(data_dir=data, database_url=database_url)  # a new app on the same store
    after = second.get(f"/api/v1/scenarios/{sid}")
    assert after.status_code == 200
    assert after.text == before
    # the stored document is the canonical form of what was sent, and it hashes to the same id
    assert after.text == schema.canonical_json(ADIABATIC)
    assert schema.scenario_id(json.loads(after.text)) == sid
    assert sid in [s["id"] for s in second.get("/api/v1/scenarios").json()["scenarios"]]


def test_same_content_twice_gets_one_id(client) -> None:
    a = client.post("/api/v1/scenarios", json=ADIABATIC)
    # the same scenario written differently (SI numbers instead of unit strings) is the same content
    si = json.loads(schema.canonical_json(ADIABATIC))
    b = client.post("/api/v1/scenarios", json=si)
    c = client.post("/api/v1/scenarios", json=ADIABATIC)
    assert a.status_code == 201
    assert b.status_code == 200 and c.status_code == 200
    assert a.json()["id"] == b.json()["id"] == c.json()["id"]
    saved = [s for s in client.get("/api/v1/scenarios").json()["scenarios"] if not s["demo"]]
    assert [s["id"] for s in saved] == [a.json()["id"]]


def test_different_scenarios_never_share_an_id(client) -> None:
    ids = set()
    for k in range(12):
        doc = copy.deepcopy(ADIABATIC)
        doc["vessel"]["level_setpoint"] = f"{1.0 + 0.05 * k} m"
        ids.add(client.post("/api/v1/scenarios", json=doc).json()["id"])
    ids.add(client.post("/api/v1/scenarios", json=variant(title="another title")).json()["id"])
    assert len(ids) == 13
    assert all(HEX16.match(i) for i in ids)


def test_nothing_is_overwritten(tmp_path: Path, database_url: str) -> None:
    store = ScenarioStore(open_database(database_url, tmp_path))
    stored, created = store.save(ADIABATIC)
    again, created_again = store.save(ADIABATIC)
    assert created and not created_again
    assert again.document == stored.document
    assert [r.id for r in store.database.fetch_all()] == [stored.id]
    store.close()


def test_concurrent_saves_are_safe(tmp_path: Path, database_url: str) -> None:
    store = ScenarioStore(open_database(database_url, tmp_path))
    docs = []
    for k in range(8):
        doc = copy.deepcopy(ADIABATIC)
        doc["feed"]["flow"] = f"{1.0 + 0.25 * k} m^3/h"
        docs.append(doc)
    results: list[tuple[str, bool]] = []
    errors: list[BaseException] = []
    lock = threading.Lock()
    barrier = threading.Barrier(8)

    def worker(offset: int) -> None:
        try:
            barrier.wait()
            for i in range(len(docs)):
                stored, created = store.save(docs[(i + offset) % len(docs)])
                with lock:
                    results.append((stored.id, created))
        except BaseException as exc:  # noqa: BLE001 - collected and asserted below
            errors.append(exc)

    threads = [threading.Thread(target=worker, args=(k,)) for k in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors, errors
    assert len(results) == 64
    ids = {sid for sid, _ in results}
    assert len(ids) == 8
    # each scenario was created exactly once, whatever the interleaving
    assert sum(created for _, created in results) == 8
    assert {s.id for s in store.list()} == ids
    if isinstance(store.database, SQLiteDatabase):
        assert store.database._conn().execute("PRAGMA journal_mode").fetchone()[0].lower() == "wal"
    store.close()


def test_demos_are_listed_with_their_file_names(client) -> None:
    files = sorted(e.name[:-5] for e in resources.files("exomap.demos").iterdir() if e.name.endswith(".json"))
    listing = client.get("/api/v1/scenarios").json()["scenarios"]
    demos = [s for s in listing if s["demo"]]
    assert [d["name"] for d in demos] == files
    for d in demos:
        assert HEX16.match(d["id"])
        assert set(d) == {"id", "title", "description", "demo", "name", "derived_from"}
        doc = client.get(f"/api/v1/scenarios/{d['id']}")
        assert doc.status_code == 200
        assert schema.scenario_id(doc.json()) == d["id"]
        # a demo is also found by its name
        assert client.get(f"/api/v1/scenarios/{d['name']}").text == doc.text
    assert len(load_demos()) == len(files)


def test_saving_a_demo_returns_the_demo(client) -> None:
    listing = client.get("/api/v1/scenarios").json()["scenarios"]
    demos = [s for s in listing if s["demo"]]
    assert demos, "the package ships no demo scenario"
    doc = client.get(f"/api/v1/scenarios/{demos[0]['id']}").json()
    response = client.post("/api/v1/scenarios", json=doc)
    assert response.status_code == 200
    assert response.json() == demos[0]
    assert len(client.get("/api/v1/scenarios").json()["scenarios"]) == len(listing)


def test_lineage_is_store_metadata_not_content(make_client, tmp_path: Path) -> None:
    """A scenario saved from an edit records the one it came from; the id stays the content's; the record
    survives a restart, and an old database without the column gets it on open."""
    import sqlite3

    data = tmp_path / "lineage"
    data.mkdir()
    # a database as made before lineage was kept
    old = sqlite3.connect(data / SQLiteDatabase.FILE_NAME)
    old.execute(
        "CREATE TABLE scenarios (id TEXT PRIMARY KEY, title TEXT NOT NULL, description TEXT NOT NULL, "
        "document TEXT NOT NULL, saved_at REAL NOT NULL)"
    )
    old.commit()
    old.close()
    client = make_client(data_dir=data)
    origin = client.post("/api/v1/scenarios", json=ADIABATIC).json()
    assert origin["derived_from"] is None
    edited = variant(title="edited copy")
    r = client.post("/api/v1/scenarios", params={"derived_from": origin["id"]}, json=edited)
    assert r.status_code == 201 and r.json()["derived_from"] == origin["id"]
    # the content id does not depend on the lineage
    assert r.json()["id"] == schema.scenario_id(schema.parse_scenario(edited))
    # a second save of the same content, from elsewhere, changes nothing
    again = client.post("/api/v1/scenarios", params={"derived_from": r.json()["id"]}, json=edited)
    assert again.status_code == 200 and again.json()["derived_from"] == origin["id"]
    # a demo named by its file name is recorded by its id
    demo = next(s for s in client.get("/api/v1/scenarios").json()["scenarios"] if s["demo"])
    other = client.post("/api/v1/scenarios", params={"derived_from": demo["name"]}, json=variant(title="from demo"))
    assert other.json()["derived_from"] == demo["id"]
    # an unknown origin is refused, naming the field, and nothing is stored
    before = client.get("/api/v1/scenarios").json()
    bad = client.post("/api/v1/scenarios", params={"derived_from": "0000000000000000"}, json=variant(title="x"))
    assert bad.status_code == 422 and bad.json()["error"]["fields"][0]["field"] == "derived_from"
    assert client.get("/api/v1/scenarios").json() == before
    client.__exit__(None, None, None)
    listed = {s["id"]: s for s in make_client(data_dir=data).get("/api/v1/scenarios").json()["scenarios"]}
    assert listed[r.json()["id"]]["derived_from"] == origin["id"]
