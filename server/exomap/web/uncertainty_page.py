"""The probability-map page ``/scenarios/{id}/uncertainty`` (DESIGN.md §11): a thin shell, ``uncertainty.js`` draws.

Its view state is its query string (``exomap.web.urls.UNCERTAINTY_KEYS``): ``samples``, ``seed``, ``show``
(which probability is shaded), and the map window ``map_residence_time``, ``map_feed_temperature``,
``points``, so a link reproduces the view; a link without samples, seed or points is sent on to the one that
names them (the grid defaults to the scenario's, at most 100 x 100). Its JSON twin is the map answer with the
same samples and seed.
"""

from __future__ import annotations

import json
from typing import Any

from fastapi import FastAPI, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from exomap.web import urls


def _document(document: str) -> dict[str, Any]:
    try:
        doc = json.loads(document)
    except ValueError:
        return {}
    return doc if isinstance(doc, dict) else {}


def _block(document: str) -> tuple[str, str]:
    """(samples, seed) of a stored document's uncertainty block, as text; the defaults without one."""
    block = _document(document).get("uncertainty") or {}
    if not isinstance(block, dict):
        block = {}
    return str(block.get("samples", 256)), str(block.get("seed", 0))


# the probability map's grid when the link names none: the scenario's, at most this many points per axis (a
# probability map computes one map per sample; at 256 samples a 200 x 200 grid of several reactions takes
# tens of seconds, past the web time budget on a busy server, while 100 x 100 takes a few)
DEFAULT_MAX_POINTS = 100


def _points(document: str) -> str:
    """The default grid ``n_tau,n_tin`` of the page: the scenario's map points, each at most
    ``DEFAULT_MAX_POINTS`` (100 x 100 when the scenario names none)."""
    spec = _document(document).get("map") or {}
    pts = spec.get("points") if isinstance(spec, dict) else None
    if not (isinstance(pts, list) and len(pts) == 2 and all(isinstance(n, int) and n >= 2 for n in pts)):
        pts = [DEFAULT_MAX_POINTS, DEFAULT_MAX_POINTS]
    return ",".join(str(min(n, DEFAULT_MAX_POINTS)) for n in pts)


def _in_order(state: dict[str, Any]) -> dict[str, Any]:
    return {k: state[k] for k in urls.UNCERTAINTY_KEYS if k in state}


def install_pages(app: FastAPI, render: Any) -> None:
    """Add the page route."""

    @app.get("/scenarios/{scenario_id}/uncertainty", response_class=HTMLResponse, include_in_schema=False)
    def uncertainty_page(scenario_id: str, request: Request) -> Response:
        state = urls.uncertainty_state(request.query_params)
        stored = request.app.state.store.get(scenario_id)
        if stored is None:
            response = render(
                "missing.html", scenario_id=scenario_id, twin=urls.api_scenarios(), boot={"page": "missing"}
            )
            response.status_code = 404
            return response
        if stored.id != scenario_id or any(k not in state for k in ("samples", "seed", "points")):
            # the link always names its samples, seed and grid: missing samples and seed are the scenario's
            # block's (256 and 0 by default), a missing grid the scenario's capped at DEFAULT_MAX_POINTS per
            # axis, and a demo named by its file name goes to its content id, so the link is exact
            block = _block(stored.document)
            state = {
                **state,
                "samples": state.get("samples", block[0]),
                "seed": state.get("seed", block[1]),
                "points": state.get("points", _points(stored.document)),
            }
            return RedirectResponse(urls.uncertainty_page(stored.id, _in_order(state)), status_code=307)
        return render(
            "uncertainty.html",
            scenario_id=scenario_id,
            title=stored.title,
            state=state,
            twin=urls.api_uncertainty_map(scenario_id, state),
            # the number of reactions sets the page's estimate of the computing time (several: the general path)
            boot={
                "page": "uncertainty",
                "scenario_id": scenario_id,
                "reactions": len(_document(stored.document).get("reactions") or []),
            },
        )
