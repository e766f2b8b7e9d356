"""Faults of the SQLite store (issue 12, defect 6): at start one clear line naming the file and the fix; while
serving 503 ``store_unavailable``, one bad row never hides the others, a save into a damaged file is never
acknowledged. Pagination of the listing (defect 3).

Read-only folders are made with ``chattr +i`` when the tests run as root (root ignores permission bits) and
with ``chmod`` otherwise.
"""

from __future__ import annotations

import contextlib
import copy
import os
import shutil
import sqlite3
import stat
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest
from exomap.web.store import ScenarioStore, SQLiteDatabase, StoreUnavailableError
from web_helpers import assert_error
from web_scenarios import ADIABATIC

FILE = SQLiteDatabase.FILE_NAME


def _docs(n: int) -> list[dict]:
    out = []
    for k in range(n):
        doc = copy.deepcopy(ADIABATIC)
        doc["title"] = f"Tank {k} (invented)"  # the title is content: each document has its own id
        out.append(doc)
    return out


def _filled(folder: Path, n: int = 40) -> list[str]:
    """A store in ``folder`` with ``n`` scenarios, closed (checkpointed into the main file)."""
    store = ScenarioStore(folder)
    ids = [store.save(doc)[0].id for doc in _docs(n)]
    store.close()
    assert not (folder / f"{FILE}-wal").exists() or (folder / f"{FILE}-wal").stat().st_size == 0
    return ids


@contextlib.contextmanager
def read_only(*paths: Path) -> Iterator[None]:
    """Make files and folders unwritable for this process, and writable again afterwards."""
    if os.geteuid() == 0:
        chattr = shutil.which("chattr")
        if chattr is None:
            pytest.fail("running as root without chattr: cannot make a folder read-only for this test")
        done: list[Path] = []
        try:
            for p in paths:
                result = subprocess.run([chattr, "+i", str(p)], capture_output=True, text=True)
                if result.returncode != 0:
                    pytest.fail(f"chattr +i {p} failed ({result.stderr.strip()}): cannot run this test here")
                done.append(p)
            yield
        finally:
            for p in reversed(done):
                subprocess.run([chattr, "-i", str(p)], check=True)
    else:
        modes = {p: p.stat().st_mode for p in paths}
        try:
            for p in paths:
                p.chmod(stat.S_IMODE(modes[p]) & ~0o222)
            yield
        finally:
            for p, mode in modes.items():
                p.chmod(stat.S_IMODE(mode))


# -- at start ------------------------------------------------------------------------------------------------------
def test_data_folder_that_is_a_file(tmp_path: Path) -> None:
    folder = tmp_path / "data"
    folder.write_text("not a folder")
    with pytest.raises(StoreUnavailableError, match=r"is a file, not a folder") as info:
        ScenarioStore(folder)
    assert str(folder) in str(info.value) and "EXOMAP_DATA_DIR" in str(info.value)


def test_database_path_that_is_a_folder(tmp_path: Path) -> None:
    (tmp_path / FILE).mkdir()
    with pytest.raises(StoreUnavailableError, match=r"is a folder, not the store's database file") as info:
        ScenarioStore(tmp_path)
    assert str(tmp_path / FILE) in str(info.value)


def test_garbage_file_is_not_a_database(tmp_path: Path) -> None:
    (tmp_path / FILE).write_bytes(b"\x00garbage" * 4096)
    with pytest.raises(StoreUnavailableError, match=r"is damaged \(it is not an SQLite database") as info:
        ScenarioStore(tmp_path)
    assert "restore it from a backup" in str(info.value) and str(tmp_path / FILE) in str(info.value)


def test_truncated_database_is_refused(tmp_path: Path) -> None:
    _filled(tmp_path)
    path = tmp_path / FILE
    size = path.stat().st_size
    with open(path, "r+b") as f:
        f.truncate(size // 2)
    with pytest.raises(StoreUnavailableError, match=r"is damaged \(the file is cut short"):
        ScenarioStore(tmp_path)


def test_damaged_page_fails_the_integrity_check(tmp_path: Path) -> None:
    _filled(tmp_path)
    path = tmp_path / FILE
    page = int.from_bytes(path.read_bytes()[16:18], "big")
    with open(path, "r+b") as f:  # scribble over the third page, keeping the size and the header
        f.seek(2 * page)
        f.write(b"\xa5" * page)
    with pytest.raises(StoreUnavailableError, match=r"is damaged \((integrity check|database disk image)"):
        ScenarioStore(tmp_path)


def test_read_only_folder_is_refused_at_start(tmp_path: Path) -> None:
    folder = tmp_path / "data"
    folder.mkdir()
    with read_only(folder), pytest.raises(StoreUnavailableError, match=r"is read-only for this user") as info:
        ScenarioStore(folder)
    assert str(folder) in str(info.value)


def test_read_only_database_file_is_refused_at_start(tmp_path: Path) -> None:
    _filled(tmp_path, 2)
    with read_only(tmp_path / FILE), pytest.raises(StoreUnavailableError, match=r"read-only for this user"):
        ScenarioStore(tmp_path)


def test_serve_prints_one_line_and_exits_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    import argparse

    from exomap.cli import serve

    (tmp_path / FILE).write_bytes(b"garbage" * 100)
    parser = argparse.ArgumentParser()
    serve.add_parser(parser.add_subparsers())
    assert serve.run(parser.parse_args(["serve", "--data-dir", str(tmp_path)])) == 2
    err = capsys.readouterr().err.strip()
    assert "Traceback" not in err
    assert len(err.splitlines()) == 1, err
    assert str(tmp_path / FILE) in err and "backup" in err


def test_sound_store_uses_full_sync(tmp_path: Path) -> None:
    store = ScenarioStore(tmp_path)
    # PRAGMA synchronous: 2 is FULL (sqlite.org/pragma.html#pragma_synchronous)
    assert store.database._conn().execute("PRAGMA synchronous").fetchone()[0] == 2
    store.close()


# -- while serving ------------------------------------------------------------------------------------------------
def test_one_bad_row_never_hides_the_others(make_client, tmp_path: Path) -> None:
    data = tmp_path / "data"
    ids = _filled(data, 3)
    conn = sqlite3.connect(data / FILE)
    with conn:  # a row whose text is not UTF-8 (written by some other tool, or a damaged sector)
        conn.execute(
            "INSERT INTO scenarios (id, title, description, document, saved_at) "
            "VALUES ('00000000000000ff', CAST(X'54616e6bff' AS TEXT), CAST(X'ff' AS TEXT), CAST(X'7bff' AS TEXT), 1e12)"
        )
    conn.close()
    client = make_client(data_dir=data)
    listing = client.get("/api/v1/scenarios")
    assert listing.status_code == 200, listing.text
    listed = [s["id"] for s in listing.json()["scenarios"] if not s["demo"]]
    assert listed == [*ids, "00000000000000ff"]
    bad = listing.json()["scenarios"][-1]
    assert bad["title"] == "Tank\ufffd"  # the bad byte is shown as the replacement character
    for sid in ids:
        assert client.get(f"/api/v1/scenarios/{sid}").status_code == 200
    assert_error(client.get("/api/v1/scenarios/00000000000000ff"), 503, "store_unavailable")
    assert_error(client.get("/api/v1/scenarios/00000000000000ff/steady"), 503, "store_unavailable")


def test_save_into_an_overwritten_file_is_never_acknowledged(make_client, tmp_path: Path) -> None:
    data = tmp_path / "data"
    _filled(data, 3)
    client = make_client(data_dir=data)
    assert client.get("/api/v1/scenarios").status_code == 200
    path = data / FILE
    with open(path, "r+b") as f:  # another program overwrites the file while the server runs
        f.write(b"\x00" * path.stat().st_size)
    doc = copy.deepcopy(ADIABATIC)
    doc["title"] = "saved after the damage"
    response = client.post("/api/v1/scenarios", json=doc)
    err = assert_error(response, 503, "store_unavailable")
    assert str(path) in err["message"]
    assert int(response.headers["retry-after"]) > 0


def test_read_only_store_at_run_time_is_a_503(make_client, tmp_path: Path) -> None:
    data = tmp_path / "data"
    _filled(data, 1)
    client = make_client(data_dir=data)
    store = client.app.state.store
    store.database.close()  # connections opened from here on see the store as the file system has it now
    files = [p for p in data.iterdir() if p.is_file()]
    with read_only(data, *files):
        doc = copy.deepcopy(ADIABATIC)
        doc["title"] = "saved into a read-only store"
        response = client.post("/api/v1/scenarios", json=doc)
        assert_error(response, 503, "store_unavailable")
        # reading: SQLite may or may not read a WAL database whose -shm file it cannot write (it depends on how
        # the files were made read-only); either way the answer is the listing or a 503, never a 500
        listing = client.get("/api/v1/scenarios")
        if listing.status_code != 200:
            assert_error(listing, 503, "store_unavailable")
    # writable again: the store serves and saves as before
    assert client.post("/api/v1/scenarios", json=doc).status_code == 201


# -- listing: pages of summaries ----------------------------------------------------------------------------------
def test_listing_is_paginated_with_summaries(make_client, tmp_path: Path) -> None:
    data = tmp_path / "data"
    ids = _filled(data, 7)
    client = make_client(data_dir=data)
    first = client.get("/api/v1/scenarios?limit=5").json()
    demos = [s for s in first["scenarios"] if s["demo"]]
    n_demo = len(demos)
    assert first["total"] == n_demo + 7
    assert first["limit"] == 5 and first["offset"] == 0 and len(first["scenarios"]) == 5
    seen = [s["id"] for s in first["scenarios"]]
    url = first["next"]
    while url is not None:
        page = client.get(url).json()
        seen += [s["id"] for s in page["scenarios"]]
        url = page["next"]
    assert len(seen) == n_demo + 7 == len(set(seen))
    assert seen[n_demo:] == ids
    assert_error(client.get("/api/v1/scenarios?limit=0"), 422, "invalid_request", "limit")
    assert_error(client.get("/api/v1/scenarios?limit=501"), 422, "invalid_request", "limit")
    assert_error(client.get("/api/v1/scenarios?offset=-1"), 422, "invalid_request", "offset")


def test_listing_cuts_long_descriptions(make_client, tmp_path: Path) -> None:
    from exomap.web.store import SUMMARY_CHARS

    client = make_client()
    doc = copy.deepcopy(ADIABATIC)
    doc["description"] = "word " * 900  # 4,500 characters: within the bound of a description
    sid = client.post("/api/v1/scenarios", json=doc).json()["id"]
    listed = next(s for s in client.get("/api/v1/scenarios").json()["scenarios"] if s["id"] == sid)
    assert len(listed["description"]) <= SUMMARY_CHARS and listed["description"].endswith("\u2026")
    # the whole text is in the document
    assert client.get(f"/api/v1/scenarios/{sid}").json()["description"] == doc["description"]


# -- kill -9 of the server during concurrent saves ----------------------------------------------------------------
@pytest.mark.slow
def test_kill_9_of_the_server_during_concurrent_saves_loses_no_acknowledged_save(tmp_path: Path) -> None:
    """A real ``exomap serve``; eight clients save different scenarios over HTTP; the server is killed with
    SIGKILL mid-stream; the store, opened again (integrity check included), holds every acknowledged id with
    exactly the canonical document of what was sent."""
    import signal
    import sys
    import threading
    import time

    import httpx
    from exomap import schema
    from test_serve import free_port

    data = tmp_path / "data"
    port = free_port()
    launch = "import sys; from exomap.cli import main; sys.exit(main())"
    proc = subprocess.Popen(
        [sys.executable, "-c", launch, "serve", "--port", str(port), "--data-dir", str(data), "--workers", "1"],
        env={**os.environ, "EXOMAP_EXECUTOR": "thread"},
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 90
        while True:
            assert proc.poll() is None and time.monotonic() < deadline, "exomap serve did not start"
            try:
                if httpx.get(url + "/api/v1/health", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                time.sleep(0.1)
        docs = _docs(400)
        acknowledged: list[tuple[str, int]] = []
        lock = threading.Lock()
        stop = threading.Event()

        def client(start: int) -> None:
            with httpx.Client(base_url=url, timeout=10) as http:
                for k in range(start, len(docs), 8):
                    if stop.is_set():
                        return
                    try:
                        response = http.post("/api/v1/scenarios", json=docs[k])
                    except httpx.HTTPError:
                        return  # the server is gone
                    if response.status_code in (200, 201):
                        with lock:
                            acknowledged.append((response.json()["id"], k))

        threads = [threading.Thread(target=client, args=(s,)) for s in range(8)]
        for t in threads:
            t.start()
        deadline = time.monotonic() + 60
        while len(acknowledged) < 40 and time.monotonic() < deadline:
            time.sleep(0.01)
        os.kill(proc.pid, signal.SIGKILL)  # in the middle of eight clients' saves
        proc.wait(timeout=30)
        stop.set()
        for t in threads:
            t.join(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert len(acknowledged) >= 40
    assert len(acknowledged) < len(docs), "every save finished before the kill: nothing was interrupted"
    store = ScenarioStore(data)  # the restart: start-up checks, integrity check included
    try:
        for sid, k in acknowledged:
            stored = store.get(sid)
            assert stored is not None, f"acknowledged save of document {k} ({sid}) was lost"
            assert stored.document == schema.canonical_json(docs[k])  # byte for byte
        assert store.save(docs[-1])[0].id == schema.scenario_id(docs[-1])  # and the store still takes saves
    finally:
        store.close()
