"""Computation routes: each answer is exactly the core result's ``to_dict()`` for the same SI inputs, POST and
GET twin alike; repeats come from the cache; CSV is the core's ``to_csv()``.

Unit conversions used for the SI inputs below are exact by definition (analytic): 1 min = 60 s, 1 h = 3600 s,
T/K = t/degC + 273.15 (ITS-90 / SI), 1 mol/L = 1000 mol/m^3.
"""

from __future__ import annotations

import gzip
import json

import pytest
from exomap import schema
from exomap.web.jobs import dumps
from web_scenarios import ADIABATIC


@pytest.fixture(scope="module")
def core_scenario():
    return schema.parse_scenario(ADIABATIC).to_core()


def expected(result) -> dict:
    """The document the API must send: the core result's to_dict(), as JSON."""
    return json.loads(dumps(result.to_dict()))


def test_steady_post_get_and_inline_are_the_core_answer(client, saved_id, core_scenario) -> None:
    from exomap.core.steady import steady_states

    # analytic: 40 min = 2400 s; 35 degC = 308.15 K
    want = expected(steady_states(core_scenario, 2400.0, 308.15))
    post = client.post(
        "/api/v1/steady", json={"scenario_id": saved_id, "residence_time": "40 min", "feed_temperature": "35 degC"}
    )
    assert post.status_code == 200, post.text
    assert post.json() == want
    assert post.headers["x-exomap-cache"] == "miss"
    # the GET twin with SI numbers asks the same question: same key, so a cache hit with the same bytes
    get = client.get(f"/api/v1/scenarios/{saved_id}/steady?residence_time=2400&feed_temperature=308.15")
    assert get.status_code == 200
    assert get.headers["x-exomap-cache"] == "hit"
    assert get.content == post.content
    inline = client.post(
        "/api/v1/steady", json={"scenario": ADIABATIC, "residence_time": 2400, "feed_temperature": 308.15}
    )
    assert inline.json() == want


def test_steady_defaults_to_the_scenarios_own_feed(client, saved_id, core_scenario) -> None:
    from exomap.core.steady import steady_states

    want = expected(steady_states(core_scenario, core_scenario.tau_nominal, core_scenario.T_in))
    assert client.post("/api/v1/steady", json={"scenario_id": saved_id}).json() == want


def test_steady_feed_concentrations_and_coolant(client, saved_id, core_scenario) -> None:
    from exomap.core.steady import steady_states

    # analytic: 1.5 mol/L = 1500 mol/m^3; 20 degC = 293.15 K
    want = expected(steady_states(core_scenario, 2400.0, 308.15, c_in=(1500.0, 0.0), T_c=293.15))
    body = {
        "scenario_id": saved_id,
        "residence_time": "40 min",
        "feed_temperature": "35 degC",
        "feed_concentrations": {"A": "1.5 mol/L"},
        "coolant_temperature": "20 degC",
    }
    assert client.post("/api/v1/steady", json=body).json() == want
    get = client.get(
        f"/api/v1/scenarios/{saved_id}/steady",
        params={
            "residence_time": "40 min",
            "feed_temperature": "35 degC",
            "feed_concentrations": "A:1.5 mol/L",
            "coolant_temperature": "20 degC",
        },
    )
    assert get.json() == want


def test_branch_is_the_core_answer(client, saved_id, core_scenario) -> None:
    from exomap.core.branch import branch

    # analytic: 30 min = 1800 s; 10 degC = 283.15 K, 90 degC = 363.15 K
    want = expected(branch(core_scenario, "feed_temperature", 1800.0, core_scenario.T_in, lo=283.15, hi=363.15))
    body = {
        "scenario_id": saved_id,
        "along": "feed_temperature",
        "residence_time": "30 min",
        "range": ["10 degC", "90 degC"],
    }
    post = client.post("/api/v1/branch", json=body)
    assert post.status_code == 200, post.text
    assert post.json() == want
    get = client.get(
        f"/api/v1/scenarios/{saved_id}/branch",
        params={"along": "feed_temperature", "residence_time": "30 min", "range": "10 degC,90 degC"},
    )
    assert get.json() == want


def test_map_json_and_csv_are_the_core_answer(client, saved_id, core_scenario) -> None:
    from exomap.core.opmap import operating_map

    # analytic: 2 min = 120 s, 5 h = 18000 s; 0 degC = 273.15 K, 100 degC = 373.15 K
    result = operating_map(
        core_scenario, tau_range=(120.0, 18000.0), T_in_range=(273.15, 373.15), points=(24, 18), spacing="log"
    )
    body = {
        "scenario_id": saved_id,
        "residence_time": ["2 min", "5 h"],
        "feed_temperature": ["0 degC", "100 degC"],
        "points": [24, 18],
    }
    post = client.post("/api/v1/map", json=body)
    assert post.status_code == 200, post.text
    assert post.json() == expected(result)
    assert len(post.json()["region"]) == 18 and len(post.json()["region"][0]) == 24
    query = {"residence_time": "2 min,5 h", "feed_temperature": "0 degC,100 degC", "points": "24,18"}
    get = client.get(f"/api/v1/scenarios/{saved_id}/map", params=query)
    assert get.headers["x-exomap-cache"] == "hit"
    assert get.json() == expected(result)
    csv = client.get(f"/api/v1/scenarios/{saved_id}/map", params={**query, "format": "csv"})
    assert csv.status_code == 200
    assert csv.headers["content-type"].startswith("text/csv")
    assert csv.text == result.to_csv()


def test_simulate_with_events_is_the_core_answer(client, saved_id, core_scenario) -> None:
    from exomap.core.dynamics import simulate
    from exomap.core.events import parse_events

    # analytic: 10 min = 600 s, 2 h = 7200 s; a rise of 10 K
    events = parse_events([{"at": 600.0, "add": "feed_temperature", "value": 10.0}])
    want = expected(simulate(core_scenario, tau=2400.0, T_in=308.15, start="low", events=events, duration=7200.0))
    body = {
        "scenario_id": saved_id,
        "residence_time": "40 min",
        "feed_temperature": "35 degC",
        "events": [{"at": "10 min", "add": "feed_temperature", "value": "10 K"}],
        "duration": "2 h",
    }
    post = client.post("/api/v1/simulate", json=body)
    assert post.status_code == 200, post.text
    assert post.json() == want
    get = client.get(
        f"/api/v1/scenarios/{saved_id}/simulate",
        params={
            "residence_time": "40 min",
            "feed_temperature": "35 degC",
            "duration": "2 h",
            "events": json.dumps([{"at": 600, "add": "feed_temperature", "value": 10}]),
        },
    )
    assert get.json() == want


def test_check_is_the_core_answer(client, saved_id, core_scenario) -> None:
    from exomap.core.check import check_setpoint

    want = expected(check_setpoint(core_scenario, tau=2400.0, T_in=308.15, branch=None))
    post = client.post(
        "/api/v1/check", json={"scenario_id": saved_id, "residence_time": "40 min", "feed_temperature": "35 degC"}
    )
    assert post.status_code == 200, post.text
    assert post.json() == want
    assert post.json()["verdict"] in ("inside", "marginal", "outside")
    assert post.json()["cautions"]
    get = client.get(f"/api/v1/scenarios/{saved_id}/check?residence_time=40 min&feed_temperature=35 degC")
    assert get.content == post.content


def test_demo_by_name_answers_like_its_id(client) -> None:
    demos = [s for s in client.get("/api/v1/scenarios").json()["scenarios"] if s["demo"]]
    assert demos
    by_name = client.get(f"/api/v1/scenarios/{demos[0]['name']}/steady")
    by_id = client.get(f"/api/v1/scenarios/{demos[0]['id']}/steady")
    assert by_name.status_code == 200, by_name.text
    assert by_name.json() == by_id.json()
    assert by_id.headers["x-exomap-cache"] == "hit"  # same content id, same cache entry


def test_large_answers_are_gzipped_once(client, saved_id) -> None:
    body = {"scenario_id": saved_id, "points": [30, 30]}
    plain = client.post("/api/v1/map", json=body, headers={"Accept-Encoding": "identity"})
    assert "content-encoding" not in plain.headers
    zipped = client.post("/api/v1/map", json=body, headers={"Accept-Encoding": "gzip"})
    assert zipped.headers["content-encoding"] == "gzip"
    assert zipped.headers["vary"] == "Accept-Encoding"
    # httpx decodes the gzip body; the decoded bytes are the plain answer
    assert zipped.content == plain.content
    raw = gzip.compress(plain.content)
    assert len(raw) < len(plain.content)


def test_cache_is_bounded(make_client) -> None:
    client = make_client(cache_entries=2)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    for minutes in (10, 20, 30):
        client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": f"{minutes} min"})
    service = client.app.state.service
    assert len(service.cache) == 2
    # the oldest (10 min) was dropped, the newest is still there
    again = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": "30 min"})
    assert again.headers["x-exomap-cache"] == "hit"
    first = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": "10 min"})
    assert first.headers["x-exomap-cache"] == "miss"


def test_process_pool_gives_the_same_answers_and_keeps_error_fields(make_client, core_scenario) -> None:
    from exomap.core.steady import steady_states
    from web_helpers import assert_error

    client = make_client(executor="process", workers=1)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    response = client.post(
        "/api/v1/steady", json={"scenario_id": sid, "residence_time": 2400.0, "feed_temperature": 308.15}
    )
    assert response.status_code == 200, response.text
    assert response.json() == expected(steady_states(core_scenario, 2400.0, 308.15))
    # the core's ModelInputError raised inside the worker process still names its field
    bad = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": -1.0})
    assert_error(bad, 422, "invalid_input", "residence_time")
