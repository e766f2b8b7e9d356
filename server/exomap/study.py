"""Batch studies (DESIGN.md §14): many scenarios x setpoints x analyses, on a local process pool or a Dask cluster.

A study document (format ``exomap-study/1``, see README "Batch studies") names scenarios, setpoints and analyses.
``plan_study`` turns it into ``Case`` objects, one per (scenario, setpoint, analysis), each with a stable ``key``
built from the scenario's content id, the setpoint in SI and the analysis with its options. ``run_study`` runs
the cases that the results file does not hold yet and appends one JSON line per case as soon as it finishes:

    {"key": ..., "scenario": "adiabatic-second-order", "scenario_id": "...", "title": "...",
     "setpoint": {"residence_time_s": ..., "feed_temperature_K": ..., "branch": null} | null,
     "analysis": "check", "options": {...}, "status": "ok" | "failed", "answer": {...} | null,
     "error": {"kind": ..., "message": ..., "field": ...} | null, "elapsed_s": ...}

``answer`` is the same document as ``exomap check --json`` (or ``map``, ``steady``) and the HTTP API, with
non-finite numbers written as null as the API does. A case that fails (a solver error, bad input, a worker that
died) is written with ``status: failed`` and the others go on. A rerun reads the file, skips every key already
written (``retry_failed`` runs the failed ones again; the last line of a key is the one that counts) and drops a
last line cut off by a crash, so a study interrupted at any moment resumes where it stopped.

This module orchestrates; the numbers come from the core, scenarios from the schema layer and, for stored ids and
"all saved", from the scenario store (``exomap.web.store``: standard library and psycopg only, no web framework).
Analyses live in a registry (``ANALYSES``): ``check``, ``steady`` and ``map``; with a ``samples`` option a check
or a map runs under the scenario's uncertain kinetics (DESIGN.md §11, as ``--samples`` of the CLI) when the
installed core has that work (``exomap.core.uncertain_check``, ``exomap.core.uncertainty``).
"""

from __future__ import annotations

import json
import math
import os
import re
import time
from collections import OrderedDict
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from importlib import util as import_util
from pathlib import Path
from typing import Any

FORMAT = "exomap-study/1"

#: How a scenario reference that is 16 hex digits is read: a content id in the store.
_SCENARIO_ID = re.compile(r"^[0-9a-f]{16}$")


class StudyError(ValueError):
    """The study document (or the command line) is not valid; ``errors`` holds one message per field."""

    def __init__(self, field_name: str, message: str) -> None:
        super().__init__(f"{field_name}: {message}")
        self.errors = [{"field": field_name, "message": message}]


# -- analyses ---------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Analysis:
    """One kind of answer a study can ask for.

    ``per_setpoint``: run once per setpoint (check, steady) or once per scenario over its window (maps, whose
    lines have ``setpoint: null``). ``options`` reads the analysis' options from the study document into SI
    values (raising ``StudyError`` naming the field); ``run(sc, setpoint, options)`` returns the answer document.
    """

    name: str
    per_setpoint: bool
    options: Callable[[dict[str, Any], str], dict[str, Any]]
    run: Callable[[Any, dict[str, Any] | None, dict[str, Any]], dict[str, Any]]


def _no_options(raw: dict[str, Any], where: str) -> dict[str, Any]:
    if raw:
        raise StudyError(f"{where}.{sorted(raw)[0]}", "this analysis takes no options")
    return {}


def _sampling_options(raw: dict[str, Any], where: str, module: str) -> dict[str, Any]:
    """``samples`` (a whole number; 0 = the count of the scenario's uncertainty block) and ``seed``: the
    analysis under uncertain kinetics (DESIGN.md §11), as ``--samples``/``--seed`` of the CLI."""
    out: dict[str, Any] = {}
    if "samples" not in raw and "seed" not in raw:
        return out
    if import_util.find_spec(module) is None:
        raise StudyError(f"{where}.samples", "this installation has no uncertain-kinetics analyses")
    if "seed" in raw and "samples" not in raw:
        raise StudyError(f"{where}.seed", "seed applies to sampling: give samples as well")
    for key in ("samples", "seed"):
        if key in raw:
            value = raw[key]
            if not isinstance(value, int) or isinstance(value, bool) or value < 0:
                raise StudyError(f"{where}.{key}", "expected a whole number >= 0")
            out[key] = value
    return out


def _check_options(raw: dict[str, Any], where: str) -> dict[str, Any]:
    for key in raw:
        if key not in ("samples", "seed"):
            raise StudyError(f"{where}.{key}", "unknown option; a check takes samples and seed")
    return _sampling_options(raw, where, "exomap.core.uncertain_check")


def _quantity(value: Any, dimension: str, where: str) -> float:
    from exomap.schema import parse_quantity
    from exomap.schema.errors import ScenarioError

    try:
        return float(parse_quantity(value, dimension, where))
    except ScenarioError as exc:
        raise StudyError(where, exc.errors[0]["message"]) from None


def _window_options(raw: dict[str, Any], where: str) -> dict[str, Any]:
    """Options of a map: ``residence_time`` and ``feed_temperature`` ranges, ``points``, ``spacing``, and
    ``samples``/``seed`` for the probability map under uncertain kinetics."""
    known = {"residence_time", "feed_temperature", "points", "spacing", "samples", "seed"}
    for key in raw:
        if key not in known:
            raise StudyError(f"{where}.{key}", f"unknown option; expected one of {', '.join(sorted(known))}")
    out: dict[str, Any] = {}
    for key, dimension in (("residence_time", "time"), ("feed_temperature", "temperature")):
        if key in raw:
            value = raw[key]
            if not isinstance(value, list) or len(value) != 2:
                raise StudyError(f"{where}.{key}", "expected [low, high], e.g. ['5 min', '200 min']")
            out[key] = [_quantity(v, dimension, f"{where}.{key}[{i}]") for i, v in enumerate(value)]
    if "points" in raw:
        points = raw["points"]
        if not (isinstance(points, list) and len(points) == 2 and all(isinstance(p, int) and p >= 2 for p in points)):
            raise StudyError(f"{where}.points", "expected [n_residence_time, n_feed_temperature], integers >= 2")
        out["points"] = list(points)
    if "spacing" in raw:
        if raw["spacing"] not in ("log", "linear"):
            raise StudyError(f"{where}.spacing", "expected 'log' or 'linear'")
        out["spacing"] = raw["spacing"]
    out.update(_sampling_options(raw, where, "exomap.core.uncertainty"))
    return out


def _window_arguments(options: dict[str, Any]) -> dict[str, Any]:
    """The keyword arguments of ``operating_map`` (and ``uncertainty_map``) from a map's options."""
    return {
        "tau_range": tuple(options["residence_time"]) if "residence_time" in options else None,
        "T_in_range": tuple(options["feed_temperature"]) if "feed_temperature" in options else None,
        "points": tuple(options["points"]) if "points" in options else None,
        "spacing": options.get("spacing", "log"),
    }


def _run_check(sc: Any, setpoint: dict[str, Any] | None, options: dict[str, Any]) -> dict[str, Any]:
    assert setpoint is not None
    point = {"tau": setpoint["residence_time_s"], "T_in": setpoint["feed_temperature_K"], "branch": setpoint["branch"]}
    if "samples" in options:  # as exomap check --samples N [--seed S]
        from exomap.core.uncertain_check import uncertain_check  # type: ignore[import-not-found,unused-ignore]

        return uncertain_check(sc, samples=options["samples"] or None, seed=options.get("seed"), **point).to_dict()
    from exomap.core.check import check_setpoint

    return check_setpoint(sc, **point).to_dict()


def _run_steady(sc: Any, setpoint: dict[str, Any] | None, options: dict[str, Any]) -> dict[str, Any]:
    from exomap.core.steady import steady_states

    assert setpoint is not None
    return steady_states(sc, setpoint["residence_time_s"], setpoint["feed_temperature_K"]).to_dict()


def _run_map(sc: Any, setpoint: dict[str, Any] | None, options: dict[str, Any]) -> dict[str, Any]:
    if "samples" in options:  # as exomap map --samples N [--seed S]: the probability map
        from exomap.core.uncertainty import uncertainty_map  # type: ignore[import-not-found,unused-ignore]

        return uncertainty_map(
            sc, samples=options["samples"] or None, seed=options.get("seed"), **_window_arguments(options)
        ).to_dict()
    from exomap.core.opmap import operating_map

    return operating_map(sc, **_window_arguments(options)).to_dict()


ANALYSES: dict[str, Analysis] = {}


def register(analysis: Analysis) -> None:
    """Add an analysis to the registry (a later one of the same name replaces the earlier)."""
    ANALYSES[analysis.name] = analysis


register(Analysis("check", True, _check_options, _run_check))
register(Analysis("steady", True, _no_options, _run_steady))
register(Analysis("map", False, _window_options, _run_map))


# -- the plan ---------------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Case:
    """One (scenario, setpoint, analysis) of a study: everything a worker needs, all picklable."""

    key: str
    scenario: str  # the reference as the study wrote it (demo name, id, file)
    scenario_id: str
    title: str
    document: str  # canonical JSON of the scenario
    setpoint: dict[str, Any] | None
    analysis: str
    options: dict[str, Any]


@dataclass
class Plan:
    """The cases of a study, and lines already known to fail (scenarios that could not be read)."""

    title: str
    cases: list[Case] = field(default_factory=list)
    unreadable: list[dict[str, Any]] = field(default_factory=list)

    @property
    def keys(self) -> list[str]:
        return [c.key for c in self.cases] + [r["key"] for r in self.unreadable]


def case_key(scenario_id: str, setpoint: dict[str, Any] | None, analysis: str, options: dict[str, Any]) -> str:
    """The stable key of a case: content id, setpoint in SI (exact float reprs), analysis and its options."""
    if setpoint is None:
        where = "window"
    else:
        where = (
            f"tau={setpoint['residence_time_s']!r},T_in={setpoint['feed_temperature_K']!r},"
            f"branch={setpoint['branch'] or '-'}"
        )
    return f"{scenario_id}/{where}/{analysis}/{json.dumps(options, sort_keys=True, separators=(',', ':'))}"


def load_study(path: Path) -> dict[str, Any]:
    """The JSON document of a study file."""
    try:
        text = Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise StudyError("study", f"cannot read {path}: {exc.strerror}") from None
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise StudyError(
            "study", f"{path} is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}"
        ) from None
    if not isinstance(doc, dict):
        raise StudyError("study", f"{path} is not a JSON object")
    return doc


@dataclass(frozen=True)
class _Scenario:
    ref: str
    sid: str
    title: str
    document: str


class _StoreAccess:
    """The scenario store, opened only when a study names a stored id or "all saved"."""

    def __init__(self, store: str | None) -> None:
        self.spec = store
        self._database: Any = None
        self._demos: dict[str, Any] | None = None

    def _open(self) -> Any:
        if self._database is None:
            from exomap.web.store import SQLiteDatabase, StoreUnavailableError, open_database

            spec = self.spec
            if spec is None:
                spec = os.environ.get("EXOMAP_DATABASE_URL") or os.environ.get("EXOMAP_DATA_DIR") or "data"
            try:
                if "://" in spec:
                    self._database = open_database(spec, Path("."))
                else:
                    path = Path(spec) / SQLiteDatabase.FILE_NAME
                    if not path.is_file():
                        raise StudyError("store", f"no scenario store at {path} (give --store DIR or URL)")
                    self._database = open_database(None, Path(spec))
            except StoreUnavailableError as exc:
                raise StudyError("store", str(exc)) from None
        return self._database

    def demos_by_id(self) -> dict[str, Any]:
        if self._demos is None:
            from exomap.web.store import load_demos

            self._demos = {d.id: d for d in load_demos()}
        return self._demos

    def get(self, sid: str) -> tuple[str, str] | None:
        demo = self.demos_by_id().get(sid)
        if demo is not None:
            return demo.title, demo.document
        row = self._open().fetch(sid)
        return None if row is None else (row.title, row.document)

    def all_saved(self) -> list[tuple[str, str, str]]:
        return [(r.id, r.title, r.document) for r in self._open().fetch_all()]

    def close(self) -> None:
        if self._database is not None:
            self._database.close()


def _canonical(doc: dict[str, Any], ref: str) -> _Scenario:
    from exomap import schema

    parsed = schema.parse_scenario(doc)
    return _Scenario(ref, schema.scenario_id(parsed), str(parsed.title or ""), schema.canonical_json(parsed))


def _demo_names() -> list[str]:
    from importlib import resources

    try:
        folder = resources.files("exomap.demos")
    except ModuleNotFoundError:  # pragma: no cover - broken installation
        return []
    return sorted(p.name[: -len(".json")] for p in folder.iterdir() if p.name.endswith(".json"))


def _resolve_scenarios(entries: Any, base_dir: Path, store: _StoreAccess) -> Iterator[_Scenario | dict[str, Any]]:
    """Each scenario of the study, or ``{"ref", "message"}`` for one that cannot be read."""
    from importlib import resources

    from exomap.schema.errors import ScenarioError

    if not isinstance(entries, list) or not entries:
        raise StudyError("scenarios", "expected a non-empty list of demo names, ids, files or 'all saved'")
    demos = _demo_names()
    for i, entry in enumerate(entries):
        where = f"scenarios[{i}]"
        kind, value = "auto", entry
        if isinstance(entry, dict):
            if len(entry) != 1 or next(iter(entry)) not in ("demo", "id", "file", "saved"):
                raise StudyError(where, "expected a string or one of {demo: ...}, {id: ...}, {file: ...}, {saved: all}")
            kind, value = next(iter(entry.items()))
        if not isinstance(value, str) or not value.strip():
            raise StudyError(where, "expected a demo name, a scenario id, a file path or 'all saved'")
        if kind == "saved" or (kind == "auto" and value.strip().lower() in ("all saved", "saved")):
            for sid, title, document in store.all_saved():
                yield _Scenario(f"saved:{sid}", sid, title, document)
            continue
        if kind in ("demo", "auto") and value in demos:
            text = (resources.files("exomap.demos") / f"{value}.json").read_text(encoding="utf-8")
            yield _canonical(json.loads(text), value)
            continue
        path = Path(value) if Path(value).is_absolute() else base_dir / value
        if kind in ("file", "auto") and path.is_file():
            try:
                doc = json.loads(path.read_text(encoding="utf-8"))
                if not isinstance(doc, dict):
                    raise ValueError("not a JSON object")
                yield _canonical(doc, value)
            except (OSError, ValueError, ScenarioError) as exc:
                yield {"ref": value, "message": f"{where}: {value} cannot be read as a scenario: {exc}"}
            continue
        if kind in ("id", "auto") and _SCENARIO_ID.match(value):
            found = store.get(value)
            if found is None:
                yield {"ref": value, "message": f"{where}: no stored scenario has the id {value}"}
            else:
                yield _Scenario(value, value, found[0], found[1])
            continue
        if kind == "demo":
            raise StudyError(where, f"no bundled demo {value!r} (demos: {', '.join(demos)})")
        if kind == "file":
            raise StudyError(where, f"no file {path}")
        raise StudyError(
            where, f"{value!r} is not a demo ({', '.join(demos)}), a file, a 16-hex-digit id, nor 'all saved'"
        )


def _setpoints(raw: Any, sc: Any) -> list[dict[str, Any]]:
    """The setpoints of one scenario in SI; a missing coordinate is the scenario's own."""
    own = {"residence_time_s": float(sc.tau_nominal), "feed_temperature_K": float(sc.T_in), "branch": None}
    if raw is None:
        return [own]
    if isinstance(raw, dict):  # a grid: every residence time with every feed temperature
        unknown = set(raw) - {"residence_time", "feed_temperature", "branch"}
        if unknown:
            raise StudyError(f"setpoints.{sorted(unknown)[0]}", "unknown; a grid has residence_time, feed_temperature")
        taus = raw.get("residence_time", [None])
        tins = raw.get("feed_temperature", [None])
        for name, values in (("residence_time", taus), ("feed_temperature", tins)):
            if not isinstance(values, list) or not values:
                raise StudyError(f"setpoints.{name}", "expected a non-empty list of values")
        points = [{"residence_time": t, "feed_temperature": f, "branch": raw.get("branch")} for t in taus for f in tins]
        grid = True
    elif isinstance(raw, list) and raw:
        points = raw
        grid = False
    else:
        raise StudyError("setpoints", "expected a list of setpoints or a grid {residence_time: [...], ...}")
    out = []
    for i, point in enumerate(points):
        where = "setpoints" if grid else f"setpoints[{i}]"
        if not isinstance(point, dict):
            raise StudyError(where, "expected {residence_time, feed_temperature, branch} (each optional)")
        unknown = set(point) - {"residence_time", "feed_temperature", "branch"}
        if unknown:
            raise StudyError(f"{where}.{sorted(unknown)[0]}", "unknown; expected residence_time, feed_temperature")
        sp = dict(own)
        if point.get("residence_time") is not None:
            sp["residence_time_s"] = _quantity(point["residence_time"], "time", f"{where}.residence_time")
        if point.get("feed_temperature") is not None:
            sp["feed_temperature_K"] = _quantity(point["feed_temperature"], "temperature", f"{where}.feed_temperature")
        if point.get("branch") is not None:
            if point["branch"] not in ("low", "high"):
                raise StudyError(f"{where}.branch", "expected 'low' or 'high'")
            sp["branch"] = point["branch"]
        out.append(sp)
    return out


def _analyses(raw: Any) -> list[tuple[str, dict[str, Any]]]:
    if raw is None:
        raw = ["check"]
    if not isinstance(raw, list) or not raw:
        raise StudyError("analyses", f"expected a list of analyses ({', '.join(ANALYSES)})")
    out = []
    for i, entry in enumerate(raw):
        where = f"analyses[{i}]"
        if isinstance(entry, str):
            name, options = entry, {}
        elif isinstance(entry, dict) and isinstance(entry.get("name"), str):
            name = entry["name"]
            options = {k: v for k, v in entry.items() if k != "name"}
        else:
            raise StudyError(where, "expected a name or {name: ..., options...}")
        if name not in ANALYSES:
            raise StudyError(f"{where}.name", f"unknown analysis {name!r}; this installation has {', '.join(ANALYSES)}")
        out.append((name, ANALYSES[name].options(options, where)))
    return out


def plan_study(doc: dict[str, Any], *, base_dir: Path = Path("."), store: str | None = None) -> Plan:
    """The cases of a study document.

    ``base_dir`` is where relative scenario files are looked for (the study file's folder); ``store`` names the
    scenario store for ids and "all saved" (a data folder or a database URL; default: the document's ``store``,
    else ``EXOMAP_DATABASE_URL``, else ``EXOMAP_DATA_DIR``, else ``./data``).
    """
    if doc.get("format") != FORMAT:
        raise StudyError("format", f"expected {FORMAT!r}")
    unknown = set(doc) - {"format", "title", "description", "scenarios", "setpoints", "analyses", "store"}
    if unknown:
        raise StudyError(sorted(unknown)[0], "unknown field of a study")
    analyses = _analyses(doc.get("analyses"))
    access = _StoreAccess(store if store is not None else doc.get("store"))
    plan = Plan(title=str(doc.get("title") or ""))
    seen: set[str] = set()
    try:
        for entry in _resolve_scenarios(doc.get("scenarios"), base_dir, access):
            if isinstance(entry, dict):
                for name, options in analyses:
                    key = f"unreadable:{entry['ref']}/{name}"
                    plan.unreadable.append(_failed_record(key, entry["ref"], None, name, options, entry["message"]))
                continue
            sc = _core(entry.sid, entry.document)
            setpoints = _setpoints(doc.get("setpoints"), sc)
            for name, options in analyses:
                for setpoint in setpoints if ANALYSES[name].per_setpoint else [None]:
                    key = case_key(entry.sid, setpoint, name, options)
                    if key in seen:  # the same scenario named twice (a demo and its id): run once
                        continue
                    seen.add(key)
                    plan.cases.append(
                        Case(key, entry.ref, entry.sid, entry.title, entry.document, setpoint, name, options)
                    )
    finally:
        access.close()
    return plan


def _failed_record(
    key: str, ref: str, sid: str | None, analysis: str, options: dict[str, Any], message: str
) -> dict[str, Any]:
    return {
        "key": key,
        "scenario": ref,
        "scenario_id": sid,
        "title": "",
        "setpoint": None,
        "analysis": analysis,
        "options": options,
        "status": "failed",
        "answer": None,
        "error": {"kind": "scenario", "message": message, "field": None},
        "elapsed_s": 0.0,
    }


# -- running one case (in a worker) -----------------------------------------------------------------------------
_CORE_CACHE: OrderedDict[str, Any] = OrderedDict()


def _core(sid: str, document: str) -> Any:
    """The core Scenario of a canonical document, converted once per process."""
    sc = _CORE_CACHE.get(sid)
    if sc is None:
        from exomap import schema

        sc = schema.parse_scenario(json.loads(document)).to_core()
        _CORE_CACHE[sid] = sc
        while len(_CORE_CACHE) > 32:
            _CORE_CACHE.popitem(last=False)
    return sc


def _error_of(exc: BaseException) -> dict[str, Any]:
    from exomap.core import errors

    kinds = (
        (errors.LimitExceededError, "limit"),
        (errors.ModelInputError, "input"),
        (errors.ConvergenceError, "convergence"),
        (errors.BudgetExceededError, "budget"),
    )
    kind = next((k for cls, k in kinds if isinstance(exc, cls)), type(exc).__name__)
    return {"kind": kind, "message": str(exc) or type(exc).__name__, "field": getattr(exc, "field", None)}


def run_case(case: Case) -> dict[str, Any]:
    """Run one case and return its result line (as a dict); never raises for a failure of the case itself."""
    started = time.perf_counter()
    record: dict[str, Any] = {
        "key": case.key,
        "scenario": case.scenario,
        "scenario_id": case.scenario_id,
        "title": case.title,
        "setpoint": case.setpoint,
        "analysis": case.analysis,
        "options": case.options,
    }
    try:
        sc = _core(case.scenario_id, case.document)
        answer = ANALYSES[case.analysis].run(sc, case.setpoint, case.options)
    except Exception as exc:  # noqa: BLE001 - one failing case is recorded as failed, the study goes on
        record.update(status="failed", answer=None, error=_error_of(exc))
    else:
        record.update(status="ok", answer=answer, error=None)
    record["elapsed_s"] = round(time.perf_counter() - started, 6)
    return record


def _plain(obj: Any) -> Any:
    tolist = getattr(obj, "tolist", None)
    if callable(tolist):
        return tolist()
    raise TypeError(f"{type(obj).__name__} is not JSON serialisable")


def _finite(obj: Any) -> Any:
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _finite(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_finite(v) for v in obj]
    tolist = getattr(obj, "tolist", None)
    if callable(tolist):
        return _finite(tolist())
    return obj


def dumps_line(record: dict[str, Any]) -> str:
    """One compact, strict JSON line (non-finite numbers become null, as in the HTTP API's answers)."""
    try:
        return json.dumps(record, allow_nan=False, default=_plain, separators=(",", ":"))
    except ValueError:
        return json.dumps(_finite(record), allow_nan=False, separators=(",", ":"))


# -- the results file -------------------------------------------------------------------------------------------
def read_results(path: Path) -> dict[str, dict[str, Any]]:
    """The last line of each key in a results file (empty when there is none); a cut-off last line is dropped."""
    out: dict[str, dict[str, Any]] = {}
    if not path.exists():
        return out
    with path.open("r", encoding="utf-8") as f:
        for line in f:
            if not line.endswith("\n"):
                break  # cut off by a crash while it was written: never acknowledged
            try:
                record = json.loads(line)
            except json.JSONDecodeError:
                continue
            if isinstance(record, dict) and isinstance(record.get("key"), str):
                out[record["key"]] = record
    return out


def _open_for_append(path: Path) -> Any:
    """The results file opened for appending, after cutting a last line left half-written by a crash."""
    path.parent.mkdir(parents=True, exist_ok=True)
    if path.exists():
        with path.open("rb+") as f:
            data = f.read()
            if data and not data.endswith(b"\n"):
                f.truncate(data.rfind(b"\n") + 1)
    return path.open("a", encoding="utf-8")


# -- executors --------------------------------------------------------------------------------------------------
class _LocalPool:
    """A concurrent.futures process pool (the default)."""

    def __init__(self, workers: int) -> None:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        # forkserver: workers start from a clean process, never a fork of one holding threads or a database
        # pool; the server process imports the core once, so each worker starts ready.
        self._context = multiprocessing.get_context("forkserver")
        self._context.set_forkserver_preload(["exomap.study", "exomap.schema", "exomap.core.check"])
        self._executor = ProcessPoolExecutor
        self.workers = workers
        self._pool = self._executor(max_workers=workers, mp_context=self._context)

    def submit(self, case: Case) -> Any:
        from concurrent.futures.process import BrokenProcessPool

        try:
            return self._pool.submit(run_case, case)
        except BrokenProcessPool:
            # a worker died (its cases are recorded as failed): a fresh pool for the rest
            self._pool.shutdown(wait=False, cancel_futures=True)
            self._pool = self._executor(max_workers=self.workers, mp_context=self._context)
            return self._pool.submit(run_case, case)

    def wait(self, futures: set[Any]) -> set[Any]:
        from concurrent.futures import FIRST_COMPLETED, wait

        done, _ = wait(futures, return_when=FIRST_COMPLETED)
        return set(done)

    def close(self) -> None:
        self._pool.shutdown(wait=True, cancel_futures=True)


class _DaskPool:
    """An existing Dask cluster, through a ``dask.distributed.Client`` on its scheduler."""

    def __init__(self, address: str, workers: int | None) -> None:
        try:
            from dask.distributed import Client
        except ImportError:
            raise StudyError("--scheduler", "dask.distributed is not installed: pip install 'exomap[dask]'") from None
        try:
            self._client = Client(address, timeout=10, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise StudyError("--scheduler", f"cannot reach the Dask scheduler at {address}: {exc}") from None
        from dask.distributed import as_completed

        if workers is None:
            workers = sum(self._client.nthreads().values()) or 1
        self.workers = workers
        self._finished = as_completed(loop=self._client.loop)

    def submit(self, case: Case) -> Any:
        # pure=False: a rerun of a failed case really runs again
        future = self._client.submit(run_case, case, pure=False)
        self._finished.add(future)
        return future

    def wait(self, futures: set[Any]) -> set[Any]:
        # as_completed follows the futures of this client (distributed.wait would need a default client)
        return set(self._finished.next_batch(block=True))

    def close(self) -> None:
        self._client.close()


@dataclass
class Progress:
    """What ``run_study`` reports after each case: counts and times [s]."""

    total: int
    skipped: int
    done: int = 0
    failed: int = 0
    elapsed: float = 0.0

    @property
    def eta(self) -> float | None:
        """Seconds left at the pace so far (None before the first case finishes)."""
        if self.done == 0:
            return None
        return self.elapsed / self.done * (self.total - self.skipped - self.done)


def run_study(
    plan: Plan,
    out: Path,
    *,
    scheduler: str | None = None,
    workers: int | None = None,
    retry_failed: bool = False,
    progress: Callable[[Progress], None] | None = None,
) -> Progress:
    """Run the cases of ``plan`` that ``out`` does not hold yet, appending one line each; return the counts.

    ``scheduler``: the address of a Dask scheduler (``tcp://host:8786``); None runs on a local process pool of
    ``workers`` processes (default: the number of CPUs). At most a few cases per worker are in flight, so an
    interrupted study loses only those.
    """
    out = Path(out)
    written = read_results(out)
    todo = [
        c for c in plan.cases if c.key not in written or (retry_failed and written[c.key].get("status") == "failed")
    ]
    unreadable = [r for r in plan.unreadable if r["key"] not in written]
    state = Progress(total=len(plan.cases) + len(plan.unreadable), skipped=len(plan.keys) - len(todo) - len(unreadable))
    pool: _LocalPool | _DaskPool | None = None
    if todo:  # first, so that an unreachable scheduler is said before anything is drawn or written
        pool = _DaskPool(scheduler, workers) if scheduler else _LocalPool(workers or os.cpu_count() or 1)
    started = time.perf_counter()
    try:
        with _open_for_append(out) as f:

            def write(record: dict[str, Any]) -> None:
                f.write(dumps_line(record) + "\n")
                f.flush()
                os.fsync(f.fileno())  # the line is on disk before the case counts as done
                state.done += 1
                state.failed += record["status"] != "ok"
                state.elapsed = time.perf_counter() - started
                if progress is not None:
                    progress(state)

            for record in unreadable:
                write(record)
            if progress is not None:
                progress(state)
            if pool is not None:
                _drain(pool, todo, write)
    finally:
        if pool is not None:
            pool.close()
    return state


def _drain(pool: _LocalPool | _DaskPool, todo: list[Case], write: Callable[[dict[str, Any]], None]) -> None:
    """Keep a few cases per worker in flight and write each result as it arrives."""
    pending = iter(todo)
    in_flight: dict[Any, Case] = {}
    window = 2 * pool.workers
    while True:
        while len(in_flight) < window:
            case = next(pending, None)
            if case is None:
                break
            in_flight[pool.submit(case)] = case
        if not in_flight:
            return
        for future in pool.wait(set(in_flight)):
            case = in_flight.pop(future)
            try:
                record = future.result()
            except Exception as exc:  # noqa: BLE001 - a worker that died: this case failed, go on
                record = run_case_failed(case, exc)
            write(record)


def run_case_failed(case: Case, exc: BaseException) -> dict[str, Any]:
    """The result line of a case whose worker did not return (killed, lost, out of memory)."""
    return {
        "key": case.key,
        "scenario": case.scenario,
        "scenario_id": case.scenario_id,
        "title": case.title,
        "setpoint": case.setpoint,
        "analysis": case.analysis,
        "options": case.options,
        "status": "failed",
        "answer": None,
        "error": {
            "kind": "worker",
            "message": f"the worker did not return: {type(exc).__name__}: {exc}",
            "field": None,
        },
        "elapsed_s": None,
    }
