"""The full dynamic model: analytic Jacobian against central finite differences, and the valve flow.

Every check here compares ``Model.jacobian`` with a numerical derivative of ``Model.rhs`` (analytic: a
derivative is the limit of the difference quotient; the central quotient's error is O(h^2)), over random
states, with and without the PI level controller, for each valve characteristic, with several reactions of
fractional and higher orders, a jacket, heat loss and agitator power.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from exomap.core import valve as valve_mod
from exomap.core.model import Model, nominal_inputs
from exomap.core.scenario import CHARACTERISTICS, G, Limits, Reaction, Scenario, Valve, Vessel
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

MANY = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _scenario(characteristic: str, controlled: bool) -> Scenario:
    """Three species, two reactions (orders 1, 0.5 and 2), jacket, loss and agitator (invented data)."""
    r1 = Reaction("A + B -> P", (-1.0, -1.0, 1.0), (1.0, 0.5, 0.0), 2.0e7, 65.0e3, -90.0e3)
    r2 = Reaction("2 P -> D", (0.0, 0.0, -2.0), (0.0, 0.0, 2.0), 5.0e8, 95.0e3, -60.0e3)
    valve = (
        Valve(Kv=25.0, characteristic=characteristic, rangeability=30.0, z_drop=0.8, gain=0.9, reset_time=300.0)
        if controlled
        else Valve(Kv=25.0, characteristic=characteristic, rangeability=30.0, z_drop=0.8, opening=0.45)
    )
    return Scenario(
        species=("A", "B", "P"),
        rho=950.0,
        cp=3200.0,
        vessel=Vessel(D=1.6, H=2.5, h_set=1.8, p_head=1.5e5),
        valve=valve,
        reactions=(r1, r2),
        q_in=2.0e-3,
        T_in=320.0,
        c_in=(1500.0, 1800.0, 0.0),
        limits=Limits(T_max=450.0),
        UA_jacket=6.0e3,
        T_c=300.0,
        UA_loss=150.0,
        T_amb=290.0,
        P_agitator=2.5e3,
    )


def _fd_jacobian(model, y, u):
    """Central differences of rhs with a relative step per component."""
    n = y.size
    J = np.empty((n, n))
    for j in range(n):
        h = 1e-6 * max(abs(y[j]), 1.0)
        yp, ym = y.copy(), y.copy()
        yp[j] += h
        ym[j] -= h
        J[:, j] = (model.rhs(0.0, yp, u) - model.rhs(0.0, ym, u)) / (2 * h)
    return J


def _scaled(J, scale):
    """Jacobian in variables scaled by their magnitudes, so every entry is comparable."""
    return J * scale[None, :] / scale[:, None]


@MANY
@given(
    characteristic=st.sampled_from(CHARACTERISTICS),
    controlled=st.booleans(),
    h=st.floats(0.4, 2.4),
    cA=st.floats(1.0, 2000.0),
    cB=st.floats(1.0, 2000.0),
    cP=st.floats(1.0, 2000.0),
    T=st.floats(280.0, 420.0),
    integral=st.floats(-300.0, 300.0),
    tau=st.floats(300.0, 20000.0),
)
def test_jacobian_matches_central_differences(characteristic, controlled, h, cA, cB, cP, T, integral, tau):
    sc = _scenario(characteristic, controlled)
    model = Model(sc)
    u = nominal_inputs(sc, tau=tau)
    y = model.pack(h, np.array([cA, cB, cP]), T, integral)
    x, *_ = model.opening(y, u)
    # the clamp of the valve at 0 and 1 is a kink: finite differences across it mean nothing
    assume(0.02 < x < 0.98)
    if controlled:
        raw = u.bias + sc.valve.gain * (h - sc.vessel.h_set + integral / sc.valve.reset_time)
        assume(0.02 < raw < 0.98)
    J = model.jacobian(0.0, y, u)
    J_fd = _fd_jacobian(model, y, u)
    scale = np.array([1.0, 1000.0, 1000.0, 1000.0, 300.0, 300.0])
    Js, Jfs = _scaled(J, scale), _scaled(J_fd, scale)
    # analytic: central-difference error O(h^2 f''') plus round-off O(eps f / h), well below these
    tol = 1e-7 * np.max(np.abs(Js)) + 1e-6 * np.abs(Js)
    # analytic: the analytic Jacobian equals the central difference within the tolerance above
    assert np.all(np.abs(Js - Jfs) <= tol), np.max(np.abs(Js - Jfs) / tol)


def test_controlled_valve_couples_level_and_integral():
    """The PI controller's terms appear in the Jacobian: d(dh/dt)/dI < 0 and d(dI/dt)/dh = 1 (analytic)."""
    sc = _scenario("linear", True)
    model = Model(sc)
    u = nominal_inputs(sc)
    y = model.pack(sc.vessel.h_set, np.array(sc.c_in) + 1.0, 330.0, 0.0)
    J = model.jacobian(0.0, y, u)
    iI = model.size - 1
    # analytic: dI/dt = h - h_set while the output is not clamped
    assert J[iI, 0] == 1.0
    # analytic: more integral opens the valve, more outflow, the level falls
    assert J[0, iI] < 0
    # analytic: the gain adds to the level's own damping, -(dq/dh + dq/dx Kc)/A
    q, dq_dh, dq_dx = valve_mod.flow_derivatives(sc, sc.vessel.h_set, u.bias)
    assert J[0, 0] == pytest.approx(-(dq_dh + dq_dx * sc.valve.gain) / sc.vessel.area, rel=1e-12)


def test_fixed_valve_has_inert_integral():
    sc = _scenario("equal_percentage", False)
    model = Model(sc)
    u = nominal_inputs(sc)
    y = model.pack(1.2, np.array(sc.c_in) + 1.0, 330.0, 5.0)
    J = model.jacobian(0.0, y, u)
    # analytic: with a fixed opening the integral state neither moves nor acts
    assert np.all(J[-1, :] == 0.0) and np.all(J[:, -1] == 0.0)
    # analytic: the integral does not move with a fixed valve
    assert model.rhs(0.0, y, u)[-1] == 0.0


def test_anti_windup_stops_integrating_when_clamped():
    sc = _scenario("linear", True)
    model = Model(sc)
    u = nominal_inputs(sc)
    # far above the setpoint: the output clamps at 1; the error would push it further open, so no integration
    y = model.pack(sc.vessel.h_set + 0.6, np.array(sc.c_in) + 1.0, 330.0, 1000.0)
    x, *_ = model.opening(y, u)
    # analytic: the raw output is far above 1, so it clamps
    assert x == 1.0
    # DESIGN.md §2 anti-windup: no integration while clamped and pushing further
    assert model.rhs(0.0, y, u)[-1] == 0.0
    # DESIGN.md §2: but with the error pulling back it integrates again (conditional integration)
    y = model.pack(sc.vessel.h_set - 0.3, np.array(sc.c_in) + 1.0, 330.0, 1000.0)
    x, *_ = model.opening(y, u)
    # analytic: still clamped (the integral dominates)
    assert x == 1.0
    # DESIGN.md §2 anti-windup: integrating again, dI/dt = h - h_set = -0.3 m
    assert model.rhs(0.0, y, u)[-1] == pytest.approx(-0.3, rel=1e-12)


# -- valve flow -------------------------------------------------------------------------------------------
@MANY
@given(
    characteristic=st.sampled_from(CHARACTERISTICS),
    h1=st.floats(0.0, 2.5),
    h2=st.floats(0.0, 2.5),
    x=st.floats(0.01, 1.0),
)
def test_valve_flow_is_monotone_in_level(characteristic, h1, h2, x):
    sc = _scenario(characteristic, False)
    lo, hi = sorted((h1, h2))
    # analytic: dp = p_head + rho g (h + z) - p_down grows with h, and q ~ sqrt(dp)
    assert valve_mod.flow(sc, lo, x) <= valve_mod.flow(sc, hi, x)
    if hi > lo + 1e-6:
        # analytic: strictly increasing for a positive opening
        assert valve_mod.flow(sc, lo, x) < valve_mod.flow(sc, hi, x)


@MANY
@given(
    characteristic=st.sampled_from(CHARACTERISTICS),
    x1=st.floats(0.0, 1.0),
    x2=st.floats(0.0, 1.0),
    h=st.floats(0.1, 2.5),
)
def test_valve_flow_is_monotone_in_opening(characteristic, x1, x2, h):
    sc = _scenario(characteristic, False)
    lo, hi = sorted((x1, x2))
    # analytic: every inherent characteristic (x, R^(x-1), sqrt(x)) increases with x
    assert valve_mod.flow(sc, h, lo) <= valve_mod.flow(sc, h, hi)


@pytest.mark.parametrize("characteristic", CHARACTERISTICS)
def test_valve_flow_matches_the_sizing_equation(characteristic):
    """q = Kv f(x) sqrt(dp/1 bar / (rho/rho0)) [m^3/h], written out here (IEC 60534-2-1 eq. (1), N1 = 1
    for m^3/h and bar; rho0 is water at 15 degC, 999.1 kg/m^3 from memory)."""
    sc = _scenario(characteristic, False)
    h, x = 1.3, 0.6
    dp = 1.5e5 + 950.0 * G * (1.3 + 0.8) - 101325.0
    f = {"linear": x, "equal_percentage": 30.0 ** (x - 1.0), "quick_opening": math.sqrt(x)}[characteristic]
    q_ref = 25.0 * f * math.sqrt(dp / 1e5 / (950.0 / 999.1)) / 3600.0
    # IEC 60534-2-1 eq. (1); the 999.1 kg/m^3 reference is rounded, hence rel 1e-4
    assert valve_mod.flow(sc, h, x) == pytest.approx(q_ref, rel=1e-4)


def test_no_back_flow_without_driving_pressure():
    sc = _scenario("linear", False).with_changes(
        valve=Valve(Kv=25.0, p_down=5.0e5, opening=0.5), vessel=Vessel(D=1.6, H=2.5, h_set=1.8, p_head=1.0e5)
    )
    # DESIGN.md §2: no back-flow when dp <= 0
    assert valve_mod.flow(sc, 1.0, 0.5) == 0.0


def test_nominal_inputs_open_the_valve_to_pass_the_feed():
    for characteristic in CHARACTERISTICS:
        sc = _scenario(characteristic, True)
        u = nominal_inputs(sc, tau=3000.0)
        # DESIGN.md §2: at the set level the controller's output passes q_in, so the level is steady
        q = valve_mod.flow(sc, sc.vessel.h_set, u.bias)
        # analytic: the opening from nominal_inputs passes V/tau at the set level
        assert q == pytest.approx(sc.vessel.V_set / 3000.0, rel=1e-10)
        model = Model(sc)
        y = model.pack(sc.vessel.h_set, np.array(sc.c_in), 330.0, 0.0)
        # analytic: so dh/dt = 0 there
        assert abs(model.rhs(0.0, y, u)[0]) < 1e-12
