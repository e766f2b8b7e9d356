"""Load: 20 concurrent clients asking for maps and setpoint checks for a bounded time, on 127.0.0.1 only.

A real uvicorn server (``create_app`` with its default process pool) runs in a child process on a free loopback
port (see ``bench_http_map.Server``). 20 asyncio clients in this process loop for ``DURATION_S`` seconds; each
request is a map (60 x 60, one of ``VARIANTS`` windows of the adiabatic demo, so most are cached after their
first computation and some are not) or a setpoint check at one of ``VARIANTS`` setpoints. A separate prober
asks ``/api/v1/health`` every 50 ms throughout, from its own process (so its numbers are the
server's latency, not the load generator's own queue). Memory of the server and its worker processes is sampled
every 0.5 s.

Printed: throughput, median and p95 latency of maps and checks, errors (any non-200 answer or failed
request), health latency median/p99/max under load against health on the idle server (the baseline) and
against how late a 1 ms sleep of the prober wakes up (the machine's scheduling delay, which no server can
remove), the server process's CPU per answer, and the peak server RSS. Targets (project goals): zero errors,
health p99 < 50 ms, RSS < 400 MB.

Then a burst (issue 12): ``BURST`` different maps of ``BURST_POINTS`` sent at once, more than the workers plus
the queue (``EXOMAP_MAX_QUEUED``) hold. Printed: how the burst was answered (200, 503 ``busy`` and how fast
those came, 503 past the budget), and the latency of the home page and of saves made while the queue is full,
against the same on the idle server. Targets: the excess refused within 1 s, pages and saves within 1 s.
"""

from __future__ import annotations

import asyncio
import multiprocessing
import os
import random
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))

from bench_http_map import DEMO, Server, tree_rss_bytes  # noqa: E402

CLIENTS = 20
DURATION_S = 20.0
VARIANTS = 12
MAP_POINTS = [60, 60]
HEALTH_PERIOD_S = 0.05
BURST = 50
BURST_POINTS = [300, 300]


def health_prober(url: str, duration_s: float, conn) -> None:  # noqa: ANN001 - a multiprocessing connection
    """Ask for /api/v1/health every HEALTH_PERIOD_S for duration_s; send (latencies, errors) back."""
    import httpx

    latencies: list[float] = []
    errors: list[str] = []
    late: list[float] = []
    stop = time.monotonic() + duration_s
    with httpx.Client(base_url=url, timeout=30) as client:
        while time.monotonic() < stop:
            t0 = time.perf_counter()
            try:
                response = client.get("/api/v1/health")
                if response.status_code != 200:
                    errors.append(f"health {response.status_code}")
            except httpx.HTTPError as exc:
                errors.append(f"health {type(exc).__name__}")
            latencies.append(time.perf_counter() - t0)
            # the machine's own scheduling delay, for comparison: how late a 1 ms sleep of this process wakes up
            t0 = time.perf_counter()
            time.sleep(0.001)
            late.append(time.perf_counter() - t0 - 0.001)
            time.sleep(HEALTH_PERIOD_S)
    conn.send((latencies, errors, late))
    conn.close()


def process_cpu_s(pid: int) -> float:
    """CPU time (user + system) of one process so far, not its children (Linux /proc), in seconds."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def pct(values: list[float], q: float) -> float:
    if not values:
        return float("nan")
    values = sorted(values)
    k = min(len(values) - 1, max(0, round(q / 100 * (len(values) - 1))))
    return values[k]


def summary(name: str, values: list[float]) -> str:
    if not values:
        return f"  {name:<28} no answers"
    return (
        f"  {name:<28} n={len(values):5d}  median {statistics.median(values) * 1e3:7.1f} ms  "
        f"p95 {pct(values, 95) * 1e3:7.1f} ms  p99 {pct(values, 99) * 1e3:7.1f} ms  "
        f"max {max(values) * 1e3:7.1f} ms"
    )


async def run(url: str, pid: int) -> dict:
    import httpx

    limits = httpx.Limits(max_connections=CLIENTS + 2, max_keepalive_connections=CLIENTS + 2)
    async with httpx.AsyncClient(base_url=url, timeout=60, limits=limits) as client:
        listing = (await client.get("/api/v1/scenarios")).json()["scenarios"]
        demo = next(s for s in listing if s["name"] == DEMO)
        scenario = (await client.get(f"/api/v1/scenarios/{demo['id']}")).json()
        lo_tau, hi_tau = scenario["map"]["residence_time"]
        lo_T, hi_T = scenario["map"]["feed_temperature"]

        check_ok = (await client.post("/api/v1/check", json={"scenario_id": demo["id"]})).status_code == 200

        # idle baseline for health
        idle = []
        for _ in range(40):
            t0 = time.perf_counter()
            (await client.get("/api/v1/health")).raise_for_status()
            idle.append(time.perf_counter() - t0)
            await asyncio.sleep(0.01)

        stop = time.monotonic() + DURATION_S
        lat: dict[str, list[float]] = {"map": [], "check": [], "health": []}
        errors: list[str] = []
        rss: list[int] = []
        rng = random.Random(20251202)

        def map_body(k: int) -> dict:
            return {
                "scenario_id": demo["id"],
                "points": MAP_POINTS,
                "residence_time": [lo_tau, hi_tau],
                "feed_temperature": [lo_T, hi_T - 0.5 * k],
            }

        def check_body(k: int) -> dict:
            tau = lo_tau * (hi_tau / lo_tau) ** ((k + 0.5) / VARIANTS)
            return {"scenario_id": demo["id"], "residence_time": tau, "feed_temperature": lo_T + 5.0 * k}

        async def user(seed: int) -> None:
            r = random.Random(seed)
            while time.monotonic() < stop:
                kind = "check" if check_ok and r.random() < 0.4 else "map"
                k = r.randrange(VARIANTS)
                body = check_body(k) if kind == "check" else map_body(k)
                t0 = time.perf_counter()
                try:
                    resp = await client.post(f"/api/v1/{kind}", json=body)
                    await resp.aread()
                    if resp.status_code != 200:
                        errors.append(f"{kind} {resp.status_code} {resp.text[:120]}")
                except httpx.HTTPError as exc:
                    errors.append(f"{kind} {type(exc).__name__}")
                    continue
                lat[kind].append(time.perf_counter() - t0)

        async def memory() -> None:
            while time.monotonic() < stop:
                rss.append(tree_rss_bytes(pid))
                await asyncio.sleep(0.5)

        # the health prober runs in its own process: in this one it would queue behind the 20 clients' own work
        # on this event loop, and measure the load generator rather than the server
        ctx = multiprocessing.get_context("spawn")
        parent, child = ctx.Pipe()
        probe = ctx.Process(target=health_prober, args=(url, DURATION_S, child))
        probe.start()
        started = time.monotonic()
        cpu_before = process_cpu_s(pid)
        await asyncio.gather(*(user(rng.randrange(1 << 30)) for _ in range(CLIENTS)), memory())
        elapsed = time.monotonic() - started
        server_cpu = process_cpu_s(pid) - cpu_before
        health, health_errors, late = await asyncio.to_thread(parent.recv)
        probe.join(timeout=30)
        lat["health"].extend(health)
        errors.extend(health_errors)
        rss.append(tree_rss_bytes(pid))
    return {
        "lat": lat,
        "errors": errors,
        "rss": rss,
        "elapsed": elapsed,
        "idle": idle,
        "check": check_ok,
        "server_cpu": server_cpu,
        "late": late,
    }


async def burst(url: str) -> dict:
    """BURST different heavy maps at once; pages and saves timed while they queue."""
    import httpx

    limits = httpx.Limits(max_connections=BURST + 10, max_keepalive_connections=BURST + 10)
    async with httpx.AsyncClient(base_url=url, timeout=120, limits=limits) as client:
        listing = (await client.get("/api/v1/scenarios")).json()["scenarios"]
        demo = next(s for s in listing if s["name"] == DEMO)
        document = (await client.get(f"/api/v1/scenarios/{demo['id']}")).json()
        lo_T, hi_T = document["map"]["feed_temperature"]

        async def timed(method: str, path: str, **kw: object) -> tuple[float, httpx.Response]:
            t0 = time.perf_counter()
            response = await client.request(method, path, **kw)
            return time.perf_counter() - t0, response

        def save_body(tag: str) -> dict:
            return {**document, "title": f"burst save {tag} (invented)"}

        idle_page = [(await timed("GET", "/"))[0] for _ in range(5)]
        idle_save = [(await timed("POST", "/api/v1/scenarios", json=save_body(f"idle {k}")))[0] for k in range(5)]

        heavy = [
            asyncio.create_task(
                timed(
                    "POST",
                    "/api/v1/map",
                    json={
                        "scenario_id": demo["id"],
                        "points": BURST_POINTS,
                        "feed_temperature": [lo_T, hi_T + 0.01 * (k + 1)],  # all different: none can share
                    },
                )
            )
            for k in range(BURST)
        ]
        await asyncio.sleep(0.3)  # the burst has arrived: workers busy, queue full
        page, save = [], []
        for k in range(5):
            page.append((await timed("GET", "/"))[0])
            elapsed, response = await timed("POST", "/api/v1/scenarios", json=save_body(f"during {k}"))
            if response.status_code in (200, 201):
                save.append(elapsed)
            await asyncio.sleep(0.1)
        answers = await asyncio.gather(*heavy)
    outcome: dict[str, list[float]] = {}
    for elapsed, response in answers:
        key = str(response.status_code)
        if response.status_code == 503:
            key += " " + response.json()["error"]["code"]
        outcome.setdefault(key, []).append(elapsed)
    return {"outcome": outcome, "page": page, "save": save, "idle_page": idle_page, "idle_save": idle_save}


def main() -> int:
    import httpx

    server = Server()
    with server as url:
        # one computation first, so the run measures the service and not the workers' first imports
        httpx.post(url + "/api/v1/steady", json={"scenario_id": DEMO}, timeout=60).raise_for_status()
        out = asyncio.run(run(url, server.pid))
        burst_out = asyncio.run(burst(url))
    lat, errors, rss = out["lat"], out["errors"], out["rss"]
    done = len(lat["map"]) + len(lat["check"])
    print(
        f"exomap load benchmark: {CLIENTS} clients for {DURATION_S:.0f} s on 127.0.0.1, demo '{DEMO}', "
        f"maps {MAP_POINTS[0]} x {MAP_POINTS[1]} in {VARIANTS} windows, checks at {VARIANTS} setpoints, "
        f"{os.cpu_count()} CPUs"
    )
    if not out["check"]:
        print("  (the check route did not answer 200 before the run: maps only)")
    print(f"  throughput {done / out['elapsed']:.1f} requests/s ({done} answered in {out['elapsed']:.1f} s)")
    answered = done + len(lat["health"])
    print(
        f"  server process CPU (event loop and its threads; not the workers) {out['server_cpu']:.2f} s in "
        f"{out['elapsed']:.1f} s = {out['server_cpu'] / out['elapsed'] * 100:.0f} % of one CPU, "
        f"{out['server_cpu'] / answered * 1e3:.2f} ms per answer"
    )
    print(summary("map", lat["map"]))
    print(summary("check", lat["check"]))
    print(summary("health, idle server (base)", out["idle"]))
    print(summary("health, under load", lat["health"]))
    print(summary("(a 1 ms sleep's lateness)", out["late"]))
    print("   ^ the prober's own wake-up delay on this machine: the part of health's latency no server can remove")
    print(f"  errors {len(errors)}" + (f": first {errors[:3]}" if errors else ""))
    peak = max(rss) / 2**20 if rss else float("nan")
    print(f"  server RSS (process and workers) peak {peak:.0f} MB, end {rss[-1] / 2**20:.0f} MB")
    with open("/proc/loadavg") as f:
        load = f.read().split()[0]
    print(f"  machine load average at the end: {load} (other work on the machine inflates times)")
    p99 = pct(lat["health"], 99)
    base = statistics.median(out["idle"])
    print(f"  ratio health p99 under load / idle median: {p99 / base:.1f}")
    print(f"  target zero errors:       {'met' if not errors else 'NOT met'} ({len(errors)})")
    print(f"  target health p99 < 50 ms: {'met' if p99 < 0.050 else 'NOT met'} ({p99 * 1e3:.1f} ms)")
    print(f"  target RSS < 400 MB:      {'met' if peak < 400 else 'NOT met'} ({peak:.0f} MB)")

    b = burst_out
    print(f"burst: {BURST} different {BURST_POINTS[0]} x {BURST_POINTS[1]} maps at once")
    for key, values in sorted(b["outcome"].items()):
        print(summary(f"answered {key}", values))
    print(summary("home page, idle server", b["idle_page"]))
    print(summary("home page, during the burst", b["page"]))
    print(summary("save, idle server", b["idle_save"]))
    print(summary("save, during the burst", b["save"]))
    busy = b["outcome"].get("503 busy", [])
    with open("/proc/loadavg") as f:
        load = f.read().split()[0]
    print(f"  machine load average at the end: {load}")
    if b["page"] and b["idle_page"]:
        print(
            "  ratio page during burst / idle (medians): "
            f"{statistics.median(b['page']) / statistics.median(b['idle_page']):.1f}"
        )
    if b["save"] and b["idle_save"]:
        print(
            "  ratio save during burst / idle (medians): "
            f"{statistics.median(b['save']) / statistics.median(b['idle_save']):.1f}"
        )
    print(
        f"  target excess refused within 1 s: {'met' if busy and max(busy) < 1.0 else 'NOT met'}"
        f" ({len(busy)} refused" + (f", slowest {max(busy) * 1e3:.0f} ms)" if busy else ")")
    )
    slow = max(b["page"] + b["save"], default=float("inf"))
    print(f"  target page and save within 1 s:  {'met' if slow < 1.0 else 'NOT met'} (slowest {slow * 1e3:.0f} ms)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
