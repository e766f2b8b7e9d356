"""Scenario documents: conversion to the core, one clear error per bad field, cv/kv, canonical JSON and ids."""

from __future__ import annotations

import json
import math
import re

import fluids
import pytest
from exomap.core.scenario import CheckPolicy
from exomap.schema import ScenarioError, canonical_json, parse_scenario, scenario_id
from hypothesis import given, settings
from hypothesis import strategies as st


def errors_of(doc: dict) -> list[dict[str, str]]:
    with pytest.raises(ScenarioError) as info:
        parse_scenario(doc)
    return info.value.errors


def test_minimal_document_to_core(doc):
    sc = parse_scenario(doc).to_core()
    assert sc.species == ("A", "P")
    # SI Brochure Table 8 (1 L = 1e-3 m^3, 1 h = 3600 s) and §2.3.1 (degC)
    assert sc.q_in == pytest.approx(6 / 3600, rel=1e-14)
    assert sc.T_in == pytest.approx(303.15, rel=1e-15)
    assert sc.c_in == (2500.0, 0.0)
    assert sc.vessel.h_set == 1.5
    assert sc.valve.opening == 0.4
    assert sc.reactions[0].nu == (-1.0, 1.0)
    assert sc.reactions[0].orders == (1.0, 0.0)
    assert sc.reactions[0].k0 == 1e10
    assert sc.reactions[0].dH == -60e3
    assert sc.limits.T_max == pytest.approx(363.15, rel=1e-15)
    assert sc.UA_jacket == 0.0
    # defaults: atmospheric headspace and outlet (ISO 2533 standard atmosphere, 101325 Pa) and the
    # project's check thresholds (exomap.core.scenario.CheckPolicy)
    assert sc.vessel.p_head == 101325.0
    assert sc.policy == CheckPolicy()


def test_second_order_pre_exponential_in_litres(doc):
    doc["species"] = ["A", "B", "P"]
    doc["reactions"][0].update(
        stoichiometry={"A": -1, "B": -1, "P": 1}, orders={"A": 1, "B": 1}, pre_exponential="1.2e7 L/(mol s)"
    )
    # 1 L/(mol s) = 1e-3 m^3/(mol s) (SI Brochure Table 8)
    assert parse_scenario(doc).to_core().reactions[0].k0 == pytest.approx(1.2e4, rel=1e-14)


def test_fractional_order_pre_exponential(doc):
    doc["reactions"][0].update(orders={"A": 1.5}, pre_exponential="2e5 m^1.5/(mol^0.5 s)")
    assert parse_scenario(doc).to_core().reactions[0].k0 == pytest.approx(2e5, rel=1e-14)


def test_cv_is_converted_like_fluids(doc):
    doc["outlet_valve"].pop("kv")
    doc["outlet_valve"]["cv"] = 11.56
    kv = parse_scenario(doc).to_core().valve.Kv
    # fluids.Cv_to_Kv (C. Bell et al., fluids) uses the same gallon and psi definitions
    assert kv == pytest.approx(fluids.Cv_to_Kv(11.56), rel=1e-12)
    # IEC 60534-1 gives Kv = 0.865 Cv (rounded; from memory)
    assert kv == pytest.approx(0.865 * 11.56, rel=1e-3)


def test_level_control_and_characteristic(doc):
    doc["outlet_valve"].pop("opening")
    doc["outlet_valve"].update(
        characteristic="equal_percentage", rangeability=30, level_control={"gain": "1.5 1/m", "reset_time": "10 min"}
    )
    v = parse_scenario(doc).to_core().valve
    assert (v.characteristic, v.rangeability, v.gain, v.reset_time, v.opening) == (
        "equal_percentage",
        30.0,
        1.5,
        600.0,
        None,
    )


def test_extras_agitator_power_and_decomposition(doc):
    doc["agitator_power"] = "1.5 kW"
    doc["species"] = ["A", "P", "D"]
    doc["reactions"].append(
        {
            "label": "P -> D",
            "stoichiometry": {"P": -1, "D": 1},
            "orders": {"P": 1},
            "pre_exponential": "1e13 1/s",
            "activation_energy": "140 kJ/mol",
            "reaction_enthalpy": "-300 kJ/mol",
            "decomposition": True,
        }
    )
    sc = parse_scenario(doc).to_core()
    assert sc.P_agitator == 1500.0
    assert [r.decomposition for r in sc.reactions] == [False, True]


def test_jacket_heat_loss_policy_map(doc):
    doc["jacket"] = {"ua": "2 kW/K", "coolant_temperature": "15 degC"}
    doc["heat_loss"] = {"ua": "20 W/K", "ambient_temperature": "20 degC"}
    doc["check_policy"] = {"min_feed_temperature_margin": "18 degF", "valve_max": "90 %", "upset_duration": "2 h"}
    doc["map"] = {"residence_time": ["5 min", "2 h"], "feed_temperature": ["10 degC", "60 degC"], "points": [50, 40]}
    sc = parse_scenario(doc).to_core()
    assert (sc.UA_jacket, sc.UA_loss) == (2000.0, 20.0)
    assert sc.T_c == pytest.approx(288.15, rel=1e-15)
    # 18 degF is an interval of 10 K (NIST SP 811 B.9)
    assert sc.policy.min_feed_temperature_margin == pytest.approx(10.0, rel=1e-14)
    assert (sc.policy.valve_max, sc.policy.upset_duration) == (0.9, 7200.0)
    assert sc.policy.valve_min == CheckPolicy().valve_min
    assert sc.map.tau_range == (300.0, 7200.0)
    assert sc.map.points == (50, 40)


# -- one clear error per bad field ------------------------------------------------------------------------
def _set(doc: dict, path: str, value) -> dict:
    keys = re.findall(r"[^.\[\]]+", path)
    target = doc
    for k in keys[:-1]:
        target = target[int(k)] if k.isdigit() else target[k]
    last = keys[-1]
    if value is _DELETE:
        del target[int(last) if last.isdigit() else last]
    else:
        target[int(last) if last.isdigit() else last] = value
    return doc


_DELETE = object()

BAD = [
    # (path to change, new value, field reported, message pattern)
    ("vessel.diameter", "1.2 m^3", "vessel.diameter", r"is not a length; expected a length, e\.g\. '2 m'"),
    ("vessel.diameter", "-1.2 m", "vessel.diameter", r"must be positive, got -1\.2 m; expected a length"),
    ("vessel.level_setpoint", "3 m", "vessel.level_setpoint", r"above the vessel height"),
    ("liquid.density", float("nan"), "liquid.density", r"not a finite number; expected a density"),
    ("liquid.heat_capacity", "2.1 kJ/kg", "liquid.heat_capacity", r"expected a specific heat capacity"),
    ("feed.flow", "6 m^3", "feed.flow", r"expected a volumetric flow, e\.g\. '6 m\^3/h'"),
    ("feed.temperature", "30", "feed.temperature", r"has no unit; expected a temperature, e\.g\. '35 degC'"),
    ("feed.concentrations.X", "1 mol/L", "feed.concentrations.X", r"unknown species 'X'; declared species: A, P"),
    ("feed.concentrations.A", "-1 mol/L", "feed.concentrations.A", r"must not be negative"),
    ("reactions[0].stoichiometry.Q", -1, "reactions[0].stoichiometry.Q", r"unknown species 'Q'"),
    ("reactions[0].orders.Z", 1, "reactions[0].orders.Z", r"unknown species 'Z'"),
    ("reactions[0].orders.A", -1, "reactions[0].orders.A", r"must be at least 0"),
    (
        "reactions[0].pre_exponential",
        "1e10 L/(mol s)",
        "reactions[0].pre_exponential",
        r"wrong dimension; expected \(mol/m\^3\)\^\(1-n\)/s = 1/s for this reaction's total order n = 1",
    ),
    ("reactions[0].activation_energy", "80 kJ", "reactions[0].activation_energy", r"expected an energy per mole"),
    ("reactions[0].reaction_enthalpy", float("inf"), "reactions[0].reaction_enthalpy", r"not a finite number"),
    ("reactions", [], "reactions", r"at least one reaction is needed"),
    ("reactions", _DELETE, "reactions", r"required field is missing; expected a list"),
    ("species", [], "species", r"at least one species is needed"),
    ("outlet_valve.kv", _DELETE, "outlet_valve", r"give exactly one of kv \(m\^3/h at 1 bar\) or cv"),
    ("outlet_valve.opening", 1.4, "outlet_valve.opening", r"must be at most 1"),
    (
        "outlet_valve.characteristic",
        "parabolic",
        "outlet_valve.characteristic",
        r"expected one of linear, equal_percentage, quick_opening",
    ),
    ("vessel.diamter", "1 m", "vessel.diamter", r"unknown field; expected one of: diameter, height"),
    ("limits.max_temperature", _DELETE, "limits.max_temperature", r"required field is missing; expected a temp"),
    ("limits.alarm_temperature", "95 degC", "limits.alarm_temperature", r"above the maximum temperature"),
    (
        "map",
        {"residence_time": ["2 h", "5 min"], "feed_temperature": ["0 degC", "50 degC"]},
        "map.residence_time",
        r"lo < hi",
    ),
    ("format", "other/2", "format", r"expected one of exomap-scenario/1"),
    ("species", ["A", "A.b"], "species[1]", r"one word without dots"),
    ("check_policy", {"sensitivity": 0}, "check_policy.sensitivity", r"must be above 0"),
]


@pytest.mark.parametrize(("path", "value", "field", "pattern"), BAD, ids=[f"{b[0]}={b[1]!r}"[:60] for b in BAD])
def test_bad_field_gives_one_clear_error(doc, path, value, field, pattern):
    _set(doc, path, value)
    with pytest.raises(ScenarioError, match=re.escape(field) + ": ") as info:
        parse_scenario(doc)
    errors = info.value.errors
    assert [e["field"] for e in errors] == [field]
    assert re.search(pattern, errors[0]["message"]), errors[0]["message"]
    # never a pydantic dump
    assert "pydantic" not in errors[0]["message"] and "input_value" not in errors[0]["message"]


def test_several_bad_fields_each_reported_once(doc):
    doc["vessel"]["diameter"] = "1 s"
    doc["vessel"]["height"] = "tall"
    doc["feed"]["flow"] = None
    fields = [e["field"] for e in errors_of(doc)]
    assert fields == ["vessel.diameter", "vessel.height", "feed.flow"]


def test_not_an_object():
    with pytest.raises(ScenarioError, match="scenario: expected a JSON object, got list"):
        parse_scenario([1, 2])


def test_reaction_without_reactant_is_refused_by_the_core(doc):
    doc["reactions"][0]["stoichiometry"] = {"A": 1, "P": 1}
    with pytest.raises(ScenarioError, match=r"reactions\[0\]\.stoichiometry: .*reactant"):
        parse_scenario(doc)


# -- canonical JSON and ids -------------------------------------------------------------------------------
def test_canonical_json_is_si_sorted_compact(doc):
    text = canonical_json(doc)
    data = json.loads(text)
    assert text == json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert list(data) == sorted(data)
    assert data["feed"]["temperature"] == pytest.approx(303.15, rel=1e-15)
    assert data["vessel"]["level_setpoint"] == 1.5
    assert "jacket" not in data  # null fields are left out


def test_same_meaning_same_id(doc):
    other = json.loads(json.dumps(doc))
    other["feed"]["temperature"] = 303.15
    other["vessel"]["level_setpoint"] = "1.5 m"
    other["vessel"]["headspace_pressure"] = "1.01325 bar"
    other["check_policy"] = {}
    assert canonical_json(other) == canonical_json(doc)
    assert scenario_id(other) == scenario_id(doc)
    assert re.fullmatch(r"[0-9a-f]{16}", scenario_id(doc))
    other["feed"]["temperature"] = "31 degC"
    assert scenario_id(other) != scenario_id(doc)


_UNITS = {
    # dimension: [(unit, factor to SI)] -- SI Brochure Tables 7 and 8
    "length": [("m", 1.0), ("mm", 1e-3), ("cm", 1e-2)],
    "flow": [("m^3/h", 1 / 3600), ("L/min", 1e-3 / 60), ("m^3/s", 1.0)],
    "concentration": [("mol/L", 1e3), ("mol/m^3", 1.0), ("kmol/m^3", 1e3)],
    "energy": [("kJ/mol", 1e3), ("J/mol", 1.0)],
}


def _q(dimension: str, lo: float, hi: float):
    units = st.sampled_from(_UNITS[dimension])
    return st.tuples(st.floats(min_value=lo, max_value=hi, allow_nan=False), units).map(
        lambda p: (
            p[0] if p[1][1] == 1.0 and p[1][0].startswith("m") and dimension == "length" else f"{p[0]!r} {p[1][0]}"
        )
    )


@settings(max_examples=60, deadline=None)
@given(
    diameter=_q("length", 0.3, 5.0),
    flow=_q("flow", 1e-4, 1e-2),
    conc=_q("concentration", 0.0, 5.0),
    Ea=_q("energy", 40.0, 200.0),
    T_in=st.floats(min_value=-20.0, max_value=150.0, allow_nan=False),
    k0=st.floats(min_value=1e-3, max_value=1e20, allow_nan=False),
)
def test_canonical_round_trip_is_exact(make_doc, diameter, flow, conc, Ea, T_in, k0):
    doc = make_doc()
    doc["vessel"]["diameter"] = diameter
    doc["vessel"]["height"] = "20 m"
    doc["feed"]["flow"] = flow
    doc["feed"]["concentrations"]["A"] = conc
    doc["feed"]["temperature"] = f"{T_in!r} degC"
    doc["reactions"][0]["activation_energy"] = Ea
    doc["reactions"][0]["pre_exponential"] = k0
    first = canonical_json(doc)
    again = canonical_json(json.loads(first))
    assert again == first
    assert scenario_id(json.loads(first)) == scenario_id(doc)
    # the canonical numbers are the SI values of the inputs
    data = json.loads(first)
    assert math.isfinite(data["feed"]["flow"]) and data["feed"]["flow"] > 0


@settings(max_examples=40, deadline=None)
@given(
    jacket=st.one_of(st.none(), st.tuples(st.floats(0.0, 1e5), st.floats(-30.0, 200.0))),
    policy=st.dictionaries(
        st.sampled_from(["min_feed_temperature_margin", "min_temperature_margin", "sensitivity", "upset_duration"]),
        st.floats(0.1, 100.0),
    ),
    cv=st.one_of(st.none(), st.floats(0.1, 500.0)),
    points=st.tuples(st.integers(2, 2000), st.integers(2, 2000)),
    control=st.booleans(),
)
def test_canonical_round_trip_with_optional_blocks(make_doc, jacket, policy, cv, points, control):
    doc = make_doc()
    if jacket is not None:
        doc["jacket"] = {"ua": f"{jacket[0]!r} W/K", "coolant_temperature": f"{jacket[1]!r} degC"}
    doc["check_policy"] = {k: (f"{v!r} min" if k == "upset_duration" else v) for k, v in policy.items()}
    if cv is not None:
        doc["outlet_valve"].pop("kv")
        doc["outlet_valve"]["cv"] = cv
    if control:
        doc["outlet_valve"].pop("opening")
        doc["outlet_valve"]["level_control"] = {"gain": "2 1/m", "reset_time": "5 min"}
    doc["map"] = {"residence_time": ["5 min", "3 h"], "feed_temperature": ["0 degC", "80 degC"], "points": list(points)}
    first = canonical_json(doc)
    assert canonical_json(json.loads(first)) == first
    sc = parse_scenario(json.loads(first)).to_core()
    assert sc.map.points == points
    assert sc.valve.controlled == control
    if cv is not None:
        # the canonical form stores the converted Kv (exomap.core.valve.cv_to_kv; fluids.Cv_to_Kv agrees)
        assert sc.valve.Kv == pytest.approx(fluids.Cv_to_Kv(cv), rel=1e-13)
