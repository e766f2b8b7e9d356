"""Compare (DESIGN.md §13): two maps on one grid, the cells whose region changed, and the fields that differ.

Check values: the multiplicity of the dimensionless first-order CSTR (van Heerden 1953; Uppal, Ray & Poore
1974), computed independently by the ``ref`` fixture (dense scan of the steady-state equation, no exomap
code); the two maps computed separately by ``operating_map``; the plant-unit conversions of the field diff
are SI definitions (0 degC = 273.15 K, 1 bar = 1e5 Pa, 1 h = 3600 s).
"""

from __future__ import annotations

import json
import math
from importlib import resources

import numpy as np
import pytest
from exomap.core.compare import compare, compare_maps, region_changes, shared_window
from exomap.core.opmap import operating_map
from exomap.core.regions import CODE
from exomap.core.scenario import MapSpec
from exomap.schema.diff import compare_header, scenario_diff

WINDOW = MapSpec(tau_range=(20.0, 20000.0), T_in_range=(330.0, 370.0), points=(40, 30))


def _demo(name: str) -> dict:
    return json.loads((resources.files("exomap.demos") / f"{name}.json").read_text(encoding="utf-8"))


def test_self_compare_has_no_changes(cstr):
    sc = cstr(20.0, 8.0, map_spec=WINDOW).sc
    mc = compare_maps(sc, sc)
    assert mc.changed_count == 0
    assert mc.transitions == ()
    assert not mc.direction.any()
    doc = _demo("jacketed-first-order")
    head = compare_header(doc, json.loads(json.dumps(doc)))
    assert head["same_scenario"] is True and head["fields"] == []


def test_compare_equals_the_difference_of_two_separate_maps(cstr):
    a = cstr(20.0, 3.0, map_spec=WINDOW).sc
    b = cstr(20.0, 8.0, map_spec=WINDOW).sc
    mc = compare_maps(a, b)
    tau, tin, pts = shared_window(a, b)
    ma = operating_map(a, tau_range=tau, T_in_range=tin, points=pts)
    mb = operating_map(b, tau_range=tau, T_in_range=tin, points=pts)
    np.testing.assert_array_equal(mc.a.region, ma.region)
    np.testing.assert_array_equal(mc.b.region, mb.region)
    np.testing.assert_array_equal(mc.changed, ma.region != mb.region)
    np.testing.assert_array_equal(mc.direction, np.sign(mb.region - ma.region))
    assert sum(n for _, _, n in mc.transitions) == mc.changed_count > 0
    for f, t, n in mc.transitions:
        assert n == int(((ma.region == CODE[f]) & (mb.region == CODE[t])).sum())
    d = mc.to_dict()
    assert d["worse_count"] + d["better_count"] == d["changed_count"]
    assert d["worse_count"] == int((mb.region > ma.region).sum())


def test_changed_cells_agree_with_the_dimensionless_cstr(cstr, ref):
    # van Heerden / Uppal-Ray-Poore: below the cusp (B < 4 gamma/(gamma - 4)) the adiabatic first-order CSTR
    # has one steady state everywhere; above it, three in a band of Da. A: B = 3, B: B = 8 at T_in = 350 K.
    ca, cb = cstr(20.0, 3.0, map_spec=WINDOW), cstr(20.0, 8.0, map_spec=WINDOW)
    mc = compare_maps(ca.sc, cb.sc)
    assert not (mc.a.region == CODE["multiple"]).any()
    became_multiple = (mc.b.region == CODE["multiple"]) & mc.changed
    assert became_multiple.sum() > 20
    assert all(f != "multiple" for f, _, _ in mc.transitions)
    rng = np.random.default_rng(3)
    rows, cols = np.nonzero(became_multiple)
    checked = 0
    for k in rng.permutation(rows.size)[:12]:
        T_in, tau = float(mc.a.T_in[rows[k]]), float(mc.a.tau[cols[k]])
        # the cell's own gamma, B and Da (gamma and B are defined at the feed temperature)
        gamma = cb.E / T_in
        B = gamma * cb.dT_ad / T_in
        Da = tau * float(cb.k(T_in))
        if ref.near_fold(Da, B, gamma):
            continue
        assert len(ref.roots_x(Da, B, gamma, n=40_001)) == 3
        checked += 1
    assert checked >= 6


def test_region_changes_counts_and_shapes():
    changed, direction, transitions = region_changes(np.array([[0, 1], [4, 2]]), np.array([[0, 3], [2, 2]]))
    assert changed.tolist() == [[False, True], [True, False]]
    assert direction.tolist() == [[0, 1], [-1, 0]]
    assert transitions == (("runaway", "multiple", 1), ("sensitive", "unstable", 1))
    with pytest.raises(ValueError, match="shape"):
        region_changes(np.zeros((2, 2)), np.zeros((2, 3)))


# Edits in every section of the scenario: (path in the document, new value, the field the diff names,
# the B value in plant units).
EDITS = [
    (("liquid", "density"), "950 kg/m^3", "liquid.density", "950 kg/m³"),
    (("liquid", "heat_capacity"), "2.2 kJ/(kg K)", "liquid.heat_capacity", "2.2 kJ/(kg K)"),
    (("vessel", "level_setpoint"), "1.2 m", "vessel.level_setpoint", "1.2 m"),
    (("vessel", "headspace_pressure"), "1.5 bar", "vessel.headspace_pressure", "1.5 bar"),
    (("outlet_valve", "kv"), 12, "outlet_valve.kv", "Kv 12 m³/h"),
    (("outlet_valve", "level_control", "reset_time"), "15 min", "outlet_valve.level_control.reset_time", "15 min"),
    (("reactions", 0, "activation_energy"), "88 kJ/mol", "reactions[0].activation_energy", "88 kJ/mol"),
    (("reactions", 0, "pre_exponential"), "5e10 1/s", "reactions[0].pre_exponential", "5e+10 1/s"),
    (("feed", "flow"), "3.0 m^3/h", "feed.flow", "3 m³/h"),
    (("feed", "temperature"), "55 degC", "feed.temperature", "55.00 °C"),
    (("feed", "concentrations", "A"), "2.0 mol/L", "feed.concentrations.A", "2 mol/L"),
    (("jacket", "ua"), "1.6 kW/K", "jacket.ua", "1.6 kW/K"),
    (("jacket", "coolant_temperature"), "15 degC", "jacket.coolant_temperature", "15.00 °C"),
    (("limits", "max_temperature"), "105 degC", "limits.max_temperature", "105.00 °C"),
    (("limits", "level_high"), "1.7 m", "limits.level_high", "1.7 m"),
    (("map", "points"), [100, 80], "map.points", "100, 80"),
]


@pytest.mark.parametrize(("path", "value", "field", "shown"), EDITS, ids=[e[2] for e in EDITS])
def test_the_diff_names_exactly_the_edited_field(path, value, field, shown):
    a = _demo("jacketed-first-order")
    b = json.loads(json.dumps(a))
    node = b
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    diff = scenario_diff(a, b)
    assert [d["field"] for d in diff] == [field]
    assert diff[0]["change"] == "changed"
    assert diff[0]["b_text"] == shown


def test_the_diff_of_sections_added_and_removed_and_of_check_policy():
    a = _demo("jacketed-first-order")
    b = json.loads(json.dumps(a))
    b["heat_loss"] = {"ua": "50 W/K", "ambient_temperature": "20 degC"}
    b["check_policy"] = {"min_feed_temperature_margin": "15 K"}
    b["agitator_power"] = "2 kW"
    b["reactions"].append(
        {
            "label": "A -> P, second path",
            "stoichiometry": {"A": -1, "P": 1},
            "orders": {"A": 1},
            "pre_exponential": "1e5 1/s",
            "activation_energy": "60 kJ/mol",
            "reaction_enthalpy": "-50 kJ/mol",
        }
    )
    del b["jacket"]
    by_field = {d["field"]: d for d in scenario_diff(a, b)}
    assert set(by_field) == {
        "heat_loss",
        "check_policy.min_feed_temperature_margin",
        "agitator_power",
        "reactions[1]",
        "jacket",
    }
    assert by_field["heat_loss"]["change"] == "added"
    assert by_field["jacket"]["change"] == "removed"
    assert by_field["reactions[1]"]["b_text"] == "A -> P, second path"
    assert by_field["agitator_power"]["b_text"] == "2 kW"
    # project default 10 K (exomap.core.scenario.CheckPolicy) -> 15 K: a 50 % rise
    assert math.isclose(by_field["check_policy.min_feed_temperature_margin"]["relative_change"], 0.5)


def test_two_spellings_of_one_value_are_not_a_difference():
    a = _demo("jacketed-first-order")
    b = json.loads(json.dumps(a))
    # 50 degC = 323.15 K (SI definition of the Celsius scale); 2.7 m^3/h = 7.5e-4 m^3/s
    b["feed"]["temperature"] = 323.15
    b["feed"]["flow"] = "0.75 L/s"
    assert scenario_diff(a, b) == []


def test_two_setpoints_of_one_scenario(cstr):
    sc = cstr(20.0, 8.0, map_spec=WINDOW, T_max=420.0).sc
    from exomap.core.compare import Setpoint

    res = compare(sc, sc, setpoint_a=Setpoint(100.0, 350.0), setpoint_b=Setpoint(3000.0, 350.0))
    d = res.to_dict()
    assert d["map"]["changed_count"] == 0
    assert d["setpoint_b"]["flow_m3_per_s"] == pytest.approx(sc.vessel.V_set / 3000.0, rel=1e-12)
    assert d["checks"]["a"]["verdict"] in ("inside", "marginal", "outside", "undetermined")
    assert d["checks"]["a"]["operating_point"] != d["checks"]["b"]["operating_point"]
    assert d["cautions"]
