"""Outlet valve: IEC 60534-2-1 liquid flow cross-checked with the ``fluids`` package, Cv/Kv, characteristics.

References
----------
[1] IEC 60534-2-1:2011, eq. (1): Q = N1 Kv sqrt(dp / (rho/rho0)), N1 = 1 for Q in m^3/h and dp in bar.
[2] C. Bell et al., fluids (Chemical Engineering Design Library): ``size_control_valve_l``, ``Cv_to_Kv``,
    ``Cv_char_linear``. Its ``Cv_char_equal_percentage`` and ``Cv_char_quick_opening`` interpolate tabulated
    curves of particular trims (f(0) = 0, not R^-1), so they are not the ideal inherent characteristics of
    DESIGN.md §2 and are not compared here; the ideal ones are checked against their definitions instead.
[3] ISA-75.11.01 / IEC 60534-2-4: inherent characteristics; equal percentage means equal increments of
    opening give equal percentage changes of flow coefficient, f = R^(x-1).
"""

from __future__ import annotations

import math

import fluids
import numpy as np
import pytest
from exomap.core import valve
from exomap.core.scenario import G, Limits, Reaction, Scenario, Valve, Vessel
from fluids.control_valve import Cv_char_linear, size_control_valve_l
from hypothesis import assume, given, settings
from hypothesis import strategies as st


def tank(Kv=10.0, characteristic="linear", R=50.0, rho=900.0, p_head=1.2e5, p_down=1.0e5, z=1.5) -> Scenario:
    """A tank with only what the valve needs (invented values)."""
    return Scenario(
        species=("A",),
        rho=rho,
        cp=2000.0,
        vessel=Vessel(D=1.2, H=2.0, h_set=1.5, p_head=p_head),
        valve=Valve(Kv=Kv, characteristic=characteristic, rangeability=R, p_down=p_down, z_drop=z),
        reactions=(Reaction("r", (-1.0,), (1.0,), 1.0, 5e4, -1e4),),
        q_in=1e-3,
        T_in=300.0,
        c_in=(1.0,),
        limits=Limits(T_max=400.0),
    )


def test_kv_definition_one_bar_of_water_gives_kv():
    # IEC 60534-2-1 eq. (1) [1]: with dp = 1 bar and rho = rho0 the flow in m^3/h equals Kv
    sc = tank(Kv=10.0, rho=valve.RHO0, p_head=1e5 + 1e5, p_down=1e5, z=0.0)
    h = 0.0  # no liquid head: dp = 1 bar exactly
    assert valve.flow(sc, h, 1.0) * 3600.0 == pytest.approx(10.0, rel=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    Kv=st.floats(min_value=0.5, max_value=200.0),
    rho=st.floats(min_value=700.0, max_value=1300.0),
    h=st.floats(min_value=0.05, max_value=2.0),
    p_head=st.floats(min_value=2.5e5, max_value=5e5),
    z=st.floats(min_value=0.0, max_value=10.0),
)
def test_flow_matches_fluids_sizing(Kv, rho, h, p_head, z):
    p_down = 3.0e5  # keeps dp/P1 < 0.6, well below the choking ratio FL^2 = 0.81 of fluids' default FL = 0.9
    sc = tank(Kv=Kv, rho=rho, p_head=p_head, p_down=p_down, z=z)
    dp = p_head + rho * G * (h + z) - p_down
    assume(dp > 1e3)
    q = valve.flow(sc, h, 1.0)
    # fluids [2]: non-choked (vapour pressure far below P2), no pipe diameters -> turbulent, FP = 1
    out = size_control_valve_l(rho=rho, Psat=1e3, Pc=4e6, mu=1e-3, P1=p_down + dp, P2=p_down, Q=q, full_output=True)
    assert not out["choked"] and not out["laminar"]
    assert out["Kv"] == pytest.approx(Kv, rel=1e-9)


def test_no_backflow():
    # DESIGN.md §2: q = 0 when dp <= 0 (vacuum in the headspace, valve above the liquid)
    sc = tank(p_head=0.5e5, p_down=1.0e5, z=0.0)
    assert valve.pressure_drop(sc, 0.2) < 0
    assert valve.flow(sc, 0.2, 1.0) == 0.0


def test_cv_to_kv_matches_fluids():
    # fluids.Cv_to_Kv [2] from the same US gallon and psi definitions
    for cv in (1.0, 11.56, 250.0):
        assert valve.cv_to_kv(cv) == pytest.approx(fluids.Cv_to_Kv(cv), rel=1e-12)
    # IEC 60534-1: Kv = 0.865 Cv (from memory, rounded to three digits)
    assert valve.cv_to_kv(1.0) == pytest.approx(0.865, abs=5e-4)


def test_linear_characteristic_matches_fluids():
    x = np.linspace(0.0, 1.0, 41)
    ours = valve.characteristic(x, "linear", 50.0)
    theirs = np.array([Cv_char_linear(v) for v in x])
    np.testing.assert_allclose(ours, theirs, rtol=0, atol=1e-15)


@pytest.mark.parametrize("R", [20.0, 50.0, 100.0])
def test_equal_percentage_definition(R):
    x = np.linspace(0.0, 1.0, 21)
    f = valve.characteristic(x, "equal_percentage", R)
    # [3]: f(1) = 1, f(0) = 1/R, and equal steps of opening multiply f by the same ratio R^dx
    assert f[-1] == pytest.approx(1.0, rel=1e-15)
    assert f[0] == pytest.approx(1.0 / R, rel=1e-14)
    np.testing.assert_allclose(f[1:] / f[:-1], R ** (x[1] - x[0]), rtol=1e-12)
    # analytic: d ln f / dx = ln R (the slope used by the Jacobian)
    for xi in (0.1, 0.5, 0.9):
        fx = float(valve.characteristic(xi, "equal_percentage", R))
        assert valve.characteristic_slope(xi, "equal_percentage", R) / fx == pytest.approx(math.log(R), rel=1e-12)


def test_quick_opening_is_square_root():
    # DESIGN.md §2 defines quick opening as sqrt(x): above linear inside (0, 1), equal at the ends
    x = np.linspace(0.0, 1.0, 11)
    f = valve.characteristic(x, "quick_opening", 50.0)
    np.testing.assert_allclose(f**2, x, rtol=1e-14, atol=1e-15)
    assert np.all(f[1:-1] > x[1:-1])


@settings(max_examples=80, deadline=None)
@given(
    characteristic=st.sampled_from(["linear", "equal_percentage", "quick_opening"]),
    x=st.floats(min_value=0.05, max_value=1.0),
    h=st.floats(min_value=0.1, max_value=2.0),
)
def test_opening_for_flow_inverts_flow(characteristic, x, h):
    # invariant: the opening that passes flow(x) is x
    sc = tank(characteristic=characteristic)
    q = valve.flow(sc, h, x)
    assert valve.opening_for_flow(sc, q, h) == pytest.approx(x, rel=1e-10)
