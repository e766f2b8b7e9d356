"""A 200 x 200 operating map of the adiabatic demo through HTTP, against the in-process core call.

A real uvicorn server (``exomap.web.app.create_app`` with its default process pool, the protocol and options of
``exomap serve``) runs in a child process on a free loopback port; the client is httpx in this process.
Measured, each as a median (and min) over repeats, the in-process rows interleaved with the HTTP requests so
both see the same load on a shared machine:

* baseline: ``operating_map(sc, points=(200, 200))`` in this process; ``to_dict()``; that document encoded by
  the standard library's ``json.dumps`` and by orjson; the service's encoding (orjson straight from the arrays,
  ``exomap.web.jobs.map_document``, checked byte-identical); gzip level 1 by zlib and by ISA-L (the service's),
  and the client's gunzip;
* HTTP, not cached (a new map window per request, so every request computes), for a client on this machine
  (the answer as it is) and for one behind a proxy (``X-Forwarded-For``: gzipped): end to end (request sent to
  body received), then with ``json.loads``; and the breakdown from the answer's ``Server-Timing`` (dispatch,
  compute, encode, return, gzip, the rest of the app) plus what is left for HTTP and the client, each as a ratio
  to the in-process core call;
* HTTP, cached: the same requests repeated (answered from the cache).

``--server-src DIR`` runs the server from another source tree (e.g. an earlier commit's ``server/``), for a
before/after comparison against this tree's baseline in one run.

Targets (project goals, issue 12): end to end not cached <= 40 ms median, cached < 20 ms median, on an otherwise
idle machine (on a busy one read the ratios and the breakdown). Loopback only; bounded (a few dozen requests).
"""

from __future__ import annotations

import json
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import time
from importlib import resources
from pathlib import Path

DEMO = "adiabatic-second-order"
POINTS = (200, 200)
REPEATS = 9

SERVER_CODE = """
import sys, uvicorn
from exomap.web.app import create_app
from exomap.web.protocol import uvicorn_options
from exomap.web.settings import Settings
settings = Settings(data_dir=sys.argv[1], host="127.0.0.1", port=int(sys.argv[2]), workers=int(sys.argv[3]))
options = uvicorn_options(settings)
if sys.argv[4] == "plain":  # uvicorn's own h11 protocol instead of exomap's guarded one (bench_protocol.py)
    options["http"] = "h11"
uvicorn.run(create_app(settings, warm_up=True), log_level="warning", **options)
"""


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """``with Server() as base_url:`` runs the app under uvicorn in a child process on a free loopback port."""

    def __init__(self, workers: int = 2, src: str | None = None, protocol: str = "guarded") -> None:
        self.workers = workers
        self.src = src  # another source tree of exomap to run the server from (a before/after comparison)
        self.protocol = protocol  # "guarded" (exomap serve's) or "plain" (uvicorn's h11)
        self.proc: subprocess.Popen | None = None
        self._tmp = tempfile.TemporaryDirectory(prefix="exomap-bench-")

    def __enter__(self) -> str:
        import httpx

        port = free_port()
        env = dict(os.environ)
        if self.src:
            env["PYTHONPATH"] = os.pathsep.join(p for p in (self.src, env.get("PYTHONPATH")) if p)
        self.proc = subprocess.Popen(
            [sys.executable, "-c", SERVER_CODE, self._tmp.name, str(port), str(self.workers), self.protocol],
            stdout=subprocess.DEVNULL,
            env=env,
        )
        self.base_url = f"http://127.0.0.1:{port}"
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"the server exited with status {self.proc.returncode}")
            try:
                if httpx.get(self.base_url + "/api/v1/health", timeout=1).status_code == 200:
                    return self.base_url
            except httpx.HTTPError:
                pass
            time.sleep(0.1)
        raise RuntimeError("the server did not answer within 60 s")

    def __exit__(self, *exc: object) -> None:
        if self.proc is not None and self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(timeout=15)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait()
        self._tmp.cleanup()

    @property
    def pid(self) -> int:
        assert self.proc is not None
        return self.proc.pid


def tree_rss_bytes(pid: int) -> int:
    """Resident memory of a process and all its descendants (Linux /proc), in bytes."""
    total = 0
    stack = [pid]
    seen = set()
    while stack:
        p = stack.pop()
        if p in seen:
            continue
        seen.add(p)
        try:
            status = Path(f"/proc/{p}/status").read_text()
        except OSError:
            continue
        for line in status.splitlines():
            if line.startswith("VmRSS:"):
                total += int(line.split()[1]) * 1024
        for task in Path(f"/proc/{p}/task").glob("*"):
            try:
                stack.extend(int(c) for c in (task / "children").read_text().split())
            except OSError:
                pass
    return total


def demo_scenario():
    from exomap import schema

    doc = json.loads(resources.files("exomap.demos").joinpath(f"{DEMO}.json").read_text(encoding="utf-8"))
    return schema.parse_scenario(doc).to_core()


def ms(values: list[float]) -> str:
    lo, hi = min(values) * 1e3, max(values) * 1e3
    return f"median {statistics.median(values) * 1e3:8.1f} ms  (min {lo:7.1f}, max {hi:7.1f})"


def load_average() -> str:
    with open("/proc/loadavg") as f:
        return " ".join(f.read().split()[:3])


def server_timing(header: str) -> dict[str, float]:
    """``Server-Timing`` -> {phase: seconds}."""
    out = {}
    for item in header.split(","):
        name, _, dur = item.strip().partition(";dur=")
        if name and dur:
            out[name] = float(dur) / 1e3
    return out


#: Phases of a computed answer's Server-Timing, in the order they happen (exomap.web.compression).
PHASES = ("dispatch", "compute", "encode", "return", "gzip")


def main() -> int:
    import argparse
    import gzip
    import zlib

    import httpx
    from exomap.core.opmap import operating_map
    from exomap.web.jobs import Answer, dumps, map_document
    from exomap.web.runner import _tune_allocator

    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument(
        "--server-src",
        help="run the server from this source folder (e.g. a checkout's server/ of an earlier commit), for a "
        "before/after comparison in one run; the baseline is always this tree's",
    )
    args = parser.parse_args()
    sc = demo_scenario()
    spec = sc.map
    tau_range = spec.tau_range if spec else None
    T_lo, T_hi = spec.T_in_range if spec else (None, None)
    print(f"load average at the start: {load_average()}")

    def window(i: int) -> tuple[float, float]:
        return (T_lo, T_hi + 1e-3 * (i + 1))  # a new map window per call: nothing is cached anywhere

    # -- baseline: the core in this process, interleaved with the HTTP requests below -----------------------------
    # the baseline runs with the allocator settings of the server's worker processes (exomap.web.runner), so
    # the comparison is of the same computation: without them this process, which also encodes and compresses
    # between maps, faults fresh pages in every map (~25-50 % slower here)
    _tune_allocator()
    operating_map(sc, points=POINTS)  # warm (imports, caches)
    base: dict[str, list[float]] = {
        k: [] for k in ("core", "to_dict", "json", "orjson", "array", "gzip", "isal", "gunzip")
    }

    def in_process(i: int) -> None:
        t0 = time.perf_counter()
        result = operating_map(sc, tau_range=tau_range, T_in_range=window(i), points=POINTS)
        t1 = time.perf_counter()
        doc = result.to_dict()
        t2 = time.perf_counter()
        json.dumps(doc, separators=(",", ":"), default=lambda o: o.tolist())
        t3 = time.perf_counter()
        body = dumps(doc)
        t4 = time.perf_counter()
        fast = dumps(map_document(result))
        t5 = time.perf_counter()
        gz = gzip.compress(fast, compresslevel=1, mtime=0)
        t6 = time.perf_counter()
        Answer(fast).gzipped()
        t7 = time.perf_counter()
        zlib.decompress(gz, 31)
        t8 = time.perf_counter()
        assert fast == body, "the array encoding differs from to_dict()"
        times = (t1 - t0, t2 - t1, t3 - t2, t4 - t3, t5 - t4, t6 - t5, t7 - t6, t8 - t7)
        for k, v in zip(base, times, strict=True):
            base[k].append(v)

    # -- HTTP ---------------------------------------------------------------------------------------------------
    runs: dict[str, list[dict[str, float]]] = {}
    with Server(src=args.server_src) as url, httpx.Client(base_url=url, timeout=60) as client:
        sid = next(s["id"] for s in client.get("/api/v1/scenarios").json()["scenarios"] if s["name"] == DEMO)
        # warm the path once (first request through the pool)
        client.post("/api/v1/map", json={"scenario_id": sid, "points": list(POINTS)}).raise_for_status()

        def body_of(i: int) -> dict:
            return {
                "scenario_id": sid,
                "points": list(POINTS),
                "residence_time": list(tau_range),
                "feed_temperature": list(window(i)),
            }

        def request(name: str, i: int, headers: dict[str, str], cache: str) -> None:
            t0 = time.perf_counter()
            r = client.post("/api/v1/map", json=body_of(i), headers=headers)
            t1 = time.perf_counter()
            doc = json.loads(r.content)
            t2 = time.perf_counter()
            r.raise_for_status()
            assert r.headers["x-exomap-cache"] == cache, r.headers
            assert len(doc["region"]) == POINTS[1] and len(doc["region"][0]) == POINTS[0]
            row = {
                "e2e": t1 - t0,
                "parsed": t2 - t0,
                "raw": len(r.content),
                "wire": int(r.headers.get("content-length", 0)),
                "gzip?": float(r.headers.get("content-encoding") == "gzip"),
            }
            runs.setdefault(name, []).append(row | server_timing(r.headers.get("server-timing", "")))

        # a client on this machine (the usual `exomap serve`): the answer is sent as it is; a client elsewhere
        # behind a proxy on this machine (X-Forwarded-For): the answer is gzipped. Each round also runs the core
        # in this process, so both see the same load on a shared machine.
        proxied = {"X-Forwarded-For": "192.0.2.10"}
        for i in range(REPEATS):
            in_process(i)
            request("loopback, not cached", 100 + i, {}, "miss")
            request("via a proxy (gzip), not cached", 200 + i, proxied, "miss")
        for _ in range(REPEATS * 3):
            request("loopback, cached", 100, {}, "hit")
            request("via a proxy (gzip), cached", 200, proxied, "hit")

        get_cached = []
        lo, hi = tau_range
        for _ in range(REPEATS * 3):
            t0 = time.perf_counter()
            r = client.get(
                f"/api/v1/scenarios/{sid}/map",
                params={
                    "residence_time": f"{lo!r},{hi!r}",
                    "feed_temperature": f"{T_lo!r},{window(100)[1]!r}",
                    "points": f"{POINTS[0]},{POINTS[1]}",
                },
            )
            t1 = time.perf_counter()
            r.raise_for_status()
            assert r.headers["x-exomap-cache"] == "hit"
            get_cached.append(t1 - t0)

    med = statistics.median
    core = med(base["core"])
    print(
        f"exomap HTTP map benchmark: {POINTS[0]} x {POINTS[1]} map of demo '{DEMO}', {REPEATS} repeats, "
        f"{os.cpu_count()} CPUs; server as `exomap serve` (its protocol, workers in processes at nice +10)"
    )
    print("in this process (the baseline, with the workers' allocator settings):")
    print(f"  core operating_map()                    {ms(base['core'])}")
    print(f"  to_dict()                               {ms(base['to_dict'])}")
    print(f"  to_dict() document -> json.dumps        {ms(base['json'])}")
    print(f"  to_dict() document -> orjson            {ms(base['orjson'])}")
    print(f"  array document -> orjson (the service)  {ms(base['array'])}   same bytes as to_dict + orjson")
    print(f"  gzip level 1, zlib                      {ms(base['gzip'])}")
    print(f"  gzip level 1, ISA-L (the service)       {ms(base['isal'])}")
    print(f"  gunzip (the client's side)              {ms(base['gunzip'])}")
    for name, rows in runs.items():
        e2e = [r["e2e"] for r in rows]
        print(f"HTTP {name}:")
        print(f"  end to end, body received               {ms(e2e)}   = {med(e2e) / core:5.2f} x in-process core")
        print(f"  end to end + json.loads                 {ms([r['parsed'] for r in rows])}")
        if "app" in rows[0]:
            # the breakdown: the server's phases (its Server-Timing), the rest of the app (routing, reading the
            # request and the scenario, the response), and what is left: HTTP over loopback and the client
            parts = [(p, [r.get(p, 0.0) for r in rows]) for p in PHASES if any(p in r for r in rows)]
            rest = [r["app"] - sum(r.get(p, 0.0) for p in PHASES) for r in rows]
            wire = [r["e2e"] - r["app"] for r in rows]
            for p, v in parts:
                print(f"    {p:<10} {med(v) * 1e3:7.2f} ms (min {min(v) * 1e3:6.2f})  = {med(v) / core:5.3f} x core")
            for p, v in (("app rest", rest), ("http+client", wire)):
                print(f"    {p:<10} {med(v) * 1e3:7.2f} ms (min {min(v) * 1e3:6.2f})  = {med(v) / core:5.3f} x core")
            over = [r["e2e"] - r.get("compute", 0.0) for r in rows]
            print(
                f"    overhead (end to end - server's compute) {med(over) * 1e3:.1f} ms (min {min(over) * 1e3:.1f});"
                f" end to end - in-process core {(med(e2e) - core) * 1e3:.1f} ms"
            )
        r0 = rows[0]
        print(
            f"  answer {r0['raw'] / 1e6:.2f} MB of JSON, {r0['wire'] / 1e6:.2f} MB on the wire"
            f" ({'gzip' if r0['gzip?'] else 'identity'})"
        )
    print(f"HTTP loopback, cached repeat (GET twin)   {ms(get_cached)}")
    print(f"machine load average at the end: {load_average()} (other work on the machine inflates times)")
    u = med([r["e2e"] for r in runs["loopback, not cached"]])
    g = med([r["e2e"] for r in runs["via a proxy (gzip), not cached"]])
    c = med([r["e2e"] for r in runs["loopback, cached"]])
    print(f"  ratio encode json.dumps / orjson (to_dict)  {med(base['json']) / med(base['orjson']):6.1f}")
    print(
        "  ratio to_dict + orjson / array + orjson    "
        f"{(med(base['to_dict']) + med(base['orjson'])) / med(base['array']):6.1f}"
    )
    print(
        f"  target not cached <= 40 ms (loopback):      {'PASS' if u <= 0.040 else 'FAIL'} ({u * 1e3:.1f} ms;"
        f" in-process core {core * 1e3:.1f} ms, overhead {(u - core) * 1e3:.1f} ms)"
    )
    print(f"  not cached, gzip through a proxy:           {'PASS' if g <= 0.040 else 'FAIL'} ({g * 1e3:.1f} ms)")
    print(f"  target cached < 20 ms:                      {'PASS' if c < 0.020 else 'FAIL'} ({c * 1e3:.1f} ms)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
