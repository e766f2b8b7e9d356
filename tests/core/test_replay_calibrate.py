"""Replay and calibration on plant data made in the test from a known scenario.

Check values: the simulator itself (``exomap.core.dynamics.simulate``, an independent code path with its own
event handling) for the replay; the known true parameters for the calibration, with noise of known spread
(seeded), so a 95 % interval must cover the truth about 95 % of the time (binomial: at least 90 of 100).
"""

from __future__ import annotations

import json
from importlib import resources

import numpy as np
import pytest
from exomap import schema
from exomap.core.calibrate import calibrate, parse_target, rate_constant, with_values
from exomap.core.dynamics import simulate
from exomap.core.errors import ModelInputError
from exomap.core.replay import PlantRecord, replay


def _demo(name: str):
    doc = json.loads((resources.files("exomap.demos") / f"{name}.json").read_text(encoding="utf-8"))
    return schema.parse_scenario(doc).to_core()


@pytest.fixture(scope="module")
def jacketed():
    return _demo("jacketed-first-order")


class _Run:
    def __init__(self, t, T, h, q_out):
        self.t, self.T, self.h, self.q_out = t, T, h, q_out


def _ramped_run(sc, step=20.0, hours=3.0):
    """A simulated run with ramps whose ends fall on record times, and its record (inputs piecewise linear)."""
    events = [
        {"at": 600.0, "ramp": "feed_temperature", "to": sc.T_in + 6.0, "over": 3600.0},
        {"at": 4800.0, "ramp": "feed_flow", "to": sc.q_in * 1.15, "over": 1800.0},
    ]
    duration = hours * 3600.0
    sim = simulate(sc, events=events, duration=duration, record_every=step, rtol=1e-8)
    # the simulator also records at each event time: keep one record per time
    keep = np.concatenate([[True], np.diff(sim.t) > 0]) & (np.abs(sim.t / step - np.round(sim.t / step)) < 1e-9)
    sim = _Run(sim.t[keep], sim.T[keep], sim.h[keep], sim.q_out[keep])
    t = sim.t
    T_in = np.interp(t, [0, 600, 4200, duration], [sc.T_in, sc.T_in, sc.T_in + 6.0, sc.T_in + 6.0])
    q = np.interp(t, [0, 4800, 6600, duration], [sc.q_in, sc.q_in, sc.q_in * 1.15, sc.q_in * 1.15])
    return sim, t, T_in, q


def test_replay_of_simulated_data_reproduces_the_simulator(jacketed):
    sim, t, T_in, q = _ramped_run(jacketed)
    assert sim.t.size > 100 and np.allclose(np.diff(sim.t), 20.0)
    rec = PlantRecord(t, {"feed_flow": q, "feed_temperature": T_in, "reactor_temperature": sim.T, "level": sim.h})
    res = replay(jacketed, rec, rtol=1e-8)
    # both integrate the same model to rtol 1e-8 from the same steady state: agreement to ~1e-4 K
    np.testing.assert_allclose(res.T, sim.T, atol=2e-3, rtol=0)
    np.testing.assert_allclose(res.h, sim.h, atol=1e-5, rtol=0)
    np.testing.assert_allclose(res.q_out, sim.q_out, rtol=1e-4)
    stats = res.residual_statistics()
    assert stats["reactor_temperature"]["max_abs"] < 2e-3
    assert res.tau[0] == pytest.approx(jacketed.tau_nominal, rel=1e-12)


def test_bad_records_are_refused_by_field(jacketed):
    t = np.array([0.0, 20.0, 10.0])
    with pytest.raises(ModelInputError, match="increase"):
        replay(jacketed, PlantRecord(t, {}))
    with pytest.raises(ModelInputError, match="at least two"):
        replay(jacketed, PlantRecord(np.array([0.0]), {}))
    with pytest.raises(ModelInputError, match="not a calibration target"):
        parse_target("reactions[0].k0", jacketed)
    with pytest.raises(ModelInputError, match="reactions") as err:
        parse_target("reactions[3].activation_energy", jacketed)
    assert err.value.field == "reactions[3].activation_energy"


def test_arrhenius_about_the_reference_temperature_holds_k_ref(jacketed):
    T_ref = 360.0
    k = rate_constant(jacketed, 0, T_ref)
    t = parse_target("reactions[0].activation_energy", jacketed)
    moved = with_values(jacketed, [t], [jacketed.reactions[0].Ea * 1.1], T_ref)
    # analytic: k(T_ref) = k0 exp(-Ea/(R T_ref)) is unchanged when Ea moves about T_ref
    assert rate_constant(moved, 0, T_ref) == pytest.approx(k, rel=1e-12)
    assert moved.reactions[0].Ea == pytest.approx(jacketed.reactions[0].Ea * 1.1, rel=1e-15)


def test_calibration_recovers_known_parameters(jacketed):
    sim, t, T_in, q = _ramped_run(jacketed, step=60.0)
    rng = np.random.default_rng(11)
    noisy = sim.T + rng.normal(0.0, 0.2, sim.T.size)
    rec = PlantRecord(t, {"feed_flow": q, "feed_temperature": T_in, "reactor_temperature": noisy})
    T_ref = 350.0
    truth = {"reactions[0].rate_constant": rate_constant(jacketed, 0, T_ref), "jacket.ua": jacketed.UA_jacket}
    targets = [parse_target(p, jacketed) for p in truth]
    start = with_values(jacketed, targets, [truth["reactions[0].rate_constant"] * 1.5, jacketed.UA_jacket * 0.8], T_ref)
    cal = calibrate(start, rec, list(truth), T_ref=T_ref)
    assert cal.success
    for (path, true), est, (lo, hi) in zip(truth.items(), cal.estimates, cal.interval_95, strict=True):
        assert lo is not None and hi is not None
        assert lo <= true <= hi, (path, lo, true, hi, est)
    # the residual spread is the noise put in (0.2 K), within sampling error
    assert cal.residual_sd["reactor_temperature"] == pytest.approx(0.2, rel=0.25)


@pytest.mark.slow
def test_interval_coverage_over_seeded_replicates(jacketed):
    # cheap case: one hour, one record a minute, the jacket UA fitted alone; 100 seeded noise draws
    sim, t, T_in, q = _ramped_run(jacketed, step=120.0, hours=1.5)
    covered = 0
    for seed in range(100):
        rng = np.random.default_rng(1000 + seed)
        rec = PlantRecord(
            t, {"feed_flow": q, "feed_temperature": T_in, "reactor_temperature": sim.T + rng.normal(0.0, 0.3, t.size)}
        )
        cal = calibrate(jacketed, rec, ["jacket.ua"])
        lo, hi = cal.interval_95[0]
        covered += int(lo is not None and hi is not None and lo <= jacketed.UA_jacket <= hi)
    # 95 % intervals: fewer than 90 of 100 has probability < 3 % if the coverage is right (binomial)
    assert covered >= 90, covered


def test_sensitivities_agree_with_differences_of_tight_replays(jacketed):
    # check values: central differences of replays at rtol 1e-11 (no sensitivity equations on that path)
    from exomap.core.calibrate import _balance_derivative, value_of

    sim, t, T_in, q = _ramped_run(jacketed, step=60.0, hours=2.0)
    rec = PlantRecord(t, {"feed_flow": q, "feed_temperature": T_in, "reactor_temperature": sim.T})
    T_ref = 350.0
    paths = [
        "reactions[0].rate_constant",
        "reactions[0].activation_energy",
        "reactions[0].reaction_enthalpy",
        "jacket.ua",
        "jacket.coolant_temperature",
        "liquid.heat_capacity",
        "feed.concentrations.A",
    ]
    targets = [parse_target(p, jacketed) for p in paths]
    v0 = np.array([value_of(jacketed, tg, T_ref) for tg in targets])
    p0 = np.array([np.log(v) if tg.log else v for tg, v in zip(targets, v0, strict=True)])
    scale = np.array([1.0 if tg.log else abs(v) for tg, v in zip(targets, p0, strict=True)])
    deriv = _balance_derivative(jacketed, targets, rec, T_ref, scale)
    res = replay(jacketed, rec, rtol=1e-9, sensitivity=deriv, n_params=len(paths))
    S = res.sensitivity[jacketed.n_species] / scale[:, None]  # dT/dθ, (params, records)

    def natural(p):
        return [np.exp(x) if tg.log else x for tg, x in zip(targets, p, strict=True)]

    for k, path in enumerate(paths):
        h = 1e-5 * scale[k]
        up, dn = p0.copy(), p0.copy()
        up[k] += h
        dn[k] -= h
        T_up = replay(with_values(jacketed, targets, natural(up), T_ref), rec, rtol=1e-11).T
        T_dn = replay(with_values(jacketed, targets, natural(dn), T_ref), rec, rtol=1e-11).T
        fd = (T_up - T_dn) / (2.0 * h)
        assert np.abs(fd).max() > 0, path
        # the two agree to the integrators' tolerance (relative 1e-3 of the largest sensitivity)
        np.testing.assert_allclose(S[k], fd, rtol=0, atol=1e-3 * np.abs(fd).max(), err_msg=path)


def test_a_recorded_coolant_temperature_is_not_fitted(jacketed):
    # the record's coolant temperature drives the replay, so the scenario's own value cannot matter: a zero
    # column, reported as a parameter the data cannot determine
    sim, t, T_in, q = _ramped_run(jacketed, step=120.0, hours=1.5)
    rec = PlantRecord(
        t,
        {"feed_flow": q, "feed_temperature": T_in, "coolant_temperature": np.full(t.size, jacketed.T_c),
         "reactor_temperature": sim.T + np.random.default_rng(2).normal(0.0, 0.2, t.size)},
    )  # fmt: skip
    cal = calibrate(jacketed, rec, ["jacket.ua", "jacket.coolant_temperature"], profile=False)
    assert any("rank-deficient" in w for w in cal.fit.warnings), cal.fit.warnings


def test_profiles_stop_at_the_deadline_and_say_so(jacketed):
    import time

    sim, t, T_in, q = _ramped_run(jacketed, step=120.0, hours=1.5)
    noisy = sim.T + np.random.default_rng(5).normal(0.0, 0.2, t.size)
    rec = PlantRecord(t, {"feed_flow": q, "feed_temperature": T_in, "reactor_temperature": noisy})
    cal = calibrate(jacketed, rec, ["jacket.ua"], deadline=time.monotonic())
    assert cal.interval_95 == ((None, None),)
    assert np.isfinite(cal.estimates[0]) and cal.standard_errors[0] > 0
    assert any("time allowed ran out" in w and "jacket.ua" in w for w in cal.fit.warnings), cal.fit.warnings
