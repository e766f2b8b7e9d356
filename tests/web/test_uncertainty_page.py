"""The probability-map page (/scenarios/{id}/uncertainty): a thin shell with its JSON twin (the probability map
with the link's samples and seed), the cautions, and a palette of our own that reads in greyscale."""

from __future__ import annotations

import copy
import json
import re
from importlib import resources
from pathlib import Path
from typing import Any

from exomap.web import urls
from test_pages import _srgb_to_lab_l, parse, twin_of
from web_scenarios import ADIABATIC

ASSETS = Path(str(resources.files("exomap.assets")))
UNCERTAIN = copy.deepcopy(ADIABATIC)
UNCERTAIN["uncertainty"] = {
    "parameters": [{"target": "reactions[0].activation_energy", "distribution": "normal", "sd": "2 kJ/mol"}]
}


def test_page_twin_is_the_probability_map_of_its_link(client: Any) -> None:
    sid = client.post("/api/v1/scenarios", json=UNCERTAIN).json()["id"]
    state = {"samples": "64", "seed": "3", "show": "runaway", "points": "20,16", "panel": "ignored"}
    r = client.get(urls.uncertainty_page(sid, state))
    assert r.status_code == 200
    twin = twin_of(r.text)
    assert twin == urls.api_uncertainty_map(sid, {"samples": "64", "seed": "3", "points": "20,16"})
    assert "samples=64" in twin and "seed=3" in twin and "points=20,16" in twin
    for caution in ("Screening aid", "calorimetric testing"):
        assert caution in r.text
    links = parse(r.text)
    assert any(s.startswith("/static/uncertainty.js") for s in links.scripts)
    assert links.anchors["unc-csv"].endswith("format=csv")
    # the page's time estimate knows how many reactions there are (one: the closed-form path)
    boot = json.loads(re.search(r'<script type="application/json" id="boot">(.*?)</script>', r.text, re.S).group(1))
    assert boot["reactions"] == len(UNCERTAIN["reactions"]) == 1
    # the twin answers: the nominal map with the probability keys
    doc = client.get(twin).json()
    assert doc["samples"] == 64 and doc["seed"] == 3 and "region" in doc and "robust_window" in doc


def test_page_of_a_demo_name_redirects_and_unknown_is_404(client: Any) -> None:
    r = client.get("/scenarios/adiabatic-second-order/uncertainty?samples=64&seed=2", follow_redirects=False)
    assert r.status_code == 307
    # the demo's grid is 200 x 200: the page's default is capped at 100 x 100 (a probability map is one map per
    # sample; several reactions at 200 x 200 and 256 samples run past the web time budget)
    assert r.headers["location"].endswith("/uncertainty?samples=64&seed=2&points=100,100")
    assert client.get("/scenarios/0123456789abcdef/uncertainty").status_code == 404


def test_the_link_always_names_samples_seed_and_grid(client: Any) -> None:
    # missing ones are filled from the scenario's uncertainty block (here 128 and 7), then the defaults 256, 0;
    # the grid is the scenario's (here 40 x 40), at most 100 x 100
    doc = copy.deepcopy(UNCERTAIN)
    doc["uncertainty"] = {**doc["uncertainty"], "samples": 128, "seed": 7}
    sid = client.post("/api/v1/scenarios", json=doc).json()["id"]
    r = client.get(f"/scenarios/{sid}/uncertainty?show=runaway", follow_redirects=False)
    assert r.status_code == 307
    assert r.headers["location"] == urls.uncertainty_page(
        sid, {"samples": "128", "seed": "7", "show": "runaway", "points": "40,40"}
    )
    r = client.get(f"/scenarios/{sid}/uncertainty?seed=1", follow_redirects=False)
    assert r.headers["location"].endswith("?samples=128&seed=1&points=40,40")
    plain = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    r = client.get(f"/scenarios/{plain}/uncertainty", follow_redirects=False)
    assert r.headers["location"].endswith("?samples=256&seed=0&points=40,40")
    # a link that names its grid keeps it, finer than the default included
    r = client.get(f"/scenarios/{plain}/uncertainty?samples=8&seed=0&points=150,120", follow_redirects=False)
    assert r.status_code == 200


def test_probability_palette_darkens_steadily() -> None:
    """Sequential palette of our own: CIE L* falls by at least 8 from each stop to the next (our own threshold,
    so neighbouring shades stay apart in greyscale), over at least 75 in all."""
    text = (ASSETS / "static" / "uncertainty.js").read_text(encoding="utf-8")
    block = text[text.index("PROBABILITY_STOPS") : text.index("];")]
    stops = re.findall(r'\[([\d.]+), "(#[0-9a-fA-F]{6})"\]', block)
    assert [float(p) for p, _ in stops] == sorted(float(p) for p, _ in stops)
    assert float(stops[0][0]) == 0.0 and float(stops[-1][0]) == 1.0
    L = [_srgb_to_lab_l(c) for _, c in stops]
    for a, b in zip(L, L[1:], strict=False):
        assert a - b >= 8.0, L
    assert L[0] - L[-1] >= 75.0, L


def test_browser_and_server_build_the_same_page_urls() -> None:
    js = (ASSETS / "static" / "urls.js").read_text(encoding="utf-8")
    keys = re.search(r"UNCERTAINTY_KEYS = \[([^\]]*)\]", js).group(1)
    assert tuple(re.findall(r'"(\w+)"', keys)) == urls.UNCERTAINTY_KEYS


def test_the_check_with_confidence_is_linked_with_its_setpoint_samples_and_seed(client: Any) -> None:
    # the page's setpoint keys (SI, as on the scenario page) go into the check's JSON link with samples and seed,
    # and that link answers the check with its uncertainty block
    sid = client.post("/api/v1/scenarios", json=UNCERTAIN).json()["id"]
    state = {"samples": "16", "seed": "4", "residence_time": "1500", "feed_temperature": "310", "branch": "low"}
    r = client.get(urls.uncertainty_page(sid, state))
    assert r.status_code == 200
    link = parse(r.text).anchors["unc-check-json"]
    assert link == urls.api_uncertainty_check(sid, state)
    for part in ("residence_time=1500", "feed_temperature=310", "branch=low", "samples=16", "seed=4"):
        assert part in link
    doc = client.get(link).json()
    assert doc["operating_point"]["residence_time_s"] == 1500.0 and doc["operating_point"]["feed_temperature_K"] == 310
    u = doc["uncertainty"]
    assert u["samples"] == 16 and u["seed"] == 4
    # a link without samples keeps its setpoint through the redirect that names them
    r = client.get(f"/scenarios/{sid}/uncertainty?residence_time=1500&branch=high", follow_redirects=False)
    assert r.headers["location"].endswith("?samples=256&seed=0&points=40,40&residence_time=1500&branch=high")
