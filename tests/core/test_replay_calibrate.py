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
