"""One-parameter branches: turning points and Hopf points against independent calculations.

For the first-order CSTR A -> P (``conftest.make_cstr``) the steady states along T are explicit when written
out by hand: x(T) = tau k/(1 + tau k) and

    T_in = (1 + kappa tau) T - dT_ad x(T) - kappa tau T_c                         (energy balance, analytic)

so along the feed temperature the folds are the zeros of dT_in/dT (solved here with scipy's fsolve on
F = dF/dT = 0) and the Hopf points are the zeros of the trace of the 2x2 Jacobian of (C_A, T) with det > 0.
Along the residence time at fixed T_in the same balance times (1 + tau k) is a quadratic in tau,

    kappa k (T - T_c) tau^2 + [k (T - T_in) + kappa (T - T_c) - dT_ad k] tau + (T - T_in) = 0,

which gives the branch tau(T) in closed form. In the adiabatic case the folds along tau are also the closed
form Da = G(x) at the roots x of the fold quadratic (``conftest.Reference.fold_x``).

References
----------
[1] C. van Heerden, Autothermic processes, Ind. Eng. Chem. 45 (1953) 1242-1247.
[2] A. Uppal, W. H. Ray, A. B. Poore, On the dynamic behavior of continuous stirred tank reactors,
    Chem. Eng. Sci. 29 (1974) 967-985.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from exomap.core.branch import branch, turning_points
from exomap.core.errors import ModelInputError
from exomap.core.scenario import R_GAS
from scipy.optimize import brentq, fsolve


class Hand:
    """Balances of the first-order CSTR fixture written out by hand (no exomap code)."""

    def __init__(self, c):
        rxn = c.sc.reactions[0]
        self.k0, self.E = rxn.k0, rxn.Ea / R_GAS
        self.J = -rxn.dH / (c.sc.rho * c.sc.cp)
        self.CAf = c.sc.c_in[0]
        self.dT_ad = self.J * self.CAf
        self.kappa = c.sc.UA_jacket / (c.sc.rho * c.sc.cp * c.sc.vessel.V_set)
        self.T_c = c.sc.T_c

    def k(self, T):
        return self.k0 * np.exp(-self.E / T)

    def T_in_of(self, T, tau):
        k = self.k(T)
        return (1 + self.kappa * tau) * T - self.dT_ad * tau * k / (1 + tau * k) - self.kappa * tau * self.T_c

    def dT_in_dT(self, T, tau):
        k = self.k(T)
        dk = k * self.E / T**2
        return 1 + self.kappa * tau - self.dT_ad * tau * dk / (1 + tau * k) ** 2

    def jac(self, T, tau):
        """2x2 Jacobian of (dC_A/dt, dT/dt) [1/s] at the steady state with temperature T."""
        k = self.k(T)
        dk = k * self.E / T**2
        C = self.CAf / (1 + tau * k)
        return np.array([[-1 / tau - k, -dk * C], [self.J * k, -1 / tau + self.J * dk * C - self.kappa]])

    def tau_of_T(self, T, T_in):
        """Positive residence times at which T is a steady temperature for feed T_in (the quadratic)."""
        k = self.k(T)
        a = self.kappa * k * (T - self.T_c)
        b = k * (T - T_in) + self.kappa * (T - self.T_c) - self.dT_ad * k
        c0 = T - T_in
        if a == 0:
            return [-c0 / b] if b != 0 and -c0 / b > 0 else []
        disc = b * b - 4 * a * c0
        if disc < 0:
            return []
        sq = math.sqrt(disc)
        return sorted(t for t in ((-b - sq) / (2 * a), (-b + sq) / (2 * a)) if t > 0)


def _scan_roots(f, lo, hi, n=20001):
    x = np.linspace(lo, hi, n)
    v = np.array([f(t) for t in x])
    ok = np.isfinite(v)
    idx = np.nonzero(ok[:-1] & ok[1:] & (np.sign(v[:-1]) * np.sign(v[1:]) < 0))[0]
    return [brentq(f, x[i], x[i + 1], xtol=1e-14, rtol=1e-15) for i in idx]


# -- adiabatic: folds along the residence time in closed form --------------------------------------------
@pytest.mark.parametrize(("gamma", "B"), [(20.0, 8.0), (10.0, 12.0), (30.0, 6.0), (40.0, 25.0), (200.0, 4.3)])
def test_turning_points_along_residence_time_match_the_closed_form(cstr, ref, gamma, B):
    c = cstr(gamma, B)
    x_fold = ref.fold_x(B, gamma)
    Da_fold = ref.G(x_fold, B, gamma)
    lo, hi = c.tau(Da_fold.min() / 5), c.tau(Da_fold.max() * 5)
    res = branch(c.sc, "residence_time", c.tau(float(np.sqrt(Da_fold.prod()))), c.T_in, lo=lo, hi=hi)
    assert res.success, res.message
    tps = sorted(res.turning_points, key=lambda t: t.T)
    # analytic: two folds for B above the threshold, both inside the window
    assert len(tps) == 2
    # analytic: ignition is the lower-temperature fold x_- (Da = G(x_-), the low branch meets the middle
    # one); extinction the upper x_+ (van Heerden 1953; Uppal, Ray & Poore 1974)
    assert [t.kind for t in tps] == ["ignition", "extinction"]
    for t, x, Da in zip(tps, x_fold, Da_fold, strict=True):
        # analytic fold (Reference.fold_x, Reference.G), relative 1e-8 in the parameter
        assert t.tau == pytest.approx(c.tau(float(Da)), rel=1e-8)
        # analytic: T = T_in + dT_ad x at the fold (adiabatic)
        assert t.T == pytest.approx(c.T_in + c.dT_ad * x, rel=1e-9)
        # the parameter held fixed
        assert t.T_in == c.T_in
    # analytic: ignition at the larger residence time (Da = G(x_-) > G(x_+))
    assert tps[0].tau > tps[1].tau
    # DEVELOPERS.md: turning_points() is the turning points of branch()
    assert turning_points(c.sc, "residence_time", c.tau(float(np.sqrt(Da_fold.prod()))), c.T_in, lo=lo, hi=hi) == list(
        res.turning_points
    )


# -- folds along the feed temperature by fsolve on the dimensional equations ------------------------------
@pytest.mark.parametrize(
    ("gamma", "B", "Da", "beta"),
    [
        (20.0, 8.0, 0.04, 0.0),
        (20.0, 8.0, 0.2, 0.0),
        (30.0, 15.0, 0.002, 0.0),
        (20.0, 16.0, 0.02, 1.0),
        (25.0, 30.0, 0.05, 2.0),
    ],
)
def test_turning_points_along_feed_temperature_match_fsolve(cstr, gamma, B, Da, beta):
    c0 = cstr(gamma, B)
    tau = c0.tau(Da)
    c = cstr(gamma, B, kappa=beta / tau, T_c=c0.T_in - 10.0)
    hand = Hand(c)
    lo, hi = c.T_in - 120.0, c.T_in + 120.0
    res = branch(c.sc, "feed_temperature", tau, c.T_in, lo=lo, hi=hi)
    assert res.success, res.message
    # independent: folds where dT_in/dT = 0, first bracketed by a scan in T, then solved with fsolve on
    # F(T, T_in) = T_in(T) - T_in = 0 and dF/dT = 0
    T_guess = _scan_roots(lambda T: hand.dT_in_dT(T, tau), 200.0, 1200.0)
    expected = []
    for Tg in T_guess:
        sol, info, ier, _ = fsolve(
            lambda v: [hand.T_in_of(v[0], tau) - v[1], hand.dT_in_dT(v[0], tau)],
            [Tg, hand.T_in_of(Tg, tau)],
            full_output=True,
            xtol=1e-14,
        )
        # fsolve converged on the hand-written fold equations
        assert ier == 1
        if lo <= sol[1] <= hi:
            expected.append(sol)
    assert len(expected) >= 2, "the case must have a fold pair inside the window"
    got = sorted(res.turning_points, key=lambda t: t.T)
    # as many folds as the hand-written equations have in the window
    assert len(got) == len(expected)
    for t, (T, T_in) in zip(got, expected, strict=True):
        # fsolve on the hand-written balances; relative 1e-8 in the parameter T_in
        assert t.T_in == pytest.approx(T_in, rel=1e-8)
        # fsolve on the hand-written balances, relative 1e-8
        assert t.T == pytest.approx(T, rel=1e-8)
        # the parameter held fixed
        assert t.tau == tau
        # analytic: a local maximum of T_in(T) is an ignition, a local minimum an extinction
        d2 = (hand.dT_in_dT(T + 1e-4, tau) - hand.dT_in_dT(T - 1e-4, tau)) / 2e-4
        assert t.kind == ("ignition" if d2 < 0 else "extinction")


# -- Hopf points -----------------------------------------------------------------------------------------
def _jacketed(cstr, ref):
    """Jacketed case with an oscillatory range around tau0 (x = 0.5 there, B = 16, gamma = 20, beta = 3)."""
    c0 = cstr(20.0, 16.0)
    tau0 = c0.tau(float(ref.G(0.5, 16.0, 20.0, 3.0)))
    return cstr(20.0, 16.0, kappa=3.0 / tau0), tau0


def test_hopf_points_along_feed_temperature(cstr, ref):
    c, tau = _jacketed(cstr, ref)
    hand = Hand(c)
    lo, hi = c.T_in - 60.0, c.T_in + 60.0
    res = branch(c.sc, "feed_temperature", tau, c.T_in, lo=lo, hi=hi)

    # independent: zeros in T of the trace of the hand-written 2x2 Jacobian with det > 0 (Uppal, Ray & Poore
    # 1974: a Hopf point of the CSTR is where the trace crosses zero while the determinant is positive)
    def tr(T):
        return np.trace(hand.jac(T, tau)) * tau

    expected = []
    for T in _scan_roots(tr, 250.0, 700.0):
        if np.linalg.det(hand.jac(T, tau)) > 0 and lo <= hand.T_in_of(T, tau) <= hi:
            expected.append(T)
    assert len(expected) == 2, "the case must have two Hopf points inside the window"
    got = sorted(res.hopf_points, key=lambda h: h.T)
    # as many Hopf points as the hand-written trace has zeros with det > 0
    assert len(got) == len(expected)
    for h, T in zip(got, expected, strict=True):
        # relative 1e-8 in the temperature and the parameter
        assert h.T == pytest.approx(T, rel=1e-8)
        # hand-written energy balance at that T, relative 1e-8
        assert h.T_in == pytest.approx(hand.T_in_of(T, tau), rel=1e-8)
        # the parameter held fixed
        assert h.tau == tau
        # analytic: at a Hopf point the eigenvalues are +- i sqrt(det)
        assert h.frequency == pytest.approx(math.sqrt(np.linalg.det(hand.jac(T, tau))), rel=1e-6)


def test_hopf_points_along_residence_time(cstr, ref):
    c, tau0 = _jacketed(cstr, ref)
    hand = Hand(c)
    lo, hi = tau0 / 20.0, tau0 * 20.0
    res = branch(c.sc, "residence_time", tau0, c.T_in, lo=lo, hi=hi)
    assert res.success, res.message
    for h in res.hopf_points:
        # analytic: on the branch (the hand-written energy balance) ...
        assert hand.T_in_of(h.T, h.tau) == pytest.approx(c.T_in, rel=1e-10)
        J = hand.jac(h.T, h.tau)
        # ... with zero trace and positive determinant (Uppal, Ray & Poore 1974), scaled by the residence time
        assert abs(np.trace(J)) * h.tau < 1e-7
        # Uppal, Ray & Poore 1974: det > 0 at a Hopf point (else it is a saddle, not a Hopf)
        assert np.linalg.det(J) > 0
        # analytic: the eigenvalues at a Hopf point are +- i sqrt(det)
        assert h.frequency == pytest.approx(math.sqrt(np.linalg.det(J)), rel=1e-6)

    # independent: the branch tau(T) from the quadratic, and the zeros of the trace along each of its roots
    expected = []
    for root in (0, 1):

        def tr(T, root=root):
            taus = hand.tau_of_T(T, c.T_in)
            if len(taus) != 2:
                return math.nan
            return np.trace(hand.jac(T, taus[root])) * taus[root]

        for T in _scan_roots(tr, c.T_in + 1e-3, c.T_in + c.dT_ad - 1e-3, 40001):
            t = hand.tau_of_T(T, c.T_in)[root]
            if lo <= t <= hi and np.linalg.det(hand.jac(T, t)) > 0:
                expected.append((t, T))
    expected.sort(key=lambda p: p[1])
    assert len(expected) == 2, "the case must have two Hopf points inside the window"
    got = sorted(res.hopf_points, key=lambda h: h.T)
    # as many Hopf points as zeros of the trace along the closed-form branch
    assert len(got) == len(expected)
    for h, (t, T) in zip(got, expected, strict=True):
        # relative 1e-8 in the parameter
        assert h.tau == pytest.approx(t, rel=1e-8)
        # closed-form branch tau(T) and the zero of its trace, relative 1e-9
        assert h.T == pytest.approx(T, rel=1e-9)


# -- every branch point is a steady state with the right stability ---------------------------------------
@pytest.mark.parametrize("along", ["residence_time", "feed_temperature"])
def test_branch_points_are_steady_states(cstr, ref, along):
    c, tau0 = _jacketed(cstr, ref)
    hand = Hand(c)
    res = branch(
        c.sc,
        along,
        tau0,
        c.T_in,
        lo=(tau0 / 20 if along == "residence_time" else c.T_in - 60.0),
        hi=(tau0 * 20 if along == "residence_time" else c.T_in + 60.0),
    )
    # the branch is resolved (DESIGN.md §4 points)
    assert len(res.points) > 50
    n_checked = 0
    for p in res.points:
        # analytic: the hand-written energy balance holds at every point
        assert hand.T_in_of(p.T, p.tau) == pytest.approx(p.T_in, rel=1e-9)
        # DESIGN.md §4: value is the parameter along the branch
        assert p.value == (p.tau if along == "residence_time" else p.T_in)
        # analytic: x = tau k / (1 + tau k)
        k = hand.k(p.T)
        assert p.conversion == pytest.approx(p.tau * k / (1 + p.tau * k), rel=1e-9, abs=1e-12)
        J = hand.jac(p.T, p.tau)
        tr, det = np.trace(J) * p.tau, np.linalg.det(J) * p.tau**2
        if abs(tr) > 1e-6 and abs(det) > 1e-6:
            # analytic: stable iff trace < 0 and det > 0 (the product adds -1/tau only)
            assert p.stable == (tr < 0 and det > 0)
            n_checked += 1
    # most points are away from tr = 0 and det = 0 and were checked
    assert n_checked > 40


# -- bad inputs ------------------------------------------------------------------------------------------
def test_bad_branch_requests(cstr):
    c = cstr()
    with pytest.raises(ModelInputError, match="along") as err:
        branch(c.sc, "pressure", 100.0, c.T_in)
    # DEVELOPERS.md: ModelInputError.field names the input
    assert err.value.field == "along"
    with pytest.raises(ModelInputError, match="range") as err:
        branch(c.sc, "feed_temperature", 100.0, c.T_in, lo=400.0, hi=300.0)
    # DEVELOPERS.md: ModelInputError.field names the input
    assert err.value.field == "range"
    with pytest.raises(ModelInputError, match="range"):
        branch(c.sc, "residence_time", 100.0, c.T_in, lo=-1.0, hi=300.0)
    with pytest.raises(ModelInputError, match="residence time") as err:
        branch(c.sc, "feed_temperature", -5.0, c.T_in)
    # DEVELOPERS.md: ModelInputError.field names the input
    assert err.value.field == "residence_time"
    with pytest.raises(ModelInputError, match="feed temperature"):
        branch(c.sc, "residence_time", 100.0, float("nan"))
