"""Steady states of ``exomap.core.steady`` against the dimensionless first-order CSTR and other references.

The dimensionless first-order CSTR (van Heerden [1]; Uppal, Ray & Poore [2]) is built through the
dimensional scenario format (``conftest.make_cstr``) and every expected number is computed here, in the test,
by an independent route (dense scan plus Brent's method on the dimensionless equation, hand-written 2x2
Jacobians, scipy's fsolve on hand-written dimensional balances).

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
from exomap.core import steady as steady_mod
from exomap.core.errors import ModelInputError
from exomap.core.manifold import Manifold
from exomap.core.model import Model, nominal_inputs
from exomap.core.scenario import R_GAS
from exomap.core.steady import roots_along, steady_states
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from scipy.optimize import fsolve

SLOW_OK = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _dimless_state(c, state):
    """(x, y) of a reported state of the dimensionless CSTR fixture."""
    return state.conversion, c.gamma * (state.T - c.T_in) / c.T_in


def _fold_Da(ref, B, gamma, beta=0.0):
    return sorted(float(ref.G(x, B, gamma, beta)) for x in ref.fold_x(B, gamma, beta))


# -- (a) multiplicity iff B > 4 gamma / (gamma - 4) --------------------------------------------------------
@pytest.mark.parametrize("gamma", [10.0, 20.0, 40.0, 400.0])
def test_multiplicity_above_the_threshold(cstr, ref, gamma):
    # analytic: the adiabatic first-order Arrhenius S-curve has turning points iff B > 4 gamma/(gamma - 4)
    # (see Reference.fold_x); for gamma -> infinity this is van Heerden's and Uppal, Ray & Poore's B > 4
    B = ref.B_cusp(gamma) * 1.05
    Da_lo, Da_hi = _fold_Da(ref, B, gamma)
    Da = math.sqrt(Da_lo * Da_hi)
    c = cstr(gamma, B)
    res = steady_states(c.sc, c.tau(Da), c.T_in)
    assert res.success, res.message
    # analytic: three steady states strictly between the two fold values of Da
    assert len(res.states) == 3
    # independent: the dense scan + brentq of Reference.roots_x finds the same three
    assert len(ref.roots_x(Da, B, gamma)) == 3


@pytest.mark.parametrize("gamma", [10.0, 20.0, 40.0, 400.0])
def test_no_multiplicity_below_the_threshold(cstr, ref, gamma):
    # analytic: below B = 4 gamma/(gamma - 4) the function G(x) = Da is monotone, one state for every Da
    B = ref.B_cusp(gamma) * 0.95
    # analytic: the fold quadratic has no real root below the threshold
    assert ref.fold_x(B, gamma).size == 0
    c = cstr(gamma, B)
    # Da over six decades, densest where G has its inflection (x ~ 1/2)
    x_mid = np.linspace(0.05, 0.95, 19)
    Das = np.concatenate((np.geomspace(1e-3, 1e3, 13), ref.G(x_mid, B, gamma)))
    for Da in Das:
        res = steady_states(c.sc, c.tau(float(Da)), c.T_in)
        assert res.success, res.message
        # analytic: one steady state for every Da below the threshold
        assert len(res.states) == 1, (Da, [s.T for s in res.states])


# -- (b) the states found are the roots of x = Da (1 - x) exp(B x / (1 + B x / gamma)) --------------------
@pytest.mark.parametrize(
    ("gamma", "B", "Da"),
    [
        (20.0, 8.0, 0.02),
        (20.0, 8.0, 0.03),
        (20.0, 8.0, 0.04),
        (20.0, 8.0, 0.05),
        (20.0, 8.0, 0.07),
        (10.0, 12.0, 0.01),
        (30.0, 15.0, 0.002),
        (25.0, 3.0, 0.8),
        (50.0, 20.0, 3e-4),
    ],
)
def test_states_are_the_dimensionless_roots(cstr, ref, gamma, B, Da):
    c = cstr(gamma, B)
    res = steady_states(c.sc, c.tau(Da), c.T_in)
    assert res.success, res.message
    x_ref = ref.roots_x(Da, B, gamma)
    x_got = np.array([s.conversion for s in res.states])
    # independent root count (Reference.roots_x: dense scan + brentq)
    assert len(x_got) == len(x_ref)
    # analytic (independent root finding), to solver accuracy
    np.testing.assert_allclose(x_got, x_ref, rtol=1e-9, atol=1e-12)
    # analytic: adiabatic, T = T_in + dT_ad x
    np.testing.assert_allclose([s.T for s in res.states], c.T_in + c.dT_ad * x_ref, rtol=1e-11)
    # DESIGN.md §4: sorted by temperature, lowest first
    assert all(a.T < b.T for a, b in zip(res.states[:-1], res.states[1:], strict=False))


# -- (c) every reported state is a steady state of the full model -----------------------------------------
@SLOW_OK
@given(
    gamma=st.floats(8.0, 60.0),
    B=st.floats(0.5, 25.0),
    log_Da=st.floats(-7.0, 2.0),
    T_in=st.floats(280.0, 450.0),
)
def test_reported_states_have_tiny_residual_and_lie_on_the_adiabat(cstr, ref, gamma, B, log_Da, T_in):
    Da = math.exp(log_Da)
    # a state count is only well defined away from a fold (a double root); keep 1e-6 relative distance
    assume(all(abs(Da / d - 1.0) > 1e-6 for d in _fold_Da(ref, B, gamma)))
    c = cstr(gamma, B, T_in=T_in)
    tau = c.tau(Da)
    res = steady_states(c.sc, tau, T_in)
    assert res.success, res.message
    model = Model(c.sc)
    u = nominal_inputs(c.sc, tau=tau, T_in=T_in)
    x_ref = ref.roots_x(Da, B, gamma)
    # independent root count (Reference.roots_x: dense scan + brentq)
    assert len(res.states) == len(x_ref)
    for s in res.states:
        y = model.pack(c.sc.vessel.h_set, np.array(s.C), s.T, 0.0)
        f = model.rhs(0.0, y, u)
        # analytic: a steady state makes dC/dt and dT/dt vanish; scaled by tau and the feed's magnitudes
        assert np.max(np.abs(f[1:3])) * tau / c.sc.c_in[0] < 1e-10
        # analytic: the energy row vanishes too, relative to T_in/tau
        assert abs(f[3]) * tau / T_in < 1e-10
        # analytic: one adiabatic reaction, T - T_in = dT_ad X (energy balance minus dT_ad times species)
        assert s.T - T_in == pytest.approx(c.dT_ad * s.conversion, rel=1e-9, abs=1e-9 * T_in)
        # analytic: C_A + C_P = C_Af (A -> P conserves moles)
        assert s.C[0] + s.C[1] == pytest.approx(c.sc.c_in[0], rel=1e-12)
        # the core's own polish residual (relative, see steady._polish) is tiny as well
        assert s.residual < 1e-10
        # analytic: dT/dT_in = 1/(dT_in/dT) with T_in(T) = T - dT_ad tau k/(1 + tau k) at fixed tau
        k = float(c.k(s.T))
        dTin_dT = 1.0 - c.dT_ad * tau * k * c.E / s.T**2 / (1.0 + tau * k) ** 2
        assert s.sensitivity == pytest.approx(1.0 / dTin_dT, rel=1e-6, abs=1e-9)
    # Uppal, Ray & Poore 1974 (analytic for beta = 0): without cooling det > 0 forces trace < -1, so an
    # adiabatic first-order CSTR has no oscillatory instability: the states alternate stable, saddle, stable
    expected = ["stable", "saddle", "stable"][: len(res.states)] if len(res.states) != 2 else None
    if expected is not None:
        assert [s.stability for s in res.states] == expected
    # independent roots (Reference.roots_x), relative 1e-8
    np.testing.assert_allclose([s.conversion for s in res.states], x_ref, rtol=1e-8, atol=1e-12)


# -- (d) the explicit one-reaction path and the general path agree ----------------------------------------
class _GeneralOnly(Manifold):
    """The same manifold forced onto the general (Newton in T) path; counts its instances."""

    made = 0

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.explicit = False
        _GeneralOnly.made += 1


@pytest.mark.parametrize(
    ("gamma", "B", "Da", "beta"),
    [
        (20.0, 8.0, 0.04, 0.0),
        (20.0, 8.0, 0.06, 0.0),
        (25.0, 3.0, 0.8, 0.0),
        (20.0, 16.0, 0.05, 3.0),
        (30.0, 24.0, 0.01, 1.0),
    ],
)
def test_explicit_and_general_paths_agree(cstr, monkeypatch, gamma, B, Da, beta):
    c0 = cstr(gamma, B)
    c = cstr(gamma, B, kappa=beta / c0.tau(Da))
    tau = c.tau(Da)
    mf_explicit = Manifold(c.sc)
    # core/manifold.py: one first-order reaction takes the explicit path
    assert mf_explicit.explicit
    explicit = steady_states(c.sc, tau, c.T_in)
    monkeypatch.setattr(steady_mod, "Manifold", _GeneralOnly)
    made = _GeneralOnly.made
    general = steady_states(c.sc, tau, c.T_in)
    # the general path was really taken (else this comparison would prove nothing)
    assert _GeneralOnly.made > made
    assert explicit.success and general.success
    # the same equations by the general path: the same number of states
    assert len(explicit.states) == len(general.states) >= 1
    for a, b in zip(explicit.states, general.states, strict=True):
        # the two paths solve the same equations: agreement to solver accuracy
        assert a.T == pytest.approx(b.T, rel=1e-11)
        # same equations, solver accuracy
        assert a.conversion == pytest.approx(b.conversion, rel=1e-9, abs=1e-12)
        # same equations: same stability class
        assert a.stability == b.stability
        # same equations: same oscillatory flag
        assert a.oscillatory == b.oscillatory
        # same equations: dT/dT_in agrees (a derivative, looser)
        assert a.sensitivity == pytest.approx(b.sensitivity, rel=1e-6)
    # the roots along each coordinate map to the same temperatures
    mf_general = _GeneralOnly(c.sc)
    T_lo, T_hi = mf_explicit.temperature_window(c.T_in, c.T_in, tau)
    s_e = roots_along(mf_explicit, tau, c.T_in, T_lo, T_hi)
    s_g = roots_along(mf_general, tau, c.T_in, T_lo, T_hi)
    T_e = mf_explicit.evaluate(np.full(len(s_e), tau), np.array(s_e)).T
    # same equations: roots in T of the general path = explicit roots mapped to T
    np.testing.assert_allclose(np.sort(T_e), np.sort(s_g), rtol=1e-10)


# -- (e) stability of the three states ---------------------------------------------------------------------
@pytest.mark.parametrize(("gamma", "B", "Da"), [(20.0, 8.0, 0.04), (20.0, 8.0, 0.031), (40.0, 12.0, 0.005)])
def test_stability_low_high_stable_middle_saddle(cstr, ref, gamma, B, Da):
    c = cstr(gamma, B)
    tau = c.tau(Da)
    res = steady_states(c.sc, tau, c.T_in)
    # van Heerden 1953; Uppal, Ray & Poore 1974: low and high states stable, the middle one a saddle
    assert [s.stability for s in res.states] == ["stable", "saddle", "stable"]
    for k, s in enumerate(res.states):
        x, y = _dimless_state(c, s)
        J = ref.jac2(x, y, Da, B, gamma)
        det, tr = np.linalg.det(J), np.trace(J)
        ev = np.array(s.eigenvalues)
        if k == 1:
            # analytic: a saddle has det < 0 of the 2x2 dimensionless Jacobian, and one positive eigenvalue
            assert det < 0
            # DESIGN.md §2: a saddle has exactly one positive real eigenvalue
            assert np.sum(ev.real > 0) == 1
        else:
            # analytic: stable node/focus, det > 0 and trace < 0
            assert det > 0 and tr < 0
            # DESIGN.md §2: stable = every real part negative
            assert np.all(ev.real < 0)
        # the reported eigenvalues [1/s] contain those of the 2x2 Jacobian divided by tau, plus -1/tau for the
        # product species (analytic: C_A + C_P relaxes to C_Af at rate 1/tau)
        expected = np.concatenate((np.linalg.eigvals(J) / tau, [-1.0 / tau]))
        np.testing.assert_allclose(np.sort_complex(ev), np.sort_complex(expected), rtol=1e-7, atol=1e-9 / tau)


# -- (f) jacketed: oscillatory states and the Hopf condition -----------------------------------------------
@pytest.mark.parametrize(("gamma", "B", "beta"), [(20.0, 16.0, 3.0), (500.0, 14.0, 2.0), (20.0, 30.0, 6.0)])
def test_jacketed_oscillatory_flag_matches_trace_and_determinant(cstr, ref, gamma, B, beta):
    # Uppal, Ray & Poore 1974: with cooling (beta > 0) a unique steady state can lose stability through a
    # Hopf bifurcation (trace of the 2x2 Jacobian crosses zero with det > 0) and the tank oscillates
    c0 = cstr(gamma, B)
    seen = {"stable_focus": 0, "unstable_focus": 0, "real": 0}
    for x in np.linspace(0.03, 0.97, 48):
        Da = float(ref.G(x, B, gamma, beta))
        tau = c0.tau(Da)
        c = cstr(gamma, B, kappa=beta / tau)
        res = steady_states(c.sc, tau, c.T_in)
        assert res.success, res.message
        x_ref = ref.roots_x(Da, B, gamma, beta)
        # independent root count (Reference.roots_x with beta)
        assert len(res.states) == len(x_ref)
        for s, xr in zip(res.states, x_ref, strict=True):
            # analytic (independent root), with y = B x / (1 + beta) for y_c = 0
            assert s.conversion == pytest.approx(xr, rel=1e-8, abs=1e-12)
            xs, ys = _dimless_state(c, s)
            # analytic: y = B x / (1 + beta) on the jacketed steady state with y_c = 0
            assert ys == pytest.approx(B * xs / (1 + beta), rel=1e-8, abs=1e-10)
            J = ref.jac2(xs, ys, Da, B, gamma, beta)
            tr, det = np.trace(J), np.linalg.det(J)
            disc = tr * tr - 4 * det
            ev = np.array(s.eigenvalues)
            complex_pair = disc < 0
            # the third eigenvalue (product species) is -1 in dimensionless time: the pair leads iff tr/2 > -1
            assume_away = abs(disc) < 1e-9 * max(tr * tr, abs(det)) or abs(tr / 2 + 1) < 1e-9
            if assume_away:
                continue
            expected_osc = complex_pair and tr / 2 > -1
            # analytic: the leading pair is complex iff tr^2 < 4 det and tr/2 > -1 (the product's eigenvalue)
            assert s.oscillatory == expected_osc, (x, tr, det)
            if complex_pair:
                # analytic: a complex pair
                assert np.sum(np.abs(ev.imag) > 0) == 2
                # analytic: the pair is tr/2 +- i sqrt(det - tr^2/4), in 1/s after dividing by tau
                pair = ev[np.abs(ev.imag) > 0]
                # analytic: real part tr/2 in dimensionless time, divided by tau
                np.testing.assert_allclose(pair.real, tr / 2 / tau, rtol=1e-7, atol=1e-10 / tau)
                # analytic: imaginary part sqrt(4 det - tr^2)/2, divided by tau
                np.testing.assert_allclose(np.abs(pair.imag), math.sqrt(-disc) / 2 / tau, rtol=1e-7)
                seen["unstable_focus" if tr > 0 else "stable_focus"] += 1
                if det > 0 and tr > 0:
                    # trace > 0, det > 0: both of the pair unstable, not a saddle (DESIGN.md §2 "unstable")
                    assert s.stability == "unstable"
            else:
                # analytic: tr^2 >= 4 det gives real eigenvalues
                assert np.all(ev.imag == 0)
                seen["real"] += 1
            if det > 0 and tr < 0:
                # analytic: det > 0 and tr < 0 of the 2x2 (and -1 for the product) is stable
                assert s.stability == "stable"
    # the scan must actually have crossed the Hopf point (else the test proves little)
    assert seen["unstable_focus"] > 0 and seen["stable_focus"] > 0


def test_jacketed_with_colder_coolant_matches_hand_balances(cstr):
    """A jacket whose coolant is colder than the feed: roots of the dimensional balances written out here."""
    from scipy.optimize import brentq

    T_c = 330.0
    c = cstr(20.0, 10.0, kappa=2e-3, T_c=T_c)
    tau = c.tau(0.08)
    res = steady_states(c.sc, tau, c.T_in)
    assert res.success, res.message
    rxn = c.sc.reactions[0]
    J = -rxn.dH / (c.sc.rho * c.sc.cp)
    CAf = c.sc.c_in[0]

    def T_in_of(T):
        k = rxn.k0 * np.exp(-rxn.Ea / (R_GAS * T))
        x = tau * k / (1 + tau * k)
        # analytic: (T_in - T)/tau + J C_Af k (1 - x) - kappa (T - T_c) = 0, solved for T_in
        return T - tau * J * CAf * k * (1 - x) + c.kappa * tau * (T - T_c)

    T = np.linspace(300.0, 700.0, 400_001)
    f = T_in_of(T) - c.T_in
    idx = np.nonzero(np.sign(f[:-1]) * np.sign(f[1:]) < 0)[0]
    T_ref = [brentq(lambda t: T_in_of(t) - c.T_in, T[i], T[i + 1], xtol=1e-13) for i in idx]
    # independent: dense scan + brentq on the hand-written balance finds as many
    assert len(T_ref) == len(res.states) >= 1
    # independent roots, relative 1e-11
    np.testing.assert_allclose([s.T for s in res.states], T_ref, rtol=1e-11)


# -- (g) two reactions A -> P -> D against fsolve from many starting points -------------------------------
def _series_residual(sc, tau, T_in):
    """Hand-written dimensional steady balances of A -> P -> D, scaled to be O(1)."""
    r1, r2 = sc.reactions
    CAf = sc.c_in[0]
    J1, J2 = -r1.dH / (sc.rho * sc.cp), -r2.dH / (sc.rho * sc.cp)
    kappa = sc.UA_jacket / (sc.rho * sc.cp * sc.vessel.V_set)

    def F(z):
        a, p, d, theta = z
        T = 300.0 * theta
        k1 = r1.k0 * math.exp(-r1.Ea / (R_GAS * T))
        k2 = r2.k0 * math.exp(-r2.Ea / (R_GAS * T))
        ra, rp = k1 * a * CAf, k2 * p * CAf
        return [
            (CAf - a * CAf) / tau * tau / CAf - ra * tau / CAf,
            (-p * CAf) / tau * tau / CAf + (ra - rp) * tau / CAf,
            (-d * CAf) / tau * tau / CAf + rp * tau / CAf,
            ((T_in - T) / tau + J1 * ra + J2 * rp - kappa * (T - sc.T_c)) * tau / 300.0,
        ]

    return F


@pytest.mark.slow
@pytest.mark.parametrize(("tau", "T_in"), [(1000.0, 280.0), (1000.0, 250.0), (1000.0, 295.0), (200.0, 300.0)])
def test_two_reactions_against_fsolve(series, tau, T_in):
    sc = series()
    res = steady_states(sc, tau, T_in)
    assert res.success, res.message
    F = _series_residual(sc, tau, T_in)
    rng = np.random.default_rng(1974)
    found = []
    starts = [(1.0, 0.0, 0.0, t / 300.0) for t in np.linspace(240.0, 720.0, 97)]
    starts += [tuple(rng.uniform(0, 1, 3)) + (rng.uniform(240.0, 720.0) / 300.0,) for _ in range(200)]
    for z0 in starts:
        z, info, ier, _ = fsolve(F, z0, full_output=True, xtol=1e-13)
        if ier != 1 or np.max(np.abs(F(z))) > 1e-10 or np.min(z[:3]) < -1e-9:
            continue
        if not any(abs(300.0 * z[3] - T) < 1e-6 for T in found):
            found.append(300.0 * z[3])
    found.sort()
    ours = [s.T for s in res.states]
    # scipy.optimize.fsolve (MINPACK hybrd) from 297 starting points, on balances written out here
    assert len(found) == len(ours), (found, ours)
    # fsolve roots with tiny residual, relative 1e-9
    np.testing.assert_allclose(ours, found, rtol=1e-9)
    for s in res.states:
        z = (s.C[0] / sc.c_in[0], s.C[1] / sc.c_in[0], s.C[2] / sc.c_in[0], s.T / 300.0)
        # the reported states satisfy the hand-written balances
        assert np.max(np.abs(F(z))) < 1e-9


def test_two_reactions_five_states(series):
    # five steady states where the two S-shapes overlap (the fixture's design, checked by fsolve above);
    # alternate stable/saddle as for any scalar steady-state equation with T_in(T) (analytic: the sign of
    # dT_in/dT alternates between neighbouring simple roots)
    res = steady_states(series(), 1000.0, 280.0)
    assert [s.stability for s in res.states] == ["stable", "saddle", "stable", "saddle", "stable"]


# -- overrides of the feed and coolant -------------------------------------------------------------------
def test_feed_concentration_override_scales_B(cstr, ref):
    # analytic: B = dT_ad gamma / T_in with dT_ad = (-dH) C_Af / (rho cp), so doubling C_Af doubles B
    c = cstr(20.0, 4.0)
    Da = 0.04
    res = steady_states(c.sc, c.tau(Da), c.T_in, c_in=(2 * c.sc.c_in[0], 0.0))
    # independent roots for B = 8 (three states at Da = 0.04)
    np.testing.assert_allclose([s.conversion for s in res.states], ref.roots_x(Da, 8.0, 20.0), rtol=1e-9)


def test_coolant_temperature_override_matches_the_scenario_value(cstr):
    c0 = cstr(20.0, 16.0)
    tau = c0.tau(0.05)
    c = cstr(20.0, 16.0, kappa=3.0 / tau)
    via_override = steady_states(c.sc, tau, c.T_in, T_c=c.T_in - 25.0)
    via_scenario = steady_states(c.sc.with_changes(T_c=c.T_in - 25.0), tau, c.T_in)
    # the same equations either way
    np.testing.assert_allclose([s.T for s in via_override.states], [s.T for s in via_scenario.states], rtol=1e-12)
    # analytic: a colder coolant cools the tank (T decreases with T_c on a single stable state)
    assert len(via_override.states) == 1
    assert via_override.states[0].T < steady_states(c.sc, tau, c.T_in).states[0].T


# -- (h) bad inputs ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("tau", [0.0, -10.0, float("nan"), float("inf")])
def test_bad_residence_time(cstr, tau):
    c = cstr()
    with pytest.raises(ModelInputError, match="residence time") as err:
        steady_states(c.sc, tau, c.T_in)
    # DEVELOPERS.md: ModelInputError.field names the input
    assert err.value.field == "residence_time"


@pytest.mark.parametrize("T_in", [float("nan"), 0.0, -5.0, float("inf")])
def test_bad_feed_temperature(cstr, T_in):
    c = cstr()
    with pytest.raises(ModelInputError, match="feed temperature") as err:
        steady_states(c.sc, 100.0, T_in)
    # DEVELOPERS.md: ModelInputError.field names the input
    assert err.value.field == "feed_temperature"


def test_bad_feed_concentration(cstr):
    c = cstr()
    with pytest.raises(ModelInputError, match="feed concentrations") as err:
        steady_states(c.sc, 100.0, c.T_in, c_in=(-1.0, 0.0))
    # DEVELOPERS.md: ModelInputError.field names the input (dotted scenario path)
    assert err.value.field == "feed.concentrations"


def test_to_dict_follows_the_answer_format(cstr):
    c = cstr(20.0, 8.0)
    doc = steady_states(c.sc, c.tau(0.04), c.T_in).to_dict()
    # DESIGN.md §4: keys of the steady-states answer
    assert set(doc["operating_point"]) >= {"residence_time_s", "feed_temperature_K"}
    # analytic (fixture Da = 0.04 between the folds): stable, saddle, stable
    assert [s["stability"] for s in doc["states"]] == ["stable", "saddle", "stable"]
    for s in doc["states"]:
        # DESIGN.md §4: keys of each state
        assert set(s) >= {
            "temperature_K",
            "concentrations_mol_per_m3",
            "conversion",
            "stability",
            "oscillatory",
            "eigenvalues_per_s",
            "valve_opening",
        }
        # DESIGN.md §4: eigenvalues as [re, im] pairs
        assert all(len(pair) == 2 for pair in s["eigenvalues_per_s"])
