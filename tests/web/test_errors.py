"""Every error path of the API answers the one error shape (``web_helpers.assert_error``), never a trace."""

from __future__ import annotations

import copy

import pytest
from web_helpers import assert_error
from web_scenarios import ADIABATIC


def _bad_unit() -> dict:
    doc = copy.deepcopy(ADIABATIC)
    doc["vessel"]["diameter"] = "2 kg"
    return doc


def _ten_year_upsets() -> dict:
    doc = copy.deepcopy(ADIABATIC)
    doc["check_policy"] = {"upset_duration": "3650 d"}  # each upset is a simulation: the same 7-day limit
    return doc


def _bad_k0() -> dict:
    doc = copy.deepcopy(ADIABATIC)
    doc["reactions"][0]["pre_exponential"] = "4e10 m^3/(mol s)"  # a second-order unit on a first-order rate
    return doc


# (method, path, request keywords, status, code, a field the answer must name)
CASES = [
    ("get", "/api/v1/nowhere", {}, 404, "not_found", None),
    ("get", "/api/v1/scenarios/0123456789abcdef", {}, 404, "not_found", None),
    ("get", "/api/v1/scenarios/0123456789abcdef/steady", {}, 404, "not_found", "scenario_id"),
    ("post", "/api/v1/check", {"json": {"scenario_id": "0123456789abcdef"}}, 404, "not_found", "scenario_id"),
    ("delete", "/api/v1/health", {}, 405, "method_not_allowed", None),
    ("put", "/api/v1/scenarios", {"json": {}}, 405, "method_not_allowed", None),
    (
        "post",
        "/api/v1/steady",
        {"content": b"{" + b" " * 1_000_001 + b"}", "headers": {"content-type": "application/json"}},
        413,
        "body_too_large",
        None,
    ),
    ("post", "/api/v1/map", {"json": {"scenario_id": "{id}", "points": [501, 500]}}, 413, "too_many_cells", "points"),
    ("get", "/api/v1/scenarios/{id}/map?points=1000,1000", {}, 413, "too_many_cells", "points"),
    ("post", "/api/v1/simulate", {"json": {"scenario_id": "{id}", "duration": "8 d"}}, 413, "too_long", "duration"),
    (
        "post",
        "/api/v1/check",
        {"json": {"scenario": _ten_year_upsets()}},
        413,
        "too_long",
        "check_policy.upset_duration",
    ),
    (
        "post",
        "/api/v1/simulate",
        {"json": {"scenario_id": "{id}", "duration": "1 h", "events": [{"at": 1, "do": "feed_stop"}] * 201}},
        413,
        "too_many_events",
        "events",
    ),
    ("post", "/api/v1/scenarios", {"json": _bad_unit()}, 422, "invalid_scenario", "vessel.diameter"),
    ("post", "/api/v1/scenarios", {"json": _bad_k0()}, 422, "invalid_scenario", "reactions[0].pre_exponential"),
    ("post", "/api/v1/scenarios", {"json": {"format": "exomap-scenario/1"}}, 422, "invalid_scenario", "species"),
    ("post", "/api/v1/scenarios", {"json": [1, 2]}, 422, "invalid_request", "body"),
    (
        "post",
        "/api/v1/steady",
        {"json": {"scenario": _bad_unit()}},
        422,
        "invalid_scenario",
        "scenario.vessel.diameter",
    ),
    (
        "post",
        "/api/v1/steady",
        {"json": {"scenario_id": "{id}", "residence_time": "40 kg"}},
        422,
        "invalid_input",
        "residence_time",
    ),
    (
        "post",
        "/api/v1/steady",
        {"json": {"scenario_id": "{id}", "residence_time": [1]}},
        422,
        "invalid_request",
        "residence_time",
    ),
    (
        "post",
        "/api/v1/steady",
        {"json": {"scenario_id": "{id}", "residence_time": True}},
        422,
        "invalid_request",
        "residence_time",
    ),
    ("post", "/api/v1/steady", {"json": {"scenario_id": "{id}", "residence_time": -5}}, 422, "invalid_input", None),
    (
        "post",
        "/api/v1/steady",
        {"json": {"scenario_id": "{id}", "feed_concentrations": {"Z": "1 mol/L"}}},
        422,
        "invalid_input",
        "feed_concentrations.Z",
    ),
    ("post", "/api/v1/steady", {"json": {"scenario_id": "{id}", "scenario": ADIABATIC}}, 422, "invalid_request", None),
    (
        "post",
        "/api/v1/steady",
        {"json": {"scenario_id": "{id}", "residence_tme": "40 min"}},
        422,
        "invalid_request",
        "residence_tme",
    ),
    (
        "post",
        "/api/v1/steady",
        {"content": b"{not json", "headers": {"content-type": "application/json"}},
        422,
        "invalid_request",
        None,
    ),
    ("post", "/api/v1/map", {"json": {"scenario_id": "{id}", "points": [1, 40]}}, 422, "invalid_request", "points[0]"),
    ("get", "/api/v1/scenarios/{id}/map?points=a,b", {}, 422, "invalid_request", "points[0]"),
    (
        "post",
        "/api/v1/steady",
        {"content": b"\xff\xfe<", "headers": {"content-type": "application/json"}},
        400,
        "bad_request",
        None,
    ),
    (
        "post",
        "/api/v1/map",
        {"json": {"scenario_id": "{id}", "feed_temperature": ["80 degC", "20 degC"]}},
        422,
        "invalid_input",
        "feed_temperature",
    ),
    ("get", "/api/v1/scenarios/{id}/map?residence_time=5 min", {}, 422, "invalid_request", "residence_time"),
    ("get", "/api/v1/scenarios/{id}/map?format=xml", {}, 422, "invalid_request", "format"),
    ("get", "/api/v1/scenarios/{id}/check?branch=middle", {}, 422, "invalid_request", "branch"),
    ("post", "/api/v1/branch", {"json": {"scenario_id": "{id}", "along": "level"}}, 422, "invalid_request", "along"),
    (
        "post",
        "/api/v1/simulate",
        {"json": {"scenario_id": "{id}", "duration": "1 h", "events": [{"at": "10 min", "set": "feed_flw", "to": 1}]}},
        422,
        "invalid_input",
        "events[0].set",
    ),
    (
        "post",
        "/api/v1/simulate",
        {"json": {"scenario_id": "{id}", "duration": "1 h", "events": [{"at": "2 h", "do": "feed_stop"}]}},
        422,
        "invalid_input",
        "events[0].at",
    ),
    ("get", "/api/v1/scenarios/{id}/simulate?events=[oops", {}, 422, "invalid_request", "events"),
]


def _fill(value, sid: str):
    if isinstance(value, str):
        return value.replace("{id}", sid)
    if isinstance(value, dict):
        return {k: _fill(v, sid) for k, v in value.items()}
    if isinstance(value, list):
        return [_fill(v, sid) for v in value]
    return value


@pytest.mark.parametrize(
    ("method", "path", "kwargs", "status", "code", "field"),
    CASES,
    ids=[f"{c[3]}-{c[4]}-{i}" for i, c in enumerate(CASES)],
)
def test_error_path(client, saved_id, method, path, kwargs, status, code, field) -> None:
    response = client.request(method.upper(), _fill(path, saved_id), **_fill(kwargs, saved_id))
    assert_error(response, status, code, field)


def test_wrong_unit_message_names_the_unit_expected(client) -> None:
    err = assert_error(client.post("/api/v1/scenarios", json=_bad_unit()), 422, "invalid_scenario", "vessel.diameter")
    message = next(f["message"] for f in err["fields"] if f["field"] == "vessel.diameter")
    assert "length" in message and "m" in message


def test_one_message_per_field_for_several_bad_fields(client) -> None:
    doc = _bad_unit()
    doc["liquid"]["density"] = "1000 K"
    err = assert_error(client.post("/api/v1/scenarios", json=doc), 422, "invalid_scenario")
    assert {"vessel.diameter", "liquid.density"} <= {f["field"] for f in err["fields"]}


def test_method_not_allowed_names_the_allowed_methods(client) -> None:
    response = client.delete("/api/v1/health")
    assert_error(response, 405, "method_not_allowed")
    assert "GET" in response.headers["allow"]


def test_save_token_is_required_when_set(make_client) -> None:
    client = make_client(save_token="s3cret")
    assert_error(client.post("/api/v1/scenarios", json=ADIABATIC), 401, "unauthorized")
    wrong = client.post("/api/v1/scenarios", json=ADIABATIC, headers={"Authorization": "Bearer nope"})
    assert_error(wrong, 401, "unauthorized")
    assert wrong.headers["www-authenticate"] == "Bearer"
    ok = client.post("/api/v1/scenarios", json=ADIABATIC, headers={"Authorization": "Bearer s3cret"})
    assert ok.status_code == 201
    # reading and computing need no token
    assert client.get(f"/api/v1/scenarios/{ok.json()['id']}").status_code == 200


def test_time_budget_gives_503(make_client) -> None:
    client = make_client(request_time_budget_s=0.02)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    response = client.post("/api/v1/map", json={"scenario_id": sid, "points": [500, 500]})
    assert_error(response, 503, "time_budget_exceeded")
    assert response.headers["retry-after"]


def test_unexpected_error_is_a_generic_500_without_trace(make_client, monkeypatch, caplog) -> None:
    from exomap.web import jobs

    def broken(*args, **kwargs):
        raise ZeroDivisionError("secret internals")

    monkeypatch.setattr(jobs, "compute", broken)
    client = make_client(raise_server_exceptions=False)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    with caplog.at_level("ERROR", logger="exomap.web"):
        response = client.post("/api/v1/steady", json={"scenario_id": sid})
    err = assert_error(response, 500, "internal_error")
    assert "secret internals" not in response.text and "ZeroDivisionError" not in response.text
    assert err["fields"] == []
    # the trace goes to the log instead
    assert any("ZeroDivisionError" in (r.exc_text or "") or r.exc_info for r in caplog.records)


@pytest.mark.parametrize(
    ("error", "status", "code", "field"),
    [
        ("limit", 413, "limit_exceeded", "points"),
        ("input", 422, "invalid_input", "feed.flow"),
        ("convergence", 422, "no_convergence", None),
        ("budget", 503, "time_budget_exceeded", None),
    ],
)
def test_each_core_error_maps_to_one_status(make_client, monkeypatch, error, status, code, field) -> None:
    """The core's domain errors (exomap.core.errors), raised inside a job, each answer one status and code."""
    from exomap.core import errors
    from exomap.web import jobs

    raised = {
        "limit": errors.LimitExceededError("too many cells for this grid", field="points"),
        "input": errors.ModelInputError("feed flow must be positive", field="feed.flow"),
        "convergence": errors.ConvergenceError("Newton did not converge (residual 1e-3)"),
        "budget": errors.BudgetExceededError("ran past its budget"),
    }[error]

    def failing(*args, **kwargs):
        raise raised

    monkeypatch.setattr(jobs, "compute", failing)
    client = make_client()
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    err = assert_error(client.post("/api/v1/steady", json={"scenario_id": sid}), status, code, field)
    assert str(raised) in err["message"]
