"""The stacked manifolds of the probability map (exomap.core.stacked).

Checks: every column of a stacked manifold evaluates to what the deterministic ``Manifold`` of that sample's
own scenario gives at the same point (feed temperature, slope, extents, concentrations, stability), on the
closed-form path of one reaction and on the general path of several; the probability map stacked on the
general path counts the same regions as sampling one scenario at a time; and a sample whose hot state leaves
1 - X below 1e-15 is still counted as a runaway (the stacked manifold works in the log-odds of the conversion,
like the deterministic core).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from exomap.core.manifold import Manifold
from exomap.core.scenario import R_GAS, Limits, Reaction, Scenario, Valve, Vessel
from exomap.core.stacked import StackedGeneralManifold, StackedManifold
from exomap.core.uncertainty import UncertainParameter, UncertaintySpec, draw, uncertainty_map
from scipy.optimize import brentq


def _series_spec(samples: int = 16, UA: float = 200.0) -> UncertaintySpec:
    # every kind of target the general path gathers per column (the jacket's only where there is one)
    jacket = (
        UncertainParameter("jacket.ua", "uniform", low=0.8 * UA, high=1.2 * UA),
        UncertainParameter("jacket.coolant_temperature", "normal", sd=2.0),
    )
    return UncertaintySpec(
        parameters=(
            UncertainParameter("reactions[0].activation_energy", "normal", sd=2500.0),
            UncertainParameter("reactions[1].activation_energy", "normal", sd=3000.0),
            UncertainParameter("reactions[1].rate_constant", "lognormal", factor=1.5),
            UncertainParameter("reactions[1].reaction_enthalpy", "normal", sd=20e3),
            UncertainParameter("liquid.heat_capacity", "lognormal", factor=1.05),
            UncertainParameter("feed.concentrations.A", "lognormal", factor=1.1),
        )
        + (jacket if UA > 0 else ()),
        samples=samples,
        seed=3,
    )


def test_stacked_general_manifold_equals_each_samples_own_manifold(series):
    # invariant: a stacked column is the deterministic manifold of its sample's scenario
    sc = series(UA=200.0, T_c=280.0)
    ps = draw(sc, _series_spec())
    tau = np.array([300.0, 1000.0, 5000.0])
    idx = np.repeat(np.arange(ps.n), tau.size)
    smf = StackedGeneralManifold(ps, np.tile(tau, ps.n), idx)
    assert smf.same_structure
    T = np.linspace(260.0, 560.0, 41)
    code = np.arange(idx.size, dtype=float)
    e = smf.general_eval(code[:, None], np.broadcast_to(T, (idx.size, T.size)))
    st = smf.stability(e.tau, e.T, e.xi, smf.state_C(e))
    for i in range(ps.n):
        mf = Manifold(ps.scenario(i))
        rows = slice(i * tau.size, (i + 1) * tau.size)
        d = mf.general_eval(tau[:, None], np.broadcast_to(T, (tau.size, T.size)))
        assert d.valid.all() and e.valid[rows].all()
        for name in ("T_in", "dTin_ds", "xi", "C"):
            np.testing.assert_allclose(getattr(e, name)[rows], getattr(d, name), rtol=1e-9, atol=1e-9, err_msg=name)
        ds = mf.stability(d.tau, d.T, d.xi, mf.state_C(d))
        np.testing.assert_array_equal(st[0][rows], ds[0])
        np.testing.assert_allclose(st[1][rows], ds[1], rtol=1e-7, atol=1e-12)


def test_stacked_closed_form_equals_each_samples_own_manifold(cstr):
    # invariant: the same for one reaction, in the log-odds w of the conversion, out to 1 - X = e^-60
    c = cstr(20.0, 12.0, T_in=350.0, kappa=5e-3)
    spec = UncertaintySpec(
        parameters=(
            UncertainParameter("reactions[0].activation_energy", "normal", sd=3000.0),
            UncertainParameter("reactions[0].rate_constant", "lognormal", factor=1.5),
            UncertainParameter("jacket.ua", "uniform", low=0.8 * c.sc.UA_jacket, high=1.2 * c.sc.UA_jacket),
            UncertainParameter("feed.concentrations.A", "lognormal", factor=1.2),
        ),
        samples=8,
    )
    ps = draw(c.sc, spec)
    tau = np.array([30.0, 300.0, 3000.0])
    idx = np.repeat(np.arange(ps.n), tau.size)
    smf = StackedManifold(ps, np.tile(tau, ps.n), idx)
    w = np.linspace(-40.0, 60.0, 51)
    code = np.arange(idx.size, dtype=float)
    e = smf.explicit_eval(code[:, None], w)
    C = smf.state_C(e)
    st = smf.stability(e.tau, e.T, e.xi, C)
    w_back = smf.w_at_T(code[:, None], np.where(e.valid, e.T, 400.0))
    for i in range(ps.n):
        mf = Manifold(ps.scenario(i))
        rows = slice(i * tau.size, (i + 1) * tau.size)
        d = mf.explicit_eval(tau[:, None], w)
        for name in ("T", "T_in", "dTin_ds", "xi"):
            np.testing.assert_allclose(getattr(e, name)[rows], getattr(d, name), rtol=1e-12, err_msg=name)
        np.testing.assert_allclose(C[rows], np.broadcast_to(mf.explicit_C(w), C[rows].shape), rtol=1e-12)
        ds = mf.stability(d.tau, d.T, d.xi, mf.state_C(d))
        np.testing.assert_array_equal(st[0][rows][d.valid], ds[0][d.valid])
        ok = d.valid
        np.testing.assert_allclose(
            w_back[rows][ok], mf.explicit_w_at_T(np.broadcast_to(tau[:, None], d.T.shape)[ok], d.T[ok]), rtol=1e-9
        )


@pytest.mark.parametrize(
    ("UA", "T_max", "window", "shown"),
    [
        # adiabatic, up to five states, no limit in reach: 'multiple'
        (0.0, 2000.0, ((100.0, 1e4), (240.0, 300.0)), ("multiple",)),
        # jacketed with Hopf points (the case of the deterministic core's hard cases): every region
        (5000.0, 420.0, ((50.0, 5e4), (260.0, 330.0)), ("multiple", "runaway", "unstable")),
    ],
)
def test_stacked_general_map_equals_one_sample_at_a_time(series, UA, T_max, window, shown):
    # invariant: stacking the samples of several reactions is only a faster way to compute the same map
    sc = series(UA=UA, T_c=300.0, T_max=T_max)
    spec = _series_spec(samples=8, UA=UA)
    kw = {"tau_range": window[0], "T_in_range": window[1], "points": (14, 12)}
    a = uncertainty_map(sc, spec, **kw)
    b = uncertainty_map(sc, spec, stacked=False, **kw)
    assert a.method == "stacked columns (general path)" and b.method == "one sample at a time"
    for key in a.counts:
        np.testing.assert_array_equal(a.counts[key], b.counts[key], err_msg=key)
    for key in ("runaway", "unstable", "multiple"):
        assert (a.probability[key].max() > 0) == (key in shown), key


# -- hot states near full conversion --------------------------------------------------------------------------
def _hot() -> Scenario:
    """A -> P, first order, Ea = 200 kJ/mol, adiabatic rise 250 K, feed 1 mol/L (invented data; the scenario
    of the deterministic core's hard cases, tests/core/test_hard_cases.py)."""
    V = math.pi * 1.2**2 / 4 * 1.5
    return Scenario(
        species=("A", "P"),
        rho=1000.0,
        cp=4000.0,
        vessel=Vessel(D=1.2, H=2.0, h_set=1.5),
        valve=Valve(Kv=40.0, opening=0.5),
        reactions=(Reaction("A -> P", (-1.0, 1.0), (1.0, 0.0), 1e33, 200e3, -1.0e6),),
        q_in=V / 60.0,
        T_in=440.0,
        c_in=(1000.0, 0.0),
        limits=Limits(T_max=690.0),
        title="hot first-order reaction (test)",
        description="Invented test data.",
    )


def _hottest_state(k0: float, Ea: float, dT_ad: float, tau: float, T_in: float) -> tuple[float, float]:
    """(T, w) of the hottest steady state of the adiabatic first-order tank in the log-odds of the conversion
    (analytic: w = ln(tau k(T)), T = T_in + dT_ad X); scan of w over [-60, 160] and brentq."""

    def f(w: float) -> float:
        return w - (math.log(tau * k0) - Ea / (R_GAS * (T_in + dT_ad / (1.0 + math.exp(-w)))))

    ws = np.linspace(-60.0, 160.0, 4401)
    fs = ws - (math.log(tau * k0) - Ea / (R_GAS * (T_in + dT_ad / (1.0 + np.exp(-ws)))))  # f on the whole grid
    i = np.nonzero(fs[:-1] * fs[1:] <= 0)[0][-1]
    w = brentq(f, ws[i], ws[i + 1], xtol=1e-12)
    return T_in + dT_ad / (1.0 + math.exp(-w)), w


def test_runaway_counted_for_samples_whose_hot_state_is_within_1e15_of_full_conversion():
    # The adiabatic rise is uncertain (sd 5 K about 250 K) and the maximum temperature sits in the spread, so
    # a sample is a runaway where its hottest state (stable, the top of the S-curve) lies above 690 K. Those
    # states leave less than 1e-15 of the reactant: the old extent coordinate could not represent them.
    sc = _hot()
    spec = UncertaintySpec(
        parameters=(
            UncertainParameter("reactions[0].reaction_enthalpy", "normal", sd=20e3),
            UncertainParameter("reactions[0].rate_constant", "lognormal", factor=2.0),
        ),
        samples=32,
        seed=1,
    )
    window = {"tau_range": (20.0, 400.0), "T_in_range": (436.0, 446.0), "points": (4, 3)}
    um = uncertainty_map(sc, spec, **window)
    ps = draw(sc, spec)
    dT_ad = -ps.dH[:, 0] * ps.c_in[:, 0] / (sc.rho * ps.cp)
    tiny = 0
    for i, T_in in enumerate(um.T_in):
        for j, tau in enumerate(um.tau):
            expected = 0
            for s in range(ps.n):
                # independent: the log-odds form of the balances, solved here (no exomap code)
                T_hot, w = _hottest_state(float(ps.k0[s, 0]), float(ps.Ea[s, 0]), float(dT_ad[s]), tau, T_in)
                expected += T_hot > sc.limits.T_max
                tiny += w > math.log(1e15)
            assert um.counts["runaway"][i, j] == expected, (T_in, tau)
            assert 0 < expected < ps.n
    # the case is the one asked about: (nearly) every hot state is within 1e-15 of full conversion
    assert tiny >= 0.9 * ps.n * um.T_in.size * um.tau.size


def test_stiff_points_are_judged_like_each_samples_own_manifold():
    # invariant: where a fast reaction makes the reduced Jacobian stiff (the deterministic core's finding
    # stiff-stability-threshold, three reactions), the stacked manifold's stability is that of each sample's own
    # manifold, whose slow eigenvalues come from the Schur complement of the fast variables
    import json
    from pathlib import Path

    from exomap.core.eigen import FAST
    from exomap.schema import parse_scenario

    rec = json.loads(
        (Path(__file__).resolve().parents[1] / "reference" / "findings" / "stiff-stability-threshold.json").read_text()
    )
    sc = parse_scenario(rec["scenario"]).to_core()
    tau0, T0 = rec["point"]["tau"], rec["point"]["T"]
    spec = UncertaintySpec(
        parameters=(UncertainParameter("reactions[0].activation_energy", "normal", sd=500.0),), samples=8, seed=2
    )
    ps = draw(sc, spec)
    tau = np.array([0.9 * tau0, tau0, 1.1 * tau0])
    idx = np.repeat(np.arange(ps.n), tau.size)
    smf = StackedGeneralManifold(ps, np.tile(tau, ps.n), idx)
    T = np.linspace(T0 - 3.0, T0 + 3.0, 7)
    code = np.arange(idx.size, dtype=float)
    e = smf.general_eval(code[:, None], np.broadcast_to(T, (idx.size, T.size)))
    st, h, ok = smf.stability(e.tau, e.T, e.xi, e.C)
    stiff = 0
    for i in range(ps.n):
        mf = Manifold(ps.scenario(i))
        rows = slice(i * tau.size, (i + 1) * tau.size)
        d = mf.general_eval(tau[:, None], np.broadcast_to(T, (tau.size, T.size)))
        ds = mf.stability(d.tau, d.T, d.xi, d.C)
        v = d.valid & e.valid[rows]
        np.testing.assert_array_equal(st[rows][v], ds[0][v])
        np.testing.assert_allclose(h[rows][v], ds[1][v], rtol=1e-6, atol=1e-300)
        Jr = mf.reduced_jacobian(d.tau, d.T, d.xi, d.C)
        stiff += int(np.sum((np.max(np.abs(np.diagonal(Jr, axis1=-2, axis2=-1)), axis=-1) * d.tau > FAST) & v))
    assert stiff > 0  # the case is the one meant: stiff points were compared


@pytest.mark.parametrize(
    "finding, tau, T",
    [
        # A + B -> P with A in excess, hot: Newton from the feed stalls with both reactants near 1e-19
        ("hot-state-excess-reactant", 23336.34098535964, np.linspace(540.0, 686.0, 9)),
        # an intermediate made by a frozen reaction at ln C ~ -1450 (a feed at 7.5 K)
        ("intermediate-below-log-floor", 3103.128408159542, np.array([5.5, 8.0, 12.0, 18.0, 25.0])),
    ],
)
def test_hard_isothermal_points_solve_like_each_samples_own_manifold(finding, tau, T):
    # invariant: the differential findings whose isothermal solves failed on the deterministic path (28: an
    # intermediate below the smallest double; 29: the excess-reactant stall) converge on the stacked path too,
    # to what each sample's own manifold gives (the solution of the isothermal balances is unique)
    import json
    from pathlib import Path

    from exomap.schema import parse_scenario

    rec = json.loads((Path(__file__).resolve().parents[1] / "reference" / "findings" / f"{finding}.json").read_text())
    sc = parse_scenario(rec["scenario"]).to_core()
    spec = UncertaintySpec(
        parameters=(UncertainParameter("reactions[0].activation_energy", "normal", sd=500.0),), samples=8, seed=5
    )
    ps = draw(sc, spec)
    smf = StackedGeneralManifold(ps, np.full(ps.n, tau), np.arange(ps.n))
    assert smf.same_structure
    e = smf.general_eval(np.arange(ps.n, dtype=float)[:, None], np.broadcast_to(T, (ps.n, T.size)))
    assert e.valid.all()
    for i in range(ps.n):
        d = Manifold(ps.scenario(i)).general_eval(np.full(T.shape, tau), T)
        assert d.valid.all()
        for name in ("T_in", "dTin_ds", "xi", "C"):
            np.testing.assert_allclose(getattr(e, name)[i], getattr(d, name), rtol=1e-9, atol=1e-300, err_msg=name)
