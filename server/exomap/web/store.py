"""The scenario store: saved scenarios in an embedded SQLite file, demo scenarios from the package.

A scenario's id is the content hash of its canonical document (``exomap.schema.scenario_id``), so saving the
same scenario twice gives the same id and nothing is ever overwritten (``INSERT OR IGNORE``). The database
runs in WAL mode with one connection per thread, which makes concurrent saves from the server's threads safe
and lets readers go on while a save commits. The file survives restarts: a new app on the same ``data_dir``
sees every scenario saved before.

Demo scenarios (the JSON files of the package ``exomap.demos``) are read once when the store opens and listed
first, marked ``demo``, with their file name (without ``.json``) as ``name``; they are looked up by id or by
that name. They are never written to the database.

Lineage: a scenario saved from an edit may name the scenario it was derived from (``save(doc,
derived_from=id)``). That is store metadata, not part of the document, so it does not change the content id;
the first save of a content keeps its lineage (a later save of the same content changes nothing). A database
made before the column existed gets it on open.
"""

from __future__ import annotations

import json
import logging
import sqlite3
import threading
import time
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

log = logging.getLogger("exomap.web")

SCHEMA = """
CREATE TABLE IF NOT EXISTS scenarios (
    id          TEXT PRIMARY KEY,
    title       TEXT NOT NULL,
    description TEXT NOT NULL,
    document    TEXT NOT NULL,
    saved_at    REAL NOT NULL,
    derived_from TEXT
)
"""


@dataclass(frozen=True)
class StoredScenario:
    """One scenario of the store: its id, listing fields and canonical JSON document."""

    id: str
    title: str
    description: str
    document: str
    demo: bool = False
    name: str | None = None
    #: id of the scenario this one was saved from (store metadata, not part of the content id)
    derived_from: str | None = None

    def summary(self) -> dict[str, Any]:
        return {
            "id": self.id,
            "title": self.title,
            "description": self.description,
            "demo": self.demo,
            "name": self.name,
            "derived_from": self.derived_from,
        }


def canonicalize(doc: dict[str, Any]) -> tuple[str, str, str, str]:
    """Validate a scenario document and return ``(id, canonical_json, title, description)``.

    Raises ``exomap.schema.ScenarioError`` when the document is not a valid scenario.
    """
    from exomap import schema

    parsed = schema.parse_scenario(doc)
    text = schema.canonical_json(parsed)
    sid = schema.scenario_id(parsed)
    title = getattr(parsed, "title", None) or ""
    description = getattr(parsed, "description", None) or ""
    return sid, text, str(title), str(description)


def load_demos() -> list[StoredScenario]:
    """Every demo scenario shipped in ``exomap.demos``, sorted by file name.

    A demo that does not validate is logged and left out, so one bad file cannot stop the server (a test loads
    and validates every demo, so this only guards a broken installation).
    """
    out: list[StoredScenario] = []
    try:
        folder = resources.files("exomap.demos")
    except ModuleNotFoundError:  # pragma: no cover - broken installation
        return out
    for entry in sorted(folder.iterdir(), key=lambda e: e.name):
        if not entry.name.endswith(".json") or not entry.is_file():
            continue
        name = entry.name[: -len(".json")]
        try:
            doc = json.loads(entry.read_text(encoding="utf-8"))
            sid, text, title, description = canonicalize(doc)
        except Exception:  # noqa: BLE001 - a broken demo must not stop the server; it is logged
            log.exception("demo scenario %s does not load; left out", entry.name)
            continue
        out.append(StoredScenario(sid, title, description, text, demo=True, name=name))
    return out


class ScenarioStore:
    """Saved scenarios (SQLite, ``<data_dir>/scenarios.sqlite3``) plus the package's demos."""

    FILE_NAME = "scenarios.sqlite3"

    def __init__(self, data_dir: Path, demos: list[StoredScenario] | None = None) -> None:
        self.data_dir = Path(data_dir)
        self.data_dir.mkdir(parents=True, exist_ok=True)
        self.path = self.data_dir / self.FILE_NAME
        self._local = threading.local()
        self._connections: list[sqlite3.Connection] = []
        self._lock = threading.Lock()
        conn = self._conn()
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute(SCHEMA)
        columns = {row[1] for row in conn.execute("PRAGMA table_info(scenarios)")}
        if "derived_from" not in columns:  # a database made before lineage was kept
            conn.execute("ALTER TABLE scenarios ADD COLUMN derived_from TEXT")
        conn.commit()
        self.demos = list(demos) if demos is not None else []
        self._demo_by_id = {d.id: d for d in self.demos}
        self._demo_by_name = {d.name: d for d in self.demos}

    def _conn(self) -> sqlite3.Connection:
        conn = getattr(self._local, "conn", None)
        if conn is None:
            # check_same_thread stays on: each thread gets its own connection, closed by close().
            conn = sqlite3.connect(self.path, timeout=30.0)
            conn.execute("PRAGMA busy_timeout=30000")
            conn.execute("PRAGMA synchronous=NORMAL")
            self._local.conn = conn
            with self._lock:
                self._connections.append(conn)
        return conn

    def close(self) -> None:
        with self._lock:
            for conn in self._connections:
                try:
                    conn.close()
                except sqlite3.ProgrammingError:  # closed from another thread already
                    pass
            self._connections.clear()
        self._local = threading.local()

    # -- reading -------------------------------------------------------------------------------------------------
    def get(self, key: str) -> StoredScenario | None:
        """A scenario by id (demo or saved) or by demo name; None when there is none."""
        if key in self._demo_by_id:
            return self._demo_by_id[key]
        if key in self._demo_by_name:
            return self._demo_by_name[key]
        row = (
            self._conn()
            .execute("SELECT id, title, description, document, derived_from FROM scenarios WHERE id = ?", (key,))
            .fetchone()
        )
        if row is None:
            return None
        return StoredScenario(row[0], row[1], row[2], row[3], derived_from=row[4])

    def list(self) -> list[StoredScenario]:
        """Demos first (by name), then saved scenarios, oldest first; a saved copy of a demo is listed once."""
        rows = (
            self._conn()
            .execute("SELECT id, title, description, document, derived_from FROM scenarios ORDER BY saved_at, id")
            .fetchall()
        )
        saved = [StoredScenario(*r[:4], derived_from=r[4]) for r in rows if r[0] not in self._demo_by_id]
        return self.demos + saved

    # -- writing -------------------------------------------------------------------------------------------------
    def save(self, doc: dict[str, Any], derived_from: str | None = None) -> tuple[StoredScenario, bool]:
        """Validate and save a scenario; return it and whether it is new (False: already there).

        ``derived_from`` is the id of the scenario this one was edited from (kept only on the first save of
        this content; it never changes the id).
        """
        sid, text, title, description = canonicalize(doc)
        if sid in self._demo_by_id:
            return self._demo_by_id[sid], False
        if derived_from == sid:
            derived_from = None  # saved unchanged: not derived from itself
        conn = self._conn()
        with conn:
            cur = conn.execute(
                "INSERT OR IGNORE INTO scenarios (id, title, description, document, saved_at, derived_from) "
                "VALUES (?,?,?,?,?,?)",
                (sid, title, description, text, time.time(), derived_from),
            )
        created = cur.rowcount == 1
        stored = self.get(sid)
        if stored is None:  # pragma: no cover - the row was just inserted or was already there
            raise RuntimeError(f"scenario {sid} vanished from the store")
        return stored, created
