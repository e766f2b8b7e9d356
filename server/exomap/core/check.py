"""The setpoint check of DESIGN.md §6: is the tank inside its safe operating window at this point?

``check_setpoint()`` is the list of DESIGN.md §6 as named steps:

1. ``_operating_point``: the point and the request checked (the upsets' cap bounded like a simulation);
2. ``steady_states`` and ``pick_state``: every steady state, and which one the tank is on;
3. ``region_of``: the map region of the point;
4. ``_margins``: to ignition, extinction, the maximum temperature and the valve's usable range;
5. ``safety_figures``: ΔT_ad, MTSR, TMRad, TD24, criticality class;
6. ``run_upsets``: the upset battery, each followed until it settles, stops, or reaches its cap;
7. ``_findings``: one rule function per line of the verdict rules, each returning its findings;
8. ``_verdict``: ``undetermined`` when any computation the verdict rests on failed (and then only those
   reasons), else the worst finding: ``outside``, ``marginal``, or ``inside``.

Each reason states the number, the threshold and where the threshold comes from (the scenario's limits, a
project default overridable in ``check_policy``, common practice, or a published method); regions are named in
the map legend's words.

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
* Upsets start from the operating state at time 0 and are followed until they settle, stop (overflow,
  empty) or reach ``check_policy.upset_duration`` (the cap); one still heating at its cap is a reason. They
  are integrated at ``UPSET_RTOL`` (the peak is refined between solver steps, alarm times are root-found).
* ``cooling_lost_feed_stopped`` is the dynamic counterpart of MTSR: cooling lost, and the interlock stops the
  feed and shuts the outlet at the same moment, so the hold-up is closed as MTSR assumes. (The outflow does not
  change the temperature of a well-mixed tank, but an open outlet would drain it and end the run before the
  reaction does.) Without heat loss, agitator power or decomposition its peak is MTSR.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from exomap.core import valve as valve_mod
from exomap.core.cautions import CAUTIONS
from exomap.core.dynamics import SETTLED_DT_PER_H, SETTLED_T_BAND, SimulationResult, simulate
from exomap.core.errors import ConvergenceError, LimitExceededError, ModelInputError
from exomap.core.regions import REGIONS
from exomap.core.safety import DAY, SafetyFigures, safety_figures, tmr_ad
from exomap.core.scenario import CheckPolicy, Scenario, validate

#: The feed-temperature step of the "feed warmer" upset [K] (DESIGN.md §6).
UPSET_FEED_RISE = 10.0
#: Factors of the feed-flow upsets [-] (DESIGN.md §6).
UPSET_FLOW_DOWN, UPSET_FLOW_UP = 0.5, 1.5
#: Factor of the "feed stronger" upset on every species in the feed [-] (DESIGN.md §6).
UPSET_STRONGER = 1.2
#: Factor on the jacket's UA of the "cooling at half" upset [-] (DESIGN.md §6).
UPSET_UA_FACTOR = 0.5
#: The coolant-temperature step of the "coolant warmer" upset [K] (DESIGN.md §6).
UPSET_COOLANT_RISE = 10.0
BRANCHES = ("low", "high")
#: Integrator tolerance of the upsets [-]: peak temperatures to a few hundredths of a kelvin, enough for a
#: screening check, and about a quarter less work than the simulator's default of 1e-6.
UPSET_RTOL = 1e-5
#: Recorded points per upset cap (the level extremes are read off them and the solver steps).
UPSET_POINTS = 240
#: Longest cap an upset may have [s]: the service's default limit on one simulation (7 days). The web layer
#: passes its own configured limit.
MAX_UPSET_DURATION = 7 * 86400.0
#: Verdict words, mildest first ("undetermined" overrides them all).
VERDICTS = ("inside", "marginal", "outside")
_DEFAULT_POLICY = CheckPolicy()
_REGION_LABEL = {key: label for _, key, label in REGIONS}
#: What MTSR assumes, in the words the answer and the page use.
MTSR_ASSUMES = (
    "MTSR = T + ΔT_ad·(1 − X) is the temperature the tank reaches when, at the operating state, the feed and the "
    "outlet stop and all cooling is lost: the unconverted reactant held up reacts with no heat removal and "
    "nothing more comes in"
)


@dataclass(frozen=True)
class Margin:
    """One margin: ``value`` in the unit of its key, None when it does not exist (``note`` says why).
    ``failed`` marks a margin that could not be computed (the verdict is then undetermined)."""

    key: str
    value: float | None
    threshold: float | None
    note: str = ""
    failed: bool = False

    @property
    def ok(self) -> bool | None:
        if self.value is None or self.threshold is None:
            return None
        return self.value >= self.threshold

    def to_dict(self) -> dict[str, Any]:
        return {"value": self.value, "threshold": self.threshold, "ok": self.ok, "note": self.note or None}


@dataclass(frozen=True)
class UpsetResult:
    """What one upset does to the tank (times [s], temperatures [K], levels [m]).

    ``duration`` is the cap; ``end_time`` when the run ended (settled, stopped, or at the cap).
    ``alarms`` are ``{"kind", "time_s"}`` in time order (kinds of ``ALARM_KINDS``). ``dT_end_per_h`` is
    the temperature's rate of change at the end [K/h]; ``rising`` says the run reached its cap still heating.
    """

    key: str
    label: str
    events: tuple[dict[str, Any], ...]
    duration: float
    peak_T: float
    peak_t: float
    alarms: tuple[dict[str, Any], ...]
    level_min: float
    level_max: float
    final_T: float
    final_h: float
    settled: bool
    stop_reason: str
    end_time: float
    dT_end_per_h: float = math.nan
    ending: str = ""
    ceiling_T: float = math.nan
    message: str = ""

    @property
    def failed(self) -> bool:
        return self.stop_reason == "solver_failed"

    @property
    def rising(self) -> bool:
        """Still heating when the cap was reached."""
        return self.ending == "rising"

    def bounded_below(self, T: float) -> bool:
        """Whether a run still heating at its cap can never reach ``T`` [K] (its adiabatic ceiling is below)."""
        return math.isfinite(self.ceiling_T) and self.ceiling_T < T

    def first(self, kind: str) -> float | None:
        """Time [s] of the first alarm of this kind, or None."""
        return next((a["time_s"] for a in self.alarms if a["kind"] == kind), None)

    @property
    def time_to_alarm(self) -> float | None:
        return self.first("alarm_temperature")

    @property
    def time_to_max(self) -> float | None:
        return self.first("max_temperature")

    @classmethod
    def of(
        cls, key: str, label: str, events: list[dict[str, Any]], sim: SimulationResult, ceiling_T: float = math.nan
    ) -> UpsetResult:
        n = len(sim.species)
        return cls(
            key=key,
            label=label,
            events=tuple(events),
            duration=sim.duration,
            peak_T=sim.peak_T,
            peak_t=sim.peak_t,
            alarms=tuple({"kind": a["kind"], "time_s": float(a["time_s"])} for a in sim.alarms),
            level_min=float(np.min(sim.h)),
            level_max=float(np.max(sim.h)),
            final_T=float(sim.T[-1]),
            final_h=float(sim.h[-1]),
            settled=sim.settled(),
            stop_reason=sim.stop_reason,
            end_time=sim.t_end,
            dT_end_per_h=float(sim.dydt_end[1 + n]) * 3600.0,
            ending=_ending(sim),
            ceiling_T=ceiling_T,
        )

    @classmethod
    def failed_run(cls, key: str, label: str, events: list[dict[str, Any]], duration: float, why: str) -> UpsetResult:
        """An upset the integrator could not follow: every outcome unknown (NaN), ``stop_reason`` says so."""
        nan = math.nan
        return cls(key, label, tuple(events), duration, nan, nan, (), nan, nan, nan, nan, False, "solver_failed", nan,
                   message=why)  # fmt: skip

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
            "alarms": [dict(a) for a in self.alarms],
            "time_to_alarm_s": self.time_to_alarm,
            "time_to_max_temperature_s": self.time_to_max,
            "level_min_m": fin(self.level_min),
            "level_max_m": fin(self.level_max),
            "final_temperature_K": fin(self.final_T),
            "final_level_m": fin(self.final_h),
            "settled": self.settled,
            "stop_reason": self.stop_reason,
            "end_time_s": fin(self.end_time),
            "temperature_rate_at_end_K_per_h": fin(self.dT_end_per_h),
            "ending": self.ending,
            "adiabatic_ceiling_K": fin(self.ceiling_T),
            "message": self.message,
        }


def _ending(sim: SimulationResult) -> str:
    """How a run ended: ``settled``, ``overflow``, ``empty``, or, at its cap, ``oscillating`` (T turned up and
    down by more than the settle band over the last quarter), ``rising``, ``falling`` or ``moving`` (the level)."""
    if sim.settled():
        return "settled"
    if sim.stop_reason != "completed":
        return sim.stop_reason
    n = len(sim.species)
    tail = sim.T[sim.t >= 0.75 * sim.t_end]
    steps = np.diff(tail)
    steps = steps[np.abs(steps) > 1e-9]
    turns = int(np.count_nonzero(np.diff(np.sign(steps)) != 0)) if steps.size > 1 else 0
    if turns >= 2 and float(np.ptp(tail)) > SETTLED_T_BAND:
        return "oscillating"
    dT = float(sim.dydt_end[1 + n]) * 3600.0
    if dT > SETTLED_DT_PER_H:
        return "rising"
    if dT < -SETTLED_DT_PER_H:
        return "falling"
    return "moving"


#: Alarm kinds an upset can list (DESIGN.md §4).
ALARM_KINDS = ("alarm_temperature", "max_temperature", "level_high", "level_low", "overflow", "empty")


@dataclass(frozen=True)
class Finding:
    """One line of the verdict rules that fired: ``level`` is ``undetermined``, ``outside`` or ``marginal``."""

    level: str
    text: str


@dataclass(frozen=True)
class CheckResult:
    """The setpoint check answer (DESIGN.md §4, §6).

    Attributes
    ----------
    verdict : str
        ``inside`` | ``marginal`` | ``outside`` | ``undetermined``.
    reasons : tuple of str
        With ``undetermined``, only what failed.
    tau, T_in : float
        Operating point [s], [K].
    branch : str or None
        As requested.
    steady : SteadyStateResult
    state_index : int or None
        Index in ``steady.states`` of the state the tank is taken to be on (None: no state found).
    assumption : str
    region : str or None
        Map region key (DESIGN.md §5).
    margins : tuple of Margin
    safety : SafetyFigures or None
    upsets : tuple of UpsetResult
    cautions : tuple of str
    """

    verdict: str
    reasons: tuple[str, ...]
    tau: float
    T_in: float
    branch: str | None
    steady: Any
    state_index: int | None
    assumption: str
    region: str | None
    margins: tuple[Margin, ...]
    safety: SafetyFigures | None
    upsets: tuple[UpsetResult, ...]
    cautions: tuple[str, ...] = CAUTIONS
    success: bool = True
    message: str = "ok"
    valve_opening: float = math.nan
    valve_range: tuple[float, float] = (0.2, 0.8)
    limits: dict[str, float | None] = field(default_factory=dict)
    policy: dict[str, float] = field(default_factory=dict)

    @property
    def state(self) -> Any:
        return None if self.state_index is None else self.steady.states[self.state_index]

    def margin(self, key: str) -> Margin:
        for m in self.margins:
            if m.key == key:
                return m
        raise KeyError(key)

    def upset(self, key: str) -> UpsetResult:
        for u in self.upsets:
            if u.key == key:
                return u
        raise KeyError(key)

    def mtsr_block(self) -> dict[str, Any] | None:
        """MTSR, what it assumes, and the interlocked upset's peak beside it (None without safety figures)."""
        if self.safety is None:
            return None
        inter = next((u for u in self.upsets if u.key == "cooling_lost_feed_stopped"), None)
        lost = next((u for u in self.upsets if u.key == "cooling_lost"), None)
        out: dict[str, Any] = {
            "temperature_K": self.safety.mtsr,
            "assumes": MTSR_ASSUMES,
            "interlocked_upset_peak_temperature_K": None,
            "interlocked_upset_peak_time_s": None,
            "note": "",
        }
        notes = []
        mtsr = self.safety.mtsr
        if inter is not None and not inter.failed:
            out["interlocked_upset_peak_temperature_K"] = inter.peak_T
            out["interlocked_upset_peak_time_s"] = inter.peak_t
            d = inter.peak_T - mtsr
            notes.append(
                f"the upset '{inter.label}' is its dynamic counterpart and peaks at {_abs(inter.peak_T)}, "
                f"{abs(d):.1f} K {'above' if d >= 0 else 'below'} MTSR; the two agree when there is no heat loss to "
                "ambient, agitator power or decomposition, which MTSR leaves out"
            )
        elif inter is None:
            notes.append("no jacket: the interlocked cooling-loss upset does not apply")
        closed = mtsr if inter is None or inter.failed else max(mtsr, inter.peak_T)
        if lost is not None and not lost.failed and lost.peak_T > closed + 0.5:
            notes.append(
                f"the upset '{lost.label}' peaks higher, at {_abs(lost.peak_T)}, because the feed keeps running and "
                "brings fresh reactant, which MTSR assumes stopped"
            )
        out["note"] = "; ".join(notes)
        return out

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
            "safety": None if self.safety is None else self.safety.to_dict(),
            "mtsr": self.mtsr_block(),
            "upsets": [u.to_dict() for u in self.upsets],
            "limits": dict(self.limits),
            "policy": dict(self.policy),
            "cautions": list(self.cautions),
            "success": self.success,
            "message": self.message,
        }


# -- words ----------------------------------------------------------------------------------------------------


def _abs(T: float) -> str:
    """An absolute temperature for a reason: '398.1 K (125.0 °C)' (K for machines, °C for people)."""
    return f"{T:.1f} K ({T - 273.15:.1f} °C)"


def _below(margin: float) -> str:
    """'12.0 K below' or '3.0 K above'."""
    return f"{margin:.1f} K below" if margin >= 0 else f"{-margin:.1f} K above"


def _min(t: float) -> str:
    return f"{t / 60:.1f} min"


def _source(sc: Scenario, name: str, *, common_practice: bool = False) -> str:
    """Where a check_policy threshold comes from, in words."""
    if getattr(_DEFAULT_POLICY, name) == getattr(sc.policy, name):
        cp = ", common practice" if common_practice else ""
        return f"project default{cp}, overridable in check_policy.{name}"
    return f"set in the scenario's check_policy.{name}"


def _threshold(sc: Scenario, name: str, value: float, unit: str, *, common_practice: bool = False) -> str:
    """'threshold 10 K (project default, overridable in check_policy.x)'."""
    text = f"{value:g} {unit}".rstrip()
    return f"threshold {text} ({_source(sc, name, common_practice=common_practice)})"


def _region(key: str) -> str:
    """A region in the map legend's words."""
    return f"the map region “{_REGION_LABEL[key]}”"


_T_MAX_SOURCE = "scenario limit limits.max_temperature"
_TD24_SOURCE = (
    "TD24, the temperature at which the decomposition's time to maximum rate under adiabatic conditions is 24 h "
    "(Townsend & Tou; Stoessel), from the scenario's decomposition reaction"
)


# -- steps ----------------------------------------------------------------------------------------------------


def upset_battery(sc: Scenario) -> list[tuple[str, str, list[dict[str, Any]]]]:
    """The upsets of DESIGN.md §6 as (key, label, events); the cooling upsets only for a jacketed tank."""
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
        battery += [
            ("cooling_lost", "cooling lost", [{"at": 0.0, "do": "cooling_loss"}]),
            (
                "cooling_lost_feed_stopped",
                "cooling lost, interlock stops the feed and shuts the outlet",
                [{"at": 0.0, "do": "cooling_loss"}, {"at": 0.0, "do": "feed_stop"}, {"at": 0.0, "do": "outlet_block"}],
            ),
            (
                "cooling_half",
                f"cooling at {UPSET_UA_FACTOR:.0%} of its UA",
                [{"at": 0.0, "scale": "jacket_ua", "by": UPSET_UA_FACTOR}],
            ),
            (
                "coolant_warmer",
                f"coolant {UPSET_COOLANT_RISE:g} K warmer",
                [{"at": 0.0, "add": "coolant_temperature", "value": UPSET_COOLANT_RISE}],
            ),
        ]
    return battery


def _operating_point(
    sc: Scenario, tau: float | None, T_in: float | None, branch: str | None, max_duration: float
) -> tuple[float, float]:
    """The operating point [s], [K], with every request value and the upsets' cap checked."""
    validate(sc)
    if branch is not None and branch not in BRANCHES:
        raise ModelInputError(f"branch must be one of {', '.join(BRANCHES)}, got {branch!r}", field="branch")
    for value, name, unit in ((tau, "residence_time", "s"), (T_in, "feed_temperature", "K")):
        if value is not None and (
            isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0
        ):
            raise ModelInputError(f"{name} must be a finite positive number [{unit}], got {value!r}", field=name)
    cap = sc.policy.upset_duration
    if not cap <= max_duration:
        raise LimitExceededError(
            f"the upsets' cap of {cap:g} s ({cap / 86400:g} d) is longer than the limit of one simulation, "
            f"{max_duration:g} s ({max_duration / 86400:g} d); give a time of at most that, e.g. '24 h'",
            field="check_policy.upset_duration",
        )
    return float(sc.tau_nominal if tau is None else tau), float(sc.T_in if T_in is None else T_in)


def pick_state(states: tuple[Any, ...], branch: str | None) -> tuple[int, str]:
    """(index of the state the tank is taken to be on, the assumption in words): the only one, the low stable
    one by default, or the stable state of the ``branch`` asked ("low" or "high")."""
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
    traced: dict[str, tuple[list[Any], str]] = {}
    for along, words in (("feed_temperature", "feed-temperature"), ("residence_time", "residence-time")):
        try:
            traced[along] = (list(turning_points(sc, along, tau, T_in)), "")
        except (ModelInputError, ConvergenceError) as exc:
            traced[along] = ([], f"the {words} branch could not be traced: {exc}")
    tp_T, why_T = traced["feed_temperature"]
    tp_tau, why_tau = traced["residence_time"]

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

    def margin(key: str, values: list[float], threshold: float | None, kind: str, along: str, why: str) -> Margin:
        if values:
            return Margin(key, min(values), threshold, "" if threshold is not None else "no threshold: for information")
        return Margin(key, None, threshold, none_why(kind, along, why), failed=bool(why))

    return [
        margin("feed_temperature_rise_to_ignition_K", ign_T, pol.min_feed_temperature_margin, "ignition",
               "feed temperature", why_T),
        margin("residence_time_rise_to_ignition_percent", ign_tau, 100.0 * pol.min_residence_time_margin,
               "ignition", "residence time", why_tau),
        margin("feed_temperature_drop_to_extinction_K", ext_T, pol.min_extinction_margin, "extinction",
               "feed temperature", why_T),
        margin("residence_time_drop_to_extinction_percent", ext_tau, None, "extinction", "residence time", why_tau),
    ]  # fmt: skip


def _margins(sc: Scenario, tau: float, T_in: float, states: tuple[Any, ...], idx: int, mtsr: float) -> list[Margin]:
    """Every margin of DESIGN.md §6 at the operating state."""
    st = states[idx]
    pol, lim = sc.policy, sc.limits
    out = _branch_margins(sc, tau, T_in, st, len(states), idx)
    out.append(Margin("steady_temperature_to_max_K", lim.T_max - float(st.T), pol.min_temperature_margin))
    out.append(Margin("mtsr_to_max_K", lim.T_max - mtsr, pol.min_mtsr_margin))
    x = float(st.valve_opening)
    why = _valve_out_of_range(x)
    if why:  # an opening no valve can take: said in words, never as the number
        out.append(Margin("valve_opening_to_usable_range_percent", None, 0.0, why))
    elif math.isfinite(x):
        out.append(
            Margin(
                "valve_opening_to_usable_range_percent",
                100.0 * min(x - pol.valve_min, pol.valve_max - x),
                0.0,
                f"opening {100 * x:.1f} % of a usable {100 * pol.valve_min:g}-{100 * pol.valve_max:g} %",
            )
        )
    else:
        out.append(
            Margin("valve_opening_to_usable_range_percent", None, 0.0, "no driving pressure across the valve at the "
                   "set level")
        )  # fmt: skip
    return out


def run_upsets(sc: Scenario, tau: float, T_in: float, state: Any) -> list[UpsetResult]:
    """The upset battery from the operating state, each followed until it settles, stops or reaches the cap
    ``check_policy.upset_duration``; an upset the integrator cannot follow is kept, marked failed."""
    y0 = np.concatenate(([sc.vessel.h_set], np.asarray(state.C, dtype=float), [float(state.T), 0.0]))
    cap = sc.policy.upset_duration
    out: list[UpsetResult] = []
    for key, label, events in upset_battery(sc):
        try:
            sim = simulate(
                sc,
                tau=tau,
                T_in=T_in,
                initial=y0,
                events=events,
                duration=cap,
                rtol=UPSET_RTOL,
                record_every=cap / UPSET_POINTS,
                until_settled=True,
            )
        except ConvergenceError as exc:
            out.append(UpsetResult.failed_run(key, label, events, cap, str(exc)))
            continue
        out.append(UpsetResult.of(key, label, events, sim, _ceiling(sc, events, sim)))
    return out


def _ceiling(sc: Scenario, events: list[dict[str, Any]], sim: SimulationResult) -> float:
    """The highest temperature a run whose feed is stopped can still reach from its end [K], or NaN.

    .. math:: T_{top} = \\max(T_{end}, T_{eq}) + \\Delta T_{ad}(C_{end}), \\quad
              T_{eq} = \\frac{UA_j T_c + UA_l T_{amb} + P}{UA_j + UA_l}

    With the feed stopped nothing more comes in and the outflow leaves the intensive state alone: without
    reaction the temperature relaxes towards T_eq (jacket, heat loss and agitator in balance), and the reactions
    can add at most the adiabatic rise of everything left in the tank (decomposition included). NaN when the feed
    runs, or agitator power meets no heat removal (no bound).
    """
    from exomap.core.safety import adiabatic_temperature_rise

    actions = [e.get("do") for e in events]
    if "feed_stop" not in actions:
        return math.nan
    n = len(sim.species)
    UA_j = 0.0 if "cooling_loss" in actions else sc.UA_jacket
    UA = UA_j + sc.UA_loss
    T_end = float(sim.y_end[1 + n])
    if UA > 0:
        T_eq = (UA_j * sc.T_c + sc.UA_loss * sc.T_amb + sc.P_agitator) / UA
    elif sc.P_agitator > 0:
        return math.nan
    else:
        T_eq = T_end
    return max(T_end, T_eq) + adiabatic_temperature_rise(sc, sim.y_end[1 : 1 + n], "all")


# -- the verdict rules (DESIGN.md §6), one function each --------------------------------------------------------


@dataclass(frozen=True)
class Evidence:
    """Everything the rules read."""

    sc: Scenario
    steady: Any
    idx: int
    region: str
    margins: tuple[Margin, ...]
    safety: SafetyFigures
    upsets: tuple[UpsetResult, ...]

    @property
    def state(self) -> Any:
        return self.steady.states[self.idx]


def failed_computations(ev: Evidence) -> list[Finding]:
    """``undetermined``: a state that did not converge, a branch not traced, an upset not followed, a TD24
    that cannot be bounded."""
    out = []
    if not ev.steady.success:
        out.append(
            Finding(
                "undetermined",
                f"the steady states at this point did not converge ({ev.steady.message}); nothing computed from "
                "them can be relied on",
            )
        )
    out += [Finding("undetermined", f"margin {m.key}: {m.note}") for m in ev.margins if m.failed]
    out += [
        Finding("undetermined", f"upset '{u.label}' could not be simulated ({u.message}); its outcome is unknown")
        for u in ev.upsets
        if u.failed
    ]
    s = ev.safety
    if s.td24 is None and s.dT_ad_decomposition > 0 and tmr_ad(ev.sc, 250.0, ev.state.C, "decomposition") < DAY:
        out.append(
            Finding(
                "undetermined",
                "TD24 lies below 250 K (the decomposition's TMRad is under 24 h even there); the check cannot bound it",
            )
        )
    return out


def operating_state(ev: Evidence) -> list[Finding]:
    """``outside``: the operating state is not stable, or it is above the maximum temperature."""
    st, T_max = ev.state, ev.sc.limits.T_max
    out = []
    if st.stability != "stable":
        out.append(
            Finding(
                "outside",
                f"the operating state at {_abs(st.T)} is {st.stability}"
                + (" (oscillatory)" if st.oscillatory else "")
                + ": the tank will not stay there (threshold: every eigenvalue with a negative real part)",
            )
        )
    if st.T > T_max:
        out.append(
            Finding(
                "outside",
                f"the steady temperature {_abs(st.T)} is above the maximum temperature {_abs(T_max)} ({_T_MAX_SOURCE})",
            )
        )
    return out


def map_region(ev: Evidence) -> list[Finding]:
    """``outside`` in ``runaway``; ``marginal`` in ``multiple`` or ``sensitive``."""
    sc, states = ev.sc, ev.steady.states
    if ev.region == "runaway":
        hot = max(s.T for s in states if s.stability == "stable")
        return [
            Finding(
                "outside",
                f"the point lies in {_region('runaway')}: a stable steady state at {_abs(hot)} lies above the "
                f"maximum temperature {_abs(sc.limits.T_max)} ({_T_MAX_SOURCE})",
            )
        ]
    if ev.region == "multiple":
        return [
            Finding(
                "marginal",
                f"the point lies in {_region('multiple')}: {len(states)} steady states here (threshold: one); "
                "an upset can make the tank jump between them",
            )
        ]
    if ev.region == "sensitive":
        pol = sc.policy
        return [
            Finding(
                "marginal",
                f"the point lies in {_region('sensitive')}: the steady temperature moves "
                f"{ev.state.sensitivity:.2f} K per K of feed temperature, above the "
                f"{_threshold(sc, 'sensitivity', pol.sensitivity, 'K/K')}",
            )
        ]
    return []


#: Margins with a threshold: key -> (words, unit, check_policy field, factor from the field to the value).
_MARGIN_WORDS = {
    "feed_temperature_rise_to_ignition_K": (
        "the feed-temperature rise to ignition", "K", "min_feed_temperature_margin", 1.0),
    "residence_time_rise_to_ignition_percent": (
        "the residence-time rise to ignition", "%", "min_residence_time_margin", 100.0),
    "feed_temperature_drop_to_extinction_K": (
        "the feed-temperature drop to extinction", "K", "min_extinction_margin", 1.0),
}  # fmt: skip


def margins_below_thresholds(ev: Evidence) -> list[Finding]:
    """``marginal``: a margin below its threshold; the steady temperature or MTSR too close to the maximum."""
    sc, lim, pol = ev.sc, ev.sc.limits, ev.sc.policy
    out = []
    for m in ev.margins:
        if m.ok is not False:
            continue
        if m.key in _MARGIN_WORDS:
            words, unit, name, factor = _MARGIN_WORDS[m.key]
            text = (
                f"{words} is {m.value:.1f} {unit}, below the {_threshold(sc, name, getattr(pol, name) * factor, unit)}"
            )
        elif m.key == "steady_temperature_to_max_K":
            T = float(ev.state.T)
            text = (
                f"the steady temperature {_abs(T)} is {_below(lim.T_max - T)} the maximum temperature "
                f"{_abs(lim.T_max)} ({_T_MAX_SOURCE}); that margin is {m.value:.1f} K, below the "
                f"{_threshold(sc, 'min_temperature_margin', pol.min_temperature_margin, 'K')}"
            )
        elif m.key == "mtsr_to_max_K":
            mtsr = ev.safety.mtsr
            text = (
                f"MTSR {_abs(mtsr)} is {_below(lim.T_max - mtsr)} the maximum temperature {_abs(lim.T_max)} "
                f"({_T_MAX_SOURCE}); that margin is {m.value:.1f} K, below the "
                f"{_threshold(sc, 'min_mtsr_margin', pol.min_mtsr_margin, 'K')}"
            )
        else:
            continue
        out.append(Finding("marginal", text))
    if ev.safety.mtsr > lim.T_max and not any(m.key == "mtsr_to_max_K" and m.ok is False for m in ev.margins):
        out.append(
            Finding(
                "marginal",
                f"MTSR {_abs(ev.safety.mtsr)} exceeds the maximum temperature {_abs(lim.T_max)} ({_T_MAX_SOURCE})",
            )
        )
    return out


def _valve_out_of_range(x: float) -> str:
    """Why the opening from the inverse characteristic is no opening the valve can take ('' when it can)."""
    status = valve_mod.opening_status(x)
    if status == valve_mod.BELOW_RANGE:
        return "the flow is below what the valve passes at the smallest opening of its characteristic: below its range"
    if status == valve_mod.ABOVE_RANGE:
        return "the valve cannot pass the flow even fully open: above its range (valve too small)"
    return ""


def valve_range(ev: Evidence) -> list[Finding]:
    """``marginal``: the valve opening needed is outside its usable range, or the valve cannot pass the flow."""
    pol = ev.sc.policy
    x = float(ev.state.valve_opening)
    why = _valve_out_of_range(x)
    if why:
        return [Finding("marginal", f"the outlet valve cannot hold the set level at this flow: {why}")]
    if not math.isfinite(x):
        return [
            Finding("marginal", "the outlet valve has no driving pressure at the set level: it cannot pass the flow")
        ]
    if pol.valve_min <= x <= pol.valve_max:
        return []
    default = (pol.valve_min, pol.valve_max) == (_DEFAULT_POLICY.valve_min, _DEFAULT_POLICY.valve_max)
    return [
        Finding(
            "marginal",
            f"the outlet valve must be {100 * x:.1f} % open to pass the flow at the set level, outside the usable "
            f"range {100 * pol.valve_min:g}-{100 * pol.valve_max:g} % ("
            + ("project default, common practice, overridable in" if default else "set in the scenario's")
            + " check_policy.valve_min/valve_max)",
        )
    ]


def decomposition(ev: Evidence) -> list[Finding]:
    """``outside``: MTSR reaches TD24, or the criticality class is 4 or 5; ``marginal``: class 3, or the
    maximum temperature at or above TD24."""
    s, T_max = ev.safety, ev.sc.limits.T_max
    out = []
    if s.td24 is not None and s.mtsr >= s.td24:
        out.append(
            Finding(
                "outside",
                f"MTSR {_abs(s.mtsr)} reaches TD24 {_abs(s.td24)} ({_TD24_SOURCE}): a cooling failure would start "
                "the decomposition (threshold: MTSR below TD24)",
            )
        )
    cls = s.criticality_class
    if cls is not None and cls >= 3:
        level = "outside" if cls >= 4 else "marginal"
        what = "4 and 5 are outside" if cls >= 4 else "3 is marginal"
        out.append(
            Finding(
                level,
                f"criticality class {cls} ({s.criticality_reason}; Stoessel's classes from the process temperature, "
                f"MTSR, the technical limit MTT of limits.technical_limit_temperature and TD24): class {what} "
                "(threshold: class 2 or lower)",
            )
        )
    if s.td24 is not None and T_max >= s.td24:
        out.append(
            Finding(
                "marginal",
                f"the maximum temperature {_abs(T_max)} ({_T_MAX_SOURCE}) is at or above TD24 {_abs(s.td24)} "
                f"({_TD24_SOURCE}): a tank held at its limit would start the decomposition within 24 h "
                "(threshold: the maximum temperature below TD24)",
            )
        )
    return out


def upset_outcomes(ev: Evidence) -> list[Finding]:
    """``marginal``: an upset crosses the maximum temperature, overflows sooner than
    ``check_policy.min_time_to_act``, or is still heating at its cap."""
    sc, lim, pol = ev.sc, ev.sc.limits, ev.sc.policy
    out = []
    for u in ev.upsets:
        if u.failed:
            continue
        t_max = u.time_to_max
        if t_max is not None and ev.state.T <= lim.T_max:
            out.append(
                Finding(
                    "marginal",
                    f"upset '{u.label}': the temperature reaches the maximum temperature {_abs(lim.T_max)} "
                    f"({_T_MAX_SOURCE}) after {_min(t_max)} and peaks at {_abs(u.peak_T)}",
                )
            )
        t_over = u.first("overflow")
        if t_over is not None and t_over < pol.min_time_to_act:
            out.append(
                Finding(
                    "marginal",
                    f"upset '{u.label}': the vessel overflows after {_min(t_over)}, sooner than the time to act "
                    f"{_min(pol.min_time_to_act)} ({_source(sc, 'min_time_to_act', common_practice=True)}: time for "
                    "an operator to notice, diagnose and act)",
                )
            )
        if u.ending == "oscillating":
            tail = f"{u.duration / 3600:g} h cap ({_source(sc, 'upset_duration')})"
            out.append(
                Finding(
                    "marginal",
                    f"upset '{u.label}': still oscillating at the end of its {tail}, peaking at {_abs(u.peak_T)} "
                    "(threshold: settled); the tank does not come to rest",
                )
            )
        if u.rising and not u.bounded_below(min(lim.T_max, ev.safety.td24 or math.inf)):
            out.append(
                Finding(
                    "marginal",
                    f"upset '{u.label}': still heating at the end of its {u.duration / 3600:g} h cap "
                    f"({_source(sc, 'upset_duration')}), at {_abs(u.final_T)} rising {u.dT_end_per_h:.2f} K/h "
                    f"(threshold: settled, under {SETTLED_DT_PER_H:g} K/h); where it ends is not known",
                )
            )
    return out


#: The verdict rules of DESIGN.md §6, in its order.
RULES = (
    failed_computations,
    operating_state,
    map_region,
    margins_below_thresholds,
    upset_outcomes,
    decomposition,
    valve_range,
)


def judge(ev: Evidence) -> tuple[str, tuple[str, ...]]:
    """(verdict, reasons) of the evidence by ``RULES`` (DESIGN.md §6); the check under uncertain data judges
    every sample with it."""
    return _verdict(_findings(ev), ev)


def _findings(ev: Evidence) -> list[Finding]:
    return [f for rule in RULES for f in rule(ev)]


def _verdict(findings: list[Finding], ev: Evidence | None) -> tuple[str, tuple[str, ...]]:
    """``undetermined`` with only its reasons when anything failed; else the worst level, worst reasons first."""
    failed = [f.text for f in findings if f.level == "undetermined"]
    if failed:
        return "undetermined", tuple(failed)
    rank = {v: i for i, v in enumerate(VERDICTS)}
    worst = max((f.level for f in findings), key=rank.__getitem__, default="inside")
    reasons = [f.text for lvl in ("outside", "marginal") for f in findings if f.level == lvl]
    if not reasons and ev is not None:
        T, T_max = float(ev.state.T), ev.sc.limits.T_max
        reasons = [
            f"one stable steady state at {_abs(T)}, {T_max - T:.1f} K below the maximum temperature {_abs(T_max)} "
            f"({_T_MAX_SOURCE}); every margin at or above its threshold (project defaults unless the scenario's "
            "check_policy sets them); MTSR below the maximum temperature; no upset of the battery reaches the "
            "maximum temperature, overflows before the time to act, or is still heating at its cap"
            + ("; TD24 above MTSR and the maximum temperature" if ev.safety.td24 is not None else "")
        ]
    return worst, tuple(reasons)


def check_setpoint(
    sc: Scenario,
    *,
    tau: float | None = None,
    T_in: float | None = None,
    branch: str | None = None,
    max_duration: float = MAX_UPSET_DURATION,
) -> CheckResult:
    """Check a setpoint: states, region, margins, safety figures, upsets and a verdict (DESIGN.md §6).

    Parameters
    ----------
    sc : Scenario
    tau : float, optional
        Residence time at the set level [s]; default the scenario's feed.
    T_in : float, optional
        Feed temperature [K]; default the scenario's.
    branch : str, optional
        ``low`` or ``high``: which stable state the tank is on where there are several; default low.
    max_duration : float
        Longest allowed ``check_policy.upset_duration`` [s] (the limit of one simulation).

    Returns
    -------
    CheckResult

    Raises
    ------
    ModelInputError
        Bad operating point or branch (``field`` names it).
    LimitExceededError
        ``check_policy.upset_duration`` above ``max_duration``.

    Notes
    -----
    The verdict rules are the functions of ``RULES``, one per line of DESIGN.md §6; see the module docstring.

    Examples
    --------
    >>> # check_setpoint(sc).verdict  # doctest: +SKIP
    'inside'
    """
    from exomap.core.regions import region_of
    from exomap.core.steady import steady_states

    tau_v, T_in_v = _operating_point(sc, tau, T_in, branch, max_duration)
    steady = steady_states(sc, tau_v, T_in_v)
    if not steady.states:
        return _result(sc, tau_v, T_in_v, branch, steady, None, "no steady state found", None, (), None, (),
                       ("undetermined", (f"no steady state was found at this point ({steady.message})",)))  # fmt: skip
    idx, assumption = pick_state(steady.states, branch)
    st = steady.states[idx]
    safety = safety_figures(sc, tau_v, T_in_v, st)
    if not steady.success:  # nothing computed from a state that did not converge is worth showing
        ev = Evidence(sc, steady, idx, region_of(sc, steady.states), (), safety, ())
        return _result(sc, tau_v, T_in_v, branch, steady, idx, assumption, None, (), None, (),
                       _verdict(failed_computations(ev), None))  # fmt: skip
    ev = Evidence(
        sc=sc,
        steady=steady,
        idx=idx,
        region=region_of(sc, steady.states),
        margins=tuple(_margins(sc, tau_v, T_in_v, steady.states, idx, safety.mtsr)),
        safety=safety,
        upsets=tuple(run_upsets(sc, tau_v, T_in_v, st)),
    )
    return _result(sc, tau_v, T_in_v, branch, steady, idx, assumption, ev.region, ev.margins, safety, ev.upsets,
                   _verdict(_findings(ev), ev))  # fmt: skip


def _result(
    sc: Scenario,
    tau: float,
    T_in: float,
    branch: str | None,
    steady: Any,
    idx: int | None,
    assumption: str,
    region: str | None,
    margins: tuple[Margin, ...],
    safety: SafetyFigures | None,
    upsets: tuple[UpsetResult, ...],
    verdict: tuple[str, tuple[str, ...]],
) -> CheckResult:
    pol, lim = sc.policy, sc.limits
    x = math.nan if idx is None else float(steady.states[idx].valve_opening)
    return CheckResult(
        verdict=verdict[0],
        reasons=verdict[1],
        tau=tau,
        T_in=T_in,
        branch=branch,
        steady=steady,
        state_index=idx,
        assumption=assumption,
        region=region,
        margins=margins,
        safety=safety,
        upsets=upsets,
        cautions=CAUTIONS,
        success=verdict[0] != "undetermined",
        message=steady.message if verdict[0] != "undetermined" else "; ".join(verdict[1]),
        valve_opening=x,
        valve_range=(pol.valve_min, pol.valve_max),
        limits={
            "max_temperature_K": lim.T_max,
            "alarm_temperature_K": lim.T_alarm,
            "level_high_m": lim.h_high,
            "level_low_m": lim.h_low,
            "technical_limit_temperature_K": lim.T_mtt,
            "vessel_height_m": sc.vessel.H,
        },
        policy={"min_time_to_act_s": pol.min_time_to_act, "upset_duration_s": pol.upset_duration},
    )


__all__ = [
    "ALARM_KINDS",
    "CheckResult",
    "Evidence",
    "Finding",
    "MTSR_ASSUMES",
    "Margin",
    "RULES",
    "UpsetResult",
    "check_setpoint",
    "judge",
    "pick_state",
    "run_upsets",
    "upset_battery",
]
