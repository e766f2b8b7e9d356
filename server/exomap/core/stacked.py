"""Many parameter sets at once: the steady-state manifold with one parameter set per residence-time column.

The probability map (``exomap.core.uncertainty``) needs the operating map of every sample of the uncertain
data. Each (sample, residence-time) column is independent, so instead of one map per sample the columns of all
samples are stacked into one pass of the map's own fold machinery (``exomap.core.opmap.fold_columns``). The
classes here evaluate the manifold of ``exomap.core.manifold`` with the parameters of each column:

* :class:`StackedManifold`: one reaction whose limiting reactant has a positive order (the closed-form path),
  in the same coordinate as the deterministic core, the log-odds of the conversion
  :math:`w = \\ln(\\xi/(\\xi_{max} - \\xi))`, with each reactant's concentration written from
  :math:`\\xi_{max} - \\xi`, so a hot state at :math:`1 - X = 10^{-30}` is as representable as a cold one;
* :class:`StackedGeneralManifold`: several reactions: the coordinate is T and the
  isothermal balances are solved by the vectorised Newton iteration of the deterministic general path (its
  logarithmic form in ln C), with the rate constants, activation energies, heats, feed and heat exchange of
  each column.

The map machinery passes residence times through to the manifold without using them, so the "residence time"
arrays it carries here are column codes: the float index of the column, from which every evaluation gathers
that column's parameters. :func:`column_regions` then classifies every cell of every column from run ends
(folds, Hopf points, the point at the maximum temperature) without a solve per cell.

Both classes are checked against the deterministic ``Manifold`` of each sample's own scenario in the tests
(same points, same values), and the maps they give against the per-sample loop.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from exomap.core.eigen import FAST
from exomap.core.manifold import W_BOUND, Manifold, Samples, solve_small, window_floor
from exomap.core.regions import CODE
from exomap.core.scenario import R_GAS

if TYPE_CHECKING:
    from exomap.core.uncertainty import ParameterSamples


def _gather(code: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
    """A function taking per-column arrays to the points of ``code`` (column codes). A code array broadcast
    along its last axis (as ``Samples.tau`` is) is gathered once per row."""
    code = np.asarray(code)
    if code.ndim >= 1 and code.shape[-1] > 1 and code.strides[-1] == 0:
        rows = code[..., :1].astype(np.int64)
    else:
        rows = code.astype(np.int64)
    # np.take along the first axis: several times faster than arr[rows] for a 2-D arr
    return lambda arr: np.take(arr, rows, axis=0)


def _heat_window(
    T_in_lo: float,
    T_in_hi: float,
    kappa: np.ndarray,
    lam: np.ndarray,
    T_c: np.ndarray,
    T_amb: float,
    rise_hi: np.ndarray,
    rise_lo: np.ndarray,
    p_tau: np.ndarray,
) -> tuple[float, float]:
    """The union over columns of ``Manifold.temperature_window`` [K]: every steady temperature lies between
    the lowest of feed, coolant and ambient temperature (less any endothermic drop) and the highest of them
    plus the largest heat release and the agitator's heat."""
    inf = np.inf
    n = np.shape(kappa)
    coldest = np.minimum.reduce([np.full(n, T_in_lo), np.where(kappa > 0, T_c, inf), np.where(lam > 0, T_amb, inf)])
    hi = np.maximum.reduce([np.full(n, T_in_hi), np.where(kappa > 0, T_c, -inf), np.where(lam > 0, T_amb, -inf)])
    hi = hi + np.maximum(rise_hi, 0.0) + p_tau
    lo = coldest + np.minimum(rise_lo, 0.0)
    return float(np.min(window_floor(lo, coldest))), float(np.max(hi + 5.0))


# -- one reaction, closed form ----------------------------------------------------------------------------
class StackedManifold:
    """The closed-form manifold of one reaction (``Manifold.explicit_eval``) for many parameter sets at once,
    in the log-odds of the limiting reactant's conversion (``Manifold._g`` per column)."""

    explicit = True
    m = 1

    def __init__(self, samples: ParameterSamples, tau: np.ndarray, sample_index: np.ndarray) -> None:
        sc = samples.base
        i = np.asarray(sample_index, dtype=np.int64)
        tau = np.asarray(tau, dtype=float)
        rhocpV = sc.rho * samples.cp[i] * sc.vessel.V_set
        kappa = samples.UA_jacket[i] / rhocpV
        lam = samples.UA_loss[i] / rhocpV
        p = sc.P_agitator / rhocpV
        self.tau = tau
        self.n = sc.n_species
        self.nu = sc.nu[:, 0]
        self._kappa, self._lam, self._p, self._T_c, self._T_amb = kappa, lam, p, samples.T_c[i], sc.T_amb
        self.lnk0tau = np.log(samples.k0[i, 0] * tau)
        self.E = samples.Ea[i, 0] / R_GAS
        self.J = -samples.dH[i, 0] / (sc.rho * samples.cp[i])
        self.a_col = 1.0 + (kappa + lam) * tau
        self.b_col = (kappa * samples.T_c[i] + lam * sc.T_amb + p) * tau
        orders = sc.orders[0]
        self.c_in = samples.c_in[i]
        cons = self.nu < 0
        with np.errstate(divide="ignore"):
            lim = np.where(cons, self.c_in / np.where(cons, -self.nu, 1.0), np.inf)
        self.xi_max = lim.min(axis=1)
        i_lim = np.argmin(lim, axis=1)
        self.ok = (orders[i_lim] > 0) & (self.xi_max > 0)
        # per species with a non-zero order: (species, feed, nu, order, gap); a reactant's gap C_in/(-nu) - xi_max >= 0
        # lets its concentration be written -nu (gap + (xi_max - xi)) without cancellation
        self.active = [
            (
                k,
                self.c_in[:, k],
                float(self.nu[k]),
                float(orders[k]),
                (self.c_in[:, k] / -self.nu[k] - self.xi_max) if self.nu[k] < 0 else np.zeros(tau.shape),
            )
            for k in range(sc.n_species)
            if orders[k] != 0
        ]
        # scalars the map machinery reads: whether any column has heat exchange (Hopf points are possible)
        self.kappa = float(np.max(kappa))
        self.lam = float(np.max(lam))

    # the interface of column_regions
    @property
    def core(self) -> StackedManifold:
        return self

    @property
    def tau_arg(self) -> np.ndarray:
        return np.arange(self.tau.size, dtype=float)

    def window(self, T_in_lo: float, T_in_hi: float) -> tuple[float, float]:
        """The union over the columns of ``Manifold.temperature_window`` at each column's residence time [K]."""
        release = self.J * self.xi_max  # one reaction: the limiting reactant runs out
        return _heat_window(
            T_in_lo, T_in_hi, self._kappa, self._lam, self._T_c, self._T_amb, release, release, self._p * self.tau
        )

    def _split(self, take, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:  # noqa: ANN001
        """(xi, xi_max - xi) at the log-odds w, each without cancellation (``Manifold._split``)."""
        t = np.exp(-np.abs(w))
        big = take(self.xi_max) / (1.0 + t)
        small = big * t
        pos = w >= 0
        return np.where(pos, big, small), np.where(pos, small, big)

    def _g(self, take, w: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:  # noqa: ANN001
        """(xi, xi_max - xi, ln g, d ln g/dw) per column (``Manifold._g``)."""
        xi, rem = self._split(take, w)
        logg = np.zeros(np.shape(w))
        dlogg = np.zeros(np.shape(w))
        dxi = xi * rem / take(self.xi_max)
        with np.errstate(divide="ignore", invalid="ignore"):
            for _, c0, nu_i, n_i, gap in self.active:
                if nu_i < 0:
                    left = take(gap) + rem
                    logg += n_i * np.log(-nu_i * left)
                    dlogg -= n_i * dxi / left
                else:
                    C = take(c0) + nu_i * xi
                    logg += n_i * np.log(C)
                    dlogg += n_i * nu_i * dxi / C
        return xi, rem, logg, dlogg

    def explicit_eval(self, tau: np.ndarray, w: np.ndarray) -> Samples:
        """Manifold at (column code, w) (``Manifold.explicit_eval``)."""
        tau, w = np.broadcast_arrays(np.asarray(tau, float), np.asarray(w, float))
        take = _gather(tau)
        E = take(self.E)
        xi, rem, logg, dlogg = self._g(take, w)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            L = take(self.lnk0tau) + logg - np.log(xi)
            valid = (L > 0) & np.isfinite(L)
            T = np.where(valid, E / np.where(valid, L, 1.0), np.nan)
            sig = rem / take(self.xi_max)
            dT_dw = T * T / E * (sig - dlogg)
        a = take(self.a_col)
        J = take(self.J)
        T_in = a * T - J * xi - take(self.b_col)
        dTin = a * dT_dw - J * xi * sig
        return Samples(tau, w, T, xi[..., None], T_in, dTin, dT_dw, valid, None)

    def evaluate(self, tau: np.ndarray, s: np.ndarray) -> Samples:
        """``Manifold.evaluate``: the manifold at (column code, coordinate)."""
        return self.explicit_eval(tau, s)

    def state_C(self, e: Samples) -> np.ndarray:
        """Concentrations (..., n) at the points' log-odds, reactants from xi_max - xi (``Manifold.explicit_C``)."""
        take = _gather(e.tau)
        xi, rem = self._split(take, np.asarray(e.s, float))
        C = take(self.c_in) + xi[..., None] * self.nu
        for k in range(self.n):
            if self.nu[k] < 0:
                gap = self.c_in[:, k] / -self.nu[k] - self.xi_max
                C[..., k] = -self.nu[k] * (take(gap) + rem)
        return C

    def trace_det(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """As ``Manifold.trace_det`` (the 2x2 reduced Jacobian on the manifold), per column."""
        take = _gather(tau)
        x = xi[..., 0]
        tau_r = take(self.tau)
        r = x / tau_r
        if C is None:
            C = take(self.c_in) + x[..., None] * self.nu
        alpha = np.zeros(np.shape(r))
        with np.errstate(invalid="ignore", divide="ignore"):
            for k, _, nu_i, n_i, _ in self.active:
                if nu_i != 0:
                    alpha += n_i * nu_i * np.where(r == 0, 0.0, r / C[..., k])
        beta = r * take(self.E) / (T * T)
        a = take(self.a_col)
        Jb = take(self.J) * beta
        return alpha + Jb - (1.0 + a) / tau_r, (a - tau_r * (Jb + a * alpha)) / (tau_r * tau_r)

    def stability(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        tr, det = self.trace_det(tau, T, xi, C)
        return (tr < 0) & (det > 0), tr, det > 0

    def w_at_T(self, code: np.ndarray, T: np.ndarray, iterations: int = 80) -> np.ndarray:
        """As ``Manifold.explicit_w_at_T``, per column: the root of ln xi - ln g - ln(tau k(T)) = 0 in w."""
        code, T = np.broadcast_arrays(np.asarray(code, float), np.asarray(T, float))
        take = _gather(code)
        ln_tk = take(self.lnk0tau) - take(self.E) / T
        lo = np.full(T.shape, -W_BOUND)
        hi = np.full(T.shape, W_BOUND)
        g0 = self._g(take, np.full(T.shape, -W_BOUND))[2]
        w = np.clip(ln_tk + g0 - np.log(take(self.xi_max)), -W_BOUND + 1, W_BOUND - 1)
        xm = take(self.xi_max)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for _ in range(iterations):
                xi, rem, logg, dlogg = self._g(take, w)
                f = np.log(xi) - logg - ln_tk
                lo = np.where(f < 0, w, lo)
                hi = np.where(f > 0, w, hi)
                w_new = w - f / (rem / xm - dlogg)
                bad = ~((w_new > lo) & (w_new < hi))
                w_new = np.where(bad, 0.5 * (lo + hi), w_new)
                if np.all(np.abs(w_new - w) <= 1e-15 * np.maximum(np.abs(w), 1.0)):
                    w = w_new
                    break
                w = w_new
        return w

    def column_sample(self, T_lo: float, T_hi: float, N: int) -> Samples:
        """As ``Manifold.sample`` on the closed-form path: N points per column, even in the log-odds of the
        conversion between T_lo and T_hi."""
        code = self.tau_arg
        w_lo = self.w_at_T(code, np.full(code.shape, T_lo))
        w_hi = self.w_at_T(code, np.full(code.shape, T_hi))
        u = np.linspace(0.0, 1.0, N)
        return self.explicit_eval(code[:, None], w_lo[:, None] + (w_hi - w_lo)[:, None] * u)

    def s_at_T(self, code: np.ndarray, T: float) -> np.ndarray:
        return self.w_at_T(code, np.full(np.shape(code), T))


# -- any scenario: the general path -------------------------------------------------------------------------
def _rowdot(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """sum(a * b) over the few columns of two (pts, m) arrays, element-wise (a reduction along a short axis costs
    more than the arithmetic)."""
    out = a[..., 0] * b[..., 0]
    for j in range(1, a.shape[-1]):
        out = out + a[..., j] * b[..., j]
    return out


def _rowmax(a: np.ndarray) -> np.ndarray:
    """max |a| over the few columns of a (pts, p) array, element-wise (np.max along a short axis is slower)."""
    out = np.abs(a[:, 0])
    for j in range(1, a.shape[1]):
        out = np.maximum(out, np.abs(a[:, j]))
    return out


class StackedGeneralManifold(Manifold):
    """The general path of ``Manifold`` (coordinate T, isothermal balances by Newton's method in ln C) with the
    parameters of each column: rate constants, activation energies, heats of reaction, heat capacity, feed
    concentrations, jacket, coolant and heat loss.

    The structure (which reactions can run, which species are solved for) is the base scenario's; every
    sample must share it (the same species fed), see :attr:`same_structure`. ``sample`` and ``stability`` are
    the deterministic manifold's own, fed with column codes; the evaluations below gather each point's
    parameters from its code.
    """

    def __init__(self, samples: ParameterSamples, tau: np.ndarray, sample_index: np.ndarray) -> None:
        sc = samples.base
        super().__init__(sc)
        self.explicit = False
        i = np.asarray(sample_index, dtype=np.int64)
        self._samples, self._sample_index = samples, i
        self._jacobian: tuple | None = None
        self.tau = np.asarray(tau, dtype=float)
        rhocpV = sc.rho * samples.cp[i] * sc.vessel.V_set
        self._kappa = samples.UA_jacket[i] / rhocpV
        self._lam = samples.UA_loss[i] / rhocpV
        self._p = sc.P_agitator / rhocpV
        self._T_c = samples.T_c[i]
        self.lnk0 = np.log(samples.k0[i])  # (columns, m)
        self.E_col = samples.Ea[i] / R_GAS
        self.J_col = -samples.dH[i] / (sc.rho * samples.cp[i])[:, None]
        self.c_col = samples.c_in[i]  # (columns, n)
        self.ln_tau = np.log(self.tau)
        self.a_col = 1.0 + (self._kappa + self._lam) * self.tau
        self.b_col = (self._kappa * self._T_c + self._lam * sc.T_amb + self._p) * self.tau
        #: every sample feeds the same species as the base scenario (the solved species and the reactions that
        #: can run are then the same); otherwise the samples must be taken one at a time
        self.same_structure = bool(np.all((self.c_col > 0) == (self.c_in > 0)))
        total = np.sum(self.c_col, axis=1) * max(float(np.max(np.abs(self.nu))), 1.0) * (1 + self.m)
        self._y_top = math.log(max(float(np.max(total)), 1e-300)) + 2.0
        S = self.S.tolist()
        live = [int(k) for k in np.nonzero(self.live)[0]]
        # per solved species: (row in S, species, [(k, nu_ik)] making it, [(k, |nu_ik|)] using it)
        self._rows = [
            (
                a,
                s,
                [(k, float(self.nu[s, k])) for k in live if self.nu[s, k] > 0],
                [(k, float(-self.nu[s, k])) for k in live if self.nu[s, k] < 0],
            )
            for a, s in enumerate(S)
        ]
        self._ords = {
            k: [(a, float(self.orders[k, s])) for a, s in enumerate(S) if self.orders[k, s] != 0] for k in live
        }
        self._nz = [[s for s in range(self.n) if self.orders[j, s] != 0] for j in range(self.m)]
        # scalars the map machinery reads (whether any column has heat exchange)
        self.kappa = float(np.max(self._kappa))
        self.lam = float(np.max(self._lam))

    @property
    def core(self) -> StackedGeneralManifold:
        return self

    @property
    def tau_arg(self) -> np.ndarray:
        return np.arange(self.tau.size, dtype=float)

    def column_sample(self, T_lo: float, T_hi: float, N: int) -> Samples:
        return self.sample(self.tau_arg, T_lo, T_hi, N)

    def s_at_T(self, code: np.ndarray, T: float) -> np.ndarray:
        return np.full(np.shape(code), float(T))

    def window(self, T_in_lo: float, T_in_hi: float) -> tuple[float, float]:
        """Bounds on every steady temperature of every column [K] (``Manifold.temperature_window``).

        The heat release is bounded by two linear programmes (those of ``Manifold.max_heat_release``) with
        the largest heats of reaction and feed of any column: extents are non-negative, so J.xi <= J_max.xi,
        and a larger feed only widens the set of feasible extents. The window may be a little wider than
        the union of the columns' own (it only sets where the manifold is sampled); the programmes run twice,
        not twice per sample.
        """
        from scipy.optimize import linprog

        c_max = np.max(self.c_col, axis=0)
        rise = []
        for sign, J in ((1.0, np.max(self.J_col, axis=0)), (-1.0, np.min(self.J_col, axis=0))):
            # maximise sign * J.xi subject to C_in + nu xi >= 0, xi >= 0
            res = linprog(-sign * J, A_ub=-self.nu, b_ub=c_max, bounds=[(0, None)] * self.m, method="highs")
            rise.append(float(sign * -res.fun) if res.status == 0 else 0.0)
        return _heat_window(
            T_in_lo,
            T_in_hi,
            self._kappa,
            self._lam,
            self._T_c,
            self.sc.T_amb,
            np.full(self.tau.shape, rise[0]),
            np.full(self.tau.shape, rise[1]),
            self._p * self.tau,
        )

    def evaluate(self, tau: np.ndarray, s: np.ndarray) -> Samples:
        """``Manifold.evaluate``: the manifold at (column code, T), every point solved from the feed."""
        return self.general_eval(tau, s)

    def general_eval(self, tau: np.ndarray, T: np.ndarray, C0: np.ndarray | None = None) -> Samples:
        """Manifold at (column code, T) (``Manifold.general_eval`` with each column's parameters)."""
        code, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        shape = code.shape
        col = code.reshape(-1).astype(np.int64)
        Tf = T.reshape(-1)
        pts = col.size
        m, n, p = self.m, self.n, self.S.size
        E = np.take(self.E_col, col, axis=0)  # np.take: several times faster than fancy rows of a 2-D array
        lnk = np.take(self.lnk0, col, axis=0) - E / Tf[:, None]
        ln_tau = np.take(self.ln_tau, col)
        cin = np.take(self.c_col, col, axis=0)
        dT = E / (Tf * Tf)[:, None]
        y, lr, ok, Jac, GT = self._solve_isothermal(lnk, ln_tau, cin, dT, C0, pts)
        if not ok.all():
            y, lr, ok, Jac, GT = self._solve_by_sample(col, Tf, y, lr, ok, Jac, GT)
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            xi = np.exp(lr + ln_tau[:, None])
            dxi = xi * dT
            if p:
                if not ok.all():  # no derivative where the solve failed (those points are not valid)
                    Jac, GT = Jac.copy(), GT.copy()
                    Jac[~ok], GT[~ok] = np.eye(p), 0.0
                dy = -solve_small(Jac, GT)
                for k, terms in self._ords.items():
                    for a, nk in terms:
                        dxi[:, k] += xi[:, k] * nk * dy[:, a]
        C = cin.copy()
        for k in range(m):  # C = C_in + nu xi, a column at a time (a (pts, m) @ (m, n) product is slower)
            C += xi[:, k, None] * self.nu[:, k]
        if p:
            C[:, self.S] = np.exp(y)
        J = np.take(self.J_col, col, axis=0)
        a = np.take(self.a_col, col)
        T_in = a * Tf - _rowdot(xi, J) - np.take(self.b_col, col)
        dTin = a - _rowdot(dxi, J)
        valid = ok & np.isfinite(T_in) & np.isfinite(dTin)
        return Samples(
            code,
            T,
            T,
            xi.reshape(shape + (m,)),
            T_in.reshape(shape),
            dTin.reshape(shape),
            np.ones(shape),
            valid.reshape(shape),
            C.reshape(shape + (n,)),
        )

    def _system(
        self, lnk: np.ndarray, y: np.ndarray, ln_tau: np.ndarray, cS: np.ndarray, dT: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The logarithmic isothermal balances of the deterministic general path (``Manifold`` docs:
        G = ln(C_in + P) - ln C - ln(1 + L)) with each point's feed ``cS`` (pts, p); returns (G, dG/dy, dG/dT)."""
        pts, p = y.shape
        lr = np.full((pts, self.m), -np.inf)
        for k, terms in self._ords.items():
            v = lnk[:, k] + ln_tau
            for a, nk in terms:
                v = v + nk * y[:, a]
            lr[:, k] = v
        tr = np.exp(lr)
        G = np.empty((pts, p))
        Jac = np.zeros((pts, p, p))
        GT = np.empty((pts, p))
        for a, _, makes, uses in self._rows:
            made = [nu * tr[:, k] for k, nu in makes]
            used = [nu * np.exp(lr[:, k] - y[:, a]) for k, nu in uses]
            inflow = np.maximum(cS[:, a] + sum(made) if made else cS[:, a], 1e-300)
            Lv = sum(used) if used else np.zeros(pts)
            f_in = 1.0 / inflow
            f_out = 1.0 / (1.0 + Lv)
            G[:, a] = np.log(inflow) - y[:, a] - np.log1p(Lv)
            row = Jac[:, a, :]
            row[:, a] = -1.0
            for (k, _), t in zip(makes, made, strict=True):
                for b, nk in self._ords[k]:
                    row[:, b] += nk * t * f_in
            for (k, _), t in zip(uses, used, strict=True):
                tf = t * f_out
                for b, nk in self._ords[k]:
                    row[:, b] -= nk * tf
                row[:, a] += tf
            PT = sum((t * dT[:, k] for (k, _), t in zip(makes, made, strict=True)), np.zeros(pts))
            LT = sum((t * dT[:, k] for (k, _), t in zip(uses, used, strict=True)), np.zeros(pts))
            GT[:, a] = PT * f_in - LT * f_out
        return G, Jac, GT

    def _solve_isothermal(
        self,
        lnk: np.ndarray,
        ln_tau: np.ndarray,
        cin: np.ndarray,
        dT: np.ndarray,
        C0: np.ndarray | None,
        pts: int,
        max_iter: int = 100,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Newton's method on the logarithmic balances, as ``Manifold._isothermal`` (the same steps, limits and
        convergence test), per point; returns (y, ln r, converged, dG/dy, dG/dT)."""
        p = self.S.size
        if p == 0:
            lr = np.where(self.live, lnk, -np.inf)
            return np.zeros((pts, 0)), lr, np.ones(pts, dtype=bool), np.zeros((pts, 0, 0)), np.zeros((pts, 0))
        cS = cin[:, self.S]
        low = np.log(np.maximum(_rowmax(cin), 1e-300)) - 12.0
        cold = np.where(cS > 0, np.log(np.maximum(cS, 1e-300)), low[:, None])
        if C0 is None:
            y = cold.copy()
        else:
            C0 = np.asarray(C0, float).reshape(pts, self.n)
            y = np.log(np.maximum(C0[:, self.S], 1e-300))
            y = np.where(np.isfinite(y), y, cold)
        y = np.clip(y, -740.0, self._y_top)
        ok = np.zeros(pts, dtype=bool)
        Jac_out = np.full((pts, p, p), np.nan)
        GT_out = np.full((pts, p), np.nan)
        active = None  # the points still iterating; None: all of them (no copies)
        prev = np.full(pts, np.inf)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            for _ in range(max_iter):
                if active is None:
                    ya, args = y, (lnk, y, ln_tau, cS, dT)
                else:
                    if active.size == 0:
                        break
                    ya = np.take(y, active, axis=0)
                    args = (
                        np.take(lnk, active, axis=0),
                        ya,
                        np.take(ln_tau, active),
                        np.take(cS, active, axis=0),
                        np.take(dT, active, axis=0),
                    )
                G, Jac, GT = self._system(*args)
                err = _rowmax(G)
                step = -solve_small(Jac, G)
                big = _rowmax(step)
                pa = prev if active is None else prev[active]
                done = (err <= 1e-12) | ((err <= 1e-9) & (pa <= 1e-9))
                go = ~done & np.isfinite(big) & np.isfinite(err)
                if active is None:
                    prev = err
                    idx = np.nonzero(done)[0]
                else:
                    prev[active] = err
                    idx = active[done]
                if active is None and idx.size == pts:  # all closed at once (the common case): no copies
                    ok[:] = True
                    Jac_out, GT_out = Jac, GT
                elif idx.size:
                    ok[idx] = True
                    di = np.nonzero(done)[0]
                    Jac_out.reshape(pts, p * p)[idx] = np.take(Jac.reshape(-1, p * p), di, axis=0)
                    GT_out[idx] = np.take(GT, di, axis=0)
                step *= np.minimum(1.0, 4.0 / np.maximum(big, 1e-300))[:, None]
                if active is None and go.all():
                    np.clip(y + step, -740.0, self._y_top, out=y)
                    continue
                moving = np.nonzero(go)[0] if active is None else active[go]
                y[moving] = np.clip(ya[go] + step[go], -740.0, self._y_top)
                active = moving
            lr = lnk.copy()
            lr[:, ~self.live] = -np.inf
            for k, terms in self._ords.items():
                for a, nk in terms:
                    lr[:, k] += nk * y[:, a]
        return y, lr, ok, Jac_out, GT_out

    def _solve_by_sample(
        self,
        col: np.ndarray,
        T: np.ndarray,
        y: np.ndarray,
        lr: np.ndarray,
        ok: np.ndarray,
        Jac: np.ndarray,
        GT: np.ndarray,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The points whose stacked Newton solve did not converge, solved again by the deterministic manifold of
        their own sample (``Manifold._isothermal``: an inflow below the smallest double kept as a logarithm, a start
        under the upper bound of the answer, continuation in the residence time where Newton stalls; differential
        findings 28 and 29), so a hard point of a sample is no harder here than on that sample's own map. Every
        sample feeds the same species (``same_structure``), so the solved species are the same."""
        bad = np.nonzero(~ok)[0]
        owner = np.take(self._sample_index, col[bad])
        y, lr, ok = y.copy(), lr.copy(), ok.copy()
        Jac, GT = Jac.copy(), GT.copy()
        for i in np.unique(owner):
            at = bad[owner == i]
            mf = Manifold(self._samples.scenario(int(i)))
            yi, lri, oki, Ji, GTi = mf._isothermal(np.take(self.tau, col[at]), T[at])
            y[at], lr[at], ok[at], Jac[at], GT[at] = yi, lri, oki, Ji, GTi
        return y, lr, ok, Jac, GT

    def _stiff_points(self, *args: object):  # noqa: ANN202
        """The base class's treatment of stiff points needs one parameter set and real residence times: here
        :meth:`stability` hands those points to each sample's own manifold instead."""
        return iter(())

    def stability(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``Manifold.stability`` per column (``tau`` the column codes). Stiff points (a diagonal entry of the
        reduced Jacobian above ``eigen.FAST`` per residence time: a fast reaction keeps a reactant near zero,
        and rounding hides the slow eigenvalues) are judged by the deterministic manifold of their sample,
        whose eigenvalues come from the Schur complement of the fast variables."""
        Jr = self.reduced_jacobian(tau, T, xi, C)
        self._jacobian = (tau, T, xi, C, Jr)  # the base class asks for the same matrices: computed once
        try:
            stable, h, hok = super().stability(tau, T, xi, C)
        finally:
            self._jacobian = None
        T = np.asarray(T, float)
        code = np.broadcast_to(np.asarray(tau, float), T.shape)
        tau_r = np.take(self.tau, code.astype(np.int64))
        with np.errstate(invalid="ignore", over="ignore"):
            big = np.max(np.abs(np.diagonal(Jr, axis1=-2, axis2=-1)), axis=-1) * tau_r > FAST
        if not big.any():
            return stable, h, hok
        where = np.nonzero(big)
        owner = np.take(self._sample_index, code[where].astype(np.int64))
        xi_w = np.asarray(xi)[where]
        C_w = None if C is None else np.asarray(C)[where]
        stable, h, hok = stable.copy(), h.copy(), hok.copy()
        for i in np.unique(owner):
            k = owner == i
            mf = Manifold(self._samples.scenario(int(i)))
            st, hv, ok = mf.stability(tau_r[where][k], T[where][k], xi_w[k], None if C_w is None else C_w[k])
            pts = tuple(w[k] for w in where)
            stable[pts], h[pts], hok[pts] = st, hv, ok
        return stable, h, hok

    def reduced_jacobian(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> np.ndarray:
        """As ``Manifold.reduced_jacobian``, per column (``tau`` the column codes)."""
        held = self._jacobian
        if held is not None and held[0] is tau and held[1] is T and held[2] is xi and held[3] is C:
            return held[4]
        take = _gather(tau)
        tau_r = take(self.tau)
        cin = take(self.c_col)
        C = cin + xi @ self.nu.T if C is None else C
        E = take(self.E_col)
        lnk = take(self.lnk0)
        m = self.m
        logC = np.log(np.maximum(C, 1e-300))
        r = np.zeros(np.shape(T) + (m,))
        for j in range(m):
            if not self.live[j]:  # cannot run with this feed: no rate, no derivative (as Manifold.rates)
                continue
            lr = lnk[..., j] - E[..., j] / T
            for s in self._nz[j]:
                lr = lr + self.orders[j, s] * logC[..., s]
            r[..., j] = np.exp(lr)
        Rn = np.zeros(np.shape(T) + (m, m))
        with np.errstate(divide="ignore", invalid="ignore"):
            for j in range(m):
                if not self.live[j]:
                    continue
                for s in self._nz[j]:
                    g = r[..., j] * (self.orders[j, s] / np.maximum(C[..., s], 1e-300))
                    for k in range(m):
                        if self.nu[s, k] != 0.0:
                            Rn[..., j, k] += g * self.nu[s, k]
        dr_dT = r * E / (np.asarray(T)[..., None] ** 2)
        J = take(self.J_col)
        out = np.zeros(np.shape(T) + (m + 1, m + 1))
        out[..., :m, :m] = Rn - np.eye(m) / tau_r[..., None, None]
        out[..., :m, m] = dr_dT
        row = J[..., 0, None] * Rn[..., 0, :]  # J . Rn, a reaction at a time (einsum is slower at this size)
        for j in range(1, m):
            row = row + J[..., j, None] * Rn[..., j, :]
        out[..., m, :m] = row
        out[..., m, m] = -take(self.a_col) / tau_r + _rowdot(dr_dT, J)
        return out


def stacked_class(samples: ParameterSamples) -> type[StackedManifold] | type[StackedGeneralManifold] | None:
    """Which stacked manifold takes these samples: the closed form for one reaction whose limiting reactant has
    a positive order in every sample, the general path for several reactions whose samples all feed the same
    species; None otherwise (each sample is then taken on its own)."""
    n = samples.n
    if len(samples.base.reactions) == 1:
        return StackedManifold if bool(np.all(StackedManifold(samples, np.ones(n), np.arange(n)).ok)) else None
    return StackedGeneralManifold if StackedGeneralManifold(samples, np.ones(n), np.arange(n)).same_structure else None


class SingleManifold:
    """The deterministic ``Manifold`` of one scenario with the interface of :func:`column_regions` (column
    codes are indices into ``tau``): the reference the stacked classes are compared with."""

    def __init__(self, mf: Manifold, tau: np.ndarray) -> None:
        self.core = mf
        self.tau = np.asarray(tau, float)
        self.tau_arg = self.tau

    def column_sample(self, T_lo: float, T_hi: float, N: int) -> Samples:
        return self.core.sample(self.tau, T_lo, T_hi, N)

    def s_at_T(self, idx: np.ndarray, T: float) -> np.ndarray:
        tau = self.tau[np.asarray(idx, np.int64)]
        if self.core.explicit:  # the coordinate of the one-reaction path is the log-odds of the conversion
            return self.core.explicit_w_at_T(tau, np.full(tau.shape, T))
        return np.full(tau.shape, float(T))


# -- per-column runs and cell regions -----------------------------------------------------------------------
@dataclass(frozen=True)
class ColumnRegions:
    """Regions of every (column, feed temperature) cell, and the folds of every column."""

    region: np.ndarray  # (n_columns, n_tin) int8: runaway / unstable / multiple / stable codes
    ignition: np.ndarray  # (n_columns,) lowest ignition feed temperature [K], NaN where none
    extinction: np.ndarray  # (n_columns,) highest extinction feed temperature [K], NaN where none


def column_regions(
    mf: StackedManifold | StackedGeneralManifold | SingleManifold,
    T_in: np.ndarray,
    T_lo: float,
    T_hi: float,
    T_max: float,
    N: int,
) -> ColumnRegions:
    """Region codes of every cell of every column of ``mf``, without solving for each cell's states.

    Along a column the steady states are the points of the curve T_in(s) at the cell's feed temperature. The
    curve is cut at its refined folds, Hopf points and the point at the maximum temperature into runs; on a run
    T_in is monotone and the stability and "too hot" flags are constant, so a cell has one state on each run
    whose T_in span contains it, and its region follows from the counts (DESIGN.md §5; ``sensitive`` is not
    told apart from ``stable`` here).
    """
    from exomap.core import opmap

    core, tau_arg = mf.core, mf.tau_arg
    smp = mf.column_sample(T_lo, T_hi, N)
    n_col = smp.s.shape[0]
    cols = opmap.fold_columns(core, smp)
    smp = cols.smp
    code = np.arange(n_col, dtype=float)
    # nodes: both ends, folds, Hopf points, the point at the maximum temperature
    node_col = [np.arange(n_col), np.arange(n_col), cols.fold_col]
    node_s = [smp.s[:, 0], smp.s[:, -1], cols.fold.s]
    node_v = [smp.T_in[:, 0], smp.T_in[:, -1], cols.fold.T_in]
    hc, hs, hv = opmap.hopf_points(core, tau_arg, cols)
    node_col.append(hc)
    node_s.append(hs)
    node_v.append(hv)
    s_max = mf.s_at_T(code, T_max)
    inside = (s_max > np.minimum(smp.s[:, 0], smp.s[:, -1])) & (s_max < np.maximum(smp.s[:, 0], smp.s[:, -1]))
    ic = np.nonzero(inside)[0]
    if ic.size:
        e = core.evaluate(tau_arg[ic], s_max[ic])
        node_col.append(ic)
        node_s.append(s_max[ic])
        node_v.append(e.T_in)
    col = np.concatenate(node_col).astype(np.int64)
    s = np.concatenate(node_s)
    v = np.concatenate(node_v)
    order = np.lexsort((s, col))
    col, s, v = col[order], s[order], v[order]
    pair = np.nonzero(col[:-1] == col[1:])[0]
    rc = col[pair]
    s_mid = 0.5 * (s[pair] + s[pair + 1])
    e = core.evaluate(tau_arg[rc], s_mid)
    stable, _, _ = core.stability(e.tau, e.T, e.xi, core.state_C(e))
    hot = e.T > T_max
    lo = np.minimum(v[pair], v[pair + 1])
    hi = np.maximum(v[pair], v[pair + 1])
    ok = np.isfinite(lo) & np.isfinite(hi) & np.isfinite(e.T)
    rank = np.arange(rc.size) - np.searchsorted(rc, rc)
    R = int(rank.max()) + 1 if rank.size else 1
    LO = np.full((n_col, R), np.inf)
    HI = np.full((n_col, R), -np.inf)
    ST = np.zeros((n_col, R), dtype=bool)
    HT = np.zeros((n_col, R), dtype=bool)
    LO[rc[ok], rank[ok]] = lo[ok]
    HI[rc[ok], rank[ok]] = hi[ok]
    ST[rc[ok], rank[ok]] = stable[ok]
    HT[rc[ok], rank[ok]] = stable[ok] & hot[ok]
    region = np.empty((n_col, T_in.size), dtype=np.int8)
    chunk = max(1, (1 << 21) // max(T_in.size * R, 1))
    vv = T_in[None, :, None]
    for a in range(0, n_col, chunk):
        b = min(a + chunk, n_col)
        present = (LO[a:b, None, :] <= vv) & (vv < HI[a:b, None, :])
        count = present.sum(axis=2)
        n_stable = (present & ST[a:b, None, :]).sum(axis=2)
        runaway = (present & HT[a:b, None, :]).any(axis=2)
        reg = np.full(count.shape, CODE["stable"], dtype=np.int8)
        reg[count > 1] = CODE["multiple"]
        reg[n_stable == 0] = CODE["unstable"]
        reg[runaway] = CODE["runaway"]
        region[a:b] = reg
    ign = np.full(n_col, np.nan)
    ext = np.full(n_col, np.nan)
    rising = cols.rising
    np.fmin.at(ign, cols.fold_col[rising], cols.fold.T_in[rising])
    np.fmax.at(ext, cols.fold_col[~rising], cols.fold.T_in[~rising])
    return ColumnRegions(region, ign, ext)


__all__ = [
    "ColumnRegions",
    "SingleManifold",
    "StackedGeneralManifold",
    "StackedManifold",
    "column_regions",
    "stacked_class",
]
