"""Schema layer: the JSON scenario format (DESIGN.md §3) <-> the core's SI ``Scenario``.

pydantic v2 models with pint units. Public API::

    parse_scenario(doc) -> ScenarioDoc       # raises ScenarioError (.errors: [{"field", "message"}])
    ScenarioDoc.to_core() -> core Scenario
    canonical_json(doc) -> str                # SI floats, sorted keys, compact; exact round trip
    scenario_id(doc) -> str                   # 16 hex chars of sha256(canonical_json)
    parse_quantity(value, dimension, field)   # "40 min" -> 2400.0

Importing this package builds no unit registry (that happens on first use).
"""

from exomap.schema.canonical import canonical_dict, canonical_json, scenario_id
from exomap.schema.document import FORMAT, ScenarioDoc
from exomap.schema.errors import ScenarioError
from exomap.schema.parse import parse_scenario
from exomap.schema.quantity import DIMENSIONS, parse_quantity

__all__ = [
    "DIMENSIONS",
    "FORMAT",
    "ScenarioDoc",
    "ScenarioError",
    "canonical_dict",
    "canonical_json",
    "parse_quantity",
    "parse_scenario",
    "scenario_id",
]
