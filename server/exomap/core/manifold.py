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

from exomap.core.eigen import FAST, eigenvalues_with_errors_batched
from exomap.core.errors import ModelInputError
from exomap.core.scenario import R_GAS, Scenario, check_zero_orders

#: Largest |log-odds| of the one-reaction coordinate: conversions from e^-700 to 1 - e^-700.
W_BOUND = 700.0


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


def solve_small(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve stacked small systems A x = b (A (..., m, m), b (..., m)); closed form for m <= 2, where
    numpy's batched LAPACK call costs more than the arithmetic."""
    m = A.shape[-1]
    if m == 1:
        return b / A[..., 0]
    if m == 2:
        a, bb, c, d = A[..., 0, 0], A[..., 0, 1], A[..., 1, 0], A[..., 1, 1]
        det = a * d - bb * c
        return np.stack(((d * b[..., 0] - bb * b[..., 1]) / det, (a * b[..., 1] - c * b[..., 0]) / det), axis=-1)
    try:
        return np.linalg.solve(A, b[..., None])[..., 0]
    except np.linalg.LinAlgError:  # a singular matrix somewhere in the stack: least squares there too
        return np.einsum("...ij,...j->...i", np.linalg.pinv(A), b)


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
    C: np.ndarray | None  # (..., n) concentrations (general path; None on the explicit one: Manifold.state_C)


def window_floor(lo: float | np.ndarray, coldest: float | np.ndarray) -> float | np.ndarray:
    """Lower end of a temperature window [K]: 2 K below the lowest steady temperature the balances allow (``lo``),
    kept above half the coldest stream's temperature (an endothermic bound can fall to or below 0 K). No fixed
    floor: a feed at 30 K has its frozen steady state at about 30 K (differential check, seed 715015), which a
    floor of 50 K hid while the answer said it was complete."""
    return np.maximum(lo - 2.0, 0.5 * coldest)


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
        if c_in is not None:  # a feed other than the scenario's (validated with its own) may make one run out
            check_zero_orders(sc.species, sc.nu, sc.orders, self.c_in)
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
                (
                    float(self.c_in[i]),
                    float(self.nu[i, 0]),
                    float(self.orders[0, i]),
                    float(self.c_in[i] / -self.nu[i, 0] - self.xi_max) if self.nu[i, 0] < 0 else 0.0,
                )
                for i in range(self.n)
                if self.orders[0, i] != 0
            ]
        self._release: tuple[float, float] | None = None
        self._last_C: np.ndarray | None = None
        self._setup_isothermal()
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
        """r (..., m) at C (..., n) and T (...), from logarithms; only species with a non-zero order enter. A
        reaction that cannot run with this feed (``live``) has r = 0 and no derivative: its reactant is absent
        and stays absent, so there is no rate to perturb (not r/C = 0/0 taken at a floor of 1e-300)."""
        logC = np.log(np.maximum(C, 1e-300))
        r = np.zeros(np.shape(T) + (self.m,))
        for j in range(self.m):
            if not self.live[j]:  # needs a species that is neither fed nor made: never runs
                continue
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
                if not self.live[j]:
                    continue
                for i in self._orders_nz[j]:
                    g = r[..., j] * (self.orders[j, i] / np.maximum(C[..., i], 1e-300))
                    for k in range(self.m):
                        if self.nu[i, k] != 0.0:
                            Rn[..., j, k] += g * self.nu[i, k]
        dr_dT = r * self.E / (np.asarray(T)[..., None] ** 2)
        return r, Rn, dr_dT

    # -- the explicit (one reaction) path -------------------------------------------------------------
    def _split(self, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(xi, xi_max - xi) at the log-odds w = ln(xi/(xi_max - xi)), each without cancellation: a
        conversion of 1 - 1e-30 is as representable as one of 1e-30."""
        t = np.exp(-np.abs(w))
        big = self.xi_max / (1.0 + t)
        small = big * t
        pos = w >= 0
        return np.where(pos, big, small), np.where(pos, small, big)

    def _g(self, w: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(xi, xi_max - xi, ln g, d ln g/dw) for one reaction at the log-odds w, with g = prod C_i^n_i
        over the species with a non-zero order. A reactant's concentration is written as
        -nu_i (gap_i + (xi_max - xi)), gap_i = C_i,in/(-nu_i) - xi_max >= 0, so the limiting one keeps its
        relative precision however far it is used up."""
        xi, rem = self._split(w)
        logg = np.zeros(np.shape(w))
        dlogg = np.zeros(np.shape(w))
        dxi = xi * rem / self.xi_max  # dxi/dw
        with np.errstate(divide="ignore", invalid="ignore"):
            for c0, nu_i, n_i, gap in self._active:
                if nu_i < 0:
                    left = gap + rem  # C_i / (-nu_i)
                    logg += n_i * np.log(-nu_i * left)
                    dlogg -= n_i * dxi / left
                else:
                    C = c0 + nu_i * xi
                    logg += n_i * np.log(C)
                    dlogg += n_i * nu_i * dxi / C
        return xi, rem, logg, dlogg

    def explicit_C(self, w: np.ndarray) -> np.ndarray:
        """Concentrations (..., n) at the log-odds w of the one-reaction path (reactants without
        cancellation, see :meth:`_g`)."""
        xi, rem = self._split(np.asarray(w, float))
        C = self.c_in + xi[..., None] * self.nu[:, 0]
        for i in range(self.n):
            if self.nu[i, 0] < 0:
                gap = self.c_in[i] / -self.nu[i, 0] - self.xi_max
                C[..., i] = -self.nu[i, 0] * (gap + rem)
        return C

    def state_C(self, e: Samples) -> np.ndarray:
        """Concentrations of manifold points (..., n): carried by the general path, computed from the
        coordinate on the explicit one (where the hot path does not need them)."""
        return e.C if e.C is not None else self.explicit_C(e.s)

    def explicit_eval(self, tau: np.ndarray, w: np.ndarray) -> Samples:
        """Manifold at (tau, w) for the one-reaction path (shapes broadcast), w = ln(xi/(xi_max - xi)) the
        log-odds of the limiting reactant's conversion:

        .. math:: T = (E_a/R)/L, \\quad L = \\ln(k_0 \\tau) + \\ln g - \\ln \\xi, \\quad
                  dT/dw = (T^2 R/E_a)(d\\ln\\xi/dw - d\\ln g/dw)
        """
        tau, w = np.broadcast_arrays(np.asarray(tau, float), np.asarray(w, float))
        E = self.E[0]
        xi, rem, logg, dlogg = self._g(w)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            L = np.log(self.k0[0] * tau) + logg - np.log(xi)
            valid = (L > 0) & np.isfinite(L)
            T = np.where(valid, E / np.where(valid, L, 1.0), np.nan)
            sig = rem / self.xi_max  # d ln xi/dw
            dT_dw = T * T / E * (sig - dlogg)
        a = self.a(tau)
        T_in = a * T - self.J[0] * xi - self.b(tau)
        dTin = a * dT_dw - self.J[0] * xi * sig
        return Samples(tau, w, T, xi[..., None], T_in, dTin, dT_dw, valid, None)

    def explicit_w_at_T(self, tau: np.ndarray, T: np.ndarray, iterations: int = 80) -> np.ndarray:
        """Log-odds w at (tau, T) for one reaction: the root of ln xi - ln g - ln(tau k(T)) = 0, which is
        increasing in w, by Newton's method safeguarded by bisection (vectorised)."""
        tau, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        ln_tk = np.log(self.k0[0] * tau) - self.E[0] / T
        lo = np.full(tau.shape, -W_BOUND)
        hi = np.full(tau.shape, W_BOUND)
        g0 = self._g(np.full(tau.shape, -W_BOUND))[2]
        w = np.clip(ln_tk + g0 - math.log(self.xi_max), -W_BOUND + 1, W_BOUND - 1)  # low-conversion guess
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            for _ in range(iterations):
                xi, rem, logg, dlogg = self._g(w)
                f = np.log(xi) - logg - ln_tk
                lo = np.where(f < 0, w, lo)
                hi = np.where(f > 0, w, hi)
                w_new = w - f / (rem / self.xi_max - dlogg)
                bad = ~((w_new > lo) & (w_new < hi))
                w_new = np.where(bad, 0.5 * (lo + hi), w_new)
                if np.all(np.abs(w_new - w) <= 1e-15 * np.maximum(np.abs(w), 1.0)):
                    w = w_new
                    break
                w = w_new
        return w

    # -- the general path -----------------------------------------------------------------------------
    def _setup_isothermal(self) -> None:
        """Which reactions can run with this feed, and which concentrations the isothermal solve needs.

        A reaction with a positive order in a species that is neither fed nor made by a reaction that can run
        never runs (its rate is 0 at every temperature): it is left out, so no logarithm of 0 is taken. The
        unknowns are the concentrations of the species with a positive order in a live reaction (``S``); every
        one of them is positive at a steady state.
        """
        m, n = self.m, self.n
        live = np.ones(m, dtype=bool)
        while True:
            produced = (self.nu[:, live] > 0).any(axis=1)
            zero = (self.c_in <= 0) & ~produced
            now = live & ~np.array([bool(np.any((self.orders[k] != 0) & zero)) for k in range(m)])
            if np.array_equal(now, live):
                break
            live = now
        self.live = live
        self.S = np.array([i for i in range(n) if np.any(live & (self.orders[:, i] != 0))], dtype=int)
        self._live_idx = np.nonzero(live)[0]
        # per solved species: (row in S, c_in, [(k, nu_ik)] making it, [(k, |nu_ik|)] using it)
        S_list = self.S.tolist()
        self._iso_rows = [
            (
                a,
                float(self.c_in[i]),
                [(int(k), float(self.nu[i, k])) for k in self._live_idx if self.nu[i, k] > 0],
                [(int(k), float(-self.nu[i, k])) for k in self._live_idx if self.nu[i, k] < 0],
            )
            for a, i in enumerate(S_list)
        ]
        # orders of every live reaction in the solved species, as (k, [(row in S, n_ki)])
        self._iso_orders = [
            (int(k), [(a, float(self.orders[k, i])) for a, i in enumerate(S_list) if self.orders[k, i] != 0])
            for k in self._live_idx
        ]
        self._iso_order_map = dict(self._iso_orders)
        total = float(np.sum(self.c_in)) * max(float(np.max(np.abs(self.nu))), 1.0) * (1 + self.m)
        self._y_hi = math.log(max(total, 1e-300)) + 2.0  # no concentration can exceed this [ln mol/m^3]
        # ln C can go far below the smallest double: an intermediate made by a frozen reaction at a cold
        # feed has ln C ~ -1500 (seed 718531), and a bound at the underflow of exp (-745) left such points
        # unsolved. exp(y) is then 0 in the concentrations, which is what a double can say of it.
        self._y_lo = -1.0e6
        # per solved species: [(k, ln nu_ik, [(b, n_kb)])] of the reactions making it, when every order of
        # that reaction is >= 0 (then the rate at upper bounds of the concentrations bounds the rate above)
        self._ub_rows = [
            (
                a,
                c0,
                [(k, math.log(nu), self._iso_order_map[k]) for k, nu in makes],
                all(nk >= 0 for k, _ in makes for _, nk in self._iso_order_map[k]),
            )
            for a, c0, makes, _ in self._iso_rows
        ]

    def _iso_system(
        self, lnk: np.ndarray, y: np.ndarray, ln_tau: np.ndarray, dT: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]:
        """The isothermal balances of the solved species in logarithmic form, with their Jacobian.

        .. math:: G_i = \\ln(C_{i,in} + P_i) - \\ln C_i - \\ln(1 + L_i), \\quad
                  P_i = \\sum_{\\nu_{ik} > 0} \\nu_{ik} \\tau r_k, \\quad
                  L_i = \\sum_{\\nu_{ik} < 0} |\\nu_{ik}| \\tau r_k / C_i

        (what enters over what leaves, as a logarithm), in the unknowns y = ln C of the solved species. A
        reactant that is nearly used up is then as well resolved as one that is hardly touched (1 - X =
        1e-30 as well as X = 1e-30), and a first-order consumption is linear in y. Returns (G, dG/dy, ln r of
        every reaction (-inf where it cannot run), dG/dT when ``dT`` = E/T^2 (pts, m) is given).
        """
        pts = y.shape[0]
        p = self.S.size
        lr = np.full((pts, self.m), -np.inf)
        for k, terms in self._iso_orders:
            v = lnk[:, k] + ln_tau
            for a, nk in terms:
                v = v + nk * y[:, a]
            lr[:, k] = v  # ln(tau r_k)
        tr = np.exp(lr)
        G = np.empty((pts, p))
        Jac = np.zeros((pts, p, p))
        GT = np.empty((pts, p)) if dT is not None else None
        orders = self._iso_order_map
        for a, c0, makes, uses in self._iso_rows:
            used = [nu * np.exp(lr[:, k] - y[:, a]) for k, nu in uses]  # |nu| tau r / C, never tau r / C
            if c0 > 0 or not makes:
                made = [nu * tr[:, k] for k, nu in makes]
                inflow = c0 + sum(made) if made else np.full(pts, c0)
                inflow = np.maximum(inflow, 1e-300)
                f_in = 1.0 / inflow
                ln_in = np.log(inflow)
            else:
                # not fed: the inflow is what the reactions make, as a logarithm (it may be far below the
                # smallest double, seed 718531), and each term's share of it, t/inflow, without underflow
                lm = [math.log(nu) + lr[:, k] for k, nu in makes]
                ln_in = lm[0] if len(lm) == 1 else np.logaddexp.reduce(lm, axis=0)
                made = [np.exp(v - ln_in) for v in lm]  # shares: f_in is then 1
                f_in = np.ones(pts)
            Lv = sum(used) if used else np.zeros(pts)
            f_out = 1.0 / (1.0 + Lv)
            G[:, a] = ln_in - y[:, a] - np.log1p(Lv)
            row = Jac[:, a, :]
            row[:, a] = -1.0
            for (k, _), t in zip(makes, made, strict=True):
                tf = t * f_in
                for b, nk in orders[k]:
                    row[:, b] += nk * tf
            for (k, _), t in zip(uses, used, strict=True):
                tf = t * f_out
                for b, nk in orders[k]:
                    row[:, b] -= nk * tf
                row[:, a] += tf
            if GT is not None:
                PT = sum((t * dT[:, k] for (k, _), t in zip(makes, made, strict=True)), np.zeros(pts))
                LT = sum((t * dT[:, k] for (k, _), t in zip(uses, used, strict=True)), np.zeros(pts))
                GT[:, a] = PT * f_in - LT * f_out
        return G, Jac, lr - ln_tau[:, None], GT

    def _cold_guess(
        self, shape: tuple[int, ...], lnk: np.ndarray | None = None, ln_tau: np.ndarray | None = None
    ) -> np.ndarray:
        """Start of the isothermal Newton solve, ln C of the solved species (shape + (p,)): the feed, and for a
        species not fed a small fraction of the feed scale; with ``lnk`` (pts, m) and ``ln_tau`` (pts,) (then
        ``shape`` is (pts,)) never above an upper bound of the answer.

        The bound: C_i = (C_i,in + P_i)/(1 + L_i) <= C_i,in + sum nu_ik tau r_k(C), and r_k grows with every
        concentration it has a non-negative order in, so sweeps from C = e^y_hi that put the bounds back into the
        rates come down through a chain of reactions. Where a reaction is frozen (a cold point) the bound of its
        product is its answer, far below the default start: an intermediate at ln C ~ -1500 would otherwise
        need hundreds of Newton steps of the limited size (seed 718531).
        """
        c = self.c_in[self.S]
        low = math.log(max(float(np.max(self.c_in)), 1e-300)) - 12.0
        base = np.where(c > 0, np.log(np.maximum(c, 1e-300)), low)
        out = np.broadcast_to(base, shape + (self.S.size,)).copy()
        if lnk is None or ln_tau is None or not self.S.size:
            return out
        ub = np.full(out.shape, self._y_hi)
        with np.errstate(over="ignore", invalid="ignore", under="ignore", divide="ignore"):
            for _ in range(self.S.size):
                for a, c0, makes, bounded in self._ub_rows:
                    if not bounded:
                        continue
                    terms = [np.full(ln_tau.shape, math.log(c0))] if c0 > 0 else []
                    for k, lnu, orders in makes:
                        v = lnk[:, k] + ln_tau + lnu
                        for b, nk in orders:
                            v = v + nk * ub[:, b]
                        terms.append(v)
                    if terms:
                        ub[:, a] = np.minimum(np.logaddexp.reduce(terms, axis=0), self._y_hi)
            return np.where(np.isfinite(ub), np.minimum(out, ub), out)

    def isothermal(
        self, tau: np.ndarray, T: np.ndarray, C0: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(y = ln C of the solved species, ln r, converged) of the isothermal balances (see :meth:`_isothermal`)."""
        return self._isothermal(tau, T, C0)[:3]

    def _isothermal(
        self, tau: np.ndarray, T: np.ndarray, C0: np.ndarray | None = None, max_iter: int = 100
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Solve the isothermal species balances C = C_in + nu tau r(C, T) at each (tau, T), vectorised.

        Newton's method on the logarithmic form of ``_iso_system`` in y = ln C of the solved species, with
        steps limited to a factor e^4 per iteration; started from ``C0`` (..., n) when given (continuation),
        else from the feed. Converged when every balance closes to 1e-9 before the last Newton step (G is the
        logarithm of inflow over outflow, so this is relative; the last step takes it to the rounding level);
        anything else is reported as not converged, never as an answer.

        Returns (y (..., p), ln r (..., m), converged (...), dG/dy (pts, p, p) and dG/dT (pts, p) of the
        converged evaluation, NaN where it did not converge).
        """
        tau, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        shape = tau.shape
        p = self.S.size
        flat_tau, flat_T = tau.reshape(-1), T.reshape(-1)
        pts = flat_tau.size
        lnk_all = np.log(self.k0)[None, :] - self.E[None, :] / flat_T[:, None]
        ln_tau = np.log(flat_tau)
        if p == 0:
            return (
                np.zeros(shape + (0,)),
                np.full(shape + (self.m,), -np.inf),
                np.ones(shape, dtype=bool),
                np.zeros((pts, 0, 0)),
                np.zeros((pts, 0)),
            )
        if C0 is None:
            y = self._cold_guess((pts,), lnk_all, ln_tau)
        else:
            C0 = np.broadcast_to(np.asarray(C0, float), shape + (self.n,)).reshape(pts, self.n)
            with np.errstate(divide="ignore", invalid="ignore"):
                y = np.log(C0[:, self.S])
            # a guess that underflowed (or is missing) says only that the answer is tiny: start from the bound
            # (computed only for those points: this is the map's hot path)
            redo = np.nonzero(~np.all(np.isfinite(y) & (y > -690.0), axis=1))[0]
            if redo.size:
                fine = np.isfinite(y[redo]) & (y[redo] > -690.0)
                y[redo] = np.where(fine, y[redo], self._cold_guess((redo.size,), lnk_all[redo], ln_tau[redo]))
        y = np.clip(y, self._y_lo, self._y_hi)
        dT = self.E[None, :] / (flat_T * flat_T)[:, None]
        y, ok, Jac_out, GT_out = self._newton_iso(lnk_all, ln_tau, dT, y, max_iter)
        if not ok.all():
            self._homotopy_in_tau(lnk_all, ln_tau, dT, y, ok, Jac_out, GT_out)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            lr_out = lnk_all.copy()
            for k in range(self.m):
                if not self.live[k]:
                    lr_out[:, k] = -np.inf
            for k, terms in self._iso_orders:
                for a, nk in terms:
                    lr_out[:, k] += nk * y[:, a]
        return y.reshape(shape + (p,)), lr_out.reshape(shape + (self.m,)), ok.reshape(shape), Jac_out, GT_out

    def _homotopy_in_tau(
        self,
        lnk_all: np.ndarray,
        ln_tau: np.ndarray,
        dT: np.ndarray,
        y: np.ndarray,
        ok: np.ndarray,
        Jac_out: np.ndarray,
        GT_out: np.ndarray,
    ) -> None:
        """The points whose Newton solve did not converge, solved again by continuation in the residence time at
        their own temperature (in place): at a residence time e^30 times shorter than every reaction the feed
        is the answer, and the answer moves continuously with tau (the isothermal solution is unique), so
        steps in ln tau, halved where Newton does not converge from the previous answer, reach it.

        Where this is needed: A + B -> P with A in excess at a hot point (seed 715507): from the feed, Newton
        takes both reactants down together (their balances' Jacobian is nearly singular along A - B) and stalls
        with both near 1e-19, where the answer keeps A at its excess and B at 1e-40.
        """
        idx = np.nonzero(~ok & np.all(np.isfinite(lnk_all), axis=1) & np.isfinite(ln_tau))[0]
        if idx.size == 0:
            return
        lk, target, dTs = lnk_all[idx], ln_tau[idx], dT[idx]
        c_max = max(float(np.max(self.c_in)), 1e-300)
        # a first-order rate constant of each reaction at the feed scale: ln k + (sum of orders - 1) ln c_max
        eff = lk + ((np.sum(self.orders, axis=1) - 1.0) * math.log(c_max))[None, :]
        eff = np.where(self.live[None, :], eff, -np.inf)
        lt = target - np.maximum(np.max(eff, axis=1) + target + 30.0, 0.0)
        ys = np.clip(self._cold_guess((idx.size,), lk, lt), self._y_lo, self._y_hi)
        h = np.zeros(idx.size)  # the first round solves at the start itself
        live = np.arange(idx.size)
        for _ in range(400):
            if live.size == 0:
                break
            trial = np.minimum(lt[live] + h[live], target[live])
            yt, okt, Jt, GTt = self._newton_iso(lk[live], trial, dTs[live], ys[live].copy(), 30)
            acc = live[okt]
            ys[acc], lt[acc] = yt[okt], trial[okt]
            h[acc] = np.where(h[acc] == 0.0, 1.0, np.minimum(h[acc] * 1.5, 8.0))
            fin = okt & (trial >= target[live])
            if fin.any():
                at = idx[live[fin]]
                y[at], ok[at], Jac_out[at], GT_out[at] = yt[fin], True, Jt[fin], GTt[fin]
            rej = live[~okt]
            h[rej] *= 0.5
            first = rej[h[rej] == 0.0]  # not even the start converged: give up on those
            keep = ~fin & ~np.isin(live, first) & ((h[live] >= 1e-6) | okt)
            live = live[keep]

    def _newton_iso(
        self, lnk_all: np.ndarray, ln_tau: np.ndarray, dT: np.ndarray, y: np.ndarray, max_iter: int
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The Newton iteration of :meth:`_isothermal` from ``y`` (pts, p) (changed in place): (y, converged,
        dG/dy and dG/dT of the converged evaluation)."""
        pts, p = y.shape
        ok = np.zeros(pts, dtype=bool)
        Jac_out = np.empty((pts, p, p))  # filled where ok
        GT_out = np.empty((pts, p))
        active = None  # index of the points still iterating; None: all of them (no copies)
        prev = np.full(pts, np.inf)  # each point's balance error at the previous evaluation

        def rowmax(a: np.ndarray) -> np.ndarray:
            out = np.abs(a[:, 0])
            for j in range(1, p):
                out = np.maximum(out, np.abs(a[:, j]))
            return out

        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            for _ in range(max_iter):
                if active is None:
                    ya, lk, lt, dTa, pa = y, lnk_all, ln_tau, dT, prev
                else:
                    if active.size == 0:
                        break
                    # np.take: numpy's fancy indexing of rows of 2-D arrays is an order of magnitude slower
                    ya, lk, dTa = (np.take(v, active, axis=0) for v in (y, lnk_all, dT))
                    lt, pa = ln_tau[active], prev[active]
                G, Jac, _, GT = self._iso_system(lk, ya, lt, dTa)
                err = rowmax(G)
                step = -solve_small(Jac, G)
                big = rowmax(step)
                # converged: closed to 1e-12 (G is ln of inflow over outflow, so relative), or closed to 1e-9
                # one Newton step after being closed to 1e-9 (quadratic convergence: the rounding level);
                # the Jacobian of this evaluation, at the answer itself, gives the derivatives
                done = (err <= 1e-12) | ((err <= 1e-9) & (pa <= 1e-9))
                go = ~done & np.isfinite(big) & np.isfinite(err)
                if active is None:
                    prev = err
                else:
                    prev[active] = err
                if done.all():
                    sel = slice(None) if active is None else active
                    ok[sel] = True
                    Jac_out[sel], GT_out[sel] = Jac, GT
                    break
                if done.any():
                    idx = np.nonzero(done)[0] if active is None else active[done]
                    ok[idx] = True
                    d_i = np.nonzero(done)[0]
                    Jac_out[idx], GT_out[idx] = np.take(Jac, d_i, axis=0), np.take(GT, d_i, axis=0)
                step *= np.minimum(1.0, 4.0 / np.maximum(big, 1e-300))[:, None]
                if active is None and go.all():
                    np.clip(y + step, self._y_lo, self._y_hi, out=y)
                    continue
                moving = np.nonzero(go)[0] if active is None else active[go]
                g_i = np.nonzero(go)[0]
                y[moving] = np.clip(np.take(ya, g_i, axis=0) + np.take(step, g_i, axis=0), self._y_lo, self._y_hi)
                active = moving
        return y, ok, Jac_out, GT_out

    def _full_concentrations(self, y: np.ndarray, xi: np.ndarray) -> np.ndarray:
        """C (..., n): the solved species from y = ln C, the others from C_in + nu xi."""
        C = self.concentrations(xi)
        if self.S.size:
            C[..., self.S] = np.exp(y)
        return C

    def isothermal_extents(self, tau: np.ndarray, T: np.ndarray, C0: np.ndarray | None = None) -> np.ndarray:
        """Extents xi (..., m) of the isothermal balances at (tau, T) (see :meth:`isothermal`)."""
        tau, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        _, lr, _ = self.isothermal(tau, T, C0)
        with np.errstate(under="ignore"):
            return np.exp(lr + np.log(tau)[..., None])

    def general_eval(self, tau: np.ndarray, T: np.ndarray, C0: np.ndarray | None = None) -> Samples:
        """Manifold at (tau, T) (shapes broadcast), the isothermal balances solved from the guess ``C0``.

        dxi/dT follows from differentiating the logarithmic balances: dy/dT = -(dG/dy)^-1 dG/dT and
        dxi_k/dT = tau r_k (E_k/T^2 + sum_i n_ki dy_i/dT).
        """
        tau, T = np.broadcast_arrays(np.asarray(tau, float), np.asarray(T, float))
        shape = tau.shape
        y, lr, ok, Jac, GT = self._isothermal(tau, T, C0)
        flat_T = T.reshape(-1)
        dT = self.E[None, :] / (flat_T * flat_T)[:, None]
        p = self.S.size
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            xi = np.exp(lr + np.log(tau)[..., None])
            dxi = xi.reshape(-1, self.m) * dT
            if p:
                # dG/dy and dG/dT of the evaluation that converged, at the answer itself
                dy = -solve_small(np.where(ok.reshape(-1)[:, None, None], Jac, np.eye(p)), np.nan_to_num(GT))
                for k, terms in self._iso_orders:
                    for a, nk in terms:
                        dxi[:, k] += xi.reshape(-1, self.m)[:, k] * nk * dy[:, a]
        dxi_dT = dxi.reshape(shape + (self.m,))
        a = self.a(tau)
        # a point whose isothermal solve did not converge may carry an infinite extent: it is marked invalid,
        # not a warning
        with np.errstate(over="ignore", invalid="ignore"):
            C = self._full_concentrations(y, xi)
            T_in = a * T - xi @ self.J - self.b(tau)
            dTin = a - dxi_dT @ self.J
        valid = ok & np.isfinite(T_in) & np.isfinite(dTin)
        return Samples(tau, T, T, xi, T_in, dTin, np.ones_like(T), valid, C)

    # -- common interface -----------------------------------------------------------------------------
    def evaluate(self, tau: np.ndarray, s: np.ndarray) -> Samples:
        """Manifold at coordinates (tau, s): s is the extent (explicit path) or T (general path).

        On the general path a single-point call starts its isothermal Newton solve from the previous
        single-point answer: callers that walk along a curve (root bracketing, continuation) then need one or
        two iterations instead of a cold start (the solution is unique, so the start only changes the cost;
        a start that does not converge is retried from the feed).
        """
        if self.explicit:
            return self.explicit_eval(tau, s)
        if np.size(s) == 1 and np.size(tau) == 1:
            return self._general_point(np.asarray(tau, float), np.asarray(s, float))
        return self.general_eval(tau, s)

    def _general_point(self, tau_a: np.ndarray, T_a: np.ndarray) -> Samples:
        """One point of the general path in plain Python floats (numpy's per-call cost dominates for a single
        point): the same Newton iteration on the logarithmic balances as :meth:`isothermal`, started from the
        previous single-point answer (then from the feed if that does not converge), then T_in and dT_in/dT
        as in :meth:`general_eval`."""
        tau, T = float(tau_a.reshape(-1)[0]), float(T_a.reshape(-1)[0])
        m, p = self.m, self.S.size
        # plain floats throughout: an extreme point overflows to inf (then fails to converge), no numpy warning
        E = self.E.tolist()
        lnk = [math.log(float(self.k0[j])) - E[j] / T for j in range(m)]
        dT = [E[j] / (T * T) for j in range(m)]
        ln_tau = math.log(tau)
        rows, orders = self._iso_rows, self._iso_orders
        ordmap = {k: terms for k, terms in orders}

        def system(y: list[float]) -> tuple[list[float], list[list[float]], list[float], list[float]]:
            lr = [-math.inf] * m
            for k, terms in orders:
                v = lnk[k]
                for a, nk in terms:
                    v += nk * y[a]
                lr[k] = v
            G = [0.0] * p
            Jac = [[0.0] * p for _ in range(p)]
            GT = [0.0] * p
            for a, c0, makes, uses in rows:
                P = Lv = PT = LT = 0.0
                dP = [0.0] * p
                dL = [0.0] * p
                if c0 > 0 or not makes:
                    scale = 0.0  # the terms as they are
                else:  # not fed: the terms relative to the largest, so a frozen inflow does not underflow
                    scale = max(lr[k] + ln_tau + math.log(nu) for k, nu in makes)
                    if not math.isfinite(scale):
                        scale = 0.0
                for k, nu in makes:
                    t = nu * math.exp(min(lr[k] + ln_tau - scale, 709.0))
                    P += t
                    PT += t * dT[k]
                    for b, nk in ordmap[k]:
                        dP[b] += nk * t
                for k, nu in uses:
                    t = nu * math.exp(min(lr[k] + ln_tau - y[a], 709.0))
                    Lv += t
                    LT += t * dT[k]
                    for b, nk in ordmap[k]:
                        dL[b] += nk * t
                    dL[a] -= t
                inflow = max(c0 + P, 1e-300)
                G[a] = math.log(inflow) + scale - y[a] - math.log1p(Lv)
                for b in range(p):
                    Jac[a][b] = dP[b] / inflow - dL[b] / (1.0 + Lv)
                Jac[a][a] -= 1.0
                GT[a] = PT / inflow - LT / (1.0 + Lv)
            return G, Jac, lr, GT

        def solve(y: list[float]) -> tuple[list[float], bool]:
            for _ in range(100):
                G, Jac, _, _ = system(y)
                err = max((abs(g) for g in G), default=0.0)
                if not math.isfinite(err):
                    return y, False
                step = _solve_list(Jac, [-g for g in G])
                big = max((abs(v) for v in step), default=0.0)
                if not math.isfinite(big):
                    return y, False
                f = min(1.0, 4.0 / big) if big > 0 else 1.0
                y = [min(max(y[a] + f * step[a], self._y_lo), self._y_hi) for a in range(p)]
                if err <= 1e-9:  # quadratic convergence: the step just taken closes it to rounding
                    return y, True
            return y, False

        cold: list[float] = []

        def cold_start() -> list[float]:  # numpy's per-call cost: only when needed
            if not cold:
                cold.extend(self._cold_guess((1,), np.array([lnk]), np.array([ln_tau]))[0].tolist())
            return cold

        start = None
        if self._last_C is not None and p:
            last = [float(self._last_C[i]) for i in self.S.tolist()]
            # a concentration that underflowed says only that it is tiny: start that one from the bound
            start = [math.log(c) if c > 1e-290 else cold_start()[a] for a, c in enumerate(last)]
        y, ok = solve(start if start is not None else cold_start()) if p else ([], True)
        if not ok and start is not None:
            y, ok = solve(cold_start())
        if not ok:
            # the vectorised iteration (its own convergence test) as the last resort: seed 707819 (two reactions
            # 1e30 times faster than the flow) converges there from the feed where this loop does not
            smp = self.general_eval(tau_a.reshape(1), T_a.reshape(1))
            if bool(smp.valid[0]):
                self._last_C = smp.C[0]
                return smp
        G, Jac, lr, GT = system(y) if p else ([], [], [-math.inf] * m, [])
        ok = ok and max((abs(g) for g in G), default=0.0) <= 1e-10
        xi = [math.exp(lr[k] + ln_tau) if math.isfinite(lr[k]) else 0.0 for k in range(m)]
        dy = _solve_list(Jac, [-g for g in GT]) if p else []
        dxi = [xi[k] * dT[k] for k in range(m)]
        for k, terms in orders:
            for a, nk in terms:
                dxi[k] += xi[k] * nk * dy[a]
        with np.errstate(over="ignore", invalid="ignore"):
            C = self._full_concentrations(np.array(y, dtype=float), np.array(xi, dtype=float))
        if ok:
            self._last_C = C
        a = 1.0 + (self.kappa + self.lam) * tau
        b = (self.kappa * self.T_c + self.lam * self.sc.T_amb + self.p) * tau
        J = self.J.tolist()
        T_in = a * T - sum(J[j] * xi[j] for j in range(m)) - b
        dTin = a - sum(J[j] * dxi[j] for j in range(m))
        one = np.array([T])
        return Samples(
            np.array([tau]),
            one,
            one,
            np.array([xi]),
            np.array([T_in]),
            np.array([dTin]),
            np.ones(1),
            np.array([ok and math.isfinite(T_in) and math.isfinite(dTin)]),
            C[None, :],
        )

    def temperature_window(self, T_in_lo: float, T_in_hi: float, tau_hi: float) -> tuple[float, float]:
        """Bounds on every steady temperature for feed temperatures in [T_in_lo, T_in_hi] [K]."""
        coldest = min(T_in_lo, self.T_c if self.kappa > 0 else np.inf, self.sc.T_amb if self.lam > 0 else np.inf)
        hi = max(T_in_hi, self.T_c if self.kappa > 0 else -np.inf, self.sc.T_amb if self.lam > 0 else -np.inf)
        rise = self.max_heat_release()
        hi = hi + max(rise, 0.0) + self.p * tau_hi
        lo = coldest + min(self.min_heat_release(), 0.0)
        return float(window_floor(lo, coldest)), hi + 5.0

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
                self.explicit_w_at_T(tau, np.full(tau.shape, T_lo)),
                self.explicit_w_at_T(tau, np.full(tau.shape, T_hi)),
            )
        return np.full(tau.shape, T_lo), np.full(tau.shape, T_hi)

    def sample(self, tau: np.ndarray, T_lo: float, T_hi: float, N: int) -> Samples:
        """Samples along s at each tau (shape (n_tau, N)), spaced evenly in 1/T (general path) or in the
        log-odds of the conversion (explicit path; nearly even in 1/T at both ends)."""
        tau = np.asarray(tau, float)
        s_lo, s_hi = self.s_bounds(tau, T_lo, T_hi)
        u = np.linspace(0.0, 1.0, N)
        if self.explicit:
            return self.explicit_eval(tau[:, None], s_lo[:, None] + (s_hi - s_lo)[:, None] * u)
        inv = 1.0 / T_lo + (1.0 / T_hi - 1.0 / T_lo) * u
        Tg = np.broadcast_to(1.0 / inv, (tau.size, N))
        # continuation in T on every 8th temperature, then all the others at once from interpolated guesses
        coarse = np.unique(np.concatenate((np.arange(0, N, 8), [N - 1])))
        C_c = np.empty((tau.size, coarse.size, self.n))
        guess = None
        for k, kk in enumerate(coarse):
            e = self.general_eval(tau, Tg[:, kk], guess)
            guess = np.where(e.valid[:, None], e.C, np.nan) if guess is None else np.where(e.valid[:, None], e.C, guess)
            C_c[:, k] = guess
        idx = np.searchsorted(coarse, np.arange(N), side="right") - 1
        idx = np.clip(idx, 0, coarse.size - 1)
        return self.general_eval(tau[:, None], Tg, C_c[:, idx])

    def stability(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Vectorised stability on the manifold without eigenvalues where the size allows it.

        Returns (stable, hopf, hopf_valid): ``hopf`` is a smooth function that changes sign where a complex
        pair crosses the imaginary axis, meaningful where ``hopf_valid``. For 2x2 it is the trace (with a
        positive determinant); for 3x3 it is minus the Hurwitz determinant :math:`c_2 c_1 - c_0` of the
        characteristic polynomial :math:`\\lambda^3 + c_2\\lambda^2 + c_1\\lambda + c_0` (where its
        discriminant is negative: one real root and a complex pair); larger systems use the leading real
        part of the eigenvalues. ``C`` are the concentrations of the points (``Samples.C``, exact where a
        reactant is nearly used up); without it they are C_in + nu xi.
        """
        if self.m == 1:
            tr, det = self.trace_det(tau, T, xi, C)
            return (tr < 0) & (det > 0), tr, det > 0
        Jr = self.reduced_jacobian(tau, T, xi, C)
        if self.m == 2:
            # eigenvalues of Jr / w with w its largest entry: the same signs, and no overflow in the degree-6
            # discriminant where the rates are fast
            with np.errstate(invalid="ignore"):
                w = np.max(np.abs(Jr), axis=(-2, -1))
                w = np.where((w > 0) & np.isfinite(w), w, 1.0)
                Jr = Jr / w[..., None, None]
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
            stable, h, hok = (c2 > 0) & (c1 > 0) & (c0 > 0) & (hurwitz > 0), -hurwitz, disc < 0
            for idx, ev, resolved in self._stiff_points(tau, T, xi, C, Jr * w[..., None, None]):
                # the same function from eigenvalues that are exact there: c2 c1 - c0 of Jr / w is
                # -(l1 + l2)(l1 + l3)(l2 + l3) / w^3
                l1, l2, l3 = ev[:, 0], ev[:, 1], ev[:, 2]
                hv = ((l1 + l2) * (l1 + l3) * (l2 + l3)).real / w[idx] ** 3
                stable[idx] = resolved & np.all(ev.real < 0, axis=-1)
                h[idx] = np.where(resolved, hv, np.nan)
                hok[idx] = np.any(np.abs(ev.imag) > 0, axis=-1)
            return stable, h, hok
        lead, cplx = self.leading_real_part(tau, T, xi, C)
        return lead < 0, lead, cplx

    def _stiff_points(self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None, Jr: np.ndarray):
        """Yields (index, eigenvalues (k, m+1), resolved (k,)) for the points whose reduced Jacobian ``Jr`` is
        stiff (a diagonal entry above ``eigen.FAST`` / tau: a fast reaction keeps a reactant near zero), in
        groups that share their fast variables.

        The eigenvalues of a whole stiff matrix lose the slow ones (that decide stability) to rounding. Here
        they come from the Jacobian in the coordinates (xi, theta = T - J . xi) (:meth:`theta_jacobians`, whose
        energy row has no fast entry), split into its fast variables F and the rest S: the fast eigenvalues
        are those of J_FF, the slow ones those of the Schur complement S0 = J_SS - J_SF J_FF^-1 J_FS, vectorised
        over the points. Each slow eigenvalue's error is bounded by its condition number (from the
        eigenvectors of S0) times the rounding of S0's entries plus the first-order error of the complement,
        |lambda| ||J_SF J_FF^-1|| ||J_FF^-1 J_FS|| (S(lambda) - S(0) = -lambda J_SF J_FF^-2 J_FS + ...);
        ``resolved`` where every slow real part is above its error and every fast eigenvalue is at least 1e3
        times faster than the slow ones. Imaginary parts within their error are set to 0.
        """
        tau_b = np.broadcast_to(tau, T.shape)
        with np.errstate(invalid="ignore", over="ignore"):
            big = np.max(np.abs(np.diagonal(Jr, axis1=-2, axis2=-1)), axis=-1) * tau_b > FAST
        if not big.any():
            return
        C = self.concentrations(xi) if C is None else C
        where = np.nonzero(big)
        tb = tau_b[where]
        ev, err = eigenvalues_with_errors_batched(self.theta_jacobians(tb, T[where], C[where]), 1.0 / tb)
        resolved = np.all(np.abs(ev.real) > err, axis=-1)
        ev = np.where(np.abs(ev.imag) <= err, ev.real + 0j, ev)
        yield where, ev, resolved

    def theta_jacobians(self, tau: np.ndarray, T: np.ndarray, C: np.ndarray) -> np.ndarray:
        """The reduced Jacobian at points (k,) in the coordinates (xi, theta = T - J . xi), shape (k, m+1, m+1): a
        similarity transform of :meth:`reduced_jacobian` (same eigenvalues) whose theta row is exact and free of
        the rates, since d(theta)/dt = (T_in - a T + J . xi + b) / tau at fixed volume:

        d xi_j'/d xi_k = R_jk - delta_jk/tau + r_T,j J_k,   d xi_j'/d theta = r_T,j,
        d theta'/d xi_k = J_k (1 - a)/tau,                d theta'/d theta = -a/tau
        """
        _, Rn, dr_dT = self.extent_jacobian(np.asarray(C, float), np.asarray(T, float))
        m = self.m
        tau = np.asarray(tau, float)
        a = self.a(tau)
        out = np.empty(tau.shape + (m + 1, m + 1))
        out[..., :m, :m] = Rn - np.eye(m) / tau[..., None, None] + dr_dT[..., :, None] * self.J[None, :]
        out[..., :m, m] = dr_dT
        out[..., m, :m] = self.J * ((1.0 - a) / tau)[..., None]
        out[..., m, m] = -a / tau
        return out

    # -- stability on the manifold --------------------------------------------------------------------
    def reduced_jacobian(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> np.ndarray:
        """Jacobian of the extent-and-temperature system on the invariant manifold, shape (..., m+1, m+1).

        The full species+energy block has these eigenvalues plus -1/tau once per reaction invariant
        (n - rank(nu) of them), which are always stable.
        """
        C = self.concentrations(xi) if C is None else C
        _, Rn, dr_dT = self.extent_jacobian(C, T)
        m = self.m
        out = np.zeros(T.shape + (m + 1, m + 1))
        out[..., :m, :m] = Rn - np.eye(m) / tau[..., None, None]
        out[..., :m, m] = dr_dT
        out[..., m, :m] = np.einsum("j,...jk->...k", self.J, Rn)
        out[..., m, m] = -self.a(tau) / tau + dr_dT @ self.J
        return out

    def trace_det(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """Trace and determinant of the 2x2 reduced Jacobian of one reaction, on the manifold, where the
        rate is r = xi/tau exactly:

        .. math:: \\alpha = r \\sum_i n_i \\nu_i / C_i, \\quad \\beta = r E/T^2, \\quad
                  \\mathrm{tr} = \\alpha + J\\beta - (1 + a)/\\tau, \\quad
                  \\det = (a - \\tau (J\\beta + a\\alpha))/\\tau^2
        """
        x = xi[..., 0]
        r = x / tau
        C = self.concentrations(xi) if C is None else C
        alpha = np.zeros(np.shape(r))
        with np.errstate(invalid="ignore", divide="ignore"):
            for i in range(self.n):
                if self.orders[0, i] != 0 and self.nu[i, 0] != 0:
                    # r/C_i; no extent (a feed without the reactant) means no rate to perturb, not 0 * inf
                    alpha += self.orders[0, i] * self.nu[i, 0] * np.where(r == 0, 0.0, r / C[..., i])
        beta = r * self.E[0] / (T * T)
        a = self.a(tau)
        Jb = self.J[0] * beta
        return alpha + Jb - (1.0 + a) / tau, (a - tau * (Jb + a * alpha)) / (tau * tau)

    def leading_real_part(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """(max real part of the reduced eigenvalues [1/s], whether the leading pair is complex)."""
        if self.m == 1:
            tr, det = self.trace_det(tau, T, xi, C)
            disc = tr * tr - 4.0 * det
            sq = np.sqrt(np.abs(disc))
            lead = np.where(disc >= 0, 0.5 * (tr + sq), 0.5 * tr)
            return lead, disc < 0
        lead, cplx, _ = self.leading_pair(tau, T, xi, C)
        return lead, cplx

    def leading_pair(
        self, tau: np.ndarray, T: np.ndarray, xi: np.ndarray, C: np.ndarray | None = None
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(leading real part [1/s], complex?, |imaginary part| [rad/s]) of the reduced eigenvalues;
        NaN where a stiff point's signs are below the rounding (see :meth:`_stiff_points`); one reaction from the
        exact trace and determinant."""
        if self.m == 1:
            tr, det = self.trace_det(tau, T, xi, C)
            disc = tr * tr - 4.0 * det
            sq = np.sqrt(np.abs(disc))
            return np.where(disc >= 0, 0.5 * (tr + sq), 0.5 * tr), disc < 0, np.where(disc < 0, 0.5 * sq, 0.0)
        Jr = self.reduced_jacobian(tau, T, xi, C)
        ev = np.linalg.eigvals(Jr)
        idx = np.argmax(ev.real, axis=-1)
        lead_c = np.take_along_axis(ev, idx[..., None], axis=-1)[..., 0]
        lead, im = lead_c.real.copy(), np.abs(lead_c.imag)
        cplx = im > 1e-12 * np.maximum(np.abs(lead), 1e-30)
        for k, evs, resolved in self._stiff_points(tau, T, xi, C, Jr):
            j = np.argmax(evs.real, axis=-1)[:, None]
            top = np.take_along_axis(evs, j, axis=-1)[:, 0]
            lead[k] = np.where(resolved, top.real, np.nan)
            im[k] = np.abs(top.imag)
            cplx[k] = im[k] > 0
        return lead, cplx, im
