"""The setpoint check of DESIGN.md §6: is the tank inside its safe operating window at this point?

``check_setpoint()`` finds every steady state at the operating point, decides which one the tank is on, its
map region, its margins to ignition, extinction, the maximum temperature and the valve's usable range, its
thermal-safety figures, and simulates a battery of credible upsets from it. The verdict is ``outside``,
``marginal`` or ``inside``, with one reason per finding; each reason states the number and the threshold.

Thresholds are the project defaults of ``CheckPolicy`` (DESIGN.md §6), overridable in the scenario's
``check_policy``; the maximum and alarm temperatures are the scenario's ``limits``.

Notes
-----
* Which state. Where there are several stable states, the tank is taken to sit on the low one (as after a
  cold start) unless ``branch="high"`` is asked; the answer says what it assumed.
* Margins come from the exact turning points of the branches through the point (``exomap.core.branch``):
  the feed-temperature rise to ignition at fixed residence time, the residence-time rise to ignition at fixed
  feed temperature (as a percentage of the residence time), and for a hot state the feed-temperature drop to
  extinction. A turning point counts for the state only when it lies on the state's side: an ignition point
  ahead of a low state (its temperature above the state's), an extinction point behind a hot state (its
  temperature below the state's). The branches span the scenario's map window (or a wide default).
* Upsets start from the operating state at time 0 and last ``check_policy.upset_duration``; they are
  integrated at ``UPSET_RTOL`` with ``UPSET_POINTS`` recorded points (the peak is refined between solver
  steps, alarm times are root-found, so neither depends on the recording).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from exomap.core import valve as valve_mod
from exomap.core.cautions import CAUTIONS
from exomap.core.dynamics import SimulationResult, simulate
from exomap.core.errors import ConvergenceError, ModelInputError
from exomap.core.safety import SafetyFigures, safety_figures
from exomap.core.scenario import CheckPolicy, Scenario, validate

#: The feed-temperature step of the "feed warmer" upset [K] (DESIGN.md §6).
UPSET_FEED_RISE = 10.0
#: Factors of the feed-flow upsets [-] (DESIGN.md §6).
UPSET_FLOW_DOWN, UPSET_FLOW_UP = 0.5, 1.5
#: Factor of the "feed stronger" upset on every species in the feed [-] (DESIGN.md §6).
UPSET_STRONGER = 1.2
BRANCHES = ("low", "high")
#: Integrator tolerance of the upsets [-]: peak temperatures to a few hundredths of a kelvin, enough for a
#: screening check, and about a quarter less work than the simulator's default of 1e-6.
UPSET_RTOL = 1e-5
#: Recorded points per upset (the level extremes are read off them; the peak is refined separately).
UPSET_POINTS = 240
_DEFAULT_POLICY = CheckPolicy()


@dataclass(frozen=True)
class Margin:
    """One margin: ``value`` in the unit of its key, None when it does not exist (``note`` says why)."""

    key: str
    value: float | None
    threshold: float | None
    note: str = ""

    @property
    def ok(self) -> bool | None:
        if self.value is None or self.threshold is None:
            return None
        return self.value >= self.threshold

    def to_dict(self) -> dict[str, Any]:
        return {"value": self.value, "threshold": self.threshold, "ok": self.ok, "note": self.note or None}


@dataclass(frozen=True)
class UpsetResult:
    """What one upset does to the tank, from a simulation of ``duration`` [s] (times [s], temperatures [K],
    levels [m])."""

    key: str
    label: str
    events: tuple[dict[str, Any], ...]
    duration: float
    peak_T: float
    peak_t: float
    time_to_alarm: float | None
    time_to_max: float | None
    level_min: float
    level_max: float
    final_T: float
    final_h: float
    settled: bool
    stop_reason: str
    end_time: float
    message: str = ""

    @classmethod
    def of(cls, key: str, label: str, events: list[dict[str, Any]], sim: SimulationResult) -> UpsetResult:
        return cls(
            key=key,
            label=label,
            events=tuple(events),
            duration=sim.duration,
            peak_T=sim.peak_T,
            peak_t=sim.peak_t,
            time_to_alarm=sim.first_alarm("alarm_temperature"),
            time_to_max=sim.first_alarm("max_temperature"),
            level_min=float(np.min(sim.h)),
            level_max=float(np.max(sim.h)),
            final_T=float(sim.T[-1]),
            final_h=float(sim.h[-1]),
            settled=sim.settled(),
            stop_reason=sim.stop_reason,
            end_time=sim.t_end,
        )

    @classmethod
    def failed(cls, key: str, label: str, events: list[dict[str, Any]], duration: float, why: str) -> UpsetResult:
        """An upset the integrator could not follow: every outcome unknown (NaN), ``stop_reason`` says so."""
        nan = math.nan
        return cls(
            key,
            label,
            tuple(events),
            duration,
            nan,
            nan,
            None,
            None,
            nan,
            nan,
            nan,
            nan,
            False,
            "solver_failed",
            nan,
            message=why,
        )

    def to_dict(self) -> dict[str, Any]:
        def fin(x: float) -> float | None:
            return x if math.isfinite(x) else None

        return {
            "key": self.key,
            "label": self.label,
            "events": [dict(e) for e in self.events],
            "duration_s": self.duration,
            "peak_temperature_K": fin(self.peak_T),
            "peak_time_s": fin(self.peak_t),
            "time_to_alarm_s": self.time_to_alarm,
            "time_to_max_temperature_s": self.time_to_max,
            "level_min_m": fin(self.level_min),
            "level_max_m": fin(self.level_max),
            "final_temperature_K": fin(self.final_T),
            "final_level_m": fin(self.final_h),
            "settled": self.settled,
            "stop_reason": self.stop_reason,
            "end_time_s": fin(self.end_time),
            "message": self.message,
        }


@dataclass(frozen=True)
class CheckResult:
    """The setpoint check answer (DESIGN.md §4, §6).

    Attributes
    ----------
    verdict : str
        ``inside`` | ``marginal`` | ``outside``.
    reasons : tuple of str
    tau, T_in : float
        Operating point [s], [K].
    branch : str or None
        As requested.
    steady : SteadyStateResult
    state_index : int
        Index in ``steady.states`` of the state the tank is taken to be on.
    assumption : str
    region : str
        Map region key (DESIGN.md §5).
    margins : tuple of Margin
    safety : SafetyFigures
    upsets : tuple of UpsetResult
    cautions : tuple of str
    """

    verdict: str
    reasons: tuple[str, ...]
    tau: float
    T_in: float
    branch: str | None
    steady: Any
    state_index: int
    assumption: str
    region: str
    margins: tuple[Margin, ...]
    safety: SafetyFigures
    upsets: tuple[UpsetResult, ...]
    cautions: tuple[str, ...] = CAUTIONS
    success: bool = True
    message: str = "ok"
    valve_opening: float = math.nan
    valve_range: tuple[float, float] = (0.2, 0.8)
    limits: dict[str, float | None] = field(default_factory=dict)

    @property
    def state(self) -> Any:
        return self.steady.states[self.state_index]

    def margin(self, key: str) -> Margin:
        for m in self.margins:
            if m.key == key:
                return m
        raise KeyError(key)

    def to_dict(self) -> dict[str, Any]:
        steady = self.steady.to_dict()
        return {
            "verdict": self.verdict,
            "reasons": list(self.reasons),
            "operating_point": steady["operating_point"],
            "states": steady["states"],
            "state_index": self.state_index,
            "assumption": self.assumption,
            "region": self.region,
            "margins": {m.key: m.to_dict() for m in self.margins},
            "safety": self.safety.to_dict(),
            "upsets": [u.to_dict() for u in self.upsets],
            "limits": dict(self.limits),
            "cautions": list(self.cautions),
            "success": self.success,
            "message": self.message,
        }


# ---------------------------------------------------------------------------------------------------------


def _abs(T: float) -> str:
    """An absolute temperature for a reason: '398.1 K (125.0 degC)' (K for machines, degC for people)."""
    return f"{T:.1f} K ({T - 273.15:.1f} degC)"


def _below(margin: float) -> str:
    """'12.0 K below' or '3.0 K above'."""
    return f"{margin:.1f} K below" if margin >= 0 else f"{-margin:.1f} K above"


def _threshold(sc: Scenario, name: str, value: float, unit: str) -> str:
    """'threshold 10 K (project default; check_policy.x overrides it)' or '(from the scenario's ...)'."""
    text = f"{value:g} {unit}".rstrip()
    if getattr(_DEFAULT_POLICY, name) == getattr(sc.policy, name):
        return f"threshold {text} (project default, overridable in check_policy.{name})"
    return f"threshold {text} (set in the scenario's check_policy.{name})"


def upset_battery(sc: Scenario) -> list[tuple[str, str, list[dict[str, Any]]]]:
    """The upsets of DESIGN.md §6 as (key, label, events); cooling lost only for a jacketed tank."""
    stronger = [
        {"at": 0.0, "scale": f"feed_concentration.{s}", "by": UPSET_STRONGER}
        for s, c in zip(sc.species, sc.c_in, strict=True)
        if c > 0
    ]
    battery = [
        (
            "feed_warmer",
            f"feed {UPSET_FEED_RISE:g} K warmer",
            [{"at": 0.0, "add": "feed_temperature", "value": UPSET_FEED_RISE}],
        ),
        (
            "feed_flow_down",
            f"feed flow {UPSET_FLOW_DOWN - 1:+.0%}",
            [{"at": 0.0, "scale": "feed_flow", "by": UPSET_FLOW_DOWN}],
        ),
        (
            "feed_flow_up",
            f"feed flow {UPSET_FLOW_UP - 1:+.0%}",
            [{"at": 0.0, "scale": "feed_flow", "by": UPSET_FLOW_UP}],
        ),
        ("feed_stronger", f"feed {UPSET_STRONGER - 1:.0%} stronger", stronger),
        ("feed_stop", "feed stopped, outlet as it is", [{"at": 0.0, "do": "feed_stop"}]),
        ("outlet_blocked", "outlet blocked", [{"at": 0.0, "do": "outlet_block"}]),
    ]
    if sc.UA_jacket > 0:
        battery.append(("cooling_lost", "cooling lost", [{"at": 0.0, "do": "cooling_loss"}]))
    return battery


def _pick_state(states: tuple[Any, ...], branch: str | None) -> tuple[int, str]:
    stable = [i for i, s in enumerate(states) if s.stability == "stable"]
    n = len(states)
    if n == 1:
        what = states[0].stability
        note = "" if branch is None else f" (branch '{branch}' asked; there is only one)"
        return 0, f"one steady state ({what}){note}; the tank is taken to be on it"
    if not stable:
        return 0, f"{n} steady states, none stable; the lowest is reported and the tank will not stay on it"
    if branch is None:
        if len(stable) > 1:
            return stable[0], (
                f"{n} steady states, {len(stable)} of them stable: the tank is assumed on the low stable state "
                "(as after a cold start); ask for branch 'high' to check the hot one"
            )
        return stable[0], f"{n} steady states, one stable: the tank is taken to be on the stable one"
    i = stable[0] if branch == "low" else stable[-1]
    return i, f"{n} steady states: the {branch} stable state, as asked"


def _branch_margins(sc: Scenario, tau: float, T_in: float, state: Any, n_states: int, idx: int) -> list[Margin]:
    from exomap.core.branch import turning_points  # lazy: only the check needs the branch tracer

    pol = sc.policy
    T = float(state.T)
    out: list[Margin] = []
    try:
        tp_T = turning_points(sc, "feed_temperature", tau, T_in)
    except ModelInputError as exc:
        tp_T, why_T = [], f"the feed-temperature branch could not be traced: {exc}"
    else:
        why_T = ""
    try:
        tp_tau = turning_points(sc, "residence_time", tau, T_in)
    except ModelInputError as exc:
        tp_tau, why_tau = [], f"the residence-time branch could not be traced: {exc}"
    else:
        why_tau = ""

    ign_T = [p.T_in - T_in for p in tp_T if p.kind == "ignition" and p.T_in > T_in and p.T > T]
    ext_T = [T_in - p.T_in for p in tp_T if p.kind == "extinction" and p.T_in < T_in and p.T < T]
    ign_tau = [100.0 * (p.tau / tau - 1.0) for p in tp_tau if p.kind == "ignition" and p.tau > tau and p.T > T]
    ext_tau = [100.0 * (1.0 - p.tau / tau) for p in tp_tau if p.kind == "extinction" and p.tau < tau and p.T < T]
    hot = bool(ext_T or ext_tau) and not (ign_T or ign_tau) or (n_states > 1 and idx == n_states - 1)

    def none_why(kind: str, along: str, why: str) -> str:
        if why:
            return why
        if kind == "ignition" and hot:
            return "the tank is on the hot branch: there is no ignition ahead of it"
        if kind == "extinction" and not hot:
            return "the tank is on the low branch: extinction applies to a hot state"
        side = "above" if kind == "ignition" else "below"
        return f"no {kind} point {side} the operating point along the {along} within the branch's range"

    out.append(
        Margin(
            "feed_temperature_rise_to_ignition_K",
            min(ign_T) if ign_T else None,
            pol.min_feed_temperature_margin,
            "" if ign_T else none_why("ignition", "feed temperature", why_T),
        )
    )
    out.append(
        Margin(
            "residence_time_rise_to_ignition_percent",
            min(ign_tau) if ign_tau else None,
            100.0 * pol.min_residence_time_margin,
            "" if ign_tau else none_why("ignition", "residence time", why_tau),
        )
    )
    out.append(
        Margin(
            "feed_temperature_drop_to_extinction_K",
            min(ext_T) if ext_T else None,
            pol.min_extinction_margin,
            "" if ext_T else none_why("extinction", "feed temperature", why_T),
        )
    )
    out.append(
        Margin(
            "residence_time_drop_to_extinction_percent",
            min(ext_tau) if ext_tau else None,
            None,
            ("no threshold: for information" if ext_tau else none_why("extinction", "residence time", why_tau)),
        )
    )
    return out


def check_setpoint(
    sc: Scenario,
    *,
    tau: float | None = None,
    T_in: float | None = None,
    branch: str | None = None,
) -> CheckResult:
    """Check a setpoint: states, region, margins, safety figures, upsets and a verdict.

    Parameters
    ----------
    sc : Scenario
    tau : float, optional
        Residence time at the set level [s]; default the scenario's feed.
    T_in : float, optional
        Feed temperature [K]; default the scenario's.
    branch : str, optional
        ``low`` or ``high``: which stable state the tank is on where there are several; default low.

    Returns
    -------
    CheckResult

    Raises
    ------
    ModelInputError
        Bad operating point or branch (``field`` names it).

    Notes
    -----
    Verdict (DESIGN.md §6): ``outside`` when the operating state is not stable or is above the maximum
    temperature, or the point lies in the ``runaway`` region; ``marginal`` when it lies in ``multiple`` or
    ``sensitive``, a margin is below its threshold, an upset crosses the maximum temperature, MTSR exceeds it,
    or the valve is outside its usable range; else ``inside``.

    Examples
    --------
    >>> # check_setpoint(sc).verdict  # doctest: +SKIP
    'inside'
    """
    from exomap.core.regions import region_of
    from exomap.core.steady import steady_states

    validate(sc)
    if branch is not None and branch not in BRANCHES:
        raise ModelInputError(f"branch must be one of {', '.join(BRANCHES)}, got {branch!r}", field="branch")
    for value, name, unit in ((tau, "residence_time", "s"), (T_in, "feed_temperature", "K")):
        if value is not None and (
            isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0
        ):
            raise ModelInputError(f"{name} must be a finite positive number [{unit}], got {value!r}", field=name)
    tau_v = float(sc.tau_nominal if tau is None else tau)
    T_in_v = float(sc.T_in if T_in is None else T_in)
    pol = sc.policy
    lim = sc.limits

    steady = steady_states(sc, tau_v, T_in_v)
    states = steady.states
    if not states:
        raise ModelInputError("no steady state found at this operating point", field="residence_time")
    idx, assumption = _pick_state(states, branch)
    st = states[idx]
    region = region_of(sc, states)
    T = float(st.T)
    reasons_out: list[str] = []
    reasons_marg: list[str] = []

    # -- where the tank is -------------------------------------------------------------------------------
    if st.stability != "stable":
        reasons_out.append(
            f"the operating state at {_abs(T)} is {st.stability}"
            + (" (oscillatory)" if st.oscillatory else "")
            + ": the tank will not stay there (threshold: every eigenvalue with a negative real part)"
        )
    if T > lim.T_max:
        reasons_out.append(
            f"the steady temperature {_abs(T)} is above the maximum temperature {_abs(lim.T_max)} (scenario limit)"
        )
    if region == "runaway":
        hot = max(s.T for s in states if s.stability == "stable")
        reasons_out.append(
            f"region 'runaway': a reachable steady state at {_abs(hot)} lies above the maximum temperature "
            f"{_abs(lim.T_max)} (scenario limit)"
        )
    elif region == "multiple":
        reasons_marg.append(
            f"region 'multiple': {len(states)} steady states at this point (threshold: one); "
            "an upset can make the tank jump between them"
        )
    elif region == "sensitive":
        reasons_marg.append(
            f"region 'sensitive': the steady temperature moves {st.sensitivity:.2f} K per K of feed temperature, "
            f"above the {_threshold(sc, 'sensitivity', pol.sensitivity, 'K/K')}"
        )

    # -- margins -----------------------------------------------------------------------------------------
    margins = _branch_margins(sc, tau_v, T_in_v, st, len(states), idx)
    safety = safety_figures(sc, tau_v, T_in_v, st)
    margins.append(Margin("steady_temperature_to_max_K", lim.T_max - T, pol.min_temperature_margin))
    margins.append(Margin("mtsr_to_max_K", lim.T_max - safety.mtsr, pol.min_mtsr_margin))
    x = float(st.valve_opening)
    x_status = valve_mod.opening_status(x)
    if x_status in (valve_mod.BELOW_RANGE, valve_mod.ABOVE_RANGE):
        # the inverse characteristic gives an opening no valve can take: say so in words, never as the number
        why = (
            "the flow is below what the valve passes at the smallest opening of its characteristic: below its range"
            if x_status == valve_mod.BELOW_RANGE
            else "the valve cannot pass the flow even fully open: above its range (valve too small)"
        )
        margins.append(Margin("valve_opening_to_usable_range_percent", None, 0.0, why))
        reasons_marg.append(f"the outlet valve cannot hold the set level at this flow: {why}")
    elif math.isfinite(x):
        margins.append(
            Margin(
                "valve_opening_to_usable_range_percent",
                100.0 * min(x - pol.valve_min, pol.valve_max - x),
                0.0,
                f"opening {100 * x:.1f} % of a usable {100 * pol.valve_min:g}-{100 * pol.valve_max:g} %",
            )
        )
    else:
        margins.append(
            Margin(
                "valve_opening_to_usable_range_percent",
                None,
                0.0,
                "no driving pressure across the valve at the set level",
            )
        )
        reasons_marg.append("the outlet valve has no driving pressure at the set level: it cannot pass the flow")

    labels = {
        "feed_temperature_rise_to_ignition_K": (
            "feed-temperature rise to ignition",
            "K",
            "min_feed_temperature_margin",
            1.0,
        ),
        "residence_time_rise_to_ignition_percent": (
            "residence-time rise to ignition",
            "%",
            "min_residence_time_margin",
            100.0,
        ),
        "feed_temperature_drop_to_extinction_K": (
            "feed-temperature drop to extinction",
            "K",
            "min_extinction_margin",
            1.0,
        ),
        "steady_temperature_to_max_K": (
            f"the steady temperature {_abs(T)} is {_below(lim.T_max - T)} the maximum temperature "
            f"{_abs(lim.T_max)}; that margin",
            "K",
            "min_temperature_margin",
            1.0,
        ),
        "mtsr_to_max_K": (
            f"MTSR {_abs(safety.mtsr)} is {_below(lim.T_max - safety.mtsr)} the maximum temperature "
            f"{_abs(lim.T_max)}; that margin",
            "K",
            "min_mtsr_margin",
            1.0,
        ),
    }
    for m in margins:
        if m.ok is False and m.key in labels:
            text, unit, name, factor = labels[m.key]
            thr = getattr(pol, name)
            reasons_marg.append(f"{text} is {m.value:.1f} {unit}, below the {_threshold(sc, name, thr * factor, unit)}")
    if x_status == valve_mod.IN_RANGE and not pol.valve_min <= x <= pol.valve_max:
        default = (pol.valve_min, pol.valve_max) == (_DEFAULT_POLICY.valve_min, _DEFAULT_POLICY.valve_max)
        reasons_marg.append(
            f"the outlet valve must be {100 * x:.1f} % open to pass the flow at the set level, outside the usable "
            f"range {100 * pol.valve_min:g}-{100 * pol.valve_max:g} % ("
            + ("project default, common practice, overridable in" if default else "set in the scenario's")
            + " check_policy.valve_min/valve_max)"
        )
    if safety.mtsr > lim.T_max and not any(m.key == "mtsr_to_max_K" and m.ok is False for m in margins):
        reasons_marg.append(
            f"MTSR {_abs(safety.mtsr)} exceeds the maximum temperature {_abs(lim.T_max)} (scenario limit)"
        )

    # -- upsets ------------------------------------------------------------------------------------------
    y0 = np.concatenate(([sc.vessel.h_set], np.asarray(st.C, dtype=float), [T, 0.0]))
    upsets: list[UpsetResult] = []
    for key, label, events in upset_battery(sc):
        try:
            sim = simulate(
                sc,
                tau=tau_v,
                T_in=T_in_v,
                initial=y0,
                events=events,
                duration=pol.upset_duration,
                rtol=UPSET_RTOL,
                record_every=pol.upset_duration / UPSET_POINTS,
            )
        except ConvergenceError as exc:
            upsets.append(UpsetResult.failed(key, label, events, pol.upset_duration, str(exc)))
            reasons_marg.append(f"upset '{label}' could not be simulated ({exc}); its outcome is unknown")
            continue
        up = UpsetResult.of(key, label, events, sim)
        upsets.append(up)
        if up.time_to_max is not None and T <= lim.T_max:
            reasons_marg.append(
                f"upset '{label}': the temperature reaches the maximum temperature {_abs(lim.T_max)} (scenario "
                f"limit) after {up.time_to_max / 60:.1f} min and peaks at {_abs(up.peak_T)}"
            )

    if reasons_out:
        verdict = "outside"
    elif reasons_marg:
        verdict = "marginal"
    else:
        verdict = "inside"
    reasons = reasons_out + reasons_marg
    if not reasons:
        reasons = [
            f"one stable steady state at {_abs(T)}, {lim.T_max - T:.1f} K below the maximum temperature "
            f"{_abs(lim.T_max)}; every margin at or above its threshold (project defaults unless the scenario's "
            "check_policy sets them); no upset of the battery reaches the maximum temperature"
        ]
    return CheckResult(
        verdict=verdict,
        reasons=tuple(reasons),
        tau=tau_v,
        T_in=T_in_v,
        branch=branch,
        steady=steady,
        state_index=idx,
        assumption=assumption,
        region=region,
        margins=tuple(margins),
        safety=safety,
        upsets=tuple(upsets),
        cautions=CAUTIONS,
        success=bool(steady.success),
        message=steady.message,
        valve_opening=x,
        valve_range=(pol.valve_min, pol.valve_max),
        limits={
            "max_temperature_K": lim.T_max,
            "alarm_temperature_K": lim.T_alarm,
            "level_high_m": lim.h_high,
            "level_low_m": lim.h_low,
            "technical_limit_temperature_K": lim.T_mtt,
        },
    )


__all__ = ["CheckResult", "Margin", "UpsetResult", "check_setpoint", "upset_battery"]
