"""The computations the API runs off the event loop, in a worker thread or a worker process.

``run_job`` is a module-level function of picklable arguments, so the same call runs in a thread pool or a
process pool. It serialises the answer in the worker (JSON bytes, or CSV text), so only one flat value crosses
back to the server, and it returns the core's domain errors as data (``JobError``) rather than raising them:
an exception pickled across a process boundary loses attributes set in ``__init__`` (``ModelInputError.field``).

This module imports only the standard library and orjson at import time; the core is imported inside the
job, so a worker process does not load FastAPI or pydantic.
"""

from __future__ import annotations

import dataclasses
import gzip
from dataclasses import dataclass
from typing import Any

import orjson

KINDS = ("steady", "branch", "map", "check", "simulate")


#: Answers shorter than this are sent as they are (gzip would not pay for itself).
GZIP_MIN_BYTES = 1000


@dataclass(frozen=True)
class Answer:
    """A serialised answer: the body (JSON or CSV, UTF-8) and its gzip form (None when small)."""

    body: bytes
    gz: bytes | None

    def __len__(self) -> int:
        return len(self.body) + (len(self.gz) if self.gz else 0)


def pack(body: bytes) -> Answer:
    """The answer with its gzip form, compressed once here so a cached repeat is sent without work.

    Level 1: for a 200 x 200 map (0.76 MB of JSON) it takes about 10 ms against 60 ms at level 6, for a body
    17 % larger (measured on the development machine; see benchmarks/bench_http_map.py).
    """
    gz = gzip.compress(body, compresslevel=1, mtime=0) if len(body) >= GZIP_MIN_BYTES else None
    return Answer(body, gz)


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


def run_job(kind: str, sc: Any, params: dict[str, Any], fmt: str = "json") -> Answer | JobError:
    """Run one computation; return the JSON (``fmt="json"``) or CSV (``"csv"``) ``Answer``, or a ``JobError``."""
    from exomap.core import errors

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
    if fmt == "csv":
        return pack(str(result.to_csv()).encode("utf-8"))
    return pack(dumps(result.to_dict()))
