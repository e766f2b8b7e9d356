"""One-parameter branches of steady states, with their turning points and Hopf points.

Along the feed temperature at fixed residence time the branch is explicit: :math:`T_{in}(\\tau, s)` of the
steady-state manifold (``exomap.core.manifold``) over the manifold coordinate s. Along the residence time at
fixed feed temperature the branch is the curve :math:`T_{in}(\\tau, s) = T_{in}` in the (ln τ, s) plane,
traced by pseudo-arclength continuation from every steady state on the window's edges and from every steady
state found on interior columns that no traced piece passes through (isolas).

Turning points are where :math:`\\partial T_{in}/\\partial s = 0` on the branch (the steady-state Jacobian is
singular). ``ignition`` is a local maximum of :math:`T_{in}(s)` at fixed τ: the low branch meets the middle
one and past it the tank can only jump up; ``extinction`` a local minimum: the high branch meets the middle
one. Both are solved to machine precision (Brent's method, or a 2-D Newton polish on the branch and fold
equations). Hopf points are where the leading complex pair of the reduced Jacobian crosses the imaginary
axis.

References
----------
[1] A. Uppal, W. H. Ray, A. B. Poore, Chem. Eng. Sci. 29 (1974) 967-985.
[2] H. B. Keller, Numerical solution of bifurcation and nonlinear eigenvalue problems, in: Applications of
    Bifurcation Theory, Academic Press, 1977 (pseudo-arclength continuation).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import fsolve

from exomap.core.errors import ModelInputError
from exomap.core.manifold import Manifold
from exomap.core.opmap import FoldColumns, chains, cusps, fold_columns, unhide_fold_pairs
from exomap.core.scenario import Scenario, validate
from exomap.core.steady import bracketed_root, check_point, roots_in_samples

RESIDENCE_TIME, FEED_TEMPERATURE = "residence_time", "feed_temperature"
#: Residence-time columns sampled for a branch along the residence time (fold locus and starting states).
LOCUS_COLUMNS = 150
ALONG = (RESIDENCE_TIME, FEED_TEMPERATURE)


@dataclass(frozen=True)
class BranchPoint:
    value: float
    tau: float
    T_in: float
    T: float
    conversion: float
    stable: bool
    oscillatory: bool
    piece: int

    def to_dict(self) -> dict:
        return {
            "value": float(self.value),
            "temperature_K": float(self.T),
            "conversion": float(self.conversion),
            "stable": bool(self.stable),
            "oscillatory": bool(self.oscillatory),
            "piece": int(self.piece),
        }


@dataclass(frozen=True)
class TurningPoint:
    kind: str
    tau: float
    T_in: float
    T: float

    def to_dict(self) -> dict:
        return {
            "kind": self.kind,
            "residence_time_s": self.tau,
            "feed_temperature_K": self.T_in,
            "temperature_K": self.T,
        }


@dataclass(frozen=True)
class HopfPoint:
    tau: float
    T_in: float
    T: float
    frequency: float

    def to_dict(self) -> dict:
        return {
            "residence_time_s": self.tau,
            "feed_temperature_K": self.T_in,
            "temperature_K": self.T,
            "angular_frequency_rad_per_s": self.frequency,
            "period_s": 2 * math.pi / self.frequency if self.frequency > 0 else None,
        }


@dataclass(frozen=True)
class BranchResult:
    parameter: str
    tau: float
    T_in: float
    lo: float
    hi: float
    points: tuple[BranchPoint, ...]
    turning_points: tuple[TurningPoint, ...]
    hopf_points: tuple[HopfPoint, ...]
    success: bool
    message: str

    def to_dict(self) -> dict:
        unit = "s" if self.parameter == RESIDENCE_TIME else "K"
        return {
            "parameter": self.parameter,
            "parameter_unit": unit,
            "through": {"residence_time_s": self.tau, "feed_temperature_K": self.T_in},
            "range": [self.lo, self.hi],
            "points": [p.to_dict() for p in self.points],
            "turning_points": [t.to_dict() for t in self.turning_points],
            "hopf_points": [h.to_dict() for h in self.hopf_points],
            "success": self.success,
            "message": self.message,
        }


# -- helpers on the manifold ------------------------------------------------------------------------------
def _one(mf: Manifold, tau: float, s: float):
    return mf.evaluate(np.array([tau]), np.array([s]))


def _fold_kind(mf: Manifold, tau: float, s: float) -> str:
    """ignition at a local maximum of T_in(s), extinction at a local minimum."""
    h = 1e-6 * max(abs(s), 1.0)  # s is a temperature or the log-odds of the conversion
    d2 = (float(_one(mf, tau, s + h).dTin_ds[0]) - float(_one(mf, tau, s - h).dTin_ds[0])) / (2 * h)
    return "ignition" if d2 < 0 else "extinction"


def _lead(mf: Manifold, tau: float, s: float) -> tuple[float, bool, float]:
    """(leading real part, complex?, |imag| of the leading pair) of the reduced Jacobian."""
    smp = _one(mf, tau, s)
    re, cplx, im = mf.leading_pair(np.array([tau]), smp.T, smp.xi, mf.state_C(smp))
    return float(re[0]), bool(cplx[0]), float(im[0])


def _hopf_fn(mf: Manifold, tau: float, s: float) -> tuple[float, bool]:
    """(h, meaningful) of ``Manifold.stability``: a smooth function of the point that changes sign where a
    complex pair crosses the imaginary axis (the trace for one reaction, minus the Hurwitz determinant for
    two), meaningful where a complex pair can exist there (det > 0, or a negative discriminant). Unlike the
    leading real part it does not jump where the leading eigenvalue turns real (next to a fold)."""
    smp = _one(mf, tau, s)
    _, h, ok = mf.stability(np.array([tau]), smp.T, smp.xi, mf.state_C(smp))
    return float(h[0]), bool(ok[0])


def _hopf_value(mf: Manifold, tau: float, s: float) -> float:
    """The Hopf function for root finding between two samples where its sign is known: where a stiff point's
    signs are below the rounding (``Manifold.stability`` gives NaN there), the point is on the stability
    boundary to within that rounding, so it counts as a zero (Brent's method cannot step on a NaN)."""
    h = _hopf_fn(mf, tau, s)[0]
    return 0.0 if math.isnan(h) else h


def _is_hopf(mf: Manifold, tau: float, s: float) -> bool:
    """A zero of the Hopf function is a Hopf point when the leading pair there is complex and on the axis (a
    stiff point's leading real part is NaN where it is within its rounding error of zero: on the axis)."""
    re, cplx, im = _lead(mf, tau, s)
    return cplx and (math.isnan(re) or abs(re) <= 1e-6 * max(im, 1e-300))


def _conversion(mf: Manifold, C: np.ndarray) -> float:
    return float(mf.conversion(np.array(C[mf.key])))


def default_range(sc: Scenario, along: str, tau: float, T_in: float) -> tuple[float, float]:
    if along == RESIDENCE_TIME:
        if sc.map is not None:
            lo, hi = sc.map.tau_range
            return min(lo, tau), max(hi, tau)
        return tau / 20.0, tau * 20.0
    if sc.map is not None:
        lo, hi = sc.map.T_in_range
        return min(lo, T_in), max(hi, T_in)
    return T_in - 50.0, T_in + 50.0


# -- along the feed temperature ---------------------------------------------------------------------------
def _along_feed_temperature(mf: Manifold, tau: float, lo: float, hi: float, n: int, misses: list[str]):
    T_lo, T_hi = mf.temperature_window(lo, hi, tau)
    # a fold pair closer together than one sample (next to a cusp) is brought out first, as on the map
    smp = unhide_fold_pairs(mf, mf.sample(np.array([tau]), T_lo, T_hi, n))
    s, T_in, d = smp.s[0], smp.T_in[0], smp.dTin_ds[0]
    ok = smp.valid[0] & np.isfinite(T_in)
    C = mf.state_C(smp)
    lead, cplx = mf.leading_real_part(smp.tau, smp.T, smp.xi, C)
    lead, cplx = lead[0], cplx[0]
    _, hf, hok = mf.stability(smp.tau, smp.T, smp.xi, C)
    hf, hok = hf[0], hok[0]
    if not np.all(smp.valid[0]):
        misses.append(f"{int(np.count_nonzero(~smp.valid[0]))} sample(s) whose mass balances did not converge")
    unknown = ok & (np.isnan(lead) | np.isnan(hf))
    if unknown.any():
        misses.append(f"the stability of {int(np.count_nonzero(unknown))} sample(s) is below the rounding")
    fold_miss = hopf_miss = 0
    points: list[BranchPoint] = []
    turns: list[TurningPoint] = []
    hopfs: list[HopfPoint] = []
    piece, inside_prev = 0, False
    for k in range(n):
        inside = bool(ok[k] and lo <= T_in[k] <= hi)
        if inside:
            if not inside_prev and points:
                piece += 1
            points.append(
                BranchPoint(
                    float(T_in[k]),
                    tau,
                    float(T_in[k]),
                    float(smp.T[0, k]),
                    _conversion(mf, C[0, k]),
                    bool(lead[k] < 0),
                    bool(cplx[k]),
                    piece,
                )
            )
        inside_prev = inside
        if k + 1 >= n or not (ok[k] and ok[k + 1]):
            continue
        if d[k] * d[k + 1] < 0:
            sf = bracketed_root(lambda x: float(_one(mf, tau, x).dTin_ds[0]), s[k], s[k + 1], xtol=1e-300, rtol=1e-15)
            if sf is None:
                fold_miss += bool(lo <= T_in[k] <= hi or lo <= T_in[k + 1] <= hi)
                continue
            e = _one(mf, tau, sf)
            if lo <= e.T_in[0] <= hi:
                turns.append(TurningPoint(_fold_kind(mf, tau, sf), tau, float(e.T_in[0]), float(e.T[0])))
        # a Hopf point: the smooth Hopf function changes sign with a complex pair possible at either end (the
        # pair may be complex at one end only: next to a fold, or where a real eigenvalue leads)
        if (hok[k] or hok[k + 1]) and hf[k] * hf[k + 1] < 0:
            sh = bracketed_root(lambda x: _hopf_value(mf, tau, x), s[k], s[k + 1], xtol=1e-300, rtol=1e-15)
            if sh is None:  # the samples' sign change does not hold point by point
                hopf_miss += bool(lo <= T_in[k] <= hi or lo <= T_in[k + 1] <= hi)
                continue
            e = _one(mf, tau, sh)
            if lo <= e.T_in[0] <= hi and _is_hopf(mf, tau, sh):
                hopfs.append(HopfPoint(tau, float(e.T_in[0]), float(e.T[0]), _lead(mf, tau, sh)[2]))
    if fold_miss:
        misses.append(f"{fold_miss} turning point(s) between two samples could not be solved")
    if hopf_miss:
        misses.append(f"{hopf_miss} change(s) of stability between two samples could not be solved")
    return points, turns, hopfs


# -- along the residence time (continuation) --------------------------------------------------------------
class _Plane:
    """Normalised coordinates (X, Y) in [0, 1]^2 for ln(tau) and the manifold coordinate."""

    def __init__(self, mf: Manifold, T_in: float, lo: float, hi: float) -> None:
        self.mf, self.T_in = mf, T_in
        self.x0, self.x1 = math.log(lo), math.log(hi)
        T_lo, T_hi = mf.temperature_window(T_in, T_in, hi)
        self.T_lo, self.T_hi = T_lo, T_hi
        if mf.explicit:
            s_lo = mf.s_bounds(np.array([lo, hi]), T_lo, T_hi)[0].min()
            s_hi = mf.s_bounds(np.array([lo, hi]), T_lo, T_hi)[1].max()
            self.y0, self.y1 = s_lo, s_hi  # the log-odds of the conversion
        else:
            self.y0, self.y1 = -1.0 / T_lo, -1.0 / T_hi
        self.scale = 100.0

    def tau_s(self, X: float, Y: float) -> tuple[float, float]:
        tau = math.exp(self.x0 + X * (self.x1 - self.x0))
        y = self.y0 + Y * (self.y1 - self.y0)
        s = y if self.mf.explicit else -1.0 / y
        return tau, s

    def XY(self, tau: float, s: float) -> tuple[float, float]:
        y = s if self.mf.explicit else -1.0 / s
        return (math.log(tau) - self.x0) / (self.x1 - self.x0), (y - self.y0) / (self.y1 - self.y0)

    def ds_dY(self, s: float) -> float:
        if self.mf.explicit:
            return self.y1 - self.y0
        return s * s * (self.y1 - self.y0)

    def G(self, X: float, Y: float) -> float:
        tau, s = self.tau_s(X, Y)
        v = float(_one(self.mf, tau, s).T_in[0])
        return (v - self.T_in) / self.scale

    def grad(self, X: float, Y: float) -> tuple[float, float, float]:
        tau, s = self.tau_s(X, Y)
        e = _one(self.mf, tau, s)
        g = (float(e.T_in[0]) - self.T_in) / self.scale
        gy = float(e.dTin_ds[0]) * self.ds_dY(s) / self.scale
        h = 1e-7
        gx = (self.G(X + h, Y) - self.G(X - h, Y)) / (2 * h)
        return g, gx, gy

    def correct(self, X: float, Y: float) -> tuple[float, float, bool]:
        """Move (X, Y) onto G = 0 along the gradient: chord iterations (the gradient of the first point is
        reused, one evaluation of G per iteration), refreshed by a full Newton step when they stall."""
        g, gx, gy = self.grad(X, Y)
        for it in range(16):
            if not all(map(math.isfinite, (g, gx, gy))):
                return X, Y, False
            n2 = gx * gx + gy * gy
            if n2 == 0:
                return X, Y, False
            X, Y = X - g * gx / n2, Y - g * gy / n2
            g_new = self.G(X, Y)
            if not math.isfinite(g_new):
                return X, Y, False
            if abs(g_new) < 1e-13:
                return X, Y, True
            if abs(g_new) > 0.5 * abs(g) or it % 4 == 3:
                g, gx, gy = self.grad(X, Y)
            else:
                g = g_new
        return X, Y, abs(self.G(X, Y)) < 1e-10


def _trace(
    plane: _Plane, X: float, Y: float, direction: float, max_steps: int = 4000, max_step: float = 0.02
) -> tuple[list[tuple[float, float, float]], bool, bool]:
    """Pseudo-arclength continuation from (X, Y); returns the list of (X, Y, tX) along the curve, whether it
    came back to its start (a closed curve, an isola: the start is not repeated at the end), and whether it
    ended as a curve should (out of the window or closed), not because a step could not be corrected or the
    steps ran out."""
    path = [(X, Y, 0.0)]
    h = 0.01
    _, gx, gy = plane.grad(X, Y)
    tx, ty = gy, -gx
    norm = math.hypot(tx, ty) or 1.0
    tx, ty = direction * tx / norm, direction * ty / norm
    X0, Y0 = X, Y
    for step in range(max_steps):
        ok = False
        while h > 1e-7:
            Xp, Yp = X + h * tx, Y + h * ty
            Xc, Yc, conv = plane.correct(Xp, Yp)
            if conv and math.hypot(Xc - X, Yc - Y) < 2.5 * h:
                _, gx, gy = plane.grad(Xc, Yc)
                ntx, nty = gy, -gx
                nn = math.hypot(ntx, nty) or 1.0
                ntx, nty = ntx / nn, nty / nn
                if ntx * tx + nty * ty < 0:
                    ntx, nty = -ntx, -nty
                if ntx * tx + nty * ty > 0.95:
                    ok = True
                    break
            h *= 0.5
        if not ok:
            return path, False, False
        X, Y, tx, ty = Xc, Yc, ntx, nty
        path.append((X, Y, tx))
        h = min(h * 1.5, max_step)
        if not (-1e-9 <= X <= 1 + 1e-9 and -0.05 <= Y <= 1.05):
            return path, False, True
        if step > 10 and math.hypot(X - X0, Y - Y0) < 0.5 * h:
            path.pop()  # back at the start: a closed curve (isola), each point listed once
            return path, True, True
    return path, False, False


def _along_residence_time(mf: Manifold, T_in: float, lo: float, hi: float, misses: list[str], max_step: float = 0.02):
    plane = _Plane(mf, T_in, lo, hi)
    # one vectorised sampling of the manifold on 150 residence-time columns serves both the fold-locus search
    # for turning points and the steady states that start the continuation: those on the two edges, and
    # those on every sixth interior column (to find isolas)
    taus = np.geomspace(lo, hi, LOCUS_COLUMNS)
    cols = fold_columns(mf, mf.sample(taus, plane.T_lo, plane.T_hi, 256 if mf.explicit else 160))
    smp = cols.smp

    def roots(c: int) -> list[float]:
        return roots_in_samples(
            mf, float(taus[c]), T_in, smp.s[c], smp.T_in[c] - T_in, smp.dTin_ds[c], smp.valid[c], misses
        )

    starts = [plane.XY(float(taus[c]), s) for c in (0, taus.size - 1) for s in roots(c)]
    interior = [plane.XY(float(taus[c]), s) for c in range(6, taus.size - 1, 6) for s in roots(c)]
    pieces: list[list[tuple[float, float, float]]] = []
    closed_pieces: set[int] = set()
    stopped = 0  # traces that ended inside the window without closing
    if not np.all(smp.valid):
        misses.append(f"{int(np.count_nonzero(~smp.valid))} sample(s) whose mass balances did not converge")

    def covered(X: float, Y: float) -> bool:
        for p in pieces:
            for a, b in zip(p[:-1], p[1:], strict=False):
                # distance from the segment a-b
                ax, ay, bx, by = a[0], a[1], b[0], b[1]
                dx, dy = bx - ax, by - ay
                L2 = dx * dx + dy * dy
                t = 0.0 if L2 == 0 else max(0.0, min(1.0, ((X - ax) * dx + (Y - ay) * dy) / L2))
                if math.hypot(ax + t * dx - X, ay + t * dy - Y) < 5e-3:
                    return True
        return False

    for X, Y in starts:
        if covered(X, Y):
            continue
        direction = 1.0 if X < 0.5 else -1.0
        _, gx, gy = plane.grad(X, Y)
        if gy * direction < 0:  # tangent (gy, -gx): make its X component point into the window
            direction = -direction
        path, _, ended = _trace(plane, X, Y, direction, max_step=max_step)
        pieces.append(path)
        stopped += not ended
    for X, Y in interior:
        if covered(X, Y):
            continue
        a, closed, ended = _trace(plane, X, Y, 1.0, max_step=max_step)
        stopped += not ended
        if closed:  # an isola: one direction has gone all the way round
            pieces.append(a)
            closed_pieces.add(len(pieces) - 1)
            continue
        b, _, ended = _trace(plane, X, Y, -1.0, max_step=max_step)
        stopped += not ended
        pieces.append(list(reversed(b)) + a[1:])

    points: list[BranchPoint] = []
    turns: list[TurningPoint] = []
    hopfs: list[HopfPoint] = []
    fold_miss = hopf_miss = unknown = 0
    for k, path in enumerate(pieces):
        prev = None
        # a closed piece comes back to its first point: that last step is checked for turns too, but the
        # point is listed once
        wrap = [path[0]] if k in closed_pieces and len(path) > 2 else []
        for i, (X, Y, tx) in enumerate(path + wrap):
            tau, s = plane.tau_s(X, Y)
            if not (lo * (1 - 1e-12) <= tau <= hi * (1 + 1e-12)):
                prev = None
                continue
            e = _one(mf, tau, s)
            re, cplx, _ = _lead(mf, tau, s)
            hf, hok = _hopf_fn(mf, tau, s)
            if i < len(path):
                points.append(
                    BranchPoint(tau, tau, T_in, float(e.T[0]), _conversion(mf, mf.state_C(e)[0]), re < 0, cplx, k)
                )
            cur = (X, Y, tx, hf, hok)
            if prev is not None:
                if prev[2] * tx < 0:
                    tp = _refine_fold(plane, 0.5 * (prev[0] + X), 0.5 * (prev[1] + Y))
                    if tp is not None:
                        turns.append(tp)
                    else:
                        fold_miss += 1
                if (prev[4] or hok) and prev[3] * hf < 0:
                    hp = _refine_hopf(plane, prev, cur)
                    if hp is _NOT_SOLVED:
                        hopf_miss += 1
                    elif hp is not None:
                        hopfs.append(hp)
                if math.isnan(hf) or math.isnan(re):
                    unknown += 1
            prev = cur
    turns = _distinct(turns + _locus_turning_points(plane, taus, cols))
    if stopped:
        misses.append(f"{stopped} traced piece(s) of the branch stopped inside the range (a step did not converge)")
    if fold_miss:
        misses.append(f"{fold_miss} turning point(s) seen along the trace could not be solved")
    if hopf_miss:
        misses.append(f"{hopf_miss} change(s) of stability seen along the trace could not be solved")
    if unknown:
        misses.append(f"the stability of {unknown} point(s) is below the rounding")
    return points, turns, _distinct(hopfs)


def _distinct(found: list) -> list:
    """Turning or Hopf points with each point once: two finds of one point (from two traced pieces, from
    both sides of a closed curve, or from the fold locus and a traced piece) agree to solver accuracy."""
    out: list = []
    for p in found:
        same = (
            getattr(q, "kind", None) == getattr(p, "kind", None)
            and abs(q.tau - p.tau) <= 1e-7 * p.tau
            and abs(q.T_in - p.T_in) <= 1e-7 * p.T_in
            and abs(q.T - p.T) <= 1e-6 * p.T
            for q in out
        )
        if not any(same):
            out.append(p)
    return out


def _locus_turning_points(plane: _Plane, taus: np.ndarray, cols: FoldColumns) -> list[TurningPoint]:
    """Turning points along the residence time read from the fold locus, as a second, independent search.

    The folds of the residence-time columns ``taus`` are found exactly (``opmap.fold_columns``, which also finds fold
    pairs closer together than one sample) and chained column to column by kind; where a chain crosses the
    branch's feed temperature, or where the feed temperature lies between a chain's last fold and the cusp
    it runs into, there is a turning point, solved from there like the traced ones. This catches fold pairs
    that lie within one continuation step (next to a cusp).
    """
    mf, T_in = plane.mf, plane.T_in
    lo, hi = float(taus[0]), float(taus[-1])
    f = cols.fold
    cusp_rows = cusps(mf, taus, cols)
    guesses: list[tuple[float, float, str]] = []
    for rising in (True, False):
        kind = "ignition" if rising else "extinction"
        for members in chains(cols.fold_col, f.s, cols.rising == rising, taus.size):
            for a, b in zip(members[:-1], members[1:], strict=False):
                ga, gb = f.T_in[a] - T_in, f.T_in[b] - T_in
                if ga * gb < 0:
                    w = ga / (ga - gb)
                    guesses.append(
                        (
                            float(taus[cols.fold_col[a]] ** (1 - w) * taus[cols.fold_col[b]] ** w),
                            float(f.s[a] + w * (f.s[b] - f.s[a])),
                            kind,
                        )
                    )
            for end in (members[0], members[-1]):
                for tau_c, T_in_c, _ in cusp_rows:
                    near = abs(math.log(taus[cols.fold_col[end]] / tau_c)) <= 2 * math.log(taus[1] / taus[0])
                    if near and (f.T_in[end] - T_in) * (T_in_c - T_in) < 0:
                        w = (f.T_in[end] - T_in) / (f.T_in[end] - T_in_c)
                        guesses.append((float(taus[cols.fold_col[end]] ** (1 - w) * tau_c**w), float(f.s[end]), kind))
    out: list[TurningPoint] = []
    for tau_g, s_g, kind in guesses:
        if not (lo <= tau_g <= hi):
            continue
        tp = _refine_fold(plane, *plane.XY(tau_g, s_g))
        if tp is not None and tp.kind == kind and lo <= tp.tau <= hi:
            out.append(tp)
    return out


def _refine_fold(plane: _Plane, X: float, Y: float) -> TurningPoint | None:
    mf = plane.mf

    def eqs(v: np.ndarray) -> list[float]:
        tau, s = plane.tau_s(float(v[0]), float(v[1]))
        e = _one(mf, tau, s)
        return [(float(e.T_in[0]) - plane.T_in) / plane.scale, float(e.dTin_ds[0]) * plane.ds_dY(s) / plane.scale]

    sol, info, ier, _ = fsolve(eqs, [X, Y], full_output=True, xtol=1e-14)
    if ier != 1 and max(abs(f) for f in eqs(sol)) > 1e-10:
        return None
    tau, s = plane.tau_s(float(sol[0]), float(sol[1]))
    e = _one(mf, tau, s)
    return TurningPoint(_fold_kind(mf, tau, s), tau, plane.T_in, float(e.T[0]))


_NOT_SOLVED = object()  # a sign change of the Hopf function that could not be refined


def _refine_hopf(plane: _Plane, a: tuple, b: tuple) -> HopfPoint | None | object:
    """The Hopf point between two traced points whose Hopf function changes sign: None where the zero is not
    a Hopf point (real eigenvalues), ``_NOT_SOLVED`` where the sign change does not hold on the corrected curve."""
    mf = plane.mf

    def lead_on_curve(t: float) -> float:
        X = a[0] + t * (b[0] - a[0])
        Y = a[1] + t * (b[1] - a[1])
        X, Y, _ = plane.correct(X, Y)
        tau, s = plane.tau_s(X, Y)
        return _hopf_value(mf, tau, s)

    t = bracketed_root(lead_on_curve, 0.0, 1.0, xtol=1e-14)
    if t is None:
        return _NOT_SOLVED
    X, Y, _ = plane.correct(a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1]))
    tau, s = plane.tau_s(X, Y)
    if not _is_hopf(mf, tau, s):  # the Hopf function's zero with real eigenvalues: not a Hopf point
        return None
    e = _one(mf, tau, s)
    return HopfPoint(tau, plane.T_in, float(e.T[0]), _lead(mf, tau, s)[2])


# -- public API -------------------------------------------------------------------------------------------
def branch(
    sc: Scenario,
    along: str,
    tau: float | None = None,
    T_in: float | None = None,
    *,
    lo: float | None = None,
    hi: float | None = None,
    c_in: tuple[float, ...] | None = None,
    T_c: float | None = None,
    samples: int = 1500,
    max_step: float = 0.02,
) -> BranchResult:
    """Steady states along one parameter through an operating point.

    Parameters
    ----------
    sc : Scenario
    along : str
        ``"residence_time"`` or ``"feed_temperature"``.
    tau : float, optional
        Residence time held fixed (along the feed temperature) or marked [s]; default the scenario's.
    T_in : float, optional
        Feed temperature held fixed (along the residence time) or marked [K]; default the scenario's.
    lo, hi : float, optional
        Parameter range [s or K]; default the scenario's map window (or a factor 20 / ±50 K around the point).
    samples : int
        Samples along the branch coordinate (along the feed temperature) [-].
    max_step : float
        Largest continuation step along the residence time, as a fraction of the window's diagonal in
        (ln tau, coordinate) [-]; turning and Hopf points are solved exactly whatever the step.

    Returns
    -------
    BranchResult
        Points (``value`` is the parameter), turning points (kind, τ, T_in, T) and Hopf points.

    Raises
    ------
    ModelInputError
        Unknown ``along``, a bad point or an empty range.
    """
    validate(sc)
    if along not in ALONG:
        raise ModelInputError(f"along must be one of {', '.join(ALONG)}", field="along")
    tau = sc.tau_nominal if tau is None else tau
    T_in = sc.T_in if T_in is None else T_in
    check_point(tau, T_in)
    d_lo, d_hi = default_range(sc, along, tau, T_in)
    lo = d_lo if lo is None else lo
    hi = d_hi if hi is None else hi
    unit = "s" if along == RESIDENCE_TIME else "K"
    if not (math.isfinite(lo) and math.isfinite(hi) and 0 < lo < hi):
        raise ModelInputError(f"range must be two increasing positive values in {unit}", field="range")
    mf = Manifold(sc, c_in=c_in, T_c=T_c)
    misses: list[str] = []
    if along == FEED_TEMPERATURE:
        points, turns, hopfs = _along_feed_temperature(mf, tau, lo, hi, samples, misses)
    else:
        points, turns, hopfs = _along_residence_time(mf, T_in, lo, hi, misses, max_step)
    turns.sort(key=lambda t: (t.tau, t.T_in))
    # a branch with a gap, a turning or Hopf point seen but not solved, or a stability below the rounding is
    # not complete, and says so
    ok = bool(points) and not misses
    summary = f"{len(points)} points, {len(turns)} turning point(s), {len(hopfs)} Hopf point(s)"
    return BranchResult(
        along,
        tau,
        T_in,
        lo,
        hi,
        tuple(points),
        tuple(turns),
        tuple(hopfs),
        ok,
        summary
        if ok
        else "no steady state in the range"
        if not points
        else f"{summary}; incomplete: {'; '.join(misses)}",
    )


def turning_points(
    sc: Scenario, along: str, tau: float | None = None, T_in: float | None = None, **kwargs: object
) -> list[TurningPoint]:
    """Only the turning points of :func:`branch` (same arguments).

    Notes
    -----
    A fold pair closer together than one continuation step (next to a cusp) shows no turn of the traced
    curve; the default step (0.02) resolves the demos' cusps, a step of 0.06 already misses a pair 0.6 %
    apart in residence time next to the jacketed demo's cusp (measured), so it is not used here.
    """
    return list(branch(sc, along, tau, T_in, **kwargs).turning_points)  # type: ignore[arg-type]
