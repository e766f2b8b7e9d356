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


def run_replay(sc: Any, dataset: Any) -> Answer | JobError:
    """``exomap.core.replay.replay`` of a stored dataset: the answer with the dataset's summary."""
    from exomap.core.replay import replay

    def go() -> dict:
        res = replay(sc, dataset.record())
        return {"dataset": dataset.summary(), **res.to_dict()}

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
) -> Answer | JobError:
    """``exomap.core.calibrate.calibrate``: estimates with their uncertainty and the calibrated scenario.

    ``profile_deadline`` (``time.monotonic()``, one clock for every process of the machine) is when the
    profile-likelihood intervals stop."""
    from exomap.core.calibrate import calibrate
    from exomap.schema.calibration import calibrated_document

    def go() -> dict:
        cal = calibrate(sc, dataset.record(), targets, T_ref=T_ref, outputs=tuple(outputs), deadline=profile_deadline)
        out = cal.to_dict()
        out["dataset"] = dataset.summary()
        out["scenario"] = calibrated_document(doc, cal, dataset_id=dataset.dataset_id, source_id=source_id)
        out["derived_from"] = {"scenario_id": source_id, "dataset_id": dataset.dataset_id}
        return out

    return _errors(go)
