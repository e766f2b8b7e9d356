"""The steady-state manifold of the tank at fixed volume, feed composition and coolant temperature.

At steady state the species balances give :math:`C = C_{in} + \\nu \\xi` with extents
:math:`\\xi_j = \\tau r_j(C, T)` [mol/m^3], and the energy balance then gives the feed temperature *explicitly*:

.. math::

    T_{in}(\\tau, T) = a(\\tau) T - J \\cdot \\xi(\\tau, T) - b(\\tau), \\qquad
    a = 1 + (\\kappa + \\lambda)\\tau, \\quad b = (\\kappa T_c + \\lambda T_{amb} + p)\\tau

with :math:`J_j = -\\Delta H_j/(\\rho c_p)`, :math:`\\kappa = UA_{jacket}/(\\rho c_p V)`,
:math:`\\lambda = UA_{loss}/(\\rho c_p V)` and :math:`p = P_{agitator}/(\\rho c_p V)`. So the steady states at
(τ, T_in) are the roots in T of one scalar equation, every fold (ignition, extinction) is a zero of
:math:`\\partial T_{in}/\\partial T` at fixed τ, and the map never has to solve a nonlinear system per cell.

For one reaction whose limiting reactant has a positive order the isothermal balance is inverted in closed
form as well: along the extent ξ, :math:`T(\\tau, \\xi) = (E_a/R) / \\ln(k_0 \\tau g(\\xi)/\\xi)` with
:math:`g = \\prod_i C_i^{n_i}`, so the whole manifold is explicit in the coordinates (τ, ξ) ("explicit" path).
Otherwise the coordinate is T and the isothermal balance is solved by a damped Newton iteration, vectorised
and continued in T ("general" path). Both paths are checked against each other in the tests.

Notes
-----
The general path assumes the isothermal mass balance has one solution at each (τ, T), which holds for
power-law kinetics with non-negative orders in reactants only (no autocatalysis; the scenario validation
rejects positive orders in a reaction's own products).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from exomap.core.errors import ModelInputError
from exomap.core.scenario import R_GAS, Scenario


def _solve_list(A: list[list[float]], b: list[float]) -> list[float]:
    """Solve a small dense system in plain floats (Gaussian elimination with partial pivoting)."""
    n = len(b)
    M = [row[:] + [b[i]] for i, row in enumerate(A)]
    for c in range(n):
        p = max(range(c, n), key=lambda r: abs(M[r][c]))
        M[c], M[p] = M[p], M[c]
        piv = M[c][c] or 1e-300
        for r in range(c + 1, n):
            f = M[r][c] / piv
            if f:
                for k in range(c, n + 1):
                    M[r][k] -= f * M[c][k]
    x = [0.0] * n
    for c in range(n - 1, -1, -1):
        x[c] = (M[c][n] - sum(M[c][k] * x[k] for k in range(c + 1, n))) / (M[c][c] or 1e-300)
    return x


def _solve_small(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve stacked small systems A x = b (A (..., m, m), b (..., m)); closed form for m <= 2, where
    numpy's batched LAPACK call costs more than the arithmetic."""
    m = A.shape[-1]
    if m == 1:
        return b / A[..., 0]
    if m == 2:
        a, bb, c, d = A[..., 0, 0], A[..., 0, 1], A[..., 1, 0], A[..., 1, 1]
        det = a * d - bb * c
        return np.stack(((d * b[..., 0] - bb * b[..., 1]) / det, (a * b[..., 1] - c * b[..., 0]) / det), axis=-1)
    return np.linalg.solve(A, b[..., None])[..., 0]


@dataclass(frozen=True)
class Samples:
    """Evaluations of the manifold at coordinates ``s`` (shape (..., N)); arrays broadcast with tau."""

    tau: np.ndarray
    s: np.ndarray
    T: np.ndarray
    xi: np.ndarray  # (..., N, m)
    T_in: np.ndarray
    dTin_ds: np.ndarray
    dT_ds: np.ndarray
    valid: np.ndarray


class Manifold:
    """Steady states of one scenario at fixed feed composition ``c_in`` and coolant temperature ``T_c``."""

    def __init__(self, sc: Scenario, *, c_in: tuple[float, ...] | None = None, T_c: float | None = None) -> None:
        self.sc = sc
        self.nu = sc.nu  # (n, m)
        self.orders = sc.orders  # (m, n)
        self.k0 = sc.k0
        self.E = sc.Ea / R_GAS  # activation temperatures [K]
        self.J = -sc.dH / (sc.rho * sc.cp)
        self.c_in = np.asarray(sc.c_in if c_in is None else c_in, dtype=float)
        if self.c_in.shape != (sc.n_species,) or np.any(~np.isfinite(self.c_in)) or np.any(self.c_in < 0):
            raise ModelInputError(
                "feed concentrations must be one finite value >= 0 per species", field="feed.concentrations"
            )
        self.T_c = sc.T_c if T_c is None else float(T_c)
        rhocpV = sc.rho * sc.cp * sc.vessel.V_set
        self.kappa = sc.UA_jacket / rhocpV
        self.lam = sc.UA_loss / rhocpV
        self.p = sc.P_agitator / rhocpV
        self.m = len(sc.reactions)
        self.n = sc.n_species
        # closed-form path: one reaction whose limiting reactant has a positive order
        self.explicit = False
        if self.m == 1:
            nu = self.nu[:, 0]
            cons = nu < 0
            with np.errstate(divide="ignore"):
                lim = np.where(cons, self.c_in / np.where(cons, -nu, 1.0), np.inf)
            i_lim = int(np.argmin(lim))
            self.xi_max = float(lim[i_lim])
            self.explicit = bool(self.orders[0, i_lim] > 0 and self.xi_max > 0)
        if self.m == 1:
            self._active = [
                (float(self.c_in[i]), float(self.nu[i, 0]), float(self.orders[0, i]))
                for i in range(self.n)
                if self.orders[0, i] != 0
            ]
        self._release: tuple[float, float] | None = None
        self._last_xi: np.ndarray | None = None
        self._orders_nz = [[i for i in range(self.n) if self.orders[j, i] != 0] for j in range(self.m)]
        self.key = sc.key_species
        self.key_feed = float(self.c_in[self.key])

    # -- coefficients ---------------------------------------------------------------------------------
    def a(self, tau: np.ndarray) -> np.ndarray:
        return 1.0 + (self.kappa + self.lam) * tau

    def b(self, tau: np.ndarray) -> np.ndarray:
        return (self.kappa * self.T_c + self.lam * self.sc.T_amb + self.p) * tau

    def conversion(self, C_key: np.ndarray) -> np.ndarray:
        """Conversion of the first reactant of the first reaction [-]."""
        if self.key_feed <= 0:
            return np.zeros_like(C_key)
        return 1.0 - C_key / self.key_feed

    # -- kinetics (vectorised) ------------------------------------------------------------------------
    def concentrations(self, xi: np.ndarray) -> np.ndarray:
        """C = C_in + nu xi, shape (..., n), for xi shape (..., m)."""
        return self.c_in + xi @ self.nu.T

    def rates(self, C: np.ndarray, T: np.ndarray) -> np.ndarray:
        """r (..., m) at C (..., n) and T (...), from logarithms; only species with a non-zero order enter."""
        logC = np.log(np.maximum(C, 1e-300))
        r = np.empty(np.shape(T) + (self.m,))
        for j in range(self.m):
            lr = np.log(self.k0[j]) - self.E[j] / T
            for i in self._orders_nz[j]:
                lr = lr + self.orders[j, i] * logC[..., i]
            r[..., j] = np.exp(lr)
        return r

    def extent_jacobian(self, C: np.ndarray, T: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(r (...,m), dr/dxi = dr/dC . nu (...,m,m), dr/dT (...,m)) with C = C_in + nu xi.

        Written as sums over the species with a non-zero order, each an array operation with scalar
        coefficients: numpy's stacked matmul on tiny matrices costs far more than this arithmetic.
        """
        r = self.rates(C, T)
        Rn = np.zeros(np.shape(T) + (self.m, self.m))
        with np.errstate(divide="ignore", invalid="ignore"):
            for j in range(self.m):
                for i in self._orders_nz[j]:
                    g = r[..., j] * (self.orders[j, i] / np.maximum(C[..., i], 1e-300))
                    for k in range(self.m):
                        if self.nu[i, k] != 0.0:
                            Rn[..., j, k] += g * self.nu[i, k]
        dr_dT = r * self.E / (np.asarray(T)[..., None] ** 2)
        return r, Rn, dr_dT

    # -- the explicit (one reaction) path -------------------------------------------------------------
    def _g(self, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """ln g(xi) with g = prod C_i^n_i, and g'/g, for one reaction; xi any shape. Only species with a
        non-zero order enter (a loop over a handful of species, each term an array operation)."""
        logg = np.zeros(np.shape(xi))
        dlogg = np.zeros(np.shape(xi))
        with np.errstate(divide="ignore", invalid="ignore"):
            for c0, nu_i, n_i in self._active:
                C = c0 + nu_i * xi  # >= 0 for 0 <= xi <= xi_max; at a bound the log is -inf: invalid
                logg += n_i * np.log(C)
                dlogg += n_i * nu_i / C
        return logg, dlogg

    def explicit_eval(self, tau: np.ndarray, xi: np.ndarray) -> Samples:
        """Manifold at (tau, xi) for the one-reaction path (shapes broadcast)."""
        tau, xi = np.broadcast_arrays(np.asarray(tau, float), np.asarray(xi, float))
        E = self.E[0]
        logg, dlogg = self._g(xi)
        with np.errstate(divide="ignore", invalid="ignore"):
            L = np.log(self.k0[0] * tau) + logg - np.log(xi)
            valid = (L > 0) & (xi > 0) & (xi < self.xi_max)
            T = np.where(valid, E / np.where(valid, L, 1.0), np.nan)
            dT_dxi = T * T / E * (1.0 / xi - dlogg)
        a = self.a(tau)
        T_in = a * T - self.J[0] * xi - self.b(tau)
        dTin = a * dT_dxi - self.J[0]
        return Samples(tau, xi, T, xi[..., None], T_in, dTin, dT_dxi, valid)

    def explicit_xi_at_T(self, tau: np.ndarray, T: np.ndarray, iterations: int = 60) -> np.ndarray:
        """Extent at (tau, T) for one reaction: the root of ln xi - ln(tau k(T)) - ln g(xi) = 0, which is
        increasing in xi, by Newton's method in ln xi safeguarded by bisection (vectorised)."""
        tau, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        ln_tk = np.log(self.k0[0] * tau) - self.E[0] / T
        lo = np.full(tau.shape, np.log(self.xi_max) - 745.0)
        hi = np.full(tau.shape, np.log(self.xi_max))
        y = np.minimum(ln_tk + self._g(np.zeros(tau.shape))[0], hi - 1e-12)  # low-conversion guess
        y = np.maximum(y, lo)
        for _ in range(iterations):
            xi = np.exp(y)
            logg, dlogg = self._g(xi)
            f = y - ln_tk - logg
            lo = np.where(f < 0, y, lo)
            hi = np.where(f > 0, y, hi)
            df = 1.0 - xi * dlogg
            y_new = y - f / df
            bad = ~((y_new > lo) & (y_new < hi))
            y_new = np.where(bad, 0.5 * (lo + hi), y_new)
            if np.all(np.abs(y_new - y) <= 1e-15 * np.maximum(np.abs(y), 1.0)):
                y = y_new
                break
            y = y_new
        return np.exp(y)

    # -- the general path -----------------------------------------------------------------------------
    def isothermal_extents(
        self, tau: np.ndarray, T: np.ndarray, xi0: np.ndarray | None = None, tol: float = 1e-12, max_iter: int = 60
    ) -> np.ndarray:
        """Solve xi = tau r(C_in + nu xi, T) for xi (..., m) by damped Newton, vectorised."""
        tau, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        if xi0 is None:
            r0 = self.rates(np.broadcast_to(self.c_in, tau.shape + (self.n,)), T)
            xi = tau[..., None] * r0
            xi = self._feasible(np.zeros_like(xi), xi)
        else:
            xi = np.array(xi0, dtype=float, copy=True)
        eye = np.eye(self.m)
        scale = max(float(np.max(self.c_in)), 1.0)
        flat_xi = xi.reshape(-1, self.m)
        flat_tau, flat_T = tau.reshape(-1), T.reshape(-1)
        active = np.arange(flat_tau.size)
        for _ in range(max_iter):
            if active.size == 0:
                break
            x, ta, Ta = flat_xi[active], flat_tau[active], flat_T[active]
            C = self.concentrations(x)
            r, Rn, _ = self.extent_jacobian(C, Ta)
            tr = ta[:, None] * r
            res = x - tr
            jac = eye - ta[:, None, None] * Rn
            step = -_solve_small(jac, res)
            new = self._feasible(x, x + step)
            flat_xi[active] = new
            # converged: the residual is at the rounding level of its terms, or the step is negligible
            done = np.all(
                (np.abs(res) <= tol * (np.abs(x) + np.abs(tr)) + 1e-300) | (np.abs(new - x) <= 1e-15 * scale), axis=-1
            )
            active = active[~done]
        return flat_xi.reshape(xi.shape)

    def _feasible(self, xi: np.ndarray, target: np.ndarray) -> np.ndarray:
        """Move from xi towards target, but no further than 99 % of the way to C = 0 or xi = 0."""
        d = target - xi
        t = np.full(xi.shape[:-1], np.inf)
        with np.errstate(divide="ignore", invalid="ignore"):
            for i in range(self.n):
                nz = np.nonzero(self.nu[i])[0]
                if nz.size == 0:
                    continue
                Ci = self.c_in[i] + sum(self.nu[i, k] * xi[..., k] for k in nz)
                dCi = sum(self.nu[i, k] * d[..., k] for k in nz)
                t = np.minimum(t, np.where(dCi < 0, -Ci / dCi, np.inf))
            for k in range(self.m):
                t = np.minimum(t, np.where(d[..., k] < 0, -xi[..., k] / d[..., k], np.inf))
        alpha = np.where(t >= 1.0, 1.0, 0.99 * np.maximum(t, 0.0))
        return xi + alpha[..., None] * d

    def general_eval(self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray | None = None) -> Samples:
        """Manifold at (tau, T) (shapes broadcast); xi solved unless given."""
        tau, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        if xi is None:
            xi = self.isothermal_extents(tau, T)
        C = self.concentrations(xi)
        _, Rn, dr_dT = self.extent_jacobian(C, T)
        jac = np.eye(self.m) - tau[..., None, None] * Rn
        dxi_dT = _solve_small(jac, tau[..., None] * dr_dT)
        a = self.a(tau)
        T_in = a * T - xi @ self.J - self.b(tau)
        dTin = a - dxi_dT @ self.J
        return Samples(tau, T, T, xi, T_in, dTin, np.ones_like(T), np.isfinite(T_in))

    # -- common interface -----------------------------------------------------------------------------
    def evaluate(self, tau: np.ndarray, s: np.ndarray) -> Samples:
        """Manifold at coordinates (tau, s): s is the extent (explicit path) or T (general path).

        On the general path a single-point call starts its isothermal Newton solve from the previous
        single-point answer: callers that walk along a curve (root bracketing, continuation) then need one or
        two iterations instead of a cold start (the solution is unique, so the start only changes the cost).
        """
        if self.explicit:
            return self.explicit_eval(tau, s)
        if np.size(s) == 1 and np.size(tau) == 1:
            return self._general_point(np.asarray(tau, float), np.asarray(s, float))
        return self.general_eval(tau, s)

    def _general_point(self, tau_a: np.ndarray, T_a: np.ndarray) -> Samples:
        """One point of the general path in plain Python floats (numpy's per-call cost dominates for a single
        point): the same damped Newton on xi = tau r(C_in + nu xi, T) as ``isothermal_extents``, started from
        the previous single-point answer, then T_in and dT_in/dT as in ``general_eval``."""
        tau, T = float(tau_a.reshape(-1)[0]), float(T_a.reshape(-1)[0])
        m, n = self.m, self.n
        nu = self.nu.tolist()
        orders = self.orders.tolist()
        c_in = self.c_in.tolist()
        lnk = [math.log(self.k0[j]) - self.E[j] / T for j in range(m)]
        scale = max(max(c_in), 1.0)

        def conc(x: list[float]) -> list[float]:
            return [c_in[i] + sum(nu[i][k] * x[k] for k in range(m)) for i in range(n)]

        def rates_jac(x: list[float]) -> tuple[list[float], list[list[float]]]:
            C = conc(x)
            r = []
            for j in range(m):
                lr = lnk[j]
                for i in self._orders_nz[j]:
                    lr += orders[j][i] * math.log(max(C[i], 1e-300))
                r.append(math.exp(lr))
            Rn = [[0.0] * m for _ in range(m)]
            for j in range(m):
                for i in self._orders_nz[j]:
                    g = r[j] * orders[j][i] / max(C[i], 1e-300)
                    for k in range(m):
                        Rn[j][k] += g * nu[i][k]
            return r, Rn

        if self._last_xi is not None:
            x = [float(v) for v in self._last_xi]
        else:
            r0, _ = rates_jac([0.0] * m)
            x = self._feasible(np.zeros(m), tau * np.array(r0)).tolist()
        for _ in range(60):
            r, Rn = rates_jac(x)
            res = [x[j] - tau * r[j] for j in range(m)]
            A = [[(1.0 if j == k else 0.0) - tau * Rn[j][k] for k in range(m)] for j in range(m)]
            step = _solve_list(A, [-v for v in res])
            new = self._feasible(np.array(x), np.array(x) + np.array(step)).tolist()
            done = all(
                abs(res[j]) <= 1e-12 * (abs(x[j]) + abs(tau * r[j])) + 1e-300 or abs(new[j] - x[j]) <= 1e-15 * scale
                for j in range(m)
            )
            x = new
            if done:
                break
        self._last_xi = np.array(x)
        r, Rn = rates_jac(x)
        A = [[(1.0 if j == k else 0.0) - tau * Rn[j][k] for k in range(m)] for j in range(m)]
        dxi_dT = _solve_list(A, [tau * r[j] * self.E[j] / (T * T) for j in range(m)])
        a = 1.0 + (self.kappa + self.lam) * tau
        b = (self.kappa * self.T_c + self.lam * self.sc.T_amb + self.p) * tau
        J = self.J.tolist()
        T_in = a * T - sum(J[j] * x[j] for j in range(m)) - b
        dTin = a - sum(J[j] * dxi_dT[j] for j in range(m))
        one = np.array([T])
        return Samples(
            np.array([tau]),
            one,
            one,
            np.array([x]),
            np.array([T_in]),
            np.array([dTin]),
            np.ones(1),
            np.array([math.isfinite(T_in)]),
        )

    def temperature_window(self, T_in_lo: float, T_in_hi: float, tau_hi: float) -> tuple[float, float]:
        """Bounds on every steady temperature for feed temperatures in [T_in_lo, T_in_hi] [K]."""
        lo = min(T_in_lo, self.T_c if self.kappa > 0 else np.inf, self.sc.T_amb if self.lam > 0 else np.inf)
        hi = max(T_in_hi, self.T_c if self.kappa > 0 else -np.inf, self.sc.T_amb if self.lam > 0 else -np.inf)
        rise = self.max_heat_release()
        hi = hi + max(rise, 0.0) + self.p * tau_hi
        lo = lo + min(self.min_heat_release(), 0.0)
        return max(lo - 2.0, 50.0), hi + 5.0

    def max_heat_release(self) -> float:
        """Largest adiabatic temperature rise the feed can give, max J.xi over feasible extents [K]."""
        if self._release is None:
            self._release = (self._extreme_release(+1.0), self._extreme_release(-1.0))
        return self._release[0]

    def min_heat_release(self) -> float:
        self.max_heat_release()
        return self._release[1]  # type: ignore[index]

    def _extreme_release(self, sign: float) -> float:
        if self.m == 1:  # one reaction: the limiting reactant runs out
            lim = getattr(self, "xi_max", 0.0)
            return float(max(sign * self.J[0] * lim, 0.0) * sign)
        from scipy.optimize import linprog

        # maximise sign * J.xi subject to C_in + nu xi >= 0, xi >= 0
        res = linprog(-sign * self.J, A_ub=-self.nu, b_ub=self.c_in, bounds=[(0, None)] * self.m, method="highs")
        if res.status != 0:
            return 0.0
        return float(sign * -res.fun)

    def s_bounds(self, tau: np.ndarray, T_lo: float, T_hi: float) -> tuple[np.ndarray, np.ndarray]:
        """Coordinate bounds covering temperatures T_lo..T_hi at each tau."""
        tau = np.asarray(tau, float)
        if self.explicit:
            return (
                self.explicit_xi_at_T(tau, np.full(tau.shape, T_lo)),
                self.explicit_xi_at_T(tau, np.full(tau.shape, T_hi)),
            )
        return np.full(tau.shape, T_lo), np.full(tau.shape, T_hi)

    def sample(self, tau: np.ndarray, T_lo: float, T_hi: float, N: int) -> Samples:
        """Samples along s at each tau (shape (n_tau, N)), spaced evenly in 1/T (general path) or in the
        log-odds of the conversion (explicit path; nearly even in 1/T at both ends)."""
        tau = np.asarray(tau, float)
        s_lo, s_hi = self.s_bounds(tau, T_lo, T_hi)
        u = np.linspace(0.0, 1.0, N)
        if self.explicit:
            w_lo = np.log(s_lo / (self.xi_max - s_lo))
            w_hi = np.log(s_hi / (self.xi_max - s_hi))
            w = w_lo[:, None] + (w_hi - w_lo)[:, None] * u
            s = self.xi_max / (1.0 + np.exp(-w))
            return self.explicit_eval(tau[:, None], s)
        inv = 1.0 / T_lo + (1.0 / T_hi - 1.0 / T_lo) * u
        Tg = np.broadcast_to(1.0 / inv, (tau.size, N))
        # continuation in T on every 8th temperature, then all the others at once from interpolated guesses
        coarse = np.unique(np.concatenate((np.arange(0, N, 8), [N - 1])))
        xi_c = np.empty((tau.size, coarse.size, self.m))
        guess = None
        for k, kk in enumerate(coarse):
            guess = self.isothermal_extents(tau, Tg[:, kk], guess)
            xi_c[:, k] = guess
        idx = np.searchsorted(coarse, np.arange(N), side="right") - 1
        idx = np.clip(idx, 0, coarse.size - 1)
        xi0 = xi_c[:, idx]
        xi = self.isothermal_extents(np.broadcast_to(tau[:, None], (tau.size, N)), Tg, xi0)
        return self.general_eval(tau[:, None], Tg, xi)

    def stability(self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Vectorised stability on the manifold without eigenvalues where the size allows it.

        Returns (stable, hopf, hopf_valid): ``hopf`` is a smooth function that changes sign where a complex
        pair crosses the imaginary axis, meaningful where ``hopf_valid``. For 2x2 it is the trace (with a
        positive determinant); for 3x3 it is minus the Hurwitz determinant :math:`c_2 c_1 - c_0` of the
        characteristic polynomial :math:`\\lambda^3 + c_2\\lambda^2 + c_1\\lambda + c_0` (where its
        discriminant is negative: one real root and a complex pair); larger systems use the leading real
        part of the eigenvalues.
        """
        if self.m == 1:
            tr, det = self.trace_det(tau, T, xi)
            return (tr < 0) & (det > 0), tr, det > 0
        Jr = self.reduced_jacobian(tau, T, xi)
        if self.m == 2:
            c2 = -(Jr[..., 0, 0] + Jr[..., 1, 1] + Jr[..., 2, 2])
            c1 = (
                Jr[..., 0, 0] * Jr[..., 1, 1]
                - Jr[..., 0, 1] * Jr[..., 1, 0]
                + Jr[..., 0, 0] * Jr[..., 2, 2]
                - Jr[..., 0, 2] * Jr[..., 2, 0]
                + Jr[..., 1, 1] * Jr[..., 2, 2]
                - Jr[..., 1, 2] * Jr[..., 2, 1]
            )
            c0 = -np.linalg.det(Jr)
            # c2 c1 - c0 = -(l1 + l2)(l1 + l3)(l2 + l3): with a complex pair a +- iw and a real root l1 it is
            # -2a((l1 + a)^2 + w^2), so its sign is minus that of the pair's real part
            hurwitz = c2 * c1 - c0
            disc = 18 * c2 * c1 * c0 - 4 * c2**3 * c0 + c2**2 * c1**2 - 4 * c1**3 - 27 * c0**2
            return (c2 > 0) & (c1 > 0) & (c0 > 0) & (hurwitz > 0), -hurwitz, disc < 0
        lead, cplx = self.leading_real_part(tau, T, xi)
        return lead < 0, lead, cplx

    # -- stability on the manifold --------------------------------------------------------------------
    def reduced_jacobian(self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray) -> np.ndarray:
        """Jacobian of the extent-and-temperature system on the invariant manifold, shape (..., m+1, m+1).

        The full species+energy block has these eigenvalues plus -1/tau once per reaction invariant
        (n - rank(nu) of them), which are always stable.
        """
        C = self.concentrations(xi)
        _, Rn, dr_dT = self.extent_jacobian(C, T)
        m = self.m
        out = np.zeros(T.shape + (m + 1, m + 1))
        out[..., :m, :m] = Rn - np.eye(m) / tau[..., None, None]
        out[..., :m, m] = dr_dT
        out[..., m, :m] = np.einsum("j,...jk->...k", self.J, Rn)
        out[..., m, m] = -self.a(tau) / tau + dr_dT @ self.J
        return out

    def trace_det(self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Trace and determinant of the 2x2 reduced Jacobian of one reaction, on the manifold, where the
        rate is r = xi/tau exactly:

        .. math:: \\alpha = r \\sum_i n_i \\nu_i / C_i, \\quad \\beta = r E/T^2, \\quad
                  \\mathrm{tr} = \\alpha + J\\beta - (1 + a)/\\tau, \\quad
                  \\det = (a - \\tau (J\\beta + a\\alpha))/\\tau^2
        """
        x = xi[..., 0]
        r = x / tau
        _, dlogg = self._g(x)
        with np.errstate(invalid="ignore"):
            # no extent (a feed without the reactant): no rate to perturb, and 0 * (-inf) must not be NaN
            alpha = np.where(r == 0, 0.0, r * dlogg)
        beta = r * self.E[0] / (T * T)
        a = self.a(tau)
        Jb = self.J[0] * beta
        return alpha + Jb - (1.0 + a) / tau, (a - tau * (Jb + a * alpha)) / (tau * tau)

    def leading_real_part(self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(max real part of the reduced eigenvalues [1/s], whether the leading pair is complex)."""
        if self.m == 1:
            tr, det = self.trace_det(tau, T, xi)
            disc = tr * tr - 4.0 * det
            sq = np.sqrt(np.abs(disc))
            lead = np.where(disc >= 0, 0.5 * (tr + sq), 0.5 * tr)
            return lead, disc < 0
        ev = np.linalg.eigvals(self.reduced_jacobian(tau, T, xi))
        idx = np.argmax(ev.real, axis=-1)
        lead = np.take_along_axis(ev, idx[..., None], axis=-1)[..., 0]
        return lead.real, np.abs(lead.imag) > 1e-12 * np.maximum(np.abs(lead.real), 1e-30)
