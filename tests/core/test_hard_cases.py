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
from exomap.core import valve as valve_mod
from exomap.core.branch import branch
from exomap.core.check import check_setpoint
from exomap.core.opmap import operating_map
from exomap.core.regions import CODE
from exomap.core.scenario import EQUAL_PERCENTAGE, Valve
from exomap.core.steady import steady_states
from scipy.optimize import fsolve


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
