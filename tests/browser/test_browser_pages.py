"""The pages in the system Chromium against the real server: what a plant engineer does with them.

Every expected value is read from the JSON API of the same server (the page must show exactly what the API
answers), or is analytic where stated. Screenshots go to artifacts/screenshots/ (not committed).
"""

from __future__ import annotations

import json
import math
import re
from pathlib import Path
from typing import Any
from urllib.parse import parse_qs, urlparse

import httpx
import pytest
from browser_helpers import HERE, ROOT, SCREENSHOTS, open_page, screenshot

pytestmark = pytest.mark.browser

MAP_DRAWN = "() => Boolean(document.getElementById('map') && document.getElementById('map').dataset.drawn)"
CHECK_DONE = "() => Boolean(document.querySelector('#verdict[data-verdict]'))"
TIMEOUT = 90_000


def wait_ready(page: Any, check: bool = True) -> None:
    page.wait_for_function(MAP_DRAWN, timeout=TIMEOUT)
    if check:
        page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)


def map_traces(page: Any) -> list[dict[str, Any]]:
    return page.evaluate(
        """() => document.getElementById('map').data.map(t => ({
            name: t.name, type: t.type, mode: t.mode || null, x: t.x ? Array.from(t.x) : [],
            y: t.y ? Array.from(t.y) : [], z: t.z || null }))"""
    )


def query(url: str) -> dict[str, str]:
    return {k: v[0] for k, v in parse_qs(urlparse(url).query).items()}


def api_path_of(href: str) -> str:
    u = urlparse(href)
    return u.path + (f"?{u.query}" if u.query else "")


def test_home_lists_demos_and_saved(page: Any, server: str, api: httpx.Client, test_tank: str) -> None:
    page.goto(server + "/")
    page.wait_for_selector("#demo-list .scenario-item")
    listed = api.get("/api/v1/scenarios").json()["scenarios"]
    demo_ids = {s["id"] for s in listed if s["demo"]}
    saved_ids = {s["id"] for s in listed if not s["demo"]}
    page.wait_for_selector(f"#saved-list [data-id='{test_tank}']")
    assert set(page.eval_on_selector_all("#demo-list .scenario-item", "ns => ns.map(n => n.dataset.id)")) == demo_ids
    assert set(page.eval_on_selector_all("#saved-list .scenario-item", "ns => ns.map(n => n.dataset.id)")) == saved_ids
    # every demo offers a new scenario from it, and the page names its JSON twin
    assert page.locator("#demo-list .new-from-demo").count() == len(demo_ids)
    assert page.get_attribute("link[rel=alternate][type='application/json']", "href") == "/api/v1/scenarios"
    assert "Screening aid" in page.inner_text("#cautions")
    screenshot(page, "home")


def test_import_a_scenario_file(page: Any, server: str, api: httpx.Client, tmp_path: Path) -> None:
    doc = json.loads((HERE / "jacketed_tank.json").read_text(encoding="utf-8"))
    doc["title"] = "Imported test tank (invented)"
    path = tmp_path / "imported.json"
    path.write_text(json.dumps(doc), encoding="utf-8")
    page.goto(server + "/")
    page.set_input_files("#import-file", str(path))
    page.wait_for_url(re.compile(r"/scenarios/[0-9a-f]+"), timeout=TIMEOUT)
    new_id = urlparse(page.url).path.rsplit("/", 1)[-1]
    assert api.get(f"/api/v1/scenarios/{new_id}").json()["title"] == "Imported test tank (invented)"
    # a file that is not a scenario is refused in plain words, naming the fields
    bad = tmp_path / "bad.json"
    bad.write_text(json.dumps({"format": "exomap-scenario/1", "species": ["A"]}), encoding="utf-8")
    page.goto(server + "/")
    page.set_input_files("#import-file", str(bad))
    page.wait_for_selector("#import-error:not([hidden])")
    assert "not imported" in page.inner_text("#import-error")
    assert "liquid" in page.inner_text("#import-fields")


def test_demo_map_shows_regions_boundaries_and_legend(
    page: Any, server: str, api: httpx.Client, demo: dict[str, Any]
) -> None:
    page.goto(f"{server}/scenarios/{demo['id']}")
    wait_ready(page, check=False)
    state = query(page.url)
    # the page wrote its full view state into the URL
    for key in ("residence_time", "feed_temperature", "map_residence_time", "map_feed_temperature", "points"):
        assert key in state, key
    answer = api.get(api_path_of(page.get_attribute("#dl-map", "href").replace("format=csv", "format=json"))).json()
    traces = map_traces(page)
    heat = [t for t in traces if t["type"] == "heatmap"]
    assert len(heat) == 1
    z = heat[0]["z"]
    assert len(z) == len(answer["feed_temperature_K"]) and len(z[0]) == len(answer["residence_time_s"])
    # the heatmap holds exactly the regions of the answer (as indices into its legend)
    index = {e["code"]: i for i, e in enumerate(answer["legend"])}
    assert z == [[index[c] for c in row] for row in answer["region"]]
    # one line trace per drawn boundary that the answer has
    names = {t["name"].split(":")[1] for t in traces if t["name"].startswith("boundary:")}
    wanted = {k for k, v in answer["boundaries"].items() if any(p and p[0] is not None for p in v)}
    assert names == wanted
    # ignition points are drawn where the answer puts them (display in min and degC)
    ign = [t for t in traces if t["name"].startswith("boundary:ignition")]
    if ign:
        drawn = sorted(zip(sum((t["x"] for t in ign), []), sum((t["y"] for t in ign), []), strict=True))
        given = sorted((p[0] / 60, p[1] - 273.15) for p in answer["boundaries"]["ignition"] if p[0] is not None)
        assert len(drawn) == len(given)
        for (a, b), (c, d) in zip(drawn, given, strict=True):
            assert math.isclose(a, c, rel_tol=1e-12) and math.isclose(b, d, abs_tol=1e-9)
    # plain-word labels of every region present are in the legend
    legend_text = page.inner_text("#map-legend")
    present = {c for row in answer["region"] for c in row}
    for e in answer["legend"]:
        assert e["label"] in legend_text
    assert len(present) >= 2, "the demo map should show more than one region"
    # setpoint marker at the URL's setpoint
    sp = next(t for t in traces if t["name"] == "setpoint")
    assert math.isclose(sp["x"][0], float(state["residence_time"]) / 60, rel_tol=1e-9)
    assert math.isclose(sp["y"][0], float(state["feed_temperature"]) - 273.15, abs_tol=1e-9)
    # nothing spills sideways at 1366x768
    assert page.evaluate("document.documentElement.scrollWidth") <= 1366
    screenshot(page, "demo-map")


def _plot_box(page: Any) -> dict[str, float]:
    return page.evaluate(
        "() => { const r = document.querySelector('#map .nsewdrag').getBoundingClientRect();"
        " return {x: r.x, y: r.y, w: r.width, h: r.height}; }"
    )


def test_click_moves_setpoint_and_check_updates(page: Any, server: str, api: httpx.Client, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}")
    wait_ready(page)
    before = query(page.url)
    box = _plot_box(page)
    # a point a quarter of the way in from the left, a fifth down from the top
    page.mouse.click(box["x"] + 0.25 * box["w"], box["y"] + 0.2 * box["h"])
    page.wait_for_function(
        f"() => new URLSearchParams(location.search).get('residence_time') !== '{before['residence_time']}'",
        timeout=TIMEOUT,
    )
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    after = query(page.url)
    assert after["feed_temperature"] != before["feed_temperature"]
    # the clicked place, read back from the axes: log residence-time axis, linear feed temperature
    layout = page.evaluate(
        "() => { const l = document.getElementById('map')._fullLayout;"
        " return {x: l.xaxis.range, y: l.yaxis.range, type: l.xaxis.type}; }"
    )
    x = layout["x"][0] + 0.25 * (layout["x"][1] - layout["x"][0])
    tau_min = 10**x if layout["type"] == "log" else x
    tin_c = layout["y"][1] - 0.2 * (layout["y"][1] - layout["y"][0])
    # the page rounds a clicked setpoint to 3 significant digits in min and 0.1 degC
    assert math.isclose(float(after["residence_time"]) / 60, tau_min, rel_tol=6e-3)
    assert math.isclose(float(after["feed_temperature"]) - 273.15, tin_c, abs_tol=0.06)
    # the verdict shown is the API's verdict at the new setpoint, and the JSON twin follows the view
    twin = page.get_attribute("link[rel=alternate][type='application/json']", "href")
    assert query(twin)["residence_time"] == after["residence_time"]
    expected = api.get(twin).json()
    page.wait_for_function(
        f"() => document.querySelector('#verdict').dataset.verdict === '{expected['verdict']}'", timeout=TIMEOUT
    )
    # each reason is shown in plant units; the answer's own text (SI and all) is on hover
    shown = page.eval_on_selector_all("#reasons li", "ns => ns.map(n => n.title || n.innerText)")
    for reason in expected["reasons"]:
        text = reason if isinstance(reason, str) else reason.get("message", "")
        assert text in shown
    sp = next(t for t in map_traces(page) if t["name"] == "setpoint")
    assert math.isclose(sp["x"][0], float(after["residence_time"]) / 60, rel_tol=1e-9)
    screenshot(page, "after-click")


def test_hover_reads_the_steady_states(page: Any, server: str, api: httpx.Client, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}")
    wait_ready(page)
    box = _plot_box(page)
    # the lower left of this map has three steady states (its "multiple" region)
    page.mouse.move(box["x"] + 0.05 * box["w"], box["y"] + 0.9 * box["h"])
    page.wait_for_selector("#readout .readout-states li", timeout=TIMEOUT)
    hovered = page.evaluate("() => window.exomap.view.hovered")
    point = hovered["point"]
    expected = api.get(f"/api/v1/scenarios/{test_tank}/steady", params=point).json()
    shown = page.eval_on_selector_all("#readout .readout-states li", "ns => ns.map(n => n.textContent)")
    assert len(shown) == len(expected["states"]) >= 1
    for text, s in zip(shown, expected["states"], strict=True):
        assert f"{s['temperature_K'] - 273.15:.1f} °C" in text
        assert s["stability"] in text
    # the region named is the map's own at that cell
    assert page.inner_text("#readout strong") in {
        e["label"] for e in api.get(f"/api/v1/scenarios/{test_tank}/map").json()["legend"]
    }


def test_drag_slides_the_setpoint(page: Any, server: str, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}")
    wait_ready(page)
    box = _plot_box(page)
    page.mouse.move(box["x"] + 0.6 * box["w"], box["y"] + 0.5 * box["h"])
    page.mouse.down()
    page.mouse.move(box["x"] + 0.7 * box["w"], box["y"] + 0.6 * box["h"], steps=8)
    mid = next(t for t in map_traces(page) if t["name"] == "setpoint")
    page.mouse.move(box["x"] + 0.8 * box["w"], box["y"] + 0.7 * box["h"], steps=8)
    page.mouse.up()
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    end = next(t for t in map_traces(page) if t["name"] == "setpoint")
    assert end["x"][0] > mid["x"][0] and end["y"][0] < mid["y"][0]


def test_setpoint_by_keyboard(page: Any, server: str, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}")
    wait_ready(page)
    page.focus("#sp-tau")
    page.fill("#sp-tau", "1.5 h")
    page.press("#sp-tau", "Tab")
    page.keyboard.type("")
    page.fill("#sp-tin", "308.15 K")
    page.press("#sp-tin", "Enter")
    page.wait_for_function("() => new URLSearchParams(location.search).get('residence_time') === '5400'")
    assert query(page.url)["feed_temperature"] == "308.15"
    # a bad unit in the setpoint is named in words, and the view does not move
    page.fill("#sp-tin", "35 bar")
    page.press("#sp-tin", "Enter")
    page.wait_for_selector("#sp-tin-err:not([hidden])")
    assert "not a unit of temperature" in page.inner_text("#sp-tin-err")
    assert query(page.url)["feed_temperature"] == "308.15"


def test_map_arrow_keys_step_the_setpoint_one_cell(page: Any, server: str, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}?residence_time=600&feed_temperature=293.15")
    wait_ready(page)
    page.focus("#map")
    page.keyboard.press("ArrowRight")
    page.keyboard.press("ArrowUp")
    page.wait_for_function(
        "() => new URLSearchParams(location.search).get('residence_time') !== '600'", timeout=TIMEOUT
    )
    m = page.evaluate("() => window.exomap.view.map")
    state = query(page.url)
    xs, ys = m["residence_time_s"], m["feed_temperature_K"]
    j = min(range(len(xs)), key=lambda k: abs(xs[k] - 600))
    i = min(range(len(ys)), key=lambda k: abs(ys[k] - 293.15))
    # one grid step right and one up, rounded as a clicked setpoint is (3 significant digits in min, 0.1 degC)
    assert float(state["residence_time"]) / 60 == pytest.approx(float(f"{xs[j + 1] / 60:.3g}"), rel=1e-9)
    assert float(state["feed_temperature"]) == pytest.approx(round(ys[i + 1] - 273.15, 1) + 273.15, abs=1e-6)


def test_new_scenario_from_a_demo(page: Any, server: str, api: httpx.Client, demo: dict[str, Any]) -> None:
    page.goto(server + "/")
    page.click(f"#demo-list [data-id='{demo['id']}'] .new-from-demo")
    page.wait_for_selector("#editor [data-field='title'] input", timeout=TIMEOUT)
    page.fill("#editor [data-field='title'] input", "My copy of the demo (invented)")
    page.click("#editor-save")
    # the demo's description no longer describes the copy: the page asks for a new one before saving
    err = page.locator("#editor [data-field='description'] .field-error")
    err.wait_for(state="visible", timeout=TIMEOUT)
    assert "Describe the new scenario" in err.inner_text()
    assert urlparse(page.url).path.endswith(demo["id"])
    page.fill("#editor [data-field='description'] textarea", "Invented copy of the demo for a test.")
    page.click("#editor-save")
    page.wait_for_url(re.compile(r"/scenarios/(?!" + demo["id"] + r")[0-9a-f]+"), timeout=TIMEOUT)
    new_id = urlparse(page.url).path.rsplit("/", 1)[-1]
    saved = {s["id"]: s for s in api.get("/api/v1/scenarios").json()["scenarios"]}
    assert saved[new_id]["title"] == "My copy of the demo (invented)" and not saved[new_id]["demo"]
    # the lineage is stored and shown
    assert saved[new_id]["derived_from"] == demo["id"]
    page.wait_for_selector("#scenario-derived:not([hidden])", timeout=TIMEOUT)
    assert page.get_attribute("#scenario-derived a", "href").startswith(f"/scenarios/{demo['id']}")
    # everything else is the demo's: the two documents differ in the title and description only
    a = api.get(f"/api/v1/scenarios/{demo['id']}").json()
    b = api.get(f"/api/v1/scenarios/{new_id}").json()
    assert {k for k in a if a[k] != b.get(k)} == {"title", "description"}


def test_bad_unit_in_editor_is_shown_beside_the_field(page: Any, server: str, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}?panel=editor")
    page.wait_for_selector("#editor [data-field='feed.temperature'] input")
    start_url = page.url
    page.fill("#editor [data-field='feed.temperature'] input", "35 kg")
    page.fill("#editor [data-field='vessel.diameter'] input", "1.2 degC")
    page.fill("#editor [data-field='description'] textarea", "Invented: a test of bad units.")
    page.click("#editor-save")
    err = page.locator("#editor [data-field='feed.temperature'] .field-error")
    err.wait_for(state="visible", timeout=TIMEOUT)
    assert "temperature" in err.inner_text()
    other = page.locator("#editor [data-field='vessel.diameter'] .field-error")
    assert other.is_visible() and "length" in other.inner_text()
    assert page.get_attribute("#editor [data-field='feed.temperature'] input", "aria-invalid") == "true"
    assert page.url == start_url  # nothing was saved
    screenshot(page, "editor-error")


def test_save_copy_link_and_open_in_fresh_browser(
    new_context: Any, server: str, api: httpx.Client, test_tank: str
) -> None:
    ctx = new_context()
    page = open_page(ctx)
    page.goto(f"{server}/scenarios/{test_tank}?panel=editor")
    page.wait_for_selector("#editor [data-field='feed.temperature'] input")
    page.fill("#editor [data-field='feed.temperature'] input", "30 degC")
    page.fill("#editor [data-field='description'] textarea", "Invented test tank with a 30 degC feed.")
    page.click("#editor-save")
    page.wait_for_url(re.compile(r"/scenarios/(?!" + test_tank + r")[0-9a-f]+"), timeout=TIMEOUT)
    new_id = urlparse(page.url).path.rsplit("/", 1)[-1]
    assert new_id != test_tank
    # the old link still shows the old scenario; the new one has the edit (30 degC = 303.15 K, analytic)
    assert api.get(f"/api/v1/scenarios/{test_tank}").json()["feed"]["temperature"] == pytest.approx(298.15, abs=1e-9)
    assert api.get(f"/api/v1/scenarios/{new_id}").json()["feed"]["temperature"] == pytest.approx(303.15, abs=1e-9)
    wait_ready(page)
    page.fill("#sp-tau", "55 min")
    page.fill("#sp-tin", "28 degC")
    page.press("#sp-tin", "Enter")
    page.wait_for_function("() => new URLSearchParams(location.search).get('residence_time') === '3300'")
    page.wait_for_function(CHECK_DONE, timeout=TIMEOUT)
    page.click("#tab-curves")
    page.click("#copy-link")
    link = page.input_value("#link-text")
    assert link.startswith(server + f"/scenarios/{new_id}?")
    verdict = page.get_attribute("#verdict", "data-verdict")
    z = next(t for t in map_traces(page) if t["type"] == "heatmap")["z"]

    fresh = new_context()  # no shared storage, history or cache
    other = open_page(fresh)
    other.goto(link)
    wait_ready(other)
    assert query(other.url) == query(link)
    assert other.input_value("#sp-tau") == page.input_value("#sp-tau")
    assert other.input_value("#sp-tin") == page.input_value("#sp-tin")
    assert other.get_attribute("#verdict", "data-verdict") == verdict
    assert next(t for t in map_traces(other) if t["type"] == "heatmap")["z"] == z
    assert other.get_attribute("#tab-curves", "aria-selected") == "true"
    sp = next(t for t in map_traces(other) if t["name"] == "setpoint")
    assert sp["x"] == [55.0] and math.isclose(sp["y"][0], 28.0, abs_tol=1e-9)
    screenshot(other, "fresh-context")


def test_curves_and_heat_balance(page: Any, server: str, test_tank: str, api: httpx.Client) -> None:
    page.goto(f"{server}/scenarios/{test_tank}?panel=curves")
    wait_ready(page)
    page.wait_for_function(
        "() => ['curve-tau','curve-tin','heat-balance'].every(id => document.getElementById(id).data)", timeout=TIMEOUT
    )
    names = page.evaluate("() => document.getElementById('curve-tin').data.map(t => t.name)")
    assert "stable" in names
    state = query(page.url)
    branch = api.post(
        "/api/v1/branch",
        json={
            "scenario_id": test_tank,
            "along": "feed_temperature",
            "residence_time": float(state["residence_time"]),
            "feed_temperature": float(state["feed_temperature"]),
            "range": [float(v) for v in state["map_feed_temperature"].split(",")],
        },
    ).json()
    if any(not p["stable"] for p in branch["points"]):
        assert "unstable" in names
    if branch["turning_points"]:
        assert "turning points" in names
    screenshot(page, "curves")


def test_heat_generation_matches_first_order_closed_form(
    page: Any, server: str, api: httpx.Client, test_tank: str
) -> None:
    """The client-side heat balance against the closed form of a first-order reaction A -> B (analytic):
    C_A = C_A,in / (1 + k tau), so G(T) = V (-dH) k C_A,in / (1 + k tau), with k = k0 exp(-Ea / (R T))."""
    page.goto(f"{server}/scenarios/{test_tank}")
    page.wait_for_function(MAP_DRAWN, timeout=TIMEOUT)
    doc = api.get(f"/api/v1/scenarios/{test_tank}").json()
    tau, T_in = 2400.0, 300.0
    got = page.evaluate(
        """async ([doc, tau, T_in]) => { const h = await import('/static/heat.js');
           const inp = h.heatInputs(doc); const c = h.heatCurves(inp, tau, T_in, 290, 450, 17);
           return {T: c.T, G: c.generation_W, R: c.removal_W, V: inp.V}; }""",
        [doc, tau, T_in],
    )
    r = doc["reactions"][0]
    V = math.pi * doc["vessel"]["diameter"] ** 2 / 4 * doc["vessel"]["level_setpoint"]
    c_in = doc["feed"]["concentrations"]["A"]
    rho, cp = doc["liquid"]["density"], doc["liquid"]["heat_capacity"]
    ua, T_c = doc["jacket"]["ua"], doc["jacket"]["coolant_temperature"]
    # molar gas constant, CODATA 2018 (exact since the 2019 SI)
    R_gas = 8.314462618
    assert got["V"] == pytest.approx(V, rel=1e-14)
    for T, G, R in zip(got["T"], got["G"], got["R"], strict=True):
        k = r["pre_exponential"] * math.exp(-r["activation_energy"] / (R_gas * T))
        assert G == pytest.approx(V * -r["reaction_enthalpy"] * k * c_in / (1 + k * tau), rel=1e-9)
        assert R == pytest.approx(rho * cp * V / tau * (T - T_in) + ua * (T - T_c), rel=1e-12)


def test_upset_opens_as_a_response_plot(page: Any, server: str, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}")
    wait_ready(page)
    first = page.locator("#upsets button[data-upset]").first
    first.wait_for(timeout=TIMEOUT)
    first.click()
    page.wait_for_function("() => document.getElementById('upset-plot').data", timeout=TIMEOUT)
    assert query(page.url)["upset"] == "0"
    names = page.evaluate("() => document.getElementById('upset-plot').data.map(t => t.name)")
    assert "tank temperature" in names
    # the response drawn is the simulation the check summarised: same peak (display in degC)
    upset = page.evaluate("() => window.exomap.view.check.upsets[0]")
    drawn = page.evaluate(
        "() => Math.max(...document.getElementById('upset-plot').data.find(t => t.name === 'tank temperature').y)"
    )
    assert drawn == pytest.approx(upset["peak_temperature_K"] - 273.15, abs=0.05)
    screenshot(page, "upset")


def test_custom_simulation(page: Any, server: str, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}?panel=simulate")
    wait_ready(page)
    page.fill("#sim-duration", "1 h")
    page.fill("#sim-events", "at 10 min add feed_temperature 5 K")
    page.click("#sim-form button[type=submit]")
    page.wait_for_function("() => document.getElementById('sim-plot').data", timeout=TIMEOUT)
    assert "Peak" in page.inner_text("#sim-summary")
    # an event the page cannot read is named by its line
    page.fill("#sim-events", "at 10 min warm the feed")
    page.click("#sim-form button[type=submit]")
    page.wait_for_selector("#sim-events-err:not([hidden])")
    assert "Line 1" in page.inner_text("#sim-events-err")
    screenshot(page, "simulation")


def test_print_view_renders(new_context: Any, server: str, test_tank: str) -> None:
    ctx = new_context()
    page = open_page(ctx)
    page.goto(f"{server}/scenarios/{test_tank}?residence_time=3300&feed_temperature=301.15")
    wait_ready(page)
    href = page.get_attribute("#print-link", "href")
    assert href.startswith(f"/scenarios/{test_tank}/print?")
    page.goto(server + href)
    page.wait_for_selector("body[data-ready='1']", timeout=TIMEOUT)
    text = page.inner_text("body")
    assert test_tank in text and "exomap 0" in text
    assert "Screening aid" in text
    assert page.locator("#p-map .main-svg").count() >= 1
    assert page.locator("#p-upsets tr").count() >= 2
    assert page.get_attribute("#p-verdict", "data-verdict") in ("inside", "marginal", "outside")
    has_page_rule = page.evaluate(
        "() => [...document.styleSheets].some(s => { try { return [...s.cssRules].some(r => r instanceof CSSPageRule);"
        " } catch { return false; } })"
    )
    assert has_page_rule
    screenshot(page, "print")
    for fmt in ("A4", "Letter"):
        pdf = page.pdf(format=fmt, print_background=True)
        pages = len(re.findall(rb"/Type\s*/Page[^s]", pdf))
        assert 1 <= pages <= 4, (fmt, pages)
        (SCREENSHOTS / f"print-{fmt}.pdf").write_bytes(pdf)


def test_progress_is_shown_for_slow_answers(page: Any, server: str, test_tank: str) -> None:
    page.goto(f"{server}/scenarios/{test_tank}")
    wait_ready(page)

    # hold map answers for 1.5 s to see the progress note (the guard's route stays underneath)
    def slow(route: Any) -> None:
        page.wait_for_timeout(1500)
        route.continue_()

    page.route("**/map?**", slow)
    page.click("summary:has-text('Map window')")
    page.fill("#mw-points", "31 x 29")
    page.click("#mw-apply")
    page.wait_for_selector("#status:not([hidden])", timeout=5000)
    assert "map" in page.inner_text("#status").lower()
    page.wait_for_selector("#status[hidden]", state="attached", timeout=TIMEOUT)
    assert query(page.url)["points"] == "31,29"


def test_browser_urls_match_the_server_module(page: Any, server: str) -> None:
    """urls.js and exomap.web.urls build the same page and twin URLs for the same view state."""
    from exomap.web import urls

    page.goto(server + "/")
    state = {
        "residence_time": 2442.902447431421,
        "feed_temperature": 308.15,
        "map_residence_time": [60.0, 36000.0],
        "map_feed_temperature": [273.15, 373.15],
        "points": [60, 50],
        "branch": "high",
        "panel": "curves",
        "upset": 3,
        "coolant_temperature": 293.15,
        "sim_start": "high",
        "sim_duration": 7200,
        "sim_events": "at 10 min do feed_stop\nat 20 min scale feed_flow by 1.5",
        "dataset": "0123456789abcdef",
        "data_start": "2026-11-30T06:10:00Z",
        "data_end": "1796019600",
        "prepared_by": None,
        "reviewed_by": None,
        "change_reference": None,
        "review_date": None,
    }
    got = page.evaluate(
        """async (s) => { const u = await import('/static/urls.js');
           return [u.scenarioPage('ab/c d', s), u.printPage('x', s), u.twinOfPage('x', s), u.mapOfPage('x', s, 'csv'),
                   u.readState(new URL(u.scenarioPage('x', s), location.origin).search)]; }""",
        state,
    )
    assert got[0] == urls.scenario_page("ab/c d", state)
    assert got[1] == urls.print_page("x", state)
    assert got[2] == urls.api_twin_of_page("x", state)
    assert got[3] == urls.api_map_of_page("x", state, "csv")
    # the view state reads back, numbers to the 12 significant digits a link carries (no binary noise)
    assert got[4] == {**state, "residence_time": 2442.90244743}


def test_units_typed_in_the_setpoint(page: Any, server: str) -> None:
    page.goto(server + "/")
    got = page.evaluate(
        """async () => { const u = await import('/static/units.js');
           return [u.parseTime('40 min'), u.parseTime('0.5 h'), u.parseTime('90'), u.parseTemperature('35 degC'),
                   u.parseTemperature('35 °C'), u.parseTemperature('95 degF'), u.parseTemperature('308.15 K'),
                   u.parseTemperature('35')]; }"""
    )
    # analytic: 40 min = 2400 s; 0.5 h = 1800 s; a bare number is in min; 35 degC = 308.15 K;
    # 95 degF = (95 - 32) * 5/9 + 273.15 K = 308.15 K; a bare temperature is in degC
    assert got == pytest.approx([2400, 1800, 5400, 308.15, 308.15, 308.15, 308.15, 308.15], abs=1e-9)
    err = page.evaluate(
        "async () => { const u = await import('/static/units.js'); try { u.parseTime('3 kg'); }"
        " catch (e) { return e.message; } }"
    )
    assert "not a unit of time" in err


def test_map_still_picture_comes_before_the_chart_library(page: Any, server: str, test_tank: str) -> None:
    # with plotly's bundle held back, the map is already there as a still picture with its legend, and the
    # page says it is loading the chart library
    page.route("**/vendor/plotly-*", lambda route: None)  # never answered
    page.goto(f"{server}/scenarios/{test_tank}")
    page.wait_for_selector("#map canvas.map-preview", timeout=TIMEOUT)
    page.wait_for_function(
        "() => !document.getElementById('status').hidden"
        " && document.getElementById('status').textContent.includes('chart library')",
        timeout=5000,
    )
    assert "One stable state" in page.inner_text("#map-legend")
    # the canvas has the regions' colours: sample its middle row for at least two of the palette's colours
    colours = page.evaluate(
        """() => { const c = document.querySelector('#map canvas'); const g = c.getContext('2d');
           const seen = new Set(); for (let x = 70; x < c.width - 20; x += 4) {
             const d = g.getImageData(x, Math.round(c.height * 0.75), 1, 1).data; seen.add(d.slice(0, 3).join(','));
           } return [...seen]; }"""
    )
    text = (ROOT / "web" / "static" / "palette.js").read_text(encoding="utf-8")
    block = text[text.index("REGION_COLOURS") : text.index("};", text.index("REGION_COLOURS"))]
    hexes = re.findall(r'"#([0-9a-fA-F]{6})"', block)
    palette = {",".join(str(int(h[i : i + 2], 16)) for i in (0, 2, 4)) for h in hexes}
    assert len(palette) == 5
    assert len(palette & set(colours)) >= 2, colours


def test_missing_scenario_says_so(page: Any, server: str) -> None:
    response = page.goto(f"{server}/scenarios/0000000000000000")
    assert response.status == 404
    assert "has no scenario with the id" in page.inner_text("main")
    assert "Screening aid" in page.inner_text("#cautions")


def test_api_error_is_shown_in_plain_words(page: Any, server: str, test_tank: str) -> None:
    # a residence time the API refuses: the check says why, in words, and the page keeps working
    page.goto(f"{server}/scenarios/{test_tank}?residence_time=-5")
    page.wait_for_selector("#verdict.verdict-error", timeout=TIMEOUT)
    text = page.inner_text("#verdict")
    assert "could not be made" in text and "residence_time" in text
    assert "Traceback" not in page.content()


def test_the_guard_stops_requests_to_other_hosts(new_context: Any, server: str) -> None:
    # the guard every other test relies on: a request to another host is aborted and recorded
    ctx = new_context()
    page = open_page(ctx)
    page.goto(server + "/")
    outcome = page.evaluate(
        "async () => { try { await fetch('http://example.invalid/plotly.js'); return 'fetched'; }"
        " catch (e) { return 'blocked'; } }"
    )
    assert outcome == "blocked"  # the page's own Content-Security-Policy stops it before the network
    from playwright.sync_api import Error as PlaywrightError

    with pytest.raises(PlaywrightError):
        page.goto("http://example.invalid/")  # a navigation is not the page's to police: the guard stops it
    assert ctx.guard.foreign == ["http://example.invalid/"]
    ctx.guard.foreign.clear()  # seen and checked here; the fixture's own check would fail the test otherwise
