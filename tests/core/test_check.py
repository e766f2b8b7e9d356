"""The setpoint check (exomap.core.check): verdicts in each map region, margins against independent fold
calculations, upsets against the simulator, reasons with numbers and thresholds, errors naming the field.

Scenarios: the dimensionless first-order CSTR of ``conftest.make_cstr`` and the invented demo scenarios in
``scenarios/`` (loaded through the schema layer).
"""

from __future__ import annotations

import json
import math
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from exomap.core.cautions import CAUTIONS
from exomap.core.check import check_setpoint
from exomap.core.dynamics import simulate
from exomap.core.errors import ModelInputError
from exomap.core.scenario import CheckPolicy, Limits
from scipy.optimize import brentq

SCENARIOS = Path(__file__).resolve().parents[2] / "scenarios"


def demo(name):
    from exomap.schema import parse_scenario

    return parse_scenario(json.loads((SCENARIOS / f"{name}.json").read_text())).to_core()


def patient(sc):
    """The fixture's small vessel overflows (H - h_set) A / q = 0.5 m x 1000 s / 1.5 m = 333 s after its outlet
    blocks (analytic), inside the default 30 min time to act; tests of the other rules give the operator 1 min."""
    return replace(sc, policy=replace(sc.policy, min_time_to_act=60.0))


def multiple(cstr, ref, **kw):
    """gamma = 20, B = 8 adiabatic CSTR with its scenario residence time (1000 s) at the geometric mean of the
    turning-point Damkoehler numbers (conftest.Reference, analytic): three steady states."""
    Da = math.sqrt(float(np.prod(ref.G(ref.fold_x(8.0, 20.0), 8.0, 20.0))))
    return cstr(20.0, 8.0, k_ref=Da / 1000.0, **kw)


def adiabatic_folds(c, *, tau=None, T_in=None):
    """Turning points of the adiabatic first-order CSTR, by hand (analytic), lowest temperature first.

    Steady state: F = T - T_in - dT_ad k tau / (1 + k tau) = 0, k = k_ref exp(E (1/T_ref - 1/T)); a fold adds
    dF/dT = 1 - dT_ad x (1 - x) E / T^2 = 0 with x = k tau / (1 + k tau).
    At fixed tau: solve dF/dT = 0 for T and read T_in off F = 0. At fixed T_in: x = (T - T_in)/dT_ad turns
    dF/dT = 0 into T^2 = E (T - T_in)(1 - (T - T_in)/dT_ad), and tau = x / ((1 - x) k).
    Returns [(T, T_in, tau)].
    """
    E, dT = c.E, c.dT_ad
    out = []
    if tau is not None:

        def f(T):
            k = c.k(T)
            x = k * tau / (1 + k * tau)
            return 1 - dT * x * (1 - x) * E / T**2

        Ts = np.linspace(c.T_in - 50, c.T_in + dT + 50, 4001)
        v = np.array([f(T) for T in Ts])
        for i in np.nonzero(np.sign(v[:-1]) != np.sign(v[1:]))[0]:
            T = brentq(f, Ts[i], Ts[i + 1], xtol=1e-13)
            k = c.k(T)
            out.append((T, T - dT * k * tau / (1 + k * tau), tau))
    else:
        # T^2 - E (T - T_in)(1 - (T - T_in)/dT) = 0  ->  (1 + E/dT) T^2 - (E + 2 E T_in/dT) T + E T_in (1 + T_in/dT)
        a, b, cc = 1 + E / dT, -(E + 2 * E * T_in / dT), E * T_in * (1 + T_in / dT)
        for T in sorted(np.roots([a, b, cc]).real):
            x = (T - T_in) / dT
            out.append((T, T_in, x / ((1 - x) * c.k(T))))
    return out


# -- verdicts by region --------------------------------------------------------------------------------------


def test_one_stable_state_far_from_everything_is_inside(cstr):
    c = cstr(20.0, 2.0)  # B = 2 < 4: one steady state for every Da (van Heerden 1953; analytic bound)
    r = check_setpoint(patient(c.sc))
    assert (r.verdict, r.region) == ("inside", "stable")
    assert len(r.reasons) == 1 and "every margin" in r.reasons[0]
    assert r.margin("feed_temperature_rise_to_ignition_K").value is None
    assert "no ignition point" in r.margin("feed_temperature_rise_to_ignition_K").note
    assert [u.key for u in r.upsets] == [
        "feed_warmer",
        "feed_flow_down",
        "feed_flow_up",
        "feed_stronger",
        "feed_stop",
        "outlet_blocked",
    ]  # no jacket: no cooling-lost upset


def test_multiple_states_are_marginal_and_the_low_state_is_assumed(cstr, ref):
    c = multiple(cstr, ref)
    r = check_setpoint(c.sc)
    assert (r.verdict, r.region, r.state_index) == ("marginal", "multiple", 0)
    assert "low stable state" in r.assumption
    # the region in the map legend's words (core.regions), not its key
    assert any(
        "“More than one steady state: history decides, an upset can make it jump”: 3 steady states" in s
        for s in r.reasons
    )
    (T_ign, Tin_ign, _), _ = adiabatic_folds(c, tau=1000.0)
    m = r.margin("feed_temperature_rise_to_ignition_K")
    # the ignition feed temperature of the hand calculation above (analytic fold)
    assert m.value == pytest.approx(Tin_ign - c.T_in, abs=1e-6)
    (_, _, tau_ign), _ = adiabatic_folds(c, T_in=c.T_in)
    assert r.margin("residence_time_rise_to_ignition_percent").value == pytest.approx(
        100 * (tau_ign / 1000.0 - 1), rel=1e-6
    )
    # this point lies closer to ignition than the 10 K default threshold of CheckPolicy (DESIGN.md §6), so the
    # reason must say so with both numbers
    assert Tin_ign - c.T_in < 10.0
    assert any(f"is {m.value:.1f} K, below the threshold 10 K (project default" in s for s in r.reasons)


def test_the_hot_branch_has_an_extinction_margin(cstr, ref):
    c = multiple(cstr, ref)
    r = check_setpoint(c.sc, branch="high")
    assert r.state_index == 2 and "high stable state" in r.assumption
    _, (T_ext, Tin_ext, _) = adiabatic_folds(c, tau=1000.0)
    # the extinction feed temperature of the hand calculation (analytic fold)
    assert r.margin("feed_temperature_drop_to_extinction_K").value == pytest.approx(c.T_in - Tin_ext, abs=1e-6)
    assert r.margin("feed_temperature_rise_to_ignition_K").value is None
    assert "hot branch" in r.margin("feed_temperature_rise_to_ignition_K").note


def test_a_hot_stable_state_above_the_limit_is_runaway_and_outside(cstr, ref):
    c = multiple(cstr, ref)
    low, mid, high = check_setpoint(c.sc).steady.states
    sc = replace(c.sc, limits=Limits(T_max=0.5 * (mid.T + high.T)))
    r = check_setpoint(sc)
    assert (r.verdict, r.region) == ("outside", "runaway")
    text = f"a stable steady state at {high.T:.1f} K ({high.T - 273.15:.1f} °C) lies above the maximum"
    assert any(text in s for s in r.reasons)


def test_steep_single_state_is_sensitive_and_marginal(cstr):
    c = cstr(20.0, 3.5, k_ref=0.2 / 1000.0)
    r = check_setpoint(c.sc)
    st = r.state
    # dT/dT_in at fixed tau = 1 / (1 - dT_ad x(1-x) E/T^2) for the adiabatic first-order tank (analytic,
    # implicit differentiation of F = 0 above)
    k = c.k(st.T)
    x = k * 1000.0 / (1 + k * 1000.0)
    sens = 1.0 / (1.0 - c.dT_ad * x * (1 - x) * c.E / st.T**2)
    assert sens > CheckPolicy().sensitivity
    assert (r.verdict, r.region) == ("marginal", "sensitive")
    assert any(f"moves {sens:.2f} K per K" in s and "threshold 3 K/K (project default" in s for s in r.reasons)


def test_demo_oscillating_range_is_outside():
    sc = demo("jacketed-first-order")
    # the demo's description: residence times of about 65-150 min make the state unstable (invented data)
    r = check_setpoint(sc, tau=100 * 60.0)
    assert (r.verdict, r.region) == ("outside", "unstable")
    assert any("is unstable (oscillatory)" in s for s in r.reasons)


def test_demo_runaway_is_outside():
    sc = demo("adiabatic-second-order")
    r = check_setpoint(sc)
    assert (r.verdict, r.region) == ("outside", "runaway")


def test_demo_cooling_loss_crossing_the_limit_is_marginal():
    sc = demo("jacketed-first-order")
    r = check_setpoint(sc)
    assert (r.verdict, r.region) == ("marginal", "stable")
    cool = next(u for u in r.upsets if u.key == "cooling_lost")
    assert len(r.upsets) == 10 and cool.time_to_max is not None and cool.peak_T > sc.limits.T_max
    assert any("upset 'cooling lost'" in s and f"{sc.limits.T_max:.1f} K" in s for s in r.reasons)
    # the upset's time to the maximum temperature, re-simulated to stop there: T is the limit (the simulator)
    y0 = np.concatenate(([sc.vessel.h_set], r.state.C, [r.state.T, 0.0]))
    again = simulate(sc, initial=y0, events=[{"at": 0, "do": "cooling_loss"}], duration=cool.time_to_max, rtol=1e-9)
    assert again.T[-1] == pytest.approx(sc.limits.T_max, rel=1e-6)


def test_demo_mild_is_inside_and_a_stricter_policy_makes_it_marginal():
    sc = demo("mild-single-state")
    # its blocked outlet overflows in about 8 min, which alone makes it marginal (test below); a 1 min time to
    # act and a 2-day cap (its interlocked cooling loss creeps towards MTSR for more than a day) leave the rest
    sc = replace(sc, policy=replace(sc.policy, min_time_to_act=60.0, upset_duration=2 * 86400.0))
    r = check_setpoint(sc)
    assert r.verdict == "inside", r.reasons
    margin = sc.limits.T_max - r.state.T
    strict = replace(sc, policy=replace(sc.policy, min_temperature_margin=margin + 5.0))
    r2 = check_setpoint(strict)
    assert r2.verdict == "marginal"
    assert any(
        f"{margin:.1f} K below the maximum temperature" in s
        and "set in the scenario's check_policy.min_temperature_margin" in s
        for s in r2.reasons
    )


def test_valve_outside_its_usable_range_is_marginal(cstr):
    c = cstr(20.0, 2.0)
    # a valve 10 times larger must sit near 4 % open to pass the same flow (linear characteristic, analytic)
    sc = patient(replace(c.sc, valve=replace(c.sc.valve, Kv=400.0)))
    r = check_setpoint(sc)
    assert r.verdict == "marginal"
    assert any("outside the usable range 20-80 %" in s for s in r.reasons)
    assert r.margin("valve_opening_to_usable_range_percent").value < 0


# -- answer and errors ------------------------------------------------------------------------------------------


def test_answer_document(cstr, ref):
    c = multiple(cstr, ref)
    d = json.loads(json.dumps(check_setpoint(c.sc).to_dict(), allow_nan=False))
    for key in (
        "verdict",
        "reasons",
        "states",
        "margins",
        "safety",
        "upsets",
        "cautions",
        "assumption",
        "region",
        "operating_point",
    ):
        assert key in d
    assert d["cautions"] == list(CAUTIONS)
    # DESIGN.md §9: the cautions open with the screening-aid sentence
    assert d["cautions"][0] == "Screening aid, not a design or safety basis."
    assert [s["temperature_K"] for s in d["states"]] == sorted(s["temperature_K"] for s in d["states"])
    up = d["upsets"][0]
    for key in (
        "peak_temperature_K",
        "peak_time_s",
        "time_to_alarm_s",
        "time_to_max_temperature_s",
        "level_min_m",
        "level_max_m",
        "final_temperature_K",
        "settled",
        "stop_reason",
    ):
        assert key in up


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [({"branch": "middle"}, "branch"), ({"tau": -1.0}, "residence_time"), ({"T_in": float("nan")}, "feed_temperature")],
)
def test_bad_requests_name_the_field(cstr, kwargs, field):
    with pytest.raises(ModelInputError, match=field) as info:
        check_setpoint(cstr(20.0, 2.0).sc, **kwargs)
    assert info.value.field == field


def test_an_upset_the_integrator_cannot_follow_is_reported_not_hidden(cstr, monkeypatch):
    from exomap.core import dynamics

    monkeypatch.setattr(dynamics, "MAX_RHS_EVALUATIONS", 20)
    r = check_setpoint(cstr(20.0, 2.0).sc)
    # DESIGN.md §6: an upset the integrator could not follow makes the verdict undetermined, with only that said
    assert r.verdict == "undetermined"
    assert all(u.stop_reason == "solver_failed" for u in r.upsets)
    assert r.reasons and all("could not be simulated" in s for s in r.reasons)
    d = json.loads(json.dumps(r.to_dict(), allow_nan=False))
    assert d["upsets"][0]["peak_temperature_K"] is None and "evaluations" in d["upsets"][0]["message"]


# -- the verdict rules of DESIGN.md §6, one scenario built here for each ----------------------------------------


def test_an_overflow_sooner_than_the_time_to_act_is_a_reason(cstr):
    c = cstr(20.0, 2.0)
    tau = 1440.0
    # outlet blocked: the level rises at q/A = h_set/tau, so the vessel is full after (H - h_set) tau / h_set
    # = 0.5 m x 1440 s / 1.5 m = 480 s = 8 min (analytic)
    r = check_setpoint(c.sc, tau=tau)
    up = r.upset("outlet_blocked")
    assert up.first("overflow") == pytest.approx(480.0, rel=1e-6)
    assert r.verdict == "marginal"
    assert any(
        "upset 'outlet blocked': the vessel overflows after 8.0 min, sooner than the time to act 30.0 min "
        "(project default, common practice" in s
        for s in r.reasons
    )
    # 5 min to act: the same overflow is no longer a reason
    r5 = check_setpoint(replace(c.sc, policy=replace(c.sc.policy, min_time_to_act=300.0)), tau=tau)
    assert not any("outlet blocked': the vessel overflows" in s for s in r5.reasons)


def test_alarms_of_an_upset_are_every_kind_in_time_order(cstr):
    c = cstr(20.0, 2.0)
    sc = replace(c.sc, limits=replace(c.sc.limits, h_high=1.8, h_low=0.5))
    r = check_setpoint(sc, tau=1440.0)
    up = r.upset("outlet_blocked")
    # level rises at h_set/tau: 1.8 m after 0.3 x 1440/1.5 = 288 s, the 2.0 m rim after 480 s (analytic)
    assert [a["kind"] for a in up.alarms] == ["level_high", "overflow"]
    assert [a["time_s"] for a in up.alarms] == pytest.approx([288.0, 480.0], rel=1e-6)
    d = up.to_dict()
    assert d["alarms"] == [{"kind": "level_high", "time_s": up.alarms[0]["time_s"]},
                           {"kind": "overflow", "time_s": up.alarms[1]["time_s"]}]  # fmt: skip
    stop = r.upset("feed_stop")  # a fixed valve drains the tank: level low, then empty
    assert [a["kind"] for a in stop.alarms] == ["level_low", "empty"]


def _with_decomposition(c, k0_d, *, T_max, T_mtt=None):
    """The fixture's A -> P plus a decomposition P -> D (Ea 150 kJ/mol, dH -100 kJ/mol; invented test data)."""
    from exomap.core.scenario import Reaction

    sc = c.sc
    main = sc.reactions[0]
    r1 = Reaction(main.label, (-1.0, 1.0, 0.0), (1.0, 0.0, 0.0), main.k0, main.Ea, main.dH)
    r2 = Reaction("P -> D", (0.0, -1.0, 1.0), (0.0, 1.0, 0.0), k0_d, 150e3, -100e3, decomposition=True)
    return replace(
        sc,
        species=("A", "P", "D"),
        reactions=(r1, r2),
        c_in=(sc.c_in[0], 0.0, 0.0),
        limits=Limits(T_max=T_max, T_mtt=T_mtt),
        policy=replace(sc.policy, min_time_to_act=60.0),
    )


def _td24_by_hand(C_P, k0_d):
    """TD24 of the decomposition P -> D: the zero-order TMRad cp R T^2 / (q' Ea) equals 24 h, with
    q' = -dH k0 exp(-Ea/RT) C_P / rho (Townsend & Tou 1980; TD24 as defined by Stoessel 2008)."""
    from exomap.core.scenario import R_GAS

    def g(T):
        q = 100e3 * k0_d * math.exp(-150e3 / (R_GAS * T)) * C_P / 1000.0
        return math.log(4000.0 * R_GAS * T * T / (q * 150e3)) - math.log(86400.0)

    return brentq(g, 250.0, 1500.0, xtol=1e-10)


def _k0_for_td24(T, C_P):
    """k0 of the decomposition that puts its TD24 at T for a mass holding C_P of P (the same formula solved for
    k0)."""
    from exomap.core.scenario import R_GAS

    q = 4000.0 * R_GAS * T * T / (86400.0 * 150e3)  # W/kg
    return q * 1000.0 / (100e3 * C_P * math.exp(-150e3 / (R_GAS * T)))


def test_td24_below_the_maximum_temperature_is_a_reason(cstr):
    c = cstr(20.0, 2.0)
    base = check_setpoint(patient(c.sc)).state  # A -> P only: C_P ~ what the decomposition will see
    mtsr = base.T + c.dT_ad * (1.0 - base.conversion)  # DESIGN.md §2 (analytic for one reaction)
    k0_d = _k0_for_td24(mtsr + 20.0, base.C[1])
    sc = _with_decomposition(c, k0_d, T_max=mtsr + 40.0)
    r = check_setpoint(sc)
    TD24 = _td24_by_hand(r.state.C[1], k0_d)
    assert r.safety.td24 == pytest.approx(TD24, abs=1e-6)
    assert r.safety.mtsr < TD24 < sc.limits.T_max
    assert r.verdict == "marginal"
    assert any(
        f"the maximum temperature {sc.limits.T_max:.1f} K" in s and f"is at or above TD24 {TD24:.1f} K" in s
        for s in r.reasons
    )


def test_mtsr_reaching_td24_is_outside_and_the_criticality_class_is_read_aloud(cstr):
    c = cstr(20.0, 2.0)
    base = check_setpoint(patient(c.sc)).state
    mtsr = base.T + c.dT_ad * (1.0 - base.conversion)  # analytic, DESIGN.md §2
    # TD24 between the process temperature and MTSR, MTT above both, so TD24 <= MTSR and TD24 <= MTT: class 5
    # (Stoessel 2008, ch. 3)
    k0_d = _k0_for_td24(0.5 * (base.T + mtsr), base.C[1])
    sc = _with_decomposition(c, k0_d, T_max=mtsr + 100.0, T_mtt=mtsr + 30.0)
    r = check_setpoint(sc)
    TD24 = _td24_by_hand(r.state.C[1], k0_d)
    assert r.state.T < TD24 <= r.safety.mtsr
    assert r.verdict == "outside"
    assert any(f"reaches TD24 {TD24:.1f} K" in s for s in r.reasons)
    assert r.safety.criticality_class == 5
    assert any("criticality class 5" in s and "class 4 and 5 are outside" in s for s in r.reasons)


def test_criticality_class_3_is_marginal(cstr):
    c = cstr(20.0, 2.0)
    base = check_setpoint(patient(c.sc)).state
    mtsr = base.T + c.dT_ad * (1.0 - base.conversion)  # analytic
    # MTT below MTSR, TD24 far above: class 3 (Stoessel 2008, ch. 3)
    k0_d = _k0_for_td24(mtsr + 60.0, base.C[1])
    sc = _with_decomposition(c, k0_d, T_max=mtsr + 100.0, T_mtt=mtsr - 2.0)
    r = check_setpoint(sc)
    assert r.safety.criticality_class == 3
    assert r.verdict == "marginal"
    assert any("criticality class 3" in s and "class 3 is marginal" in s for s in r.reasons)


def test_a_failed_polish_makes_the_check_undetermined_and_nothing_else(cstr, monkeypatch):
    from exomap.core import steady

    real = steady.steady_states

    def not_converged(*args, **kwargs):
        return replace(real(*args, **kwargs), success=False, message="a steady state did not polish to tolerance")

    monkeypatch.setattr(steady, "steady_states", not_converged)
    r = check_setpoint(cstr(20.0, 2.0).sc)
    assert r.verdict == "undetermined"
    assert r.reasons == (
        "the steady states at this point did not converge (a steady state did not polish to tolerance); nothing "
        "computed from them can be relied on",
    )
    assert r.upsets == () and r.margins == ()
    d = json.loads(json.dumps(r.to_dict(), allow_nan=False))
    assert d["verdict"] == "undetermined" and d["success"] is False


def test_the_interlocked_cooling_loss_of_a_first_order_tank_peaks_at_mtsr(cstr):
    c = cstr(20.0, 2.0, kappa=1e-3)  # jacketed, no heat loss, no agitator
    r = check_setpoint(patient(c.sc))
    st = r.state
    # closed adiabatic hold-up of A -> P: every mole of A left reacts, T rises by dT_ad C_A / C_Af, so the
    # end temperature is T + dT_ad (1 - X) = MTSR exactly (analytic)
    mtsr = st.T + c.dT_ad * st.C[0] / 1000.0
    up = r.upset("cooling_lost_feed_stopped")
    assert up.settled and up.stop_reason == "settled"
    # integrator tolerance: UPSET_RTOL = 1e-5 on a 100 K temperature scale is 1e-3 K per step
    assert up.peak_T == pytest.approx(mtsr, abs=0.02)
    assert r.safety.mtsr == pytest.approx(mtsr, abs=1e-9)
    block = r.to_dict()["mtsr"]
    assert block["interlocked_upset_peak_temperature_K"] == up.peak_T
    assert "feed and the outlet stop and all cooling is lost" in block["assumes"]


def test_an_upset_still_heating_at_its_cap_is_a_reason(cstr):
    c = cstr(20.0, 2.0, kappa=1e-3)
    sc = patient(replace(c.sc, policy=replace(c.sc.policy, upset_duration=300.0)))
    r = check_setpoint(sc)
    up = r.upset("cooling_lost")
    assert up.stop_reason == "completed" and up.rising and up.dT_end_per_h > 0.1
    assert any("upset 'cooling lost': still heating at the end of its 0.0833333 h cap" in s for s in r.reasons)


def test_an_upset_cap_longer_than_a_simulation_may_be_is_refused(cstr):
    from exomap.core.errors import LimitExceededError

    c = cstr(20.0, 2.0)
    sc = replace(c.sc, policy=replace(c.sc.policy, upset_duration=3650 * 86400.0))
    with pytest.raises(LimitExceededError, match="longer than the limit of one simulation") as info:
        check_setpoint(sc)
    assert info.value.field == "check_policy.upset_duration"


def test_the_cli_report_of_an_undetermined_check_says_only_what_failed(cstr, monkeypatch):
    from exomap.cli.check import render
    from exomap.core import steady

    real = steady.steady_states
    monkeypatch.setattr(steady, "steady_states", lambda *a, **k: replace(real(*a, **k), success=False, message="x"))
    sc = cstr(20.0, 2.0).sc
    text = render(sc, check_setpoint(sc))
    assert "VERDICT: UNDETERMINED" in text and "What failed:" in text
    assert "did not converge (x)" in text
    for word in ("Margins", "Upsets", "MTSR", "INSIDE", "MARGINAL", "OUTSIDE"):
        assert word not in text
    assert "Screening aid" in text  # the cautions stay (DESIGN.md §9)
