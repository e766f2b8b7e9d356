"""Pydantic models of the JSON scenario format (DESIGN.md §3).

Every dimensional field is declared with ``Q(dimension)``: it accepts a bare number in SI base units or a
string with units (see ``exomap.schema.quantity``) and holds an SI float once validated, so a ``ScenarioDoc``
is already the canonical form (``exomap.schema.canonical``). ``ScenarioDoc.to_core()`` builds the plain SI
``exomap.core.scenario.Scenario``.

Decisions written down here (the format is silent on them)
----------------------------------------------------------
* Unknown keys are refused (a misspelt optional field would otherwise be ignored without a word).
* ``outlet_valve.kv`` as a bare number is Kv in its defining unit, m^3/h of water at 1 bar; ``cv`` as a bare
  number is Cv in US gal/min at 1 psi. Strings with flow units are accepted for both. A ``cv`` is converted
  with ``exomap.core.valve.cv_to_kv`` and stored as ``kv``.
* ``outlet_valve``: ``opening`` (fixed, 0..1 or a percentage) or ``level_control`` or neither; neither means a
  fixed valve at the opening that passes the scenario's feed at the level setpoint.
* Species missing from ``stoichiometry``, ``orders`` or ``feed.concentrations`` have 0 there.
* ``check_policy`` fields default to ``exomap.core.scenario.CheckPolicy`` (project defaults); margins in K are
  temperature differences ("10 K"; "10 degC" is read as an interval of 10 K).
* ``uncertainty`` (DESIGN.md §11) is described in ``exomap.schema.uncertainty``.
* ``agitator_power`` (W, default 0) is dissipated in the liquid; ``reactions[].decomposition`` (default false)
  marks a decomposition reaction, used for TD24 and the criticality class.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, ValidationInfo, field_validator, model_validator
from pydantic_core import PydanticCustomError

from exomap.core.scenario import CheckPolicy, MapSpec
from exomap.schema.quantity import (
    DIMENSIONS,
    QuantityProblem,
    expected,
    pre_exponential_order,
    pre_exponential_to_si,
    to_si,
)
from exomap.schema.text import Description, Label, Text, Title
from exomap.schema.uncertainty import UncertaintyDoc

FORMAT = "exomap-scenario/1"
_POLICY = CheckPolicy()


@dataclass(frozen=True)
class Dim:
    """Marker in a field's Annotated metadata: the dimension the field expects (used for messages)."""

    dimension: str


def _problem(text: str) -> PydanticCustomError:
    # the message goes in the context: a literal template would treat braces in user text as placeholders
    return PydanticCustomError("quantity", "{text}", {"text": text})


def Q(dimension: str, *, sign: str | None = None, upper: float | None = None) -> Any:  # noqa: N802
    """Annotated float of ``dimension``; ``sign`` is ``"positive"`` or ``"nonnegative"``; ``upper`` an
    inclusive upper bound in SI."""

    def convert(value: object) -> float:
        try:
            x = to_si(value, dimension)
        except QuantityProblem as exc:
            raise _problem(str(exc)) from None
        unit = DIMENSIONS[dimension].si_unit
        shown = f"{x:g} {unit}".strip()
        if sign == "positive" and not x > 0:
            raise _problem(f"must be positive, got {shown}; {expected(dimension)}")
        if sign == "nonnegative" and not x >= 0:
            raise _problem(f"must not be negative, got {shown}; {expected(dimension)}")
        if upper is not None and x > upper:
            raise _problem(f"must be at most {upper:g}, got {shown}; {expected(dimension)}")
        return x

    return Annotated[float, BeforeValidator(convert), Dim(dimension)]


def _flow_coefficient(unit: str, name: str) -> Any:
    """Kv (unit "m^3/h") or Cv (unit "gallon/minute"): a bare number is in that unit."""

    def convert(value: object) -> float:
        hint = f"expected {name} as a number in {unit} (its defining unit) or a flow string, e.g. '12 {unit}'"
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            x = float(value)
            if x != x or x in (float("inf"), float("-inf")):
                raise _problem(f"{x!r} is not a finite number; {hint}")
        else:
            try:
                x = to_si(value, "flow") * (3600.0 if unit == "m^3/h" else 60.0 / 3.785411784e-3)
            except QuantityProblem as exc:
                raise _problem(f"{str(exc).split(';')[0]}; {hint}") from None
            x = float(f"{x:.15g}")
        if not x > 0:
            raise _problem(f"must be positive, got {x:g}; {hint}")
        return x

    return Annotated[float, BeforeValidator(convert), Dim("flow")]


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False, validate_default=False)


class LiquidDoc(_Model):
    density: Q("density", sign="positive")
    heat_capacity: Q("specific_heat", sign="positive")


class VesselDoc(_Model):
    diameter: Q("length", sign="positive")
    height: Q("length", sign="positive")
    level_setpoint: Q("length", sign="positive")
    headspace_pressure: Q("pressure", sign="positive") = 101325.0


class LevelControlDoc(_Model):
    gain: Q("inverse_length", sign="positive")
    reset_time: Q("time", sign="positive")


class OutletValveDoc(_Model):
    kv: _flow_coefficient("m^3/h", "Kv") | None = None
    cv: _flow_coefficient("gallon/minute", "Cv") | None = None
    characteristic: Literal["linear", "equal_percentage", "quick_opening"] = "linear"
    rangeability: float = Field(50.0, gt=1.0)
    downstream_pressure: Q("pressure", sign="positive") = 101325.0
    drop_below_vessel: Q("length") = 0.0
    opening: Q("fraction", sign="nonnegative", upper=1.0) | None = None
    level_control: LevelControlDoc | None = None

    @model_validator(mode="after")
    def _one_coefficient(self) -> OutletValveDoc:
        from exomap.core.valve import cv_to_kv

        if (self.kv is None) == (self.cv is None):
            raise ValueError("give exactly one of kv (m^3/h at 1 bar) or cv (US gal/min at 1 psi)")
        if self.opening is not None and self.level_control is not None:
            raise ValueError("give either a fixed opening or level_control, not both")
        if self.cv is not None:
            self.kv = float(f"{cv_to_kv(self.cv):.15g}")
            self.cv = None
        return self


class ReactionDoc(_Model):
    label: Label = ""
    stoichiometry: dict[str, float]
    orders: dict[str, Annotated[float, Field(ge=0.0)]]
    pre_exponential: float
    activation_energy: Q("molar_energy", sign="positive")
    reaction_enthalpy: Q("molar_energy")
    decomposition: bool = False

    @field_validator("pre_exponential", mode="before")
    @classmethod
    def _k0(cls, value: object, info: ValidationInfo) -> float:
        orders = info.data.get("orders")
        context = info.context or {}
        declared = context.get("species")
        # without a species list in the context (a direct model_validate) every order counts
        certain = "species" not in context or (
            isinstance(declared, list) and all(isinstance(s, str) for s in declared) and bool(declared)
        )
        if isinstance(orders, dict) and certain and ("species" not in context or all(s in declared for s in orders)):
            total: float | None = float(sum(orders.values()))
        else:
            # the orders failed their own check or name an undeclared species (a typo): the total order is
            # not known, so the dimension of k0 cannot be held against it. Those fields are reported
            # themselves; k0 is only refused when its unit is no rate constant of any order.
            total = None
        try:
            if total is None:
                implied = pre_exponential_order(value)
                x = pre_exponential_to_si(value, 1.0 if implied is None else implied)
            else:
                x = pre_exponential_to_si(value, total)
        except QuantityProblem as exc:
            raise _problem(str(exc)) from None
        if not x > 0:
            raise _problem(f"must be positive, got {x:g}")
        return x

    @field_validator("stoichiometry")
    @classmethod
    def _nonempty(cls, value: dict[str, float]) -> dict[str, float]:
        if not value:
            raise ValueError('expected at least one species with a coefficient, e.g. {"A": -1, "P": 1}')
        return value


class FeedDoc(_Model):
    flow: Q("flow", sign="positive")
    temperature: Q("temperature")
    concentrations: dict[str, Q("concentration", sign="nonnegative")]


class JacketDoc(_Model):
    ua: Q("conductance", sign="nonnegative")
    coolant_temperature: Q("temperature")


class HeatLossDoc(_Model):
    ua: Q("conductance", sign="nonnegative")
    ambient_temperature: Q("temperature")


class LimitsDoc(_Model):
    max_temperature: Q("temperature")
    alarm_temperature: Q("temperature") | None = None
    level_high: Q("length", sign="positive") | None = None
    level_low: Q("length", sign="nonnegative") | None = None
    technical_limit_temperature: Q("temperature") | None = None


class CheckPolicyDoc(_Model):
    """Thresholds of the setpoint check; defaults are the project defaults of ``core.scenario.CheckPolicy``."""

    min_feed_temperature_margin: Q("temperature_difference", sign="nonnegative") = _POLICY.min_feed_temperature_margin
    min_residence_time_margin: Q("fraction", sign="nonnegative") = _POLICY.min_residence_time_margin
    min_extinction_margin: Q("temperature_difference", sign="nonnegative") = _POLICY.min_extinction_margin
    min_temperature_margin: Q("temperature_difference") = _POLICY.min_temperature_margin
    min_mtsr_margin: Q("temperature_difference") = _POLICY.min_mtsr_margin
    sensitivity: float = Field(_POLICY.sensitivity, gt=0.0)
    valve_min: Q("fraction", sign="nonnegative", upper=1.0) = _POLICY.valve_min
    valve_max: Q("fraction", sign="nonnegative", upper=1.0) = _POLICY.valve_max
    upset_duration: Q("time", sign="positive") = _POLICY.upset_duration
    # None (left out of the canonical JSON, so adding the field kept every scenario id) means the default
    min_time_to_act: Q("time", sign="positive") | None = None
    # null when not given, so the canonical form (and the id) of a scenario that does not set it is unchanged
    max_unsafe_probability: Q("fraction", sign="nonnegative", upper=1.0) | None = None


class MapDoc(_Model):
    residence_time: tuple[Q("time", sign="positive"), Q("time", sign="positive")]
    feed_temperature: tuple[Q("temperature"), Q("temperature")]
    points: tuple[Annotated[int, Field(ge=2, le=2000)], Annotated[int, Field(ge=2, le=2000)]] = (
        MapSpec.__dataclass_fields__["points"].default  # the core's default grid
    )


def _none_to_default(value: object) -> object:
    return {} if value is None else value


class ScenarioDoc(_Model):
    """A validated scenario document; every quantity is an SI float."""

    format: Literal["exomap-scenario/1"] = FORMAT
    title: Title = ""
    description: Description = ""
    species: list[Annotated[Text(40), Field(min_length=1, pattern=r"^[^\s.\[\]]+$")]] = Field(min_length=1)
    liquid: LiquidDoc
    vessel: VesselDoc
    outlet_valve: OutletValveDoc
    reactions: list[ReactionDoc] = Field(min_length=1)
    feed: FeedDoc
    jacket: JacketDoc | None = None
    heat_loss: HeatLossDoc | None = None
    agitator_power: Q("power", sign="nonnegative") = 0.0
    limits: LimitsDoc
    check_policy: Annotated[CheckPolicyDoc, BeforeValidator(_none_to_default)] = Field(default_factory=CheckPolicyDoc)
    map: MapDoc | None = None
    uncertainty: UncertaintyDoc | None = None

    @model_validator(mode="after")
    def _uncertainty_si(self) -> ScenarioDoc:
        from exomap.schema.uncertainty import to_si_in_place

        to_si_in_place(self)  # the canonical form holds SI floats (like a cv stored as kv)
        return self

    def to_core(self) -> Any:
        """The plain SI ``exomap.core.scenario.Scenario``, checked by ``exomap.core.scenario.validate``.

        Raises
        ------
        ScenarioError
            When the core refuses a value (its ``ModelInputError`` keeps the field name).
        """
        from exomap.schema.convert import to_core

        return to_core(self)
