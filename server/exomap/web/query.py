"""Strict query strings: a GET route refuses a query parameter it does not declare (422 naming it).

A plant tool that misspells ``residence_time`` must not get a plausible answer for the nominal point, so an
unknown or repeated parameter is an error, as an unknown field of a POST body is. The allowed names are read
from the matched route's own declaration (FastAPI's dependant), so a route never lists them twice.
"""

from __future__ import annotations

from typing import Any

from fastapi import Request

from exomap.web.errors import ApiError

#: Attribute of a route holding the names of its query parameters (computed on its first request).
_NAMES = "_exomap_query_names"


def _query_names(dependant: Any) -> set[str]:
    """Query parameter names of a route's dependant and of its sub-dependencies."""
    names = {p.alias for p in getattr(dependant, "query_params", ())}
    for sub in getattr(dependant, "dependencies", ()):
        names |= _query_names(sub)
    return names


def _allowed(route: object) -> frozenset[str] | None:
    dependant = getattr(route, "dependant", None)
    if dependant is None:
        return None
    names = getattr(route, _NAMES, None)
    if names is None:
        names = frozenset(_query_names(dependant))
        setattr(route, _NAMES, names)
    return names


async def refuse_unknown_query(request: Request) -> None:
    """Router dependency: 422 when the query string has a parameter the route does not declare, or one twice."""
    if not request.scope.get("query_string"):
        return
    allowed = _allowed(request.scope.get("route"))
    if allowed is None:
        return
    shown = ", ".join(sorted(allowed)) or "none"
    fields: list[dict[str, str]] = []
    seen: set[str] = set()
    for name, _ in request.query_params.multi_items():
        if name not in allowed:
            fields.append({"field": name, "message": f"unknown query parameter; this route takes: {shown}"})
        elif name in seen:
            fields.append({"field": name, "message": "given more than once; give it once"})
        seen.add(name)
    if fields:
        unique = list({f["field"]: f for f in fields}.values())
        first = unique[0]
        raise ApiError(422, "invalid_request", f"{first['field']}: {first['message']}", unique)
