"""The compare computation as a job of the worker pool (``exomap.web.runner``): two maps on one grid and both
setpoint checks. Like ``exomap.web.jobs`` this module imports only the standard library at import time, so a
worker process unpickling the job does not load FastAPI or pydantic; the answer is serialised in the worker.
"""

from __future__ import annotations

from typing import Any

from exomap.web.jobs import Answer, JobError, dumps, pack


def run_compare(sc_a: Any, sc_b: Any, params: dict[str, Any], header: dict[str, Any]) -> Answer | JobError:
    """``exomap.core.compare.compare`` of two core scenarios; ``header`` (ids, titles, field diff) goes first
    in the answer document."""
    from exomap.core import errors
    from exomap.core.compare import Setpoint, compare

    try:
        result = compare(
            sc_a,
            sc_b,
            setpoint_a=Setpoint(*params["setpoint_a"]),
            setpoint_b=Setpoint(*params["setpoint_b"]),
            tau_range=params.get("tau_range"),
            T_in_range=params.get("T_in_range"),
            points=params.get("points"),
            spacing=params.get("spacing", "log"),
            checks=params.get("checks", True),
        )
    except errors.LimitExceededError as exc:
        return JobError("limit", str(exc), exc.field)
    except errors.ModelInputError as exc:
        return JobError("input", str(exc), exc.field)
    except errors.ConvergenceError as exc:
        return JobError("convergence", str(exc))
    except errors.BudgetExceededError as exc:
        return JobError("budget", str(exc))
    return pack(dumps({**header, **result.to_dict()}))
