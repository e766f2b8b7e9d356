"""Batch study: the four demos x 25 setpoints x check, on 1 and 2 workers, local process pool and Dask.

Each demo gets a 5 x 5 grid of setpoints around its own feed (residence time x 0.7 .. 1.3, feed temperature
-6 .. +6 K), so 100 setpoint checks in all. The same plan runs four times, each into a fresh results file:
``exomap.study.run_study`` on the local process pool with 1 and with 2 workers, and on a
``dask.distributed.LocalCluster`` on 127.0.0.1 (no dashboard) with 1 and with 2 worker processes of one thread
each, whose workers import exomap before the clock starts (as on a long-lived cluster; that time is printed).
Printed: wall time, cases per minute, the speed-up against the local pool with 1 worker (the baseline, same
process, same plan), and whether every run gave the same verdicts. The load average is printed first and last:
on the shared 2-core machine the 2-worker runs cannot show 2x when other work holds the cores.

    python benchmarks/bench_study.py                    # 4 demos x 25 setpoints
    python benchmarks/bench_study.py --setpoints 9      # a 3 x 3 grid per demo (quicker)
"""

from __future__ import annotations

import argparse
import importlib
import json
import math
import os
import tempfile
import time
from pathlib import Path

from exomap import schema
from exomap.study import FORMAT, Plan, plan_study, read_results, run_study

DEMOS = ("adiabatic-second-order", "jacketed-first-order", "mild-single-state", "product-decomposition")


def build_plan(per_demo: int) -> Plan:
    """One plan: for each demo, an n x n grid of setpoints around its own feed (n*n = per_demo)."""
    from importlib import resources

    n = int(round(math.sqrt(per_demo)))
    plan = Plan(title="bench")
    for name in DEMOS:
        doc = json.loads((resources.files("exomap.demos") / f"{name}.json").read_text(encoding="utf-8"))
        sc = schema.parse_scenario(doc).to_core()
        factors = [0.7 + 0.6 * i / (n - 1) for i in range(n)] if n > 1 else [1.0]
        shifts = [-6.0 + 12.0 * i / (n - 1) for i in range(n)] if n > 1 else [0.0]
        study = {
            "format": FORMAT,
            "scenarios": [name],
            "setpoints": {
                "residence_time": [sc.tau_nominal * f for f in factors],
                "feed_temperature": [sc.T_in + d for d in shifts],
            },
            "analyses": ["check"],
        }
        plan.cases += plan_study(study).cases
    return plan


def timed(label: str, plan: Plan, folder: Path, **kwargs) -> tuple[float, dict[str, str]]:
    out = folder / f"{label.replace(' ', '-')}.jsonl"
    t0 = time.perf_counter()
    state = run_study(plan, out, **kwargs)
    wall = time.perf_counter() - t0
    verdicts = {
        k: (r["answer"] or {}).get("verdict", "failed") if r["status"] == "ok" else "failed"
        for k, r in read_results(out).items()
    }
    print(f"  {label:<22} {wall:8.1f} s   {len(plan.cases) / wall * 60:7.1f} cases/min   failed {state.failed}")
    return wall, verdicts


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--setpoints", type=int, default=25, help="setpoints per demo, a square (default 25)")
    args = parser.parse_args()
    print(f"load average (1, 5, 15 min) at start: {os.getloadavg()}; CPUs: {os.cpu_count()}")
    plan = build_plan(args.setpoints)
    print(f"{len(plan.cases)} cases: {len(DEMOS)} demos x {len(plan.cases) // len(DEMOS)} setpoints x check")
    from dask.distributed import Client, LocalCluster

    results: dict[str, tuple[float, dict[str, str]]] = {}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for workers in (1, 2):
            results[f"local pool, {workers}"] = timed(f"local pool {workers}", plan, folder, workers=workers)
        for workers in (1, 2):
            with LocalCluster(
                n_workers=workers,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address=None,
            ) as cluster:
                # A long-lived cluster has imported exomap already: the workers import it here, before the
                # clock starts (the local pool's start and its preloading import are inside its time).
                t0 = time.perf_counter()
                with Client(cluster.scheduler_address) as client:
                    for module in ("exomap.study", "exomap.schema", "exomap.core.check"):
                        client.run(importlib.import_module, module)
                print(f"  (dask {workers}: workers started and imported exomap in {time.perf_counter() - t0:.1f} s)")
                results[f"dask, {workers}"] = timed(
                    f"dask {workers}", plan, folder, scheduler=cluster.scheduler_address
                )
    base_wall, base_verdicts = results["local pool, 1"]
    print("speed-up against the local pool with 1 worker (same plan, same process):")
    for label, (wall, verdicts) in results.items():
        same = "same verdicts" if verdicts == base_verdicts else "VERDICTS DIFFER"
        print(f"  {label:<16} x{base_wall / wall:5.2f}   {same}")
    print(f"load average (1, 5, 15 min) at end: {os.getloadavg()}")


if __name__ == "__main__":
    main()
