"""Plant-data computations as jobs of the worker pool (``exomap.web.runner``): replay and calibration.

Like ``exomap.web.jobs`` this module imports only the standard library at import time; the answer is
serialised in the worker. The dataset travels as plain arrays (its ``Dataset`` pickles).
"""

from __future__ import annotations

from typing import Any

from exomap.web.jobs import Answer, JobError, dumps, pack


def _errors(fn: Any) -> Answer | JobError:
    from exomap.core import errors
    from exomap.schema.errors import ScenarioError

    try:
        return pack(dumps(fn()))
    except errors.LimitExceededError as exc:
        return JobError("limit", str(exc), exc.field)
    except errors.ModelInputError as exc:
        return JobError("input", str(exc), exc.field)
    except ScenarioError as exc:
        return JobError("input", str(exc), exc.field)
    except errors.ConvergenceError as exc:
        return JobError("convergence", str(exc))
    except errors.BudgetExceededError as exc:
        return JobError("budget", str(exc))


def _window(dataset: Any, window: dict | None, summary: dict | None) -> tuple[dict, dict]:
    from exomap.schema.plantdata import window as whole

    return (window if window is not None else whole(dataset)[1]), (summary or dataset.summary())


def run_replay(sc: Any, dataset: Any, window: dict | None = None, summary: dict | None = None) -> Answer | JobError:
    """``exomap.core.replay.replay`` of a stored dataset, or of a window's records of it (``dataset`` then the
    window's records, ``window`` what the window was and ``summary`` the whole dataset's): the answer with the
    dataset's summary and the window."""
    from exomap.core.replay import replay

    def go() -> dict:
        info, whole = _window(dataset, window, summary)
        res = replay(sc, dataset.record())
        return {"dataset": whole, "window": info, **res.to_dict()}

    return _errors(go)


def run_calibrate(
    sc: Any,
    doc: dict,
    source_id: str,
    dataset: Any,
    targets: list[str],
    T_ref: float | None,
    outputs: list[str],
    profile_deadline: float | None = None,
    window: dict | None = None,
    summary: dict | None = None,
    dataset_id: str | None = None,
) -> Answer | JobError:
    """``exomap.core.calibrate.calibrate``: estimates with their uncertainty and the calibrated scenario.

    ``profile_deadline`` (``time.monotonic()``, one clock for every process of the machine) is when the
    profile-likelihood intervals stop. ``dataset`` may be a window's records (``window``, ``summary`` and
    ``dataset_id`` then describe the window and the whole stored dataset), as in ``run_replay``."""
    from exomap.core.calibrate import calibrate
    from exomap.schema.calibration import calibrated_document

    def go() -> dict:
        info, whole = _window(dataset, window, summary)
        did = dataset_id or dataset.dataset_id
        cal = calibrate(sc, dataset.record(), targets, T_ref=T_ref, outputs=tuple(outputs), deadline=profile_deadline)
        out = cal.to_dict()
        out["dataset"] = whole
        out["window"] = info
        out["scenario"] = calibrated_document(doc, cal, dataset_id=did, source_id=source_id, window=info)
        out["derived_from"] = {"scenario_id": source_id, "dataset_id": did, "start": info["start"], "end": info["end"]}
        return out

    return _errors(go)
