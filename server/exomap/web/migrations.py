"""Versioned schema migrations of the scenario store, for both backends (SQLite and PostgreSQL).

Each migration has a number, a one-line description and its SQL for each dialect. ``apply`` runs, at start,
every migration the database has not seen yet, each in its own transaction together with the row that records
it in ``schema_migrations``; a database already at the latest version is left alone. Two instances starting at
once on one PostgreSQL server do not race: the migrating transaction holds an advisory lock (SQLite: the
write lock of ``BEGIN IMMEDIATE``), and the second instance then finds nothing left to do.

To change the schema, append a migration with the next number (never edit one that has shipped): e.g. a
nullable ``derived_from`` column for lineage is ``ALTER TABLE scenarios ADD COLUMN derived_from TEXT``.
Columns that are store metadata stay out of the canonical document, so they never change a content id.

A database written by a newer exomap (a version above the last one known here) is refused with a clear error
rather than used with a schema this code does not understand.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Literal

Dialect = Literal["sqlite", "postgresql"]

#: Key of the PostgreSQL advisory lock held while migrating (any constant shared by every exomap instance).
ADVISORY_LOCK_KEY = 0x65786F6D6170  # "exomap" in ASCII


@dataclass(frozen=True)
class Migration:
    """One schema change: its number, what it does, and its statements for each dialect."""

    version: int
    description: str
    sqlite: tuple[str, ...]
    postgresql: tuple[str, ...]

    def statements(self, dialect: Dialect) -> tuple[str, ...]:
        return self.sqlite if dialect == "sqlite" else self.postgresql


MIGRATIONS: tuple[Migration, ...] = (
    Migration(
        1,
        "scenarios: content id, listing fields, canonical document, time saved",
        # IF NOT EXISTS: stores created before migrations were recorded already have this table.
        sqlite=(
            """CREATE TABLE IF NOT EXISTS scenarios (
                id          TEXT PRIMARY KEY,
                title       TEXT NOT NULL,
                description TEXT NOT NULL,
                document    TEXT NOT NULL,
                saved_at    REAL NOT NULL
            )""",
        ),
        postgresql=(
            """CREATE TABLE IF NOT EXISTS scenarios (
                id          TEXT PRIMARY KEY,
                title       TEXT NOT NULL,
                description TEXT NOT NULL,
                document    TEXT NOT NULL,
                saved_at    DOUBLE PRECISION NOT NULL
            )""",
            "CREATE INDEX IF NOT EXISTS scenarios_saved_at ON scenarios (saved_at, id)",
        ),
    ),
    Migration(
        2,
        "scenarios: derived_from, the id of the scenario an edit was saved from (lineage; not part of the content)",
        sqlite=("ALTER TABLE scenarios ADD COLUMN derived_from TEXT",),
        postgresql=("ALTER TABLE scenarios ADD COLUMN IF NOT EXISTS derived_from TEXT",),
    ),
    Migration(
        3,
        "datasets: content id, summary (JSON), canonical SI content (CSV), time saved",
        sqlite=(
            """CREATE TABLE IF NOT EXISTS datasets (
                id       TEXT PRIMARY KEY,
                summary  TEXT NOT NULL,
                content  TEXT NOT NULL,
                saved_at REAL NOT NULL
            )""",
        ),
        postgresql=(
            """CREATE TABLE IF NOT EXISTS datasets (
                id       TEXT PRIMARY KEY,
                summary  TEXT NOT NULL,
                content  TEXT NOT NULL,
                saved_at DOUBLE PRECISION NOT NULL
            )""",
        ),
    ),
)

LATEST = MIGRATIONS[-1].version

_TABLE = """CREATE TABLE IF NOT EXISTS schema_migrations (
    version     INTEGER PRIMARY KEY,
    description TEXT NOT NULL,
    applied_at  {time_type} NOT NULL
)"""


class SchemaTooNewError(RuntimeError):
    """The database was migrated by a newer exomap than this one."""


def _check_version(current: int, where: str) -> None:
    if current > LATEST:
        raise SchemaTooNewError(
            f"the store at {where} has schema version {current}, newer than this exomap knows ({LATEST}): "
            "upgrade exomap on this instance, or point it at another database"
        )


def apply_sqlite(conn: Any, where: str) -> list[int]:
    """Apply pending migrations to an open ``sqlite3`` connection (autocommit off); return the versions applied."""
    import time

    applied: list[int] = []
    conn.execute(_TABLE.format(time_type="REAL"))
    conn.commit()
    for migration in MIGRATIONS:
        # BEGIN IMMEDIATE takes the write lock first, so two processes never apply the same migration.
        conn.execute("BEGIN IMMEDIATE")
        try:
            current = conn.execute("SELECT COALESCE(MAX(version), 0) FROM schema_migrations").fetchone()[0]
            _check_version(current, where)
            if migration.version <= current:
                conn.execute("ROLLBACK")
                continue
            for statement in migration.statements("sqlite"):
                conn.execute(statement)
            conn.execute(
                "INSERT INTO schema_migrations (version, description, applied_at) VALUES (?, ?, ?)",
                (migration.version, migration.description, time.time()),
            )
            conn.execute("COMMIT")
        except BaseException:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            raise
        applied.append(migration.version)
    if not applied:
        current = conn.execute("SELECT COALESCE(MAX(version), 0) FROM schema_migrations").fetchone()[0]
        _check_version(current, where)
    return applied


def apply_postgresql(conn: Any, where: str) -> list[int]:
    """Apply pending migrations on a ``psycopg`` connection; return the versions applied."""
    applied: list[int] = []
    with conn.transaction():
        # the lock is held until this transaction ends: concurrent starts wait here, then find nothing to do
        conn.execute("SELECT pg_advisory_xact_lock(%s)", (ADVISORY_LOCK_KEY,))
        conn.execute(_TABLE.format(time_type="TIMESTAMPTZ"))
        current = conn.execute("SELECT COALESCE(MAX(version), 0) FROM schema_migrations").fetchone()[0]
        _check_version(current, where)
        for migration in MIGRATIONS:
            if migration.version <= current:
                continue
            for statement in migration.statements("postgresql"):
                conn.execute(statement)
            conn.execute(
                "INSERT INTO schema_migrations (version, description, applied_at) VALUES (%s, %s, now())",
                (migration.version, migration.description),
            )
            applied.append(migration.version)
    return applied
