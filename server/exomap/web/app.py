"""The application factory: ``create_app(settings)`` builds the whole web service (API, docs page, pages).

Nothing happens at import time. ``create_app`` opens the scenario store (``settings.database_url``, by default
the SQLite file in ``settings.data_dir``), applying its migrations, and reads the
demo scenarios; the pool of workers starts on the first computation (or at startup under uvicorn, through the
lifespan) and stops with the app.

Middleware, outermost first: the server's time (``Server-Timing`` of computed answers), security headers, the
Host check, HEAD answered as GET without a body, gzip (answers over 1 kB, for clients across a network:
``exomap.web.compression``), CORS (only when ``cors_origins`` is set), the request-body limit. Every failure
goes through ``exomap.web.errors``.
"""

from __future__ import annotations

import gc
import json
import logging
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from importlib import resources
from typing import Any

from fastapi import FastAPI
from starlette.middleware.cors import CORSMiddleware

from exomap.web import apidocs, pages
from exomap.web.api import API_VERSION, build_router
from exomap.web.compare import build_compare_router
from exomap.web.compression import NetworkGZip
from exomap.web.errors import install_error_handlers
from exomap.web.middleware import BodyLimit, HeadAsGet, HostCheck, SecurityHeaders, ServerTiming, allowed_hosts
from exomap.web.plant import build_plant_router
from exomap.web.service import Service
from exomap.web.settings import Settings
from exomap.web.store import open_store

log = logging.getLogger("exomap.web")

#: Demo whose document is the OpenAPI example of a scenario body (the first demo when it is missing).
EXAMPLE_DEMO = "adiabatic-second-order"


def _example_document(names: list[str]) -> dict[str, Any] | None:
    """The demo file as written (with units), for the OpenAPI example of ``POST /scenarios``."""
    if not names:
        return None
    name = EXAMPLE_DEMO if EXAMPLE_DEMO in names else names[0]
    try:
        text = resources.files("exomap.demos").joinpath(f"{name}.json").read_text(encoding="utf-8")
        return json.loads(text)
    except (OSError, ValueError):  # pragma: no cover - the demo was read a moment ago
        return None


def create_app(settings: Settings | None = None, *, warm_up: bool = False) -> FastAPI:
    """Build the exomap web app.

    Parameters
    ----------
    settings : Settings, optional
        Explicit settings; default ``Settings()`` (reads ``EXOMAP_*`` from the environment).
    warm_up : bool
        Start the worker pool at startup (``exomap serve`` does), so the first computation does not wait
        for the workers to import the core.
    """
    settings = settings if settings is not None else Settings()
    store = open_store(settings)  # StoreUnavailableError when it cannot be opened: exomap serve says why
    service = Service(settings, store)

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        if warm_up:
            service.runner.warm_up()
            # Everything built so far (routes, models, the unit registry) lives as long as the server: moving it
            # out of the collector's generations keeps full collections short while requests are served.
            gc.collect()
            gc.freeze()
        try:
            yield
        finally:
            service.runner.shutdown()
            store.close()

    app = FastAPI(
        title="exomap",
        version=API_VERSION,
        summary="Steady states, operating maps, setpoint checks and dynamics of exothermic stirred tanks.",
        description="Screening aid, not a design or safety basis. Quantities are SI numbers or strings with "
        'units. Every error has the shape {"error": {status, code, message, fields}}. The version above is the '
        "API's (README, JSON API); exomap's own is answered by /api/v1/version.",
        openapi_url=apidocs.OPENAPI_PATH,
        docs_url=None,  # the built-in pages load scripts from a CDN; /api/docs is served offline instead
        redoc_url=None,
        lifespan=lifespan,
    )
    app.state.settings = settings
    app.state.store = store
    app.state.service = service

    install_error_handlers(app)
    app.include_router(build_router(_example_document([d.name for d in store.demos if d.name])))
    app.include_router(build_compare_router())
    app.include_router(build_plant_router())
    apidocs.install(app)
    pages.install(app, settings)

    # add_middleware wraps the app, so the last added is the outermost.
    app.add_middleware(
        BodyLimit,
        max_bytes=settings.max_body_bytes,
        timeout_s=settings.body_timeout_s,
        path_limits={"/api/v1/datasets": settings.max_dataset_bytes},
    )
    if settings.cors_origins:
        app.add_middleware(
            CORSMiddleware,
            allow_origins=list(settings.cors_origins),
            allow_methods=["GET", "POST"],
            allow_headers=["Content-Type", "Authorization"],
        )
    # gzip (answers over 1 kB) for clients across a network only (exomap.web.compression)
    app.add_middleware(NetworkGZip, minimum_size=1000)
    app.add_middleware(HeadAsGet)
    app.add_middleware(HostCheck, hosts=allowed_hosts(settings.allowed_hosts, settings.host))
    app.add_middleware(SecurityHeaders)
    app.add_middleware(ServerTiming)
    return app
