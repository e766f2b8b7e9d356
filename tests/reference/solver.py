"""Reference steady-state solver for the differential check, written only from the balances of DESIGN.md §2.

Nothing of exomap is imported here: the model is re-derived from the equations, in plain SI numbers.

Model (constant density, level at its setpoint, volume V, residence time tau = V/q):

.. math::

    0 = (C_{in,i} - C_i)/\\tau + \\sum_j \\nu_{ij} r_j, \\qquad r_j = k_{0j} e^{-E_j/(R T)} \\prod_l C_l^{n_{jl}}

    0 = (T_{in} - T)/\\tau + \\sum_j J_j r_j - \\kappa (T - T_c) - \\lambda (T - T_{amb}) + p

with J_j = -dH_j/(rho cp), kappa = UA_jacket/(rho cp V), lambda = UA_loss/(rho cp V), p = P_agitator/(rho cp V).

Method (deliberately slow and simple, chosen for robustness, not speed):

1. At fixed (tau, T) the species balances are solved in *log concentrations* u = ln C of every species that
   a rate depends on, written as ln(feed + production) - ln(C + consumption) = 0. Each row is a concave,
   decreasing function of its own u with slope between min(1, n) and max(1, n), so a conversion of
   1 - 1e-30 is as easy as 1e-30. A Gauss-Seidel sweep of monotone scalar Newton solves (which converge
   from the upper bound u = ln(feed + production) for a concave decreasing function) gives the start, a
   full Newton iteration with backtracking finishes.
2. The energy balance then gives the feed temperature of that (tau, T) explicitly; every steady state at
   (tau, T_in) is a root in T of T_in(tau, T) - T_in. T is scanned on a fine grid over every temperature a
   steady state can have, every extremum of T_in(T) is located (sign changes of dT_in/dT, plus a cubic
   Hermite test that subdivides intervals which may hide two extrema), and each monotone piece holds at
   most one root, found with Brent's method; a Newton polish on the full system (u, T) follows.
3. Stability from the eigenvalues of the full species + energy Jacobian in (C, T) (analytic, checked by
   finite differences in the tests). Turning points are the extrema of T_in(T) at fixed tau (det J = 0);
   Hopf points are the zeros of the bialternate-product test function prod_{i<j} (lambda_i + lambda_j)
   where the vanishing sum belongs to a complex pair.
4. Along the residence time the turning and Hopf points are found on a 2-D grid (ln tau, T): every grid cell
   where both the test function and T_in(tau, T) - T_in change sign seeds a 2-D Newton solve (fsolve).

References
----------
[1] C. van Heerden, Autothermic processes, Ind. Eng. Chem. 45 (1953) 1242-1247.
[2] A. Uppal, W. H. Ray, A. B. Poore, On the dynamic behavior of continuous stirred tank reactors,
    Chem. Eng. Sci. 29 (1974) 967-985.
[3] J. Guckenheimer, M. Myers, B. Sturmfels, Computing Hopf bifurcations I, SIAM J. Numer. Anal. 34 (1997)
    1-21 (the bialternate product and its determinant prod_{i<j}(lambda_i + lambda_j)).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq, fsolve

#: Molar gas constant [J/(mol K)] (CODATA 2018, exact in the 2019 SI).
R = 8.314462618
STABLE, SADDLE, UNSTABLE = "stable", "saddle", "unstable"


@dataclass(frozen=True)
class Reaction:
    """One power-law reaction: ``nu`` per species [-], ``orders`` per species [-], ``k0``
    [(mol/m^3)^(1-sum n)/s], ``Ea`` [J/mol], ``dH`` [J/mol, exothermic negative]."""

    nu: tuple[float, ...]
    orders: tuple[float, ...]
    k0: float
    Ea: float
    dH: float


@dataclass(frozen=True)
class Problem:
    """Plain SI description of the tank (only what the steady states depend on)."""

    species: tuple[str, ...]
    reactions: tuple[Reaction, ...]
    c_in: tuple[float, ...]
    rho: float
    cp: float
    V: float
    UA_jacket: float = 0.0
    T_c: float = 298.15
    UA_loss: float = 0.0
    T_amb: float = 298.15
    P_agitator: float = 0.0
    T_max: float = math.inf
    sensitivity: float = 3.0

    def with_feed(self, c_in: tuple[float, ...]) -> Problem:
        return Problem(**{**self.__dict__, "c_in": tuple(c_in)})


@dataclass(frozen=True)
class State:
    """One steady state. ``dTin_dT`` = dT_in/dT at fixed tau along the steady states [-]."""

    T: float
    C: tuple[float, ...]
    stability: str
    oscillatory: bool
    eigenvalues: tuple[complex, ...]
    dTin_dT: float
    residual: float

    @property
    def stable(self) -> bool:
        return self.stability == STABLE

    @property
    def sensitivity(self) -> float:
        """dT/dT_in at fixed tau [-]."""
        return 1.0 / self.dTin_dT if self.dTin_dT != 0 else math.inf

    @property
    def lead_margin(self) -> float:
        """|Re| of the eigenvalue closest to the imaginary axis over the largest |eigenvalue| [-]: small means
        the stability class is ill-conditioned (next to a fold or a Hopf point)."""
        ev = np.array(self.eigenvalues)
        return float(np.min(np.abs(ev.real)) / max(np.max(np.abs(ev)), 1e-300))


@dataclass(frozen=True)
class Fold:
    """A turning point: ``kind`` is ``ignition`` (local maximum of T_in(T) at fixed tau: the low branch meets
    the middle one) or ``extinction`` (local minimum)."""

    kind: str
    tau: float
    T_in: float
    T: float


@dataclass(frozen=True)
class Hopf:
    tau: float
    T_in: float
    T: float
    frequency: float


def classify(ev: np.ndarray) -> tuple[str, bool]:
    """DESIGN §2: stable = every real part < 0; saddle = exactly one real positive eigenvalue; unstable
    otherwise; oscillatory when the leading eigenvalue (largest real part) has a nonzero imaginary part."""
    ev = np.asarray(ev)
    scale = max(float(np.max(np.abs(ev))), 1e-300)
    pos = ev.real > 0
    lead = ev[np.argmax(ev.real)]
    osc = bool(abs(lead.imag) > 1e-12 * scale)
    if not pos.any():
        return STABLE, osc
    if pos.sum() == 1 and abs(lead.imag) <= 1e-12 * scale:
        return SADDLE, osc
    return UNSTABLE, osc


def _logsumexp(stack: list[np.ndarray]) -> tuple[np.ndarray, list[np.ndarray]]:
    """ln(sum exp(t)) over a list of equally shaped arrays, and the weights exp(t - lse) of each term."""
    S = np.stack(stack)
    m = np.max(S, axis=0)
    m = np.where(np.isfinite(m), m, 0.0)
    e = np.exp(S - m)
    tot = np.sum(e, axis=0)
    lse = m + np.log(tot)
    return lse, [e[k] / tot for k in range(len(stack))]


class Reference:
    """The reference solver for one problem."""

    def __init__(self, pb: Problem) -> None:
        self.pb = pb
        n, m = len(pb.species), len(pb.reactions)
        self.n, self.m = n, m
        self.nu = np.array([r.nu for r in pb.reactions], dtype=float).T  # (n, m)
        self.orders = np.array([r.orders for r in pb.reactions], dtype=float)  # (m, n)
        self.lnk0 = np.log(np.array([r.k0 for r in pb.reactions], dtype=float))
        self.Ea = np.array([r.Ea for r in pb.reactions], dtype=float)
        self.J = -np.array([r.dH for r in pb.reactions], dtype=float) / (pb.rho * pb.cp)
        hc = pb.rho * pb.cp * pb.V
        self.kappa = pb.UA_jacket / hc
        self.lam = pb.UA_loss / hc
        self.p = pb.P_agitator / hc
        self.c_in = np.array(pb.c_in, dtype=float)
        # species that can be present: fed, or made by a reaction all of whose rate species are present
        present = self.c_in > 0
        active = np.zeros(m, dtype=bool)
        for _ in range(n + m + 1):
            for j in range(m):
                if not active[j] and all(present[i] for i in range(n) if self.orders[j, i] > 0):
                    active[j] = True
                    present |= self.nu[:, j] > 0
        self.present, self.active = present, active
        # the unknowns: species that an active rate depends on (all present)
        K = [i for i in range(n) if any(active[j] and self.orders[j, i] > 0 for j in range(m))]
        # Gauss-Seidel order: upstream first (depth = longest chain of reactions from the feed)
        depth = dict.fromkeys(range(n), 0)
        for _ in range(n + 1):
            for j in range(m):
                if not active[j]:
                    continue
                d = max((depth[i] for i in range(n) if self.orders[j, i] > 0), default=0) + 1
                for i in range(n):
                    if self.nu[i, j] > 0 and depth[i] < d and d <= n:
                        depth[i] = d
        self.K = sorted(K, key=lambda i: depth[i])
        self.k = len(self.K)
        self.nK = self.orders[:, self.K]  # (m, k)
        # per unknown: feed term, producing and consuming reactions
        self.terms = []
        for i in self.K:
            prod = [(j, math.log(self.nu[i, j])) for j in range(m) if active[j] and self.nu[i, j] > 0]
            cons = [(j, math.log(-self.nu[i, j])) for j in range(m) if active[j] and self.nu[i, j] < 0]
            lnfeed = math.log(self.c_in[i]) if self.c_in[i] > 0 else None
            self.terms.append((lnfeed, prod, cons))
        self.c_scale = max(float(np.max(self.c_in)), 1e-300)

    # -- the isothermal species balances, vectorised over points ----------------------------------------
    def _lnr(self, u: np.ndarray, T: np.ndarray) -> np.ndarray:
        lnr = self.lnk0 - self.Ea / (R * T[:, None]) + u @ self.nK.T
        return np.where(self.active, lnr, -np.inf)

    def _G(self, u: np.ndarray, lntau: np.ndarray, T: np.ndarray, rows=None):
        """Residuals G (N, k), dG/du (N, k, k), dG/dT (N, k) of the log-form isothermal balances."""
        N = u.shape[0]
        lnr = self._lnr(u, T)
        G = np.zeros((N, self.k))
        Gu = np.zeros((N, self.k, self.k))
        GT = np.zeros((N, self.k))
        dlnr_dT = self.Ea / (R * T[:, None] ** 2)  # (N, m)
        for a, (lnfeed, prod, cons) in enumerate(self.terms):
            if rows is not None and a not in rows:
                continue
            A = ([np.full(N, lnfeed)] if lnfeed is not None else []) + [lntau + lv + lnr[:, j] for j, lv in prod]
            lnA, wA = _logsumexp(A)
            wA = wA[1:] if lnfeed is not None else wA
            B = [u[:, a]] + [lntau + lv + lnr[:, j] for j, lv in cons]
            lnB, wB = _logsumexp(B)
            G[:, a] = lnA - lnB
            Gu[:, a, a] -= wB[0]
            for (j, _), w in zip(prod, wA, strict=True):
                Gu[:, a, :] += w[:, None] * self.nK[j]
                GT[:, a] += w * dlnr_dT[:, j]
            for (j, _), w in zip(cons, wB[1:], strict=True):
                Gu[:, a, :] -= w[:, None] * self.nK[j]
                GT[:, a] -= w * dlnr_dT[:, j]
        return G, Gu, GT, lnr

    def _upper(self, a: int, u: np.ndarray, lntau: np.ndarray, T: np.ndarray) -> np.ndarray:
        """ln(feed + production) of unknown a: an upper bound of its u (production does not depend on it)."""
        lnfeed, prod, _ = self.terms[a]
        lnr = self._lnr(u, T)
        A = ([np.full(u.shape[0], lnfeed)] if lnfeed is not None else []) + [lntau + lv + lnr[:, j] for j, lv in prod]
        return _logsumexp(A)[0]

    def isothermal(self, tau, T, u0: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Log concentrations u (N, k) of the rate species at each (tau, T), and a convergence flag (N,)."""
        T = np.atleast_1d(np.asarray(T, dtype=float))
        lntau = np.log(np.broadcast_to(np.asarray(tau, dtype=float), T.shape)).astype(float)
        N = T.size
        if self.k == 0:
            return np.zeros((N, 0)), np.ones(N, dtype=bool)
        if u0 is None:
            u = np.zeros((N, self.k))
            for a in range(self.k):
                u[:, a] = self._upper(a, u, lntau, T)
            sweeps = 3
        else:
            u = np.array(u0, dtype=float).reshape(N, self.k).copy()
            sweeps = 0
        for _ in range(sweeps):
            for a in range(self.k):
                # monotone Newton on the concave decreasing row a from its upper bound
                ua = self._upper(a, u, lntau, T)
                u[:, a] = ua
                for _it in range(200):
                    G, Gu, _, _ = self._G(u, lntau, T, rows=(a,))
                    step = -G[:, a] / Gu[:, a, a]
                    u[:, a] = np.minimum(u[:, a] + step, ua)
                    if np.all(np.abs(G[:, a]) < 1e-13):
                        break
        ok = self._newton(u, lntau, T)
        if not ok.all() and u0 is not None:
            # a warm start that failed: start again from the feed
            bad = ~ok
            ub, okb = self.isothermal(np.exp(lntau[bad]), T[bad])
            u[bad], ok[bad] = ub, okb
        elif not ok.all() and ok.any():
            self._continue_in_T(u, ok, lntau, T)
        return u, ok

    def _continue_in_T(self, u: np.ndarray, ok: np.ndarray, lntau: np.ndarray, T: np.ndarray) -> None:
        """Points whose solve from the upper bounds failed, solved by continuation in T from the nearest solved
        point of the same residence time (in place). The solution of the isothermal balances is unique, so any
        point that converges is the answer; the start only decides whether Newton gets there. Seed 715507 (A + B
        -> P with A in excess, hot): the sweep from the upper bounds leaves A near zero and B at its bound, and
        Newton stalls there; from the neighbouring cooler answer it converges in a few steps."""
        order = np.lexsort((T, lntau))
        for _sweep in range(2):
            for seq in (order, order[::-1]):
                for prev, i in zip(seq[:-1], seq[1:], strict=True):
                    if ok[i] or not ok[prev] or lntau[i] != lntau[prev]:
                        continue
                    u[i], ok[i] = self._walk(u[prev], float(T[prev]), float(T[i]), float(lntau[i]))
            if ok.all():
                return

    def _walk(self, u: np.ndarray, T0: float, T1: float, lntau: float) -> tuple[np.ndarray, bool]:
        """Continuation of one point's answer u at T0 to T1, halving the step where Newton does not converge."""
        u = u.copy()
        T, h = T0, T1 - T0
        lt = np.array([lntau])
        for _ in range(200):
            if T == T1:
                return u, True
            Tn = T1 if abs(T1 - T) <= abs(h) else T + h
            trial = u[None, :].copy()
            if self._newton(trial, lt, np.array([Tn]))[0]:
                u, T = trial[0], Tn
                h *= 1.5
            else:
                h *= 0.5
                if abs(h) < 1e-9 * max(abs(T), 1.0):
                    break
        return u, False

    def _newton(self, u: np.ndarray, lntau: np.ndarray, T: np.ndarray, iterations: int = 60) -> np.ndarray:
        G, Gu, _, _ = self._G(u, lntau, T)
        err = np.max(np.abs(G), axis=1)
        for _ in range(iterations):
            todo = err > 1e-14
            if not todo.any():
                break
            idx = np.nonzero(todo)[0]
            try:
                du = np.linalg.solve(Gu[idx], -G[idx][..., None])[..., 0]
            except np.linalg.LinAlgError:
                du = np.stack([np.linalg.lstsq(Gu[i], -G[i], rcond=None)[0] for i in idx])
            big = np.max(np.abs(du), axis=1)
            du *= np.minimum(1.0, 20.0 / np.maximum(big, 1e-300))[:, None]
            lam = np.ones(idx.size)
            improved = np.zeros(idx.size, dtype=bool)
            for _half in range(40):
                trial = u[idx] + lam[:, None] * du
                Gt, _, _, _ = self._G(trial, lntau[idx], T[idx])
                et = np.max(np.abs(Gt), axis=1)
                good = (et < err[idx]) | (et < 1e-14)
                acc = good & ~improved
                if acc.any():
                    sel = idx[acc]
                    u[sel] = trial[acc]
                    improved |= acc
                if improved.all():
                    break
                lam = np.where(improved, lam, lam * 0.5)
            if not improved.any():
                break
            G, Gu, _, _ = self._G(u, lntau, T)
            err = np.max(np.abs(G), axis=1)
        return err < 1e-11

    # -- the steady-state manifold: T_in(tau, T) ------------------------------------------------------
    def evaluate(self, tau, T, u0=None) -> dict:
        """Everything at points (tau, T): u, C (N, n), lnr (N, m), T_in, dT_in/dT, ok."""
        T = np.atleast_1d(np.asarray(T, dtype=float))
        tau = np.broadcast_to(np.asarray(tau, dtype=float), T.shape).astype(float)
        u, ok = self.isothermal(tau, T, u0)
        lntau = np.log(tau)
        if self.k:
            G, Gu, GT, lnr = self._G(u, lntau, T)
            try:
                du_dT = -np.linalg.solve(Gu, GT[..., None])[..., 0]
            except np.linalg.LinAlgError:
                du_dT = np.full(u.shape, np.nan)
        else:
            lnr = self._lnr(u, T)
            du_dT = u
        xi = np.exp(lntau[:, None] + lnr)  # extents tau r [mol/m^3]
        C = np.zeros((T.size, self.n))
        C += self.c_in + xi @ self.nu.T
        C[:, ~self.present] = 0.0
        if self.k:
            C[:, self.K] = np.exp(u)
        dlnr = self.Ea / (R * T[:, None] ** 2) + du_dT @ self.nK.T
        a = 1.0 + tau * (self.kappa + self.lam)
        b = tau * (self.kappa * self.pb.T_c + self.lam * self.pb.T_amb + self.p)
        T_in = a * T - xi @ self.J - b
        dTin = a - (xi * dlnr) @ self.J
        return {"u": u, "C": C, "lnr": lnr, "xi": xi, "T_in": T_in, "dTin": dTin, "ok": ok, "tau": tau, "T": T}

    def jacobians(self, tau, u: np.ndarray, C: np.ndarray, T, lnr: np.ndarray) -> np.ndarray:
        """Analytic Jacobians (N, p, p) of (dC/dt, dT/dt) in (C, T) at fixed volume, restricted to the present
        species (absent species form a decoupled block with negative eigenvalues, see ``eig``)."""
        N, n = C.shape[0], self.n
        tau = np.broadcast_to(np.asarray(tau, dtype=float), (N,))
        T = np.broadcast_to(np.asarray(T, dtype=float), (N,))
        with np.errstate(divide="ignore"):
            lnC = np.log(np.maximum(C, 0.0))
        if self.k:
            lnC[:, self.K] = u  # exact even where exp(u) underflows
        use = (self.orders > 0) & self.active[:, None]  # (m, n)
        with np.errstate(over="ignore", invalid="ignore"):
            dr_dC = np.where(use, self.orders * np.exp(lnr[:, :, None] - lnC[:, None, :]), 0.0)  # (N, m, n)
        r = np.exp(lnr)
        dr_dT = r * self.Ea / (R * T[:, None] ** 2)
        Jm = np.zeros((N, n + 1, n + 1))
        Jm[:, :n, :n] = -np.eye(n) / tau[:, None, None] + np.einsum("im,Nml->Nil", self.nu, dr_dC)
        Jm[:, :n, n] = dr_dT @ self.nu.T
        Jm[:, n, :n] = np.einsum("m,Nml->Nl", self.J, dr_dC)
        Jm[:, n, n] = -1.0 / tau + dr_dT @ self.J - self.kappa - self.lam
        keep = np.nonzero(np.concatenate((self.present, [True])))[0]
        return Jm[:, keep][:, :, keep]

    def eig(self, tau, u, C, T, lnr) -> np.ndarray:
        """Eigenvalues (N, n + 1) of the species + energy Jacobian, sorted by real part, largest first."""
        ev = np.linalg.eigvals(self.jacobians(tau, u, C, T, lnr))
        N = ev.shape[0]
        tau = np.broadcast_to(np.asarray(tau, dtype=float), (N,))
        # an absent species (never fed, never made) decays at least at the flushing rate 1/tau
        n_abs = int((~self.present).sum())
        if n_abs:
            ev = np.concatenate((ev, np.repeat(-1.0 / tau[:, None], n_abs, axis=1)), axis=1)
        order = np.argsort(-ev.real, axis=1, kind="stable")
        return np.take_along_axis(ev, order, axis=1)

    @staticmethod
    def bialternate(Jm: np.ndarray) -> np.ndarray:
        """The bialternate product 2A (.) I of each matrix of Jm (N, p, p) [3]: an (m, m) matrix, m = p(p-1)/2,
        whose eigenvalues are the sums lambda_i + lambda_j (i < j) of the eigenvalues of A; its determinant
        is a polynomial in the entries of A (smooth, no eigenvalue decomposition needed) that vanishes at a
        Hopf point (and at a neutral saddle, lambda = +-mu)."""
        p = Jm.shape[-1]
        pairs = [(i, j) for i in range(1, p) for j in range(i)]
        M = np.zeros(Jm.shape[:-2] + (len(pairs), len(pairs)))
        for a, (pp, q) in enumerate(pairs):
            for b, (r, s) in enumerate(pairs):
                if r == q:
                    M[..., a, b] = -Jm[..., pp, s]
                elif r != pp and s == q:
                    M[..., a, b] = Jm[..., pp, r]
                elif r == pp and s == q:
                    M[..., a, b] = Jm[..., pp, pp] + Jm[..., q, q]
                elif r == pp and s != q:
                    M[..., a, b] = Jm[..., q, s]
                elif s == pp:
                    M[..., a, b] = -Jm[..., q, r]
        return M

    def hopf_function(self, tau, u, C, T, lnr) -> np.ndarray:
        """det(2J (.) I) of the present-species + energy Jacobian, scaled by its largest entry (same sign as
        prod_{i<j} (lambda_i + lambda_j)); continuous in the state. Shape (N,)."""
        Jm = self.jacobians(tau, u, C, T, lnr)
        if Jm.shape[-1] < 2:
            return np.ones(Jm.shape[0])
        M = self.bialternate(Jm)
        s = np.maximum(np.max(np.abs(M), axis=(1, 2)), 1e-300)
        sign, logdet = np.linalg.slogdet(M / s[:, None, None])
        return sign * np.exp(logdet)

    def heat_release_bounds(self) -> tuple[float, float]:
        """Largest and smallest J.xi over the extents the feed allows (C_in + nu xi >= 0, xi >= 0) [K]: the
        feed's largest adiabatic temperature rise and its largest fall (linear programmes)."""
        from scipy.optimize import linprog

        # scaled to numbers of order one: the solver's tolerances are absolute
        js = max(float(np.max(np.abs(self.J))), 1e-300)
        rel = []
        for sign in (1.0, -1.0):
            res = linprog(
                -sign * self.J / js, A_ub=-self.nu, b_ub=self.c_in / self.c_scale, bounds=[(0, None)] * self.m
            )
            rel.append(sign * -res.fun * js * self.c_scale if res.status == 0 else 0.0)
        return rel[0], rel[1]

    def temperature_window(self, T_in_lo: float, T_in_hi: float, tau_hi: float) -> tuple[float, float]:
        """Bounds on every steady temperature: T is a weighted mean of T_in, T_c and T_amb plus
        (tau p + J.xi)/a, and J.xi lies between the extreme heat releases of the feasible extents."""
        lo, hi = T_in_lo, T_in_hi
        if self.kappa > 0:
            lo, hi = min(lo, self.pb.T_c), max(hi, self.pb.T_c)
        if self.lam > 0:
            lo, hi = min(lo, self.pb.T_amb), max(hi, self.pb.T_amb)
        rel = self.heat_release_bounds()
        return max(lo + min(rel[1], 0.0) - 2.0, 20.0), hi + max(rel[0], 0.0) + self.p * tau_hi + 2.0

    # -- one residence-time column --------------------------------------------------------------------
    def column(self, tau: float, T_lo: float, T_hi: float, n: int = 3000) -> Column:  # noqa: F821
        return Column(self, tau, T_lo, T_hi, n)

    def states(self, tau: float, T_in: float, n: int = 3000) -> list[State]:
        """Every steady state at (tau, T_in), sorted by temperature."""
        lo, hi = self.temperature_window(T_in, T_in, tau)
        return self.column(tau, lo, hi, n).states(T_in)

    def region(self, states: list[State]) -> str:
        """DESIGN §5, priority from the top."""
        stable = [s for s in states if s.stable]
        if any(s.T > self.pb.T_max for s in stable):
            return "runaway"
        if not stable:
            return "unstable"
        if len(states) > 1:
            return "multiple"
        if abs(stable[0].sensitivity) > self.pb.sensitivity:
            return "sensitive"
        return "stable"

    # -- dynamics (a third way, for settling disagreements) -------------------------------------------
    def rhs(self, tau: float, T_in: float, C: np.ndarray, T: float) -> np.ndarray:
        """Right-hand side of the dynamic species and energy balances at fixed volume."""
        with np.errstate(divide="ignore", invalid="ignore"):
            lnC = np.log(np.maximum(C, 0.0))
            lnr = self.lnk0 - self.Ea / (R * T) + np.where(self.orders > 0, self.orders * lnC, 0.0).sum(axis=1)
        r = np.exp(lnr)
        dC = (self.c_in - C) / tau + self.nu @ r
        dT = (T_in - T) / tau + self.J @ r - self.kappa * (T - self.pb.T_c) - self.lam * (T - self.pb.T_amb) + self.p
        return np.concatenate((dC, [dT]))

    def integrate(self, tau: float, T_in: float, C0, T0: float, t_end: float | None = None) -> tuple:
        """Integrate the dynamic balances from (C0, T0) (Radau, tight tolerances) in log concentrations of the
        species present, so that a reactant at 1e-34 mol/m^3 with a fractional order stays positive and
        smooth; returns (C, T, settled)."""
        t_end = t_end or 400.0 * tau
        C0 = np.asarray(C0, float)
        logv = self.present & (np.maximum(C0, 0.0) > 0)
        z0 = np.concatenate((np.where(logv, np.log(np.where(logv, C0, 1.0)), C0), [T0]))

        def unpack(z):
            C = np.where(logv, np.exp(np.minimum(z[:-1], 700.0)), z[:-1])
            lnC = np.where(logv, z[:-1], np.log(np.maximum(z[:-1], 1e-300)))
            return C, lnC, z[-1]

        def f(t, z):
            C, lnC, T = unpack(z)
            lnr = self.lnk0 - self.Ea / (R * T) + np.where(self.orders > 0, self.orders * lnC, 0.0).sum(axis=1)
            r = np.exp(lnr)
            dC = (self.c_in - C) / tau + self.nu @ r
            # d ln C/dt = dC/dt / C, with the reaction terms r/C taken in logarithms
            dlog = (
                self.c_in * np.exp(-lnC) / tau - 1.0 / tau + (self.nu * np.exp(lnr[None, :] - lnC[:, None])).sum(axis=1)
            )
            dT = (
                (T_in - T) / tau + self.J @ r - self.kappa * (T - self.pb.T_c) - self.lam * (T - self.pb.T_amb) + self.p
            )
            return np.concatenate((np.where(logv, dlog, dC), [dT]))

        sol = solve_ivp(f, (0.0, t_end), z0, method="Radau", rtol=1e-10, atol=1e-10)
        C, _, T = unpack(sol.y[:, -1])
        d = self.rhs(tau, T_in, C, T)
        settled = bool(sol.success and np.max(np.abs(d[:-1])) * tau < 1e-6 * self.c_scale and abs(d[-1]) * tau < 1e-5)
        return C, float(T), settled


def _pair_at_zero(ev: np.ndarray) -> tuple[complex, complex] | None:
    """The two eigenvalues whose sum is closest to zero."""
    best, pair = math.inf, None
    for i in range(ev.size):
        for j in range(i + 1, ev.size):
            z = abs(ev[i] + ev[j])
            if z < best:
                best, pair = z, (ev[i], ev[j])
    return pair


class Column:
    """The steady states of one residence time: T_in(T) on a fine T grid, its extrema (folds), Hopf points."""

    def __init__(self, ref: Reference, tau: float, T_lo: float, T_hi: float, n: int = 3000) -> None:
        self.ref, self.tau, self.T_lo, self.T_hi = ref, float(tau), float(T_lo), float(T_hi)
        T = np.linspace(self.T_lo, self.T_hi, n)
        e = ref.evaluate(self.tau, T)
        if not e["ok"].all():
            raise RuntimeError(f"reference isothermal solve failed at tau={self.tau} for {int((~e['ok']).sum())} T")
        self.e = {k: e[k] for k in ("T", "u", "C", "lnr", "T_in", "dTin")}
        self._refine_hidden()
        self.folds = self._folds()
        self.hopfs = self._hopfs()

    @property
    def T(self) -> np.ndarray:
        return self.e["T"]

    # -- scalar evaluations, warm-started from the nearest grid point --------------------------------
    def at(self, T: float) -> dict:
        i = int(np.clip(np.searchsorted(self.T, T), 0, self.T.size - 1))
        u0 = self.e["u"][i : i + 1] if self.ref.k else None
        return self.ref.evaluate(self.tau, np.array([T]), u0)

    def Tin_at(self, T: float) -> float:
        return float(self.at(T)["T_in"][0])

    def d_at(self, T: float) -> float:
        return float(self.at(T)["dTin"][0])

    def h_at(self, T: float) -> float:
        e = self.at(T)
        return float(self.ref.hopf_function(self.tau, e["u"], e["C"], T, e["lnr"])[0])

    def ev_at(self, T: float) -> np.ndarray:
        e = self.at(T)
        return self.ref.eig(self.tau, e["u"], e["C"], T, e["lnr"])[0]

    def _refine_hidden(self, depth: int = 0) -> None:
        """Subdivide grid intervals where the cubic Hermite interpolant of T_in(T) has an extremum although
        dT_in/dT has the same sign at both ends (two folds may hide inside one interval)."""
        T, f, d = self.T, self.e["T_in"], self.e["dTin"]
        h = np.diff(T)
        s = np.diff(f) / h
        # Hermite derivative in t on [0, 1], divided by h: a t^2 + b t + c
        c = d[:-1]
        a = 3 * (d[:-1] + d[1:] - 2 * s)
        b = 2 * (3 * s - 2 * d[:-1] - d[1:])
        disc = b * b - 4 * a * c
        same = d[:-1] * d[1:] > 0
        cand = np.zeros(h.size, dtype=bool)
        with np.errstate(invalid="ignore", divide="ignore"):
            sq = np.sqrt(np.maximum(disc, 0.0))
            for sgn in (1.0, -1.0):
                t = np.where(np.abs(a) > 0, (-b + sgn * sq) / (2 * a), -c / np.where(b != 0, b, np.inf))
                cand |= (disc >= 0) & (t > 0) & (t < 1)
        cand &= same
        cand |= same & (np.sign(s) != np.sign(d[:-1]))
        idx = np.nonzero(cand)[0]
        if idx.size == 0 or depth > 3:
            return
        newT = np.concatenate([np.linspace(T[k], T[k + 1], 18)[1:-1] for k in idx])
        e = self.ref.evaluate(self.tau, newT)
        order = np.argsort(np.concatenate((T, newT)), kind="stable")
        self.e = {k: np.concatenate((self.e[k], e[k]))[order] for k in self.e}
        self._refine_hidden(depth + 1)

    def _folds(self) -> list[Fold]:
        out = []
        d = self.e["dTin"]
        for k in np.nonzero(d[:-1] * d[1:] < 0)[0]:
            Tf = brentq(self.d_at, self.T[k], self.T[k + 1], xtol=1e-12, rtol=1e-15, maxiter=200)
            kind = "ignition" if d[k] > 0 else "extinction"  # a local maximum of T_in(T) is an ignition
            out.append(Fold(kind, self.tau, self.Tin_at(Tf), Tf))
        return out

    def _hopfs(self) -> list[Hopf]:
        ref, e = self.ref, self.e
        sig = np.sign(ref.hopf_function(self.tau, e["u"], e["C"], e["T"], e["lnr"]))
        out = []
        ks = np.nonzero(sig[:-1] * sig[1:] < 0)[0]
        if ks.size:
            # most sign changes are neutral saddles (two real eigenvalues +-mu on the middle branch); a Hopf
            # point needs a complex pair at one end of its grid interval at least (the grid is ~0.1 K fine)
            ev = ref.eig(self.tau, e["u"][ks], e["C"][ks], e["T"][ks], e["lnr"][ks])
            ev1 = ref.eig(self.tau, e["u"][ks + 1], e["C"][ks + 1], e["T"][ks + 1], e["lnr"][ks + 1])

            def cplx(w: np.ndarray) -> np.ndarray:
                return np.any(np.abs(w.imag) > 1e-9 * np.max(np.abs(w), axis=1, keepdims=True), axis=1)

            ks = ks[cplx(ev) | cplx(ev1)]
        for k in ks:
            Th = brentq(self.h_at, self.T[k], self.T[k + 1], xtol=1e-10, rtol=1e-15, maxiter=300)
            pair = _pair_at_zero(self.ev_at(Th))
            # the vanishing sum: a complex pair (Hopf) or two real eigenvalues +-mu (a neutral saddle)?
            if pair is not None and abs(pair[0].imag) > 1e-9 * max(abs(pair[0]), 1e-300):
                out.append(Hopf(self.tau, self.Tin_at(Th), Th, abs(pair[0].imag)))
        return out

    # -- the states of one feed temperature ------------------------------------------------------------
    def pieces(self) -> list[tuple[float, float]]:
        """Monotone pieces of T_in(T) as T intervals (split at the folds)."""
        cuts = [self.T_lo] + [f.T for f in self.folds] + [self.T_hi]
        return list(zip(cuts[:-1], cuts[1:], strict=True))

    def states(self, T_in: float, precise: bool = True) -> list[State]:
        """Every steady state at feed temperature T_in. Each monotone piece of T_in(T) holds at most one; the
        grid brackets it, then Brent's method (``precise``) or cubic Hermite interpolation on the bracket
        (good to ~1e-9 K on this grid; for quick map checks) locates it."""
        T, f, d = self.T, self.e["T_in"] - T_in, self.e["dTin"]
        cuts = [(self.T_lo, float(f[0]))] + [(fo.T, fo.T_in - T_in) for fo in self.folds] + [(self.T_hi, float(f[-1]))]
        roots = []
        for (a, fa), (b, fb) in zip(cuts[:-1], cuts[1:], strict=True):
            if fa == 0.0:
                roots.append(a)
                continue
            if fa * fb >= 0:
                continue
            inner = np.nonzero((T > a) & (T < b))[0]
            xs = np.concatenate(([a], T[inner], [b]))
            fs = np.concatenate(([fa], f[inner], [fb]))
            k = int(np.nonzero(np.sign(fs[:-1]) != np.sign(fs[1:]))[0][0])
            lo, hi = xs[k], xs[k + 1]
            if precise or k == 0 or k == xs.size - 2:
                roots.append(brentq(lambda x: self.Tin_at(x) - T_in, lo, hi, xtol=1e-13, rtol=1e-15, maxiter=300))
            else:
                i0 = inner[k - 1]
                h = T[i0 + 1] - T[i0]

                def herm(t: float, i0: int = i0, h: float = h) -> float:
                    h00, h10 = 2 * t**3 - 3 * t**2 + 1, t**3 - 2 * t**2 + t
                    h01, h11 = -2 * t**3 + 3 * t**2, t**3 - t**2
                    return h00 * f[i0] + h10 * h * d[i0] + h01 * f[i0 + 1] + h11 * h * d[i0 + 1]

                roots.append(float(T[i0] + h * brentq(herm, 0.0, 1.0, xtol=1e-14)))
        return [self._state(x, T_in, polish=precise) for x in sorted(set(roots))]

    def _state(self, T: float, T_in: float, polish: bool = True) -> State:
        ref = self.ref
        e = self.at(T)
        if polish:
            u, T = self._polish(e["u"][0], T, T_in)
            e = ref.evaluate(self.tau, np.array([T]), u[None, :] if ref.k else None)
        ev = ref.eig(self.tau, e["u"], e["C"], T, e["lnr"])[0]
        kind, osc = classify(ev)
        C = e["C"][0]
        res = ref.rhs(self.tau, T_in, C, T)
        scale = np.concatenate((np.maximum(np.abs(C), ref.c_scale), [T]))
        return State(
            T=float(T),
            C=tuple(float(c) for c in C),
            stability=kind,
            oscillatory=osc,
            eigenvalues=tuple(complex(v) for v in ev),
            dTin_dT=float(e["dTin"][0]),
            residual=float(np.max(np.abs(res) * self.tau / scale)),
        )

    def _polish(self, u: np.ndarray, T: float, T_in: float) -> tuple[np.ndarray, float]:
        """Newton on the full system (log-form species balances and energy balance) in (u, T)."""
        ref = self.ref
        if ref.k == 0:
            return u, T
        lntau = np.array([math.log(self.tau)])
        a = 1.0 + self.tau * (ref.kappa + ref.lam)
        b = self.tau * (ref.kappa * ref.pb.T_c + ref.lam * ref.pb.T_amb + ref.p)
        sc = max(T_in, 1.0)

        def F(z):
            G, Gu, GT, lnr = ref._G(z[:-1][None, :], lntau, np.array([z[-1]]))
            xi = np.exp(lntau[0] + lnr[0])
            Jac = np.zeros((ref.k + 1, ref.k + 1))
            Jac[:-1, :-1], Jac[:-1, -1] = Gu[0], GT[0]
            Jac[-1, :-1] = -((xi * ref.J) @ ref.nK) / sc
            Jac[-1, -1] = (a - (xi * ref.Ea / (R * z[-1] ** 2)) @ ref.J) / sc
            return np.concatenate((G[0], [(a * z[-1] - xi @ ref.J - b - T_in) / sc])), Jac

        z = np.concatenate((u, [T]))
        f, Jac = F(z)
        err = np.max(np.abs(f))
        for _ in range(4):
            try:
                dz = np.linalg.solve(Jac, -f)
            except np.linalg.LinAlgError:
                break
            zt = z + dz
            ft, Jt = F(zt)
            et = np.max(np.abs(ft))
            if not et < err:
                break
            z, f, Jac, err = zt, ft, Jt, et
        return z[:-1], float(z[-1])


# -- along the residence time: a 2-D grid in (ln tau, T) ---------------------------------------------------
def tau_branch_points(
    ref: Reference, T_in: float, tau_lo: float, tau_hi: float, n_tau: int = 160, n_T: int = 1200
) -> tuple[list[Fold], list[Hopf]]:
    """Turning and Hopf points of the branch along the residence time at feed temperature T_in.

    Every cell of a (ln tau, T) grid near which T_in(tau, T) - T_in changes sign and the fold function
    dT_in/dT (or the Hopf test function) changes sign too seeds a 2-D Newton solve (fsolve); the
    neighbours of such cells count, so a curve that enters and leaves a cell through one edge is not missed.
    """
    T_lo, T_hi = ref.temperature_window(T_in, T_in, tau_hi)
    taus = np.geomspace(tau_lo, tau_hi, n_tau)
    Ts = np.linspace(T_lo, T_hi, n_T)
    TT, tt = np.meshgrid(Ts, taus)  # (n_tau, n_T)
    e = ref.evaluate(tt.ravel(), TT.ravel())
    if not e["ok"].all():
        raise RuntimeError("reference isothermal solve failed on the residence-time grid")
    F = (e["T_in"] - T_in).reshape(tt.shape)
    D = e["dTin"].reshape(tt.shape)
    U = e["u"].reshape(tt.shape + (ref.k,))
    ev = ref.eig(tt.ravel(), e["u"], e["C"], TT.ravel(), e["lnr"])
    Hs = np.sign(ref.hopf_function(tt.ravel(), e["u"], e["C"], TT.ravel(), e["lnr"])).reshape(tt.shape)
    cplx = np.any(np.abs(ev.imag) > 1e-9 * np.max(np.abs(ev), axis=1, keepdims=True), axis=1).reshape(tt.shape)

    def cells(G: np.ndarray) -> np.ndarray:
        c = np.stack((G[:-1, :-1], G[1:, :-1], G[:-1, 1:], G[1:, 1:]))
        return (np.min(c, axis=0) <= 0) & (np.max(c, axis=0) >= 0)

    def dilate(mask: np.ndarray) -> np.ndarray:
        out = mask.copy()
        out[1:, :] |= mask[:-1, :]
        out[:-1, :] |= mask[1:, :]
        out[:, 1:] |= mask[:, :-1]
        out[:, :-1] |= mask[:, 1:]
        return out

    fcell = cells(F)
    lt_lo, lt_hi = math.log(tau_lo), math.log(tau_hi)

    def at(z, u0) -> dict:
        return ref.evaluate(math.exp(z[0]), np.array([z[1]]), u0)

    def seed(i: int, m: int):
        u0 = U[i, m][None, :] if ref.k else None
        z0 = [0.5 * (math.log(taus[i]) + math.log(taus[i + 1])), 0.5 * (Ts[m] + Ts[m + 1])]
        return u0, z0

    def seeds(mask_a: np.ndarray, mask_b: np.ndarray) -> np.ndarray:
        # cells where both curves pass first, then cells next to both
        strong = np.argwhere(mask_a & mask_b)
        weak = np.argwhere(dilate(mask_a) & dilate(mask_b) & ~(mask_a & mask_b))
        return np.concatenate((strong, weak)) if weak.size else strong

    def near_found(i: int, m: int, found: list) -> bool:
        return any(abs(i - fi) <= 3 and abs(m - fm) <= 3 for fi, fm in found)

    def cell_of(tau_: float, T_: float) -> tuple[int, int]:
        return int(np.searchsorted(taus, tau_)) - 1, int(np.searchsorted(Ts, T_)) - 1

    folds: list[Fold] = []
    found: list[tuple[int, int]] = []
    for i, m in seeds(cells(D), fcell):
        if near_found(i, m, found):
            continue
        u0, z0 = seed(i, m)

        def eqs(z, u0=u0):
            ee = at(z, u0)
            return [ee["T_in"][0] - T_in, ee["dTin"][0]]

        try:
            z, _, ier, _ = fsolve(eqs, z0, full_output=True, xtol=1e-13)
        except (OverflowError, FloatingPointError, np.linalg.LinAlgError):
            continue  # the solver stepped to a residence time that overflows (seed 715601): no point from this seed
        if not (lt_lo - 1e-9 <= z[0] <= lt_hi + 1e-9):
            continue
        r = eqs(z)
        if abs(r[0]) > 1e-7 * max(T_in, 1.0) or abs(r[1]) > 1e-7:
            continue
        tau_f, T_f = math.exp(z[0]), float(z[1])
        found.append((i, m))
        if any(abs(math.log(f.tau / tau_f)) < 1e-6 and abs(f.T - T_f) < 1e-5 * T_f for f in folds):
            continue
        h = 1e-4
        d2 = (at((z[0], T_f + h), u0)["dTin"][0] - at((z[0], T_f - h), u0)["dTin"][0]) / (2 * h)
        folds.append(Fold("ignition" if d2 < 0 else "extinction", tau_f, T_in, T_f))
        found.append(cell_of(tau_f, T_f))

    hopfs: list[Hopf] = []
    hcell = cells(Hs) & (cplx[:-1, :-1] | cplx[1:, :-1] | cplx[:-1, 1:] | cplx[1:, 1:])
    found = []
    for i, m in seeds(hcell, fcell):
        if near_found(i, m, found):
            continue
        u0, z0 = seed(i, m)

        def lead(z, u0=u0):
            ee = at(z, u0)
            Jm = ref.jacobians(math.exp(z[0]), ee["u"], ee["C"], z[1], ee["lnr"])
            if not np.all(np.isfinite(Jm)):
                return ee, None  # the solver stepped where the state does not exist (seed 711161): no pair here
            w = ref.eig(math.exp(z[0]), ee["u"], ee["C"], z[1], ee["lnr"])[0]
            c = w[np.abs(w.imag) > 1e-9 * np.max(np.abs(w))]
            return ee, (c[np.argmin(np.abs(c.real))] if c.size else None)

        def eqs(z, lead=lead):
            ee, lp = lead(z)
            return [ee["T_in"][0] - T_in, lp.real * math.exp(z[0]) if lp is not None else 1.0]

        try:
            z, _, ier, _ = fsolve(eqs, z0, full_output=True, xtol=1e-13)
        except (OverflowError, FloatingPointError, np.linalg.LinAlgError):
            continue  # the solver stepped to a residence time that overflows (seed 715601): no point from this seed
        if not (lt_lo - 1e-9 <= z[0] <= lt_hi + 1e-9):
            continue
        r = eqs(z)
        _, lp = lead(z)
        if lp is None or abs(r[0]) > 1e-7 * max(T_in, 1.0) or abs(r[1]) > 1e-7:
            continue
        tau_h, T_h = math.exp(z[0]), float(z[1])
        found.append((i, m))
        if any(abs(math.log(h.tau / tau_h)) < 1e-6 and abs(h.T - T_h) < 1e-5 * T_h for h in hopfs):
            continue
        hopfs.append(Hopf(tau_h, T_in, T_h, abs(lp.imag)))
        found.append(cell_of(tau_h, T_h))
    folds.sort(key=lambda f: (f.tau, f.T))
    hopfs.sort(key=lambda h: (h.tau, h.T))
    return folds, hopfs
