"""A small valid scenario document the schema tests change one field at a time."""

from __future__ import annotations

import copy

import pytest

#: Invented values (not plant data): adiabatic A -> P in a 2 m^3 tank.
MINIMAL = {
    "format": "exomap-scenario/1",
    "title": "test tank",
    "description": "Invented example for the tests, not plant data.",
    "species": ["A", "P"],
    "liquid": {"density": "950 kg/m^3", "heat_capacity": "2.1 kJ/(kg K)"},
    "vessel": {"diameter": "1.2 m", "height": "2 m", "level_setpoint": "1500 mm"},
    "outlet_valve": {"kv": 10, "characteristic": "linear", "drop_below_vessel": "1 m", "opening": "40 %"},
    "reactions": [
        {
            "label": "A -> P",
            "stoichiometry": {"A": -1, "P": 1},
            "orders": {"A": 1},
            "pre_exponential": "1e10 1/s",
            "activation_energy": "80 kJ/mol",
            "reaction_enthalpy": "-60 kJ/mol",
        }
    ],
    "feed": {"flow": "6 m^3/h", "temperature": "30 degC", "concentrations": {"A": "2.5 mol/L"}},
    "jacket": None,
    "limits": {"max_temperature": "90 degC", "alarm_temperature": "80 degC"},
}


@pytest.fixture
def doc() -> dict:
    """A fresh deep copy of MINIMAL."""
    return copy.deepcopy(MINIMAL)


@pytest.fixture(scope="session")
def make_doc():
    """``make_doc()`` -> a fresh deep copy of MINIMAL (session scoped, so hypothesis tests can use it)."""
    return lambda: copy.deepcopy(MINIMAL)
