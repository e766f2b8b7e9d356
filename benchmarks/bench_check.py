"""Benchmark: the whole setpoint check of each demo, and a 24-hour simulation with three events.

exomap integrates with LSODA (stiff-capable, compiled steps) and the model's analytic Jacobian. The baseline
is the same code with ``solve_ivp``'s default explicit integrator (RK45) and no Jacobian, run side by side in
this process. Median wall times and the ratio baseline/exomap are printed.

Targets: the whole check (states, margins, and the upset battery: up to ten upsets, each followed until it
settles, stops or reaches its 24 h cap) at most 1 s per demo; the 24 h simulation with
three events at most 100 ms.

Usage: ``python benchmarks/bench_check.py [--repeat N] [--cap SECONDS]``. A baseline run longer than the cap
is stopped and reported as "> cap".
"""

from __future__ import annotations

import argparse
import functools
import json
import os
import signal
import statistics
import time
from pathlib import Path
from unittest import mock

import numpy as np
from exomap.core import check as check_mod
from exomap.core.check import check_setpoint
from exomap.core.dynamics import simulate
from exomap.core.steady import steady_states
from exomap.schema import parse_scenario

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
#: A run longer than this is not repeated (its single time is reported) [s].
LONG_RUN = 10.0


class _Capped(Exception):
    pass


def _timed(fn, repeat: int, cap: float) -> tuple[float | None, int]:
    """Median wall time of fn() over up to ``repeat`` runs; None when a run exceeds ``cap`` seconds."""

    def stop(signum, frame):  # noqa: ARG001
        raise _Capped

    times: list[float] = []
    old = signal.signal(signal.SIGALRM, stop)
    try:
        for _ in range(repeat):
            signal.setitimer(signal.ITIMER_REAL, cap)
            t0 = time.perf_counter()
            try:
                fn()
            except _Capped:
                return None, len(times)
            finally:
                signal.setitimer(signal.ITIMER_REAL, 0.0)
            times.append(time.perf_counter() - t0)
            if times[-1] > LONG_RUN:
                break
    finally:
        signal.signal(signal.SIGALRM, old)
    return statistics.median(times), len(times)


def _fmt(t: float | None, cap: float) -> str:
    return f"> {cap:.0f} s" if t is None else (f"{1e3 * t:9.1f} ms" if t < 10 else f"{t:9.1f} s ")


def _ratio(base: float | None, ours: float | None, cap: float) -> str:
    if ours is None:
        return "n/a"
    if base is None:
        return f"> {cap / ours:.1f}x"
    return f"{base / ours:.1f}x"


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--cap", type=float, default=120.0)
    args = ap.parse_args()

    rk45 = functools.partial(simulate, method="RK45")
    print("exomap check and simulate: LSODA + analytic Jacobian (exomap) vs RK45 without Jacobian (baseline)")
    print("load average (1, 5, 15 min): " + ", ".join(f"{x:.2f}" for x in os.getloadavg()))
    print(
        f"median of up to {args.repeat} runs; runs over {LONG_RUN:g} s are not repeated; baseline capped at "
        f"{args.cap:g} s\n"
    )
    print(f"{'case':52s} {'exomap':>12s} {'baseline':>12s} {'ratio':>8s}  target")
    for path in sorted(SCENARIOS.glob("*.json")):
        sc = parse_scenario(json.loads(path.read_text())).to_core()
        ours, n1 = _timed(lambda sc=sc: check_setpoint(sc), args.repeat, 1e6)
        with mock.patch.object(check_mod, "simulate", rk45):
            base, n2 = _timed(lambda sc=sc: check_setpoint(sc), args.repeat, args.cap)
        ok = "ok" if ours is not None and ours <= 1.0 else "MISSED"
        print(
            f"{'check ' + path.stem:52s} {_fmt(ours, 0)} {_fmt(base, args.cap)} {_ratio(base, ours, args.cap):>8s}"
            f"  <= 1 s {ok}   (runs: {n1}, {n2})"
        )

    sc = parse_scenario(json.loads((SCENARIOS / "jacketed-first-order.json").read_text())).to_core()
    st = steady_states(sc, sc.tau_nominal, sc.T_in).states[0]
    y0 = np.concatenate(([sc.vessel.h_set], st.C, [st.T, 0.0]))
    events = [
        {"at": 2 * 3600.0, "add": "feed_temperature", "value": 5.0},
        {"at": 8 * 3600.0, "scale": "feed_flow", "by": 0.8},
        {"at": 16 * 3600.0, "add": "coolant_temperature", "value": 5.0},
    ]

    def run(method: str) -> None:
        simulate(sc, initial=y0, events=events, duration=86400.0, method=method)

    ours, n1 = _timed(lambda: run("LSODA"), max(args.repeat, 7), 1e6)
    base, n2 = _timed(lambda: run("RK45"), max(args.repeat, 7), args.cap)
    ok = "ok" if ours is not None and ours <= 0.1 else "MISSED"
    print(
        f"{'simulate 24 h, 3 events (jacketed-first-order)':52s} {_fmt(ours, 0)} {_fmt(base, args.cap)} "
        f"{_ratio(base, ours, args.cap):>8s}  <= 100 ms {ok}   (runs: {n1}, {n2})"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
