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
from fastapi.responses import HTMLResponse, RedirectResponse, Response
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


def cautions_text() -> list[str]:
    """The cautions of DESIGN.md §9, from their one place (``exomap.core.cautions``)."""
    from exomap.core.cautions import CAUTIONS

    return list(CAUTIONS)


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
            "plotly_url": urls.plotly_bundle(plotly_version),
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

    def lookup(request: Request, scenario_id: str) -> Any:
        """The stored scenario (demo or saved) of an id or demo name, or None."""
        return request.app.state.store.get(scenario_id)

    def missing(scenario_id: str) -> HTMLResponse:
        response = render("missing.html", scenario_id=scenario_id, twin=urls.api_scenarios(), boot={"page": "missing"})
        response.status_code = 404
        return response

    def scenario_view(template: str, page: Any, request: Request, scenario_id: str) -> Response:
        stored = lookup(request, scenario_id)
        keys = urls.VIEW_KEYS + (urls.SIGNOFF_KEYS if template == "print.html" else ())
        state = urls.view_state(request.query_params, keys)
        if stored is None:
            return missing(scenario_id)
        if stored.id != scenario_id:
            # a demo named by its file name: send the browser to its content id, so the link is exact
            return RedirectResponse(page(stored.id, state), status_code=307)
        return render(
            template,
            scenario_id=scenario_id,
            title=stored.title,
            state=state,
            twin=urls.api_twin_of_page(scenario_id, state),
            boot={"page": template.removesuffix(".html"), "scenario_id": scenario_id},
        )

    @app.get("/scenarios/{scenario_id}", response_class=HTMLResponse, include_in_schema=False)
    def scenario_page(scenario_id: str, request: Request) -> Response:
        return scenario_view("scenario.html", urls.scenario_page, request, scenario_id)

    @app.get("/scenarios/{scenario_id}/print", response_class=HTMLResponse, include_in_schema=False)
    def print_page(scenario_id: str, request: Request) -> Response:
        return scenario_view("print.html", urls.print_page, request, scenario_id)

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

    from exomap.web import compare, uncertainty_page

    compare.install_pages(app, render)
    uncertainty_page.install_pages(app, render)

    app.mount("/static", StaticFiles(directory=str(assets / "static")), name="static")
