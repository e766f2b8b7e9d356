"""Issue 9: the hard cases an independent review found (fast, strongly activated, hot, multi-reaction, odd
feeds). Each test builds its scenario here (invented data, not from the demos), names the defect it keeps
fixed, and computes its check values itself: analytic where the balances allow it, otherwise an independent
solve of the balance equations written out in the test (scipy's fsolve / brentq), not exomap's manifold.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from exomap.core import branch as branch_mod
from exomap.core import steady as steady_mod
from exomap.core import valve as valve_mod
from exomap.core.branch import branch
from exomap.core.check import check_setpoint
from exomap.core.errors import ModelInputError
from exomap.core.manifold import Manifold
from exomap.core.opmap import operating_map
from exomap.core.regions import CODE
from exomap.core.scenario import EQUAL_PERCENTAGE, R_GAS, Limits, Reaction, Scenario, Valve, Vessel, validate
from exomap.core.steady import steady_states
from scipy.optimize import brentq, fsolve


# -- defect 3: a feed without the reactant ------------------------------------------------------------------
def test_feed_without_the_reactant_is_stable_on_the_map_and_the_point_solver(cstr):
    """Defect 3: only product in the feed. No reaction can run, so the one steady state is T = the mixing
    temperature of feed and jacket and it is stable; the map used to mark every cell ``unstable``
    (0 * (-inf) = NaN in the stability test)."""
    c = cstr(20.0, 8.0, kappa=1e-3, T_c=340.0)
    sc = replace(c.sc, c_in=(0.0, 500.0))
    tau, T_in = 1000.0, 350.0
    res = steady_states(sc, tau, T_in)
    assert res.success and len(res.states) == 1
    # analytic: no reaction, so (T_in - T)/tau - kappa (T - T_c) = 0
    T_expected = (T_in + c.kappa * tau * 340.0) / (1.0 + c.kappa * tau)
    assert res.states[0].T == pytest.approx(T_expected, rel=1e-12)
    assert res.states[0].stability == "stable"
    m = operating_map(sc, tau_range=(100.0, 1e4), T_in_range=(300.0, 400.0), points=(12, 10))
    assert m.success
    # analytic: one stable state everywhere, the mixing temperature stays below the 2000 K limit
    assert np.all(m.state_count == 1)
    assert np.all(m.region == CODE["stable"])
    b = branch(sc, "feed_temperature", tau, T_in)
    # analytic: every point of the feed-temperature branch is that stable state
    assert b.success and b.points and all(p.stable for p in b.points)


# -- defect 6: an isola along the residence time ------------------------------------------------------------
def _isola_case(cstr):
    # first-order A -> P (gamma 20, B 16), jacket with a fixed UA and the coolant 50 K below the feed: along
    # the residence time the hot states form a closed curve (an isola) between about 1.8 s and 123 s
    return cstr(20.0, 16.0, kappa=1e-2, k_ref=1e-3, T_c=300.0)


def _isola_folds_independent(c):
    """Turning points of the isola from the dimensionless balances written here (conftest.Reference form):
    x = Da (1 - x) exp(y/(1 + y/gamma)), y = (B x + beta y_c)/(1 + beta), beta = kappa tau, Da = k_ref tau;
    the fold is where d/dw of the scalar equation phi(w) = 0 vanishes as well; fsolve in (w, ln tau)."""
    g, B, yc = c.gamma, c.B, c.gamma * (300.0 - c.T_in) / c.T_in

    def phi(w, lt):
        tau = math.exp(lt)
        beta, Da = c.kappa * tau, c.k_ref * tau
        x = 1.0 / (1.0 + math.exp(-w))
        y = (B * x + beta * yc) / (1.0 + beta)
        return w - y / (1.0 + y / g) - math.log(Da)

    def eqs(v):
        w, lt = v
        h = 1e-6
        return [phi(w, lt), (phi(w + h, lt) - phi(w - h, lt)) / (2 * h)]

    out = []
    for guess in ((2.0, math.log(1.8)), (0.0, math.log(120.0))):
        sol, _, ier, _ = fsolve(eqs, guess, full_output=True, xtol=1e-13)
        assert ier == 1
        out.append(math.exp(sol[1]))
    return sorted(out)


def test_isola_points_and_turning_points_are_listed_once(cstr):
    """Defect 6: both directions of a closed curve were traced to the end, so its points and turning points
    were listed twice."""
    c = _isola_case(cstr)
    b = branch(c.sc, "residence_time", 1000.0, c.T_in, lo=1.0, hi=1e7)
    assert b.success
    iso = [p for p in b.points if p.T > 380.0 and p.tau < 200.0]
    assert len(iso) > 10
    keys = {(round(math.log(p.tau), 9), round(p.T, 6)) for p in iso}
    # every point once
    assert len(keys) == len(iso)
    taus = sorted(t.tau for t in b.turning_points if t.T > 380.0)
    # independent (fsolve on the dimensionless balances above): the isola's two turning points, each once
    np.testing.assert_allclose(taus, _isola_folds_independent(c), rtol=1e-6)


# -- defect 8: an opening below the valve's range -----------------------------------------------------------
def _equal_percentage_case(cstr):
    # equal-percentage valve (R = 50) far too large for a small flow: the inverse characteristic
    # x = 1 + ln(f)/ln(R) is negative when f = q/q_full < 1/R
    c = cstr(20.0, 2.0)
    return replace(c.sc, valve=Valve(Kv=1500.0, characteristic=EQUAL_PERCENTAGE, rangeability=50.0, opening=0.5))


def test_opening_below_the_valve_range_is_reported_in_words_not_as_a_negative_number(cstr):
    """Defect 8: an equal-percentage valve at a low flow was reported as -27 % open."""
    sc = _equal_percentage_case(cstr)
    x = valve_mod.opening_for_flow(sc, sc.q_in)
    # analytic: the flow needs f = q/(Kv/3600 sqrt(dp/1e5 / (rho/rho0))) < 1/R, so 1 + ln f/ln R < 0
    assert x < 0
    res = steady_states(sc, sc.tau_nominal, sc.T_in)
    d = res.to_dict()["states"][0]
    assert d["valve_opening"] is None
    assert d["valve_opening_status"] == "below_range"
    r = check_setpoint(sc)
    m = r.margin("valve_opening_to_usable_range_percent")
    assert m.value is None and "below its range" in m.note
    assert r.verdict in ("marginal", "outside")
    assert any("below its range" in s for s in r.reasons)
    assert not any(f"{100 * x:.1f} %" in s for s in r.reasons)
    mp = operating_map(sc, tau_range=(sc.tau_nominal / 2, sc.tau_nominal * 2), points=(5, 4)).to_dict()
    # no opening outside 0..1 is shown; those columns are valve-limited
    assert all(v is None or 0.0 <= v <= 1.0 for v in mp["valve_opening"])
    assert all(all(row) for row in mp["valve_limited"])


def test_opening_above_the_valve_range_is_reported_in_words(cstr):
    """Defect 8's twin: a valve too small would need more than 100 % open."""
    c = cstr(20.0, 2.0)
    sc = replace(c.sc, valve=Valve(Kv=0.5, opening=0.5))
    # analytic: a linear valve needs x = f > 1 when q exceeds its full-open flow
    assert valve_mod.opening_for_flow(sc, sc.q_in) > 1
    d = steady_states(sc, sc.tau_nominal, sc.T_in).to_dict()["states"][0]
    assert d["valve_opening"] is None and d["valve_opening_status"] == "above_range"


# -- defect 1: three reactions, single points used to crash ---------------------------------------------------
def _three_reactions(UA: float = 20000.0, T_c: float = 300.0) -> Scenario:
    """A -> B -> C plus 2A -> D, jacketed, feed 10 mol/L of A (invented data)."""
    r1 = Reaction("A -> B", (-1.0, 1.0, 0.0, 0.0), (1.0, 0.0, 0.0, 0.0), 5e8, 75e3, -100e3)
    r2 = Reaction("B -> C", (0.0, -1.0, 1.0, 0.0), (0.0, 1.0, 0.0, 0.0), 3e11, 100e3, -120e3)
    r3 = Reaction("2A -> D", (-2.0, 0.0, 0.0, 1.0), (2.0, 0.0, 0.0, 0.0), 1e4, 70e3, -80e3)
    V = math.pi * 1.2**2 / 4 * 1.5
    return Scenario(
        species=("A", "B", "C", "D"),
        rho=1000.0,
        cp=4000.0,
        vessel=Vessel(D=1.2, H=2.0, h_set=1.5),
        valve=Valve(Kv=40.0, opening=0.5),
        reactions=(r1, r2, r3),
        q_in=V / 600.0,
        T_in=300.0,
        c_in=(10000.0, 0.0, 0.0, 0.0),
        limits=Limits(T_max=500.0),
        UA_jacket=UA,
        T_c=T_c,
        title="three reactions (test)",
        description="Invented test data.",
    )


def _three_reaction_states(sc: Scenario, tau: float, T_in: float) -> list[float]:
    """Steady temperatures from the balances written out here: at fixed T the species balances give C_A from
    2 tau k3 C_A^2 + (1 + tau k1) C_A - C_A,in = 0, C_B = tau k1 C_A/(1 + tau k2); the energy balance
    f(T) = T_in - T - kappa tau (T - T_c) + tau sum_j J_j r_j is then scanned densely in T and each sign
    change refined by brentq."""
    r1, r2, r3 = sc.reactions
    V = sc.vessel.V_set
    kappa = sc.UA_jacket / (sc.rho * sc.cp * V)
    J = [-r.dH / (sc.rho * sc.cp) for r in sc.reactions]

    def f(T: float) -> float:
        k1, k2, k3 = (r.k0 * math.exp(-r.Ea / (R_GAS * T)) for r in (r1, r2, r3))
        a, b, c = 2 * tau * k3, 1 + tau * k1, -sc.c_in[0]
        CA = 2 * -c / (b + math.sqrt(b * b - 4 * a * c))  # the positive root, without cancellation
        CB = tau * k1 * CA / (1 + tau * k2)
        rates = (k1 * CA, k2 * CB, k3 * CA * CA)
        return T_in - T - kappa * tau * (T - sc.T_c) + tau * sum(j * r for j, r in zip(J, rates, strict=True))

    Ts = np.linspace(200.0, 1400.0, 24001)
    fs = np.array([f(float(T)) for T in Ts])
    return [brentq(f, Ts[i], Ts[i + 1], xtol=1e-12) for i in np.nonzero(fs[:-1] * fs[1:] < 0)[0]]


# points where the warm-started isothermal solve used to stall and brentq raised (found by a random search)
THREE_REACTION_POINTS = [
    (1115.0298626945478, 392.5695544488903),
    (37.72579937783821, 392.29741707058656),
    (176.73632006554453, 313.49896734588634),
    (1578.9731706444672, 254.13386698646025),
    (208.41398900843836, 368.2643055142606),
    (34.36899152393397, 310.46694796706936),
    (2353.7702665084544, 289.0146171605835),
    (1495.1238132620595, 279.444532767213),
]


@pytest.mark.parametrize(("tau", "T_in"), THREE_REACTION_POINTS)
def test_three_reactions_every_point_answers_with_the_right_states(tau, T_in):
    """Defect 1: A -> B -> C plus 2A -> D raised ValueError from steady_states at about 1 point in 10 (a
    damped isothermal Newton step that had stopped moving was taken as converged)."""
    sc = _three_reactions()
    res = steady_states(sc, tau, T_in)
    assert res.success, res.message
    # independent: the scalar energy balance of the closed-form mass balances, scanned and refined here
    expected = _three_reaction_states(sc, tau, T_in)
    assert len(res.states) == len(expected)
    np.testing.assert_allclose([s.T for s in res.states], expected, rtol=1e-9)
    for s in res.states:
        assert min(s.C) >= 0.0


def test_three_reactions_branch_and_map_answer():
    """Defect 1 on the branch and the map of the same scenario: no exception, complete answers, and the
    map's state count at a few cells equals the independent count."""
    sc = _three_reactions()
    b = branch(sc, "residence_time", 200.0, 313.5, lo=10.0, hi=5000.0)
    assert b.success and b.points
    b = branch(sc, "feed_temperature", 1115.0, 330.0, lo=250.0, hi=400.0)
    assert b.success and b.points
    m = operating_map(sc, tau_range=(20.0, 3000.0), T_in_range=(250.0, 400.0), points=(8, 6))
    assert m.success, m.message
    for i, j in ((0, 0), (2, 5), (5, 3), (3, 7)):
        # independent count (closed-form mass balances, dense scan)
        assert m.state_count[i, j] == len(_three_reaction_states(sc, float(m.tau[j]), float(m.T_in[i])))


def test_three_reactions_check_answers():
    """Defect 1 on the check: it used to raise the same ValueError."""
    r = check_setpoint(_three_reactions(), tau=37.72579937783821, T_in=392.29741707058656)
    assert r.verdict in ("inside", "marginal", "outside")


# -- defect 2: hot states near full conversion ----------------------------------------------------------------
def _hot(k0: float, T_max: float = 600.0) -> Scenario:
    """A -> P, first order, Ea = 200 kJ/mol, adiabatic rise 250 K, feed 1 mol/L (invented data)."""
    V = math.pi * 1.2**2 / 4 * 1.5
    dH = -250.0 * 1000.0 * 4000.0 / 1000.0
    return Scenario(
        species=("A", "P"),
        rho=1000.0,
        cp=4000.0,
        vessel=Vessel(D=1.2, H=2.0, h_set=1.5),
        valve=Valve(Kv=40.0, opening=0.5),
        reactions=(Reaction("A -> P", (-1.0, 1.0), (1.0, 0.0), k0, 200e3, dH),),
        q_in=V / 60.0,
        T_in=420.0,
        c_in=(1000.0, 0.0),
        limits=Limits(T_max=T_max),
        title="hot first-order reaction (test)",
        description="Invented test data.",
    )


def _hot_states(sc: Scenario, tau: float, T_in: float) -> list[tuple[float, float]]:
    """(T, C_A) of every steady state of the adiabatic first-order tank, written in the log-odds of the
    conversion w = ln(X/(1 - X)): the mass balance is w = ln(tau k(T)) with T = T_in + dT_ad X, scanned over
    w in [-60, 160] and refined by brentq; C_A = C_A,in/(1 + e^w) has no cancellation (analytic)."""
    rx = sc.reactions[0]
    dT_ad = -rx.dH * sc.c_in[0] / (sc.rho * sc.cp)

    def f(w: float) -> float:
        X = 1.0 / (1.0 + math.exp(-w))
        T = T_in + dT_ad * X
        return w - (math.log(tau * rx.k0) - rx.Ea / (R_GAS * T))

    ws = np.linspace(-60.0, 160.0, 22001)
    fs = np.array([f(float(w)) for w in ws])
    out = []
    for i in np.nonzero(fs[:-1] * fs[1:] < 0)[0]:
        w = brentq(f, ws[i], ws[i + 1], xtol=1e-13)
        out.append((T_in + dT_ad / (1.0 + math.exp(-w)), sc.c_in[0] / (1.0 + math.exp(w))))
    return out


@pytest.mark.parametrize("k0", [1e30, 1e33, 1e44])
def test_hot_state_near_full_conversion_is_found(k0):
    """Defect 2: with Ea = 200 kJ/mol and a 250 K adiabatic rise, steady_states(60 s, 420 K) said 'no steady
    state converged' (the extent coordinate cannot resolve 1 - X below ~1e-15). With k0 = 1e44 the
    remaining reactant is about 1e-30 of the feed."""
    sc = _hot(k0)
    res = steady_states(sc, 60.0, 420.0)
    assert res.success, res.message
    # independent: the log-odds form of the adiabatic first-order balances, solved here
    expected = _hot_states(sc, 60.0, 420.0)
    assert len(res.states) == len(expected) == 1
    (T, CA) = expected[0]
    st = res.states[0]
    assert st.stability == "stable"
    assert st.T == pytest.approx(T, rel=1e-12)
    # the remaining reactant keeps its relative precision however small it is
    assert st.C[0] == pytest.approx(CA, rel=1e-9)
    assert st.C[0] > 0


def test_hot_map_has_a_state_in_every_cell_and_calls_them_runaway():
    """Defect 2 on the map: 48 % of its cells had 0 states, were labelled 'unstable' and the map said
    success. Now every cell has its states and a stable one above T_max = 600 K is 'runaway'."""
    sc = _hot(1e30)
    m = operating_map(sc, tau_range=(10.0, 600.0), T_in_range=(380.0, 460.0), points=(12, 9))
    assert m.success, m.message
    assert np.all(m.state_count >= 1)
    for i in range(0, 9, 2):
        for j in range(0, 12, 3):
            states = _hot_states(sc, float(m.tau[j]), float(m.T_in[i]))
            # independent count and hottest temperature (log-odds form above)
            assert m.state_count[i, j] == len(states)
            hot = max(T for T, _ in states)
            if hot > 600.0 and len(states) in (1, 3):  # the hottest state of an S-curve is stable
                assert m.region[i, j] == CODE["runaway"]


# -- defect 7: order 0 in a reactant that can run out ---------------------------------------------------------
def _zero_order_in_B(c_B: float) -> Scenario:
    """A + B -> P, first order in A and order 0 in B, adiabatic (invented data)."""
    V = math.pi * 1.2**2 / 4 * 1.5
    return Scenario(
        species=("A", "B", "P"),
        rho=1000.0,
        cp=4000.0,
        vessel=Vessel(D=1.2, H=2.0, h_set=1.5),
        valve=Valve(Kv=40.0, opening=0.5),
        reactions=(Reaction("A + B -> P", (-1.0, -1.0, 1.0), (1.0, 0.0, 0.0), 1e10, 80e3, -150e3),),
        q_in=V / 3600.0,
        T_in=320.0,
        c_in=(1000.0, c_B, 0.0),
        limits=Limits(T_max=500.0),
        title="zero order in B (test)",
        description="Invented test data.",
    )


def test_order_zero_in_a_reactant_that_can_run_out_is_refused_naming_the_field():
    """Defect 7: order 0 in B with less B than A in the feed gave negative concentrations, a conversion of
    -27 %, duplicated states and a simulation settling where steady_states never looked. B can run out, so the
    scenario is refused, naming reactions[0].orders.B."""
    sc = _zero_order_in_B(600.0)
    with pytest.raises(ModelInputError, match="order 0 in B") as info:
        validate(sc)
    assert info.value.field == "reactions[0].orders.B"
    with pytest.raises(ModelInputError, match="order 0 in B"):
        steady_states(sc, 3600.0, 320.0)


def test_order_zero_in_a_reactant_in_excess_is_accepted_and_never_negative():
    """Defect 7, the accepted case: B fed in excess of A cannot run out (pseudo-first-order kinetics)."""
    sc = _zero_order_in_B(1500.0)
    validate(sc)
    for tau, T_in in ((3600.0, 320.0), (600.0, 300.0), (20000.0, 340.0)):
        res = steady_states(sc, tau, T_in)
        assert res.success, res.message
        # independent: the first-order adiabatic tank in the log-odds form (conversion of A), solved here
        expected = _hot_states(_first_order_twin(sc), tau, T_in)
        np.testing.assert_allclose([s.T for s in res.states], [T for T, _ in expected], rtol=1e-10)
        for s in res.states:
            assert min(s.C) >= 0.0
            # analytic: B falls by what A falls
            assert s.C[1] == pytest.approx(1500.0 - (1000.0 - s.C[0]), rel=1e-9)
    # a feed override that makes B the limiting reactant is refused the same way
    with pytest.raises(ModelInputError, match="order 0 in B"):
        steady_states(sc, 3600.0, 320.0, c_in=(1000.0, 500.0, 0.0))


def _first_order_twin(sc: Scenario) -> Scenario:
    """The same tank with B left out (its order is 0 and it never runs out): A -> P, first order."""
    rx = sc.reactions[0]
    return replace(
        sc,
        species=("A", "P"),
        reactions=(Reaction("A -> P", (-1.0, 1.0), (1.0, 0.0), rx.k0, rx.Ea, rx.dH),),
        c_in=(sc.c_in[0], 0.0),
    )


# -- defect 4: two folds inside one sample, next to a cusp ----------------------------------------------------
class _GeneralOnly(Manifold):
    """The manifold forced onto its general path (T as the coordinate), as two reactions would be."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.explicit = False


@pytest.mark.parametrize("general", [False, True])
def test_fold_pair_within_one_sample_is_not_missed(cstr, ref, monkeypatch, general):
    """Defect 4: 1 state reported as success where there are 3, and no turning point on the feed-temperature
    branch, when both folds lie inside one sample (B only 1e-7 above the cusp: the folds are 0.02 K apart)."""
    if general:
        monkeypatch.setattr(steady_mod, "Manifold", _GeneralOnly)
        monkeypatch.setattr(branch_mod, "Manifold", _GeneralOnly)
    gamma = 20.0
    # analytic: the adiabatic first-order tank has its cusp at B = 4 gamma/(gamma - 4) (conftest.Reference)
    B = ref.B_cusp(gamma) * (1 + 1e-7)
    Da_lo, Da_hi = sorted(ref.G(ref.fold_x(B, gamma), B, gamma))
    Da = math.sqrt(Da_lo * Da_hi)
    c = cstr(gamma, B)
    # independent (dense scan + brentq on the dimensionless balance): three states between the folds
    expected = ref.roots_x(Da, B, gamma)
    assert len(expected) == 3
    res = steady_states(c.sc, c.tau(Da), c.T_in)
    assert res.success
    assert len(res.states) == 3
    np.testing.assert_allclose([s.conversion for s in res.states], expected, rtol=1e-7)
    b = branch(c.sc, "feed_temperature", c.tau(Da), c.T_in, lo=c.T_in - 5.0, hi=c.T_in + 5.0)
    kinds = sorted(t.kind for t in b.turning_points)
    assert kinds == ["extinction", "ignition"]
    ext = next(t.T_in for t in b.turning_points if t.kind == "extinction")
    ign = next(t.T_in for t in b.turning_points if t.kind == "ignition")
    # the point itself has three states, so it lies between the extinction and the ignition feed temperature
    assert ext < c.T_in < ign


# -- defect 5: Hopf points where the pair is complex at one end of a step only ------------------------------
def _series_jacobian_eigenvalues(sc: Scenario, tau: float, T_in: float, T_guess: float) -> np.ndarray:
    """Eigenvalues of the species+energy Jacobian of A -> P -> D at its steady state near ``T_guess``, from
    the dimensional balances written here: the steady state by fsolve, the Jacobian by central differences."""
    r1, r2 = sc.reactions
    V = sc.vessel.V_set
    kappa = sc.UA_jacket / (sc.rho * sc.cp * V)
    J1, J2 = (-r.dH / (sc.rho * sc.cp) for r in (r1, r2))
    cA0 = sc.c_in[0]

    def rhs(z):
        CA, CP, T = z
        k1 = r1.k0 * math.exp(-r1.Ea / (R_GAS * T))
        k2 = r2.k0 * math.exp(-r2.Ea / (R_GAS * T))
        q1, q2 = k1 * CA, k2 * CP
        return np.array(
            [
                (cA0 - CA) / tau - q1,
                -CP / tau + q1 - q2,
                (T_in - T) / tau + J1 * q1 + J2 * q2 - kappa * (T - sc.T_c),
            ]
        )

    def state_at(T):
        k1 = r1.k0 * math.exp(-r1.Ea / (R_GAS * T))
        k2 = r2.k0 * math.exp(-r2.Ea / (R_GAS * T))
        CA = cA0 / (1 + tau * k1)
        return [CA, tau * k1 * CA / (1 + tau * k2), T]

    z = fsolve(rhs, state_at(T_guess), xtol=1e-12)
    # the balances close at the state found (relative to the feed and tau)
    assert np.max(np.abs(rhs(z)) * tau / np.array([cA0, cA0, z[2]])) < 1e-9
    h = np.array([1e-6 * max(abs(z[0]), 1.0), 1e-6 * max(abs(z[1]), 1.0), 1e-6 * z[2]])
    Jm = np.column_stack([(rhs(z + h[i] * np.eye(3)[i]) - rhs(z - h[i] * np.eye(3)[i])) / (2 * h[i]) for i in range(3)])
    return np.linalg.eigvals(Jm)


def test_hopf_point_next_to_a_fold_is_found_on_the_residence_time_branch(series):
    """Defect 5: along the residence time a Hopf point where the leading pair is complex at one end of the
    continuation step only (next to a fold) was missed: 2 of the 3 Hopf points were reported here."""
    sc = series(UA=5000.0, T_c=300.0, T_in=300.0)
    b = branch(sc, "residence_time", 1000.0, 300.0, lo=50.0, hi=5e4)
    assert b.success
    assert len(b.hopf_points) == 3
    for hp in b.hopf_points:
        ev = _series_jacobian_eigenvalues(sc, hp.tau, 300.0, hp.T)
        lead = ev[np.argmax(ev.real)]
        # independent (fsolve + finite-difference Jacobian of the balances above): a complex pair on the axis
        assert abs(lead.imag) > 0
        assert abs(lead.real) <= 1e-5 * abs(lead.imag)
        # and the pair crosses: the real part has opposite signs 1 % to either side in residence time
        sides = []
        for f in (0.99, 1.01):
            e2 = _series_jacobian_eigenvalues(sc, hp.tau * f, 300.0, hp.T)
            sides.append(float(np.max(e2.real)))
        assert sides[0] * sides[1] < 0
