"""A plant tool's view: a Python client generated from the committed OpenAPI document (openapi-python-client,
from the package index) calls every operation of the real server, and every answer parses into its typed
model (never an untyped body), every error into the error model.

The client is generated into tmp_path and imported from there (added to sys.path, not installed); the server
is ``exomap serve`` on a free loopback port, as in test_serve.py.
"""

from __future__ import annotations

import importlib
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from test_serve import start, stop
from web_scenarios import ADIABATIC

DOCUMENT = Path(__file__).resolve().parents[2] / "docs" / "openapi.json"
PACKAGE = "exomap_client"


@pytest.fixture(scope="module")
def generated(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    where = tmp_path_factory.mktemp("client")
    config = where / "config.yml"
    # no post hooks: the generator would otherwise run ruff over the output (not needed to import it)
    config.write_text(f"post_hooks: []\npackage_name_override: {PACKAGE}\n", encoding="utf-8")
    run = subprocess.run(
        [
            sys.executable,
            "-m",
            "openapi_python_client",
            "generate",
            "--path",
            str(DOCUMENT),
            "--meta",
            "none",
            "--output-path",
            str(where / PACKAGE),
            "--config",
            str(config),
        ],  # fmt: skip
        capture_output=True,
        text=True,
        timeout=300,
    )
    assert run.returncode == 0, run.stdout + run.stderr
    # the generator warns (and drops types) on schemas it cannot read; there must be none
    assert "Warning" not in run.stdout + run.stderr, run.stdout + run.stderr
    sys.path.insert(0, str(where))
    try:
        yield importlib.import_module(PACKAGE)
    finally:
        sys.path.remove(str(where))
        for name in [m for m in sys.modules if m == PACKAGE or m.startswith(PACKAGE + ".")]:
            del sys.modules[name]


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    proc, url = start(["--data-dir", str(tmp_path_factory.mktemp("store"))])
    try:
        yield url
    finally:
        assert stop(proc) == 0


def _api(name: str) -> Any:
    """An operation module of the generated client, e.g. ``check.get_check``."""
    return importlib.import_module(f"{PACKAGE}.api.{name}")


def _model(name: str) -> Any:
    return getattr(importlib.import_module(f"{PACKAGE}.models"), name)


@pytest.mark.slow
def test_a_generated_client_calls_every_operation_with_typed_answers(generated: Any, server: str) -> None:
    client = generated.Client(base_url=server, timeout=120.0, raise_on_unexpected_status=True)
    called: set[str] = set()

    def call(operation: str, expected: str, *args: Any, **kwargs: Any) -> Any:
        tag, name = operation.split(".")
        response = _api(operation).sync_detailed(*args, client=client, **kwargs)
        assert response.parsed is not None, f"{name}: untyped answer {response.status_code} {response.content[:300]!r}"
        assert type(response.parsed).__name__ == expected, (name, type(response.parsed).__name__)
        called.add(name)
        return response

    health = call("service.get_health", "HealthAnswer").parsed
    assert health.status == "ok"
    call("service.get_version", "VersionAnswer")
    listed = call("scenarios.list_scenarios", "ScenarioList").parsed
    assert {s.name for s in listed.scenarios if s.demo} >= {"jacketed-first-order", "adiabatic-second-order"}
    doc = call("scenarios.get_scenario", "ScenarioDoc", "jacketed-first-order").parsed
    assert doc.species == ["A", "P"]

    saved = call("scenarios.save_scenario", "ScenarioSummary", body=_model("ScenarioDoc").from_dict(ADIABATIC))
    assert saved.status_code == 201
    sid = saved.parsed.id

    # every computation, POST with a body and GET on a stored scenario
    steady = call(
        "steady.compute_steady",
        "SteadyAnswer",
        body=_model("SteadyRequest").from_dict({"scenario_id": "adiabatic-second-order", "residence_time": "60 min"}),
    ).parsed
    assert [s.stability.value for s in steady.states] == ["stable", "saddle", "stable"]
    call("steady.get_steady", "SteadyAnswer", sid, residence_time="40 min")
    branch = call(
        "branch.compute_branch",
        "BranchAnswer",
        body=_model("BranchRequest").from_dict({"scenario": ADIABATIC, "along": "feed_temperature"}),
    ).parsed
    assert all(isinstance(p.temperature_k, float) for p in branch.points)
    hopf = call("branch.get_branch", "BranchAnswer", "jacketed-first-order", along="residence_time").parsed
    assert hopf.hopf_points and hopf.hopf_points[0].period_s > 0
    grid = call(
        "map_.compute_map", "MapAnswer", body=_model("MapRequest").from_dict({"scenario_id": sid, "points": [10, 8]})
    ).parsed
    assert len(grid.region) == 8 and len(grid.region[0]) == 10
    call("map_.get_map", "MapAnswer", "jacketed-first-order", points="12,12")
    check = call(
        "check.compute_check",
        "CheckAnswer",
        body=_model("CheckRequest").from_dict({"scenario_id": "jacketed-first-order"}),
    ).parsed
    assert check.verdict.value in ("inside", "marginal", "outside", "undetermined")
    assert all(type(u).__name__ == "UpsetAnswer" for u in check.upsets)
    assert type(check.margins.mtsr_to_max_k).__name__ == "MarginAnswer"
    call("check.get_check", "CheckAnswer", "adiabatic-second-order", residence_time="60 min")
    sim = call(
        "simulate.compute_simulate",
        "SimulateAnswer",
        body=_model("SimulateRequest").from_dict(
            {
                "scenario_id": sid,
                "duration": "20 min",
                "events": [{"at": "5 min", "add": "feed_temperature", "value": "5 K"}],
            }  # fmt: skip
        ),
    ).parsed
    assert type(sim.events[0].event).__name__ == "AddEvent"
    call("simulate.get_simulate", "SimulateAnswer", sid, duration="10 min")
    call(
        "compare.compute_compare",
        "CompareAnswer",
        body=_model("CompareRequest").from_dict(
            {"a": {"scenario_id": sid}, "b": {"scenario_id": sid, "residence_time": "50 min"}, "points": [8, 8]}
        ),
    )
    compared = call(
        "compare.get_compare", "CompareAnswer", a="mild-single-state", b=sid, points="8,8", checks="false"
    ).parsed
    assert compared.checks is None and compared.fields

    # plant data: upload a historian export, its summary, replay, overlay, calibrate
    import io

    from test_answers import PLANT_CSV, PLANT_MAP

    file_type = importlib.import_module(f"{PACKAGE}.types").File
    upload = file_type(payload=io.BytesIO(PLANT_CSV.encode()), file_name="plant.csv", mime_type="text/csv")
    stored = call("plant_data.save_dataset", "DatasetAnswer", body=upload, map_=PLANT_MAP)
    assert stored.status_code in (200, 201) and stored.parsed.records == 30
    did = stored.parsed.dataset_id
    call("plant_data.get_dataset", "DatasetAnswer", did)
    plant = {"scenario_id": "jacketed-first-order", "dataset_id": did}
    replayed = call("plant_data.compute_replay", "ReplayAnswer", body=_model("PlantRequest").from_dict(plant)).parsed
    assert replayed.residual_statistics.additional_properties["reactor_temperature_K"].count == 30
    part = call(
        "plant_data.compute_replay",
        "ReplayAnswer",
        body=_model("PlantRequest").from_dict({**plant, "start": "2026-11-30T06:10:00Z", "end": 1796019600.0}),
    ).parsed
    assert part.window.records == 11 and part.window.offset_s == 600.0 and len(part.time_s) == 11
    path = call(
        "plant_data.compute_overlay",
        "OverlayAnswer",
        body=_model("OverlayRequest").from_dict({**plant, "max_points": 10}),
    ).parsed
    assert path.records == 30 and path.stride == 4 and len(path.time_s) == 9
    fitted = call(
        "plant_data.compute_calibrate",
        "CalibrationAnswer",
        body=_model("CalibrateRequest").from_dict({**plant, "fit": ["jacket.ua"]}),
    ).parsed
    assert fitted.estimates[0].target == "jacket.ua"

    # errors parse into the error model
    missing = call("scenarios.get_scenario", "ErrorBody", "0123456789abcdef")
    assert missing.status_code == 404 and missing.parsed.error.code == "not_found"
    bad = call("check.get_check", "ErrorBody", sid, residence_time="25 kg")
    assert bad.status_code == 422 and bad.parsed.error.fields[0].field == "residence_time"
    too_big = call(
        "map_.compute_map", "ErrorBody", body=_model("MapRequest").from_dict({"scenario_id": sid, "points": [900, 900]})
    )
    assert too_big.status_code == 413

    # every operation of the document was called
    operations = [p.stem for p in (Path(generated.__file__).parent / "api").glob("*/*.py") if p.stem != "__init__"]
    assert set(operations) == called, set(operations) ^ called
