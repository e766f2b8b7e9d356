"""The operating map: exomap's ``operating_map`` against a straightforward per-cell baseline, in one process.

Baseline (written here, no exomap numerics): for every cell (tau, T_in) on its own, scan the steady
temperature on a grid (the mass balances solved at each grid temperature by vectorised bisection for one
reaction, damped Newton for several), bracket each sign change of the energy-balance residual and refine it
with ``scipy.optimize.brentq``, classify each root from the eigenvalues of the full species+energy Jacobian,
and assign the region by the rules of DESIGN.md §5. That is how one would write it without the manifold.
The baseline is timed on a random subset of cells and extrapolated to the whole grid (it takes minutes for
200 x 200); the subset size is printed. It also reports how many of those cells it classifies like exomap.

exomap is timed on the demo's own 200 x 200 window (median of several runs after one warm-up), then on
50^2, 100^2, 200^2 and 400^2 cells, with the peak traced memory (tracemalloc) at 400^2.

Targets (PASS/FAIL printed): adiabatic demo 200 x 200 median <= 30 ms and >= 300x faster than the baseline;
jacketed and two-reaction demos <= 500 ms; linear scaling (cost per cell at 400^2 no more than 1.25 x that
at 200^2, fastest runs); peak memory < 200 MB at 400^2. Times are wall-clock medians; the CPU time of this
process is printed beside them because a busy machine (other test runs on the same cores) inflates wall time.

Run: python benchmarks/bench_map.py [--baseline-cells 300] [--repeat 7] [--demo NAME ...]
"""

from __future__ import annotations

import argparse
import json
import math
import os
import statistics
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
from exomap.core.opmap import operating_map
from exomap.core.scenario import R_GAS
from exomap.schema import parse_scenario
from scipy.optimize import brentq

ROOT = Path(__file__).resolve().parents[1]
DEMOS = {
    "adiabatic": "adiabatic-second-order",
    "jacketed": "jacketed-first-order",
    "two-reaction": "product-decomposition",
    "mild": "mild-single-state",
}
TARGET_MS = {"adiabatic": 30.0, "jacketed": 500.0, "two-reaction": 500.0}
TARGET_RATIO = 300.0
TARGET_MEMORY_MB = 200.0
SCALING_SLACK = 1.25
# region codes of DESIGN.md §5 as the map answer numbers them
STABLE, SENSITIVE, MULTIPLE, UNSTABLE, RUNAWAY = 0, 1, 2, 3, 4


# -- the baseline ------------------------------------------------------------------------------------------
class Baseline:
    """Per-cell steady states by temperature scan + brentq, stability from the full Jacobian."""

    def __init__(self, sc, n_scan: int = 600) -> None:
        self.sc = sc
        self.nu = np.array([r.nu for r in sc.reactions], dtype=float).T  # (n, m)
        self.orders = np.array([r.orders for r in sc.reactions], dtype=float)  # (m, n)
        self.k0 = np.array([r.k0 for r in sc.reactions])
        self.E = np.array([r.Ea for r in sc.reactions]) / R_GAS
        self.J = -np.array([r.dH for r in sc.reactions]) / (sc.rho * sc.cp)
        rcv = sc.rho * sc.cp * sc.vessel.V_set
        self.kappa, self.lam, self.p = sc.UA_jacket / rcv, sc.UA_loss / rcv, sc.P_agitator / rcv
        self.c_in = np.array(sc.c_in, dtype=float)
        self.m, self.n = self.orders.shape
        self.n_scan = n_scan
        cons = self.nu[:, 0] < 0
        self.xi_max = float(np.min(self.c_in[cons] / -self.nu[cons, 0])) if self.m == 1 else math.nan
        self.key = int(np.argmax(self.nu[:, 0] < 0))

    def rates(self, C, T):
        k = self.k0 * np.exp(-self.E / np.asarray(T)[..., None])
        return k * np.prod(np.maximum(C, 0.0)[..., None, :] ** self.orders, axis=-1)

    def concentrations(self, tau, T):
        """Isothermal mass balance C_in + nu xi with xi = tau r(C, T), for an array of T."""
        T = np.atleast_1d(np.asarray(T, dtype=float))
        if self.m == 1:
            lo, hi = np.zeros(T.shape), np.full(T.shape, self.xi_max)
            for _ in range(60):  # f(xi) = xi - tau r(xi) increases with xi: bisection
                mid = 0.5 * (lo + hi)
                C = self.c_in + mid[:, None] * self.nu[:, 0]
                f = mid - tau * self.rates(C, T)[:, 0]
                lo, hi = np.where(f < 0, mid, lo), np.where(f < 0, hi, mid)
            xi = 0.5 * (lo + hi)[:, None]
        else:
            xi = np.zeros(T.shape + (self.m,))
            for _ in range(60):  # damped Newton from the feed
                C = self.c_in + xi @ self.nu.T
                r = self.rates(C, T)
                dr = r[..., :, None] * self.orders / np.maximum(C, 1e-300)[..., None, :]
                jac = np.eye(self.m) - tau * dr @ self.nu
                res = xi - tau * r
                step = -np.linalg.solve(jac, res[..., None])[..., 0]
                new = xi + step
                Cn = self.c_in + new @ self.nu.T
                bad = np.any(Cn < 0, axis=-1) | np.any(new < 0, axis=-1)
                xi = np.where(bad[:, None], 0.5 * (xi + np.clip(new, 0, None)), new)
                if np.max(np.abs(res)) < 1e-10 * max(float(self.c_in.max()), 1.0):
                    break
        return self.c_in + xi @ self.nu.T

    def concentrations_at(self, tau, T):
        """The same for one temperature, in plain floats (brentq on the extent for one reaction)."""
        if self.m != 1:
            return self.concentrations(tau, T)[0]
        k = float(self.k0[0]) * math.exp(-float(self.E[0]) / T)
        nu, n, c_in = self.nu[:, 0].tolist(), self.orders[0].tolist(), self.c_in.tolist()

        def f(xi):
            g = 1.0
            for c, v, o in zip(c_in, nu, n, strict=True):
                if o:
                    g *= max(c + v * xi, 0.0) ** o
            return xi - tau * k * g

        xi = brentq(f, 0.0, self.xi_max, xtol=1e-12 * self.xi_max, rtol=1e-14) if f(self.xi_max) > 0 else self.xi_max
        return self.c_in + self.nu[:, 0] * xi

    def residual_at(self, tau, T_in, T):
        """Energy balance [K/s] at one temperature."""
        C = self.concentrations_at(tau, T)
        r = self.rates(C[None, :], np.array([T]))[0]
        sc = self.sc
        return float((T_in - T) / tau + r @ self.J - self.kappa * (T - sc.T_c) - self.lam * (T - sc.T_amb) + self.p)

    def residual(self, tau, T_in, T):
        """Energy balance [K/s] with the mass balances satisfied, for an array of T."""
        T = np.atleast_1d(np.asarray(T, dtype=float))
        r = self.rates(self.concentrations(tau, T), T)
        sc = self.sc
        return (T_in - T) / tau + r @ self.J - self.kappa * (T - sc.T_c) - self.lam * (T - sc.T_amb) + self.p

    def window(self, T_in, tau):
        sc = self.sc
        lo = min(T_in, sc.T_c if self.kappa else T_in, sc.T_amb if self.lam else T_in) - 5.0
        hi = max(T_in, sc.T_c if self.kappa else T_in, sc.T_amb if self.lam else T_in)
        hi += float(np.sum(np.maximum(self.J, 0.0))) * float(np.sum(self.c_in)) + self.p * tau + 5.0
        return lo, hi

    def jacobian(self, tau, C, T):
        r = self.rates(C, T)
        dr_dC = r[:, None] * self.orders / np.maximum(C, 1e-300)[None, :]
        dr_dT = r * self.E / T**2
        n = self.n
        Jm = np.zeros((n + 1, n + 1))
        Jm[:n, :n] = -np.eye(n) / tau + self.nu @ dr_dC
        Jm[:n, n] = self.nu @ dr_dT
        Jm[n, :n] = self.J @ dr_dC
        Jm[n, n] = -1.0 / tau + self.J @ dr_dT - self.kappa - self.lam
        return Jm

    def cell(self, tau, T_in):
        """(region code, state count, hottest stable temperature) at one cell."""
        lo, hi = self.window(T_in, tau)
        Tg = np.linspace(lo, hi, self.n_scan)
        g = self.residual(tau, T_in, Tg)
        states = []
        for k in np.nonzero(np.sign(g[:-1]) * np.sign(g[1:]) < 0)[0]:
            T = brentq(lambda t: self.residual_at(tau, T_in, t), Tg[k], Tg[k + 1], xtol=1e-10)
            C = self.concentrations_at(tau, T)
            ev = np.linalg.eigvals(self.jacobian(tau, C, T))
            h = 1e-4
            dg = (self.residual_at(tau, T_in, T + h) - self.residual_at(tau, T_in, T - h)) / (2 * h)
            sens = (1.0 / tau) / -dg if dg != 0 else math.inf  # dT/dT_in (implicit function theorem)
            states.append((T, bool(np.all(ev.real < 0)), sens))
        stable = [s for s in states if s[1]]
        if any(s[0] > self.sc.limits.T_max for s in stable):
            code = RUNAWAY
        elif not stable:
            code = UNSTABLE
        elif len(states) > 1:
            code = MULTIPLE
        elif abs(stable[0][2]) > self.sc.policy.sensitivity:
            code = SENSITIVE
        else:
            code = STABLE
        return code, len(states), max((s[0] for s in stable), default=math.nan)


# -- helpers -----------------------------------------------------------------------------------------------
def load(name: str):
    path = ROOT / "scenarios" / f"{name}.json"
    return parse_scenario(json.loads(path.read_text())).to_core()


def timed(fn, repeat: int) -> tuple[list[float], list[float], object]:
    """Wall and CPU (this process) times of ``repeat`` runs after one warm-up."""
    out = fn()
    wall, cpu = [], []
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return wall, cpu, out


def median_time(fn, repeat: int) -> tuple[float, float, object]:
    wall, cpu, out = timed(fn, repeat)
    return statistics.median(wall), statistics.median(cpu), out


def verdict(ok: bool) -> str:
    return "PASS" if ok else "FAIL"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baseline-cells", type=int, default=300, help="cells the baseline is timed on")
    ap.add_argument("--repeat", type=int, default=7, help="timed runs of exomap's map (median)")
    ap.add_argument("--demo", nargs="*", default=list(DEMOS), choices=list(DEMOS))
    args = ap.parse_args(argv)
    results: list[tuple[str, bool]] = []
    print("exomap operating map vs per-cell baseline (scan + brentq + Jacobian eigenvalues), one process")
    load1 = os.getloadavg()[0]
    print(
        f"load average {load1:.1f} on {os.cpu_count()} cores"
        + (
            "  -- the machine is busy: wall times are inflated, compare the CPU times"
            if load1 > (os.cpu_count() or 1)
            else ""
        )
    )
    for label in args.demo:
        name = DEMOS[label]
        sc = load(name)
        n_tau, n_tin = sc.map.points
        cells = n_tau * n_tin
        print(f"\n== {label} demo ({name}.json), {n_tau} x {n_tin} cells")
        first = time.perf_counter()
        operating_map(sc)
        first = time.perf_counter() - first
        repeat = args.repeat if first < 2.0 else 3
        t_ex, c_ex, m = median_time(lambda sc=sc: operating_map(sc), repeat)
        print(
            f"exomap   median {t_ex * 1e3:10.1f} ms wall, {c_ex * 1e3:.1f} ms CPU over {repeat} runs  "
            f"({t_ex / cells * 1e6:.2f} us per cell)"
        )
        base = Baseline(sc)
        rng = np.random.default_rng(2024)
        picks = [(int(rng.integers(n_tin)), int(rng.integers(n_tau))) for _ in range(args.baseline_cells)]
        t0, c0 = time.perf_counter(), time.process_time()
        out = [base.cell(float(m.tau[j]), float(m.T_in[i])) for i, j in picks]
        t_sub, c_sub = time.perf_counter() - t0, time.process_time() - c0
        t_base, c_base = t_sub / len(picks) * cells, c_sub / len(picks) * cells
        same_region = sum(int(o[0] == m.region[i, j]) for o, (i, j) in zip(out, picks, strict=True))
        same_count = sum(int(o[1] == m.state_count[i, j]) for o, (i, j) in zip(out, picks, strict=True))
        print(
            f"baseline {t_sub:10.2f} s on {len(picks)} random cells -> {t_base:.1f} s extrapolated to {cells} "
            f"cells ({t_sub / len(picks) * 1e3:.2f} ms per cell)"
        )
        print(
            f"baseline agrees with exomap on {same_region}/{len(picks)} regions and {same_count}/{len(picks)} "
            f"state counts of those cells"
        )
        ratio = t_base / t_ex
        print(f"ratio    exomap is {ratio:,.0f}x faster (wall); {c_base / c_ex:,.0f}x in CPU time")
        if label in TARGET_MS:
            ok = t_ex * 1e3 <= TARGET_MS[label]
            print(
                f"[{verdict(ok)}] {label} 200x200 median {t_ex * 1e3:.1f} ms <= {TARGET_MS[label]:.0f} ms  "
                f"(CPU median {c_ex * 1e3:.1f} ms: {verdict(c_ex * 1e3 <= TARGET_MS[label])} on CPU time)"
            )
            results.append((f"{label} time", ok))
        if label == "adiabatic":
            ok = ratio >= TARGET_RATIO
            print(f"[{verdict(ok)}] {label} >= {TARGET_RATIO:.0f}x faster than the baseline ({ratio:,.0f}x)")
            results.append((f"{label} ratio", ok))
        if label == "mild":
            continue
        per_cell = {}
        # scaling is judged on the fastest of the runs (the least disturbed by other load on the machine)
        for n in (50, 100, 200, 400):
            rep = max(1, min(repeat, 3 if n >= 400 else repeat))
            wall, cpu, _ = timed(lambda sc=sc, n=n: operating_map(sc, points=(n, n)), rep)
            t_n = min(wall)
            per_cell[n] = t_n / (n * n)
            print(
                f"scaling  {n:3d}^2 = {n * n:6d} cells  best {t_n * 1e3:10.1f} ms wall, median "
                f"{statistics.median(wall) * 1e3:.1f} ms wall, {statistics.median(cpu) * 1e3:.1f} ms CPU "
                f"({per_cell[n] * 1e6:.2f} us per cell)"
            )
        ok = per_cell[400] <= SCALING_SLACK * per_cell[200]
        print(
            f"[{verdict(ok)}] {label} linear scaling: per-cell cost at 400^2 is "
            f"{per_cell[400] / per_cell[200]:.2f} x that at 200^2 (<= {SCALING_SLACK})"
        )
        results.append((f"{label} scaling", ok))
        tracemalloc.start()
        operating_map(sc, points=(400, 400))
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        ok = peak / 2**20 < TARGET_MEMORY_MB
        print(f"[{verdict(ok)}] {label} peak traced memory at 400^2: {peak / 2**20:.1f} MB < {TARGET_MEMORY_MB:.0f} MB")
        results.append((f"{label} memory", ok))
    n_pass = sum(ok for _, ok in results)
    print(
        f"\nsummary: {n_pass} of {len(results)} targets met"
        + "".join(f"\n  FAIL {what}" for what, ok in results if not ok)
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
