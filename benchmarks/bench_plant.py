"""Benchmark: plant data — import of a historian export, replay, and a two-parameter calibration.

Each case runs exomap and a baseline side by side in this process and prints median wall times, CPU time and
the ratio baseline/exomap:

* import of a wide CSV of 1,000,000 rows (ISO 8601 times, four tags with units in the header; the unit registry
  built before the clock starts, as in a running server): exomap's
  ``read_plant_csv`` (pandas' C parser and ISO 8601 reader) against a straightforward reader with the standard
  library (``csv`` + ``datetime.fromisoformat`` + ``float`` per cell);
* replay of 8 h of data at 20-s steps (1,441 records) on the jacketed demo: ``exomap.core.replay.replay``
  against the same model driven by the simulator with one ``set`` event per record (a step input per record,
  the way a user without a replay would do it);
* calibration of two parameters on that replay, with profile-likelihood intervals: (rate constant at a
  reference temperature, jacket UA) and (rate constant, activation energy). exomap (Jacobian from the forward
  sensitivity equations, replays at rtol 3e-7) against the earlier method (finite differences of replays at
  rtol 1e-8, ``calibrate(..., sensitivities=False)``); and the price of the profiles (the same fit with
  linearised intervals only).

Targets (DESIGN.md §12 issue): import <= 5 s; replay <= 0.2 s; two-parameter calibration <= 10 s. The load
average is printed first: on a busy machine the times are longer, the ratios less so.

Usage: ``python benchmarks/bench_plant.py [--rows N] [--repeat N]``.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import os
import statistics
import sys
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
from exomap.core.calibrate import calibrate, parse_target, value_of, with_values
from exomap.core.dynamics import simulate
from exomap.core.replay import PlantRecord, replay
from exomap.schema import parse_scenario
from exomap.schema.plantdata import read_plant_csv

SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"


def timed(fn, repeat: int) -> tuple[float, float, object]:
    walls, cpus, out = [], [], None
    for _ in range(repeat):
        w0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        walls.append(time.perf_counter() - w0)
        cpus.append(time.process_time() - c0)
    return statistics.median(walls), statistics.median(cpus), out


def make_csv(rows: int) -> str:
    rng = np.random.default_rng(1)
    t0 = datetime(2026, 1, 1, tzinfo=UTC)
    out = io.StringIO()
    out.write("time,FI-101 [m^3/h],TI-101 [degC],TC-101 [degC],TI-201 [degC]\n")
    q = 2.7 + 0.05 * rng.standard_normal(rows)
    tin = 50 + rng.standard_normal(rows)
    tc = 10 + rng.standard_normal(rows)
    tr = 80 + rng.standard_normal(rows)
    for k in range(rows):
        out.write(f"{(t0 + timedelta(seconds=20 * k)).isoformat()},{q[k]:.4f},{tin[k]:.3f},{tc[k]:.3f},{tr[k]:.3f}\n")
    return out.getvalue()


def stdlib_reader(text: str) -> dict:
    """Baseline: the standard library, one cell at a time (units by hand: m^3/h and degC)."""
    r = csv.reader(io.StringIO(text))
    next(r)
    t, q, tin, tc, tr = [], [], [], [], []
    for row in r:
        t.append(datetime.fromisoformat(row[0]).timestamp())
        q.append(float(row[1]) / 3600.0)
        tin.append(float(row[2]) + 273.15)
        tc.append(float(row[3]) + 273.15)
        tr.append(float(row[4]) + 273.15)
    return {"t": np.array(t), "q": np.array(q), "tin": np.array(tin), "tc": np.array(tc), "tr": np.array(tr)}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    print(f"load average {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs; python {sys.version.split()[0]}")

    # -- import -------------------------------------------------------------------------------------------
    text = make_csv(args.rows)
    # the unit registry is built once per process (about a second); a server has it warm, so it is built first
    from exomap.schema.quantity import to_si

    to_si("1 degC", "temperature")
    mapping = {"FI-101": "feed_flow", "TI-101": "feed_temperature", "TC-101": "coolant_temperature",
               "TI-201": "reactor_temperature"}  # fmt: skip
    w_ex, c_ex, ds = timed(lambda: read_plant_csv(text, mapping=mapping), 1)
    w_base, c_base, base = timed(lambda: stdlib_reader(text), 1)
    same = np.allclose(ds.series["reactor_temperature"], base["tr"], rtol=1e-12)
    print(f"import {args.rows} rows: exomap {w_ex:.2f} s (cpu {c_ex:.2f}), stdlib baseline {w_base:.2f} s "
          f"(cpu {c_base:.2f}), ratio {w_base / w_ex:.1f}x, same values: {same}")  # fmt: skip
    print(f"  {'PASS' if w_ex <= 5.0 else 'FAIL'} import <= 5 s")

    # -- replay -------------------------------------------------------------------------------------------
    doc = json.loads((SCENARIOS / "jacketed-first-order.json").read_text())
    sc = parse_scenario(doc).to_core()
    t = np.arange(0.0, 8 * 3600.0 + 1.0, 20.0)
    q = sc.q_in * (1.0 + 0.08 * np.sin(t / 2500.0))
    tin = sc.T_in + 4.0 * np.sin(t / 4000.0)
    rec = PlantRecord(t, {"feed_flow": q, "feed_temperature": tin})
    w_rp, c_rp, res = timed(lambda: replay(sc, rec), args.repeat)
    events = [{"at": float(tk), "set": "feed_flow", "to": float(qk)} for tk, qk in zip(t[1:], q[1:], strict=True)]
    events += [
        {"at": float(tk), "set": "feed_temperature", "to": float(xk)} for tk, xk in zip(t[1:], tin[1:], strict=True)
    ]
    w_ev, c_ev, _ = timed(lambda: simulate(sc, events=events, duration=float(t[-1]), record_every=20.0), 1)
    print(f"replay 8 h at 20 s ({t.size} records): exomap {w_rp * 1e3:.0f} ms (cpu {c_rp * 1e3:.0f}), "
          f"simulator with {len(events)} step events {w_ev * 1e3:.0f} ms (cpu {c_ev * 1e3:.0f}), "
          f"ratio {w_ev / w_rp:.1f}x")  # fmt: skip
    print(f"  {'PASS' if w_rp <= 0.2 else 'FAIL'} replay <= 0.2 s")

    # -- calibration ------------------------------------------------------------------------------------
    rng = np.random.default_rng(3)
    data = PlantRecord(
        t, {"feed_flow": q, "feed_temperature": tin, "reactor_temperature": res.T + rng.normal(0, 0.2, t.size)}
    )
    T_ref = 350.0
    ok = True
    for paths, factors in (
        (["reactions[0].rate_constant", "jacket.ua"], (1.3, 0.9)),
        (["reactions[0].rate_constant", "reactions[0].activation_energy"], (1.3, 0.9)),
    ):
        targets = [parse_target(p, sc) for p in paths]
        start = with_values(sc, targets, [value_of(sc, tg, T_ref) * f for tg, f in zip(targets, factors, strict=True)],
                            T_ref)  # fmt: skip
        w_cal, c_cal, cal = timed(lambda: calibrate(start, data, paths, T_ref=T_ref), 1)  # noqa: B023
        w_fd, c_fd, fd = timed(lambda: calibrate(start, data, paths, T_ref=T_ref, sensitivities=False), 1)  # noqa: B023
        w_lin, c_lin, _ = timed(lambda: calibrate(start, data, paths, T_ref=T_ref, profile=False), 1)  # noqa: B023
        rel = max(abs(a / b - 1.0) for a, b in zip(cal.estimates, fd.estimates, strict=True))
        print(f"calibration of {' + '.join(paths)} on {t.size} records, with profiles: exomap {w_cal:.2f} s "
              f"(cpu {c_cal:.2f}, {cal.fit.nfev} replays), finite differences {w_fd:.2f} s (cpu {c_fd:.2f}, "
              f"{fd.fit.nfev} replays), ratio {w_fd / w_cal:.1f}x (cpu {c_fd / c_cal:.1f}x); linearised intervals "
              f"only {w_lin:.2f} s (cpu {c_lin:.2f})")  # fmt: skip
        print(f"  estimates {cal.estimates.tolist()} (differences: {fd.estimates.tolist()}, largest relative "
              f"difference {rel:.1e}); intervals {cal.interval_95} (differences: {fd.interval_95})")  # fmt: skip
        print(f"  {'PASS' if w_cal <= 10.0 else 'FAIL'} calibration <= 10 s")
        ok &= w_cal <= 10.0
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
