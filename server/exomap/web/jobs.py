"""The computations the API runs off the event loop, in a worker thread or a worker process.

``run_job`` is a module-level function of picklable arguments, so the same call runs in a thread pool or a
process pool. It serialises the answer in the worker (JSON bytes, or CSV text), so only one flat value crosses
back to the server, and it returns the core's domain errors as data (``JobError``) rather than raising them:
an exception pickled across a process boundary loses attributes set in ``__init__`` (``ModelInputError.field``).

This module imports only the standard library, orjson and isal at import time; the core is imported inside the
job, so a worker process does not load FastAPI or pydantic.
"""

from __future__ import annotations

import dataclasses
import gzip
import time
from dataclasses import dataclass
from typing import Any

import orjson

try:
    from isal import igzip as _gzip  # a dependency (pyproject); the standard library's is the slower stand-in
except ImportError:  # pragma: no cover - an install without it
    _gzip = gzip  # type: ignore[no-redef]

KINDS = ("steady", "branch", "map", "check", "simulate")


#: Answers shorter than this are sent as they are (gzip would not pay for itself).
GZIP_MIN_BYTES = 1000


class Answer:
    """A serialised answer: the body (JSON or CSV, UTF-8), its gzip form once a client has taken it, and where
    the time of its computation went.

    The gzip form is made on the first request that wants it (``gzipped``, blocking: call it off the event
    loop) and kept, so a cached repeat is sent without work; an answer only ever sent to clients on this
    machine is never compressed (exomap.web.compression).

    ``timing`` holds ``(phase, seconds)`` pairs of the computation (worker and server side, for the
    ``Server-Timing`` header of the answer that computed it); ``span`` is the job's start and end on
    ``time.monotonic()`` in the process that ran it (one clock for all processes of the machine, so the
    server can tell the time spent getting the job to its worker and the answer back).
    """

    __slots__ = ("body", "gz", "timing", "span")

    def __init__(
        self,
        body: bytes,
        gz: bytes | None = None,
        timing: tuple[tuple[str, float], ...] = (),
        span: tuple[float, float] | None = None,
    ) -> None:
        self.body = body
        self.gz = gz
        self.timing = timing
        self.span = span

    def __len__(self) -> int:
        """Bytes held, counting room for the gzip form before it is made (JSON answers compress to about a
        quarter at level 1), so the cache's byte bound holds whether or not a client ever asks for it."""
        if self.gz is not None:
            return len(self.body) + len(self.gz)
        return len(self.body) + (len(self.body) // 4 if self.compressible else 0)

    def __reduce__(self) -> tuple[Any, ...]:  # pickled by value across the worker pipe
        return (Answer, (self.body, self.gz, self.timing, self.span))

    @property
    def compressible(self) -> bool:
        return len(self.body) >= GZIP_MIN_BYTES

    def gzipped(self) -> bytes:
        """The gzip form of the body, compressed on the first call and kept (blocking; ISA-L, like zlib,
        releases the GIL while it compresses).

        ISA-L's gzip (``isal.igzip``, a standard gzip stream) at level 1: for a 200 x 200 map (0.75 MB of JSON)
        about 1.5 ms and 0.16 MB, against about 6 ms and 0.17 MB for zlib at level 1 (60 ms at level 6;
        benchmarks/bench_http_map.py prints the zlib time beside the service's). Two requests racing here both
        compress and keep equal bytes: harmless.
        """
        if self.gz is None:
            self.gz = _gzip.compress(self.body, compresslevel=1, mtime=0)
        return self.gz


def pack(body: bytes, timing: tuple[tuple[str, float], ...] = (), span: tuple[float, float] | None = None) -> Answer:
    """The answer of a job (not compressed: see ``Answer.gzipped``)."""
    return Answer(body, None, timing, span)


@dataclass(frozen=True)
class JobError:
    """A domain error raised by the core inside a job: its class name, message and field."""

    kind: str
    message: str
    field: str | None = None


def _plain(obj: Any) -> Any:
    """Encoder fallback for what orjson does not take natively (non-contiguous numpy arrays, odd scalars)."""
    tolist = getattr(obj, "tolist", None)
    if callable(tolist):
        return tolist()
    raise TypeError(f"{type(obj).__name__} is not JSON serialisable")


def dumps(doc: Any) -> bytes:
    """Compact JSON bytes of an answer document (strict JSON: non-finite numbers become null).

    orjson (a compiled encoder): for a 200 x 200 map it encodes the answer in about a tenth of the time of the
    standard library's ``json.dumps`` (benchmarks/bench_http_map.py prints both), and it writes NaN and
    infinities as null itself, which is what the answers mean by them ("no value").
    """
    return orjson.dumps(doc, default=_plain, option=orjson.OPT_SERIALIZE_NUMPY | orjson.OPT_NON_STR_KEYS)


def compute(kind: str, sc: Any, params: dict[str, Any]) -> Any:
    """Call the core for one kind of answer and return its result object."""
    if params.get("T_c") is not None:
        # a coolant-temperature setpoint: every answer (the uncertain ones too) is of the scenario with that coolant
        sc = dataclasses.replace(sc, T_c=params["T_c"])
    if kind == "steady":
        from exomap.core.steady import steady_states

        return steady_states(sc, params["tau"], params["T_in"], c_in=params.get("c_in"), T_c=params.get("T_c"))
    if kind == "branch":
        from exomap.core.branch import branch

        return branch(
            sc,
            params["along"],
            params["tau"],
            params["T_in"],
            lo=params.get("lo"),
            hi=params.get("hi"),
            c_in=params.get("c_in"),
            T_c=params.get("T_c"),
        )
    if kind == "map" and params.get("samples") is not None:
        from exomap.core.uncertainty import uncertainty_map

        return uncertainty_map(
            sc,
            tau_range=params.get("tau_range"),
            T_in_range=params.get("T_in_range"),
            points=params.get("points"),
            spacing=params.get("spacing", "log"),
            samples=params["samples"],
            seed=params.get("seed"),
        )
    if kind == "map":
        from exomap.core.opmap import operating_map

        return operating_map(
            sc,
            tau_range=params.get("tau_range"),
            T_in_range=params.get("T_in_range"),
            points=params.get("points"),
            spacing=params.get("spacing", "log"),
            T_c=params.get("T_c"),
        )
    if kind == "check" and params.get("samples") is not None:
        from exomap.core.uncertain_check import uncertain_check

        return uncertain_check(
            sc,
            tau=params["tau"],
            T_in=params["T_in"],
            branch=params.get("branch"),
            samples=params["samples"],
            seed=params.get("seed"),
        )
    if kind == "check":
        from exomap.core.check import check_setpoint

        return check_setpoint(sc, tau=params["tau"], T_in=params["T_in"], branch=params.get("branch"))
    if kind == "simulate":
        from exomap.core.dynamics import simulate

        return simulate(
            sc,
            tau=params["tau"],
            T_in=params["T_in"],
            start=params.get("start", "low"),
            events=params.get("events", ()),
            duration=params["duration"],
        )
    raise ValueError(f"unknown job kind {kind!r}")


#: The boundary curves of a map document, in ``MapResult.to_dict()``'s order.
MAP_BOUNDARIES = ("ignition", "extinction", "hopf", "max_temperature", "cusp")


def map_document(result: Any) -> dict[str, Any]:
    """The document of an operating map (``MapResult.to_dict()``) with its grids left as numpy arrays, for
    ``dumps``: the same JSON bytes (a test holds them equal on every demo), written by orjson straight from
    the arrays instead of through 200,000 Python objects built by ``tolist()``: about half the time of
    ``to_dict()`` + ``dumps`` for a 200 x 200 map (benchmarks/bench_http_map.py prints both). orjson writes
    NaN as null, which is the ``None`` that ``to_dict`` puts there.
    """
    import numpy as np

    from exomap.core.regions import legend

    def grid(rows: Any, decimals: int | None = None) -> Any:
        rows = np.asarray(rows, dtype=float)
        return np.ascontiguousarray(rows if decimals is None else np.round(rows, decimals))

    r = result
    opening = np.where((r.valve_opening >= 0) & (r.valve_opening <= 1), r.valve_opening, np.nan)
    return {
        "residence_time_s": np.ascontiguousarray(r.tau),
        "feed_temperature_K": np.ascontiguousarray(r.T_in),
        "spacing": r.spacing,
        "region": np.ascontiguousarray(r.region),
        "legend": legend(),
        "state_count": np.ascontiguousarray(r.state_count),
        "max_temperature_K": grid(r.max_temperature, 4),
        "limit_temperature_K": r.T_max,
        "valve_opening": grid(opening),
        "valve_limited": np.ascontiguousarray(np.broadcast_to(r.valve_limited, r.region.shape)),
        "boundaries": {name: grid(r.boundaries[name]) for name in MAP_BOUNDARIES},
        "success": r.success,
        "message": r.message,
    }


def document(result: Any) -> Any:
    """The answer document of a core result: ``to_dict()``, or its array form for an operating map."""
    from exomap.core.opmap import MapResult

    if type(result) is MapResult:
        return map_document(result)
    return result.to_dict()


def run_job(kind: str, sc: Any, params: dict[str, Any], fmt: str = "json") -> Answer | JobError:
    """Run one computation; return the JSON (``fmt="json"``) or CSV (``"csv"``) ``Answer``, or a ``JobError``."""
    from exomap.core import errors

    started = time.monotonic()
    try:
        result = compute(kind, sc, params)
    except errors.LimitExceededError as exc:
        return JobError("limit", str(exc), exc.field)
    except errors.ModelInputError as exc:
        return JobError("input", str(exc), exc.field)
    except errors.ConvergenceError as exc:
        return JobError("convergence", str(exc))
    except errors.BudgetExceededError as exc:
        return JobError("budget", str(exc))
    computed = time.monotonic()
    body = str(result.to_csv()).encode("utf-8") if fmt == "csv" else dumps(document(result))
    finished = time.monotonic()
    return pack(body, (("compute", computed - started), ("encode", finished - computed)), (started, finished))
