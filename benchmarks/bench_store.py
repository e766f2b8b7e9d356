"""Store latency: save, get and list on SQLite (the baseline) and on PostgreSQL, side by side in one process.

Both backends run through the same ``ScenarioStore`` code (exomap.web.store). PostgreSQL is a throw-away server
started by tests/pgserver.py on a free port on 127.0.0.1 with ``fsync=on`` (durable, as in production), unless
``--postgres-url`` names one; SQLite is the default file store (WAL, ``synchronous=NORMAL``) in a temporary
folder. Measured, each on ``--rows`` different scenarios (validation and canonical JSON are done once
beforehand, so the numbers are the database's):

- insert: ``Database.insert_if_absent`` of a new row (one transaction, committed on return);
- save again: ``ScenarioStore.save`` of a scenario already stored (validation + insert that does nothing + read);
- get: ``ScenarioStore.get`` by id;
- page: ``ScenarioStore.page`` of 100 summaries (what ``GET /api/v1/scenarios`` reads);
- list all: ``ScenarioStore.list``, every row with its document (what a study's "all saved" reads).

Printed: median and 95th percentile per operation and backend [ms] and the ratio PostgreSQL / SQLite of the
medians, with the load average first and last (another job on the 2 cores changes the numbers).

    python benchmarks/bench_store.py [--rows 200] [--postgres-url postgresql://...]
"""

from __future__ import annotations

import argparse
import copy
import json
import os
import statistics
import sys
import tempfile
import time
from importlib import resources
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))

from exomap.web.store import Row, ScenarioStore, canonicalize, open_database  # noqa: E402


def rows(n: int) -> tuple[list[dict], list[Row]]:
    doc = json.loads((resources.files("exomap.demos") / "adiabatic-second-order.json").read_text(encoding="utf-8"))
    docs, out = [], []
    for k in range(n):
        d = copy.deepcopy(doc)
        d["title"] = f"bench scenario {k}"
        docs.append(d)
        sid, text, title, description = canonicalize(d)
        out.append(Row(sid, title, description, text, time.time()))
    return docs, out


def stats(samples: list[float]) -> tuple[float, float]:
    samples = sorted(samples)
    return statistics.median(samples) * 1e3, samples[int(0.95 * (len(samples) - 1))] * 1e3


def measure(store: ScenarioStore, docs: list[dict], table: list[Row]) -> dict[str, tuple[float, float]]:
    db = store.database
    timings: dict[str, list[float]] = {"insert": [], "save again": [], "get": [], "page": [], "list all": []}
    for row in table:
        t0 = time.perf_counter()
        assert db.insert_if_absent(row)
        timings["insert"].append(time.perf_counter() - t0)
    for doc in docs[:50]:
        t0 = time.perf_counter()
        _, created = store.save(doc)
        timings["save again"].append(time.perf_counter() - t0)
        assert not created
    for row in table:
        t0 = time.perf_counter()
        assert store.get(row.id) is not None
        timings["get"].append(time.perf_counter() - t0)
    for _ in range(20):
        t0 = time.perf_counter()
        store.page(limit=100, offset=0)
        timings["page"].append(time.perf_counter() - t0)
    for _ in range(20):
        t0 = time.perf_counter()
        listed = store.list()
        timings["list all"].append(time.perf_counter() - t0)
    assert len([s for s in listed if not s.demo]) == len(table)
    return {k: stats(v) for k, v in timings.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=200, help="scenarios saved, read and listed (default 200)")
    parser.add_argument("--postgres-url", help="an existing PostgreSQL database (default: start a throw-away one)")
    args = parser.parse_args()
    print(f"load average (1, 5, 15 min) at start: {os.getloadavg()}")
    docs, table = rows(args.rows)
    server = None
    url = args.postgres_url
    if url is None:
        from pgserver import PostgresServer, find_bindir

        bindir = find_bindir()
        if bindir is None:
            sys.exit("PostgreSQL server binaries not found (apt-get install postgresql-15), or give --postgres-url")
        server = PostgresServer(bindir)
        server.start(fsync=True)
        url = server.new_database()
    try:
        with tempfile.TemporaryDirectory() as tmp:
            results = {}
            for name, spec in (("SQLite", None), ("PostgreSQL", url)):
                store = ScenarioStore(open_database(spec, Path(tmp)))
                results[name] = measure(store, docs, table)
                store.close()
    finally:
        if server is not None:
            server.stop()
    print(f"{args.rows} rows; times in ms, median / 95th percentile")
    print(f"  {'operation':<12} {'SQLite':>17} {'PostgreSQL':>17}   ratio PG/SQLite (medians)")
    for op in results["SQLite"]:
        (sm, sp), (pm, pp) = results["SQLite"][op], results["PostgreSQL"][op]
        print(f"  {op:<12} {sm:7.2f} / {sp:7.2f} {pm:7.2f} / {pp:7.2f}   x{pm / sm:6.2f}")
    print(f"load average (1, 5, 15 min) at end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
