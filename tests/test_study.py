"""Batch studies (exomap.study, `exomap study`): the plan, answers equal to the CLI's one by one (on a Dask
LocalCluster), one failing case recorded while the rest go on, resume after a kill, stored scenarios."""

from __future__ import annotations

import json
import math
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from exomap import schema
from exomap.cli import main
from exomap.study import (
    ANALYSES,
    FORMAT,
    StudyError,
    plan_study,
    read_results,
    run_study,
)


def _finite(obj):
    """What the study writes for an answer: strict JSON, non-finite numbers as null (as the HTTP API does)."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, list):
        return [_finite(v) for v in obj]
    return obj


def _cli_json(capsys, *argv: str) -> dict:
    capsys.readouterr()
    assert main(list(argv)) == 0
    return _finite(json.loads(capsys.readouterr().out))


# -- the plan ---------------------------------------------------------------------------------------------------
def test_plan_counts_keys_and_defaults(tmp_path: Path, load_demo) -> None:
    (tmp_path / "tank.json").write_text(json.dumps(load_demo("mild-single-state")))
    doc = {
        "format": FORMAT,
        "scenarios": ["adiabatic-second-order", "tank.json"],
        "setpoints": {"residence_time": ["30 min", "1 h"], "feed_temperature": ["20 degC", "300 K", 310.15]},
        "analyses": ["check", {"name": "map", "points": [20, 10]}],
    }
    plan = plan_study(doc, base_dir=tmp_path)
    # 2 scenarios x (6 setpoints x check + 1 map over the window)
    assert len(plan.cases) == 2 * (6 + 1)
    assert len(set(plan.keys)) == len(plan.keys)
    checks = [c for c in plan.cases if c.analysis == "check"]
    # units converted to SI: 1 h = 3600 s, 20 degC = 293.15 K (analytic)
    assert {c.setpoint["residence_time_s"] for c in checks} == {1800.0, 3600.0}
    assert {round(c.setpoint["feed_temperature_K"], 9) for c in checks} == {293.15, 300.0, 310.15}
    maps = [c for c in plan.cases if c.analysis == "map"]
    assert all(c.setpoint is None and c.options == {"points": [20, 10]} for c in maps)
    # the file is identified by its content: the same id as the demo it copies
    assert plan.cases[-1].scenario_id == schema.scenario_id(load_demo("mild-single-state"))

    # no setpoints: each scenario's own feed
    own = plan_study({"format": FORMAT, "scenarios": ["mild-single-state"], "analyses": ["check"]})
    sc = schema.parse_scenario(load_demo("mild-single-state")).to_core()
    (case,) = own.cases
    assert case.setpoint == {"residence_time_s": sc.tau_nominal, "feed_temperature_K": sc.T_in, "branch": None}


@pytest.mark.parametrize(
    ("change", "field", "words"),
    [
        ({"format": "exomap-study/2"}, "format", "exomap-study/1"),
        ({"analyses": ["chek"]}, "analyses[0].name", "unknown analysis"),
        ({"analyses": [{"name": "map", "points": [1, 5]}]}, "analyses[0].points", "integers >= 2"),
        ({"setpoints": [{"residence_time": "40 kg"}]}, "setpoints[0].residence_time", "time"),
        ({"setpoints": [{"feed_temperature": "30 degC", "branch": "middle"}]}, "setpoints[0].branch", "'low'"),
        ({"scenarios": ["no-such-thing"]}, "scenarios[0]", "not a demo"),
        ({"scenarios": []}, "scenarios", "non-empty"),
        ({"sceanrios": ["x"]}, "sceanrios", "unknown field"),
    ],
)
def test_bad_study_names_the_field(change: dict, field: str, words: str) -> None:
    doc = {"format": FORMAT, "scenarios": ["mild-single-state"], "analyses": ["check"], **change}
    with pytest.raises(StudyError, match=words) as info:
        plan_study(doc)
    assert info.value.errors[0]["field"] == field


def test_registry_has_the_analyses_of_the_design() -> None:
    assert {"check", "map", "steady"} <= set(ANALYSES)
    assert ANALYSES["check"].per_setpoint and not ANALYSES["map"].per_setpoint


# -- equal to the CLI, on a Dask cluster --------------------------------------------------------------------------
def test_study_on_a_dask_cluster_gives_the_cli_answers(tmp_path: Path, capsys) -> None:
    from dask.distributed import LocalCluster

    doc = {
        "format": FORMAT,
        "scenarios": ["mild-single-state", "adiabatic-second-order"],
        "setpoints": [{"residence_time": "50 min"}, {"residence_time": "-5 min"}],
        "analyses": ["check", {"name": "map", "points": [24, 12]}],
    }
    plan = plan_study(doc)
    out = tmp_path / "results.jsonl"
    # in-process workers (threads), no dashboard: nothing listens beyond this process
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None) as cluster:
        state = run_study(plan, out, scheduler=cluster.scheduler_address)
    lines = out.read_text().splitlines()
    assert len(lines) == len(plan.cases) == 2 * (2 + 1)
    assert state.done == 6 and state.failed == 2
    results = read_results(out)
    for case in plan.cases:
        record = results[case.key]
        if case.analysis == "map":
            assert record["status"] == "ok", record["error"]
            expected = _cli_json(capsys, "map", case.scenario, "--points", "24", "12", "--json")
        elif case.setpoint["residence_time_s"] < 0:
            # one failing case is recorded, naming the field, and the others went on
            assert record["status"] == "failed" and record["answer"] is None
            assert record["error"]["kind"] == "input" and record["error"]["field"] == "residence_time"
            continue
        else:
            assert record["status"] == "ok", record["error"]
            expected = _cli_json(capsys, "check", case.scenario, "--residence-time", "50 min", "--json")
        assert record["answer"] == expected, case.key


# -- resume -----------------------------------------------------------------------------------------------------
def _run_cli_study(study: Path, out: Path, *extra: str) -> subprocess.Popen:
    code = "import sys; from exomap.cli import main; sys.exit(main(sys.argv[1:]))"
    return subprocess.Popen(
        [sys.executable, "-c", code, "study", str(study), "--out", str(out), *extra],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,  # its own process group: the kill below takes the pool's workers too
    )


def test_a_study_killed_midway_resumes_where_it_stopped(tmp_path: Path, capsys) -> None:
    study = tmp_path / "study.json"
    study.write_text(
        json.dumps(
            {
                "format": FORMAT,
                "title": "resume",
                "scenarios": ["mild-single-state"],
                "setpoints": {"residence_time": ["20 min", "30 min", "40 min", "50 min", "60 min", "70 min"]},
                "analyses": ["check"],
            }
        )
    )
    out = tmp_path / "out" / "results.jsonl"
    proc = _run_cli_study(study, out, "--workers", "1")
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline and proc.poll() is None:
        if out.exists() and len(out.read_text().splitlines()) >= 2:
            break
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.communicate(timeout=60)
    first = out.read_text().splitlines()
    assert 2 <= len(first) < 6, f"{len(first)} lines: the study was not interrupted midway"
    # a crash in the middle of writing a line leaves a cut-off line: it was never acknowledged
    with out.open("a") as f:
        f.write('{"key": "cut off')

    capsys.readouterr()
    assert main(["study", str(study), "--out", str(out), "--workers", "1"]) == 0
    err = capsys.readouterr().err
    assert f"skipped {len(first)} already written" in err
    lines = out.read_text().splitlines()
    assert lines[: len(first)] == first  # what was written is kept as it was
    keys = [json.loads(line)["key"] for line in lines]
    assert len(keys) == len(set(keys)) == 6
    assert all(json.loads(line)["status"] == "ok" for line in lines)

    # a third run has nothing left to do
    assert main(["study", str(study), "--out", str(out)]) == 0
    assert "skipped 6 already written" in capsys.readouterr().err
    assert out.read_text().splitlines() == lines


# -- stored scenarios -------------------------------------------------------------------------------------------
def test_all_saved_scenarios_of_a_store(tmp_path: Path, database_url: str, load_demo, capsys) -> None:
    from exomap.web.store import ScenarioStore, open_database

    store = ScenarioStore(open_database(database_url, tmp_path))
    docs = []
    for k, name in enumerate(("mild-single-state", "adiabatic-second-order")):
        doc = load_demo(name)
        doc["title"] = f"saved copy {k}"
        docs.append(doc)
        store.save(doc)
    store.close()
    study = tmp_path / "study.json"
    study.write_text(json.dumps({"format": FORMAT, "scenarios": ["all saved"], "analyses": ["steady"]}))
    out = tmp_path / "results.jsonl"
    assert main(["study", str(study), "--out", str(out), "--store", database_url, "--workers", "1"]) == 0
    results = list(read_results(out).values())
    assert sorted(r["scenario_id"] for r in results) == sorted(schema.scenario_id(d) for d in docs)
    for record in results:
        assert record["status"] == "ok"
        # a stored id names the same scenario for the study as for the CLI given its document
        (tmp_path / "one.json").write_text(next(json.dumps(d) for d in docs if d["title"] == record["title"]))
        expected = _cli_json(capsys, "steady", str(tmp_path / "one.json"), "--json")
        assert record["answer"] == expected
    # a stored id that is not there is recorded as failed, and the exit status says so
    missing = tmp_path / "missing.json"
    missing.write_text(json.dumps({"format": FORMAT, "scenarios": ["0123456789abcdef"], "analyses": ["steady"]}))
    assert main(["study", str(missing), "--out", str(tmp_path / "m.jsonl"), "--store", database_url]) == 3
    (record,) = read_results(tmp_path / "m.jsonl").values()
    assert record["status"] == "failed" and "0123456789abcdef" in record["error"]["message"]


def test_samples_run_the_analysis_under_uncertain_kinetics_when_installed(tmp_path: Path, load_demo, capsys) -> None:
    """``samples`` makes a map the probability map of DESIGN.md §11 (exactly the core's answer), or is refused
    naming the field where this installation has no uncertain-kinetics work."""
    from importlib.util import find_spec

    doc = load_demo("adiabatic-second-order")
    doc["uncertainty"] = {
        "parameters": [{"target": "reactions[0].rate_constant", "distribution": "lognormal", "factor": 1.5}]
    }
    study = {
        "format": FORMAT,
        "scenarios": ["tank.json"],
        "analyses": [{"name": "map", "points": [12, 8], "samples": 8}],
    }
    if find_spec("exomap.core.uncertainty") is None:
        with pytest.raises(StudyError, match="no uncertain-kinetics") as info:
            plan_study(study, base_dir=tmp_path)
        assert info.value.errors[0]["field"] == "analyses[0].samples"
        return
    from exomap.core.uncertainty import uncertainty_map
    from exomap.study import dumps_line, run_case

    (tmp_path / "tank.json").write_text(json.dumps(doc))
    (case,) = plan_study(study, base_dir=tmp_path).cases
    record = run_case(case)
    assert record["status"] == "ok", record["error"]
    sc = schema.parse_scenario(doc).to_core()
    want = uncertainty_map(sc, samples=8, points=(12, 8)).to_dict()
    assert json.loads(dumps_line(record))["answer"] == json.loads(dumps_line({"a": want}))["a"]
    # a check with samples is the answer of exomap check --samples N --seed S --json
    check = {"format": FORMAT, "scenarios": ["tank.json"], "analyses": [{"name": "check", "samples": 8, "seed": 3}]}
    (case,) = plan_study(check, base_dir=tmp_path).cases
    record = json.loads(dumps_line(run_case(case)))
    assert record["status"] == "ok", record["error"]
    assert record["answer"]["uncertainty"]["samples"] == 8
    expected = _cli_json(capsys, "check", str(tmp_path / "tank.json"), "--samples", "8", "--seed", "3", "--json")
    assert record["answer"] == expected
