"""The map route under uncertain data (DESIGN.md §11): POST and the GET twin with ``samples``/``seed`` answer
exactly the core's ``uncertainty_map(...).to_dict()``; bad requests are one 422 naming the field."""

from __future__ import annotations

import copy
import json

import pytest
from exomap import schema
from exomap.web.jobs import dumps
from web_scenarios import ADIABATIC

UNCERTAIN = copy.deepcopy(ADIABATIC)
UNCERTAIN["uncertainty"] = {
    "parameters": [
        {"target": "reactions[0].rate_constant", "distribution": "lognormal", "factor": 1.5},
        {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "3 kJ/mol"},
    ],
    "reference_temperature": "60 degC",
}
UNCERTAIN["map"]["points"] = [16, 12]


@pytest.fixture
def uncertain_id(client) -> str:
    response = client.post("/api/v1/scenarios", json=UNCERTAIN)
    assert response.status_code == 201, response.text
    return response.json()["id"]


def test_post_and_get_are_the_core_answer(client, uncertain_id) -> None:
    from exomap.core.uncertainty import uncertainty_map

    sc = schema.parse_scenario(UNCERTAIN).to_core()
    want = json.loads(dumps(uncertainty_map(sc, samples=16, seed=2).to_dict()))
    post = client.post("/api/v1/map", json={"scenario_id": uncertain_id, "samples": 16, "seed": 2})
    assert post.status_code == 200, post.text
    assert post.json() == want
    get = client.get(f"/api/v1/scenarios/{uncertain_id}/map?samples=16&seed=2")
    assert get.status_code == 200, get.text
    assert get.headers["x-exomap-cache"] == "hit"
    assert get.json() == want
    assert want["samples"] == 16 and want["seed"] == 2
    csv = client.get(f"/api/v1/scenarios/{uncertain_id}/map?samples=16&seed=2&format=csv")
    assert csv.status_code == 200
    assert csv.text.splitlines()[0].startswith("residence_time_s,feed_temperature_K,probability_runaway")
    # without samples the route answers the deterministic map as before
    plain = client.get(f"/api/v1/scenarios/{uncertain_id}/map").json()
    assert "probability" not in plain and "region" in plain


@pytest.mark.parametrize(
    ("query", "field"),
    [
        ("samples=100", "samples"),
        ("samples=4", "samples"),
        ("samples=many", "samples"),
        ("seed=3", "seed"),
        ("samples=16&seed=-1", "seed"),
    ],
)
def test_bad_sampling_requests_name_the_field(client, uncertain_id, query, field) -> None:
    r = client.get(f"/api/v1/scenarios/{uncertain_id}/map?{query}")
    assert r.status_code == 422, r.text
    fields = [e["field"] for e in r.json()["error"]["fields"]]
    assert any(f.endswith(field) for f in fields), fields


def test_samples_need_an_uncertainty_block(client, saved_id) -> None:
    r = client.post("/api/v1/map", json={"scenario_id": saved_id, "samples": 16})
    assert r.status_code == 422
    assert r.json()["error"]["fields"][0]["field"] == "samples"
    assert "uncertainty block" in r.json()["error"]["fields"][0]["message"]


def test_a_bad_block_is_a_422_naming_the_target(client) -> None:
    doc = copy.deepcopy(UNCERTAIN)
    doc["uncertainty"]["parameters"][1]["sd"] = "3 K"
    r = client.post("/api/v1/scenarios", json=doc)
    assert r.status_code == 422
    err = r.json()["error"]["fields"][0]
    assert err["field"].endswith("uncertainty.parameters[1].sd")
    assert "reactions[0].activation_energy" in err["message"] and "J/mol" in err["message"]


def test_check_with_samples_is_the_core_answer(client, uncertain_id) -> None:
    from exomap.core.uncertain_check import uncertain_check

    sc = schema.parse_scenario(UNCERTAIN).to_core()
    want = json.loads(dumps(uncertain_check(sc, samples=8, seed=1).to_dict()))
    got = client.get(f"/api/v1/scenarios/{uncertain_id}/check?samples=8&seed=1")
    assert got.status_code == 200, got.text
    assert got.json() == want
    block = want["uncertainty"]
    assert block["samples"] == 8 and 0.0 <= block["probability_outside"] <= block["probability_marginal_or_worse"]
    assert "uncertainty" not in client.get(f"/api/v1/scenarios/{uncertain_id}/check").json()


def test_past_the_time_budget_the_answer_says_what_to_reduce(make_client) -> None:
    # a map under uncertainty costs in proportion to its samples: the 503 names the request's sample count and
    # points, and a smaller count to ask for
    client = make_client(request_time_budget_s=0.02)
    sid = client.post("/api/v1/scenarios", json=UNCERTAIN).json()["id"]
    response = client.post("/api/v1/map", json={"scenario_id": sid, "samples": 1024, "points": [40, 30]})
    assert response.status_code == 503, response.text
    error = response.json()["error"]
    assert error["code"] == "time_budget_exceeded"
    assert "1024 samples" in error["message"] and "samples=256" in error["message"]
    assert "40 x 30" in error["message"]
    check = client.post("/api/v1/check", json={"scenario_id": sid, "samples": 64})
    assert check.status_code == 503
    assert "samples=16" in check.json()["error"]["message"]
    # without samples the message is the plain budget one
    plain = client.post("/api/v1/map", json={"scenario_id": sid, "points": [500, 500]})
    assert plain.status_code == 503 and "samples" not in plain.json()["error"]["message"]
