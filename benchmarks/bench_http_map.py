"""A 200 x 200 operating map of the adiabatic demo through HTTP, against the in-process core call.

A real uvicorn server (``exomap.web.app.create_app`` with its default process pool) runs in a child process on
a free loopback port; the client is httpx in this process. Measured, each as a median over repeats:

* baseline: ``operating_map(sc, points=(200, 200))`` in this process, plus ``to_dict()`` (what any caller of
  the core pays to get the answer document); and the encoding of that document by the standard library's
  ``json.dumps`` beside orjson (``exomap.web.jobs.dumps``, what the service uses);
* HTTP, not cached: a new map window per request (the upper feed temperature moves by 1 mK), so every request
  computes; end to end = request sent to body received and decoded, then also with ``json.loads``;
* HTTP, cached: the same request repeated (answered from the cache, already gzipped).

Targets (project goals, issue 12): end to end not cached <= 40 ms median, cached < 20 ms median. Prints the
ratios and the machine's load average (the targets assume an otherwise idle machine).
Loopback only; bounded (a few dozen requests).
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
from exomap.web.settings import Settings
settings = Settings(data_dir=sys.argv[1], host="127.0.0.1", port=int(sys.argv[2]), workers=int(sys.argv[3]))
uvicorn.run(create_app(settings, warm_up=True), host="127.0.0.1", port=settings.port, log_level="warning")
"""


def free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class Server:
    """``with Server() as base_url:`` runs the app under uvicorn in a child process on a free loopback port."""

    def __init__(self, workers: int = 2) -> None:
        self.workers = workers
        self.proc: subprocess.Popen | None = None
        self._tmp = tempfile.TemporaryDirectory(prefix="exomap-bench-")

    def __enter__(self) -> str:
        import httpx

        port = free_port()
        self.proc = subprocess.Popen(
            [sys.executable, "-c", SERVER_CODE, self._tmp.name, str(port), str(self.workers)],
            stdout=subprocess.DEVNULL,
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


def main() -> int:
    import httpx
    from exomap.core.opmap import operating_map

    sc = demo_scenario()
    spec = sc.map
    tau_range = spec.tau_range if spec else None
    T_lo, T_hi = spec.T_in_range if spec else (None, None)

    # -- baseline: the core in this process ------------------------------------------------------------------
    operating_map(sc, points=POINTS)  # warm (imports, caches)
    from exomap.web.jobs import dumps

    base_compute, base_total, enc_json, enc_orjson = [], [], [], []
    for i in range(REPEATS):
        t0 = time.perf_counter()
        result = operating_map(sc, tau_range=tau_range, T_in_range=(T_lo, T_hi + 1e-3 * (i + 1)), points=POINTS)
        t1 = time.perf_counter()
        doc = result.to_dict()
        t2 = time.perf_counter()
        json.dumps(doc, separators=(",", ":"), default=lambda o: o.tolist())
        t3 = time.perf_counter()
        dumps(doc)
        t4 = time.perf_counter()
        base_compute.append(t1 - t0)
        base_total.append(t2 - t0)
        enc_json.append(t3 - t2)
        enc_orjson.append(t4 - t3)

    # -- HTTP ---------------------------------------------------------------------------------------------------
    with Server() as url, httpx.Client(base_url=url, timeout=60) as client:
        sid = next(s["id"] for s in client.get("/api/v1/scenarios").json()["scenarios"] if s["name"] == DEMO)
        # warm the path once (first request through the pool)
        client.post("/api/v1/map", json={"scenario_id": sid, "points": list(POINTS)}).raise_for_status()

        def body(i: int) -> dict:
            return {
                "scenario_id": sid,
                "points": list(POINTS),
                "residence_time": list(tau_range),
                "feed_temperature": [T_lo, T_hi + 1e-3 * (i + 1)],
            }

        uncached, uncached_parsed, sizes = [], [], []
        for i in range(REPEATS):
            t0 = time.perf_counter()
            r = client.post("/api/v1/map", json=body(100 + i))
            t1 = time.perf_counter()
            doc = json.loads(r.content)
            t2 = time.perf_counter()
            r.raise_for_status()
            assert r.headers["x-exomap-cache"] == "miss"
            assert len(doc["region"]) == POINTS[1] and len(doc["region"][0]) == POINTS[0]
            uncached.append(t1 - t0)
            uncached_parsed.append(t2 - t0)
            sizes.append((len(r.content), int(r.headers.get("content-length", 0)), r.headers.get("content-encoding")))

        cached = []
        for _ in range(REPEATS * 3):
            t0 = time.perf_counter()
            r = client.post("/api/v1/map", json=body(100))
            t1 = time.perf_counter()
            r.raise_for_status()
            assert r.headers["x-exomap-cache"] == "hit"
            cached.append(t1 - t0)

        identity = []
        for _ in range(REPEATS * 3):
            t0 = time.perf_counter()
            r = client.post("/api/v1/map", json=body(100), headers={"Accept-Encoding": "identity"})
            t1 = time.perf_counter()
            r.raise_for_status()
            assert "content-encoding" not in r.headers
            identity.append(t1 - t0)

        get_cached = []
        lo, hi = tau_range
        for _ in range(REPEATS * 3):
            t0 = time.perf_counter()
            r = client.get(
                f"/api/v1/scenarios/{sid}/map",
                params={
                    "residence_time": f"{lo!r},{hi!r}",
                    "feed_temperature": f"{T_lo!r},{T_hi + 1e-3 * 101!r}",
                    "points": f"{POINTS[0]},{POINTS[1]}",
                },
            )
            t1 = time.perf_counter()
            r.raise_for_status()
            get_cached.append(t1 - t0)

    print(
        f"exomap HTTP map benchmark: {POINTS[0]} x {POINTS[1]} map of demo '{DEMO}', {REPEATS} repeats, "
        f"{os.cpu_count()} CPUs"
    )
    print(f"  baseline core operating_map()          {ms(base_compute)}")
    print(f"  baseline core operating_map()+to_dict() {ms(base_total)}")
    print(f"  encode the answer: json.dumps           {ms(enc_json)}")
    print(f"  encode the answer: orjson (the service) {ms(enc_orjson)}")
    print(f"  HTTP not cached, body received          {ms(uncached)}")
    print(f"  HTTP not cached, body + json.loads      {ms(uncached_parsed)}")
    print(f"  HTTP cached repeat (POST)               {ms(cached)}")
    print(f"  HTTP cached repeat (GET twin)           {ms(get_cached)}")
    print(f"  HTTP cached repeat, no gzip (loopback)  {ms(identity)}")
    raw, wire, enc = sizes[0]
    print(f"  answer {raw / 1e6:.2f} MB of JSON, {wire / 1e6:.2f} MB on the wire ({enc or 'identity'})")
    with open("/proc/loadavg") as f:
        load = f.read().split()[0]
    print(f"  machine load average during the run: {load} (other work on the machine inflates times)")
    b, u, c = statistics.median(base_total), statistics.median(uncached), statistics.median(cached)
    print(f"  ratio HTTP not cached / core+to_dict   {u / b:6.2f}")
    print(f"  ratio HTTP cached / core+to_dict       {c / b:6.3f}")
    e_json, e_or = statistics.median(enc_json), statistics.median(enc_orjson)
    print(f"  ratio encode json.dumps / orjson       {e_json / e_or:6.1f}")
    print(f"  target not cached <= 40 ms: {'met' if u <= 0.040 else 'NOT met'} ({u * 1e3:.1f} ms)")
    print(f"  target cached < 20 ms:      {'met' if c < 0.020 else 'NOT met'} ({c * 1e3:.1f} ms)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
