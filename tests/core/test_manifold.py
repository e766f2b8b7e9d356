"""The steady-state manifold: its two parametrisations against hand-written balances and against each other.

Checks: a manifold point is a steady state of the full model at the feed temperature it reports; the
explicit (tau, extent) path and the general (tau, T) path give the same point; the derivative dT_in/ds is the
derivative; isothermal extents of A -> P -> D match the closed form; the reduced Jacobian's eigenvalues are
those of the full species+energy block; the heat-release bound is the adiabatic rise.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from exomap.core.manifold import Manifold
from exomap.core.model import Model, nominal_inputs
from exomap.core.scenario import R_GAS, Limits, Reaction, Scenario, Valve, Vessel
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

MANY = settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _second_order(UA: float = 0.0) -> Scenario:
    """A + B -> P, first order in each, B in excess (invented data)."""
    return Scenario(
        species=("A", "B", "P"),
        rho=900.0,
        cp=2000.0,
        vessel=Vessel(D=1.3, H=2.0, h_set=1.5),
        valve=Valve(Kv=10.0, opening=0.5),
        reactions=(Reaction("A + B -> P", (-1.0, -1.0, 1.0), (1.0, 1.0, 0.0), 3.5e5, 80.0e3, -90.0e3),),
        q_in=5e-4,
        T_in=300.0,
        c_in=(2000.0, 2500.0, 0.0),
        limits=Limits(T_max=400.0),
        UA_jacket=UA,
        T_c=290.0,
        UA_loss=20.0,
        T_amb=295.0,
        P_agitator=800.0,
    )


def _residual_of_point(sc, tau, T_in, C, T):
    model = Model(sc)
    u = nominal_inputs(sc, tau=tau, T_in=T_in)
    f = model.rhs(0.0, model.pack(sc.vessel.h_set, np.asarray(C), T, 0.0), u)
    return np.max(np.abs(f[1:-2])) * tau / max(sc.c_in), abs(f[-2]) * tau / T


@MANY
@given(log_tau=st.floats(math.log(10.0), math.log(1e5)), frac=st.floats(1e-6, 1 - 1e-6), jacket=st.booleans())
def test_explicit_points_are_steady_states_of_the_model(log_tau, frac, jacket):
    sc = _second_order(UA=3000.0 if jacket else 0.0)
    mf = Manifold(sc)
    # core/manifold.py: one reaction with a positive order in its limiting reactant is explicit
    assert mf.explicit
    tau = math.exp(log_tau)
    xi = frac * mf.xi_max
    # core/manifold.py: the one-reaction coordinate is the log-odds of the limiting reactant's conversion
    e = mf.explicit_eval(np.array([tau]), np.array([math.log(frac / (1.0 - frac))]))
    if not e.valid[0]:
        return  # no physical temperature gives this extent at this residence time (ln argument <= 1)
    T, T_in = float(e.T[0]), float(e.T_in[0])
    C = mf.concentrations(e.xi[0])
    # analytic: C = C_in + nu xi with xi = tau k0 exp(-E/RT) C_A C_B (written out here)
    rxn = sc.reactions[0]
    assert xi == pytest.approx(tau * rxn.k0 * math.exp(-rxn.Ea / (R_GAS * T)) * C[0] * C[1], rel=1e-10)
    # a manifold point is a steady state of the full model at the feed temperature it reports (analytic)
    if T_in > 0:
        res_c, res_t = _residual_of_point(sc, tau, T_in, C, T)
        # analytic: species and energy rows vanish (relative to the feed's magnitudes and tau)
        assert res_c < 1e-10 and res_t < 1e-10


@MANY
@given(log_tau=st.floats(math.log(10.0), math.log(1e5)), frac=st.floats(1e-4, 1 - 1e-4))
def test_explicit_and_general_parametrisations_agree(log_tau, frac):
    sc = _second_order(UA=3000.0)
    mf = Manifold(sc)
    tau = math.exp(log_tau)
    e = mf.explicit_eval(np.array([tau]), np.array([math.log(frac / (1.0 - frac))]))
    if not e.valid[0]:
        return
    g = mf.general_eval(np.array([tau]), e.T)
    # the same point by two routes: Newton on the isothermal balance at T versus the closed form in xi
    assert g.xi[0, 0] == pytest.approx(e.xi[0, 0], rel=1e-9, abs=1e-12 * mf.xi_max)
    # the same point by both routes, relative 1e-11
    assert g.T_in[0] == pytest.approx(e.T_in[0], rel=1e-11)
    # analytic (chain rule): dT_in/dT = (dT_in/dw) / (dT/dw)
    assert g.dTin_ds[0] == pytest.approx(e.dTin_ds[0] / e.dT_ds[0], rel=1e-7, abs=1e-9)


@pytest.mark.parametrize("explicit", [True, False])
def test_dTin_ds_is_the_derivative(explicit):
    sc = _second_order(UA=3000.0)
    mf = Manifold(sc)
    mf.explicit = explicit
    tau = 3600.0
    s = np.linspace(-3.0, 3.0, 19) if explicit else np.linspace(300.0, 420.0, 19)
    e = mf.evaluate(np.full(s.shape, tau), s)
    h = 1e-6 * np.maximum(np.abs(s), 1.0)
    fd = (mf.evaluate(np.full(s.shape, tau), s + h).T_in - mf.evaluate(np.full(s.shape, tau), s - h).T_in) / (2 * h)
    ok = e.valid
    # most of the samples are physical
    assert ok.sum() > 10
    # analytic: central difference, O(h^2)
    np.testing.assert_allclose(e.dTin_ds[ok], fd[ok], rtol=1e-5, atol=1e-6 * np.max(np.abs(fd[ok])))


def test_series_isothermal_extents_match_the_closed_form(series):
    sc = series()
    mf = Manifold(sc)
    # core/manifold.py: two reactions take the general path
    assert not mf.explicit
    T = np.linspace(260.0, 650.0, 40)
    for tau in (10.0, 1000.0, 1e5):
        xi = mf.isothermal_extents(np.full(T.shape, tau), T)
        C = mf.concentrations(xi)
        r1, r2 = sc.reactions
        k1 = r1.k0 * np.exp(-r1.Ea / (R_GAS * T))
        k2 = r2.k0 * np.exp(-r2.Ea / (R_GAS * T))
        CA = sc.c_in[0] / (1 + tau * k1)
        CP = tau * k1 * CA / (1 + tau * k2)
        # analytic: consecutive first-order reactions in a CSTR
        np.testing.assert_allclose(C[:, 0], CA, rtol=1e-9, atol=1e-9 * sc.c_in[0])
        # analytic: consecutive first-order reactions in a CSTR
        np.testing.assert_allclose(C[:, 1], CP, rtol=1e-9, atol=1e-9 * sc.c_in[0])
        # analytic: A -> P -> D conserves moles
        np.testing.assert_allclose(C.sum(axis=1), sc.c_in[0], rtol=1e-12)


@pytest.mark.parametrize("which", ["second_order", "series"])
def test_reduced_jacobian_eigenvalues_are_those_of_the_full_block(series, which):
    sc = _second_order(UA=3000.0) if which == "second_order" else series(UA=5000.0)
    mf = Manifold(sc)
    model = Model(sc)
    tau = 1800.0
    for T in (290.0, 340.0, 390.0, 450.0):
        g = mf.general_eval(np.array([tau]), np.array([T]))
        T_in = float(g.T_in[0])
        u = nominal_inputs(sc, tau=tau, T_in=T_in)
        C = mf.concentrations(g.xi[0])
        y = model.pack(sc.vessel.h_set, C, T, 0.0)
        full = np.sort_complex(np.linalg.eigvals(model.reactor_block(y, u)))
        red = np.linalg.eigvals(mf.reduced_jacobian(np.array([tau]), np.array([T]), g.xi)[0])
        # analytic: the species invariants (n - rank(nu) of them) relax at -1/tau; the rest are the reduced ones
        n_inv = sc.n_species - np.linalg.matrix_rank(sc.nu)
        expected = np.sort_complex(np.concatenate((red, np.full(n_inv, -1.0 / tau))))
        # analytic: the eigenvalues of the full block are those of the reduced one plus -1/tau per invariant
        np.testing.assert_allclose(full, expected, rtol=1e-7, atol=1e-9 * np.max(np.abs(full)))


def test_heat_release_bound_is_the_adiabatic_rise(series):
    sc = _second_order()
    # analytic: dT_ad = (-dH) C_lim / (rho cp) with the limiting reactant A
    assert Manifold(sc).max_heat_release() == pytest.approx(90.0e3 * 2000.0 / (900.0 * 2000.0), rel=1e-9)
    s = series()
    # analytic: every A ends as D, releasing both reactions' heat
    expected = (240.0e3 + 400.0e3) * 2000.0 / (s.rho * s.cp)
    # analytic: every A ends as D, releasing both reactions' heat
    assert Manifold(s).max_heat_release() == pytest.approx(expected, rel=1e-9)
