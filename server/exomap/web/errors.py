"""One JSON error shape for every failure of the API, built by one helper (``error_response``).

.. code-block:: json

    {"error": {"status": 422, "code": "invalid_scenario", "message": "...",
               "fields": [{"field": "vessel.diameter", "message": "expected a length, e.g. '2 m'"}]}}

``fields`` is always present (empty when the failure is not about a field). The handlers installed by
``install_error_handlers`` reshape every failure into it: request validation, the schema layer's
``ScenarioError``, the core's domain errors, Starlette's 404/405, the body-size guard, and anything
unexpected (a generic 500 whose trace goes to the log, never to the client).
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Sequence
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, ConfigDict, Field
from starlette.exceptions import HTTPException as StarletteHTTPException

from exomap.web.store import StoreUnavailableError

log = logging.getLogger("exomap.web")

#: Code of each plain HTTP status the framework raises on its own.
STATUS_CODES = {
    400: "bad_request",
    401: "unauthorized",
    403: "forbidden",
    404: "not_found",
    405: "method_not_allowed",
    406: "not_acceptable",
    408: "request_timeout",
    413: "too_large",
    415: "unsupported_media_type",
    422: "invalid_request",
    500: "internal_error",
    503: "time_budget_exceeded",
}

#: Seconds a client is asked to wait before retrying a 503 (``Retry-After``).
RETRY_AFTER_S = 5


class FieldError(BaseModel):
    model_config = ConfigDict(extra="forbid")

    field: str = Field(description="Dotted path of the offending input, e.g. 'scenario.vessel.diameter'.")
    message: str = Field(description="What is wrong and what is expected (the unit, for a quantity).")


class ErrorDetail(BaseModel):
    model_config = ConfigDict(extra="forbid")

    status: int = Field(description="The HTTP status code, repeated.")
    code: str = Field(description="A stable machine-readable key, e.g. 'invalid_scenario', 'not_found'.")
    message: str = Field(description="One sentence for a person.")
    fields: list[FieldError] = Field(default_factory=list, description="One entry per offending field.")


class ErrorBody(BaseModel):
    """The body of every error answer."""

    model_config = ConfigDict(extra="forbid")

    error: ErrorDetail


class ApiError(Exception):
    """An error the routes raise on purpose; the handler turns it into the shared shape."""

    def __init__(
        self,
        status: int,
        code: str,
        message: str,
        fields: Iterable[dict[str, str]] = (),
        headers: dict[str, str] | None = None,
    ) -> None:
        super().__init__(message)
        self.status = status
        self.code = code
        self.message = message
        self.fields = [dict(f) for f in fields]
        self.headers = headers


def unavailable(code: str, message: str) -> ApiError:
    """A 503 the client may retry: ``Retry-After`` says when (time budget, busy queue, lost worker, store)."""
    return ApiError(503, code, message, headers={"Retry-After": str(RETRY_AFTER_S)})


def error_body(status: int, code: str, message: str, fields: Sequence[dict[str, str]] = ()) -> dict[str, Any]:
    """The error document (a plain dict) of the shared shape."""
    return {
        "error": {
            "status": int(status),
            "code": code,
            "message": message,
            "fields": [{"field": str(f["field"]), "message": str(f["message"])} for f in fields],
        }
    }


def error_response(
    status: int,
    code: str,
    message: str,
    fields: Sequence[dict[str, str]] = (),
    headers: dict[str, str] | None = None,
) -> JSONResponse:
    """The one helper that builds every error answer of the API."""
    return JSONResponse(error_body(status, code, message, fields), status_code=status, headers=headers)


#: Responses to list in the OpenAPI document of a route (the shared error shape for each status).
def error_responses(*statuses: int) -> dict[int | str, dict[str, Any]]:
    descriptions = {
        400: "The body could not be read (not UTF-8 JSON) or its Content-Length is not a number.",
        401: "A save token is configured and the request did not carry it.",
        404: "No scenario with that id.",
        413: "The body or the requested work (map cells, events, duration) is over the limit.",
        422: "Invalid request, scenario or operating point; one message per field.",
        503: "Retry later (Retry-After): the computation ran past the time budget (time_budget_exceeded), the "
        "queue of computations is full (busy), a worker process died (worker_lost) or the store cannot be "
        "read or written (store_unavailable).",
    }
    return {s: {"model": ErrorBody, "description": descriptions.get(s, "Error.")} for s in statuses}


# -- reshaping request-validation errors -----------------------------------------------------------------------

#: What a field of the request expects, for the messages of validation errors.
FIELD_HINTS = {
    "residence_time": "expected a time, e.g. '40 min', or a number of seconds",
    "feed_temperature": "expected a temperature, e.g. '35 degC', or a number of kelvin",
    "coolant_temperature": "expected a temperature, e.g. '20 degC', or a number of kelvin",
    "feed_concentrations": 'expected an object of species to concentrations, e.g. {"A": "2 mol/L"}',
    "duration": "expected a time, e.g. '2 h', or a number of seconds",
    "points": "expected two whole numbers [n_residence_time, n_feed_temperature], each at least 2",
    "spacing": "expected 'log' or 'linear'",
    "branch": "expected 'low' or 'high'",
    "start": "expected 'low' or 'high'",
    "along": "expected 'residence_time' or 'feed_temperature'",
    "scenario": "expected a scenario document (an object)",
    "scenario_id": "expected the 16-hex-digit id of a stored scenario",
    "events": "expected a list of events",
}


def _location(loc: Sequence[Any]) -> str:
    parts = [p for p in loc if p not in ("body", "query", "path")]
    out = ""
    for p in parts:
        if isinstance(p, int):
            out += f"[{p}]"
        else:
            out += ("." if out else "") + str(p)
    return out or "body"


def _hint(field: str) -> str | None:
    for part in reversed(field.replace("[", ".").split(".")):
        if part in FIELD_HINTS:
            return FIELD_HINTS[part]
    return None


def validation_fields(errors: Iterable[dict[str, Any]]) -> list[dict[str, str]]:
    """One message per field out of pydantic's error list (the first error of each field wins)."""
    out: dict[str, str] = {}
    for err in errors:
        loc = list(err.get("loc", ()))
        # Union members add their type name to the location ("residence_time.float"); drop it.
        while loc and isinstance(loc[-1], str) and loc[-1] in ("float", "str", "int", "list[float]", "dict"):
            loc.pop()
        field = _location(loc)
        if field in out:
            continue
        message = str(err.get("msg", "invalid value"))
        if err.get("type") == "json_invalid":
            message = "the body is not valid JSON"
        elif field == "body" and err.get("type") in ("model_attributes_type", "dict_type", "model_type"):
            message = "expected a JSON object as the request body"
        elif err.get("type") == "missing":
            hint = _hint(field)
            message = "this field is required" + (f"; {hint}" if hint else "")
        elif err.get("type") == "extra_forbidden":
            message = "unknown field"
        else:
            hint = _hint(field)
            if hint:
                message = hint
        out[field] = message
    return [{"field": f, "message": m} for f, m in out.items()]


def install_error_handlers(app: FastAPI) -> None:
    """Route every failure through ``error_response``."""

    @app.exception_handler(ApiError)
    async def _api_error(request: Request, exc: ApiError) -> JSONResponse:
        return error_response(exc.status, exc.code, exc.message, exc.fields, headers=exc.headers)

    @app.exception_handler(StoreUnavailableError)
    async def _store(request: Request, exc: StoreUnavailableError) -> JSONResponse:
        # the message names the file or server, never a password (see exomap.web.store_pg.describe)
        log.error("store unavailable on %s %s: %s", request.method, request.url.path, exc)
        return error_response(503, "store_unavailable", str(exc), headers={"Retry-After": str(RETRY_AFTER_S)})

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError) -> JSONResponse:
        fields = validation_fields(exc.errors())
        return error_response(422, "invalid_request", "the request is not valid; see fields", fields)

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        status = exc.status_code
        code = STATUS_CODES.get(status, "http_error")
        if status == 404:
            message = f"nothing at {request.url.path}"
        elif status == 405:
            method = request.scope.get("exomap.method", request.method)
            message = f"{method} is not allowed on {request.url.path}"
        else:
            message = str(exc.detail) if exc.detail else code.replace("_", " ")
        if status == 400 and request.method == "POST":
            message = "the request body could not be read as UTF-8 JSON"
        return error_response(status, code, message, headers=getattr(exc, "headers", None))

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unexpected error on %s %s", request.method, request.url.path)
        return error_response(500, "internal_error", "an unexpected error occurred; it has been logged")
