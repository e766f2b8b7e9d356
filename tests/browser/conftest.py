"""Fixtures of the browser tests: the real server on a free port, the system Chromium, a guard on other hosts.

The server runs in a subprocess (uvicorn with ``create_app(Settings(data_dir=tmp))``, default settings
otherwise, so the process pool is exercised as in production). Every page request goes through a route
handler that aborts, and records as a failure, any request to a host other than 127.0.0.1/localhost: the pages
must work on an air-gapped plant network. Chromium is the system one (/usr/bin/chromium); when it is missing
the tests fail rather than skip.
"""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any
from urllib.parse import urlparse

import httpx
import pytest

sys.path.insert(0, str(Path(__file__).parent))  # browser_helpers.py

from browser_helpers import HERE  # noqa: E402

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]
LOCAL_HOSTS = {"127.0.0.1", "localhost"}

SERVER_CODE = """
import sys, uvicorn
from pathlib import Path
from exomap.web.app import create_app
from exomap.web.settings import Settings
app = create_app(Settings(data_dir=Path(sys.argv[1])), warm_up=True)
uvicorn.run(app, host="127.0.0.1", port=int(sys.argv[2]), log_level="warning")
"""


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@pytest.fixture(scope="session")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """Base URL of a running exomap server on a fresh data folder."""
    data = tmp_path_factory.mktemp("exomap-data")
    port = _free_port()
    log = open(data / "server.log", "w+b")  # noqa: SIM115 - closed below
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    proc = subprocess.Popen([sys.executable, "-c", SERVER_CODE, str(data), str(port)], stdout=log, stderr=log, env=env)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    try:
        while True:
            if proc.poll() is not None:
                log.seek(0)
                pytest.fail(f"the server exited early:\n{log.read().decode(errors='replace')}")
            try:
                if httpx.get(f"{base}/api/v1/health", timeout=2).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if time.monotonic() > deadline:
                pytest.fail("the server did not answer /api/v1/health within 60 s")
            time.sleep(0.2)
        yield base
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


@pytest.fixture(scope="session")
def api(server: str) -> Iterator[httpx.Client]:
    with httpx.Client(base_url=server, timeout=120) as client:
        yield client


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    if not Path(CHROMIUM).exists():
        pytest.fail(f"Chromium is not installed at {CHROMIUM}; the browser tests need it (they never download one)")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        yield b
        b.close()


class Guard:
    """Aborts and records requests to other hosts; records page errors and failed local requests."""

    def __init__(self) -> None:
        self.foreign: list[str] = []
        self.page_errors: list[str] = []

    def route(self, route: Any) -> None:
        host = urlparse(route.request.url).hostname or ""
        if route.request.url.startswith(("data:", "blob:")) or host in LOCAL_HOSTS:
            route.continue_()
        else:
            self.foreign.append(route.request.url)
            route.abort()

    def watch(self, page: Any) -> Any:
        page.on("pageerror", lambda exc: self.page_errors.append(str(exc)))
        return page

    def check(self) -> None:
        assert not self.foreign, f"requests to other hosts: {self.foreign}"
        assert not self.page_errors, f"script errors in the page: {self.page_errors}"


@pytest.fixture
def new_context(browser: Any) -> Iterator[Callable[..., Any]]:
    """Factory of fresh browser contexts (no shared storage), 1366x768, each guarded."""
    made: list[tuple[Any, Guard]] = []

    def make(**options: Any) -> Any:
        options.setdefault("viewport", {"width": 1366, "height": 768})
        ctx = browser.new_context(**options)
        guard = Guard()
        ctx.route("**/*", guard.route)
        ctx.guard = guard  # type: ignore[attr-defined]
        made.append((ctx, guard))
        return ctx

    yield make
    for ctx, _ in made:
        ctx.close()
    for _, guard in made:
        guard.check()


@pytest.fixture
def page(new_context: Callable[..., Any]) -> Any:
    ctx = new_context()
    return ctx.guard.watch(ctx.new_page())


@pytest.fixture(scope="session")
def demo(api: httpx.Client) -> dict[str, Any]:
    """A demo scenario with several steady states somewhere on its map (the jacketed one when installed)."""
    demos = [s for s in api.get("/api/v1/scenarios").json()["scenarios"] if s["demo"]]
    assert demos, "no demo scenarios are installed"
    by_name = {d["name"]: d for d in demos}
    return by_name.get("jacketed-first-order", demos[0])


@pytest.fixture(scope="session")
def test_tank(api: httpx.Client) -> str:
    """Id of the invented jacketed test tank of this folder, saved in the server's store."""
    doc = json.loads((HERE / "jacketed_tank.json").read_text(encoding="utf-8"))
    response = api.post("/api/v1/scenarios", json=doc)
    assert response.status_code in (200, 201), response.text
    return str(response.json()["id"])
