"""Scenario documents for the web tests. Invented for the tests (not plant data)."""

from __future__ import annotations

import copy
from typing import Any

#: An invented adiabatic first-order A -> B tank with units on every quantity.
ADIABATIC: dict[str, Any] = {
    "format": "exomap-scenario/1",
    "title": "Test tank A -> B (invented)",
    "description": "Invented for the web tests; not plant data.",
    "species": ["A", "B"],
    "liquid": {"density": "1000 kg/m^3", "heat_capacity": "4.0 kJ/(kg K)"},
    "vessel": {"diameter": "1.2 m", "height": "2 m", "level_setpoint": "1.2 m"},
    "outlet_valve": {"kv": "40 m^3/h", "characteristic": "linear", "opening": 0.5},
    "reactions": [
        {
            "label": "A -> B",
            "stoichiometry": {"A": -1, "B": 1},
            "orders": {"A": 1},
            "pre_exponential": "4.0e10 1/s",
            "activation_energy": "83 kJ/mol",
            "reaction_enthalpy": "-120 kJ/mol",
        }
    ],
    "feed": {"flow": "2 m^3/h", "temperature": "25 degC", "concentrations": {"A": "2 mol/L", "B": 0}},
    "limits": {"max_temperature": "140 degC", "alarm_temperature": "120 degC"},
    "map": {"residence_time": ["1 min", "10 h"], "feed_temperature": ["0 degC", "100 degC"], "points": [40, 40]},
}


def variant(**changes: Any) -> dict[str, Any]:
    """A deep copy of ADIABATIC with top-level keys replaced."""
    doc = copy.deepcopy(ADIABATIC)
    doc.update(changes)
    return doc
