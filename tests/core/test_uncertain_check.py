"""The setpoint check under uncertain data (exomap.core.uncertain_check, DESIGN.md §11).

Checks: the per-sample margins taken from the manifold's folds agree with the check's own margins from traced
branches; with no spread every sample gets the nominal verdict, so the probabilities are exactly 0 or 1 and
the quantiles collapse onto the nominal state; the bound is the exact binomial bound; a bound above the policy
adds a reason and turns ``inside`` into ``marginal``.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from exomap.core import check as check_mod
from exomap.core.steady import steady_states
from exomap.core.uncertain_check import _fold_margins, stacked_fold_margins, uncertain_check
from exomap.core.uncertainty import UncertainParameter, UncertaintySpec, draw, upper_bound


@pytest.fixture(scope="module")
def adiabatic(cstr):
    # gamma 20, B 8 at 350 K (adiabatic rise 140 K), maximum temperature 440 K: see test_uncertainty.py
    return cstr(20.0, 8.0, T_in=350.0, T_max=440.0)


def _ea(sd: float) -> UncertaintySpec:
    return UncertaintySpec((UncertainParameter("reactions[0].activation_energy", "normal", sd=sd),), samples=8)


@pytest.mark.parametrize(("tau", "T_in"), [(1000.0, 300.0), (60.0, 345.0), (150.0, 320.0)])
def test_fold_margins_agree_with_the_traced_branches(adiabatic, tau, T_in):
    # invariant: two computations of the same turning points (the branch tracer of core.branch and the
    # refined folds of core.opmap) give the same margins; the residence-time one is found on a scan and refined
    # by false position (observed within 1e-5 % points of the traced one; tolerance 1e-4), and only looked for
    # up to twice its threshold
    sc = adiabatic.sc
    states = steady_states(sc, tau, T_in).states
    idx, _ = check_mod.pick_state(states, None)
    T = float(states[idx].T)
    ours = {m.key: m.value for m in _fold_margins(sc, tau, T_in, T, hot=False)}
    theirs = {m.key: m.value for m in check_mod._branch_margins(sc, tau, T_in, states[idx], len(states), idx)}
    assert ours["feed_temperature_rise_to_ignition_K"] == pytest.approx(
        theirs["feed_temperature_rise_to_ignition_K"], abs=1e-6
    )
    want = theirs["residence_time_rise_to_ignition_percent"]
    got = ours["residence_time_rise_to_ignition_percent"]
    if want is not None and want <= 50.0:
        assert got == pytest.approx(want, abs=1e-4)
    else:
        assert got is None
    assert ours["feed_temperature_drop_to_extinction_K"] is None is theirs["feed_temperature_drop_to_extinction_K"]


@pytest.mark.parametrize(("tau", "T_in", "verdict"), [(1000.0, 300.0, "marginal"), (60.0, 345.0, "outside")])
def test_no_spread_gives_the_nominal_verdict_in_every_sample(adiabatic, tau, T_in, verdict):
    # analytic: with zero spread every sample is the nominal scenario
    r = uncertain_check(adiabatic.sc, _ea(0.0), tau=tau, T_in=T_in)
    assert r.nominal.verdict == verdict
    assert {o.verdict for o in r.outcomes} == {verdict}
    b = r.to_dict()["uncertainty"]
    assert b["probability_outside"] == (1.0 if verdict == "outside" else 0.0)
    assert b["probability_marginal_or_worse"] == 1.0
    T = float(r.nominal.state.T)
    assert b["quantiles"]["temperature_K"] == pytest.approx({"q05": T, "q50": T, "q95": T}, rel=1e-9)
    assert b["quantiles"]["mtsr_K"]["q50"] == pytest.approx(r.nominal.safety.mtsr, rel=1e-9)
    # reference: the exact one-sided Clopper-Pearson bound (checked against scipy in test_uncertainty.py)
    assert b["upper_bound_95"]["outside"] == pytest.approx(float(upper_bound(8 if verdict == "outside" else 0, 8)))


def test_a_bound_above_the_policy_is_a_reason(adiabatic):
    # with 8 samples and none outside the bound is 1 - 0.05**(1/8) = 0.312 (analytic), above any policy
    # below it: the nominally marginal point keeps its verdict and gains the reason; with the policy at 0.5
    # there is no such reason
    r = uncertain_check(adiabatic.sc, _ea(500.0), tau=1000.0, T_in=300.0)
    assert r.verdict == "marginal"
    assert any("max_unsafe_probability" in x and "take at least 59" in x for x in r.reasons)
    lax = replace(adiabatic.sc, policy=replace(adiabatic.sc.policy, max_unsafe_probability=0.5))
    r2 = uncertain_check(lax, _ea(500.0), tau=1000.0, T_in=300.0)
    assert not any("max_unsafe_probability" in x for x in r2.reasons)


@pytest.mark.parametrize(
    ("case", "tau", "T_in"),
    [("adiabatic", 1000.0, 300.0), ("adiabatic", 60.0, 345.0), ("jacketed", 300.0, 300.0), ("series", 1000.0, 255.0)],
)
def test_stacked_fold_margins_equal_each_samples_own(cstr, series, case, tau, T_in):
    # invariant: the margins of all samples from one stacked pass are those of each sample's own manifold (the
    # folds are refined to machine precision either way; the residence-time crossings to 1e-6 K of the fold's
    # feed temperature)
    if case == "series":
        sc = series(UA=200.0, T_c=260.0, T_max=500.0)
    else:
        sc = cstr(20.0, 8.0 if case == "adiabatic" else 12.0, T_in=350.0, T_max=440.0,
                  kappa=0.0 if case == "adiabatic" else 2e-3).sc  # fmt: skip
    spec = UncertaintySpec(
        (
            UncertainParameter("reactions[0].activation_energy", "normal", sd=2000.0),
            UncertainParameter("reactions[0].rate_constant", "lognormal", factor=1.3),
        ),
        samples=8 if case == "series" else 16,
    )
    ps = draw(sc, spec)
    which, T, hot = [], [], []
    for i in range(ps.n):
        states = steady_states(ps.scenario(i), tau, T_in).states
        idx, _ = check_mod.pick_state(states, None)
        which.append(i)
        T.append(float(states[idx].T))
        hot.append(len(states) > 1 and idx == len(states) - 1)
    stacked = stacked_fold_margins(ps, np.array(which), tau, T_in, np.array(T), np.array(hot))
    assert stacked is not None
    found = {"K": 0, "percent": 0}
    for j, i in enumerate(which):
        own = {m.key: m.value for m in _fold_margins(ps.scenario(i), tau, T_in, T[j], hot[j])}
        ours = {m.key: m.value for m in stacked[j]}
        assert ours.keys() == own.keys()
        for key, value in own.items():
            if value is None:
                assert ours[key] is None, key
            else:
                found["percent" if key.endswith("percent") else "K"] += 1
                assert ours[key] == pytest.approx(value, abs=1e-4 if key.endswith("percent") else 1e-7), key
    assert found["K"] >= ps.n // 2
