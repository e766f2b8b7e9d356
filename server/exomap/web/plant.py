"""Plant data over the API (DESIGN.md §12): upload a historian export, replay it, overlay it, calibrate on it.

``POST /api/v1/datasets`` takes the CSV as the request body (``text/csv``) and the tag mapping in the query
(``map=TI101=reactor_temperature,FI100=feed_flow``, ``unit=TI101=degC``, ``time_column=``); the dataset is
parsed off the event loop, stored content-addressed under the same save token as scenarios, and answered with
its summary (201 new, 200 already stored). ``GET /api/v1/datasets/{id}`` gives the summary again. Replay,
overlay and calibrate name a scenario (inline or by id) and a stored ``dataset_id``; replay and calibrate run
in the worker pool like every computation (cached, merged when identical, within the time budget).
"""

from __future__ import annotations

import json
import time
from typing import Annotated, Any

import anyio.to_thread
from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel, ConfigDict, Field, model_validator

from exomap.web.errors import ApiError
from exomap.web.models import InlineScenario, Quantity

#: Share of the computation time budget a calibration's profiles may use (the rest: queueing, the main fit's
#: tail, the final replay and the answer).
PROFILE_SHARE = 0.8
#: Records an overlay answers by default (a chart of more markers than this shows nothing more, and a
#: million-record dataset would make a 70 MB answer).
OVERLAY_POINTS = 5000
#: Words of the fit's warning when the profiles ran out of time (exomap.core.fit).
TIMED_OUT = "the time allowed ran out"

DatasetId = Annotated[str, Field(min_length=1, max_length=64, description="Id of a stored plant dataset.")]


class PlantRequest(BaseModel):
    """A scenario (inline or by id) and a stored dataset."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={"examples": [{"scenario_id": "jacketed-first-order", "dataset_id": "0123456789abcdef"}]},
    )

    scenario: InlineScenario = Field(default=None, description="A whole scenario document; or scenario_id.")
    scenario_id: str | None = Field(default=None, min_length=1, max_length=200, description="Stored id or demo name.")
    dataset_id: DatasetId
    start: str | float | None = Field(
        default=None,
        description="First time of the window of records used: ISO 8601 (without a zone read as UTC) or epoch "
        "seconds, as the import reads times; default: the first record. The answer's 'window' says what was used.",
        examples=["2026-12-02T08:00:00Z"],
    )
    end: str | float | None = Field(
        default=None,
        description="Last time of the window (included), after start; default: the last record.",
        examples=["2026-12-02T12:00:00Z"],
    )

    @model_validator(mode="after")
    def _one_scenario(self) -> PlantRequest:
        if (self.scenario is None) == (self.scenario_id is None):
            raise ValueError("give exactly one of 'scenario' (a document) or 'scenario_id'")
        return self


class OverlayRequest(PlantRequest):
    """Where the plant ran, thinned for drawing."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [{"scenario_id": "jacketed-first-order", "dataset_id": "0123456789abcdef", "max_points": 2000}]
        },
    )

    max_points: int = Field(
        default=OVERLAY_POINTS,
        ge=2,
        le=200_000,
        description="Most records answered: a longer dataset is thinned to every k-th record (the last always "
        "kept), k the smallest that fits; the answer says k ('stride') and the dataset's record count.",
    )


class CalibrateRequest(PlantRequest):
    """Fit scenario parameters to a stored dataset."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "scenario_id": "jacketed-first-order",
                    "dataset_id": "0123456789abcdef",
                    "fit": ["reactions[0].rate_constant", "jacket.ua"],
                    "reference_temperature": "80 degC",
                }
            ]
        },
    )

    fit: list[str] = Field(min_length=1, max_length=6, description="Targets to fit (DESIGN.md §11 paths).")
    reference_temperature: Quantity | None = Field(
        default=None, description="Where rate constants are stated; default: the mean recorded reactor temperature."
    )
    outputs: list[str] = Field(
        default_factory=lambda: ["reactor_temperature"], description="Recorded outputs fitted (roles)."
    )


def _pairs(text: str | None, field: str) -> dict[str, str]:
    out: dict[str, str] = {}
    if not text:
        return out
    for item in text.split(","):
        tag, sep, value = item.partition("=")
        if not sep or not tag.strip() or not value.strip():
            raise ApiError(
                422, "invalid_request", f"{field}: expected TAG=VALUE[,TAG=VALUE...], got {item!r}",
                [{"field": field, "message": f"expected TAG=VALUE[,TAG=VALUE...], got {item!r}"}],
            )  # fmt: skip
        if tag.strip() in out:
            raise ApiError(422, "invalid_request", f"{field}: tag {tag.strip()!r} given twice",
                           [{"field": field, "message": f"tag {tag.strip()!r} is given twice"}])  # fmt: skip
        out[tag.strip()] = value.strip()
    return out


def _datasets(request: Request) -> Any:
    from exomap.web.store import DatasetStore

    return DatasetStore(request.app.state.store.database)


def _dataset(request: Request, did: str) -> Any:
    ds = _datasets(request).get(did)
    if ds is None:
        raise ApiError(404, "not_found", f"no dataset with id {did!r}",
                       [{"field": "dataset_id", "message": "no stored dataset has this id"}])  # fmt: skip
    return ds


#: What an error says when the data are too long for one computation.
WINDOW_HINT = "window of the data: 'start' and 'end' (ISO 8601, e.g. 2026-12-02T08:00:00Z, or epoch seconds)"


def _windowed(request: Request, req: PlantRequest, min_records: int = 2) -> tuple[Any, dict[str, Any], Any]:
    """The stored dataset, its window's records (a dataset) and what the window was; 422 naming start/end."""
    from exomap.schema.errors import ScenarioError
    from exomap.schema.plantdata import window

    ds = _dataset(request, req.dataset_id)
    try:
        part, info = window(ds, req.start, req.end, min_records=min_records)
    except ScenarioError as exc:
        raise ApiError(422, "invalid_request", str(exc), exc.errors) from None
    return ds, info, part


async def _with_hint(call: Any, info: dict[str, Any]) -> Any:
    """``await call`` with a 422 evaluation cap or 503 time budget that says to choose a (shorter) window."""
    try:
        return await call
    except ApiError as exc:
        cap = exc.code == "no_convergence" and "model evaluations" in exc.message
        if not (cap or exc.code == "time_budget_exceeded"):
            raise
        held = f"the window held {info['records']} records" if not info["whole"] else "the whole dataset was used"
        hint = f"{exc.message}; {held}: choose a {'' if info['whole'] else 'shorter '}{WINDOW_HINT}"
        fields = [{"field": f, "message": hint} for f in ("start", "end")]
        raise ApiError(exc.status, exc.code, hint, fields, exc.headers) from None


def _document(service: Any, req: PlantRequest) -> tuple[dict[str, Any], str]:
    from exomap import schema

    if req.scenario is not None:
        return req.scenario, schema.scenario_id(schema.parse_scenario(req.scenario))
    stored = service.store.get(req.scenario_id)
    if stored is None:
        raise ApiError(404, "not_found", f"no scenario with id {req.scenario_id!r}",
                       [{"field": "scenario_id", "message": "no stored scenario has this id"}])  # fmt: skip
    return json.loads(stored.document), stored.id


def build_plant_router() -> APIRouter:
    """The plant-data routes of ``/api/v1``."""
    from exomap.web import plant_job
    from exomap.web.answers import CalibrationAnswer, DatasetAnswer, OverlayAnswer, ReplayAnswer
    from exomap.web.api import _answer_response, answer_responses, get_service, require_save_token
    from exomap.web.query import refuse_unknown_query

    router = APIRouter(prefix="/api/v1", dependencies=[Depends(refuse_unknown_query)])

    @router.post(
        "/datasets",
        status_code=201,
        operation_id="saveDataset",
        tags=["plant data"],
        response_class=JSONResponse,
        summary="Store a historian export (CSV body) with its tag mapping; answers its summary",
        description="The body is the CSV file itself (wide: a time column and one column per tag, units as "
        "'name [unit]'; or long: tag, time, value[, quality]). 201 when new, 200 when already stored. When the "
        "server has a save token, send `Authorization: Bearer <token>`.",
        responses={
            **answer_responses(DatasetAnswer, 400, 401, 413, 422, 503, status=201, description="Stored."),
            200: {"model": DatasetAnswer, "description": "Already stored (nothing written)."},
        },
        openapi_extra={
            "requestBody": {
                "required": True,
                "description": "The historian export itself: the bytes of the UTF-8 CSV file.",
                "content": {"application/octet-stream": {"schema": {"type": "string", "format": "binary"}}},
            }
        },
    )
    async def save_dataset(
        request: Request,
        map: Annotated[str, Query(description="Tag roles: 'TI101=reactor_temperature,FI100=feed_flow'.")],
        unit: Annotated[str | None, Query(description="Units of tags whose header has none: 'TI101=degC'.")] = None,
        time_column: Annotated[str | None, Query(description="Time column of a wide file.")] = None,
    ) -> JSONResponse:
        from exomap.schema.errors import ScenarioError
        from exomap.schema.plantdata import read_plant_csv

        settings = request.app.state.settings
        require_save_token(request, settings)
        mapping, units = _pairs(map, "map"), _pairs(unit, "unit")
        body = await request.body()

        def parse_and_save() -> tuple[Any, bool]:
            ds = read_plant_csv(
                body, mapping=mapping, time_column=time_column, units=units, max_rows=settings.max_dataset_rows
            )
            did, created = _datasets(request).save(ds)
            return ds, created

        try:
            ds, created = await anyio.to_thread.run_sync(parse_and_save)
        except ScenarioError as exc:
            status = 413 if "the limit is" in str(exc) else 422
            raise ApiError(status, "invalid_dataset", str(exc), exc.errors) from None
        answer = {**ds.summary(), "created": created}
        return JSONResponse(answer, status_code=201 if created else 200,
                            headers={"Location": f"/api/v1/datasets/{ds.dataset_id}"})  # fmt: skip

    @router.get(
        "/datasets/{dataset_id}",
        operation_id="getDataset",
        tags=["plant data"],
        response_class=JSONResponse,
        summary="A stored dataset's summary",
        responses=answer_responses(DatasetAnswer, 404, 422, 503),
    )
    async def get_dataset(request: Request, dataset_id: str) -> JSONResponse:
        summary = await anyio.to_thread.run_sync(_datasets(request).summary, dataset_id)
        if summary is None:
            raise ApiError(404, "not_found", f"no dataset with id {dataset_id!r}",
                           [{"field": "dataset_id", "message": "no stored dataset has this id"}])  # fmt: skip
        return JSONResponse({**summary, "created": False})

    @router.post(
        "/replay",
        operation_id="computeReplay",
        tags=["plant data"],
        response_class=Response,
        summary="Replay: the scenario driven by the recorded inputs, beside the recorded outputs",
        responses=answer_responses(ReplayAnswer, 400, 404, 413, 422, 503),
    )
    async def replay_route(request: Request, req: PlantRequest) -> Response:
        service = await get_service(request)
        resolved = await anyio.to_thread.run_sync(service.resolve, req)
        ds, info, part = await anyio.to_thread.run_sync(_windowed, request, req)
        key = ("replay", resolved.id, ds.dataset_id, info["start"], info["end"])
        out, hit = await _with_hint(
            service.computed(key, plant_job.run_replay, resolved.scenario, part, info, ds.summary()), info
        )
        return _answer_response(request, out, hit, "json", "replay")

    @router.post(
        "/overlay",
        operation_id="computeOverlay",
        tags=["plant data"],
        response_class=JSONResponse,
        summary="Overlay: where the plant ran on the operating map (residence time and feed temperature in time)",
        responses=answer_responses(OverlayAnswer, 400, 404, 422, 503),
    )
    async def overlay_route(request: Request, req: OverlayRequest) -> JSONResponse:
        service = await get_service(request)
        resolved = await anyio.to_thread.run_sync(service.resolve, req)
        ds, info, part = await anyio.to_thread.run_sync(_windowed, request, req)
        return JSONResponse(overlay(resolved.scenario, part, max_points=req.max_points, window=info, full=ds))

    @router.post(
        "/calibrate",
        operation_id="computeCalibrate",
        tags=["plant data"],
        response_class=Response,
        summary="Calibrate: fit scenario parameters to a stored dataset, with standard errors and 95 % intervals",
        responses=answer_responses(CalibrationAnswer, 400, 404, 413, 422, 503),
    )
    async def calibrate_route(request: Request, req: CalibrateRequest) -> Response:
        from exomap.web.service import quantity

        service = await get_service(request)
        resolved = await anyio.to_thread.run_sync(service.resolve, req)
        doc, source = await anyio.to_thread.run_sync(_document, service, req)
        # a fit needs more records than parameters (one degree of freedom at least)
        ds, info, part = await anyio.to_thread.run_sync(_windowed, request, req, len(req.fit) + 2)
        T_ref = None
        if req.reference_temperature is not None:
            T_ref = quantity(req.reference_temperature, "temperature", "reference_temperature")
        key = ("calibrate", resolved.id, ds.dataset_id, info["start"], info["end"], tuple(req.fit), T_ref,
               tuple(req.outputs))  # fmt: skip
        # the profiles stop at PROFILE_SHARE of the time budget (their intervals then not given, with a warning),
        # so the estimates come back inside the budget rather than a 503 after all of it
        budget = service.settings.request_time_budget_s
        deadline = time.monotonic() + budget
        out, hit = await _with_hint(service.computed(
            key, plant_job.run_calibrate, resolved.scenario, doc, source, part, list(req.fit), T_ref, list(req.outputs),
            deadline - (1.0 - PROFILE_SHARE) * budget, info, ds.summary(), ds.dataset_id, deadline=deadline,
        ), info)  # fmt: skip
        if not hit and TIMED_OUT.encode() in bytes(out.body):
            service.cache.drop(key)  # cut short by the budget: a retry on a quieter server may complete it
        return _answer_response(request, out, hit, "json", "calibrate")

    return router


def overlay(
    sc: Any, ds: Any, *, max_points: int = OVERLAY_POINTS, window: dict[str, Any] | None = None, full: Any = None
) -> dict[str, Any]:
    """The plant's path on the map: residence time V_set/q_in(t) and feed temperature at each record (SI; null
    where not recorded), with the recorded reactor temperature and the record times. More than ``max_points``
    records are thinned to every k-th (the last kept). ``ds`` may be a window's records of the dataset ``full``
    (``exomap.schema.plantdata.window``, whose description is ``window``); times are from the window's start."""
    import math

    import numpy as np

    full = ds if full is None else full
    n = int(ds.epoch_s.size)
    if window is None:
        from exomap.schema.plantdata import window as whole

        window = whole(ds)[1]
    stride = max(1, math.ceil((n - 1) / (max_points - 1))) if n > max_points else 1
    idx = np.arange(0, n, stride)
    if idx[-1] != n - 1:
        idx = np.append(idx, n - 1)

    def clean(values: Any) -> list[float | None]:
        return [None if not math.isfinite(v) else v for v in np.asarray(values)[idx].tolist()]

    t = ds.epoch_s - ds.epoch_s[0]
    q = ds.series.get("feed_flow")
    tin = ds.series.get("feed_temperature")
    T = ds.series.get("reactor_temperature")
    k = idx.size
    return {
        "dataset_id": full.dataset_id,
        "start": window["start"],
        "records": int(full.epoch_s.size),
        "window": window,
        "stride": stride,
        "time_s": t[idx].tolist(),
        "residence_time_s": clean(sc.vessel.V_set / q) if q is not None else [sc.tau_nominal] * k,
        "feed_temperature_K": clean(tin) if tin is not None else [sc.T_in] * k,
        "reactor_temperature_K": clean(T) if T is not None else [None] * k,
        "recorded": sorted(ds.series),
    }
