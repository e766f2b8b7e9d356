"""The probability-map page in the system Chromium against the real server: it shades exactly the answer's
probabilities, outlines the robust window, draws the nominal boundaries over it, keeps samples and seed in the
link, and shows progress while it computes. Screenshots go to artifacts/screenshots/ (not committed)."""

from __future__ import annotations

import json
from typing import Any
from urllib.parse import parse_qs, urlparse

import httpx
import pytest
from browser_helpers import HERE, screenshot

pytestmark = pytest.mark.browser
TIMEOUT = 120_000


def _drawn(seed: int) -> str:
    return f"() => (document.getElementById('unc-map') || {{dataset: {{}}}}).dataset.seed === '{seed}'"


@pytest.fixture(scope="module")
def uncertain_tank(api: httpx.Client) -> str:
    doc = json.loads((HERE / "jacketed_tank.json").read_text(encoding="utf-8"))
    doc["title"] = "Jacketed test tank with uncertain kinetics (invented)"
    doc["uncertainty"] = {
        "parameters": [
            {"target": "reactions[0].rate_constant", "distribution": "lognormal", "factor": 1.4},
            {"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "2 kJ/mol"},
        ]
    }
    r = api.post("/api/v1/scenarios", json=doc)
    assert r.status_code in (200, 201), r.text
    return str(r.json()["id"])


def test_probability_map_page(page: Any, server: str, api: httpx.Client, uncertain_tank: str) -> None:
    page.goto(f"{server}/scenarios/{uncertain_tank}/uncertainty?samples=32&seed=1&points=40,30")
    page.wait_for_function(_drawn(1), timeout=TIMEOUT)
    # progress was shown while the answer was computed (it may be over before page.goto returns, which waits
    # for the chart library's preload: the page counts how often it showed it), and is gone now
    assert page.get_attribute("#unc-progress", "data-shown") == "1"
    assert "32 samples (seed 1)" in page.text_content("#unc-progress-text")
    assert page.is_hidden("#unc-progress")
    answer = api.get(f"/api/v1/scenarios/{uncertain_tank}/map?samples=32&seed=1&points=40,30").json()
    traces = page.evaluate(
        "() => document.getElementById('unc-map').data.map(t => ({name: t.name, type: t.type, z: t.z || null}))"
    )
    names = [t["name"] for t in traces]
    heat = next(t for t in traces if t["type"] == "heatmap")
    assert heat["name"] == "probability:unsafe" and heat["z"] == answer["probability"]["unsafe"]
    assert "robust_window" in names
    drawn = {n.split(":")[1] for n in names if n.startswith("boundary:") and not n.endswith(":halo")}
    wanted = {k for k, v in answer["boundaries"].items() if k != "cusp" and sum(p[0] is not None for p in v) >= 2}
    assert drawn == wanted and "ignition" in drawn
    assert "robust window" in page.inner_text("#unc-legend")
    screenshot(page, "probability-map")
    # a new seed and another shaded probability go into the link, and the chart follows
    page.fill("#unc-seed", "2")
    page.select_option("#unc-show", "runaway")
    page.click("#unc-go")
    page.wait_for_function(_drawn(2), timeout=TIMEOUT)
    assert page.get_attribute("#unc-progress", "data-shown") == "2"
    q = {k: v[0] for k, v in parse_qs(urlparse(page.url).query).items()}
    assert q["samples"] == "32" and q["seed"] == "2" and q["show"] == "runaway"
    heat = page.evaluate("() => document.getElementById('unc-map').data.find(t => t.type === 'heatmap').name")
    assert heat == "probability:runaway"
    # the link reproduces the view in a fresh page
    page.goto(page.url)
    page.wait_for_function(_drawn(2), timeout=TIMEOUT)
    assert page.input_value("#unc-show") == "runaway"
