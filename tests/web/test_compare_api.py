"""POST /api/v1/compare and its GET twin: the answer, its cache, and every error in the one error shape."""

from __future__ import annotations

import json
from importlib import resources

import numpy as np
from web_helpers import assert_error


def _demo(name: str) -> dict:
    return json.loads((resources.files("exomap.demos") / f"{name}.json").read_text(encoding="utf-8"))


def test_post_and_get_give_the_same_answer_and_the_core_numbers(client):
    from exomap import schema
    from exomap.core.compare import compare_maps

    body = {
        "a": {"scenario_id": "jacketed-first-order"},
        "b": {"scenario_id": "jacketed-first-order", "residence_time": "35 min"},
        "points": [40, 30],
    }
    post = client.post("/api/v1/compare", json=body)
    assert post.status_code == 200, post.text
    get = client.get("/api/v1/compare?a=jacketed-first-order&b=jacketed-first-order&residence_time_b=2100&points=40,30")
    assert get.status_code == 200
    assert get.headers["X-Exomap-Cache"] == "hit"  # both spellings normalise to one computation
    assert get.json() == post.json()
    ans = post.json()
    assert ans["same_scenario"] is True and ans["fields"] == []
    assert ans["setpoint_b"]["residence_time_s"] == 2100.0
    # two setpoints of one scenario: one map, no changed cell
    assert ans["map"]["changed_count"] == 0
    # the map part equals the core's comparison on the same grid
    sc = schema.parse_scenario(_demo("jacketed-first-order")).to_core()
    mc = compare_maps(sc, sc, points=(40, 30))
    np.testing.assert_array_equal(np.array(ans["map"]["region_a"]), mc.a.region)
    assert ans["checks"]["a"]["verdict"] in ("inside", "marginal", "outside", "undetermined")


def test_inline_scenarios_and_the_field_diff(client):
    a = _demo("mild-single-state")
    b = json.loads(json.dumps(a))
    b["feed"]["concentrations"] = {k: "3.0 mol/L" for k in a["feed"]["concentrations"]}
    r = client.post(
        "/api/v1/compare", json={"a": {"scenario": a}, "b": {"scenario": b}, "points": [30, 30], "checks": False}
    )
    assert r.status_code == 200, r.text
    ans = r.json()
    assert [d["field"] for d in ans["fields"]] == [
        f"feed.concentrations.{k}" for k in sorted(a["feed"]["concentrations"])
    ]
    assert ans["checks"] is None
    assert sum(t["cells"] for t in ans["map"]["transitions"]) == ans["map"]["changed_count"]


def test_errors_name_the_side_and_the_field(client):
    bad = _demo("mild-single-state")
    bad["vessel"]["diameter"] = "1.2 m^3"
    r = client.post("/api/v1/compare", json={"a": {"scenario_id": "mild-single-state"}, "b": {"scenario": bad}})
    assert_error(r, 422, "invalid_scenario", "b.scenario.vessel.diameter")
    r = client.post(
        "/api/v1/compare", json={"a": {"scenario_id": "no-such"}, "b": {"scenario_id": "mild-single-state"}}
    )
    assert_error(r, 404, "not_found", "a.scenario_id")
    r = client.post(
        "/api/v1/compare",
        json={
            "a": {"scenario_id": "mild-single-state", "feed_temperature": "25 kg"},
            "b": {"scenario_id": "mild-single-state"},
        },
    )
    assert_error(r, 422, "invalid_input", "a.feed_temperature")
    r = client.post(
        "/api/v1/compare",
        json={
            "a": {"scenario_id": "mild-single-state"},
            "b": {"scenario_id": "mild-single-state"},
            "points": [2000, 2000],
        },
    )
    assert_error(r, 413, "too_many_cells", "points")
    r = client.post("/api/v1/compare", json={"a": {"scenario_id": "mild-single-state"}})
    assert r.status_code == 422 and r.json()["error"]["fields"][0]["field"].endswith("b")


def test_compare_page_names_its_json_twin(client):
    r = client.get("/compare?a=mild-single-state&b=jacketed-first-order&prepared_by=X")
    assert r.status_code == 200
    assert 'type="application/json" href="/api/v1/compare?a=mild-single-state&amp;b=jacketed-first-order"' in r.text
    r = client.get("/compare/print?a=mild-single-state&b=jacketed-first-order&reviewed_by=Y.+Z")
    assert r.status_code == 200 and "Y. Z" in r.text
