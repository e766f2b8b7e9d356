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


def _checked(seed: int) -> str:
    return f"() => document.getElementById('unc-check').dataset.seed === '{seed}'"


def test_check_with_confidence_in_plain_words(page: Any, server: str, api: httpx.Client, uncertain_tank: str) -> None:
    # the check's uncertainty block on the page: counts, probabilities and bounds in words, the quantiles of the
    # steady temperature, MTSR and TMRad, all the answer's own numbers; samples, seed and setpoint in the link
    page.goto(f"{server}/scenarios/{uncertain_tank}/uncertainty?samples=32&seed=1&points=20,16")
    page.wait_for_function(_checked(1), timeout=TIMEOUT)
    link = page.get_attribute("#unc-check-json", "href")
    q = {k: v[0] for k, v in parse_qs(urlparse(link).query).items()}
    assert q["samples"] == "32" and q["seed"] == "1"
    answer = api.get(link).json()
    u = answer["uncertainty"]
    c, n = u["counts"], u["samples"]
    lines = page.inner_text("#unc-check-lines")
    assert f"outside in {c['outside']} of {n} samples" in lines
    assert f"marginal or worse in {c['marginal_or_worse']} of {n} samples" in lines
    assert f"at most {100 * u['upper_bound_95']['outside']:.1f} % with 95 % confidence" in lines
    quantiles = page.inner_text("#unc-check-quantiles")
    for key in ("temperature_K", "mtsr_K"):
        assert f"{u['quantiles'][key]['q50'] - 273.15:.1f} °C" in quantiles
    assert "TMRad" in quantiles and "MTSR" in quantiles
    assert "max_unsafe_probability" in page.inner_text("#unc-check-policy")
    # what the bounds and the per-sample margins are, from the answer
    assert u["upper_bound_basis"] in page.inner_text("#unc-check-notes") and "Sobol" in u["upper_bound_basis"]
    assert "32 samples (seed 1)" in page.inner_text("#unc-check-setpoint")
    assert page.locator("#unc-check-drivers tr").count() == 1 + len(u["drivers"])
    page.wait_for_function(_drawn(1), timeout=TIMEOUT)
    screenshot(page, "check-with-confidence", full_page=True)
    # another setpoint and seed typed into the form go into the page's link and the check follows
    page.fill("#unc-tin", "30 °C")
    page.fill("#unc-seed", "2")
    page.click("#unc-go")
    page.wait_for_function(_checked(2), timeout=TIMEOUT)
    q = {k: v[0] for k, v in parse_qs(urlparse(page.url).query).items()}
    assert q["seed"] == "2" and q["samples"] == "32" and abs(float(q["feed_temperature"]) - 303.15) < 1e-9
    assert "feed 30.0 °C" in page.inner_text("#unc-check-setpoint")
    # the link reproduces the view in a fresh page
    page.goto(page.url)
    page.wait_for_function(_checked(2), timeout=TIMEOUT)
    assert page.input_value("#unc-tin") == "30 °C"
    # the scenario page's link to this page carries its setpoint (the check there is the nominal one)
    page.goto(f"{server}/scenarios/{uncertain_tank}?residence_time=1800&feed_temperature=300&branch=low")
    href = page.get_attribute("#uncertainty-link", "href")
    q = {k: v[0] for k, v in parse_qs(urlparse(href).query).items()}
    assert q["residence_time"] == "1800" and q["feed_temperature"] == "300" and q["branch"] == "low"
