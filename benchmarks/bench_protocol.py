"""exomap's guarded HTTP protocol (``exomap.web.protocol``: header timeout, early 414/431) against uvicorn's plain
h11 protocol, which it extends: the same app in two servers on 127.0.0.1, requests interleaved between them.

Measured, as medians and mins over ``REPEATS`` rounds: ``GET /api/v1/health`` and a cached 200 x 200 map
(0.75 MB answer, ``POST /api/v1/map``), on each server. Printed with the ratios guarded / plain (of medians and
of mins) and the load average. No target: the guard only looks at request heads, so the ratios should be 1
within the run-to-run spread (on the shared 2-CPU machine about +-15 % for medians; mins are steadier).
Loopback only; bounded (a few hundred requests).
"""

from __future__ import annotations

import os
import statistics
import sys
import time
from contextlib import ExitStack
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from bench_http_map import DEMO, POINTS, Server  # noqa: E402

REPEATS = 200


def main() -> int:
    import httpx

    print(f"load average at the start: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    times: dict[tuple[str, str], list[float]] = {}
    body = {"scenario_id": DEMO, "points": list(POINTS)}
    with ExitStack() as stack:
        clients = {}
        for kind in ("guarded", "plain"):
            url = stack.enter_context(Server(workers=1, protocol=kind))
            clients[kind] = stack.enter_context(httpx.Client(base_url=url, timeout=60))
            clients[kind].post("/api/v1/map", json=body).raise_for_status()  # computed once, then cached
        for _ in range(REPEATS):
            for kind, client in clients.items():
                t0 = time.perf_counter()
                client.get("/api/v1/health").raise_for_status()
                t1 = time.perf_counter()
                r = client.post("/api/v1/map", json=body)
                t2 = time.perf_counter()
                assert r.status_code == 200 and r.headers["x-exomap-cache"] == "hit"
                times.setdefault((kind, "health"), []).append(t1 - t0)
                times.setdefault((kind, "cached map"), []).append(t2 - t1)
    print(f"exomap protocol benchmark: guarded (exomap serve) vs plain h11, {REPEATS} rounds, {os.cpu_count()} CPUs")
    for (kind, what), values in times.items():
        print(
            f"  {kind:<8} {what:<11} median {statistics.median(values) * 1e3:7.2f} ms  (min {min(values) * 1e3:6.2f})"
        )
    for what in ("health", "cached map"):
        g, p = times[("guarded", what)], times[("plain", what)]
        print(
            f"  ratio guarded / plain, {what:<11} medians {statistics.median(g) / statistics.median(p):5.3f}, "
            f"mins {min(g) / min(p):5.3f}"
        )
    print(f"load average at the end: {' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
