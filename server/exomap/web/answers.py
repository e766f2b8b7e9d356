"""Answer documents of the API (pydantic), one model per document, for the OpenAPI document and its clients.

Each model describes exactly what a route sends: every key, its type and unit (in the key's name, DESIGN.md
§4), ``None`` where the answer can hold null, and nothing else (``extra="forbid"``). The routes do not build
their answers through these models: an answer is the core result's ``to_dict()``, serialised once in the
worker and sent as bytes (the 200 x 200 map is 0.8 MB; validating it on every request would cost more than
computing it from the cache). Instead ``tests/web/test_answers.py`` runs every route on the demos and edge
cases and validates each actual answer against its model in strict mode, so a key added to a ``to_dict()``
without its model here fails that test, and the committed OpenAPI document (``docs/openapi.json``) shows the
change as a diff.

Conventions (see README, "JSON API"):

* one ``Answer`` subclass per document, named after the document (``CheckAnswer``); nested parts named
  after what they hold (``UpsetAnswer``, ``MarginAnswer``); every field has a description;
* arrays are typed to their items (``list[float]``, ``list[list[int]]``), pairs as ``Pair``;
* a value that can be missing is ``float | None`` and its description says when it is null;
* enumerations are spelled out here; ``tests/web/test_answers.py`` holds them equal to the core's constants
  (region keys, actions, starts), which this module does not import: the server process loads neither numpy
  nor scipy until its first computation.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, JsonValue


def _no_default(schema: dict[str, Any]) -> None:
    schema.pop("default", None)


def MaybeAbsent() -> Any:  # noqa: N802 - reads as a type in the field declarations
    """A field that is either present with its type or absent (never null): not required in the schema."""
    return Field(default=None, json_schema_extra=_no_default)


class Answer(BaseModel):
    """Base of every answer model: the document as sent, no other key allowed."""

    model_config = ConfigDict(extra="forbid")


#: A pair of numbers, e.g. an eigenvalue [re, im] or a boundary point [τ, T_in].
Pair = Annotated[list[float], Field(min_length=2, max_length=2)]
#: A point of a boundary curve; [null, null] separates two pieces of one curve.
CurvePoint = Annotated[list[float | None], Field(min_length=2, max_length=3)]

RegionKey = Literal["stable", "sensitive", "multiple", "unstable", "runaway"]  # exomap.core.regions.REGION_KEYS
Stability = Literal["stable", "saddle", "unstable"]  # exomap.core.steady.classify
Start = Literal["low", "middle", "high", "cold", "empty", "initial"]  # exomap.core.dynamics.STARTS + "initial"
Action = Literal[  # exomap.core.events.ACTIONS
    "feed_stop",
    "feed_restart",
    "outlet_block",
    "outlet_unblock",
    "cooling_loss",
    "cooling_restore",
    "valve_manual",
    "valve_auto",
]
AlarmKind = Literal["alarm_temperature", "max_temperature", "level_high", "level_low", "overflow", "empty"]
StopReason = Literal["completed", "settled", "overflow", "empty"]  # "settled": a run asked to stop when settled


# -- service -------------------------------------------------------------------------------------------------
class HealthAnswer(Answer):
    """Liveness."""

    status: Literal["ok"] = Field(description="Always 'ok' when the server answers.")


class VersionAnswer(Answer):
    """Versions of the server, of its API and of the scenario format it reads."""

    version: str = Field(description="exomap's version.")
    scenario_format: str = Field(description="The scenario format read, e.g. 'exomap-scenario/1'.")


# -- scenarios -----------------------------------------------------------------------------------------------
class ScenarioSummary(Answer):
    """One stored scenario (demo or saved)."""

    id: str = Field(description="Content id: 16 hex digits of the SHA-256 of the canonical document.")
    title: str = Field(description="The scenario's title ('' when it has none).")
    description: str = Field(
        description="The scenario's description ('' when it has none), cut to 300 characters (ending in an "
        "ellipsis) in the listing; the whole text is in the document."
    )
    demo: bool = Field(description="True for a demo shipped with exomap.")
    name: str | None = Field(description="A demo's file name (usable as its id); null for a saved scenario.")
    derived_from: str | None = Field(
        description="Id of the scenario this one was saved from (an edit; store metadata, not part of the content "
        "id); null when it was not saved from another."
    )


class ScenarioList(Answer):
    """One page of the listing: the demos first, then the saved scenarios, oldest first."""

    scenarios: list[ScenarioSummary] = Field(description="The scenarios of this page.")
    total: int = Field(description="How many scenarios the server holds (demos and saved).")
    limit: int = Field(description="Most scenarios per page, as asked (default 100).")
    offset: int = Field(description="How many scenarios come before this page.")
    next: str | None = Field(description="URL of the next page; null on the last one.")


# -- steady states -------------------------------------------------------------------------------------------
class OperatingPointAnswer(Answer):
    """Where the steady states were computed (SI)."""

    residence_time_s: float = Field(description="Residence time V_set/q [s].")
    feed_temperature_K: float = Field(description="Feed temperature [K].")
    flow_m3_per_s: float = Field(description="Feed flow q [m^3/s].")
    feed_concentrations_mol_per_m3: dict[str, float] = Field(description="Feed concentration of each species.")
    coolant_temperature_K: float = Field(description="Coolant temperature of the jacket [K].")
    volume_m3: float = Field(description="Liquid volume at the level setpoint [m^3].")
    level_m: float = Field(description="Level setpoint [m].")


class SteadyStateAnswer(Answer):
    """One steady state and its stability."""

    temperature_K: float = Field(description="Steady temperature [K].")
    concentrations_mol_per_m3: dict[str, float] = Field(description="Concentration of each species.")
    conversion: float = Field(description="Conversion of the first reactant of the first reaction [-].")
    stability: Stability = Field(description="From the eigenvalues of the species + energy Jacobian.")
    oscillatory: bool = Field(description="The leading eigenvalues are a complex pair.")
    eigenvalues_per_s: list[Pair] = Field(description="Eigenvalues as [real, imaginary] pairs [1/s].")
    valve_opening: float | None = Field(
        description="Opening the outlet valve needs to pass the flow at the set level [-], 0..1; null when no "
        "opening can (valve_opening_status says why)."
    )
    valve_opening_status: Literal["in_range", "below_range", "above_range", "no_driving_pressure"] = Field(
        description="Whether the valve can take that opening: below_range (flow below what the characteristic "
        "passes at its smallest opening), above_range (valve too small), no_driving_pressure."
    )
    sensitivity: float | None = Field(
        description="dT/dT_in along the state's branch [K/K]; null at a turning point (infinite)."
    )


class SteadyAnswer(Answer):
    """Every steady state at an operating point, sorted by temperature (lowest first)."""

    operating_point: OperatingPointAnswer
    states: list[SteadyStateAnswer] = Field(description="Every steady state, lowest temperature first.")
    success: bool = Field(description="False when the search may have missed a state; message says why.")
    message: str


# -- branch --------------------------------------------------------------------------------------------------
class BranchPointAnswer(Answer):
    value: float = Field(description="The varying parameter, in parameter_unit.")
    temperature_K: float = Field(description="Steady temperature [K].")
    conversion: float = Field(description="Conversion of the first reactant of the first reaction [-].")
    stable: bool
    oscillatory: bool = Field(description="The leading eigenvalues are a complex pair.")
    piece: int = Field(description="Index of the connected piece of the branch this point lies on.")


class TurningPointAnswer(Answer):
    kind: Literal["ignition", "extinction"] = Field(
        description="ignition: the low branch meets the middle one; extinction: the high branch meets it."
    )
    residence_time_s: float
    feed_temperature_K: float
    temperature_K: float


class HopfPointAnswer(Answer):
    residence_time_s: float
    feed_temperature_K: float
    temperature_K: float
    angular_frequency_rad_per_s: float = Field(description="Of the oscillation born there [rad/s].")
    period_s: float | None = Field(description="2π / angular frequency [s]; null when the frequency is 0.")


class ThroughAnswer(Answer):
    residence_time_s: float
    feed_temperature_K: float


class BranchAnswer(Answer):
    """Steady states along one parameter, the other fixed, with turning and Hopf points."""

    parameter: Literal["residence_time", "feed_temperature"] = Field(description="The parameter that varies.")
    parameter_unit: Literal["s", "K"] = Field(description="Unit of value, range and the points' value.")
    through: ThroughAnswer = Field(description="The operating point the branch passes through.")
    range: Pair = Field(description="[lo, hi] of the varying parameter, in parameter_unit.")
    points: list[BranchPointAnswer]
    turning_points: list[TurningPointAnswer]
    hopf_points: list[HopfPointAnswer]
    success: bool
    message: str


# -- map -----------------------------------------------------------------------------------------------------
class LegendEntry(Answer):
    code: int = Field(description="The value in the region grid.")
    key: RegionKey = Field(description="Region key (DESIGN.md §5).")
    label: str = Field(description="Plain words.")


class BoundariesAnswer(Answer):
    """Boundary curves solved to solver accuracy; points [τ [s], T_in [K]], [null, null] between pieces."""

    ignition: list[CurvePoint]
    extinction: list[CurvePoint]
    hopf: list[CurvePoint]
    max_temperature: list[CurvePoint] = Field(description="Where a reachable state reaches the maximum temperature.")
    cusp: list[CurvePoint] = Field(description="Cusp points [τ [s], T_in [K], T [K]] where ignition meets extinction.")


class ProbabilityGridsAnswer(Answer):
    """One grid per unsafe region, indexed [feed temperature][residence time], each value in 0..1."""

    runaway: list[list[float]]
    unstable: list[list[float]]
    multiple: list[list[float]]
    unsafe: list[list[float]] = Field(description="runaway or unstable.")


class BandAnswer(Answer):
    """A boundary at three quantiles over the samples that have it; points [τ [s], T_in [K] or null]."""

    fraction: list[float] = Field(description="Share of the samples that have this boundary, per residence time.")
    q05: list[CurvePoint] = Field(description="5 % quantile of its feed temperature; null outside the window.")
    q50: list[CurvePoint]
    q95: list[CurvePoint]


class BoundaryBandsAnswer(Answer):
    ignition: BandAnswer
    extinction: BandAnswer


class MapDriverAnswer(Answer):
    """How far one standard deviation of a parameter moves the boundaries (least squares over the samples)."""

    target: str = Field(description="The uncertain parameter's scenario path, e.g. 'reactions[0].activation_energy'.")
    ignition_K_per_sd: float | None = Field(description="RMS over residence times [K]; null: no ignition to fit.")
    extinction_K_per_sd: float | None = Field(description="RMS over residence times [K]; null: none to fit.")
    boundary_shift_K_per_sd: float | None = Field(description="The larger of the two [K]; null when neither.")
    unsafe_share_per_sd: float = Field(description="Change of the map's unsafe share per standard deviation [-].")


class MapAnswer(Answer):
    """The operating map; grids are indexed [feed temperature][residence time]. Asked with ``samples``, it is
    the nominal map plus the probability keys of DESIGN.md §11 (absent otherwise)."""

    residence_time_s: list[float] = Field(description="Residence-time axis [s].")
    feed_temperature_K: list[float] = Field(description="Feed-temperature axis [K].")
    spacing: Literal["log", "linear"] = Field(description="Spacing of the residence-time axis.")
    region: list[list[int]] = Field(description="Region code of each cell (see legend).")
    legend: list[LegendEntry]
    state_count: list[list[int]] = Field(description="Number of steady states in each cell.")
    max_temperature_K: list[list[float | None]] = Field(
        description="Highest reachable (stable) steady temperature of each cell [K]; null where none is stable."
    )
    limit_temperature_K: float = Field(description="The scenario's maximum temperature [K].")
    valve_opening: list[float | None] = Field(
        description="Valve opening needed at each residence time [-], 0..1; null where the valve cannot take it "
        "(valve_limited is true there)."
    )
    valve_limited: list[list[bool]] = Field(description="The valve is outside its usable range (overlay).")
    boundaries: BoundariesAnswer
    success: bool
    message: str
    samples: int = MaybeAbsent()
    seed: int = MaybeAbsent()
    reference_temperature_K: float = MaybeAbsent()
    parameters: list[str] = MaybeAbsent()
    probability: ProbabilityGridsAnswer = MaybeAbsent()
    upper_bound_95: ProbabilityGridsAnswer = MaybeAbsent()
    upper_bound_basis: str = MaybeAbsent()
    max_unsafe_probability: float = MaybeAbsent()
    robust_window: list[list[bool]] = MaybeAbsent()
    boundary_bands: BoundaryBandsAnswer = MaybeAbsent()
    drivers: list[MapDriverAnswer] = MaybeAbsent()
    method: str = MaybeAbsent()


# -- check ---------------------------------------------------------------------------------------------------
class MarginAnswer(Answer):
    value: float | None = Field(description="In the unit of its key; null when it does not exist (note says why).")
    threshold: float | None = Field(description="Below it the point is marginal; null: for information only.")
    ok: bool | None = Field(description="value >= threshold; null when either is null.")
    note: str | None = Field(description="Why the value is null, or what it means; null when nothing to say.")


class MarginsAnswer(Answer):
    """Each margin by its key; the object is empty when the check is undetermined before its margins."""

    feed_temperature_rise_to_ignition_K: MarginAnswer = MaybeAbsent()
    residence_time_rise_to_ignition_percent: MarginAnswer = MaybeAbsent()
    feed_temperature_drop_to_extinction_K: MarginAnswer = MaybeAbsent()
    residence_time_drop_to_extinction_percent: MarginAnswer = MaybeAbsent()
    steady_temperature_to_max_K: MarginAnswer = MaybeAbsent()
    mtsr_to_max_K: MarginAnswer = MaybeAbsent()
    valve_opening_to_usable_range_percent: MarginAnswer = MaybeAbsent()


class SafetyAnswer(Answer):
    """Thermal-safety figures at the operating state."""

    process_temperature_K: float
    conversion: float = Field(description="Of the first reactant of the first reaction at the operating state.")
    adiabatic_temperature_rise_K: float = Field(description="ΔT_ad of the feed by the synthesis reactions.")
    decomposition: str | None = Field(description="'no decomposition reaction given', or null when one is.")
    decomposition_temperature_rise_K: float | None = Field(
        description="Further rise the decomposition could add; null without a decomposition reaction."
    )
    mtsr_K: float = Field(description="Maximum temperature of the synthesis reaction, T + ΔT_ad·(1 − X).")
    tmr_ad_s: float | None = Field(description="Time to maximum rate, adiabatic; null when no heat is released.")
    tmr_ad_decomposition_at_mtsr_s: float | None = Field(description="null without a decomposition reaction.")
    td24_K: float | None = Field(description="Temperature with TMRad = 24 h; null without a decomposition.")
    mtt_K: float | None = Field(description="The scenario's technical limit temperature; null when not given.")
    criticality_class: int | None = Field(description="1 to 5; null when the scenario lacks the limits needed.")
    criticality_reason: str
    notes: list[str]


class SetEvent(Answer):
    at: float = Field(description="Time [s].")
    set: str = Field(description="The quantity set.")
    to: float = Field(description="SI value.")


class AddEvent(Answer):
    at: float = Field(description="Time [s].")
    add: str = Field(description="The quantity changed.")
    value: float = Field(description="SI change.")


class ScaleEvent(Answer):
    at: float = Field(description="Time [s].")
    scale: str = Field(description="The quantity multiplied.")
    by: float = Field(description="Factor [-].")


class RampEvent(Answer):
    at: float = Field(description="Time [s].")
    ramp: str = Field(description="The quantity ramped.")
    to: float = Field(description="SI value at the end of the ramp.")
    over: float = Field(description="Ramp duration [s].")


class DoEvent(Answer):
    at: float = Field(description="Time [s].")
    do: Action = Field(description="A plant action.")


#: An event in its own syntax with SI numbers (exomap.core.events).
EventAnswer = SetEvent | AddEvent | ScaleEvent | RampEvent | DoEvent


class UpsetAnswer(Answer):
    """One upset of the battery, simulated from the operating state."""

    key: str = Field(description="e.g. 'feed_warmer', 'cooling_lost'.")
    label: str
    events: list[EventAnswer]
    duration_s: float = Field(description="The cap of the run [s]; it ends earlier when it settles or stops.")
    peak_temperature_K: float | None = Field(description="null when the integrator failed (see stop_reason).")
    peak_time_s: float | None
    alarms: list[UpsetAlarmAnswer] = Field(description="Every alarm, in time order.")
    time_to_alarm_s: float | None = Field(description="First crossing of the alarm temperature; null: none.")
    time_to_max_temperature_s: float | None = Field(description="First crossing of the maximum; null: none.")
    level_min_m: float | None
    level_max_m: float | None
    final_temperature_K: float | None
    final_level_m: float | None
    settled: bool
    stop_reason: Literal["completed", "settled", "overflow", "empty", "solver_failed"]
    end_time_s: float | None
    temperature_rate_at_end_K_per_h: float | None = Field(description="dT/dt when the run ended; null: failed.")
    ending: Literal["settled", "overflow", "empty", "oscillating", "rising", "falling", "moving", ""] = Field(
        description="How the run ended ('' when the integrator failed)."
    )
    adiabatic_ceiling_K: float | None = Field(
        description="Highest temperature the run could reach with no heat removal; null when not computed."
    )
    message: str


class UpsetAlarmAnswer(Answer):
    kind: AlarmKind
    time_s: float


class LimitsAnswer(Answer):
    max_temperature_K: float
    alarm_temperature_K: float | None
    level_high_m: float | None
    level_low_m: float | None
    technical_limit_temperature_K: float | None
    vessel_height_m: float


class PolicyAnswer(Answer):
    """The check_policy values the verdict used (the others are in the reasons)."""

    min_time_to_act_s: float = Field(description="An upset overflowing sooner makes the point marginal.")
    upset_duration_s: float = Field(description="Cap of each upset run.")


class MtsrAnswer(Answer):
    """MTSR, what it assumes, and its dynamic counterpart (the interlocked cooling-loss upset)."""

    temperature_K: float
    assumes: str
    interlocked_upset_peak_temperature_K: float | None = Field(description="null without a jacket or if it failed.")
    interlocked_upset_peak_time_s: float | None
    note: str


class QuantilesAnswer(Answer):
    q05: float | None = Field(description="null when no sample has a finite value.")
    q50: float | None
    q95: float | None


class CheckQuantilesAnswer(Answer):
    temperature_K: QuantilesAnswer
    mtsr_K: QuantilesAnswer
    tmr_ad_s: QuantilesAnswer


class CheckCountsAnswer(Answer):
    outside: int = Field(description="Samples judged outside (undetermined ones included).")
    marginal_or_worse: int
    undetermined: int = Field(description="Samples whose computation failed.")


class CheckBoundsAnswer(Answer):
    outside: float = Field(description="Exact one-sided 95 % binomial bound on the probability of outside.")
    marginal_or_worse: float


class CheckDriverAnswer(Answer):
    target: str
    temperature_K_per_sd: float | None = Field(description="Steady temperature change per standard deviation [K].")
    mtsr_K_per_sd: float | None


class CheckUncertaintyAnswer(Answer):
    """The check under the scenario's uncertainty block (DESIGN.md §11); upsets on the nominal parameters only."""

    samples: int
    seed: int
    reference_temperature_K: float = Field(description="Where the rate constants' uncertainty is stated [K].")
    parameters: list[str]
    probability_outside: float
    probability_marginal_or_worse: float
    counts: CheckCountsAnswer
    upper_bound_95: CheckBoundsAnswer
    upper_bound_basis: str = Field(description="What the bounds are, and why they are cautious for these samples.")
    max_unsafe_probability: float = Field(description="check_policy.max_unsafe_probability [-].")
    quantiles: CheckQuantilesAnswer
    drivers: list[CheckDriverAnswer]
    upsets: str
    margins: str = Field(description="How each sample's margins are found.")


class CheckAnswer(Answer):
    """The setpoint check (DESIGN.md §6)."""

    verdict: Literal["inside", "marginal", "outside", "undetermined"]
    reasons: list[str] = Field(description="One per finding, each with its number and threshold.")
    operating_point: OperatingPointAnswer
    states: list[SteadyStateAnswer]
    state_index: int | None = Field(description="Index in states of the state assumed; null: no state found.")
    assumption: str = Field(description="Which state was assumed, and why.")
    region: RegionKey | None = Field(description="Map region of the point; null when undetermined before it.")
    margins: MarginsAnswer
    safety: SafetyAnswer | None = Field(description="null when the check is undetermined before them.")
    mtsr: MtsrAnswer | None = Field(description="null when there are no safety figures.")
    upsets: list[UpsetAnswer]
    limits: LimitsAnswer
    policy: PolicyAnswer
    cautions: list[str]
    success: bool
    message: str
    uncertainty: CheckUncertaintyAnswer = MaybeAbsent()


# -- simulate ------------------------------------------------------------------------------------------------
class SimulatePointAnswer(Answer):
    residence_time_s: float
    feed_temperature_K: float


class AppliedEvent(Answer):
    index: int = Field(description="Position of the event in the request's list.")
    time_s: float = Field(description="When it was applied [s].")
    event: EventAnswer
    description: str


class AlarmAnswer(Answer):
    kind: AlarmKind
    time_s: float
    value: float = Field(description="The threshold crossed [K or m].")


class SimulateAnswer(Answer):
    """A dynamic response; the series share the time axis."""

    success: bool
    message: str
    operating_point: SimulatePointAnswer
    start: Start = Field(description="The state the run started from.")
    duration_s: float = Field(description="Requested duration; time_s ends earlier after a stop.")
    time_s: list[float]
    level_m: list[float]
    concentrations_mol_per_m3: dict[str, list[float]]
    temperature_K: list[float]
    outlet_flow_m3_per_s: list[float]
    valve_opening: list[float]
    events: list[AppliedEvent]
    alarms: list[AlarmAnswer]
    peak_temperature_K: float
    peak_time_s: float
    stop_reason: StopReason


# -- compare -------------------------------------------------------------------------------------------------
class CompareSideAnswer(Answer):
    scenario_id: str = Field(description="Content id of the side's scenario.")
    title: str


class FieldChange(Answer):
    """One field of the scenario documents that differs."""

    field: str = Field(description="Dotted path in the scenario document, e.g. 'feed.flow'.")
    change: Literal["changed", "added", "removed"]
    a: JsonValue = Field(description="Canonical (SI) value before; null when the field was added.")
    b: JsonValue = Field(description="Canonical (SI) value after; null when the field was removed.")
    a_text: str = Field(description="The value before in plant units ('—' when added).")
    b_text: str = Field(description="The value after in plant units ('—' when removed).")
    relative_change: float | None = Field(
        description="(b − a)/|a| for numbers other than absolute temperatures; null otherwise."
    )


class SetpointAnswer(Answer):
    residence_time_s: float
    feed_temperature_K: float
    flow_m3_per_s: float
    branch: Literal["low", "high"] | None = Field(description="The branch asked for; null: the default (low).")


class TransitionAnswer(Answer):
    model_config = ConfigDict(extra="forbid", populate_by_name=True)

    from_: RegionKey = Field(alias="from", description="Region before.")
    to: RegionKey = Field(description="Region after.")
    cells: int = Field(description="Cells that changed so.")


class MapComparisonAnswer(Answer):
    """Both maps on one shared grid; grids are indexed [feed temperature][residence time]."""

    residence_time_s: list[float]
    feed_temperature_K: list[float]
    spacing: Literal["log", "linear"]
    legend: list[LegendEntry]
    region_a: list[list[int]]
    region_b: list[list[int]]
    state_count_a: list[list[int]]
    state_count_b: list[list[int]]
    changed: list[list[bool]] = Field(description="The cell's region differs.")
    direction: list[list[int]] = Field(description="+1 worse, -1 better, 0 unchanged.")
    changed_count: int
    worse_count: int
    better_count: int
    cells: int = Field(description="Cells of the grid.")
    transitions: list[TransitionAnswer] = Field(description="Counted region changes, most cells first.")
    limit_temperature_a_K: float
    limit_temperature_b_K: float
    valve_limited_a: list[list[bool]]
    valve_limited_b: list[list[bool]]
    boundaries_a: BoundariesAnswer
    boundaries_b: BoundariesAnswer
    success: bool
    message: str


class CompareChecksAnswer(Answer):
    a: CheckAnswer
    b: CheckAnswer


class CompareAnswer(Answer):
    """Before (a) and after (b) a change (DESIGN.md §13)."""

    a: CompareSideAnswer
    b: CompareSideAnswer
    same_scenario: bool = Field(description="Both sides are one scenario (two setpoints compared).")
    fields: list[FieldChange] = Field(description="Fields that differ, in document order; empty for one scenario.")
    setpoint_a: SetpointAnswer
    setpoint_b: SetpointAnswer
    map: MapComparisonAnswer
    checks: CompareChecksAnswer | None = Field(description="Both setpoint checks; null when not asked for.")
    cautions: list[str]
    success: bool
    message: str


# -- plant data (DESIGN.md §12) ------------------------------------------------------------------------------
class DatasetRoleAnswer(Answer):
    tag: str = Field(description="The tag (column) the role was read from.")
    unit: str = Field(description="The unit the tag was written in (converted to SI).")
    values: int = Field(description="Good values of the role (bad-flagged and empty ones left out).")


class GapAnswer(Answer):
    start: str = Field(description="Last record before the gap (ISO 8601, UTC).")
    end: str = Field(description="First record after the gap (ISO 8601, UTC).")
    length_s: float = Field(description="Length of the gap [s].")


class GapTimesAnswer(Answer):
    start_s: float = Field(description="Last record before the gap, seconds since 1970-01-01 UTC.")
    end_s: float = Field(description="First record after the gap, seconds since 1970-01-01 UTC.")


class DatasetSummaryAnswer(Answer):
    """What was read from a historian export."""

    dataset_id: str = Field(description="Content id: 16 hex digits of the SHA-256 of the SI content.")
    layout: Literal["wide", "long"] = Field(description="The layout the file was read as.")
    rows: int = Field(description="Data rows in the file.")
    records: int = Field(description="Distinct record times kept.")
    start: str = Field(description="First record (ISO 8601, UTC).")
    end: str = Field(description="Last record (ISO 8601, UTC).")
    duration_s: float = Field(description="Time covered [s].")
    roles: dict[str, DatasetRoleAnswer] = Field(description="Each mapped role: its tag, unit and good values.")
    dropped_bad: dict[str, int] = Field(description="Values dropped as flagged bad, per tag.")
    gaps: list[GapAnswer] = Field(description="Intervals longer than three median spacings.")
    gap_times: list[GapTimesAnswer] = Field(description="The same gaps in epoch seconds.")
    median_step_s: float = Field(description="Median spacing of the records [s].")
    irregular_sampling: bool = Field(description="The spacing varies by more than 10 % around its median.")
    notes: list[str] = Field(description="What the reader assumed, e.g. times without a zone read as UTC.")


class DatasetAnswer(DatasetSummaryAnswer):
    """A stored dataset's summary."""

    created: bool = Field(description="True when this upload stored it; false when it was there already.")


class SimulatedSeriesAnswer(Answer):
    temperature_K: list[float | None]
    level_m: list[float | None]
    outlet_flow_m3_per_s: list[float | None]
    valve_opening: list[float | None]
    concentrations_mol_per_m3: dict[str, list[float | None]]


class PlantPathAnswer(Answer):
    residence_time_s: list[float | None] = Field(description="V_set / recorded feed flow at each record [s].")
    feed_temperature_K: list[float | None] = Field(description="Feed temperature at each record [K].")


class ResidualStatisticsAnswer(Answer):
    count: int
    mean: float = Field(description="Mean residual (simulated - recorded), SI unit of the output.")
    sd: float | None = Field(description="Standard deviation; null with one residual.")
    rms: float
    max_abs: float


class WindowAnswer(Answer):
    """The records a replay, overlay or calibration used: the request's start and end, or the whole dataset."""

    start: str = Field(description="Time of the window's first record (ISO 8601, UTC).")
    end: str = Field(description="Time of the window's last record (ISO 8601, UTC).")
    records: int = Field(description="Records in the window.")
    offset_s: float = Field(description="Seconds from the dataset's first record to the window's first.")
    whole: bool = Field(description="True when the window is the whole dataset.")


class ReplayAnswer(Answer):
    """The scenario driven by recorded inputs, beside the recorded outputs (SI; null where missing)."""

    dataset: DatasetSummaryAnswer
    window: WindowAnswer
    time_s: list[float] = Field(description="Record times from the window's first record [s].")
    simulated: SimulatedSeriesAnswer
    recorded: dict[str, list[float | None]] = Field(
        description="Recorded outputs: reactor_temperature_K, level_m, valve_opening, outlet_flow_m3_per_s."
    )
    path: PlantPathAnswer
    residuals: dict[str, list[float | None]] = Field(description="Simulated minus recorded, same keys.")
    residual_statistics: dict[str, ResidualStatisticsAnswer]
    start_temperature_K: float = Field(description="Temperature of the starting steady state [K].")
    success: bool
    message: str


class OverlayAnswer(Answer):
    """Where the plant ran: its (residence time, feed temperature) path in time, for the operating map."""

    dataset_id: str
    start: str = Field(description="Time of the window's first record (ISO 8601, UTC).")
    records: int = Field(description="Records in the dataset (the window's: window.records).")
    window: WindowAnswer
    stride: int = Field(
        description="Every stride-th record is answered (1: all), the last always, so at most max_points."
    )
    time_s: list[float] = Field(description="Record times from the window's first record [s].")
    residence_time_s: list[float | None] = Field(description="V_set / recorded feed flow [s]; null where missing.")
    feed_temperature_K: list[float | None] = Field(description="Recorded feed temperature [K]; null where missing.")
    reactor_temperature_K: list[float | None] = Field(description="Recorded reactor temperature [K], or nulls.")
    recorded: list[str] = Field(description="The roles the dataset holds.")


class EstimateAnswer(Answer):
    target: str = Field(description="Scenario path of the fitted parameter (DESIGN.md §11).")
    value: float = Field(description="Estimate, SI (k at the reference temperature for a rate constant).")
    initial: float = Field(description="The scenario's value before the fit, SI.")
    standard_error: float = Field(description="Linearised standard error, SI.")
    interval_95: list[float | None] = Field(
        min_length=2,
        max_length=2,
        description="95 % interval by profile likelihood; null on a side the data leave open.",
    )
    unit: str = Field(description="The SI unit of the value.")


class ProvenanceAnswer(Answer):
    scenario_id: str = Field(description="The scenario the calibration started from.")
    dataset_id: str = Field(description="The dataset it was fitted to.")
    start: str = Field(description="First record of the window fitted (ISO 8601, UTC).")
    end: str = Field(description="Last record of the window fitted (ISO 8601, UTC).")


class CalibrationAnswer(Answer):
    """Fitted parameters with their uncertainty, and the calibrated scenario."""

    reference_temperature_K: float
    outputs: list[str] = Field(description="Recorded outputs fitted.")
    estimates: list[EstimateAnswer]
    correlations: list[list[float | None]] = Field(description="Correlation matrix of the estimates.")
    residual_sd: dict[str, float] = Field(description="Residual standard deviation per output, SI.")
    observations: int
    degrees_of_freedom: int
    warnings: list[str] = Field(description="Parameters the data cannot determine, and why.")
    success: bool
    message: str
    dataset: DatasetSummaryAnswer
    window: WindowAnswer
    scenario: dict[str, JsonValue] = Field(
        description="The calibrated scenario document (canonical, SI) with the fit's uncertainty block."
    )
    derived_from: ProvenanceAnswer


#: The model of each computation's answer, by kind (the route names and the service's kinds).
ANSWER_MODELS: dict[str, type[Answer]] = {
    "steady": SteadyAnswer,
    "branch": BranchAnswer,
    "map": MapAnswer,
    "check": CheckAnswer,
    "simulate": SimulateAnswer,
}
