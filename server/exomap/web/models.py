"""Request bodies of the API (pydantic), each with an example for the OpenAPI document.

Every computation names its scenario either inline (``"scenario": {...}``, a scenario document of DESIGN.md
§3) or by the id of a stored scenario (``"scenario_id"``; a demo can also be named by its file name, e.g.
``"jacketed-first-order"``). A quantity is a number in SI base units or a string with units: ``"40 min"``,
``"35 degC"``.
Unknown fields are refused, so a misspelt option is an error rather than silently ignored.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    StrictFloat,
    StrictInt,
    StrictStr,
    WithJsonSchema,
    model_validator,
)

# Strict members: JSON true/false is not a quantity (lax pydantic would read it as 1.0/0.0).
Quantity = Annotated[
    StrictFloat | StrictStr,
    Field(description="A number in SI base units, or a string with units such as '40 min' or '35 degC'."),
]
Range = Annotated[list[Quantity], Field(min_length=2, max_length=2, description="[lo, hi]")]
GridPoints = Annotated[
    list[Annotated[StrictInt, Field(ge=2)]],
    Field(min_length=2, max_length=2, description="[n_residence_time, n_feed_temperature], each at least 2."),
]

#: The OpenAPI schema of an inline scenario: the scenario document's own (``ScenarioDoc``, a component of the
#: document as the answer of ``GET /scenarios/{id}``). The body is still checked by ``exomap.schema``, whose
#: messages name each field (``scenario.vessel.diameter``); only the contract is typed by this.
SCENARIO_SCHEMA = {"$ref": "#/components/schemas/ScenarioDoc"}
InlineScenario = Annotated[
    dict[str, Any] | None,
    WithJsonSchema({"anyOf": [SCENARIO_SCHEMA, {"type": "null"}]}),
]


def _event_schemas() -> list[dict[str, Any]]:
    """The forms of a simulation event (``exomap.core.events``), for the OpenAPI document."""
    from exomap.core.events import ACTIONS, QUANTITIES

    quantity = {"anyOf": [{"type": "number"}, {"type": "string"}], "description": Quantity.__metadata__[0].description}
    named = {
        "type": "string",
        "description": f"One of {', '.join(QUANTITIES)} (feed_concentration.<species> for one species).",
    }
    at = {**quantity, "description": "Time from the start, e.g. '10 min' or seconds."}

    def form(title: str, properties: dict[str, Any]) -> dict[str, Any]:
        return {
            "type": "object",
            "title": title,
            "properties": {"at": at, **properties},
            "required": ["at", *properties],
            "additionalProperties": False,
        }

    return [
        form("SetEventInput", {"set": named, "to": {**quantity, "description": "The new value."}}),
        form("AddEventInput", {"add": named, "value": {**quantity, "description": "The change, e.g. '10 K'."}}),
        form("ScaleEventInput", {"scale": named, "by": {**quantity, "description": "Factor [-], e.g. 1.5."}}),
        form(
            "RampEventInput",
            {
                "ramp": named,
                "to": {**quantity, "description": "The value at the end of the ramp."},
                "over": {**quantity, "description": "Ramp duration, e.g. '20 min' or seconds."},
            },
        ),
        form("DoEventInput", {"do": {"type": "string", "enum": list(ACTIONS), "description": "A plant action."}}),
        {"type": "string", "description": "One line of text, e.g. 'at 10 min set feed_temperature to 45 degC'."},
    ]


EXAMPLE_ID = "jacketed-first-order"
"""Demo name used in the examples (any stored scenario id works the same way)."""


class ScenarioRef(BaseModel):
    """Which scenario: inline, or by id."""

    model_config = ConfigDict(extra="forbid")

    scenario: InlineScenario = Field(
        default=None, description="A whole scenario document (DESIGN.md §3); give this or scenario_id."
    )
    scenario_id: str | None = Field(
        default=None,
        min_length=1,
        max_length=200,
        description="Id of a stored scenario (16 hex digits) or the name of a demo; give this or scenario.",
    )

    @model_validator(mode="after")
    def _one_scenario(self) -> ScenarioRef:
        if (self.scenario is None) == (self.scenario_id is None):
            raise ValueError("give exactly one of 'scenario' (a document) or 'scenario_id'")
        return self


class OperatingPoint(ScenarioRef):
    residence_time: Quantity | None = Field(
        default=None, description="Residence time V_set/q, e.g. '40 min' or seconds; default: the scenario's feed."
    )
    feed_temperature: Quantity | None = Field(
        default=None, description="Feed temperature, e.g. '35 degC' or kelvin; default: the scenario's feed."
    )


class SteadyRequest(OperatingPoint):
    """Every steady state at one operating point, with its stability."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [{"scenario_id": EXAMPLE_ID, "residence_time": "40 min", "feed_temperature": "35 degC"}]
        },
    )

    feed_concentrations: dict[str, Quantity] | None = Field(
        default=None, description="Feed concentration of some species, e.g. {'A': '2 mol/L'}; others as scenario."
    )
    coolant_temperature: Quantity | None = Field(
        default=None, description="Coolant temperature of the jacket, e.g. '20 degC'; default: the scenario's."
    )


class BranchRequest(OperatingPoint):
    """A one-parameter branch of steady states, with its turning (ignition/extinction) and Hopf points."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [{"scenario_id": EXAMPLE_ID, "along": "feed_temperature", "residence_time": "40 min"}]
        },
    )

    along: Literal["residence_time", "feed_temperature"] = Field(
        default="feed_temperature", description="The parameter that varies; the other one stays fixed."
    )
    range: Range | None = Field(
        default=None, description="[lo, hi] of the varying parameter, in its own unit; default: the map window."
    )
    feed_concentrations: dict[str, Quantity] | None = Field(
        default=None, description="Feed concentration of some species; others as the scenario."
    )
    coolant_temperature: Quantity | None = Field(default=None, description="Coolant temperature of the jacket.")


class MapRequest(ScenarioRef):
    """The operating map: regions over residence time x feed temperature, with exact boundaries."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "scenario_id": EXAMPLE_ID,
                    "residence_time": ["1 min", "10 h"],
                    "feed_temperature": ["0 degC", "120 degC"],
                    "points": [60, 60],
                    "spacing": "log",
                }
            ]
        },
    )

    residence_time: Range | None = Field(default=None, description="[lo, hi]; default: the scenario's map window.")
    feed_temperature: Range | None = Field(default=None, description="[lo, hi]; default: the scenario's window.")
    points: GridPoints | None = Field(default=None, description="Grid size; default: the scenario's (or 200 x 200).")
    spacing: Literal["log", "linear"] = Field(default="log", description="Spacing of the residence-time axis.")
    coolant_temperature: Quantity | None = Field(
        default=None, description="Coolant temperature of the jacket, e.g. '20 degC'; default: the scenario's."
    )
    samples: Annotated[StrictInt, Field(ge=8, le=16384)] | None = Field(
        default=None,
        description="Ask for the probability map under the scenario's uncertainty block (DESIGN.md §11) with this "
        "many samples, a power of two (e.g. 256); absent: the deterministic map.",
    )
    seed: Annotated[StrictInt, Field(ge=0, le=2**32 - 1)] | None = Field(
        default=None, description="Seed of the samples (with samples); default: the uncertainty block's (0)."
    )


class CheckRequest(OperatingPoint):
    """Setpoint check: states, region, margins, safety figures, upset battery, verdict and cautions."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [{"scenario_id": EXAMPLE_ID, "residence_time": "40 min", "feed_temperature": "35 degC"}]
        },
    )

    branch: Literal["low", "high"] | None = Field(
        default=None, description="Which stable state the tank is on where there are several; default: low."
    )
    coolant_temperature: Quantity | None = Field(
        default=None, description="Coolant temperature of the jacket, e.g. '20 degC'; default: the scenario's."
    )
    samples: Annotated[StrictInt, Field(ge=8, le=16384)] | None = Field(
        default=None,
        description="Also check under the scenario's uncertainty block (DESIGN.md §11) with this many samples, a "
        "power of two (e.g. 256): adds the 'uncertainty' block; absent: the nominal check only.",
    )
    seed: Annotated[StrictInt, Field(ge=0, le=2**32 - 1)] | None = Field(
        default=None, description="Seed of the samples (with samples); default: the uncertainty block's (0)."
    )


class SimulateRequest(OperatingPoint):
    """Dynamic response from a steady state, with events."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "scenario_id": EXAMPLE_ID,
                    "residence_time": "40 min",
                    "feed_temperature": "35 degC",
                    "start": "low",
                    "events": [],
                    "duration": "2 h",
                }
            ]
        },
    )

    start: Literal["low", "high"] = Field(default="low", description="Steady state the simulation starts from.")
    # checked by exomap.core.events.parse_events (messages name events[i].<key>); typed here for the contract
    events: Annotated[list[Any], WithJsonSchema({"type": "array", "items": {"anyOf": _event_schemas()}})] = Field(
        default_factory=list,
        description="Events applied during the run, each an object, e.g. {'at': '10 min', 'do': 'feed_stop'}, or a "
        "line of text as the pages teach, e.g. 'at 10 min set feed_temperature to 45 degC' (exomap.core.events).",
    )
    duration: Quantity | None = Field(
        default=None, description="Simulated time, e.g. '2 h' or seconds; default: the check policy's upset duration."
    )
    coolant_temperature: Quantity | None = Field(
        default=None, description="Coolant temperature of the jacket, e.g. '20 degC'; default: the scenario's."
    )
