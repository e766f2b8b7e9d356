"""Run exomap and the reference solver on one random scenario and list every disagreement.

What is compared (issue 9), with the tolerances used (a comparison whose answer is ill-conditioned at the
tolerance is skipped and counted as such, never passed silently):

* the document parses and validates (a valid scenario refused is a disagreement);
* map regions and state counts at every row of a few random residence-time columns of a coarse map; a cell
  is skipped when a fold lies within ``FOLD_SKIP`` K of its feed temperature, a stable state within
  ``EDGE_SKIP`` K of the maximum temperature, |dT/dT_in| within 1e-6 (relative) of the sensitivity threshold,
  or a state's closest eigenvalue to the imaginary axis is closer than ``MARGIN_SKIP``/tau to it (or than
  1e-13 of the largest eigenvalue, the rounding of the eigenvalue solver);
* steady states at random operating points and at a point between two folds: count, temperatures
  (``T_ATOL`` K, widened by the conditioning 1/|dT_in/dT| next to folds), concentrations (``C_RTOL``
  relative to the feed scale), stability class and the oscillatory flag (skipped where the leading eigenvalues
  are within ``OSC_SKIP`` of meeting: an imaginary part below ``OSC_SKIP`` x |lambda|, two real ones that close,
  or a real and a complex one that close in real part); a result that is not complete must not say ``success``,
  and a complete one must, except where exomap says a class or flag "cannot be resolved" for states whose
  comparison was skipped as ill-conditioned here (counted apart, never passed);
* turning points (kind, tau, T_in, T) and Hopf points (tau, T_in, T, frequency) of a branch along the feed
  temperature and of a branch along the residence time (at the ``full`` level on every seed, at ``quick`` on one
  seed in 40 and at ``bulk`` on one in 10: the reference's grid for it costs ~5 s).
"""

from __future__ import annotations

import math
import re
import traceback
from dataclasses import dataclass, field

import numpy as np

from .scenarios import Case
from .solver import Column, Reference, tau_branch_points

T_ATOL = 1e-6  # K, steady temperatures clear of folds
C_RTOL = 1e-6  # concentrations, relative to the largest feed concentration
FOLD_SKIP = 1e-5  # K of feed temperature: closer to a fold the state count is ill-conditioned
EDGE_SKIP = 1e-5  # K: a stable state this close to the maximum temperature makes the region ambiguous
MARGIN_SKIP = 1e-7  # distance of the closest eigenvalue from the imaginary axis times the residence time
OSC_SKIP = 1e-6  # relative to |leading eigenvalue|: closer to a coalescence the oscillatory flag is ill-conditioned
FOLD_TIN_ATOL = 1e-6  # K, feed temperature of a turning point along the feed temperature
FOLD_T_ATOL = 1e-3  # K, temperature of a turning point (ill-conditioned: a square root of the error)
FOLD_TAU_RTOL = 1e-6  # residence time of a turning point along the residence time
HOPF_TIN_ATOL = 1e-5  # K
HOPF_T_ATOL = 1e-4  # K
HOPF_TAU_RTOL = 1e-5
HOPF_W_RTOL = 1e-4  # angular frequency


@dataclass
class Outcome:
    seed: int
    description: str
    disagreements: list = field(default_factory=list)
    compared: dict = field(default_factory=dict)
    skipped: dict = field(default_factory=dict)

    def count(self, what: str, n: int = 1) -> None:
        self.compared[what] = self.compared.get(what, 0) + n

    def skip(self, what: str, n: int = 1) -> None:
        self.skipped[what] = self.skipped.get(what, 0) + n

    def disagree(self, what: str, **details) -> None:
        self.disagreements.append({"what": what, **details})


def _window(ref: Reference, T_in_lo: float, T_in_hi: float, tau: float) -> tuple[float, float]:
    return ref.temperature_window(T_in_lo, T_in_hi, tau)


def _near_axis(state, tau: float) -> bool:
    """The stability class is ill-conditioned: an eigenvalue sits on the imaginary axis to within the
    tolerance (next to a fold or a Hopf point)."""
    ev = np.array(state.eigenvalues)
    closest = float(np.min(np.abs(ev.real)))
    return closest * tau < MARGIN_SKIP or closest < 1e-13 * float(np.max(np.abs(ev)))


def flushing_modes(pb) -> int:
    """How many eigenvalues of the species + energy Jacobian are exactly -1/tau, from the balances' structure:
    J + I/tau = [nu, 0; h, -(kappa + lambda)] [dr/dC, dr/dT; 0, 1] (the last row and column only with heat
    exchange), so the eigenvalue -1/tau has at least n - rank(nu) (+1 without heat exchange: T - J.xi) independent
    eigenvectors (left ones: the reaction invariants), and at least n - (species some rate depends on) (right
    ones: a species no rate depends on is only flushed). Semisimple: real whatever the rounding."""
    nu = np.array([r.nu for r in pb.reactions], dtype=float).T  # species x reactions
    n = nu.shape[0]
    no_exchange = int(pb.UA_jacket == 0.0 and pb.UA_loss == 0.0)
    used = np.any(np.array([r.orders for r in pb.reactions], dtype=float) != 0.0, axis=0)
    return max(n - int(np.linalg.matrix_rank(nu)) + no_exchange, n - int(np.count_nonzero(used)))


def _oscillation_ill_conditioned(state, tau: float = math.inf, flushing: int = 0) -> bool:
    """Whether the leading eigenvalues are a complex pair is ill-conditioned: they are within ``OSC_SKIP`` (relative
    to the leading eigenvalue's modulus) of meeting each other (a node turning into a focus, a nearly defective
    cluster), or a real and a complex eigenvalue are that close to leading together. The ``flushing`` eigenvalues
    closest to -1/tau (:func:`flushing_modes`), where they lie within ``OSC_SKIP`` of it, are exactly real."""
    ev = np.array(state.eigenvalues, dtype=complex)
    exact = np.zeros(ev.size, dtype=bool)
    if flushing and math.isfinite(tau):
        lam = -1.0 / tau
        idx = np.argsort(np.abs(ev - lam))[:flushing]
        idx = idx[np.abs(ev[idx] - lam) <= OSC_SKIP * abs(lam)]
        ev[idx], exact[idx] = lam, True
    k = int(np.argmax(ev.real))
    tol = OSC_SKIP * abs(ev[k])
    lead = np.nonzero(ev.real >= ev[k].real - tol)[0]
    kinds = set()
    for i in lead:
        if exact[i]:
            kinds.add("real")
        elif abs(ev[i].imag) > tol:
            kinds.add("complex")
        elif ev[i].imag != 0.0:
            return True  # an imaginary part within the tolerance
        elif np.any(~exact & (ev.imag == 0.0) & (np.abs(ev.real - ev[i].real) <= tol) & (np.arange(ev.size) != i)):
            return True  # two real eigenvalues that close may be a pair
        else:
            kinds.add("real")
    return len(kinds) > 1


def _ambiguous_cell(ref: Reference, col: Column, T_in: float, states) -> str | None:
    if any(abs(f.T_in - T_in) < FOLD_SKIP for f in col.folds):
        return "fold"
    if any(s.stable and abs(s.T - ref.pb.T_max) < EDGE_SKIP for s in states):
        return "max_temperature"
    if any(_near_axis(s, col.tau) for s in states):
        return "stability"
    if len(states) == 1 and abs(abs(states[0].sensitivity) - ref.pb.sensitivity) < 1e-6 * ref.pb.sensitivity:
        return "sensitivity"
    return None


#: What each level compares: map size and columns checked, random points, branch along the feed temperature,
#: branch along the residence time.
LEVELS = {
    "bulk": {
        "map": (8, 10),
        "columns": 1,
        "points": 1,
        "tin_branch": True,
        "tau_branch": False,
        "every": 4,
        "tau_every": 10,
    },
    "lite": {"map": (8, 10), "columns": 2, "points": 1, "tin_branch": True, "tau_branch": False},
    # the reference's residence-time branch costs ~5 s (a 160 x 1200 grid of isothermal solves), 7 times the rest
    # of a quick scenario: one seed in 40 (+0.12 s per scenario on average)
    "quick": {
        "map": (16, 12),
        "columns": 3,
        "points": 2,
        "tin_branch": True,
        "tau_branch": False,
        "tau_every": 40,
    },
    "full": {"map": (24, 20), "columns": 5, "points": 4, "tin_branch": True, "tau_branch": True},
}


def compare_case(case: Case, level: str = "quick", rng_seed: int | None = None) -> Outcome:
    """All comparisons for one case at a ``level`` of ``LEVELS``."""
    from exomap.core.branch import branch
    from exomap.core.opmap import operating_map
    from exomap.core.regions import REGIONS
    from exomap.core.steady import steady_states
    from exomap.schema import parse_scenario

    out = Outcome(case.seed, case.describe())
    rng = np.random.default_rng(case.seed + 10_000_019 if rng_seed is None else rng_seed)
    ref = Reference(case.problem)
    try:
        sc = parse_scenario(case.doc).to_core()
    except Exception as exc:  # a valid scenario must parse
        out.disagree("refused", error=repr(exc))
        return out
    keys = {code: key for code, key, _ in REGIONS}
    (tlo, thi), (Tlo, Thi) = case.tau_range, case.T_in_range
    c_scale = max(max(case.problem.c_in), 1e-300)
    n_flush = flushing_modes(case.problem)

    def guarded(what: str, fn, *args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except Exception as exc:
            where = {k: v for k, v in kwargs.items() if k in ("tau", "T_in", "lo", "hi", "tau_range", "T_in_range")}
            if len(args) > 1:
                where["args"] = [a for a in args[1:] if isinstance(a, (int, float, str))]
            trace = traceback.format_exc(limit=3)[-600:]
            out.disagree("crash", call=what, error=repr(exc), where=where, trace=trace)
            return None

    # -- map: regions and counts on random columns ----------------------------------------------------
    opt = LEVELS[level]
    n_tau, n_tin = opt["map"]
    mp = None
    if case.seed % opt.get("every", 1) == 0:
        mp = guarded(
            "operating_map", operating_map, sc, tau_range=(tlo, thi), T_in_range=(Tlo, Thi), points=(n_tau, n_tin)
        )
    columns: dict[float, Column] = {}

    def column(tau: float) -> Column:
        if tau not in columns:
            lo, hi = _window(ref, Tlo, Thi, tau)
            columns[tau] = ref.column(tau, lo, hi)
        return columns[tau]

    if mp is not None:
        picks = rng.choice(n_tau, size=opt["columns"], replace=False)
        map_bad = False
        for j in sorted(int(p) for p in picks):
            tau = float(mp.tau[j])
            col = column(tau)
            for i, T_in in enumerate(mp.T_in):
                states = col.states(float(T_in), precise=False)
                amb = _ambiguous_cell(ref, col, float(T_in), states)
                if amb:
                    out.skip(f"map cell ({amb})")
                    continue
                out.count("map cells")
                want, got = ref.region(states), keys[int(mp.region[i, j])]
                out.count(f"map cells {want}")
                n_got = int(mp.state_count[i, j])
                if want != got or n_got != len(states):
                    map_bad = True
                    out.disagree(
                        "map cell",
                        tau=tau,
                        T_in=float(T_in),
                        exomap={"region": got, "count": n_got},
                        reference={
                            "region": want,
                            "count": len(states),
                            "T": [s.T for s in states],
                            "stability": [s.stability for s in states],
                        },
                    )
        if map_bad and mp.success:
            out.disagree("map success", note="map says success but some cells disagree with the reference")

    # -- steady states at points -----------------------------------------------------------------------
    points = []
    for _ in range(opt["points"]):
        points.append((math.exp(rng.uniform(math.log(tlo), math.log(thi))), float(rng.uniform(Tlo, Thi))))
    if not columns:
        column(points[0][0])
    # a point between two folds of a column that has them (three states expected there)
    for col in columns.values():
        ig = [f for f in col.folds if f.kind == "ignition"]
        ex = [f for f in col.folds if f.kind == "extinction"]
        # (not where the folds lie below 0 K of feed temperature: no feed is that cold, and exomap refuses it as bad
        # input, rightly; seed 716979)
        if ig and ex and 0.5 * (ig[0].T_in + ex[0].T_in) > 0:
            points.append((col.tau, 0.5 * (ig[0].T_in + ex[0].T_in)))
            break
    for tau, T_in in points:
        # a point between two folds may lie outside the map's feed-temperature window: its own column then
        col = column(tau) if Tlo <= T_in <= Thi else ref.column(tau, *_window(ref, T_in, T_in, tau))
        want = col.states(T_in)
        if any(abs(f.T_in - T_in) < FOLD_SKIP for f in col.folds):
            out.skip("point (fold)")
            continue
        res = guarded("steady_states", steady_states, sc, tau, T_in)
        if res is None:
            continue
        out.count("points")
        for s_ex in res.states:
            if min(s_ex.C) < 0:
                out.disagree("negative concentration", tau=tau, T_in=T_in, T=s_ex.T, exomap=list(s_ex.C))
        if len(res.states) != len(want):
            out.disagree(
                "state count",
                tau=tau,
                T_in=T_in,
                exomap={"count": len(res.states), "T": [s.T for s in res.states], "success": res.success},
                reference={"count": len(want), "T": [s.T for s in want]},
            )
            if res.success:
                out.disagree("success", tau=tau, T_in=T_in, note="incomplete answer says success")
            continue
        tols = [T_ATOL * max(1.0, 1.0 / max(abs(s.dTin_dT), 1e-6)) for s in want]
        if any(abs(a.T - b.T) > t for a, b, t in zip(res.states, want, tols, strict=True)):
            # report the two lists once (a missed state plus a spurious one shifts every pair)
            out.disagree(
                "temperature",
                tau=tau,
                T_in=T_in,
                exomap=[s.T for s in res.states],
                reference=[s.T for s in want],
                tol=max(tols),
                success=res.success,
            )
            if not res.success:
                continue
            out.disagree("success", tau=tau, T_in=T_in, note="wrong states with success")
            continue
        ill_T = []  # exomap's temperatures of the states whose class or flag is ill-conditioned here
        for s_ex, s_ref in zip(res.states, want, strict=True):
            out.count("states")
            dc = np.max(np.abs(np.array(s_ex.C) - np.array(s_ref.C))) / c_scale
            if dc > C_RTOL * max(1.0, 1.0 / max(abs(s_ref.dTin_dT), 1e-6)):
                out.disagree("concentrations", tau=tau, T_in=T_in, exomap=list(s_ex.C), reference=list(s_ref.C))
            if _near_axis(s_ref, tau):
                out.skip("stability (margin)")
                ill_T.append(s_ex.T)
                continue
            osc_ill = _oscillation_ill_conditioned(s_ref, tau, n_flush)
            if osc_ill:
                out.skip("oscillatory (coalescence)")
                ill_T.append(s_ex.T)
            if s_ex.stability != s_ref.stability or (not osc_ill and s_ex.oscillatory != s_ref.oscillatory):
                out.disagree(
                    "stability",
                    tau=tau,
                    T_in=T_in,
                    T=s_ref.T,
                    exomap=[s_ex.stability, s_ex.oscillatory],
                    reference=[s_ref.stability, s_ref.oscillatory],
                    eigenvalues=[str(v) for v in s_ref.eigenvalues],
                )
        if not res.success:
            # exomap may say that the rounding hides a class or flag only for states found ill-conditioned here
            named = set(re.findall(r"(\d[\d.e+-]*) K", res.message))
            if ill_T and "cannot be resolved" in res.message and named <= {f"{t:.6g}" for t in ill_T}:
                out.skip("point success (unresolved where ill-conditioned)")
                continue
            out.disagree("success", tau=tau, T_in=T_in, note="complete answer says no success", message=res.message)

    # -- branch along the feed temperature ------------------------------------------------------------
    tau_b = float(next(iter(columns))) if columns else math.sqrt(tlo * thi)
    br = None
    if opt["tin_branch"]:
        br = guarded("branch feed_temperature", branch, sc, "feed_temperature", tau=tau_b, lo=Tlo, hi=Thi)
    if br is not None:
        col = column(tau_b)
        _match_points(
            out, "fold (feed temperature)", [f for f in col.folds if Tlo < f.T_in < Thi], br.turning_points, "T_in"
        )
        _match_points(
            out, "hopf (feed temperature)", [h for h in col.hopfs if Tlo < h.T_in < Thi], br.hopf_points, "T_in"
        )

    # -- branch along the residence time --------------------------------------------------------------
    if opt["tau_branch"] or case.seed % opt.get("tau_every", 10**9) == 1:
        # through the middle of a multiplicity when a column has one (the branch then has turning points)
        T_b = float(rng.uniform(Tlo, Thi))
        for col in columns.values():
            ig = [f for f in col.folds if f.kind == "ignition" and Tlo < f.T_in < Thi]
            ex = [f for f in col.folds if f.kind == "extinction" and Tlo < f.T_in < Thi]
            if ig and ex:
                T_b = 0.5 * (ig[0].T_in + ex[0].T_in)
                break
        folds, hopfs = tau_branch_points(ref, T_b, tlo, thi)
        br = guarded("branch residence_time", branch, sc, "residence_time", T_in=T_b, lo=tlo, hi=thi)
        if br is not None:
            _match_points(out, "fold (residence time)", folds, br.turning_points, "tau")
            _match_points(out, "hopf (residence time)", hopfs, br.hopf_points, "tau")
    return out


def _close(a, b, along: str, hopf: bool) -> bool:
    if hopf:
        ok = abs(a.T - b.T) <= HOPF_T_ATOL and abs(a.T_in - b.T_in) <= HOPF_TIN_ATOL
        ok &= abs(a.tau - b.tau) <= HOPF_TAU_RTOL * b.tau
        return ok and abs(a.frequency - b.frequency) <= HOPF_W_RTOL * b.frequency
    ok = a.kind == b.kind and abs(a.T - b.T) <= FOLD_T_ATOL
    return ok and abs(a.T_in - b.T_in) <= FOLD_TIN_ATOL and abs(a.tau - b.tau) <= FOLD_TAU_RTOL * b.tau


def _match_points(out: Outcome, what: str, want: list, got, along: str) -> None:
    hopf = what.startswith("hopf")
    got = list(got)
    used = set()
    for w in want:
        out.count(what)
        hit = next((k for k, g in enumerate(got) if k not in used and _close(g, w, along, hopf)), None)
        if hit is None:
            near = min(got, key=lambda g: abs(g.T - w.T), default=None)
            out.disagree(what + " missing", reference=_pt(w), nearest_exomap=_pt(near) if near else None)
        else:
            used.add(hit)
    for k, g in enumerate(got):
        if k not in used:
            out.disagree(what + " extra", exomap=_pt(g))


def _pt(p) -> dict:
    d = {"tau": p.tau, "T_in": p.T_in, "T": p.T}
    if hasattr(p, "kind"):
        d["kind"] = p.kind
    if hasattr(p, "frequency"):
        d["frequency"] = p.frequency
    return d
