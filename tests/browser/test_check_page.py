"""The setpoint check on the page and the print sheet: every alarm of every upset, where and why an upset run
stopped, MTSR beside its dynamic counterpart, and an undetermined verdict showing only what failed.

Expected values are read from the JSON API of the same server (the page must show what the API answers).
"""

from __future__ import annotations

import json
from typing import Any

import httpx
import pytest
from browser_helpers import open_page, screenshot

pytestmark = pytest.mark.browser

CHECK_DONE = "() => Boolean(document.querySelector('#verdict[data-verdict]'))"
TIMEOUT = 90_000
ALARM_WORDS = {
    "alarm_temperature": "temperature alarm",
    "max_temperature": "maximum temperature",
    "level_high": "level high",
    "level_low": "level low",
    "overflow": "overflow",
    "empty": "tank empty",
}


def _check(api: httpx.Client, scenario_id: str) -> dict[str, Any]:
    r = api.get(f"/api/v1/scenarios/{scenario_id}/check")
    assert r.status_code == 200, r.text
    return r.json()


def test_upset_table_lists_every_alarm_and_how_each_run_ended(page: Any, server: str, api: httpx.Client, demo) -> None:
    chk = _check(api, demo["id"])
    page.goto(f"{server}/scenarios/{demo['id']}")
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    rows = page.locator("#upsets tr")
    assert rows.count() == len(chk["upsets"]) + 1
    for i, u in enumerate(chk["upsets"]):
        text = rows.nth(i + 1).inner_text()
        assert u["label"] in text
        for a in u["alarms"]:
            assert ALARM_WORDS[a["kind"]] in text, (u["key"], a)
        if not u["alarms"]:
            assert "none" in text
        if u["stop_reason"] == "overflow":
            assert "stopped: overflow" in text
        if u["ending"] == "settled":
            assert "settled at" in text
    # the jacketed demo's blocked outlet: level high, then overflow (both listed, in that order)
    blocked = next(u for u in chk["upsets"] if u["key"] == "outlet_blocked")
    assert [a["kind"] for a in blocked["alarms"]] == ["level_high", "overflow"]
    i = chk["upsets"].index(blocked)
    text = rows.nth(i + 1).inner_text()
    assert text.index("level high") < text.index("overflow")


def test_upset_plot_draws_level_limits_and_where_the_run_stopped(
    page: Any, server: str, api: httpx.Client, demo
) -> None:
    chk = _check(api, demo["id"])
    i = next(k for k, u in enumerate(chk["upsets"]) if u["key"] == "outlet_blocked")
    page.goto(f"{server}/scenarios/{demo['id']}?upset={i}")
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    page.wait_for_function("() => document.getElementById('upset-plot').data", timeout=TIMEOUT)
    traces = page.evaluate(
        "() => document.getElementById('upset-plot').data.map(t => ({name: t.name, y: Array.from(t.y), "
        "x: Array.from(t.x), text: t.text ? Array.from(t.text) : []}))"
    )
    by = {t["name"]: t for t in traces}
    sc = api.get(f"/api/v1/scenarios/{demo['id']}").json()
    assert by["vessel rim (overflow)"]["y"][0] == pytest.approx(sc["vessel"]["height"])
    assert by["level high"]["y"][0] == pytest.approx(sc["limits"]["level_high"])
    assert by["level low"]["y"][0] == pytest.approx(sc["limits"]["level_low"])
    assert by["level alarms"]["text"] == ["level high", "overflow"]
    # the run ends where the check says it overflowed, and the plot says so
    t_over = chk["upsets"][i]["alarms"][-1]["time_s"] / 60
    assert by["level"]["x"][-1] == pytest.approx(t_over, rel=1e-3)
    note = page.get_attribute("#upset-plot", "data-end-note")
    assert note.startswith("stopped: overflow at")
    page.locator("#upset-plot").scroll_into_view_if_needed()
    screenshot(page, "upset-overflow")


def test_mtsr_is_explained_beside_the_interlocked_upset(page: Any, server: str, api: httpx.Client, demo) -> None:
    chk = _check(api, demo["id"])
    page.goto(f"{server}/scenarios/{demo['id']}")
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    safety = page.inner_text("#safety")
    peak = chk["mtsr"]["interlocked_upset_peak_temperature_K"] - 273.15
    assert f"{peak:.1f} °C" in safety
    assert "no decomposition reaction given" in safety  # the jacketed demo has none
    headers = page.eval_on_selector_all("#safety th", "ths => ths.map(t => t.textContent)")
    assert "TD24" not in headers and "Decomposition temperature rise" not in headers
    note = page.inner_text("#mtsr-explained")
    assert "the feed and the outlet stop and all cooling is lost" in note
    assert "brings fresh reactant" in note  # why the cooling-lost upset goes far above MTSR


def test_an_undetermined_check_shows_only_what_failed(page: Any, server: str, api: httpx.Client, demo) -> None:
    chk = _check(api, demo["id"])
    failed = {**chk, "verdict": "undetermined", "reasons": ["the steady states at this point did not converge"]}

    def answer(route: Any) -> None:
        route.fulfill(status=200, content_type="application/json", body=json.dumps(failed))

    page.route("**/api/v1/scenarios/*/check*", answer)
    page.goto(f"{server}/scenarios/{demo['id']}")
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    assert page.get_attribute("#verdict", "data-verdict") == "undetermined"
    assert "Undetermined" in page.inner_text("#verdict")
    assert page.inner_text("#reasons") == "the steady states at this point did not converge"
    assert page.locator("#check-details").is_hidden()
    assert page.inner_text("#reasons-title") == "What failed"


def test_print_sheet_lists_the_alarms_and_mtsr(new_context: Any, server: str, api: httpx.Client, demo) -> None:
    chk = _check(api, demo["id"])
    page = open_page(new_context())
    page.goto(f"{server}/scenarios/{demo['id']}/print")
    page.wait_for_selector("body[data-ready='1']", timeout=TIMEOUT)
    upsets = page.inner_text("#p-upsets")
    for u in chk["upsets"]:
        assert u["label"] in upsets
    assert "level high" in upsets and "stopped: overflow" in upsets
    assert "the feed and the outlet stop" in page.inner_text("#p-mtsr")
    assert "time to act" in page.inner_text("#p-upsets-intro")
    screenshot(page, "print-upsets", full_page=True)
