"""Every answer the API sends fits the model its route declares in the OpenAPI document, exactly.

The routes send the core's ``to_dict()`` as bytes, without building it through the answer models (that would
cost on the hot path), so this test is what keeps the two equal: it calls every operation on the demos, at
several operating points and on edge answers (several states, an oscillating tank, a valve that cannot pass
the flow, an overflow, failed upsets), and validates each body in strict mode against the declared model,
whose ``extra="forbid"`` refuses any key the model does not list. A key added to an answer without its model
fails here; a status a route sends without documenting it fails here too.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import pytest
from exomap.web.answers import Answer
from exomap.web.app import create_app
from exomap.web.errors import ErrorBody
from exomap.web.settings import Settings
from fastapi.testclient import TestClient
from pydantic import BaseModel
from web_scenarios import ADIABATIC, variant

SAVED = "{saved}"  # replaced by the id of ADIABATIC, saved by the fixture
DEMOS = ("adiabatic-second-order", "jacketed-first-order", "mild-single-state", "product-decomposition")
#: Every event form of the event syntax (exomap.core.events), with units.
ALL_EVENT_FORMS = [
    {"at": "5 min", "set": "feed_temperature", "to": "30 degC"},
    {"at": "10 min", "add": "coolant_temperature", "value": "2 K"},
    {"at": "15 min", "scale": "feed_flow", "by": 0.9},
    {"at": "20 min", "ramp": "feed_concentration.A", "to": "2.6 mol/L", "over": "10 min"},
    {"at": "40 min", "do": "cooling_loss"},
]
#: With an uncertainty block (DESIGN.md §11): the rate constant and activation energy known to a few per cent.
UNCERTAIN = variant(
    uncertainty={
        "parameters": [
            {"target": "reactions[0].rate_constant", "distribution": "lognormal", "factor": 1.3},
            {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "2 kJ/mol"},
        ]
    }
)
#: The outlet cannot pass any flow: the downstream pressure is above the vessel's bottom pressure.
NO_DRIVING_PRESSURE = variant(
    outlet_valve={"kv": "40 m^3/h", "characteristic": "linear", "opening": 0.5, "downstream_pressure": "5 bar"}
)


#: Invented plant data for the jacketed demo: 30 records a minute apart, feed warming by 2 K (a wide export).
PLANT_CSV = "time,FI-101 [m^3/h],TI-101 [degC],TI-201 [degC]\n" + "".join(
    f"2026-11-30T06:{k:02d}:00Z,2.7,{50 + 2 * k / 29:.3f},{80.3 + 0.1 * k:.2f}\n" for k in range(30)
)
PLANT_MAP = "FI-101=feed_flow,TI-101=feed_temperature,TI-201=reactor_temperature"


def _plant_id() -> str:
    from exomap.schema.plantdata import read_plant_csv

    mapping = dict(p.split("=") for p in PLANT_MAP.split(","))
    return read_plant_csv(PLANT_CSV, mapping=mapping).dataset_id


DATASET = _plant_id()


@dataclass(frozen=True)
class Case:
    """One request: the operation it calls, the expected status, and what the answer must show."""

    name: str
    operation: str
    method: str
    path: str
    status: int = 200
    json: Any = None
    content: bytes | None = None
    params: dict[str, str] = field(default_factory=dict)
    expect: Callable[[dict[str, Any]], bool] | None = None


def _check_of(name: str, path: str, expect: Callable[[dict[str, Any]], bool] | None = None, **params: str) -> Case:
    return Case(name, "getCheck", "GET", f"/api/v1/scenarios/{path}/check", params=params, expect=expect)


CASES: list[Case] = [
    # -- service and scenarios
    Case("health", "getHealth", "GET", "/api/v1/health"),
    Case("version", "getVersion", "GET", "/api/v1/version"),
    Case("list", "listScenarios", "GET", "/api/v1/scenarios", expect=lambda a: len(a["scenarios"]) == 5),
    *[Case(f"get-{d}", "getScenario", "GET", f"/api/v1/scenarios/{d}") for d in DEMOS],
    Case("get-saved", "getScenario", "GET", f"/api/v1/scenarios/{SAVED}"),
    Case("save-new", "saveScenario", "POST", "/api/v1/scenarios", 201, json=variant(title="Another (invented)")),
    Case("save-again", "saveScenario", "POST", "/api/v1/scenarios", 200, json=ADIABATIC),
    # -- steady states: several states, an oscillating tank, query parameters, no driving pressure
    *[Case(f"steady-{d}", "getSteady", "GET", f"/api/v1/scenarios/{d}/steady") for d in DEMOS],
    Case(
        "steady-three-states",
        "getSteady",
        "GET",
        "/api/v1/scenarios/adiabatic-second-order/steady",
        params={"residence_time": "60 min"},
        expect=lambda a: len(a["states"]) == 3 and a["states"][1]["stability"] == "saddle",
    ),
    Case(
        "steady-oscillating",
        "getSteady",
        "GET",
        "/api/v1/scenarios/jacketed-first-order/steady",
        params={"residence_time": "90 min", "feed_temperature": "50 degC"},
        expect=lambda a: any(s["oscillatory"] for s in a["states"]),
    ),
    Case(
        "steady-feed-and-coolant",
        "getSteady",
        "GET",
        "/api/v1/scenarios/jacketed-first-order/steady",
        params={"feed_concentrations": "A:2 mol/L", "coolant_temperature": "15 degC"},
    ),
    Case(
        "steady-inline-no-driving-pressure",
        "computeSteady",
        "POST",
        "/api/v1/steady",
        json={"scenario": NO_DRIVING_PRESSURE, "residence_time": "40 min"},
        expect=lambda a: {s["valve_opening_status"] for s in a["states"]} == {"no_driving_pressure"},
    ),
    Case(
        "steady-valve-cannot-pass",
        "getSteady",
        "GET",
        "/api/v1/scenarios/jacketed-first-order/steady",
        params={"residence_time": "6 min"},
        expect=lambda a: (
            a["states"][0]["valve_opening"] is None and a["states"][0]["valve_opening_status"] == "above_range"
        ),
    ),
    Case("steady-by-id", "computeSteady", "POST", "/api/v1/steady", json={"scenario_id": SAVED}),
    # -- branches: turning points and Hopf points
    Case(
        "branch-residence-time-folds",
        "getBranch",
        "GET",
        "/api/v1/scenarios/adiabatic-second-order/branch",
        params={"along": "residence_time"},
        expect=lambda a: {t["kind"] for t in a["turning_points"]} == {"ignition", "extinction"},
    ),
    Case(
        "branch-residence-time-hopf",
        "getBranch",
        "GET",
        "/api/v1/scenarios/jacketed-first-order/branch",
        params={"along": "residence_time"},
        expect=lambda a: len(a["hopf_points"]) > 0,
    ),
    Case(
        "branch-feed-temperature",
        "getBranch",
        "GET",
        "/api/v1/scenarios/mild-single-state/branch",
        params={"along": "feed_temperature", "range": "10 degC,60 degC"},
    ),
    Case(
        "branch-inline",
        "computeBranch",
        "POST",
        "/api/v1/branch",
        json={"scenario": ADIABATIC, "along": "feed_temperature", "residence_time": "40 min"},
    ),
    # -- maps (small grids) and the CSV form
    *[Case(f"map-{d}", "getMap", "GET", f"/api/v1/scenarios/{d}/map", params={"points": "16,12"}) for d in DEMOS],
    Case(
        "map-linear-window",
        "getMap",
        "GET",
        "/api/v1/scenarios/jacketed-first-order/map",
        params={"points": "10,10", "spacing": "linear", "residence_time": "60 min,120 min"},
    ),
    Case("map-csv", "getMap", "GET", f"/api/v1/scenarios/{SAVED}/map", params={"points": "8,8", "format": "csv"}),
    Case("map-inline", "computeMap", "POST", "/api/v1/map", json={"scenario": ADIABATIC, "points": [12, 10]}),
    Case(
        "map-uncertain",
        "computeMap",
        "POST",
        "/api/v1/map",
        json={"scenario": UNCERTAIN, "points": [12, 10], "samples": 8, "seed": 1},
        expect=lambda a: a["samples"] == 8 and len(a["probability"]["unsafe"]) == 10,
    ),
    Case(
        "check-uncertain",
        "computeCheck",
        "POST",
        "/api/v1/check",
        json={"scenario": UNCERTAIN, "samples": 8},
        expect=lambda a: a["uncertainty"]["samples"] == 8,
    ),
    Case(
        "error-map-samples-no-block",
        "getMap",
        "GET",
        f"/api/v1/scenarios/{SAVED}/map",
        422,
        params={"samples": "16"},
    ),  # fmt: skip
    # -- checks: several states, the high branch, an oscillating tank, decomposition, valve out of range
    _check_of(
        "check-multiple-low",
        "adiabatic-second-order",
        lambda a: len(a["states"]) == 3 and a["verdict"] != "inside",
        residence_time="60 min",
    ),
    _check_of("check-multiple-high", "adiabatic-second-order", residence_time="60 min", branch="high"),
    _check_of(
        "check-oscillating", "jacketed-first-order", lambda a: a["verdict"] == "outside", residence_time="90 min"
    ),
    _check_of("check-decomposition", "product-decomposition", lambda a: a["safety"]["td24_K"] is not None),
    _check_of(
        "check-valve-out-of-range",
        "mild-single-state",
        lambda a: a["margins"]["valve_opening_to_usable_range_percent"]["ok"] is False,
        residence_time="10 min",  # the valve must open 82 %
    ),
    Case(
        "check-inline-no-driving-pressure",
        "computeCheck",
        "POST",
        "/api/v1/check",
        json={"scenario": NO_DRIVING_PRESSURE},
        expect=lambda a: a["margins"]["valve_opening_to_usable_range_percent"]["value"] is None,
    ),
    # -- simulations: every event form, alarms, an overflow, the high start, CSV
    Case(
        "simulate-every-event-form",
        "getSimulate",
        "GET",
        "/api/v1/scenarios/jacketed-first-order/simulate",
        params={"duration": "2 h", "events": json.dumps(ALL_EVENT_FORMS)},
        expect=lambda a: len(a["events"]) == 5 and len(a["alarms"]) > 0,
    ),
    Case(
        "simulate-overflow",
        "computeSimulate",
        "POST",
        "/api/v1/simulate",
        json={"scenario_id": SAVED, "events": [{"at": 0, "do": "outlet_block"}], "duration": "4 h"},
        expect=lambda a: a["stop_reason"] == "overflow",
    ),
    Case(
        "simulate-high-start",
        "computeSimulate",
        "POST",
        "/api/v1/simulate",
        json={"scenario_id": "adiabatic-second-order", "residence_time": "60 min", "start": "high", "duration": 600},
    ),
    Case(
        "simulate-csv",
        "getSimulate",
        "GET",
        f"/api/v1/scenarios/{SAVED}/simulate",
        params={"duration": "10 min", "format": "csv"},
    ),
    # -- plant data: upload (stored by the fixture already), summary, replay, overlay, calibrate
    Case(
        "dataset-again",
        "saveDataset",
        "POST",
        "/api/v1/datasets",
        200,
        content=PLANT_CSV.encode(),
        params={"map": PLANT_MAP},
        expect=lambda a: a["created"] is False and a["records"] == 30,
    ),  # fmt: skip
    Case(
        "error-dataset-mapping",
        "saveDataset",
        "POST",
        "/api/v1/datasets",
        422,
        content=PLANT_CSV.encode(),
        params={"map": "TI-201=reactor_temprature"},
    ),  # fmt: skip
    Case("dataset-get", "getDataset", "GET", f"/api/v1/datasets/{DATASET}"),
    Case("error-dataset-get", "getDataset", "GET", "/api/v1/datasets/0000000000000000", 404),
    Case(
        "replay",
        "computeReplay",
        "POST",
        "/api/v1/replay",
        json={"scenario_id": "jacketed-first-order", "dataset_id": DATASET},
        expect=lambda a: a["residual_statistics"]["reactor_temperature_K"]["count"] == 30,
    ),  # fmt: skip
    Case(
        "replay-window",
        "computeReplay",
        "POST",
        "/api/v1/replay",
        json={
            "scenario_id": "jacketed-first-order",
            "dataset_id": DATASET,
            "start": "2026-11-30T06:10:00Z",
            "end": 1796019600.0,
        },  # 06:20:00Z in epoch seconds: 20787 days * 86400 s + 22800 s
        expect=lambda a: (
            a["window"]["records"] == 11
            and a["window"]["end"] == "2026-11-30T06:20:00Z"
            and a["residual_statistics"]["reactor_temperature_K"]["count"] == 11
        ),
    ),  # fmt: skip
    Case(
        "error-replay-window",
        "computeReplay",
        "POST",
        "/api/v1/replay",
        422,
        json={
            "scenario_id": "jacketed-first-order",
            "dataset_id": DATASET,
            "start": "2026-11-30T06:10:00Z",
            "end": "2026-11-30T06:00:00Z",
        },
    ),  # fmt: skip
    Case(
        "error-replay",
        "computeReplay",
        "POST",
        "/api/v1/replay",
        404,
        json={"scenario_id": "jacketed-first-order", "dataset_id": "0000000000000000"},
    ),  # fmt: skip
    Case(
        "overlay",
        "computeOverlay",
        "POST",
        "/api/v1/overlay",
        json={"scenario_id": "jacketed-first-order", "dataset_id": DATASET},
        expect=lambda a: a["records"] == 30 and a["stride"] == 1 and len(a["time_s"]) == 30,
    ),  # fmt: skip
    Case(
        "overlay-thinned",
        "computeOverlay",
        "POST",
        "/api/v1/overlay",
        json={"scenario_id": "jacketed-first-order", "dataset_id": DATASET, "max_points": 10},
        # 30 records into 10: every 4th (0, 4, .., 28) and the last (29)
        expect=lambda a: a["stride"] == 4 and a["time_s"] == [60.0 * k for k in (0, 4, 8, 12, 16, 20, 24, 28, 29)],
    ),  # fmt: skip
    Case("error-overlay", "computeOverlay", "POST", "/api/v1/overlay", 422, json={"dataset_id": DATASET}),
    Case(
        "error-overlay-points",
        "computeOverlay",
        "POST",
        "/api/v1/overlay",
        422,
        json={"scenario_id": "jacketed-first-order", "dataset_id": DATASET, "max_points": 1},
    ),  # fmt: skip
    Case(
        "calibrate",
        "computeCalibrate",
        "POST",
        "/api/v1/calibrate",
        json={"scenario_id": "jacketed-first-order", "dataset_id": DATASET, "fit": ["jacket.ua"]},
        expect=lambda a: a["estimates"][0]["target"] == "jacket.ua",
    ),  # fmt: skip
    Case(
        "error-calibrate",
        "computeCalibrate",
        "POST",
        "/api/v1/calibrate",
        422,
        json={"scenario_id": "jacketed-first-order", "dataset_id": DATASET, "fit": ["jacket.k0"]},
    ),  # fmt: skip
    # -- compare: two scenarios without checks, one scenario at two setpoints with both checks
    Case(
        "compare-two-scenarios",
        "getCompare",
        "GET",
        "/api/v1/compare",
        params={"a": "jacketed-first-order", "b": "adiabatic-second-order", "points": "8,8", "checks": "false"},
        expect=lambda a: a["checks"] is None and len(a["fields"]) > 0 and a["map"]["transitions"],
    ),
    Case(
        "compare-two-setpoints",
        "computeCompare",
        "POST",
        "/api/v1/compare",
        json={
            "a": {"scenario_id": SAVED},
            "b": {"scenario": ADIABATIC, "residence_time": "80 min", "branch": "high"},
            "points": [8, 8],
        },
        expect=lambda a: a["same_scenario"] and a["checks"] is not None,
    ),
    # -- errors, each in the shared shape and documented for its route
    Case(
        "error-compare-unknown",
        "getCompare",
        "GET",
        "/api/v1/compare",
        404,
        params={"a": "0123456789abcdef", "b": "mild-single-state"},
    ),  # fmt: skip
    Case(
        "error-compare-side",
        "computeCompare",
        "POST",
        "/api/v1/compare",
        422,
        json={"a": {"scenario_id": SAVED}, "b": {"scenario_id": SAVED, "residence_time": "5 kg"}},
    ),  # fmt: skip
    Case("error-health-query", "getHealth", "GET", "/api/v1/health", 422, params={"verbose": "1"}),
    Case("error-version-query", "getVersion", "GET", "/api/v1/version", 422, params={"v": "2"}),
    Case("error-list-query", "listScenarios", "GET", "/api/v1/scenarios", 422, params={"demo": "true"}),
    Case("error-no-scenario", "getScenario", "GET", "/api/v1/scenarios/0123456789abcdef", 404),
    Case("error-save-invalid", "saveScenario", "POST", "/api/v1/scenarios", 422, json={"species": ["A"]}),
    Case("error-save-not-json", "saveScenario", "POST", "/api/v1/scenarios", 400, content=b"\xff\xfe{"),
    Case(
        "error-steady-unit",
        "getSteady",
        "GET",
        "/api/v1/scenarios/mild-single-state/steady",
        422,
        params={"residence_time": "25 kg"},
    ),  # fmt: skip
    Case(
        "error-steady-unknown-id",
        "computeSteady",
        "POST",
        "/api/v1/steady",
        404,
        json={"scenario_id": "0123456789abcdef"},
    ),  # fmt: skip
    Case(
        "error-branch-unknown-field",
        "computeBranch",
        "POST",
        "/api/v1/branch",
        422,
        json={"scenario_id": SAVED, "alng": "residence_time"},
    ),  # fmt: skip
    Case(
        "error-map-too-many-cells", "getMap", "GET", f"/api/v1/scenarios/{SAVED}/map", 413, params={"points": "600,600"}
    ),  # fmt: skip
    Case("error-map-body-not-json", "computeMap", "POST", "/api/v1/map", 400, content=b"\xff\xfe{"),
    Case(
        "error-check-branch",
        "computeCheck",
        "POST",
        "/api/v1/check",
        422,
        json={"scenario_id": SAVED, "branch": "middle"},
    ),  # fmt: skip
    Case(
        "error-branch-along", "getBranch", "GET", f"/api/v1/scenarios/{SAVED}/branch", 422, params={"along": "level"}
    ),  # fmt: skip
    Case("error-check-unknown-id", "getCheck", "GET", "/api/v1/scenarios/0123456789abcdef/check", 404),
    Case(
        "error-simulate-event",
        "computeSimulate",
        "POST",
        "/api/v1/simulate",
        422,
        json={"scenario_id": SAVED, "events": [{"at": "5 min", "do": "explode"}]},
    ),  # fmt: skip
    Case(
        "error-simulate-too-long",
        "getSimulate",
        "GET",
        f"/api/v1/scenarios/{SAVED}/simulate",
        413,
        params={"duration": "30 d"},
    ),  # fmt: skip
]


@pytest.fixture(scope="module")
def api(tmp_path_factory: pytest.TempPathFactory) -> Any:
    settings = Settings(data_dir=tmp_path_factory.mktemp("answers") / "data", executor="thread", workers=2)
    with TestClient(create_app(settings)) as client:
        saved = client.post("/api/v1/scenarios", json=ADIABATIC)
        assert saved.status_code == 201, saved.text
        stored = client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode())
        assert stored.status_code == 201 and stored.json()["dataset_id"] == DATASET, stored.text
        yield client, saved.json()["id"]


def _models() -> dict[str, type[BaseModel]]:
    """Every model an answer can be declared with, by its OpenAPI component name."""
    from exomap.schema.document import ScenarioDoc

    found: dict[str, type[BaseModel]] = {"ErrorBody": ErrorBody, "ScenarioDoc": ScenarioDoc}
    todo: list[type[BaseModel]] = [Answer]
    while todo:
        cls = todo.pop()
        found[cls.__name__] = cls
        todo.extend(cls.__subclasses__())
    return found


def _operation(app: Any, operation: str) -> tuple[str, str, dict[str, Any]]:
    """(path, method, operation object) of ``operation`` in the app's OpenAPI document."""
    for path, item in app.openapi()["paths"].items():
        for method, op in item.items():
            if op.get("operationId") == operation:
                return path, method, op
    raise AssertionError(f"no operation {operation!r} in the OpenAPI document")


def declared(app: Any, operation: str, status: int, media: str = "application/json") -> list[type[BaseModel]]:
    """The models the OpenAPI document declares for ``operation`` answering ``status`` in ``media`` (one, or the
    members of an ``anyOf``; none for a CSV answer); fails when the status or the media type is undocumented."""
    _, _, op = _operation(app, operation)
    documented = op["responses"]
    assert str(status) in documented, f"{operation} answered {status}, which it does not document: {list(documented)}"
    content = documented[str(status)].get("content", {})
    assert media in content, f"{operation} answered {status} as {media}, documented: {list(content)}"
    if media == "text/csv":
        return []
    schema = content[media]["schema"]
    refs = [schema["$ref"]] if "$ref" in schema else [member["$ref"] for member in schema["anyOf"]]
    models = _models()
    out = []
    for ref in refs:
        name = ref.rsplit("/", 1)[1]
        assert name in models, f"{name} is not an answer model (subclass exomap.web.answers.Answer)"
        out.append(models[name])
    return out


def _fill(value: Any, saved: str) -> Any:
    if isinstance(value, str):
        return value.replace(SAVED, saved)
    if isinstance(value, dict):
        return {k: _fill(v, saved) for k, v in value.items()}
    if isinstance(value, list):
        return [_fill(v, saved) for v in value]
    return value


def conform(app: Any, operation: str, response: Any) -> dict[str, Any] | None:
    """Validate one answer against its declared model (strict, no extra key); None for a CSV answer. With
    several declared models (``anyOf``), exactly one must accept it."""
    media = response.headers["content-type"].split(";")[0].strip()
    models = declared(app, operation, response.status_code, media)
    if not models:
        return None
    problems: list[str] = []
    for model in models:
        try:
            model.model_validate_json(response.content, strict=True)
        except ValueError as exc:
            problems.append(f"{model.__name__}: {exc}")
    assert len(problems) == len(models) - 1, "\n".join(problems) or f"{operation}: several models accept it"
    return response.json()


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_every_answer_fits_its_declared_model(api: Any, case: Case) -> None:
    client, saved = api
    kwargs: dict[str, Any] = {"params": _fill(case.params, saved)}
    if case.json is not None:
        kwargs["json"] = _fill(case.json, saved)
    if case.content is not None:
        kwargs["content"] = case.content
        kwargs["headers"] = {"content-type": "application/json"}
    response = client.request(case.method, _fill(case.path, saved), **kwargs)
    assert response.status_code == case.status, response.text[:500]
    body = conform(client.app, case.operation, response)
    if case.status >= 400:
        assert declared(client.app, case.operation, case.status) == [ErrorBody]
    if case.expect is not None:
        assert body is not None and case.expect(body), f"{case.name}: the answer does not show the edge case"


def test_the_cases_call_every_operation_with_success_and_with_an_error(api: Any) -> None:
    client, _ = api
    paths = client.app.openapi()["paths"]
    operations = {op["operationId"] for item in paths.values() for op in item.values()}
    succeeded = {c.operation for c in CASES if c.status < 400}
    failed = {c.operation for c in CASES if c.status >= 400}
    assert operations - succeeded == set(), "operations no case answers successfully"
    assert operations - failed == set(), "operations no case answers with an error"


def test_a_saved_scenario_needs_its_token_and_the_401_is_documented(make_client: Any) -> None:
    client = make_client(save_token="s3cret")
    response = client.post("/api/v1/scenarios", json=ADIABATIC)
    assert response.status_code == 401
    conform(client.app, "saveScenario", response)


def test_past_the_time_budget_the_503_is_documented(make_client: Any) -> None:
    client = make_client(request_time_budget_s=0.001)
    response = client.get("/api/v1/scenarios/adiabatic-second-order/map", params={"points": "60,60"})
    assert response.status_code == 503, response.text[:300]
    conform(client.app, "getMap", response)


# -- edge answers built by the core directly (the routes serialise exactly these) ----------------------------


def test_an_undetermined_check_with_no_state_fits_the_check_model(api: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    """The route's answer when no steady state converged (forced here: every demo has a state everywhere)."""
    import dataclasses

    from exomap.core import steady

    real = steady.steady_states

    def none_found(*args: Any, **kwargs: Any) -> Any:
        return dataclasses.replace(real(*args, **kwargs), states=(), success=False, message="none converged (test)")

    monkeypatch.setattr(steady, "steady_states", none_found)
    client, _ = api
    response = client.get("/api/v1/scenarios/mild-single-state/check", params={"residence_time": "47 min"})
    assert response.status_code == 200, response.text[:300]
    answer = conform(client.app, "getCheck", response)
    assert answer is not None
    assert answer["verdict"] == "undetermined" and answer["states"] == [] and answer["margins"] == {}
    assert answer["safety"] is None and answer["state_index"] is None


def test_an_undetermined_check_with_failed_upsets_fits_the_check_model(
    api: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The route's answer when the integrator cannot follow the upsets (forced here)."""
    from exomap.core import check
    from exomap.core.errors import ConvergenceError

    def fails(*args: Any, **kwargs: Any) -> Any:
        raise ConvergenceError("integrator failed (test)")

    monkeypatch.setattr(check, "simulate", fails)
    client, _ = api
    response = client.get("/api/v1/scenarios/jacketed-first-order/check", params={"residence_time": "47 min"})
    assert response.status_code == 200, response.text[:300]
    answer = conform(client.app, "getCheck", response)
    assert answer is not None and answer["verdict"] == "undetermined"
    assert {u["stop_reason"] for u in answer["upsets"]} == {"solver_failed"}
    assert all(u["peak_temperature_K"] is None for u in answer["upsets"])


def test_no_state_found_fits_the_steady_model(api: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    import dataclasses

    from exomap.core import steady

    real = steady.steady_states

    def none_found(*args: Any, **kwargs: Any) -> Any:
        return dataclasses.replace(real(*args, **kwargs), states=(), success=False, message="none converged (test)")

    monkeypatch.setattr(steady, "steady_states", none_found)
    client, _ = api
    response = client.get("/api/v1/scenarios/mild-single-state/steady", params={"residence_time": "47 min"})
    answer = conform(client.app, "getSteady", response)
    assert answer is not None and answer["states"] == [] and answer["success"] is False


def test_the_answer_enumerations_are_the_cores() -> None:
    import typing

    from exomap.core.dynamics import STARTS
    from exomap.core.events import ACTIONS
    from exomap.core.regions import REGION_KEYS
    from exomap.web import answers

    assert set(typing.get_args(answers.RegionKey)) == set(REGION_KEYS)
    assert set(typing.get_args(answers.Action)) == set(ACTIONS)
    assert set(typing.get_args(answers.Start)) == {*STARTS, "initial"}
    from exomap.core import valve

    statuses = {valve.IN_RANGE, valve.BELOW_RANGE, valve.ABOVE_RANGE, valve.NO_DRIVING_PRESSURE}
    assert set(typing.get_args(answers.SteadyStateAnswer.model_fields["valve_opening_status"].annotation)) == statuses
