"""The probability map under uncertain data (exomap.core.uncertainty, DESIGN.md §11).

Checks: with no spread the probabilities are exactly 0 or 1 and equal the deterministic map; with only the
activation energy uncertain (one reaction, adiabatic) each cell's probability agrees, within three standard
errors, with the integral of the region's indicator over the normal distribution of Ea, computed here by
the independent dimensionless root finder of conftest.Reference and bisection for the Ea where the cell's
region changes; the bound is scipy's exact binomial interval; the spread of the estimate across seeds
shrinks like 1/N or better; the same spec and seed give the same numbers.
"""

from __future__ import annotations

import math
import re
from dataclasses import replace

import numpy as np
import pytest
from exomap.core.errors import LimitExceededError, ModelInputError
from exomap.core.opmap import operating_map
from exomap.core.regions import CODE
from exomap.core.scenario import R_GAS, Limits
from exomap.core.uncertainty import (
    UncertainParameter,
    UncertaintySpec,
    draw,
    uncertainty_map,
    upper_bound,
)
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats


@pytest.fixture(scope="module")
def adiabatic(cstr):
    # A first-order adiabatic CSTR with three steady states and a hot branch above the maximum temperature over
    # part of the window (gamma 20, B 8 at 350 K: adiabatic rise 140 K); WINDOW is chosen around its S-shape.
    return cstr(20.0, 8.0, T_in=350.0, T_max=440.0)


def _spec(*params: UncertainParameter, samples: int = 64, seed: int = 0, T_ref: float | None = None):
    return UncertaintySpec(parameters=params, samples=samples, seed=seed, T_ref=T_ref)


def _ea(sd: float) -> UncertainParameter:
    return UncertainParameter("reactions[0].activation_energy", "normal", sd=sd)


WINDOW = {"tau_range": (20.0, 2000.0), "T_in_range": (300.0, 380.0), "points": (24, 20)}


@pytest.mark.parametrize("jacketed", [False, True])
def test_no_spread_gives_the_deterministic_regions(cstr, jacketed):
    # analytic: with zero spread every sample is the nominal scenario, so each probability is exactly the
    # indicator of the deterministic map's region (the jacketed case, B 16 and
    # UA/(rho cp V) = 0.01 1/s, has Hopf points: 'unstable' cells)
    c = cstr(20.0, 16.0 if jacketed else 8.0, T_in=350.0, T_max=440.0, kappa=1e-2 if jacketed else 0.0)
    spec = _spec(_ea(0.0), UncertainParameter("reactions[0].rate_constant", "lognormal", factor=1.0), samples=8)
    um = uncertainty_map(c.sc, spec, **WINDOW)
    det = operating_map(c.sc, **WINDOW)
    for key in ("runaway", "unstable", "multiple"):
        p = um.probability[key]
        assert set(np.unique(p)) <= {0.0, 1.0}
        np.testing.assert_array_equal(p == 1.0, det.region == CODE[key], err_msg=key)
    np.testing.assert_array_equal(
        um.probability["unsafe"] == 1.0, np.isin(det.region, [CODE["runaway"], CODE["unstable"]])
    )
    if jacketed:
        assert (det.region == CODE["unstable"]).any()
    assert (det.region == CODE["multiple"]).any() and (det.region == CODE["runaway"]).any()


def test_no_spread_several_reactions_stacked(series):
    # analytic: as above, on the general (several reactions) path, stacked like one reaction
    sc = series(T_max=420.0)
    window = {"tau_range": (100.0, 10000.0), "T_in_range": (240.0, 300.0), "points": (12, 12)}
    um = uncertainty_map(sc, _spec(_ea(0.0), samples=8), **window)
    det = operating_map(sc, **window)
    assert um.method == "stacked columns (general path)"
    for key in ("runaway", "unstable", "multiple"):
        np.testing.assert_array_equal(um.probability[key] == 1.0, det.region == CODE[key], err_msg=key)


def test_stacked_equals_one_sample_at_a_time(adiabatic):
    # invariant: stacking the columns of all samples is only a faster way to compute the same thing
    spec = _spec(_ea(2500.0), UncertainParameter("reactions[0].rate_constant", "lognormal", factor=1.4), samples=16)
    a = uncertainty_map(adiabatic.sc, spec, **WINDOW)
    b = uncertainty_map(adiabatic.sc, spec, stacked=False, **WINDOW)
    for key in a.counts:
        np.testing.assert_array_equal(a.counts[key], b.counts[key], err_msg=key)


def _region_ref(ref, c, Ea: float, T_ref: float, tau: float, T_in: float, T_max: float) -> str:
    """Region of a cell for one activation energy, from the dimensionless roots of conftest.Reference (no
    exomap code): k(T) = k_ref exp(-Ea/R (1/T - 1/T_ref)) with k_ref held at T_ref."""
    k_in = c.k_ref * math.exp(-Ea / R_GAS * (1.0 / T_in - 1.0 / T_ref))
    gamma = Ea / (R_GAS * T_in)
    B = c.dT_ad * gamma / T_in
    x = np.sort(ref.roots_x(tau * k_in, B, gamma, n=20001))
    T = T_in * (1.0 + B * x / gamma)
    # adiabatic, one reaction: with three states the middle one is a saddle, every other one is stable
    stable = np.ones(x.size, dtype=bool)
    if x.size == 3:
        stable[1] = False
    if np.any(stable & (T > T_max)):
        return "runaway"
    if x.size > 1:
        return "multiple"
    return "stable"


def _exact_probabilities(ref, c, Ea0, sd, T_ref, tau, T_in, T_max):
    """P(region) for Ea ~ N(Ea0, sd): the region's indicator integrated over Ea. The Ea where the region changes
    are found by a scan over +-6 sd and bisection to 1e-7 sd; a bisection whose midpoint shows a third region
    goes on in both halves, so a narrow band between two different regions is not skipped (once the bracket is
    narrower than twice the band, its midpoint lies in the band)."""

    def region(e):
        return _region_ref(ref, c, e, T_ref, tau, T_in, T_max)

    def cuts_between(lo, r_lo, hi, r_hi):
        while hi - lo > 1e-7 * sd:
            mid = 0.5 * (lo + hi)
            r = region(mid)
            if r == r_lo:
                lo = mid
            elif r == r_hi:
                hi = mid
            else:
                return cuts_between(lo, r_lo, mid, r) + cuts_between(mid, r, hi, r_hi)
        return [(0.5 * (lo + hi), r_hi)]

    grid = Ea0 + sd * np.linspace(-6.0, 6.0, 97)
    regions = [region(e) for e in grid]
    cuts, labels = [-np.inf], [regions[0]]
    for k in range(grid.size - 1):
        if regions[k + 1] != regions[k]:
            for cut, lab in cuts_between(grid[k], regions[k], grid[k + 1], regions[k + 1]):
                cuts.append(cut)
                labels.append(lab)
    cuts.append(np.inf)
    cdf = stats.norm.cdf((np.array(cuts) - Ea0) / sd)
    out = {"runaway": 0.0, "multiple": 0.0, "stable": 0.0}
    for k, lab in enumerate(labels):
        out[lab] += cdf[k + 1] - cdf[k]
    return out


def test_activation_energy_only_matches_quadrature(ref, adiabatic):
    # reference: the indicator of each region integrated over the normal distribution of Ea (analytic
    # quadrature with bisection for the change points, roots from conftest.Reference, independent of the
    # sampler); tolerance three standard errors of a binomial proportion, sqrt(p(1-p)/n), with p the
    # exact value and a floor of one sample's weight for cells next to 0 or 1
    c = adiabatic
    sd = 3000.0  # J/mol, about 5 % of Ea (58 kJ/mol)
    T_ref = 350.0
    n = 256
    um = uncertainty_map(c.sc, _spec(_ea(sd), samples=n, seed=3, T_ref=T_ref), **WINDOW)
    p_run, p_mul = um.probability["runaway"], um.probability["multiple"]
    mixed = np.argwhere(((p_run > 0) & (p_run < 1)) | ((p_mul > 0) & (p_mul < 1)))
    assert len(mixed) >= 8, "the window should hold cells whose region depends on Ea"
    # the six cells whose probabilities are nearest one half (where the estimate is hardest), two cells in the
    # tails and two cells that are certain either way
    mid = np.maximum(np.abs(p_run - 0.5), np.abs(p_mul - 0.5))[mixed[:, 0], mixed[:, 1]]
    order = np.argsort(np.minimum(np.abs(p_run - 0.5), np.abs(p_mul - 0.5))[mixed[:, 0], mixed[:, 1]], kind="stable")
    picks = np.vstack((mixed[order[:6]], mixed[np.argsort(-mid, kind="stable")[:2]]))
    certain = np.argwhere((p_run == 1) | ((p_run == 0) & (p_mul == 0)))
    picks = np.vstack((picks, certain[[0, -1]]))
    for i, j in picks:
        tau, T_in = um.tau[j], um.T_in[i]
        exact = _exact_probabilities(ref, c, c.sc.reactions[0].Ea, sd, T_ref, tau, T_in, c.sc.limits.T_max)
        for key, sampled in (("runaway", p_run[i, j]), ("multiple", p_mul[i, j])):
            p = exact[key]
            se = math.sqrt(max(p * (1.0 - p), 1.0 / n) / n)
            assert abs(sampled - p) <= 3.0 * se, (key, tau, T_in, sampled, p)


@pytest.mark.parametrize("n", [8, 64, 256])
def test_upper_bound_is_the_exact_binomial_bound(n):
    # reference: scipy.stats.binomtest(k, n, alternative="less").proportion_ci(0.95, method="exact"), the
    # Clopper-Pearson interval, one-sided
    ks = np.unique(np.r_[0, 1, 2, np.arange(0, n + 1, max(1, n // 16)), n - 1, n])
    ours = upper_bound(ks, n)
    for k, ours_k in zip(ks, ours, strict=True):
        ci = stats.binomtest(int(k), n, alternative="less").proportion_ci(confidence_level=0.95, method="exact")
        assert ours_k == pytest.approx(ci.high, rel=1e-10, abs=1e-14)
        assert ci.low == 0.0


def test_same_spec_and_seed_give_the_same_numbers(adiabatic):
    spec = _spec(_ea(2500.0), UncertainParameter("reactions[0].rate_constant", "lognormal", factor=1.5), samples=32)
    a = uncertainty_map(adiabatic.sc, spec, **WINDOW).to_dict()
    b = uncertainty_map(adiabatic.sc, spec, **WINDOW).to_dict()
    assert a == b
    c = uncertainty_map(adiabatic.sc, replace(spec, seed=1), **WINDOW).to_dict()
    assert c["probability"] != a["probability"]
    assert c["seed"] == 1 and a["samples"] == 32


@pytest.mark.slow
def test_spread_across_seeds_shrinks_like_one_over_n(adiabatic):
    # Scrambled Sobol integrates a step in one dimension at the rate 1/N or better; for independent draws the
    # spread would shrink like 1/sqrt(N). Measured on the map's mean unsafe probability, 10 seeds each at
    # N = 32 and N = 512: 16 times more samples must cut the spread at least 8-fold (1/N gives 16-fold,
    # 1/sqrt(N) 4-fold; measured on three blocks of 10 seeds: 18-, 19- and 28-fold).
    window = {"tau_range": (20.0, 2000.0), "T_in_range": (300.0, 380.0), "points": (10, 8)}
    spread = {}
    for n in (32, 512):
        est = [
            uncertainty_map(adiabatic.sc, _spec(_ea(3000.0), samples=n, seed=s, T_ref=350.0), **window)
            .probability["unsafe"]
            .mean()
            for s in range(10)
        ]
        spread[n] = float(np.std(est, ddof=1))
    assert spread[32] > 0
    assert spread[512] <= spread[32] / 8.0, spread


def test_arrhenius_turns_about_the_reference_temperature(adiabatic):
    # analytic: k(T_ref) is the sampled rate constant whatever the activation energy sample
    sc = adiabatic.sc
    ps = draw(sc, _spec(_ea(3000.0), samples=64, T_ref=330.0))
    k_ref = sc.reactions[0].k0 * math.exp(-sc.reactions[0].Ea / (R_GAS * 330.0))
    k_at_ref = ps.k0[:, 0] * np.exp(-ps.Ea[:, 0] / (R_GAS * 330.0))
    np.testing.assert_allclose(k_at_ref, k_ref, rtol=1e-12)
    assert np.std(ps.Ea[:, 0]) > 2000.0


def test_correlated_normals_have_the_asked_correlation(adiabatic):
    # analytic: the Gaussian copula gives the underlying normals correlation rho
    spec = UncertaintySpec(
        parameters=(_ea(2000.0), UncertainParameter("reactions[0].rate_constant", "lognormal", factor=1.5)),
        correlations=(("reactions[0].activation_energy", "reactions[0].rate_constant", 0.7),),
        samples=1024,
    )
    ps = draw(adiabatic.sc, spec)
    r = np.corrcoef(ps.z.T)[0, 1]
    assert r == pytest.approx(0.7, abs=0.03)
    np.testing.assert_allclose(
        np.log(ps.values[:, 1] / np.exp(np.mean(np.log(ps.values[:, 1])))).std(), math.log(1.5), rtol=0.05
    )


@pytest.mark.parametrize(
    ("param", "field"),
    [
        (UncertainParameter("reactions[2].activation_energy", "normal", sd=1.0), "uncertainty"),
        (UncertainParameter("reactions[0].pre_exponential", "lognormal", factor=2.0), "uncertainty"),
        (UncertainParameter("reactions[0].activation_energy", "normal", sd=20000.0), r"uncertainty\.parameters\[0\]"),
        (UncertainParameter("liquid.heat_capacity", "uniform", low=5.0, high=1.0), r"uncertainty\.parameters\[0\]"),
        (UncertainParameter("feed.concentrations.Z", "normal", sd=1.0), "uncertainty"),
    ],
)
def test_bad_spec_names_the_target(adiabatic, param, field):
    with pytest.raises(ModelInputError, match=param.target.replace("[", r"\[").replace("]", r"\]")) as exc:
        draw(adiabatic.sc, _spec(param))
    assert exc.value.field is not None and re.match(field, exc.value.field)


def test_samples_must_be_a_power_of_two_and_bounded(adiabatic):
    with pytest.raises(ModelInputError, match="power of two") as exc:
        draw(adiabatic.sc, _spec(_ea(1.0), samples=100))
    assert exc.value.field == "uncertainty.samples"
    with pytest.raises(LimitExceededError, match="sample-cells"):
        uncertainty_map(adiabatic.sc, _spec(_ea(1.0), samples=16384), points=(1000, 1000))


def test_no_block_is_a_clear_error(adiabatic):
    with pytest.raises(ModelInputError, match="no uncertainty block") as exc:
        uncertainty_map(adiabatic.sc, **WINDOW)
    assert exc.value.field == "uncertainty"


def test_answer_document_keys_and_robust_window(adiabatic):
    sc = replace(adiabatic.sc, limits=Limits(T_max=440.0))
    um = uncertainty_map(sc, _spec(_ea(3000.0), samples=64, T_ref=350.0), **WINDOW)
    d = um.to_dict()
    for key in ("probability", "upper_bound_95", "robust_window", "boundary_bands", "drivers", "samples", "seed"):
        assert key in d
    # the nominal map's own answer is part of it (its regions, boundaries, ...), same grid
    nominal = operating_map(sc, **WINDOW).to_dict()
    assert d["region"] == nominal["region"] and d["boundaries"] == nominal["boundaries"]
    assert d["residence_time_s"] == nominal["residence_time_s"]
    assert set(d["probability"]) == {"runaway", "unstable", "multiple", "unsafe"}
    up = np.array(d["upper_bound_95"]["unsafe"])
    np.testing.assert_array_equal(np.array(d["robust_window"]), up < sc.policy.max_unsafe_probability)
    assert np.all(up >= np.array(d["probability"]["unsafe"]))
    assert d["drivers"][0]["target"] == "reactions[0].activation_energy"
    band = d["boundary_bands"]["ignition"]
    q05 = np.array([np.nan if r[1] is None else r[1] for r in band["q05"]])
    q95 = np.array([np.nan if r[1] is None else r[1] for r in band["q95"]])
    both = np.isfinite(q05) & np.isfinite(q95)
    assert both.any() and np.all(q05[both] <= q95[both])


@settings(max_examples=60, deadline=None)
@given(n_exp=st.integers(3, 14), data=st.data())
def test_upper_bound_invariants(n_exp, data):
    # invariants of an exact one-sided bound: above the estimate k/n, rising with k, 1 only at k = n, and the
    # analytic value 1 - 0.05**(1/n) at k = 0
    n = 2**n_exp
    k = data.draw(st.integers(0, n - 1))
    u = upper_bound(np.array([k, k + 1]), n)
    assert k / n < u[0] < u[1] <= 1.0
    assert u[0] < 1.0
    assert float(upper_bound(0, n)) == pytest.approx(1.0 - 0.05 ** (1.0 / n), rel=1e-12)


@settings(max_examples=6, deadline=None)
@given(sd=st.floats(0.0, 4000.0), factor=st.floats(1.0, 2.0), seed=st.integers(0, 1000))
def test_probability_map_invariants(adiabatic, sd, factor, seed):
    # invariants: probabilities in [0, 1]; unsafe is runaway or unstable, so it lies between the larger of the
    # two and their sum; every bound is at least its estimate; the robust window is where the unsafe bound is
    # below the policy
    spec = _spec(
        _ea(sd), UncertainParameter("reactions[0].rate_constant", "lognormal", factor=factor), samples=16, seed=seed
    )
    um = uncertainty_map(adiabatic.sc, spec, tau_range=(20.0, 2000.0), T_in_range=(300.0, 380.0), points=(8, 6))
    p = um.probability
    for key in p:
        assert np.all((p[key] >= 0) & (p[key] <= 1)) and np.all(um.upper[key] >= p[key])
    assert np.all(p["unsafe"] >= np.maximum(p["runaway"], p["unstable"]))
    assert np.all(p["unsafe"] <= p["runaway"] + p["unstable"] + 1e-12)
    np.testing.assert_array_equal(um.robust, um.upper["unsafe"] < adiabatic.sc.policy.max_unsafe_probability)
