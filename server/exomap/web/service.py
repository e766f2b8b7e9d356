"""What the API routes do, apart from HTTP: find the scenario, turn the request into SI core arguments, check
the limits, look in the answer cache, and run the computation off the event loop within the time budget.

Every request path (POST body or GET query, units or SI) goes through ``Service.answer``, so both spellings of
one question normalise to the same cache key and the same answer bytes.
"""

from __future__ import annotations

import asyncio
import json
import threading
import time
from collections import OrderedDict
from dataclasses import dataclass
from typing import Any

import anyio.to_thread

from exomap.web import jobs
from exomap.web.cache import AnswerCache
from exomap.web.errors import ApiError, unavailable
from exomap.web.models import (
    BranchRequest,
    CheckRequest,
    MapRequest,
    ScenarioRef,
    SimulateRequest,
    SteadyRequest,
)
from exomap.web.runner import BudgetExceeded, Busy, Runner, WorkerLost
from exomap.web.settings import Settings
from exomap.web.store import ScenarioStore

#: Event-syntax dimension names (exomap.core.events) -> the schema layer's dimension names.
EVENT_DIMENSIONS = {"volumetric_flow": "flow", "dimensionless": "fraction"}


def _prefixed(errors: list[dict[str, str]], prefix: str) -> list[dict[str, str]]:
    return [{"field": f"{prefix}.{e['field']}" if prefix else e["field"], "message": e["message"]} for e in errors]


def _sampling_hint(kind: str, params: dict[str, Any]) -> str:
    """What to reduce when a computation under uncertain data runs past the time budget: the time grows in
    proportion to the samples (and, for the map, to the residence-time points)."""
    n = int(params["samples"])
    fewer = max(n // 4, 8)
    if kind == "map":
        points = params.get("points")
        where = f" or fewer points (asked: {points[0]} x {points[1]})" if points else " or fewer points"
        return (
            f"the uncertainty map with {n} samples costs about {n} operating maps' worth of columns: ask for fewer "
            f"samples (samples={fewer}){where}, or run it as a batch study (exomap study) without a time budget"
        )
    return f"the check with {n} samples judges every sample: ask for fewer samples (samples={fewer})"


def invalid(field: str, message: str, code: str = "invalid_input") -> ApiError:
    return ApiError(422, code, f"{field}: {message}", [{"field": field, "message": message}])


def quantity(value: Any, dimension: str, field: str) -> float:
    """An SI float from a number or a unit string; a bad one is a 422 naming the field and the unit."""
    from exomap.schema import ScenarioError
    from exomap.schema.quantity import parse_quantity

    try:
        return float(parse_quantity(value, dimension, field))
    except ScenarioError as exc:
        raise ApiError(422, "invalid_input", str(exc), exc.errors) from None


def event_unit_parser(value: Any, dimension: str, field: str) -> float:
    """``unit_parser`` for ``exomap.core.events.parse_events``: unit strings through the schema layer."""
    from exomap.schema.quantity import parse_quantity

    return float(parse_quantity(value, EVENT_DIMENSIONS.get(dimension, dimension), field))


@dataclass(frozen=True)
class Resolved:
    """A request's scenario: its content id and the core ``Scenario``."""

    id: str
    scenario: Any


class Service:
    """Scenario resolution, parameter normalisation, limits, cache and pool of one app."""

    def __init__(self, settings: Settings, store: ScenarioStore) -> None:
        self.settings = settings
        self.store = store
        self.runner = Runner(settings.workers, settings.executor, settings.max_queued)
        self.cache = AnswerCache(settings.cache_entries, settings.cache_bytes)
        self._scenarios: OrderedDict[str, Any] = OrderedDict()
        self._lock = threading.Lock()
        self._inflight: dict[Any, asyncio.Future] = {}  # cache key -> the computation answering it (event loop)
        #: scenario ids and demo names read from the store before (content ids: the same key is the same
        #: scenario for good), so a repeat does not need the store: see ``known``
        self._stored: dict[str, str] = {}

    # -- scenarios ----------------------------------------------------------------------------------------------
    def _core_of_document(self, doc: dict[str, Any], prefix: str) -> tuple[str, Any]:
        from exomap import schema
        from exomap.core.errors import ModelInputError

        try:
            parsed = schema.parse_scenario(doc)
        except schema.ScenarioError as exc:
            raise ApiError(
                422, "invalid_scenario", "the scenario is not valid; see fields", _prefixed(exc.errors, prefix)
            ) from None
        sid = schema.scenario_id(parsed)
        with self._lock:
            core = self._scenarios.get(sid)
            if core is not None:
                self._scenarios.move_to_end(sid)
                return sid, core
        try:
            core = parsed.to_core()
        except ModelInputError as exc:
            field = f"{prefix}.{exc.field}" if prefix and exc.field else (exc.field or prefix or "scenario")
            raise ApiError(422, "invalid_scenario", str(exc), [{"field": field, "message": str(exc)}]) from None
        except schema.ScenarioError as exc:
            raise ApiError(
                422, "invalid_scenario", "the scenario is not valid; see fields", _prefixed(exc.errors, prefix)
            ) from None
        with self._lock:
            self._scenarios[sid] = core
            while len(self._scenarios) > 64:
                self._scenarios.popitem(last=False)
        return sid, core

    def known(self, ref: ScenarioRef) -> Resolved | None:
        """The request's scenario when it is a stored one already read and converted (memory only, no store
        read, no parsing), else None."""
        if ref.scenario_id is None:
            return None
        with self._lock:
            sid = self._stored.get(ref.scenario_id)
            core = self._scenarios.get(sid) if sid is not None else None
            if core is None:
                return None
            self._scenarios.move_to_end(sid)
        return Resolved(sid, core)

    def resolve(self, ref: ScenarioRef) -> Resolved:
        if ref.scenario_id is not None:
            stored = self.store.get(ref.scenario_id)
            if stored is None:
                raise ApiError(
                    404,
                    "not_found",
                    f"no scenario with id {ref.scenario_id!r}",
                    [{"field": "scenario_id", "message": "no stored scenario has this id"}],
                )
            # A stored scenario's id is its content id: a scenario already converted is not parsed again.
            with self._lock:
                self._stored[ref.scenario_id] = stored.id
                while len(self._stored) > 4 * 64:
                    self._stored.pop(next(iter(self._stored)))
                core = self._scenarios.get(stored.id)
                if core is not None:
                    self._scenarios.move_to_end(stored.id)
                    return Resolved(stored.id, core)
            sid, core = self._core_of_document(json.loads(stored.document), "")
            return Resolved(sid, core)
        assert ref.scenario is not None  # the model validator guarantees one of the two
        sid, core = self._core_of_document(ref.scenario, "scenario")
        return Resolved(sid, core)

    # -- parameters ---------------------------------------------------------------------------------------------
    @staticmethod
    def _point(req: Any, sc: Any) -> tuple[float, float]:
        tau = sc.tau_nominal if req.residence_time is None else quantity(req.residence_time, "time", "residence_time")
        T_in = (
            sc.T_in
            if req.feed_temperature is None
            else quantity(req.feed_temperature, "temperature", "feed_temperature")
        )
        return tau, T_in

    @staticmethod
    def _feed(req: Any, sc: Any) -> tuple[tuple[float, ...] | None, float | None]:
        c_in = None
        if req.feed_concentrations:
            values = list(sc.c_in)
            for name, value in req.feed_concentrations.items():
                field = f"feed_concentrations.{name}"
                if name not in sc.species:
                    raise invalid(field, f"unknown species {name!r}; species: {', '.join(sc.species)}")
                values[sc.species.index(name)] = quantity(value, "concentration", field)
            c_in = tuple(values)
        T_c = None
        if req.coolant_temperature is not None:
            T_c = quantity(req.coolant_temperature, "temperature", "coolant_temperature")
        return c_in, T_c

    @staticmethod
    def _coolant(req: Any, sc: Any) -> dict[str, float]:
        """``{"T_c": ...}`` when the request sets the jacket's coolant temperature (a setpoint input of a
        jacketed tank), else ``{}`` (so an answer without it keeps its cache key)."""
        value = getattr(req, "coolant_temperature", None)
        if value is None:
            return {}
        if not sc.UA_jacket > 0:
            raise invalid("coolant_temperature", "this scenario has no cooling jacket, so no coolant temperature")
        return {"T_c": quantity(value, "temperature", "coolant_temperature")}

    @staticmethod
    def _range(values: list[Any] | None, dimension: str, field: str) -> tuple[float, float] | None:
        if values is None:
            return None
        lo = quantity(values[0], dimension, f"{field}[0]")
        hi = quantity(values[1], dimension, f"{field}[1]")
        if not lo < hi:
            raise invalid(field, f"expected [lo, hi] with lo < hi, got [{lo:g}, {hi:g}] in SI units")
        return lo, hi

    @staticmethod
    def _samples(req: Any, sc: Any) -> dict[str, Any]:
        """``samples``/``seed`` of a request asking for an answer under uncertain data (DESIGN.md §11)."""
        samples, seed = getattr(req, "samples", None), getattr(req, "seed", None)
        if samples is None:
            if seed is not None:
                raise invalid("seed", "a seed applies to sampling: give samples as well")
            return {}
        if getattr(sc, "uncertainty", None) is None:
            raise invalid("samples", "the scenario has no uncertainty block to sample (DESIGN.md §11)")
        if samples & (samples - 1):
            raise invalid("samples", f"expected a power of two (the Sobol sequence is balanced there), got {samples}")
        return {"samples": samples, "seed": seed}

    def params(self, kind: str, req: Any, sc: Any) -> dict[str, Any]:
        """SI keyword arguments of the core call for ``kind``; limits checked (413)."""
        s = self.settings
        if kind == "steady":
            tau, T_in = self._point(req, sc)
            c_in, T_c = self._feed(req, sc)
            return {"tau": tau, "T_in": T_in, "c_in": c_in, "T_c": T_c}
        if kind == "branch":
            tau, T_in = self._point(req, sc)
            c_in, T_c = self._feed(req, sc)
            dim = "time" if req.along == "residence_time" else "temperature"
            rng = self._range(req.range, dim, "range")
            return {
                "along": req.along,
                "tau": tau,
                "T_in": T_in,
                "lo": rng[0] if rng else None,
                "hi": rng[1] if rng else None,
                "c_in": c_in,
                "T_c": T_c,
            }
        if kind == "map":
            tau_range = self._range(req.residence_time, "time", "residence_time")
            T_in_range = self._range(req.feed_temperature, "temperature", "feed_temperature")
            points = tuple(req.points) if req.points is not None else None
            n = points or (sc.map.points if sc.map is not None else (200, 200))
            cells = int(n[0]) * int(n[1])
            if cells > s.max_map_cells:
                raise ApiError(
                    413,
                    "too_many_cells",
                    f"a {n[0]} x {n[1]} map has {cells} cells; the limit is {s.max_map_cells}",
                    [{"field": "points", "message": f"at most {s.max_map_cells} cells (n_tau x n_tin)"}],
                )
            out = {
                "tau_range": tau_range,
                "T_in_range": T_in_range,
                "points": points,
                "spacing": req.spacing,
                **self._coolant(req, sc),
            }
            return out | self._samples(req, sc)
        if kind == "check":
            tau, T_in = self._point(req, sc)
            cap = float(sc.policy.upset_duration)
            if cap > s.max_duration_s:  # each upset is a simulation: the same limit
                raise ApiError(
                    413,
                    "too_long",
                    f"check_policy.upset_duration of {cap:g} s is longer than the limit of one simulation, "
                    f"{s.max_duration_s:g} s",
                    [{"field": "check_policy.upset_duration", "message": f"at most {s.max_duration_s:g} s"}],
                )
            return {"tau": tau, "T_in": T_in, "branch": req.branch, **self._coolant(req, sc)} | self._samples(req, sc)
        if kind == "simulate":
            from exomap.core.events import parse_events

            tau, T_in = self._point(req, sc)
            if req.duration is None:
                duration = float(sc.policy.upset_duration)
            else:
                duration = quantity(req.duration, "time", "duration")
            if not duration > 0:
                raise invalid("duration", f"expected a positive time, got {duration:g} s")
            if duration > s.max_duration_s:
                raise ApiError(
                    413,
                    "too_long",
                    f"a {duration:g} s simulation is longer than the limit of {s.max_duration_s:g} s",
                    [{"field": "duration", "message": f"at most {s.max_duration_s:g} s"}],
                )
            if len(req.events) > s.max_events:
                raise ApiError(
                    413,
                    "too_many_events",
                    f"{len(req.events)} events; the limit is {s.max_events}",
                    [{"field": "events", "message": f"at most {s.max_events} events"}],
                )
            events = parse_events(req.events, event_unit_parser, species=sc.species, duration=duration)
            return {
                "tau": tau,
                "T_in": T_in,
                "start": req.start,
                "events": events,
                "duration": duration,
                **self._coolant(req, sc),
            }
        raise ValueError(f"unknown kind {kind!r}")

    # -- answers ------------------------------------------------------------------------------------------------
    def prepare(self, kind: str, req: Any, resolved: Resolved | None = None) -> tuple[Resolved, dict[str, Any]]:
        """The request's scenario (``resolved``, or read and parsed now) and the SI arguments of its core call
        (blocking: parsing, store, pint)."""
        from exomap import schema
        from exomap.core.errors import LimitExceededError, ModelInputError

        if resolved is None:
            resolved = self.resolve(req)
        try:
            params = self.params(kind, req, resolved.scenario)
        except LimitExceededError as exc:
            raise self._limit(exc) from None
        except ModelInputError as exc:
            raise self._input(exc) from None
        except schema.ScenarioError as exc:
            raise ApiError(422, "invalid_input", str(exc), exc.errors) from None
        return resolved, params

    async def answer(self, kind: str, req: Any, fmt: str = "json") -> tuple[jobs.Answer, bool]:
        """The serialised answer of one request and whether it came from the cache.

        Everything that can take time runs off the event loop and inside the request's time budget: reading
        and parsing the scenario (inline or stored) and its parameters in a thread, the computation in the
        runner. Only a stored scenario already in memory, with no events to parse, is prepared on the event
        loop (``known``). Identical requests in flight at once (the cache key) share one computation.
        """
        budget = self.settings.request_time_budget_s
        deadline = time.monotonic() + budget
        known = self.known(req)
        if known is not None and not getattr(req, "events", None):
            # the usual repeat: a stored scenario already converted, a handful of quantities (tens of µs each):
            # done here, without two thread switches per request that would cost the event loop more
            resolved, params = self.prepare(kind, req, known)
        else:
            try:
                with anyio.fail_after(budget):
                    resolved, params = await anyio.to_thread.run_sync(self.prepare, kind, req, abandon_on_cancel=True)
            except TimeoutError:
                raise unavailable(
                    "time_budget_exceeded", f"reading the scenario took longer than the budget of {budget:g} s"
                ) from None
        key = (kind, resolved.id, _freeze(params), fmt)
        try:
            return await self.computed(key, jobs.run_job, kind, resolved.scenario, params, fmt, deadline=deadline)
        except ApiError as exc:
            if exc.code != "time_budget_exceeded" or params.get("samples") is None:
                raise
            raise unavailable(exc.code, f"{exc.message}; {_sampling_hint(kind, params)}") from None

    async def computed(self, key: Any, fn: Any, *args: Any, deadline: float | None = None) -> tuple[jobs.Answer, bool]:
        """The answer of ``fn(*args)`` (a job returning ``Answer | JobError``) from the cache, from the same
        computation already in flight, or computed in the runner; and whether it came from the cache.

        Failures are ``ApiError``: 503 ``busy`` (queue full), ``time_budget_exceeded``, ``worker_lost``, or
        the job's domain error.
        """
        cached = self.cache.get(key)
        if cached is not None:
            return cached, True  # type: ignore[return-value]
        task = self._inflight.get(key)
        if task is None:
            if deadline is None:
                deadline = time.monotonic() + self.settings.request_time_budget_s
            task = asyncio.ensure_future(self._compute(key, fn, args, deadline))
            self._inflight[key] = task
            task.add_done_callback(lambda t: self._finished(key, t))
        # shield: a client that goes away does not cancel the computation others may be waiting for
        return await asyncio.shield(task), False

    def _finished(self, key: Any, task: asyncio.Future) -> None:
        if self._inflight.get(key) is task:
            del self._inflight[key]
        if not task.cancelled():
            task.exception()  # retrieved here too, in case every requester went away

    async def _compute(self, key: Any, fn: Any, args: tuple[Any, ...], deadline: float) -> jobs.Answer:
        budget = self.settings.request_time_budget_s
        sent = time.monotonic()
        try:
            out = await self.runner.run(fn, *args, budget_s=budget, deadline=deadline)
        except Busy as exc:
            raise unavailable("busy", str(exc)) from None
        except BudgetExceeded as exc:
            raise unavailable("time_budget_exceeded", str(exc)) from None
        except WorkerLost as exc:
            # the worker died (killed from outside, out of memory); a replacement is starting, so a retry works
            raise unavailable("worker_lost", f"{exc}; try again") from None
        if isinstance(out, jobs.JobError):
            raise self._job_error(out)
        if out.span is not None:  # the time to get the job to a worker and its answer back (Server-Timing)
            back = time.monotonic()
            started, finished = out.span
            out.timing = (("dispatch", max(started - sent, 0.0)), *out.timing, ("return", max(back - finished, 0.0)))
        self.cache.put(key, out)
        return out

    @staticmethod
    def _limit(exc: Any) -> ApiError:
        field = exc.field or "request"
        return ApiError(413, "limit_exceeded", str(exc), [{"field": field, "message": str(exc)}])

    @staticmethod
    def _input(exc: Any) -> ApiError:
        field = exc.field or "request"
        return ApiError(422, "invalid_input", str(exc), [{"field": field, "message": str(exc)}])

    @staticmethod
    def _job_error(err: jobs.JobError) -> ApiError:
        field = err.field or "request"
        if err.kind == "limit":
            return ApiError(413, "limit_exceeded", err.message, [{"field": field, "message": err.message}])
        if err.kind == "input":
            return ApiError(422, "invalid_input", err.message, [{"field": field, "message": err.message}])
        if err.kind == "convergence":
            return ApiError(422, "no_convergence", err.message)
        if err.kind == "budget":
            return unavailable("time_budget_exceeded", err.message)
        raise RuntimeError(f"unknown job error kind {err.kind!r}")


def _freeze(value: Any) -> Any:
    """A hashable, order-independent form of the parameters (the cache key)."""
    if isinstance(value, dict):
        return tuple(sorted((k, _freeze(v)) for k, v in value.items()))
    if isinstance(value, (list, tuple)):
        return tuple(_freeze(v) for v in value)
    return value


REQUEST_MODELS = {
    "steady": SteadyRequest,
    "branch": BranchRequest,
    "map": MapRequest,
    "check": CheckRequest,
    "simulate": SimulateRequest,
}
