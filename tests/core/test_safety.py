"""Thermal-safety figures (exomap.core.safety) against analytic results, the adiabatic batch simulated by
exomap.core.dynamics, and the published definitions they implement.

Scenarios are invented test data (water-like liquid), built from the core dataclasses.
"""

from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np
import pytest
from exomap.core import safety
from exomap.core.dynamics import simulate
from exomap.core.scenario import R_GAS, Limits, Reaction, Scenario, Valve, Vessel
from exomap.core.steady import steady_states
from scipy.optimize import brentq

RHO, CP = 1000.0, 4000.0


def scenario(reactions, c_in, species, *, T_in=300.0, UA=0.0, T_max=2000.0, T_mtt=None, q=1e-3):
    return Scenario(
        species=tuple(species),
        rho=RHO,
        cp=CP,
        vessel=Vessel(D=1.0, H=2.0, h_set=4.0 / math.pi),  # 1 m^3 at the set level
        valve=Valve(Kv=15.0, z_drop=1.0),
        reactions=tuple(reactions),
        q_in=q,
        T_in=T_in,
        c_in=tuple(c_in),
        limits=Limits(T_max=T_max, T_mtt=T_mtt),
        UA_jacket=UA,
        T_c=T_in,
        title="safety test scenario",
        description="Invented test data.",
    )


def first_order(k_T0, T0, Ea, dH, nu=(-1.0, 1.0), orders=(1.0, 0.0), label="A -> P", decomposition=False):
    """A reaction with rate constant k_T0 [1/s] at T0."""
    return Reaction(label, nu, orders, k_T0 * math.exp(Ea / (R_GAS * T0)), Ea, dH, decomposition)


# -- adiabatic temperature rise ----------------------------------------------------------------------------


def test_dT_ad_of_one_reaction_is_the_textbook_expression():
    sc = scenario([first_order(1e-4, 300.0, 80e3, -100e3)], (2000.0, 0.0), "AP")
    # dT_ad = c (-dH) / (rho cp) (analytic; Stoessel 2008, ch. 2): 2000 * 1e5 / 4e6 = 50 K
    assert safety.adiabatic_temperature_rise(sc) == pytest.approx(50.0, rel=1e-12)


def test_dT_ad_counts_stoichiometry_and_the_limiting_reactant():
    r2 = Reaction("2A -> P", (-2.0, 1.0), (2.0, 0.0), 1.0, 80e3, -100e3)
    sc = scenario([r2], (2000.0, 0.0), "AP")
    # two moles of A per mole of reaction (analytic): 1000 * 1e5 / 4e6 = 25 K
    assert safety.adiabatic_temperature_rise(sc) == pytest.approx(25.0, rel=1e-12)
    rab = Reaction("A + B -> P", (-1.0, -1.0, 1.0), (1.0, 1.0, 0.0), 1.0, 80e3, -100e3)
    sc = scenario([rab], (2000.0, 1500.0, 0.0), "ABP")
    # B limits (analytic): 1500 * 1e5 / 4e6 = 37.5 K
    assert safety.adiabatic_temperature_rise(sc) == pytest.approx(37.5, rel=1e-12)


def test_dT_ad_of_parallel_and_series_reactions():
    par = [
        Reaction("A -> P", (-1.0, 1.0, 0.0), (1.0, 0.0, 0.0), 1.0, 80e3, -100e3),
        Reaction("A -> Q", (-1.0, 0.0, 1.0), (1.0, 0.0, 0.0), 1.0, 80e3, -150e3),
        Reaction("A -> R (endothermic)", (-1.0, 0.0, 0.0), (1.0, 0.0, 0.0), 1.0, 80e3, +50e3),
    ]
    sc = scenario(par, (2000.0, 0.0, 0.0), "APQ")
    # worst case: all of A by the most exothermic path (analytic): 2000 * 1.5e5 / 4e6 = 75 K
    assert safety.adiabatic_temperature_rise(sc) == pytest.approx(75.0, rel=1e-9)
    ser = [
        Reaction("A -> P", (-1.0, 1.0, 0.0), (1.0, 0.0, 0.0), 1.0, 80e3, -100e3),
        Reaction("P -> D", (0.0, -1.0, 1.0), (0.0, 1.0, 0.0), 1.0, 120e3, -200e3),
    ]
    sc = scenario(ser, (2000.0, 500.0, 0.0), "APD")
    # A -> P -> D all the way, the P in the feed as well (analytic): (2000 * 1e5 + 2500 * 2e5) / 4e6 = 175 K
    assert safety.adiabatic_temperature_rise(sc) == pytest.approx(175.0, rel=1e-9)


def test_decomposition_is_counted_separately():
    rxn = [
        first_order(1e-4, 300.0, 80e3, -100e3, (-1.0, 1.0, 0.0), (1.0, 0.0, 0.0)),
        first_order(1e-9, 300.0, 140e3, -300e3, (0.0, -1.0, 1.0), (0.0, 1.0, 0.0), "P -> D", True),
    ]
    sc = scenario(rxn, (2000.0, 0.0, 0.0), "APD")
    # main: 2000 * 1e5 / 4e6 = 50 K; decomposition of the P it makes: 2000 * 3e5 / 4e6 = 150 K (analytic)
    assert safety.adiabatic_temperature_rise(sc, which="main") == pytest.approx(50.0, rel=1e-9)
    assert safety.adiabatic_temperature_rise(sc, which="all") == pytest.approx(200.0, rel=1e-9)
    s = steady_states(sc, sc.tau_nominal, sc.T_in).states[0]
    fig = safety.safety_figures(sc, sc.tau_nominal, sc.T_in, s)
    assert fig.dT_ad == pytest.approx(50.0, rel=1e-9)
    assert fig.dT_ad_decomposition == pytest.approx(150.0, rel=1e-9)


# -- MTSR --------------------------------------------------------------------------------------------------


def test_mtsr_formula():
    # MTSR = T + dT_ad (1 - X) (Stoessel 2008, ch. 3; DESIGN.md §2): 350 + 100 * 0.2
    assert safety.mtsr(350.0, 100.0, 0.8) == pytest.approx(370.0, rel=1e-15)


@pytest.mark.parametrize("UA", [0.0, 800.0])
def test_mtsr_is_where_a_stopped_uncooled_tank_ends(UA):
    """Stop feed and outlet (and the cooling) at the steady state: the adiabatic batch ends at MTSR."""
    sc = scenario([first_order(2e-4, 300.0, 70e3, -100e3)], (2000.0, 0.0), "AP", UA=UA)
    st = steady_states(sc, sc.tau_nominal, sc.T_in).states[0]
    fig = safety.safety_figures(sc, sc.tau_nominal, sc.T_in, st)
    events = [{"at": 0.0, "do": "feed_stop"}, {"at": 0.0, "do": "outlet_block"}]
    if UA:
        events.append({"at": 0.0, "do": "cooling_loss"})
    r = simulate(sc, start="low", events=events, duration=30 * 86400.0, rtol=1e-9)
    # energy balance of the closed adiabatic tank (analytic): T_end = T_ss + dT_ad (1 - X_ss)
    assert r.T[-1] == pytest.approx(fig.mtsr, rel=1e-7)
    assert fig.mtsr == pytest.approx(st.T + 50.0 * (1.0 - st.conversion), rel=1e-12)


# -- TMRad --------------------------------------------------------------------------------------------------


def test_tmr_ad_is_the_townsend_tou_expression():
    # a reaction giving q' = 1 W/kg at T0 = 400 K with Ea = 100 kJ/mol, in a liquid of cp = 4000 J/(kg K)
    T0, Ea, dH, c = 400.0, 100e3, -100e3, 1000.0
    k = RHO * 1.0 / (-dH * c)
    sc = scenario([first_order(k, T0, Ea, dH)], (c, 0.0), "AP")
    # TMRad = cp R T0^2 / (q' Ea) (Townsend & Tou 1980): 4000 * 8.314462618 * 400^2 / (1 * 1e5)
    assert safety.tmr_ad(sc, T0, [c, 0.0]) == pytest.approx(4000 * R_GAS * 400.0**2 / 1e5, rel=1e-12)


def test_tmr_ad_of_several_reactions_uses_the_slope_of_the_heat_release():
    rxn = [
        first_order(1e-4, 350.0, 80e3, -100e3, (-1.0, 1.0, 0.0), (1.0, 0.0, 0.0)),
        first_order(1e-6, 350.0, 150e3, -250e3, (0.0, -1.0, 1.0), (0.0, 1.0, 0.0), "P -> D", True),
    ]
    sc = scenario(rxn, (2000.0, 0.0, 0.0), "APD")
    c = [800.0, 1200.0, 0.0]

    def q(T):  # specific heat release [W/kg], written out by the test
        r1 = rxn[0].k0 * math.exp(-rxn[0].Ea / (R_GAS * T)) * c[0]
        r2 = rxn[1].k0 * math.exp(-rxn[1].Ea / (R_GAS * T)) * c[1]
        return (1e5 * r1 + 2.5e5 * r2) / RHO

    T0, d = 350.0, 1e-3
    slope = (q(T0 + d) - q(T0 - d)) / (2 * d)
    # TMRad = cp / (dq'/dT) at T0, which for one reaction is cp R T0^2/(q' Ea) (analytic); central difference
    assert safety.tmr_ad(sc, T0, c) == pytest.approx(CP / slope, rel=1e-7)


@pytest.mark.parametrize(("gamma", "dT_ad"), [(40.0, 300.0), (60.0, 600.0)])
def test_adiabatic_batch_reaches_maximum_rate_after_tmr_ad(gamma, dT_ad):
    """Time to maximum rate of a simulated adiabatic batch against the zero-order TMRad.

    Accuracy the approximation promises (Townsend & Tou 1980; Frank-Kamenetskii 1969): the zero-order
    estimate neglects consumption and replaces exp(-Ea/RT) by its expansion about T0. The exact zero-order
    integral is t = TMRad (1 + 2 eps + O(eps^2)) with eps = R T0 / Ea (analytic: the integral of
    exp(-theta/(1 + eps theta)) over theta > 0), and consumption adds a relative delay of order 1/B with
    B = dT_ad Ea / (R T0^2). Both delay the real maximum, so the check is 0 < t/TMRad - 1 < 2 eps + 2/B
    (the factor 2 on 1/B covers its order-one constant, not known in closed form to us).
    """
    T0 = 350.0
    Ea = gamma * R_GAS * T0
    c = dT_ad * RHO * CP / 1e5
    sc = scenario([first_order(1e-4, T0, Ea, -1e5)], (c, 0.0), "AP")
    tmr = safety.tmr_ad(sc, T0, [c, 0.0])
    y0 = [1.0, c, 0.0, T0, 0.0]
    r = simulate(
        sc,
        initial=y0,
        events=[{"at": 0, "do": "feed_stop"}, {"at": 0, "do": "outlet_block"}],
        duration=2 * tmr,
        record_every=tmr / 50000,
        rtol=1e-9,
    )
    t, keep = np.unique(r.t, return_index=True)
    rate = np.gradient(r.T[keep], t)
    t_max_rate = t[int(np.argmax(rate))]
    eps, Bn = 1.0 / gamma, dT_ad * gamma / T0
    assert 0.0 < t_max_rate / tmr - 1.0 < 2 * eps + 2 / Bn
    # the batch ends at T0 + dT_ad (analytic energy balance)
    assert r.T[-1] == pytest.approx(T0 + dT_ad, rel=1e-9)


# -- TD24 and the criticality class -------------------------------------------------------------------------


def _decomposing():
    rxn = [
        first_order(2e-4, 300.0, 70e3, -60e3, (-1.0, 1.0, 0.0), (1.0, 0.0, 0.0)),
        first_order(1e-10, 300.0, 140e3, -300e3, (0.0, -1.0, 1.0), (0.0, 1.0, 0.0), "P -> D", True),
    ]
    return rxn


def test_td24_is_where_the_decomposition_tmr_ad_is_one_day():
    rxn = _decomposing()
    sc = scenario(rxn, (2000.0, 0.0, 0.0), "APD")
    c = [200.0, 1800.0, 0.0]
    T24 = safety.td24(sc, c)
    assert T24 is not None
    # independent: solve cp R T^2 / (q'_D(T) Ea) = 86400 s with the test's own q'_D (Townsend & Tou 1980)
    D = rxn[1]

    def g(T):
        qD = -D.dH * D.k0 * math.exp(-D.Ea / (R_GAS * T)) * c[1] / RHO
        return math.log(CP * R_GAS * T * T / (qD * D.Ea)) - math.log(86400.0)

    assert T24 == pytest.approx(brentq(g, 280.0, 700.0, xtol=1e-12), rel=1e-9)
    assert safety.tmr_ad(sc, T24, c, "decomposition") == pytest.approx(86400.0, rel=1e-8)


def test_no_decomposition_no_td24():
    sc = scenario([first_order(1e-4, 300.0, 80e3, -100e3)], (2000.0, 0.0), "AP")
    assert safety.td24(sc, [1000.0, 1000.0]) is None


@pytest.mark.parametrize(
    ("T_p", "MTSR", "MTT", "TD24", "cls"),
    [
        # Stoessel (2008), ch. 3, the five criticality classes by the order of T_p, MTSR, MTT, TD24 (from memory)
        (330.0, 350.0, 373.0, 420.0, 1),  # T_p < MTSR < MTT < TD24
        (330.0, 350.0, 420.0, 373.0, 2),  # T_p < MTSR < TD24 < MTT
        (330.0, 390.0, 373.0, 420.0, 3),  # T_p < MTT < MTSR < TD24
        (330.0, 450.0, 373.0, 420.0, 4),  # T_p < MTT < TD24 < MTSR
        (330.0, 450.0, 420.0, 373.0, 5),  # T_p < TD24 < MTT < MTSR
        (330.0, 400.0, 420.0, 373.0, 5),  # T_p < TD24 < MTSR < MTT
    ],
)
def test_criticality_classes(T_p, MTSR, MTT, TD24, cls):
    got, why = safety.criticality_class(T_p, MTSR, MTT, TD24)
    assert got == cls and "MTSR" in why


@pytest.mark.parametrize(("MTT", "TD24", "word"), [(None, 400.0, "maximum technical"), (373.0, None, "TD24")])
def test_criticality_class_needs_its_limits(MTT, TD24, word):
    got, why = safety.criticality_class(330.0, 350.0, MTT, TD24)
    assert got is None and word in why


def test_safety_figures_answer():
    sc = scenario(_decomposing(), (2000.0, 0.0, 0.0), "APD", T_mtt=373.15)
    st = steady_states(sc, sc.tau_nominal, sc.T_in).states[0]
    fig = safety.safety_figures(sc, sc.tau_nominal, sc.T_in, st)
    d = json.loads(json.dumps(fig.to_dict(), allow_nan=False))
    for key in ("adiabatic_temperature_rise_K", "mtsr_K", "tmr_ad_s", "td24_K", "criticality_class", "notes"):
        assert key in d
    assert d["td24_K"] == pytest.approx(safety.td24(sc, st.C), rel=1e-12)
    assert d["criticality_class"] == safety.criticality_class(st.T, fig.mtsr, 373.15, fig.td24)[0]
    plain = replace(sc, reactions=sc.reactions[:1], limits=Limits(T_max=2000.0))
    d2 = safety.safety_figures(plain, plain.tau_nominal, plain.T_in, st).to_dict()
    assert d2["td24_K"] is None and d2["criticality_class"] is None and d2["criticality_reason"]
