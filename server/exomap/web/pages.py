"""Browser pages: ``install(app, settings)`` adds the page routes, the static files and plotly's own bundle.

Pages are thin jinja2 shells; the ES modules in ``web/static`` fetch the JSON API and draw. Every page names its
JSON twin in ``<link rel="alternate" type="application/json">``, and its view state is its query string (see
``exomap.web.urls``). Chart code is plotly's bundle from the installed ``plotly`` package, served gzipped with a
versioned name and a year-long cache, never from a CDN (plants are often air-gapped).
"""

from __future__ import annotations

import gzip
import hashlib
import importlib.resources
import json
import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from fastapi import FastAPI, Request
from fastapi.responses import HTMLResponse, Response
from fastapi.staticfiles import StaticFiles
from jinja2 import Environment, FileSystemLoader, select_autoescape

from exomap import __version__
from exomap.web import urls

YEAR = 365 * 24 * 3600


def _assets_dir() -> Path:
    return Path(str(importlib.resources.files("exomap.assets")))


def _plotly_file() -> tuple[Path, str]:
    import plotly

    path = Path(str(importlib.resources.files("plotly"))) / "package_data" / "plotly.min.js"
    return path, plotly.__version__


#: DESIGN.md §9, used only while ``exomap.core.cautions`` (their one place) is not installed.
_CAUTIONS_FALLBACK = (
    "Screening aid, not a design or safety basis.",
    "Kinetic and thermal data must come from calorimetric testing of the real materials; results inherit the "
    "uncertainty of those data.",
    "It does not replace a hazard study, relief-system design or the site's management of change.",
    "Follow local codes, the site's procedures and the judgement of licensed engineers.",
)


def cautions_text() -> list[str]:
    """The cautions of DESIGN.md §9, from their one place in the core (``exomap.core.cautions``)."""
    try:
        from exomap.core import cautions
    except ImportError:
        return list(_CAUTIONS_FALLBACK)
    for name in ("CAUTIONS", "TEXT", "cautions"):
        value = getattr(cautions, name, None)
        if callable(value):
            value = value()
        if isinstance(value, str):
            return [value]
        if isinstance(value, (list, tuple)) and value:
            return [str(v) for v in value]
    return list(_CAUTIONS_FALLBACK)


@dataclass
class _Bundle:
    """plotly.min.js read and gzipped once, on first request (no work at import or install time)."""

    path: Path
    version: str
    _lock: threading.Lock = field(default_factory=threading.Lock)
    _raw: bytes | None = None
    _gz: bytes | None = None
    etag: str = ""

    def load(self) -> tuple[bytes, bytes]:
        with self._lock:
            if self._raw is None:
                raw = self.path.read_bytes()
                self._gz = gzip.compress(raw, compresslevel=6, mtime=0)
                self.etag = '"' + hashlib.sha256(raw).hexdigest()[:32] + '"'
                self._raw = raw
            assert self._gz is not None
            return self._raw, self._gz


def install(app: FastAPI, settings: Any) -> None:
    """Add the pages, ``/static`` and the plotly bundle to ``app``."""
    assets = _assets_dir()
    env = Environment(
        loader=FileSystemLoader(str(assets / "templates")),
        autoescape=select_autoescape(["html"]),
        trim_blocks=True,
        lstrip_blocks=True,
    )
    plotly_path, plotly_version = _plotly_file()
    bundle = _Bundle(plotly_path, plotly_version)
    token_needed = bool(getattr(settings, "save_token", None))

    def render(name: str, **context: Any) -> HTMLResponse:
        boot = {
            "version": __version__,
            "token_needed": token_needed,
            **context.pop("boot", {}),
        }
        html = env.get_template(name).render(
            urls=urls,
            version=__version__,
            plotly_url=urls.plotly_bundle(plotly_version),
            cautions=cautions_text(),
            boot_json=json.dumps(boot, sort_keys=True),
            **context,
        )
        return HTMLResponse(html, headers={"Cache-Control": "no-cache"})

    @app.get("/", response_class=HTMLResponse, include_in_schema=False)
    def home_page() -> HTMLResponse:
        return render("home.html", twin=urls.api_scenarios(), boot={"page": "home"})

    @app.get("/scenarios/{scenario_id}", response_class=HTMLResponse, include_in_schema=False)
    def scenario_page(scenario_id: str, request: Request) -> HTMLResponse:
        state = urls.view_state(request.query_params)
        return render(
            "scenario.html",
            scenario_id=scenario_id,
            state=state,
            twin=urls.api_twin_of_page(scenario_id, state),
            boot={"page": "scenario", "scenario_id": scenario_id},
        )

    @app.get("/scenarios/{scenario_id}/print", response_class=HTMLResponse, include_in_schema=False)
    def print_page(scenario_id: str, request: Request) -> HTMLResponse:
        state = urls.view_state(request.query_params)
        return render(
            "print.html",
            scenario_id=scenario_id,
            state=state,
            twin=urls.api_twin_of_page(scenario_id, state),
            boot={"page": "print", "scenario_id": scenario_id},
        )

    @app.get(urls.PLOTLY_ROUTE, include_in_schema=False)
    def plotly_js(version: str, request: Request) -> Response:
        if version != plotly_version:
            return Response(
                json.dumps(
                    {
                        "error": {
                            "status": 404,
                            "code": "not_found",
                            "fields": [],
                            "message": f"this server serves plotly {plotly_version}, not {version}",
                        }
                    }
                ),
                status_code=404,
                media_type="application/json",
            )
        raw, gz = bundle.load()
        headers = {
            "Cache-Control": f"public, max-age={YEAR}, immutable",
            "ETag": bundle.etag,
            "Vary": "Accept-Encoding",
        }
        if request.headers.get("if-none-match") == bundle.etag:
            return Response(status_code=304, headers=headers)
        if "gzip" in request.headers.get("accept-encoding", "").lower():
            headers["Content-Encoding"] = "gzip"
            return Response(gz, media_type="text/javascript; charset=utf-8", headers=headers)
        return Response(raw, media_type="text/javascript; charset=utf-8", headers=headers)

    app.mount("/static", StaticFiles(directory=str(assets / "static")), name="static")
