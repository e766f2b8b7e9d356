"""The compare page and its print sheet in the system Chromium against the real server.

Every expected value is read from the JSON API of the same server (the page must show what the API answers).
"""

from __future__ import annotations

import json
from typing import Any
from urllib.parse import urlencode

import httpx
import pytest
from browser_helpers import HERE, open_page, screenshot

pytestmark = pytest.mark.browser

READY = "() => document.body.dataset.ready === '1'"
TIMEOUT = 90_000


@pytest.fixture(scope="module")
def edited_tank(api: httpx.Client) -> tuple[str, str]:
    """(original id, edited id): the invented test tank and a copy with a weaker jacket and a faster feed."""
    doc = json.loads((HERE / "jacketed_tank.json").read_text(encoding="utf-8"))
    a = api.post("/api/v1/scenarios", json=doc).json()["id"]
    doc["jacket"]["ua"] = "1.5 kW/K"
    doc["feed"]["flow"] = "3.2 m^3/h"
    doc["title"] = "Test tank, weaker jacket (invented)"
    b = api.post("/api/v1/scenarios", json=doc).json()["id"]
    return a, b


def test_compare_page_shows_what_the_api_answers(
    new_context: Any, server: str, api: httpx.Client, edited_tank: tuple[str, str]
) -> None:
    a, b = edited_tank
    state = {"a": a, "b": b, "points": "50,40", "prepared_by": "A. Engineer", "change_reference": "MOC-0001"}
    page = open_page(new_context(viewport={"width": 1366, "height": 900}))
    page.goto(f"{server}/compare?{urlencode(state)}")
    page.wait_for_function(READY, timeout=TIMEOUT)
    ans = api.get(f"/api/v1/compare?{urlencode({'a': a, 'b': b, 'points': '50,40'})}").json()
    # the fields table lists exactly the fields the API names
    shown = page.eval_on_selector_all("#cmp-fields tr[data-field]", "rs => rs.map(r => r.dataset.field)")
    assert shown == [d["field"] for d in ans["fields"]]
    assert set(shown) == {"feed.flow", "jacket.ua", "title"}
    summary = page.inner_text("#cmp-summary")
    assert f"{ans['map']['changed_count']} of {ans['map']['cells']} cells" in summary
    # the change map's cells are the API's direction grid (0 same, 1 better, 2 worse)
    z = page.evaluate("() => document.getElementById('cmp-map').data[0].z")
    want = [[2 if d > 0 else 1 if d < 0 else 0 for d in row] for row in ans["map"]["direction"]]
    assert z == want
    for s in ("a", "b"):
        verdict = page.get_attribute(f"#cmp-verdict-{s}", "data-verdict")
        assert verdict == ans["checks"][s]["verdict"]
    # the page names its JSON twin, and the sign-off fields travel in the print link
    assert "/api/v1/compare?" in page.get_attribute("#json-twin", "href")
    href = page.get_attribute("#cmp-print", "href")
    assert "prepared_by=A.+Engineer" in href or "prepared_by=A.%20Engineer" in href
    screenshot(page, "compare-page", full_page=True)


def test_compare_print_sheet_carries_the_sign_off_fields(
    new_context: Any, server: str, edited_tank: tuple[str, str]
) -> None:
    a, b = edited_tank
    state = {
        "a": a,
        "b": b,
        "points": "50,40",
        "prepared_by": "A. Engineer",
        "reviewed_by": "B. Reviewer",
        "change_reference": "MOC-0001",
        "review_date": "2026-12-02",
    }
    page = open_page(new_context(viewport={"width": 1000, "height": 1400}))
    page.goto(f"{server}/compare/print?{urlencode(state)}")
    page.wait_for_function(READY, timeout=TIMEOUT)
    assert page.inner_text("#cp-prepared") == "A. Engineer"
    assert page.inner_text("#cp-reviewed") == "B. Reviewer"
    assert page.inner_text("#cp-ref") == "MOC-0001"
    assert page.inner_text("#cp-review-date") == "2026-12-02"
    assert page.locator("#cp-fields tr[data-field]").count() == 3
    assert "Cautions" in page.inner_text(".sheet-cautions")
    screenshot(page, "compare-print", full_page=True)


def test_compare_form_builds_the_link(new_context: Any, server: str, edited_tank: tuple[str, str]) -> None:
    a, b = edited_tank
    page = open_page(new_context())
    page.goto(f"{server}/compare")
    page.wait_for_function(READY, timeout=TIMEOUT)
    page.select_option("#cmp-a", a)
    page.select_option("#cmp-b", a)
    page.fill("#cmp-tau-a", "40 min")
    page.fill("#cmp-tau-b", "30 min")
    page.click("#cmp-go")
    page.wait_for_url("**/compare?*")
    page.wait_for_function(READY, timeout=TIMEOUT)
    assert "residence_time_a=2400" in page.url and "residence_time_b=1800" in page.url
    # the same scenario twice: only the setpoints differ
    assert "only the setpoints differ" in page.inner_text("#cmp-fields")
