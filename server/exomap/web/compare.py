"""Compare (DESIGN.md §13): ``POST /api/v1/compare``, its GET twin, the page ``/compare`` and its print sheet.

Two scenarios (stored ids, demo names or inline documents), or one scenario at two setpoints: the fields that
differ (``exomap.schema.diff``), the map cells whose region changed on one shared grid and both setpoint checks
(``exomap.core.compare``, run in the worker pool through ``exomap.web.compare_job``). Everything of the page
view lives in its link, the sign-off fields of the print sheet included (they are never stored).
"""

from __future__ import annotations

import json
from typing import Annotated, Any, Literal

import anyio.to_thread
from fastapi import APIRouter, Depends, FastAPI, Query, Request
from fastapi.responses import Response
from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator

from exomap.web import urls
from exomap.web.errors import ApiError
from exomap.web.models import GridPoints, InlineScenario, Quantity, Range

#: Query keys of the compare page's view state (SI numbers, like the scenario page's), built in ``urls``.
VIEW_KEYS = urls.COMPARE_KEYS
#: Longest sign-off field carried in a link [characters].
SIGN_OFF_MAX = 120


class CompareSide(BaseModel):
    """One side of a comparison: its scenario (inline or by id) and its setpoint."""

    model_config = ConfigDict(extra="forbid")

    scenario: InlineScenario = Field(default=None, description="A whole scenario document; or scenario_id.")
    scenario_id: str | None = Field(
        default=None, min_length=1, max_length=200, description="Id of a stored scenario or a demo name."
    )
    residence_time: Quantity | None = Field(default=None, description="Setpoint residence time; default its feed.")
    feed_temperature: Quantity | None = Field(default=None, description="Setpoint feed temperature; default its feed.")
    branch: Literal["low", "high"] | None = Field(default=None, description="Assumed branch where there are several.")

    @model_validator(mode="after")
    def _one_scenario(self) -> CompareSide:
        if (self.scenario is None) == (self.scenario_id is None):
            raise ValueError("give exactly one of 'scenario' (a document) or 'scenario_id'")
        return self


class CompareRequest(BaseModel):
    """Before (a) and after (b) a change: fields, map cells that changed region, both checks."""

    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "examples": [
                {
                    "a": {"scenario_id": "jacketed-first-order"},
                    "b": {"scenario_id": "jacketed-first-order", "residence_time": "35 min"},
                    "points": [80, 80],
                }
            ]
        },
    )

    a: CompareSide = Field(description="Before the change.")
    b: CompareSide = Field(description="After the change.")
    residence_time: Range | None = Field(default=None, description="Shared map window; default both windows' span.")
    feed_temperature: Range | None = Field(default=None, description="Shared map window [lo, hi].")
    points: GridPoints | None = Field(default=None, description="Shared grid; default the finer of the two.")
    spacing: Literal["log", "linear"] = Field(default="log", description="Residence-time axis spacing.")
    checks: bool = Field(default=True, description="Run both setpoint checks (the slow part).")


def _prefix(exc: ApiError, side: str) -> ApiError:
    fields = [
        {
            "field": f"{side}.{f['field']}" if not f["field"].startswith(f"{side}.") else f["field"],
            **{"message": f["message"]},
        }
        for f in exc.fields
    ]
    message = exc.message if not fields else f"{side}: {exc.message}"
    return ApiError(exc.status, exc.code, message, fields, headers=exc.headers)


def _document(service: Any, side: CompareSide) -> dict[str, Any]:
    if side.scenario is not None:
        return side.scenario
    stored = service.store.get(side.scenario_id)
    if stored is None:  # resolve() said it exists a moment ago; a store that lost it is a 404 too
        raise ApiError(404, "not_found", f"no scenario with id {side.scenario_id!r}")
    return json.loads(stored.document)


def _prepare(service: Any, req: CompareRequest) -> tuple[Any, Any, dict[str, Any], dict[str, Any]]:
    """Resolve both sides, normalise the parameters to SI and build the header (ids, titles, field diff).
    Runs in a thread: parsing documents and the diff use pint and pydantic."""
    from exomap import schema
    from exomap.schema.diff import compare_header
    from exomap.web.service import quantity

    resolved = []
    for name, side in (("a", req.a), ("b", req.b)):
        try:
            resolved.append(service.resolve(side))
        except ApiError as exc:
            raise _prefix(exc, name) from None
    ra, rb = resolved
    setpoints = []
    for name, side, r in (("a", req.a, ra), ("b", req.b, rb)):
        sc = r.scenario
        tau = (
            sc.tau_nominal
            if side.residence_time is None
            else quantity(side.residence_time, "time", f"{name}.residence_time")
        )
        T_in = (
            sc.T_in
            if side.feed_temperature is None
            else quantity(side.feed_temperature, "temperature", f"{name}.feed_temperature")
        )
        if not tau > 0:
            raise ApiError(
                422,
                "invalid_input",
                f"{name}.residence_time: must be positive",
                [{"field": f"{name}.residence_time", "message": "expected a positive time, e.g. '40 min'"}],
            )
        setpoints.append((float(tau), float(T_in), side.branch))
    params: dict[str, Any] = {
        "setpoint_a": setpoints[0],
        "setpoint_b": setpoints[1],
        "tau_range": service._range(req.residence_time, "time", "residence_time"),
        "T_in_range": service._range(req.feed_temperature, "temperature", "feed_temperature"),
        "points": tuple(req.points) if req.points is not None else None,
        "spacing": req.spacing,
        "checks": req.checks,
    }
    from exomap.core.compare import shared_window

    n = params["points"] or shared_window(ra.scenario, rb.scenario)[2]
    cells = int(n[0]) * int(n[1])
    limit = service.settings.max_map_cells
    if cells > limit:
        raise ApiError(
            413,
            "too_many_cells",
            f"a {n[0]} x {n[1]} map has {cells} cells; the limit is {limit}",
            [{"field": "points", "message": f"at most {limit} cells (n_tau x n_tin)"}],
        )
    try:
        header = compare_header(_document(service, req.a), _document(service, req.b))
    except schema.ScenarioError as exc:  # pragma: no cover - both documents were parsed by resolve()
        raise ApiError(422, "invalid_scenario", str(exc), exc.errors) from None
    return ra, rb, params, header


async def compare_answer(service: Any, req: CompareRequest) -> tuple[Any, bool]:
    """The serialised compare answer and whether it came from the cache."""
    from exomap.web import compare_job
    from exomap.web.service import _freeze

    ra, rb, params, header = await anyio.to_thread.run_sync(_prepare, service, req)
    key = ("compare", ra.id, rb.id, _freeze(params))
    # cache, single flight, admission (503 busy) and the time budget as every other computation
    return await service.computed(key, compare_job.run_compare, ra.scenario, rb.scenario, params, header)


def _number(value: str | None) -> float | str | None:
    if value is None or value == "":
        return None
    try:
        return float(value)
    except ValueError:
        return value.strip()


def _pair(value: str | None) -> list[Any] | str | None:
    if value is None or value == "":
        return None
    parts = [p.strip() for p in value.split(",")]
    return [_number(p) for p in parts] if len(parts) == 2 else value


def request_of_query(params: dict[str, str | None]) -> CompareRequest:
    """The compare request of a GET query (the page's link keys: ``a``, ``b``, ``residence_time_a`` ...)."""
    from fastapi.exceptions import RequestValidationError

    def side(s: str) -> dict[str, Any]:
        return {
            "scenario_id": params.get(s),
            "residence_time": _number(params.get(f"residence_time_{s}")),
            "feed_temperature": _number(params.get(f"feed_temperature_{s}")),
            "branch": params.get(f"branch_{s}") or None,
        }

    pts: Any = _pair(params.get("points"))
    if isinstance(pts, list):
        pts = [int(p) if isinstance(p, float) and p.is_integer() else p for p in pts]
    data = {
        "a": {k: v for k, v in side("a").items() if v is not None},
        "b": {k: v for k, v in side("b").items() if v is not None},
        "residence_time": _pair(params.get("residence_time")),
        "feed_temperature": _pair(params.get("feed_temperature")),
        "points": pts,
        "checks": params.get("checks", "true") not in ("false", "0", "no"),
    }
    try:
        return CompareRequest.model_validate({k: v for k, v in data.items() if v is not None})
    except ValidationError as exc:
        raise RequestValidationError(
            [{**e, "loc": ("query", *e["loc"])} for e in exc.errors(include_url=False, include_context=False)]
        ) from None


def api_query_of_view(state: dict[str, str]) -> dict[str, str]:
    """The GET API query of a compare page's view state (the map window keys lose their ``map_`` prefix)."""
    out: dict[str, str] = {}
    for k, v in state.items():
        if k in ("prepared_by", "reviewed_by", "change_reference", "review_date"):
            continue
        out[k.removeprefix("map_")] = v
    return out


def build_compare_router() -> APIRouter:
    """``POST /api/v1/compare`` and ``GET /api/v1/compare``."""
    from exomap.web.answers import CompareAnswer
    from exomap.web.api import _answer_response, answer_responses, get_service
    from exomap.web.query import refuse_unknown_query

    router = APIRouter(prefix="/api/v1", dependencies=[Depends(refuse_unknown_query)])

    def responses(post: bool) -> dict[int | str, dict[str, Any]]:
        errors = (400, 404, 413, 422, 503) if post else (404, 413, 422, 503)
        return answer_responses(CompareAnswer, *errors, description="The compare answer (DESIGN.md §13).")

    @router.post(
        "/compare",
        summary="Compare two scenarios or two setpoints: changed fields, changed map cells, both checks",
        operation_id="computeCompare",
        tags=["compare"],
        responses=responses(post=True),
        response_class=Response,
    )
    async def post_compare(request: Request, req: CompareRequest) -> Response:
        service = await get_service(request)
        out, hit = await compare_answer(service, req)
        return _answer_response(request, out, hit, "json", "compare")

    @router.get(
        "/compare",
        summary="Compare (GET twin of the compare page): a=ID&b=ID, setpoints residence_time_a ...",
        operation_id="getCompare",
        tags=["compare"],
        responses=responses(post=False),
        response_class=Response,
    )
    async def get_compare(
        request: Request,
        a: Annotated[str, Query(description="Id or demo name of scenario A (before).")],
        b: Annotated[str, Query(description="Id or demo name of scenario B (after).")],
        residence_time_a: Annotated[str | None, Query(description="A's setpoint residence time.")] = None,
        feed_temperature_a: Annotated[str | None, Query(description="A's setpoint feed temperature.")] = None,
        branch_a: Annotated[str | None, Query(description="'low' or 'high'.")] = None,
        residence_time_b: Annotated[str | None, Query(description="B's setpoint residence time.")] = None,
        feed_temperature_b: Annotated[str | None, Query(description="B's setpoint feed temperature.")] = None,
        branch_b: Annotated[str | None, Query(description="'low' or 'high'.")] = None,
        residence_time: Annotated[str | None, Query(description="Shared window 'lo,hi'.")] = None,
        feed_temperature: Annotated[str | None, Query(description="Shared window 'lo,hi'.")] = None,
        points: Annotated[str | None, Query(description="Shared grid 'n_tau,n_tin'.")] = None,
        checks: Annotated[str | None, Query(description="'false' to skip both checks.")] = None,
    ) -> Response:
        service = await get_service(request)
        req = request_of_query(
            {
                "a": a,
                "b": b,
                "residence_time_a": residence_time_a,
                "feed_temperature_a": feed_temperature_a,
                "branch_a": branch_a,
                "residence_time_b": residence_time_b,
                "feed_temperature_b": feed_temperature_b,
                "branch_b": branch_b,
                "residence_time": residence_time,
                "feed_temperature": feed_temperature,
                "points": points,
                "checks": checks,
            }
        )
        out, hit = await compare_answer(service, req)
        return _answer_response(request, out, hit, "json", "compare")

    return router


def install_pages(app: FastAPI, render: Any) -> None:
    """The page ``/compare`` and the print sheet ``/compare/print`` (thin shells; ``compare.js`` draws)."""
    from fastapi.responses import HTMLResponse

    def view(request: Request) -> dict[str, str]:
        q = request.query_params
        return {k: q[k][:SIGN_OFF_MAX] for k in VIEW_KEYS if k in q and q[k] != ""}

    def page(template: str, request: Request) -> HTMLResponse:
        state = view(request)
        twin = urls.api_compare(api_query_of_view(state)) if "a" in state and "b" in state else urls.api_scenarios()
        return render(template, state=state, twin=twin, boot={"page": template.removesuffix(".html")})

    @app.get("/compare", response_class=HTMLResponse, include_in_schema=False)
    def compare_page(request: Request) -> HTMLResponse:
        return page("compare.html", request)

    @app.get("/compare/print", response_class=HTMLResponse, include_in_schema=False)
    def compare_print(request: Request) -> HTMLResponse:
        return page("compare_print.html", request)
