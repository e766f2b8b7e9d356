"""Routes of the JSON API under ``/api/v1``.

Computation answers are exactly the core result's ``to_dict()`` (DESIGN.md §4), serialised once in the worker
and sent as they are (from the cache on a repeat, marked ``X-Exomap-Cache: hit``). Each computation has a POST
form (a JSON body, scenario inline or by id) and a GET twin on a stored scenario
(``/api/v1/scenarios/{id}/map?residence_time=1 min,10 h``), so pages and share links are plain URLs.
"""

import hmac
import json
from typing import Annotated, Any

import anyio.to_thread
from fastapi import APIRouter, Body, Depends, Path, Query, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, Response
from pydantic import BaseModel, ValidationError, WithJsonSchema

import exomap
from exomap.web.answers import (
    ANSWER_MODELS,
    HealthAnswer,
    ScenarioList,
    ScenarioSummary,
    VersionAnswer,
)
from exomap.web.compression import AnswerResponse, accepts_gzip, local_client
from exomap.web.errors import ApiError, error_responses
from exomap.web.jobs import Answer
from exomap.web.models import (
    SCENARIO_SCHEMA,
    BranchRequest,
    CheckRequest,
    MapRequest,
    SimulateRequest,
    SteadyRequest,
)
from exomap.web.query import refuse_unknown_query
from exomap.web.service import REQUEST_MODELS, Service
from exomap.web.settings import Settings

SCENARIO_FORMAT = "exomap-scenario/1"

#: Version of the API contract (the OpenAPI document's ``info.version``; committed in docs/openapi.json).
#: MINOR for an addition a client can ignore (a route, an optional request field, an answer key, an
#: enumeration value); MAJOR for anything that breaks a client generated from the previous document (a key,
#: route or operation id removed or renamed, a type or unit changed, a request field made required) -- a
#: MAJOR bump also moves the routes to the next prefix (/api/v2) and keeps /api/v1 serving until retired.
API_VERSION = "1.6.0"

SUMMARIES = {
    "steady": "Every steady state at an operating point, with its stability",
    "branch": "A branch of steady states along residence time or feed temperature, with turning points",
    "map": "Operating map: regions over residence time x feed temperature, with exact boundaries",
    "check": "Setpoint check: margins, safety figures, upsets, verdict and cautions",
    "simulate": "Dynamic simulation from a steady state, with events",
}
CSV_KINDS = ("map", "simulate")

#: Most scenarios one page of the listing may hold.
MAX_PAGE = 500


def answer_responses(
    model: type[BaseModel] | Any, *errors: int, status: int = 200, description: str = "The answer.", csv: bool = False
) -> dict[int | str, dict[str, Any]]:
    """``responses=`` of a route: its answer model at ``status`` (a union ``A | B`` when the answer depends on
    the request), CSV text too when ``csv``, and the shared error shape at each status of ``errors``. The routes
    send bytes (no validation per request); the tests hold every answer to its model."""
    out: dict[str, Any] = {"model": model, "description": description}
    if csv:
        # JSON first: a generated client reads the first content type as the typed answer
        out["content"] = {
            "application/json": {},
            "text/csv": {"schema": {"type": "string", "description": "One row per point (SI), with format=csv."}},
        }
    return {status: out, **error_responses(*errors)}


# Dependencies are coroutines: FastAPI runs a plain ``def`` dependency in a worker thread, one hop per request.
async def get_service(request: Request) -> Service:
    return request.app.state.service


async def get_settings(request: Request) -> Settings:
    return request.app.state.settings


ServiceDep = Annotated[Service, Depends(get_service)]
SettingsDep = Annotated[Settings, Depends(get_settings)]


def _answer_response(
    request: Request, out: Answer, hit: bool, fmt: str, kind: str, scenario: str | None = None
) -> Response:
    """The answer as sent: gzipped for a client across a network that takes gzip (compressed once per cached
    answer), as it is for a client on this machine (exomap.web.compression)."""
    headers = {"X-Exomap-Cache": "hit" if hit else "miss", "Vary": "Accept-Encoding"}
    media = "application/json"
    if fmt == "csv":
        name = f"{kind}-{scenario}.csv" if scenario else f"{kind}.csv"
        headers["Content-Disposition"] = f'inline; filename="{name}"'
        media = "text/csv; charset=utf-8"
    compress = accepts_gzip(request.headers) and not local_client(request.scope)
    return AnswerResponse(out, compress=compress, hit=hit, media_type=media, headers=headers)


def _compute_responses(kind: str, post: bool = False) -> dict[int | str, dict[str, Any]]:
    """A computation's answer and errors: 400 (unreadable body) and 404 (no such scenario) for a POST, 404 for a
    GET on a stored scenario; 413 over a limit, 422 invalid input, 503 past the time budget."""
    return answer_responses(
        ANSWER_MODELS[kind],
        *((400,) if post else ()),
        404,
        413,
        422,
        503,
        description=f"The {kind} answer (DESIGN.md §4).",
        csv=kind in CSV_KINDS and not post,  # format=csv is a query parameter of the GET twins
    )


def _number_or_text(value: str | None) -> float | str | None:
    """A query value: a bare number is SI, anything else a quantity with units."""
    if value is None:
        return None
    try:
        return float(value)
    except ValueError:
        return value.strip()


def _pair(value: str | None) -> list[float | str] | str | None:
    """``"lo,hi"`` -> [lo, hi] (left as text when it is not two items, so validation names the field)."""
    if value is None:
        return None
    parts = [p.strip() for p in value.split(",")]
    if len(parts) != 2:
        return value
    return [_number_or_text(p) for p in parts]  # type: ignore[misc]


def _whole(value: str | None) -> int | str | None:
    """A whole-number query value as an int (left as text otherwise, so validation names the field)."""
    if value is None:
        return None
    text = value.strip()
    return int(text) if text.lstrip("-").isdigit() else text


def _validated(model: type, data: dict[str, Any]) -> Any:
    """Build a request model from query values; errors become the usual 422 with ``query`` locations."""
    try:
        return model.model_validate({k: v for k, v in data.items() if v is not None})
    except ValidationError as exc:
        raise RequestValidationError(
            [{**e, "loc": ("query", *e["loc"])} for e in exc.errors(include_url=False, include_context=False)]
        ) from None


def require_save_token(request: Request, settings: Settings) -> None:
    """401 unless the request carries the server's save token (when one is set): every route that stores."""
    if settings.save_token:
        scheme, _, token = request.headers.get("authorization", "").partition(" ")
        if scheme.lower() != "bearer" or not hmac.compare_digest(token.strip().encode(), settings.save_token.encode()):
            raise ApiError(
                401,
                "unauthorized",
                "saving needs the header 'Authorization: Bearer <token>'",
                headers={"WWW-Authenticate": "Bearer"},
            )


def build_router(example_scenario: dict[str, Any] | None) -> APIRouter:
    """The ``/api/v1`` router. ``example_scenario`` is the OpenAPI example of a scenario body."""
    from exomap.schema.document import ScenarioDoc  # the answer model of GET /scenarios/{id}

    # every route refuses query parameters it does not declare (a misspelt one would be silently ignored)
    router = APIRouter(prefix="/api/v1", dependencies=[Depends(refuse_unknown_query)])

    @router.get(
        "/health",
        operation_id="getHealth",
        tags=["service"],
        summary="Liveness: answers at once, even while maps compute",
        response_class=JSONResponse,
        responses=answer_responses(HealthAnswer, 422),  # 422: an undeclared query parameter
    )
    async def health() -> JSONResponse:
        return JSONResponse({"status": "ok"})

    @router.get(
        "/version",
        operation_id="getVersion",
        tags=["service"],
        summary="Version of exomap and of the scenario format it reads",
        response_class=JSONResponse,
        responses=answer_responses(VersionAnswer, 422),  # 422: an undeclared query parameter
    )
    async def version() -> JSONResponse:
        return JSONResponse({"version": exomap.__version__, "scenario_format": SCENARIO_FORMAT})

    @router.get(
        "/scenarios",
        operation_id="listScenarios",
        tags=["scenarios"],
        summary="Demo and saved scenarios, one page at a time (summaries; the documents are one GET each)",
        response_class=JSONResponse,
        responses=answer_responses(ScenarioList, 422, 503),  # 422: an undeclared or out-of-range parameter
    )
    async def list_scenarios(
        service: ServiceDep,
        limit: Annotated[int, Query(ge=1, le=MAX_PAGE, description=f"Scenarios per page (1-{MAX_PAGE}).")] = 100,
        offset: Annotated[int, Query(ge=0, description="How many to skip (demos first, then oldest saved).")] = 0,
    ) -> JSONResponse:
        page = await anyio.to_thread.run_sync(service.store.page, limit, offset)
        following = page.next_offset
        return JSONResponse(
            {
                "scenarios": [s.summary() for s in page.items],
                "total": page.total,
                "limit": page.limit,
                "offset": page.offset,
                "next": None if following is None else f"/api/v1/scenarios?limit={limit}&offset={following}",
            }
        )

    @router.get(
        "/scenarios/{scenario_id}",
        operation_id="getScenario",
        tags=["scenarios"],
        summary="The canonical document of one scenario (SI numbers)",
        response_class=Response,
        responses=answer_responses(
            ScenarioDoc,
            404,
            422,
            503,
            description="The canonical document: every default filled in, every quantity SI.",
        ),
    )
    async def get_scenario(
        service: ServiceDep,
        scenario_id: Annotated[str, Path(description="Scenario id (16 hex digits) or a demo's name.")],
    ) -> Response:
        stored = await anyio.to_thread.run_sync(service.store.get, scenario_id)
        if stored is None:
            raise ApiError(404, "not_found", f"no scenario with id {scenario_id!r}")
        return Response(stored.document, media_type="application/json")

    body_example = example_scenario if example_scenario is not None else {"format": SCENARIO_FORMAT}

    @router.post(
        "/scenarios",
        status_code=201,
        operation_id="saveScenario",
        tags=["scenarios"],
        response_class=JSONResponse,
        summary="Save a scenario (idempotent: the same content always gets the same id)",
        description="201 when the scenario is new, 200 when it is already stored (demo or saved). Nothing is "
        "ever overwritten. When the server has a save token, send `Authorization: Bearer <token>`.",
        responses={
            **answer_responses(ScenarioSummary, 400, 401, 413, 422, status=201, description="Saved."),
            200: {"model": ScenarioSummary, "description": "Already stored (nothing written)."},
        },
    )
    async def save_scenario(
        request: Request,
        service: ServiceDep,
        settings: SettingsDep,
        document: Annotated[
            dict[str, Any],
            # checked by exomap.schema (messages per field); typed for the contract
            WithJsonSchema(
                {**SCENARIO_SCHEMA, "description": "A scenario document (DESIGN.md §3).", "examples": [body_example]}
            ),
            Body(),
        ],
        derived_from: Annotated[
            str | None,
            Query(
                description="Id of the stored scenario this one was edited from (kept as store metadata, not part "
                "of the content id).",
                max_length=200,
            ),
        ] = None,
    ) -> JSONResponse:
        require_save_token(request, settings)
        from exomap import schema

        if derived_from is not None:
            origin = service.store.get(derived_from)
            if origin is None:
                raise ApiError(
                    422,
                    "invalid_input",
                    f"derived_from: no stored scenario has the id {derived_from!r}",
                    [{"field": "derived_from", "message": "no stored scenario has this id"}],
                )
            derived_from = origin.id  # a demo named by its file name is recorded by its content id
        try:
            stored, created = await anyio.to_thread.run_sync(service.store.save, document, derived_from)
        except schema.ScenarioError as exc:
            raise ApiError(422, "invalid_scenario", "the scenario is not valid; see fields", exc.errors) from None
        headers = {"Location": f"/api/v1/scenarios/{stored.id}"}
        return JSONResponse(stored.summary(), status_code=201 if created else 200, headers=headers)

    # -- computations: POST with a body ------------------------------------------------------------------------
    def post_route(kind: str, model: type) -> None:
        async def compute(request: Request, service: ServiceDep, req: Any) -> Response:
            out, hit = await service.answer(kind, req)
            return _answer_response(request, out, hit, "json", kind)

        compute.__annotations__["req"] = Annotated[model, Body()]
        router.add_api_route(
            f"/{kind}",
            compute,
            methods=["POST"],
            summary=SUMMARIES[kind],
            responses=_compute_responses(kind, post=True),
            response_class=Response,
            operation_id=f"compute{kind.capitalize()}",
            tags=[kind],
        )

    for kind, model in REQUEST_MODELS.items():
        post_route(kind, model)

    # -- computations: GET twins on stored scenarios ------------------------------------------------------------
    Id = Annotated[str, Path(description="Scenario id (16 hex digits) or a demo's name.")]
    Tau = Annotated[str | None, Query(description="Residence time: '40 min' or seconds.")]
    Tin = Annotated[str | None, Query(description="Feed temperature: '35 degC' or kelvin.")]
    Conc = Annotated[str | None, Query(description="Feed concentrations 'A:2 mol/L,B:0' (others as scenario).")]
    Tc = Annotated[str | None, Query(description="Coolant temperature: '20 degC' or kelvin.")]

    def concentrations(value: str | None) -> dict[str, Any] | str | None:
        if value is None:
            return None
        out: dict[str, Any] = {}
        for item in value.split(","):
            name, sep, amount = item.partition(":")
            if not sep or not name.strip():
                return value  # not a mapping: validation names the field
            out[name.strip()] = _number_or_text(amount)
        return out

    @router.get(
        "/scenarios/{scenario_id}/steady",
        operation_id="getSteady",
        tags=["steady"],
        summary=SUMMARIES["steady"] + " (stored scenario)",
        responses=_compute_responses("steady"),
        response_class=Response,
    )
    async def get_steady(
        request: Request,
        service: ServiceDep,
        scenario_id: Id,
        residence_time: Tau = None,
        feed_temperature: Tin = None,
        feed_concentrations: Conc = None,
        coolant_temperature: Tc = None,
    ) -> Response:
        req = _validated(
            SteadyRequest,
            {
                "scenario_id": scenario_id,
                "residence_time": _number_or_text(residence_time),
                "feed_temperature": _number_or_text(feed_temperature),
                "feed_concentrations": concentrations(feed_concentrations),
                "coolant_temperature": _number_or_text(coolant_temperature),
            },
        )
        out, hit = await service.answer("steady", req)
        return _answer_response(request, out, hit, "json", "steady")

    @router.get(
        "/scenarios/{scenario_id}/branch",
        operation_id="getBranch",
        tags=["branch"],
        summary=SUMMARIES["branch"] + " (stored scenario)",
        responses=_compute_responses("branch"),
        response_class=Response,
    )
    async def get_branch(
        request: Request,
        service: ServiceDep,
        scenario_id: Id,
        along: Annotated[str | None, Query(description="'residence_time' or 'feed_temperature'.")] = None,
        residence_time: Tau = None,
        feed_temperature: Tin = None,
        range: Annotated[str | None, Query(description="'lo,hi' of the varying parameter.")] = None,
        feed_concentrations: Conc = None,
        coolant_temperature: Tc = None,
    ) -> Response:
        req = _validated(
            BranchRequest,
            {
                "scenario_id": scenario_id,
                "along": along,
                "residence_time": _number_or_text(residence_time),
                "feed_temperature": _number_or_text(feed_temperature),
                "range": _pair(range),
                "feed_concentrations": concentrations(feed_concentrations),
                "coolant_temperature": _number_or_text(coolant_temperature),
            },
        )
        out, hit = await service.answer("branch", req)
        return _answer_response(request, out, hit, "json", "branch")

    @router.get(
        "/scenarios/{scenario_id}/map",
        operation_id="getMap",
        tags=["map"],
        summary=SUMMARIES["map"] + " (stored scenario)",
        responses=_compute_responses("map"),
        response_class=Response,
    )
    async def get_map(
        request: Request,
        service: ServiceDep,
        scenario_id: Id,
        residence_time: Annotated[str | None, Query(description="Window 'lo,hi', e.g. '1 min,10 h'.")] = None,
        feed_temperature: Annotated[str | None, Query(description="Window 'lo,hi', e.g. '0 degC,120 degC'.")] = None,
        points: Annotated[str | None, Query(description="Grid 'n_tau,n_tin', e.g. '200,200'.")] = None,
        spacing: Annotated[str | None, Query(description="'log' or 'linear' residence-time axis.")] = None,
        coolant_temperature: Tc = None,
        samples: Annotated[
            str | None, Query(description="Probability map with this many samples (a power of two, e.g. 256).")
        ] = None,
        seed: Annotated[str | None, Query(description="Seed of the samples (with samples).")] = None,
        format: Annotated[str, Query(description="'json' or 'csv'.", pattern="^(json|csv)$")] = "json",
    ) -> Response:
        pts: Any = None
        if points is not None:
            parts = [p.strip() for p in points.split(",")]
            pts = [int(p) if p.lstrip("-").isdigit() else p for p in parts] if len(parts) == 2 else points
        req = _validated(
            MapRequest,
            {
                "scenario_id": scenario_id,
                "residence_time": _pair(residence_time),
                "feed_temperature": _pair(feed_temperature),
                "points": pts,
                "spacing": spacing,
                "coolant_temperature": _number_or_text(coolant_temperature),
                "samples": _whole(samples),
                "seed": _whole(seed),
            },
        )
        out, hit = await service.answer("map", req, format)
        return _answer_response(request, out, hit, format, "map", scenario_id)

    @router.get(
        "/scenarios/{scenario_id}/check",
        operation_id="getCheck",
        tags=["check"],
        summary=SUMMARIES["check"] + " (stored scenario)",
        responses=_compute_responses("check"),
        response_class=Response,
    )
    async def get_check(
        request: Request,
        service: ServiceDep,
        scenario_id: Id,
        residence_time: Tau = None,
        feed_temperature: Tin = None,
        branch: Annotated[str | None, Query(description="'low' or 'high': which stable state is assumed.")] = None,
        coolant_temperature: Tc = None,
        samples: Annotated[
            str | None, Query(description="Also check under the uncertainty block with this many samples (e.g. 256).")
        ] = None,
        seed: Annotated[str | None, Query(description="Seed of the samples (with samples).")] = None,
    ) -> Response:
        req = _validated(
            CheckRequest,
            {
                "scenario_id": scenario_id,
                "residence_time": _number_or_text(residence_time),
                "feed_temperature": _number_or_text(feed_temperature),
                "branch": branch,
                "coolant_temperature": _number_or_text(coolant_temperature),
                "samples": _whole(samples),
                "seed": _whole(seed),
            },
        )
        out, hit = await service.answer("check", req)
        return _answer_response(request, out, hit, "json", "check")

    @router.get(
        "/scenarios/{scenario_id}/simulate",
        operation_id="getSimulate",
        tags=["simulate"],
        summary=SUMMARIES["simulate"] + " (stored scenario)",
        responses=_compute_responses("simulate"),
        response_class=Response,
    )
    async def get_simulate(
        request: Request,
        service: ServiceDep,
        scenario_id: Id,
        residence_time: Tau = None,
        feed_temperature: Tin = None,
        start: Annotated[str | None, Query(description="'low' or 'high' starting state.")] = None,
        duration: Annotated[str | None, Query(description="Simulated time: '2 h' or seconds.")] = None,
        events: Annotated[
            str | None,
            Query(
                description="The events: a JSON list (URL-encoded), or event lines as the pages write them, one a "
                "line ('at 10 min do feed_stop')."
            ),
        ] = None,
        coolant_temperature: Tc = None,
        format: Annotated[str, Query(description="'json' or 'csv'.", pattern="^(json|csv)$")] = "json",
    ) -> Response:
        parsed_events: Any = None
        if events is not None and not events.lstrip().startswith("["):
            # event lines, as a page link carries them (exomap.core.events.event_from_text reads each)
            parsed_events = [line for line in events.splitlines() if line.strip() and not line.lstrip().startswith("#")]
        elif events is not None:
            try:
                parsed_events = json.loads(events)
            except (ValueError, RecursionError):  # RecursionError: lists nested thousands deep
                raise ApiError(
                    422,
                    "invalid_request",
                    "events: expected a JSON list of events",
                    [{"field": "events", "message": "expected a JSON list of events"}],
                ) from None
        req = _validated(
            SimulateRequest,
            {
                "scenario_id": scenario_id,
                "residence_time": _number_or_text(residence_time),
                "feed_temperature": _number_or_text(feed_temperature),
                "start": start,
                "duration": _number_or_text(duration),
                "events": parsed_events,
                "coolant_temperature": _number_or_text(coolant_temperature),
            },
        )
        out, hit = await service.answer("simulate", req, format)
        return _answer_response(request, out, hit, format, "simulate", scenario_id)

    return router
