"""The pages as a review meeting uses them (issue 11): the print sheet of a setpoint, plant units and one set of
words, region colours in greyscale, the keyboard, and the layout at 1024x768 and on a 390x844 phone.

Expected values come from the JSON API of the same server or are analytic (stated on the line above). The
server and the browser are the session's (tests/browser/conftest.py); each test opens its own context.
Screenshots go to artifacts/screenshots/.
"""

from __future__ import annotations

import base64
import math
import re
from typing import Any
from urllib.parse import parse_qs, urlparse

import httpx
import pytest
from browser_helpers import SCREENSHOTS, open_page, screenshot

pytestmark = pytest.mark.browser

TIMEOUT = 90_000
MAP_DRAWN = "() => Boolean(document.getElementById('map') && document.getElementById('map').dataset.drawn)"
CHECK_DONE = "() => Boolean(document.querySelector('#verdict[data-verdict]'))"
SHEET_READY = "() => document.body.dataset.ready === '1'"
# A4 and US Letter less the sheet's 14 mm page margins, in CSS pixels (96 px per inch, 25.4 mm per inch)
PX_PER_MM = 96 / 25.4
A4_CONTENT = (210 - 28) * PX_PER_MM, (297 - 28) * PX_PER_MM
LETTER_CONTENT = (215.9 - 28) * PX_PER_MM, (279.4 - 28) * PX_PER_MM


def query(url: str) -> dict[str, str]:
    return {k: v[0] for k, v in parse_qs(urlparse(url).query).items()}


def href(page: Any) -> str:
    """The page's address as the page itself has it now (page.url follows replaceState a moment later)."""
    return str(page.evaluate("() => location.href"))


def volume(doc: dict[str, Any]) -> float:
    """Working volume at the level setpoint [m^3] (analytic: a vertical cylinder)."""
    return math.pi * doc["vessel"]["diameter"] ** 2 / 4 * doc["vessel"]["level_setpoint"]


def ready(page: Any) -> None:
    page.wait_for_function(MAP_DRAWN, timeout=TIMEOUT)
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)


def kv_rows(page: Any, table: str) -> dict[str, str]:
    return page.eval_on_selector_all(
        f"{table} tr",
        "rs => Object.fromEntries(rs.map(r => [r.cells[0].innerText.trim(), r.cells[1]?.innerText.trim()]))",
    )


# -- the print sheet ---------------------------------------------------------------------------------------------
def test_print_sheet_belongs_to_the_setpoint(new_context: Any, server: str, api: httpx.Client, demo: dict) -> None:
    sid = demo["id"]
    doc = api.get(f"/api/v1/scenarios/{sid}").json()
    # a setpoint away from the scenario's own feed: 30 min and 45 degC
    tau, tin = 1800.0, 318.15
    ctx = new_context(viewport={"width": 1024, "height": 768})
    page = open_page(ctx)
    page.goto(f"{server}/scenarios/{sid}/print?residence_time={tau:g}&feed_temperature={tin:g}")
    page.wait_for_function(SHEET_READY, timeout=TIMEOUT)
    rows = kv_rows(page, "#p-setpoint")
    # analytic: q = V / tau at the level setpoint, in m^3/h
    q = volume(doc) / tau * 3600
    assert rows["Residence time"] == "30 min"
    flow = float(re.match(r"([\d.]+) m³/h", rows["Feed flow"]).group(1))
    assert flow == pytest.approx(q, rel=1e-3)
    nominal = doc["feed"]["flow"] * 3600
    assert abs(q - nominal) > 0.05 * nominal  # the point is off the nominal feed, so the test can tell them apart
    assert f"{round(100 * q / nominal)} % of the scenario's nominal" in rows["Feed flow"]
    assert rows["Feed temperature"] == "45.0 °C"
    summary = kv_rows(page, "#p-summary")
    assert summary["Feed at the setpoint"].startswith(f"{flow:g} m³/h at 45.0 °C")
    # the legend names every line the map answer has, the cusp, the valve dots and the setpoint
    answer = api.get(
        f"/api/v1/scenarios/{sid}/map",
        params={k.removeprefix("map_"): v for k, v in query(href(page)).items() if k.startswith("map_")},
    ).json()
    keys = set(page.eval_on_selector_all("#p-legend li", "ns => ns.map(n => n.dataset.key)"))
    for key, curve in answer["boundaries"].items():
        if curve:
            assert f"line:{key}" in keys, key
    if any(any(r) for r in answer["valve_limited"]):
        assert "valve_limited" in keys
    assert "setpoint" in keys and {e["key"] for e in answer["legend"]} <= keys
    # the operating state in the same words as the scenario page
    chk = api.get(f"/api/v1/scenarios/{sid}/check", params={"residence_time": tau, "feed_temperature": tin}).json()
    if len(chk["states"]) == 1:
        assert rows["Operating state"].startswith("the only steady state")
    assert "degC" not in page.inner_text(".sheet")
    screenshot(page, "review-sheet")

    # page 1 (setpoint, verdict, map, legend, sign-off) fits one A4 and one Letter page and fills most of it;
    # the margins start page 2 and fit on it whole
    page.emulate_media(media="print")
    page.set_viewport_size({"width": round(A4_CONTENT[0]), "height": 1000})
    sizes = page.evaluate(
        """() => { const top = document.querySelector('.sheet').getBoundingClientRect().top;
                   const m = document.getElementById('p-margins-section');
                   return {page1: m.getBoundingClientRect().top - top, margins: m.getBoundingClientRect().height,
                           before: getComputedStyle(m).breakBefore}; }"""
    )
    assert sizes["before"] == "page"
    assert 0.7 * LETTER_CONTENT[1] < sizes["page1"] <= LETTER_CONTENT[1], sizes
    assert sizes["margins"] < LETTER_CONTENT[1], sizes
    pdf = page.pdf(format="A4", margin={k: "14mm" for k in ("top", "bottom", "left", "right")}, print_background=True)
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    (SCREENSHOTS / "review-sheet-a4.pdf").write_bytes(pdf)
    assert len(re.findall(rb"/Type\s*/Page\b", pdf)) >= 2


def test_sign_off_travels_in_the_link_and_is_not_stored(
    new_context: Any, server: str, api: httpx.Client, demo: dict
) -> None:
    sid = demo["id"]
    before = api.get("/api/v1/scenarios").json()
    page = open_page(new_context())
    page.goto(f"{server}/scenarios/{sid}/print?residence_time=2400")
    page.wait_for_function(SHEET_READY, timeout=TIMEOUT)
    typed = {
        "prepared_by": "A. Engineer",
        "reviewed_by": "B. Reviewer",
        "change_reference": "MOC-2026/014",
        "review_date": "2026-12-02",
    }
    for key, text in typed.items():
        page.fill(f"#p-{key}", text)
    assert {k: query(href(page)).get(k) for k in typed} == typed
    assert query(href(page))["residence_time"] == "2400"
    # the link opened in a fresh browser shows the same sign-off
    other = open_page(new_context())
    other.goto(href(page))
    other.wait_for_function(SHEET_READY, timeout=TIMEOUT)
    for key, text in typed.items():
        assert other.input_value(f"#p-{key}") == text
    # nothing was stored: the scenario list and the scenario are as before
    assert api.get("/api/v1/scenarios").json() == before
    # the way back to the scenario keeps the setpoint but not the sign-off
    back = other.get_attribute("#p-back", "href")
    assert "residence_time=2400" in back and "prepared_by" not in back


# -- colours, lines, ticks ---------------------------------------------------------------------------------------
GREY_READ = """async ([png, points]) => {
  const img = new Image();
  img.src = 'data:image/png;base64,' + png;
  await img.decode();
  const c = document.createElement('canvas');
  c.width = img.width; c.height = img.height;
  const g = c.getContext('2d');
  g.drawImage(img, 0, 0);
  return points.map(([x, y]) => { const d = g.getImageData(x - 1, y - 1, 3, 3).data;
    let s = 0; for (let k = 0; k < d.length; k += 4) s += d[k]; return s / (d.length / 4); });
}"""


def test_regions_step_in_greyscale_and_lines_stay_visible(
    new_context: Any, server: str, api: httpx.Client, demo: dict
) -> None:
    sid = demo["id"]
    page = open_page(new_context(viewport={"width": 1024, "height": 768}))
    page.goto(f"{server}/scenarios/{sid}")
    ready(page)
    answer = api.get(
        f"/api/v1/scenarios/{sid}/map",
        params={k.removeprefix("map_"): v for k, v in query(href(page)).items() if k.startswith("map_")},
    ).json()
    # one cell per region present, away from the region's edge (its 3x3 neighbours share the region)
    xs, ys, region = answer["residence_time_s"], answer["feed_temperature_K"], answer["region"]
    vl = answer["valve_limited"]
    cells: dict[int, tuple[int, int]] = {}
    for i in range(2, len(ys) - 2):
        for j in range(2, len(xs) - 2):
            code = region[i][j]
            block = [region[a][b] for a in range(i - 2, i + 3) for b in range(j - 2, j + 3)]
            dots = any(vl[a][b] for a in range(i - 2, i + 3) for b in range(j - 2, j + 3))
            if code not in cells and all(c == code for c in block) and not dots:
                cells[code] = (i, j)
    assert len(cells) >= 3, "the demo map should show at least three regions"
    plot = page.evaluate(
        """(pts) => { const gd = document.getElementById('map');
            const r = gd.querySelector('.nsewdrag').getBoundingClientRect();
            const xa = gd._fullLayout.xaxis, ya = gd._fullLayout.yaxis;
            return pts.map(([tmin, tc]) => [
              r.left + (Math.log10(tmin) - xa.range[0]) / (xa.range[1] - xa.range[0]) * r.width,
                                          r.top + (ya.range[1] - tc) / (ya.range[1] - ya.range[0]) * r.height]); }""",
        [[xs[j] / 60, ys[i] - 273.15] for i, j in cells.values()],
    )
    page.evaluate("() => { document.getElementById('map').style.filter = 'grayscale(1)'; }")
    page.wait_for_timeout(200)
    png = page.screenshot(full_page=False)
    (SCREENSHOTS / "map-greyscale.png").parent.mkdir(parents=True, exist_ok=True)
    (SCREENSHOTS / "map-greyscale.png").write_bytes(png)
    grey = page.evaluate(GREY_READ, [base64.b64encode(png).decode(), [[round(x), round(y)] for x, y in plot]])
    by_key = {e["code"]: e["key"] for e in answer["legend"]}
    measured = {by_key[code]: g for code, g in zip(cells, grey, strict=True)}
    order = [k for k in ("stable", "sensitive", "multiple", "unstable", "runaway") if k in measured]
    # lightness falls with the hazard, at least 35 of 255 a step (palette.js aims at 44 or more)
    for a, b in zip(order, order[1:], strict=False):
        assert measured[a] - measured[b] >= 35, measured
    # every boundary line has a white casing under it, wider than the line (visible on the darkest region)
    traces = page.evaluate(
        "() => document.getElementById('map').data.map(t => ({name: t.name, color: t.line && t.line.color,"
        " width: t.line && t.line.width}))"
    )
    lines = {t["name"].split(":", 1)[1]: t for t in traces if t["name"].startswith("boundary:") and t["width"]}
    casings = {t["name"].split(":", 1)[1]: t for t in traces if t["name"].startswith("casing:")}
    assert "max_temperature:0" in lines
    for name, t in lines.items():
        assert casings[name]["color"] == "#ffffff" and casings[name]["width"] > t["width"], name
    # log-axis ticks are 1, 2, 5 times a power of ten, written plainly
    ticks = page.eval_on_selector_all(".xtick text", "ns => ns.map(n => n.textContent)")
    assert len(ticks) >= 4
    for t in ticks:
        v = float(t)
        mantissa = v / 10 ** math.floor(math.log10(v) + 1e-9)
        assert round(mantissa, 6) in (1, 2, 5), ticks


# -- units and words ---------------------------------------------------------------------------------------------
def test_plant_units_one_wording_and_clean_links(new_context: Any, server: str, api: httpx.Client, demo: dict) -> None:
    sid = demo["id"]
    doc = api.get(f"/api/v1/scenarios/{sid}").json()
    page = open_page(new_context(viewport={"width": 1024, "height": 768}))
    page.goto(f"{server}/scenarios/{sid}")
    ready(page)
    # a typed residence time whose seconds are not exact in binary: the link and the inputs stay clean
    page.fill("#sp-tau", "37.06 min")
    page.press("#sp-tau", "Enter")
    page.wait_for_function(
        "() => new URL(location.href).searchParams.get('residence_time') === '2223.6'", timeout=TIMEOUT
    )
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    assert page.input_value("#sp-tau") == "37.06 min"
    assert re.fullmatch(r"\d+(\.\d{1,2})? °C", page.input_value("#sp-tin"))
    # the flow at the setpoint is always shown (analytic: V / tau in m^3/h, 4 significant digits)
    assert page.input_value("#sp-flow") == f"{float(f'{volume(doc) / 2223.6 * 3600:.4g}'):g} m³/h"
    for q in re.findall(r"=([^&]+)", href(page)):
        assert not re.search(r"\d\.\d*0000000|\d\.\d*9999999", q), href(page)
    chk = api.get(
        f"/api/v1/scenarios/{sid}/check",
        params={"residence_time": 2223.6, "feed_temperature": doc["feed"]["temperature"]},
    ).json()
    body = page.inner_text("main")
    # one spelling and plant units in page text: no degC, no "K (... )" pairs of SI and Celsius
    assert "degC" not in body and not re.search(r"\d K \(-?[\d.]+ ?(degC|°C)\)", body)
    # reasons name regions in the legend's words, never an internal key
    assert not re.search(r"region '[a-z_]+'", page.inner_text("#reasons"))
    # percentage points of the valve opening are "points"; no "threshold 0.0 %"
    margins = page.inner_text("#margins")
    assert "threshold 0.0 %" not in margins
    if chk["margins"].get("valve_opening_to_usable_range_percent", {}).get("value") is not None:
        assert re.search(r"Valve opening to usable range\s+[-\d.]+ points", margins)
    # one state: the selector gives way to the same words as the check
    if len(chk["states"]) == 1:
        assert page.is_hidden("#sp-branch")
        one = page.inner_text("#sp-state-one")
        assert one.startswith("only one steady state")
        assert one.removeprefix("only one steady state") in page.inner_text("#assumption")
        if "hot branch" in str(chk["margins"]):
            assert "high (hot) branch" in one
    screenshot(page, "review-units-1024")


def test_setpoint_by_feed_flow(new_context: Any, server: str, api: httpx.Client, demo: dict) -> None:
    sid = demo["id"]
    doc = api.get(f"/api/v1/scenarios/{sid}").json()
    page = open_page(new_context())
    page.goto(f"{server}/scenarios/{sid}")
    ready(page)
    # 110 % of the nominal flow: tau = V / (1.1 q_nominal) (analytic)
    page.fill("#sp-flow", "110 %")
    page.press("#sp-flow", "Enter")
    want = volume(doc) / (1.1 * doc["feed"]["flow"])
    page.wait_for_function(
        f"() => Math.abs(Number(new URL(location.href).searchParams.get('residence_time')) - {want}) < 1e-6 * {want}",
        timeout=TIMEOUT,
    )
    assert page.inner_text("#sp-flow-pct") == "110 % of nominal"
    # 25 US gallons per minute (NIST SP 811 B.8: 1 gal = 3.785411784 L exactly)
    page.fill("#sp-flow", "25 gpm")
    page.press("#sp-flow", "Enter")
    want = volume(doc) / (25 * 3.785411784e-3 / 60)
    page.wait_for_function(
        f"() => Math.abs(Number(new URL(location.href).searchParams.get('residence_time')) - {want}) < 1e-6 * {want}",
        timeout=TIMEOUT,
    )
    page.fill("#sp-flow", "3 bar")
    page.press("#sp-flow", "Enter")
    page.wait_for_selector("#sp-flow-err:not([hidden])")
    assert "not a unit of flow" in page.inner_text("#sp-flow-err")


# -- keyboard ----------------------------------------------------------------------------------------------------
def test_keyboard_big_steps_and_tab_strip_ends(new_context: Any, server: str, demo: dict) -> None:
    page = open_page(new_context())
    page.goto(f"{server}/scenarios/{demo['id']}")
    ready(page)
    xs = page.evaluate("() => window.exomap.view.map.residence_time_s")
    start = page.evaluate("() => window.exomap.state.residence_time")
    j0 = min(range(len(xs)), key=lambda j: abs(xs[j] - start))
    page.focus("#map")
    page.keyboard.press("Shift+ArrowRight")
    moved = page.evaluate("() => window.exomap.state.residence_time")
    j1 = min(range(len(xs)), key=lambda j: abs(math.log(xs[j]) - math.log(moved)))
    # ten grid steps (the page rounds the new point to 3 significant digits in min, so within one step)
    assert abs((j1 - j0) - 10) <= 1, (j0, j1)
    page.focus("#tab-check")
    page.keyboard.press("End")
    assert page.get_attribute("#tab-editor", "aria-selected") == "true" and query(href(page))["panel"] == "editor"
    page.keyboard.press("Home")
    assert page.get_attribute("#tab-check", "aria-selected") == "true"
    assert page.evaluate("() => document.activeElement.id") == "tab-check"


# -- layout ------------------------------------------------------------------------------------------------------
def in_view(page: Any, selector: str) -> dict[str, float]:
    return page.evaluate(
        """(sel) => { const r = document.querySelector(sel).getBoundingClientRect();
             const f = document.getElementById('cautions').getBoundingClientRect();
             const fixed = getComputedStyle(document.getElementById('cautions')).position === 'fixed';
             return {top: r.top, bottom: r.bottom, left: r.left, right: r.right, vh: innerHeight, vw: innerWidth,
                     limit: fixed ? f.top : innerHeight, footer: f.height, fixed}; }""",
        selector,
    )


def test_verdict_in_view_at_1024x768(new_context: Any, server: str, demo: dict) -> None:
    page = open_page(new_context(viewport={"width": 1024, "height": 768}))
    page.goto(f"{server}/scenarios/{demo['id']}")
    ready(page)
    for sel in ("#verdict", "#verdict-brief"):
        box = in_view(page, sel)
        assert box["top"] >= 0 and box["bottom"] <= box["limit"], (sel, box)
    assert page.evaluate("() => document.scrollingElement.scrollWidth") <= 1024
    screenshot(page, "review-1024x768")


def test_phone_390x844(new_context: Any, server: str, demo: dict) -> None:
    ctx = new_context(viewport={"width": 390, "height": 844}, has_touch=True, is_mobile=True, device_scale_factor=2)
    page = open_page(ctx)
    page.goto(f"{server}/scenarios/{demo['id']}")
    ready(page)
    box = in_view(page, "#verdict-brief")
    assert box["top"] >= 0 and box["bottom"] <= box["limit"], box
    # nothing wider than the screen; the cautions stay on the page but do not cover it
    assert page.evaluate("() => document.scrollingElement.scrollWidth") <= 390
    assert not box["fixed"] or box["footer"] <= 60, box
    screenshot(page, "review-390x844")
    # a swipe over the map scrolls the page: the browser may pan there (touch-action), and a tap reads the map
    # without moving the setpoint
    assert page.evaluate("() => getComputedStyle(document.getElementById('map')).touchAction") != "none"
    page.locator("#map").scroll_into_view_if_needed()
    before = href(page)
    r = page.evaluate("() => document.querySelector('#map .nsewdrag').getBoundingClientRect().toJSON()")
    page.touchscreen.tap(r["x"] + r["width"] * 0.8, r["y"] + r["height"] * 0.2)
    page.wait_for_timeout(600)
    assert href(page) == before
    # in the explicit move mode a tap moves it
    page.click("#map-move-mode")
    assert page.get_attribute("#map-move-mode", "aria-pressed") == "true"
    assert page.evaluate("() => getComputedStyle(document.getElementById('map')).touchAction") == "none"
    page.touchscreen.tap(r["x"] + r["width"] * 0.8, r["y"] + r["height"] * 0.2)
    page.wait_for_function(f"() => location.href !== {before!r}", timeout=TIMEOUT)
    # the upset table is not cut off: the page does not overflow and the table scrolls inside its panel
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    page.wait_for_selector("#upsets tr:nth-child(2)", timeout=TIMEOUT)
    t = page.evaluate(
        """() => { const t = document.getElementById('upsets'); const r = t.getBoundingClientRect();
             return {right: r.right, overflow: getComputedStyle(t).overflowX, sw: t.scrollWidth,
                     cw: t.clientWidth}; }"""
    )
    assert t["right"] <= 390 and (t["sw"] <= t["cw"] or t["overflow"] in ("auto", "scroll")), t
    assert page.evaluate("() => document.scrollingElement.scrollWidth") <= 390


# -- a simulation in the link ------------------------------------------------------------------------------------
SIM_DRAWN = "() => Boolean(document.getElementById('sim-plot').dataset.drawn)"
SIM_SERIES = "() => document.getElementById('sim-plot').data.find(t => t.name === 'tank temperature').y"


def test_simulation_link_reruns_the_same_run(new_context: Any, server: str, api: httpx.Client, demo: dict) -> None:
    sid = demo["id"]
    page = open_page(new_context())
    page.goto(f"{server}/scenarios/{sid}?residence_time=2400&panel=simulate")
    ready(page)
    page.select_option("#sim-start", "low")
    page.fill("#sim-duration", "1 h")
    lines = "at 10 min add feed_temperature 10 K\nat 30 min scale feed_flow by 0.8"
    page.fill("#sim-events", lines)
    page.click("#sim-form button[type=submit]")
    page.wait_for_function(SIM_DRAWN, timeout=TIMEOUT)
    q = query(href(page))
    assert q["sim_start"] == "low" and q["sim_duration"] == "3600" and q["sim_events"] == lines
    shown = page.evaluate(SIM_SERIES)
    # the link, opened in a fresh browser context, redraws the same run without a click
    other = open_page(new_context())
    other.goto(href(page))
    other.wait_for_function(SIM_DRAWN, timeout=TIMEOUT)
    assert other.input_value("#sim-events") == lines and other.input_value("#sim-duration") == "60 min"
    assert other.evaluate(SIM_SERIES) == shown
    # and it is the API's answer to the same text events (the GET twin reads the lines as the page sends them)
    answer = api.get(
        f"/api/v1/scenarios/{sid}/simulate",
        params={"residence_time": 2400, "start": "low", "duration": 3600, "events": lines},
    ).json()
    assert shown == pytest.approx([t - 273.15 for t in answer["temperature_K"]], abs=1e-9)
    assert other.inner_text("#sim-summary") == page.inner_text("#sim-summary")
    # a line that is not an event is named by its line number in the box
    other.fill("#sim-events", "at 10 min do feed_stop\nat noon open the valve")
    other.click("#sim-form button[type=submit]")
    other.wait_for_selector("#sim-events-err:not([hidden])", timeout=TIMEOUT)
    assert other.inner_text("#sim-events-err").startswith("Line 2:")
    screenshot(other, "review-simulation-link")


# -- coolant temperature and check thresholds --------------------------------------------------------------------
def test_coolant_temperature_setpoint_and_policy_thresholds(
    new_context: Any, server: str, api: httpx.Client, test_tank: str
) -> None:
    page = open_page(new_context())
    page.goto(f"{server}/scenarios/{test_tank}?residence_time=2400")
    ready(page)
    doc = api.get(f"/api/v1/scenarios/{test_tank}").json()
    # the jacketed tank shows its coolant temperature; a new one goes into the link and the check
    assert page.input_value("#sp-tc") == f"{doc['jacket']['coolant_temperature'] - 273.15:g} °C"
    page.fill("#sp-tc", "12 °C")
    page.press("#sp-tc", "Enter")
    # 12 degC = 285.15 K (SI Brochure §2.3.1)
    page.wait_for_function(
        "() => new URL(location.href).searchParams.get('coolant_temperature') === '285.15'", timeout=TIMEOUT
    )
    twin = page.get_attribute("link[rel=alternate][type='application/json']", "href")
    assert "coolant_temperature=285.15" in twin
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    assert page.get_attribute("#verdict", "data-verdict") == api.get(twin).json()["verdict"]
    # the check thresholds are edited in plant units and saved in SI
    page.click("#tab-editor")
    page.wait_for_selector("#editor [data-field='check_policy.min_temperature_margin'] input", timeout=TIMEOUT)
    assert page.input_value("#editor [data-field='check_policy.valve_min'] input") == "20"
    page.fill("#editor [data-field='check_policy.min_temperature_margin'] input", "25")
    page.fill("#editor [data-field='check_policy.valve_min'] input", "15")
    page.fill("#editor [data-field='description'] textarea", "Invented: the test tank with stricter thresholds.")
    page.click("#editor-save")
    page.wait_for_url(re.compile(r"/scenarios/(?!" + test_tank + r")[0-9a-f]+"), timeout=TIMEOUT)
    new_id = urlparse(page.url).path.rsplit("/", 1)[-1]
    policy = api.get(f"/api/v1/scenarios/{new_id}").json()["check_policy"]
    # analytic: 25 K as typed in the K shown; 15 % = 0.15
    assert policy["min_temperature_margin"] == pytest.approx(25.0) and policy["valve_min"] == pytest.approx(0.15)
