"""The operating map: residence time against feed temperature, regions shaded, boundaries exact.

Why it is fast: the feed temperature is explicit on the steady-state manifold, :math:`T_{in} = T_{in}(\\tau, s)`
(``exomap.core.manifold``). So the map samples one curve per residence-time column (not per cell), splits it
at its folds — the zeros of :math:`\\partial T_{in}/\\partial s`, refined by vectorised bisection to machine
precision — into monotone pieces, and every cell's steady states are the pieces whose feed-temperature span
contains the cell's feed temperature, located by one global ``searchsorted`` and polished by a Newton step.
The cost is O(n_tau · N_samples + cells), all of it in numpy array operations.

Boundaries are not read off the grid: ignition and extinction points are the refined folds of each column
(plus the cusp where they meet, solved from :math:`\\partial_s T_{in} = \\partial_s^2 T_{in} = 0`), Hopf
points are refined zeros of the leading real part of the reduced Jacobian where its leading pair is complex,
and the max-temperature contour is :math:`T_{in}(\\tau, s(T_{max}))` where that state is stable.

References
----------
[1] C. van Heerden, Ind. Eng. Chem. 45 (1953) 1242-1247 (multiplicity, ignition and extinction).
[2] A. Uppal, W. H. Ray, A. B. Poore, Chem. Eng. Sci. 29 (1974) 967-985 (cusp and Hopf points of the CSTR).
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

from exomap.core import valve as valve_mod
from exomap.core.errors import LimitExceededError, ModelInputError
from exomap.core.manifold import W_BOUND, Manifold, Samples
from exomap.core.regions import CODE, REGIONS, legend
from exomap.core.scenario import Scenario, validate

#: Most cells one map may have (the web layer may set a lower limit).
MAX_CELLS = 1_000_000
#: Most points along one axis.
MAX_POINTS = 2000
#: Samples of the manifold per residence-time column (explicit one-reaction path, general path).
SAMPLES_EXPLICIT = 256
SAMPLES_GENERAL = 160
#: States polished at once (keeps the working arrays in cache; see _cell_states).
POLISH_CHUNK = 8192
# Newton evaluations of a state at most. A state is done when the error its last Newton step leaves, predicted
# from the step and the curvature of T_in(s) across its interval, is below POLISH_ERROR and the step below
# POLISH_STEP (both relative to max(1, |s|)); where the curvature is not known, when the step is below
# POLISH_ACCEPT.
POLISH_ITERATIONS = 8
POLISH_ERROR = 1e-14
POLISH_STEP = 1e-6
POLISH_ACCEPT = 1e-9
# points of the grid searched for a hidden fold pair inside a dip of |dT_in/ds|
UNHIDE_GRID = 17
UNHIDE_ZOOMS = 3
#: Columns used for the boundary curves at least (more than the map's when the map is coarse).
BOUNDARY_COLUMNS = 200
SPACINGS = ("log", "linear")
#: None as a 0-d object array: np.where with it gives object arrays whose tolist() has None for NaN.
_NONE = np.array(None, dtype=object)


@dataclass(frozen=True)
class MapResult:
    """Operating map. Grids are indexed [feed temperature][residence time]."""

    tau: np.ndarray
    T_in: np.ndarray
    region: np.ndarray
    state_count: np.ndarray
    max_temperature: np.ndarray
    valve_opening: np.ndarray
    valve_limited: np.ndarray
    boundaries: dict
    T_max: float
    spacing: str
    success: bool
    message: str

    def to_dict(self) -> dict:
        def clean(rows: np.ndarray) -> list:
            # numpy does the rounding and the NaN -> None swap; tolist() builds the Python lists in C
            rows = np.asarray(rows, dtype=float)
            return np.where(np.isfinite(rows), np.round(rows, 4), _NONE).tolist()

        def curve(arr: np.ndarray) -> list:
            arr = np.asarray(arr, dtype=float)
            return np.where(np.isfinite(arr), arr, _NONE).tolist()

        b = self.boundaries
        return {
            "residence_time_s": self.tau.tolist(),
            "feed_temperature_K": self.T_in.tolist(),
            "spacing": self.spacing,
            "region": self.region.tolist(),
            "legend": legend(),
            "state_count": self.state_count.tolist(),
            "max_temperature_K": clean(self.max_temperature),
            "limit_temperature_K": self.T_max,
            # an opening no valve can take (below 0 or above 1) is None; valve_limited is true there
            "valve_opening": curve(
                np.where((self.valve_opening >= 0) & (self.valve_opening <= 1), self.valve_opening, np.nan)
            ),
            "valve_limited": np.broadcast_to(self.valve_limited, self.region.shape).tolist(),
            "boundaries": {
                "ignition": curve(b["ignition"]),
                "extinction": curve(b["extinction"]),
                "hopf": curve(b["hopf"]),
                "max_temperature": curve(b["max_temperature"]),
                "cusp": curve(b["cusp"]),
            },
            "success": self.success,
            "message": self.message,
        }

    def to_csv(self) -> str:
        keys = {code: key for code, key, _ in REGIONS}
        out = io.StringIO()
        w = csv.writer(out, lineterminator="\n")
        w.writerow(
            ["residence_time_s", "feed_temperature_K", "region", "state_count", "max_temperature_K", "valve_limited"]
        )
        for i, T_in in enumerate(self.T_in):
            for j, tau in enumerate(self.tau):
                mt = self.max_temperature[i, j]
                w.writerow(
                    [
                        f"{tau:.6g}",
                        f"{T_in:.6g}",
                        keys[int(self.region[i, j])],
                        int(self.state_count[i, j]),
                        "" if not math.isfinite(mt) else f"{mt:.4f}",
                        int(bool(self.valve_limited[j])),
                    ]
                )
        return out.getvalue()


def grid_axes(sc: Scenario, tau_range, T_in_range, points, spacing):  # noqa: ANN001
    """The map's axes (tau [s], T_in [K]) from a window (None: the scenario's map window); raises
    ``ModelInputError``/``LimitExceededError`` naming the field. Shared with the probability map."""
    if spacing not in SPACINGS:
        raise ModelInputError("spacing must be 'log' or 'linear'", field="spacing")
    spec = sc.map
    if tau_range is None:
        tau_range = spec.tau_range if spec else (sc.tau_nominal / 10.0, sc.tau_nominal * 10.0)
    if T_in_range is None:
        T_in_range = spec.T_in_range if spec else (sc.T_in - 40.0, sc.T_in + 40.0)
    if points is None:
        points = spec.points if spec else (200, 200)
    lo, hi = (float(v) for v in tau_range)
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        raise ModelInputError(
            "residence_time range must be two increasing positive values in s", field="residence_time"
        )
    tlo, thi = (float(v) for v in T_in_range)
    if not (math.isfinite(tlo) and math.isfinite(thi) and 0 < tlo < thi):
        raise ModelInputError(
            "feed_temperature range must be two increasing absolute temperatures in K", field="feed_temperature"
        )
    n_tau, n_tin = (int(v) for v in points)
    if n_tau < 2 or n_tin < 2:
        raise ModelInputError("points must be at least 2 along each axis", field="points")
    if n_tau > MAX_POINTS or n_tin > MAX_POINTS or n_tau * n_tin > MAX_CELLS:
        raise LimitExceededError(
            f"{n_tau} x {n_tin} cells is more than the limit ({MAX_CELLS} cells, {MAX_POINTS} per axis)", field="points"
        )
    tau = np.geomspace(lo, hi, n_tau) if spacing == "log" else np.linspace(lo, hi, n_tau)
    return tau, np.linspace(tlo, thi, n_tin)


def _refine(
    mf: Manifold,
    tau: np.ndarray,
    a: np.ndarray,
    b: np.ndarray,
    fa: np.ndarray,
    func,
    guess: np.ndarray | None,
    iterations: int = 60,
) -> tuple[np.ndarray, Samples]:
    """Vectorised root of func(Samples) bracketed by coordinates a and b, to machine precision: the secant
    through the two latest points where it falls inside the bracket, else false position with the
    Anderson-Bjorck weighting (the end kept twice has its value scaled by 1 - f(c)/f(b), or halved when that is
    not positive); never leaves the bracket. Each iteration evaluates only the roots not yet converged."""
    fb = func(_eval(mf, tau, b, guess))
    fa = np.asarray(fa, dtype=float).copy()
    a, b = a.astype(float).copy(), b.astype(float).copy()  # (a, fa) the older end, (b, fb) the latest
    p_, fp = a.copy(), fa.copy()  # the point before the latest
    c_prev = np.full(a.shape, np.nan)
    c = np.where(fb == 0, b, 0.5 * (a + b))
    guess = None if guess is None else guess.copy()
    act = np.nonzero(fb != 0)[0]
    for _ in range(iterations):
        if act.size == 0:
            break
        A, B, FA, FB, P, FP = a[act], b[act], fa[act], fb[act], p_[act], fp[act]
        lo, hi = np.minimum(A, B), np.maximum(A, B)
        with np.errstate(invalid="ignore", divide="ignore"):
            C = (A * FB - B * FA) / (FB - FA)
            # the secant through the two latest points where it stays inside the bracket (superlinear where the
            # kept end's weight makes false position linear)
            sec = B - FB * (B - P) / (FB - FP)
        C = np.where(np.isfinite(sec) & (sec > lo) & (sec < hi), sec, C)
        C = np.where(np.isfinite(C) & (C > lo) & (C < hi), C, 0.5 * (A + B))
        # np.take: numpy's fancy indexing of rows of a 2-D array is several times slower
        e = _eval(mf, tau[act], C, None if guess is None else np.take(guess, act, axis=0))
        FC = func(e)
        swap = np.sign(FC) != np.sign(FB)  # the root lies between C and B: B becomes the older end
        with np.errstate(invalid="ignore", divide="ignore"):
            m = 1.0 - FC / FB
        m = np.where(m > 0, m, 0.5)
        A, FA = np.where(swap, B, A), np.where(swap, FB, FA * m)
        p_[act], fp[act] = B, FB
        a[act], fa[act], b[act], fb[act] = A, FA, C, FC
        c[act] = C
        if guess is not None:
            guess[act] = e.C
        done = (
            (np.abs(C - A) <= 4e-16 * np.maximum(np.maximum(np.abs(A), np.abs(C)), 1.0))
            | (FC == 0)
            | (np.abs(C - c_prev[act]) <= 1e-15 * np.abs(C))
        )
        c_prev[act] = C
        act = act[~done]
    return c, _eval(mf, tau, c, guess)


def _eval(mf: Manifold, tau: np.ndarray, s: np.ndarray, guess: np.ndarray | None) -> Samples:
    """Manifold at (tau, s); on the general path the isothermal solve starts from concentrations ``guess``."""
    if mf.explicit:
        return mf.explicit_eval(tau, s)
    return mf.general_eval(tau, s, guess)


def _hopf_function(mf: Manifold, e: Samples) -> np.ndarray:
    return mf.stability(e.tau, e.T, e.xi, mf.state_C(e))[1]


def operating_map(
    sc: Scenario,
    *,
    tau_range: tuple[float, float] | None = None,
    T_in_range: tuple[float, float] | None = None,
    points: tuple[int, int] | None = None,
    spacing: str = "log",
    c_in: tuple[float, ...] | None = None,
    T_c: float | None = None,
    samples: int | None = None,
) -> MapResult:
    """The operating map of a scenario.

    Parameters
    ----------
    sc : Scenario
    tau_range : (float, float), optional
        Residence-time window [s]; default the scenario's map window.
    T_in_range : (float, float), optional
        Feed-temperature window [K].
    points : (int, int), optional
        (n_tau, n_tin) grid points [-].
    spacing : str
        ``"log"`` or ``"linear"`` spacing of the residence time.
    c_in, T_c : optional
        Feed concentrations [mol/m^3] and coolant temperature [K] overriding the scenario's.

    Returns
    -------
    MapResult

    Raises
    ------
    ModelInputError
        Inverted or non-positive ranges, fewer than 2 points.
    LimitExceededError
        More cells than ``MAX_CELLS``.
    """
    validate(sc)
    tau, T_in = grid_axes(sc, tau_range, T_in_range, points, spacing)
    mf = Manifold(sc, c_in=c_in, T_c=T_c)
    N = samples or (SAMPLES_EXPLICIT if mf.explicit else SAMPLES_GENERAL)
    T_lo, T_hi = mf.temperature_window(float(T_in[0]), float(T_in[-1]), float(tau[-1]))
    smp = mf.sample(tau, T_lo, T_hi, N)
    cols = fold_columns(mf, smp)
    states = _cell_states(mf, smp, cols, T_in)
    region, count, tmax = _classify(sc, states)
    opening = valve_mod.opening_for_flow(sc, sc.vessel.V_set / tau)
    pol = sc.policy
    limited = ~((opening >= pol.valve_min) & (opening <= pol.valve_max))
    if tau.size >= BOUNDARY_COLUMNS:
        bcols, btau = cols, tau
    else:
        btau = (
            np.geomspace(tau[0], tau[-1], BOUNDARY_COLUMNS)
            if spacing == "log"
            else np.linspace(tau[0], tau[-1], BOUNDARY_COLUMNS)
        )
        bcols = fold_columns(mf, mf.sample(btau, T_lo, T_hi, N))
    boundaries = _boundaries(sc, mf, btau, bcols, float(T_in[0]), float(T_in[-1]))
    # a map that is not complete never says success: every cell has at least one steady state (the energy
    # balance is continuous in T and changes sign across the temperature window), and on the general path
    # every sample's isothermal solve must have converged
    empty = int(np.count_nonzero(count == 0))
    unsolved = 0 if mf.explicit else int(np.count_nonzero(~smp.valid))
    problems = []
    if states["unknown"] is not None:
        n_unknown = int(np.count_nonzero(states["unknown"].any(axis=0)))
        problems.append(f"{n_unknown} cell(s) with a steady state whose temperature or stability could not be computed")
    if empty:
        problems.append(f"{empty} cell(s) where no steady state was found")
    if unsolved:
        problems.append(f"{unsolved} manifold sample(s) whose mass balances did not converge")
    message = f"{tau.size} x {T_in.size} cells, {N} samples per column"
    return MapResult(
        tau,
        T_in,
        region,
        count,
        tmax,
        opening,
        limited,
        boundaries,
        sc.limits.T_max,
        spacing,
        not problems,
        message if not problems else f"{message}; incomplete: {'; '.join(problems)}",
    )


# -- per column: folds and monotone pieces ----------------------------------------------------------------
@dataclass
class FoldColumns:
    smp: Samples
    fold_col: np.ndarray  # column of each fold
    fold_k: np.ndarray  # fold lies between samples k and k+1
    fold: Samples  # refined fold points (1-D arrays)
    rising: np.ndarray  # dT_in/ds > 0 before the fold: a local maximum of T_in(s), an ignition point
    lead: np.ndarray  # a function changing sign at Hopf points, on the samples (Manifold.stability)
    cplx: np.ndarray  # where it is meaningful


def unhide_fold_pairs(mf: Manifold, smp: Samples) -> Samples:
    """A fold pair closer together than one sample (next to a cusp) shows no sign change of dT_in/ds. Look
    inside every local minimum of |dT_in/ds| for an extremum of the other sign, and move that sample onto the
    extremum, so that the sign-change search below sees both folds."""
    d = smp.dTin_ds
    mag = np.abs(d)
    sc = (d[:, :-1] * d[:, 1:]) < 0
    dip = np.zeros(d.shape, dtype=bool)
    dip[:, 1:-1] = (mag[:, 1:-1] < mag[:, :-2]) & (mag[:, 1:-1] < mag[:, 2:]) & ~sc[:, :-1] & ~sc[:, 1:]
    dc, dk = np.nonzero(dip)
    if dc.size == 0:
        return smp
    sgn = np.sign(d[dc, dk])
    tau_d = smp.tau[dc, dk]
    lo, hi = smp.s[dc, dk - 1], smp.s[dc, dk + 1]
    xi_d = None if mf.explicit else smp.C[dc, dk]
    # the extremum of sign * dT_in/ds: UNHIDE_ZOOMS zooms of a grid (one vectorised evaluation each, every dip
    # at once; the bracket shrinks 8-fold per zoom), then the vertex of the parabola through the three grid
    # points around it; the value at the vertex is what decides, and a parabola fits a smooth extremum to third
    # order
    g = np.linspace(0.0, 1.0, UNHIDE_GRID)
    n_d = dc.size
    rep = None if xi_d is None else np.repeat(xi_d, UNHIDE_GRID, axis=0)
    for _ in range(UNHIDE_ZOOMS):
        sg = lo[:, None] + (hi - lo)[:, None] * g
        f = sgn[:, None] * _eval(mf, np.repeat(tau_d, UNHIDE_GRID), sg.ravel(), rep).dTin_ds.reshape(n_d, -1)
        f = np.where(np.isfinite(f), f, np.inf)
        kk = np.clip(np.argmin(f, axis=1), 1, UNHIDE_GRID - 2)
        r = np.arange(n_d)
        lo, hi = sg[r, kk - 1], sg[r, kk + 1]
    f0, f1, f2 = f[r, kk - 1], f[r, kk], f[r, kk + 1]
    h = sg[r, kk] - sg[r, kk - 1]
    den = f0 - 2.0 * f1 + f2
    with np.errstate(invalid="ignore", divide="ignore"):
        off = np.where(den > 0, 0.5 * h * (f0 - f2) / den, 0.0)
    s_ext = sg[r, kk] + np.clip(np.where(np.isfinite(off), off, 0.0), -h, h)
    e = _eval(mf, tau_d, s_ext, xi_d)
    hidden = sgn * e.dTin_ds < 0
    if not hidden.any():
        return smp
    hc, hk = dc[hidden], dk[hidden]
    fields = {}
    for name in ("s", "T", "xi", "T_in", "dTin_ds", "dT_ds", "valid", "C"):
        if getattr(smp, name) is None:  # the explicit path carries no concentrations
            fields[name] = None
            continue
        arr = np.array(getattr(smp, name), copy=True)
        arr[hc, hk] = getattr(e, name)[hidden]
        fields[name] = arr
    return Samples(tau=smp.tau, **fields)


def fold_columns(mf: Manifold, smp: Samples) -> FoldColumns:
    """Folds of every sampled column, refined to machine precision, and the Hopf indicator on the samples."""
    smp = unhide_fold_pairs(mf, smp)
    d = smp.dTin_ds
    c, k = np.nonzero((d[:, :-1] * d[:, 1:]) < 0)
    xi0 = None if mf.explicit else smp.C[c, k]
    _, fold = _refine(mf, smp.tau[c, k], smp.s[c, k], smp.s[c, k + 1], d[c, k], lambda e: e.dTin_ds, xi0)
    if mf.m == 1 and mf.kappa == 0 and mf.lam == 0:
        # one reaction, adiabatic: trace = 0 means J beta + alpha = 2/tau, so det = -1/tau^2 < 0 and no
        # complex pair can cross the imaginary axis (Manifold.trace_det): no Hopf point to look for
        hopf = np.ones(smp.T.shape)
        valid = np.zeros(smp.T.shape, dtype=bool)
    else:
        _, hopf, valid = mf.stability(smp.tau, smp.T, smp.xi, mf.state_C(smp))
    return FoldColumns(smp, c, k, fold, d[c, k] > 0, hopf, valid)


def _cell_states(mf: Manifold, smp: Samples, cols: FoldColumns, T_in: np.ndarray) -> dict:
    """Every steady state of every cell, as dense arrays (S, n_tin, n_tau) with a presence mask."""
    n_tau, N = smp.s.shape
    n_tin = T_in.size
    n_f = np.bincount(cols.fold_col, minlength=n_tau)
    S = int(n_f.max()) + 1 if n_f.size else 1
    # layout per column: the samples with every fold inserted twice (as the end of one piece and the start
    # of the next), padded to a common length L with copies of the last sample (ties keep pieces monotone)
    L = N + 2 * (S - 1)
    rows = np.arange(n_tau)[:, None]
    fc = cols.fold_col
    order = np.lexsort((cols.fold_k, fc))
    fc, fk = fc[order], cols.fold_k[order]
    rank = np.arange(fc.size) - np.searchsorted(fc, fc)
    shift = np.cumsum(np.bincount(fc * N + fk + 1, minlength=n_tau * N).reshape(n_tau, N), axis=1)
    slot = np.arange(N) + 2 * shift  # where each sample goes
    end_slot = fk + 1 + 2 * rank
    sL = np.repeat(smp.s[:, -1:], L, axis=1)
    vL = np.repeat(smp.T_in[:, -1:], L, axis=1)
    dL = np.repeat(smp.dTin_ds[:, -1:], L, axis=1)
    sL[rows, slot] = smp.s
    vL[rows, slot] = smp.T_in
    dL[rows, slot] = smp.dTin_ds
    fs, fv = cols.fold.s[order], cols.fold.T_in[order]
    for off in (0, 1):
        sL[fc, end_slot + off] = fs
        vL[fc, end_slot + off] = fv
        dL[fc, end_slot + off] = 0.0  # dT_in/ds vanishes at a fold
    starts = np.zeros((n_tau, L), dtype=bool)  # slot that starts a piece (after a fold)
    starts[fc, end_slot + 1] = True
    seg = np.cumsum(starts, axis=1, dtype=np.int16)  # piece index of every slot
    # direction of a piece: the sign of dT_in/ds at its first sample
    d_first = np.full((n_tau, S), 1.0)
    d_first[:, 0] = smp.dTin_ds[:, 0]
    d_first[fc, rank + 1] = smp.dTin_ds[fc, np.minimum(fk + 1, N - 1)]
    direction = np.where(d_first >= 0, 1.0, -1.0)
    # the intervals between neighbouring slots of one piece: T_in is monotone along a piece, so every feed
    # temperature of the grid inside a piece's span lies in exactly one of its intervals when each interval is
    # half-open [low, high) and the one that ends at the piece's highest T_in is closed (the last interval of a
    # rising piece, the first of a falling one); an interval with a non-finite end holds no state
    va, vb = vL[:, :-1], vL[:, 1:]
    lo = np.minimum(va, vb)
    hi = np.maximum(va, vb)
    last = np.ones((n_tau, L - 1), dtype=bool)
    last[:, :-1] = starts[:, 2:]
    first = np.ones((n_tau, L - 1), dtype=bool)
    first[:, 1:] = starts[:, 1:-1]
    seg_a = seg[:, :-1]
    rising = direction[rows, seg_a] > 0
    closed = np.where(rising, last, first)
    # rows of the grid below each slot's T_in, once per slot (an interval's ends are two neighbouring slots)
    below = np.searchsorted(T_in, vL.ravel(), side="left").reshape(n_tau, L)
    up = vb >= va
    i_lo = np.where(up, below[:, :-1], below[:, 1:]).ravel()
    i_hi = np.where(up, below[:, 1:], below[:, :-1]).ravel()
    on_top = closed.ravel() & (i_hi < n_tin)
    on_top[on_top] = T_in[i_hi[on_top]] == hi.ravel()[on_top]
    i_hi = i_hi + on_top
    usable = (~starts[:, 1:]).ravel() & np.isfinite(lo.ravel()) & np.isfinite(hi.ravel())
    n_in = np.where(usable, np.maximum(i_hi - i_lo, 0), 0)
    J = np.nonzero(n_in)[0]  # flat interval index (column * (L-1) + slot)
    n_J = n_in[J]
    total = int(n_J.sum())
    which = np.repeat(np.arange(J.size), n_J)
    offset = np.cumsum(n_J) - n_J
    ri = i_lo[J][which] + (np.arange(total) - offset[which])  # feed-temperature row of each state
    Jw = J[which]
    ci = Jw // (L - 1)
    j0 = Jw - ci * (L - 1)
    pi = seg_a.ravel()[Jw].astype(np.intp)
    k0 = ci * L + j0
    k1 = k0 + 1
    v = T_in[ri]
    flat_v, s_flat, d_flat = vL.ravel(), sL.ravel(), dL.ravel()
    va_s, vb_s = flat_v[k0], flat_v[k1]
    sa, sb = s_flat[k0], s_flat[k1]
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(vb_s != va_s, (v - va_s) / (vb_s - va_s), 0.0)
    w = np.clip(w, 0.0, 1.0)
    dirn = np.where(vb_s >= va_s, 1.0, -1.0)
    ss = _hermite_start(w, dirn * (vb_s - va_s), sa, sb, dirn * d_flat[k0], dirn * d_flat[k1])
    lo_b = np.minimum(sa, sb)
    hi_b = np.maximum(sa, sb)
    with np.errstate(invalid="ignore", divide="ignore"):
        curv = np.abs(d_flat[k1] - d_flat[k0]) / (hi_b - lo_b)  # |d2 T_in/ds2| across the interval
    ts = smp.tau[ci, 0]
    flat = (pi * n_tin + ri) * n_tau + ci  # where each state goes in the dense (S, n_tin, n_tau) arrays
    present = np.zeros((S, n_tin, n_tau), dtype=bool)
    present.ravel()[flat] = True
    xi_g = None
    if not mf.explicit:
        xiL = np.repeat(smp.C[:, -1:], L, axis=1)
        xiL[rows, slot] = smp.C
        for off in (0, 1):
            xiL[fc, end_slot + off] = cols.fold.C[order]
        xi_flat = xiL.reshape(-1, mf.n)
        x0 = np.take(xi_flat, k0, axis=0)
        xi_g = x0 + w[:, None] * (np.take(xi_flat, k1, axis=0) - x0)
    # polish in chunks of states, so the working arrays stay in the processor's cache (the cost per state
    # would otherwise grow with the map's size)
    T_state = np.empty(ss.shape)
    stable_s = np.empty(ss.shape, dtype=bool)
    known_s = np.empty(ss.shape, dtype=bool)
    sens = np.empty(ss.shape)
    for a in range(0, ss.size, POLISH_CHUNK):
        b = min(a + POLISH_CHUNK, ss.size)
        T_state[a:b], stable_s[a:b], sens[a:b], known_s[a:b] = _polish(
            mf, ts[a:b], ss[a:b], v[a:b], lo_b[a:b], hi_b[a:b], curv[a:b], None if xi_g is None else xi_g[a:b]
        )
    shape = (S, n_tin, n_tau)
    T = np.full(shape, np.nan)
    stable = np.zeros(shape, dtype=bool)
    sensitivity = np.zeros(shape)
    # one flat index instead of three (numpy's multi-index scatter costs several times more)
    T.ravel()[flat] = T_state
    stable.ravel()[flat] = stable_s
    sensitivity.ravel()[flat] = np.abs(sens)
    unknown = None
    if not known_s.all():
        unknown = np.zeros(shape, dtype=bool)
        unknown.ravel()[flat] = ~known_s
    return {"present": present, "T": T, "stable": stable, "sensitivity": sensitivity, "unknown": unknown}


def _hermite_start(
    t: np.ndarray, h: np.ndarray, sa: np.ndarray, sb: np.ndarray, ga: np.ndarray, gb: np.ndarray
) -> np.ndarray:
    """Start of the polish: the coordinate s at the fraction t of a step h > 0 of |T_in| between two samples
    sa <= sb, by cubic Hermite interpolation of the inverse function s(|T_in|) with end slopes 1/ga, 1/gb
    (ga, gb = d|T_in|/ds at the samples). Where a slope is not usable (next to a fold it tends to infinity) or
    the cubic could leave the bracket (Fritsch-Carlson: each end slope at most 3 x the secant), the linear
    start."""
    ds = sb - sa
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        ok = (ga * ds * 3.0 >= h) & (gb * ds * 3.0 >= h) & (h > 0)
        t2 = t * t
        t3 = t2 * t
        cubic = sa + ds * (3.0 * t2 - 2.0 * t3) + (h / ga) * (t - 2.0 * t2 + t3) + (h / gb) * (t3 - t2)
    return np.where(ok, cubic, sa + t * ds)


def _polish(
    mf: Manifold,
    ts: np.ndarray,
    ss: np.ndarray,
    v: np.ndarray,
    lo_b: np.ndarray,
    hi_b: np.ndarray,
    curv: np.ndarray,
    xi_g: np.ndarray | None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Newton steps on T_in(s) = v from the interpolated starts, kept inside their brackets; returns the states'
    temperature, stability, dT/dT_in and whether temperature and stability are known (finite).

    A state is done when the error left by its Newton step, predicted as |T_in''| h^2 / (2 |T_in'|) for the step h
    with the curvature ``curv`` of T_in(s) across the state's interval, is below ``POLISH_ERROR`` and the step
    below ``POLISH_STEP`` (relative to max(1, |s|); where the curvature is not finite, a step below
    ``POLISH_ACCEPT``): the step is taken and the temperature moved along it to first order (an error of the
    same order: about 1e-14 of s, ~1e-12 K on the demos' explicit path; on the general path s is the temperature
    itself), with stability and slope taken at the point of that last evaluation (closer to the state than any
    sample can resolve). The others step again, on the shrinking subset only; after ``POLISH_ITERATIONS``
    evaluations whatever is left is taken as it stands (a state on a fold, where T_in(s) is flat and Newton
    slow)."""
    n = ss.size
    ss = ss.copy()
    T_out = np.empty(n)
    # the point of each state's last evaluation (overwritten while the state steps on): stability and slope
    # are taken there, for the whole chunk at once after the loop
    s_e, T_e, dT_e, dTin_e = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    xi_e = np.empty((n, mf.m))
    C_e = None if mf.explicit else np.empty((n, mf.n))
    idx = np.arange(n)
    for it in range(POLISH_ITERATIONS):
        full = idx.size == n
        t_i, s_i = (ts, ss) if full else (ts[idx], ss[idx])
        g_i = None if xi_g is None else (xi_g if full else np.take(xi_g, idx, axis=0))
        e = _eval(mf, t_i, s_i, g_i)
        v_i = v if full else v[idx]
        with np.errstate(invalid="ignore", divide="ignore"):
            step = (e.T_in - v_i) / e.dTin_ds
        step = np.where(np.isfinite(step), step, 0.0)
        new = np.clip(s_i - step, lo_b if full else lo_b[idx], hi_b if full else hi_b[idx])
        taken = s_i - new
        T_i = e.T - e.dT_ds * taken if mf.explicit else new
        if full:
            ss[:] = new
            s_e[:], T_e[:], dT_e[:], dTin_e[:], xi_e[:], T_out[:] = s_i, e.T, e.dT_ds, e.dTin_ds, e.xi, T_i
            if C_e is not None:
                C_e[:] = e.C
        else:
            ss[idx] = new
            s_e[idx], T_e[idx], dT_e[idx], dTin_e[idx], T_out[idx] = s_i, e.T, e.dT_ds, e.dTin_ds, T_i
            xi_e[idx] = e.xi
            if C_e is not None:
                C_e[idx] = e.C
        if xi_g is not None and e.C is not None:
            xi_g[idx] = e.C
        if it == POLISH_ITERATIONS - 1:
            break
        scale = np.maximum(np.abs(s_i), 1.0)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            error = (curv if full else curv[idx]) * (taken * taken) / (2.0 * np.abs(e.dTin_ds))
        size = np.abs(taken)
        done = np.where(
            np.isfinite(error),
            (error <= POLISH_ERROR * scale) & (size <= POLISH_STEP * scale),
            size <= POLISH_ACCEPT * scale,
        )
        idx = idx[~done]
        if idx.size == 0:
            break
    stable, h, _ = mf.stability(ts, T_e, xi_e, mf.explicit_C(s_e) if C_e is None else C_e)
    known = np.isfinite(T_out + h)
    with np.errstate(invalid="ignore", divide="ignore"):
        sens = dT_e / dTin_e
    return T_out, stable, sens, known


def _classify(sc: Scenario, st: dict) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    present, T, stable, sens = st["present"], st["T"], st["stable"], st["sensitivity"]
    count = present.sum(axis=0)
    unknown = st.get("unknown")
    if unknown is not None:
        # a state whose temperature or stability could not be computed is never classified: it may be reachable
        # (so the cell is not called `unstable`) and, without a finite temperature, above the maximum
        # temperature (the cell is then `runaway`, the safe side); its cell's maximum temperature is unknown
        stable = stable | unknown
        T = np.where(unknown & ~np.isfinite(T), np.inf, T)
    reach = present & stable
    n_stable = reach.sum(axis=0)
    tmax = np.where(reach, T, -np.inf).max(axis=0)
    tmax = np.where(n_stable > 0, tmax, np.nan)
    single_sens = (sens * reach).max(axis=0)
    region = np.full(count.shape, CODE["stable"], dtype=np.int8)
    region[(count == 1) & (single_sens > sc.policy.sensitivity)] = CODE["sensitive"]
    region[count > 1] = CODE["multiple"]
    region[n_stable == 0] = CODE["unstable"]
    region[(n_stable > 0) & (tmax > sc.limits.T_max)] = CODE["runaway"]
    if unknown is not None:
        tmax = np.where((present & unknown).any(axis=0), np.nan, tmax)
    return region, count.astype(np.int16), tmax


# -- boundaries -------------------------------------------------------------------------------------------
def _boundaries(sc: Scenario, mf: Manifold, tau: np.ndarray, cols: FoldColumns, tin_lo: float, tin_hi: float) -> dict:
    f = cols.fold
    inside = (f.T_in >= tin_lo) & (f.T_in <= tin_hi)
    cusp_rows = [c for c in cusps(mf, tau, cols) if tin_lo <= c[1] <= tin_hi]
    cusp_pts = [(c[0], c[1]) for c in cusp_rows]
    # ignition: a local maximum of T_in(s) (dT_in/ds goes from + to -); both curves are drawn into the cusp
    ign = _chain(tau, cols.fold_col, f.s, f.T_in, inside & cols.rising, cusp_pts)
    ext = _chain(tau, cols.fold_col, f.s, f.T_in, inside & ~cols.rising, cusp_pts)
    hc, hs, hv = hopf_points(mf, tau, cols)
    hopf = _chain(tau, hc, hs, hv, (hv >= tin_lo) & (hv <= tin_hi), [])
    return {
        "ignition": ign,
        "extinction": ext,
        "hopf": hopf,
        "max_temperature": _max_temperature_curve(sc, mf, tau, tin_lo, tin_hi),
        "cusp": np.array(cusp_rows, dtype=float).reshape(-1, 3),
    }


def chains(col: np.ndarray, s: np.ndarray, keep: np.ndarray, n_columns: int) -> list[list[int]]:
    """Indices of the kept points found column by column, grouped into curves in column order: the k-th point
    (by s) of a column continues the k-th point of the previous column while both columns hold the same
    number of points; a change of that number starts new curves."""
    idx = np.nonzero(keep)[0]
    o = idx[np.lexsort((s[idx], col[idx]))]
    c = col[o]
    rank = np.arange(o.size) - np.searchsorted(c, c)
    count = np.bincount(c, minlength=n_columns)
    run = np.cumsum(np.r_[True, (count[1:] != count[:-1]) | (count[:-1] == 0)])
    groups: dict[tuple[int, int], list[int]] = {}
    for i, oi in enumerate(o):
        groups.setdefault((int(run[c[i]]), int(rank[i])), []).append(int(oi))
    return [groups[k] for k in sorted(groups)]


def _chain(
    tau: np.ndarray, col: np.ndarray, s: np.ndarray, T_in: np.ndarray, keep: np.ndarray, ends: list[tuple[float, float]]
) -> np.ndarray:
    """Order points found column by column into curves, rows (tau, T_in) with a NaN row between pieces.

    The pieces are those of :func:`chains`. Each point of ``ends`` (a cusp) is attached to the piece end
    nearest to it, so the ignition and extinction curves meet there.
    """
    idx = np.nonzero(keep)[0]
    if idx.size == 0:
        return np.zeros((0, 2))
    curves = [[(float(tau[col[i]]), float(T_in[i])) for i in members] for members in chains(col, s, keep, tau.size)]
    lx = np.log(tau[-1] / tau[0]) or 1.0
    ly = float(np.ptp(T_in[idx])) or 1.0
    for e in ends:

        def dist(p: tuple[float, float], e: tuple[float, float] = e) -> float:
            return math.hypot(math.log(p[0] / e[0]) / lx, (p[1] - e[1]) / ly)

        best = min(((dist(cv[0]), k, 0) for k, cv in enumerate(curves)), default=None)
        last = min(((dist(cv[-1]), k, -1) for k, cv in enumerate(curves)), default=None)
        if best is None or last is None:
            continue
        d, k, where = min(best, last)
        if d < 0.25:
            curves[k] = [e, *curves[k]] if where == 0 else [*curves[k], e]
    rows: list[tuple[float, float]] = []
    for cv in curves:
        if rows:
            rows.append((math.nan, math.nan))
        rows.extend(cv)
    return np.array(rows, dtype=float).reshape(-1, 2)


def cusps(mf: Manifold, tau: np.ndarray, cols: FoldColumns) -> list[tuple[float, float, float]]:
    """Cusps between neighbouring columns whose number of folds differs: the fold pair is born there."""
    n_f = np.bincount(cols.fold_col, minlength=tau.size)
    out: list[tuple[float, float, float]] = []
    for j in np.nonzero(np.diff(n_f) != 0)[0]:
        c = j if n_f[j] > n_f[j + 1] else j + 1  # the column that has the fold pair
        idx = np.nonzero(cols.fold_col == c)[0]
        if idx.size < 2:
            continue
        s = np.sort(cols.fold.s[idx])
        pair = int(np.argmin(np.diff(s)))  # the pair closest together is the one being born
        width = s[pair + 1] - s[pair]
        s_lo, s_hi = s[pair] - 2 * width, s[pair + 1] + 2 * width
        if mf.explicit:
            s_lo, s_hi = max(s_lo, -W_BOUND), min(s_hi, W_BOUND)
        res = _solve_cusp(mf, math.log(tau[c]), math.log(tau[j + 1 if c == j else j]), s_lo, s_hi)
        if res is not None and not any(
            abs(res[0] - r[0]) <= 1e-9 * r[0] and abs(res[1] - r[1]) <= 1e-9 * r[1] for r in out
        ):
            out.append(res)
    return out


def _solve_cusp(
    mf: Manifold, x_fold: float, x_none: float, s_lo: float, s_hi: float
) -> tuple[float, float, float] | None:
    """Cusp between ln(tau) = x_fold (a fold pair) and x_none (none): at fixed tau the extremum of
    dT_in/ds over s touches zero. Nested one-dimensional solves: zoomed grid searches for the extremum in s,
    Brent's method in ln(tau) for its value."""

    def d1(x: float, s: np.ndarray) -> np.ndarray:
        return mf.evaluate(np.full(s.shape, math.exp(x)), s).dTin_ds

    # the sign dT_in/ds keeps across the window where there is no fold
    sgn = math.copysign(1.0, float(d1(x_none, np.array([0.5 * (s_lo + s_hi)]))[0]))

    def vertex(x: float, a: float, b: float, sizes: tuple[int, ...]) -> float:
        # grids of the given sizes, each across the two intervals around the previous one's extremum (one
        # vectorised evaluation each), then a parabola through the three points around the extremum
        for n in sizes:
            s = np.linspace(a, b, n)
            f = sgn * d1(x, s)
            f = np.where(np.isfinite(f), f, np.inf)  # a point that overflows is no extremum (seed 716069)
            k = int(np.clip(np.argmin(f), 1, n - 2))
            a, b = s[k - 1], s[k + 1]
        f0, f1, f2 = f[k - 1], f[k], f[k + 1]
        h = s[k] - s[k - 1]
        with np.errstate(invalid="ignore", over="ignore"):
            den = f0 - 2 * f1 + f2
            off = 0.5 * h * (f0 - f2) / den if np.isfinite(den) and den > 0 else 0.0
        return s[k] + float(np.clip(off, -h, h))

    memo: dict[float, tuple[float, float]] = {}

    def extremum(x: float) -> tuple[float, float]:
        # the extremum's value is insensitive to where in s it is taken (to second order), so a last spacing of
        # 1/4096 of the window is plenty here; kept per x (Brent's method returns a point it has evaluated)
        if x not in memo:
            s_ext = vertex(x, s_lo, s_hi, (257, 33))
            memo[x] = (s_ext, float(d1(x, np.array([s_ext]))[0]))
        return memo[x]

    try:
        f_fold, f_none = extremum(x_fold)[1], extremum(x_none)[1]
        if f_fold * f_none > 0:
            return None
        x_c = brentq(lambda x: extremum(x)[1], x_fold, x_none, xtol=1e-13, rtol=1e-14, maxiter=200)
    except (ValueError, RuntimeError):
        return None
    # the cusp's place in s (its temperature) is that of the extremum, which rounding fixes only to about the
    # square root of the precision (dT_in/ds is flat there): finer grids would not make it better
    s_c = extremum(x_c)[0]
    e = mf.evaluate(np.array([math.exp(x_c)]), np.array([s_c]))
    if not np.isfinite(e.T_in[0]):
        return None
    return (math.exp(x_c), float(e.T_in[0]), float(e.T[0]))


def hopf_points(mf: Manifold, tau: np.ndarray, cols: FoldColumns) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Hopf points of every column: (column, coordinate s, feed temperature). Shared with the probability map
    (``exomap.core.stacked``), whose ``tau`` are column codes."""
    lead, cplx, smp = cols.lead, cols.cplx, cols.smp
    # the smooth Hopf function changes sign with a complex pair possible at either end of the step (it may be
    # complex at one end only: next to a fold, or where a real eigenvalue leads); the zero is then kept only
    # where a complex pair exists there
    ch = (cplx[:, :-1] | cplx[:, 1:]) & ((lead[:, :-1] * lead[:, 1:]) < 0)
    c, k = np.nonzero(ch)
    if c.size == 0:
        return c, np.zeros(0), np.zeros(0)
    xi0 = None if mf.explicit else smp.C[c, k]
    _, e = _refine(mf, tau[c], smp.s[c, k], smp.s[c, k + 1], lead[c, k], lambda e: _hopf_function(mf, e), xi0)
    keep = mf.stability(e.tau, e.T, e.xi, mf.state_C(e))[2] & np.isfinite(e.T_in)
    return c[keep], e.s[keep], e.T_in[keep]


def _max_temperature_curve(sc: Scenario, mf: Manifold, tau: np.ndarray, tin_lo: float, tin_hi: float) -> np.ndarray:
    """Points (tau, T_in) where a steady state sits exactly at the maximum temperature and is stable; rows of
    NaN separate pieces."""
    T_max = sc.limits.T_max
    Tm = np.full(tau.shape, T_max)
    if mf.explicit:
        e = mf.explicit_eval(tau, mf.explicit_w_at_T(tau, Tm))
    else:
        e = mf.general_eval(tau, Tm)
    stable_s, _, _ = mf.stability(e.tau, e.T, e.xi, mf.state_C(e))
    ok = stable_s & np.isfinite(e.T_in) & (e.T_in >= tin_lo) & (e.T_in <= tin_hi)
    rows = []
    for i in range(tau.size):
        if ok[i]:
            rows.append((tau[i], e.T_in[i]))
        elif rows and math.isfinite(rows[-1][0]):
            rows.append((math.nan, math.nan))
    while rows and not math.isfinite(rows[-1][0]):
        rows.pop()
    return np.array(rows, dtype=float).reshape(-1, 2)
