"""A throw-away PostgreSQL server for the tests: initdb + pg_ctl in a temporary folder, on a free local port.

Debian's server binaries live in /usr/lib/postgresql/<version>/bin (package postgresql-15 or postgresql); `make
install` and `.ci/run` install them when they are missing. When they are missing anyway the tests that need the
server FAIL (they never skip), so a CI machine without PostgreSQL cannot pass silently.

initdb refuses to run as root, so as root every server command runs as the ``postgres`` system user
(``runuser -u postgres``, that user is made by the Debian package) in a folder it owns; as any other user the
commands run as that user. The server listens on 127.0.0.1 only, with ``trust`` authentication for the
``exomap`` role, and ``fsync=off``: the tests kill exomap processes, not the machine, and a killed process
loses nothing the kernel already has, so flushing to disk would only slow the suite down.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
import uuid
from pathlib import Path

PG_VERSION_DIR = "/usr/lib/postgresql/15/bin"


def find_bindir() -> Path | None:
    """The folder of initdb and pg_ctl: PostgreSQL 15 first, then the newest other version, then PATH."""
    candidates = [PG_VERSION_DIR] + sorted(
        glob.glob("/usr/lib/postgresql/*/bin"), key=lambda p: int(Path(p).parent.name), reverse=True
    )
    for folder in candidates:
        if Path(folder, "initdb").is_file() and Path(folder, "pg_ctl").is_file():
            return Path(folder)
    initdb = shutil.which("initdb")
    if initdb and shutil.which("pg_ctl"):
        return Path(initdb).parent
    return None


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class PostgresServer:
    """One PostgreSQL server in a temporary folder; ``start()``, ``new_database()``, ``stop()``."""

    def __init__(self, bindir: Path) -> None:
        self.bindir = bindir
        self.root = Path(tempfile.mkdtemp(prefix="exomap-pg-"))
        self.data = self.root / "data"
        self.port = free_port()
        self._as_root = os.geteuid() == 0
        if self._as_root:
            try:
                user = pwd.getpwnam("postgres")
            except KeyError as exc:
                raise RuntimeError(
                    "running as root and there is no 'postgres' user to run initdb as (install postgresql-15)"
                ) from exc
            os.chown(self.root, user.pw_uid, user.pw_gid)
        self.url_base = f"postgresql://exomap@127.0.0.1:{self.port}"

    def _run(self, *args: str, timeout: float = 120) -> None:
        command = [str(a) for a in args]
        if self._as_root:
            command = ["runuser", "-u", "postgres", "--", *command]
        # cwd: the postgres user must be able to stand in the working folder
        done = subprocess.run(command, cwd=self.root, capture_output=True, text=True, timeout=timeout)
        if done.returncode != 0:
            log = self.root / "server.log"
            tail = log.read_text(errors="replace")[-2000:] if log.exists() else ""
            raise RuntimeError(f"{' '.join(command)} failed ({done.returncode}):\n{done.stdout}{done.stderr}{tail}")

    def start(self, *, fsync: bool = False) -> None:
        """initdb and start; ``fsync=True`` for a durable server as in production (the benchmarks)."""
        self._fsync = fsync
        self._run(
            self.bindir / "initdb",
            "-D",
            self.data,
            "-U",
            "exomap",
            "--auth=trust",
            "-E",
            "UTF8",
            "--locale=C",
            "--no-sync",
        )
        self._pg_ctl_start()

    def _pg_ctl_start(self) -> None:
        options = (
            f"-p {self.port} -k {self.root} -c listen_addresses=127.0.0.1 -c fsync={'on' if self._fsync else 'off'} "
            "-c max_connections=200"
        )
        self._run(
            self.bindir / "pg_ctl",
            "-D",
            self.data,
            "-o",
            options,
            "-l",
            self.root / "server.log",
            "-w",
            "-t",
            "60",
            "start",
        )

    def restart(self) -> None:
        """Start the server again on the same port and data (after a crash: it recovers from its log)."""
        self._pg_ctl_start()

    def url(self, dbname: str = "postgres") -> str:
        return f"{self.url_base}/{dbname}"

    def new_database(self) -> str:
        """A fresh, empty database; its URL."""
        import psycopg

        name = "t_" + uuid.uuid4().hex[:12]
        with psycopg.connect(self.url(), autocommit=True) as conn:
            conn.execute(f'CREATE DATABASE "{name}"')
        return self.url(name)

    def drop_database(self, url: str) -> None:
        import psycopg

        name = url.rsplit("/", 1)[1]
        with psycopg.connect(self.url(), autocommit=True) as conn:
            conn.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')

    def stop(self) -> None:
        try:
            if (self.data / "postmaster.pid").exists():
                self._run(self.bindir / "pg_ctl", "-D", self.data, "-m", "immediate", "-w", "stop", timeout=60)
        finally:
            shutil.rmtree(self.root, ignore_errors=True)
