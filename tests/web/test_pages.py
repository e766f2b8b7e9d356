"""The page routes, static files and plotly's bundle, through the app's own test client (no browser).

Browser behaviour is tested in tests/browser; here: every page is HTML with its JSON twin and the cautions,
plotly is the installed package's own file served gzipped and cached, nothing is fetched from another host,
and the URL module round-trips view state.
"""

from __future__ import annotations

import html
import json
import re
from html.parser import HTMLParser
from importlib import resources
from pathlib import Path
from typing import Any

import plotly
import pytest
from exomap.web import urls
from exomap.web.pages import cautions_text

ASSETS = Path(str(resources.files("exomap.assets")))


class Links(HTMLParser):
    """Collects <link>, <script src> and <a href> of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.links: list[dict[str, str]] = []
        self.scripts: list[str] = []
        self.anchors: dict[str, str] = {}

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "link":
            self.links.append(a)
        elif tag == "script" and "src" in a:
            self.scripts.append(a["src"])
        elif tag == "a" and "id" in a:
            self.anchors[a["id"]] = a.get("href", "")


def parse(html: str) -> Links:
    p = Links()
    p.feed(html)
    return p


def twin_of(html: str) -> str:
    alts = [
        link["href"]
        for link in parse(html).links
        if link.get("rel") == "alternate" and link.get("type") == "application/json"
    ]
    assert len(alts) == 1, alts
    return alts[0]


def test_home_page_names_its_twin_and_cautions(client: Any) -> None:
    r = client.get("/")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/html")
    assert twin_of(r.text) == urls.api_scenarios()
    assert client.get(twin_of(r.text)).status_code == 200
    for line in cautions_text():
        assert line in html.unescape(r.text)


def test_scenario_page_twin_carries_the_view_state(client: Any, saved_id: str) -> None:
    state = {
        "residence_time": "2400",
        "feed_temperature": "308.15",
        "panel": "curves",
        "map_residence_time": "60,36000",
        "points": "40,40",
        "junk": "x",
    }
    r = client.get(f"/scenarios/{saved_id}", params=state)
    assert r.status_code == 200
    twin = twin_of(r.text)
    assert twin == f"/api/v1/scenarios/{saved_id}/check?residence_time=2400&feed_temperature=308.15"
    page = parse(r.text)
    assert page.anchors["print-link"] == (
        f"/scenarios/{saved_id}/print?residence_time=2400&feed_temperature=308.15"
        "&map_residence_time=60,36000&points=40,40&panel=curves"
    )
    assert page.anchors["dl-map"] == f"/api/v1/scenarios/{saved_id}/map?residence_time=60,36000&points=40,40&format=csv"
    assert "junk" not in r.text
    # the map download answers CSV with the grid asked for: 40 x 40 cells and a header line
    csv = client.get(page.anchors["dl-map"])
    assert csv.status_code == 200 and csv.headers["content-type"].startswith("text/csv")
    assert len(csv.text.strip().splitlines()) == 40 * 40 + 1
    for line in cautions_text():
        assert line in html.unescape(r.text)


def test_print_page_shows_version_id_and_cautions(client: Any, saved_id: str) -> None:
    import exomap

    r = client.get(f"/scenarios/{saved_id}/print", params={"residence_time": "2400"})
    assert r.status_code == 200
    assert twin_of(r.text) == f"/api/v1/scenarios/{saved_id}/check?residence_time=2400"
    assert saved_id in r.text and f"exomap {exomap.__version__}" in r.text
    assert "print.css" in r.text
    for line in cautions_text():
        assert line in html.unescape(r.text)


def test_cautions_are_those_of_the_design() -> None:
    text = " ".join(cautions_text())
    # DESIGN.md section 9, the four sentences in their key words
    for words in (
        "Screening aid, not a design or safety basis",
        "calorimetric testing",
        "hazard study",
        "licensed engineers",
    ):
        assert words in text


def test_plotly_is_the_installed_bundle_gzipped_and_cached(client: Any, saved_id: str) -> None:
    home = client.get("/").text
    path = urls.plotly_bundle(plotly.__version__)
    page = client.get(f"/scenarios/{saved_id}").text
    preloads = [link["href"] for link in parse(page).links if link.get("rel") == "preload"]
    assert preloads == [path]
    r = client.get(path, headers={"Accept-Encoding": "gzip"})
    assert r.status_code == 200
    assert r.headers["content-encoding"] == "gzip"
    assert "immutable" in r.headers["cache-control"] and "max-age=31536000" in r.headers["cache-control"]
    assert r.headers["content-type"].startswith("text/javascript")
    installed = (Path(plotly.__file__).parent / "package_data" / "plotly.min.js").read_bytes()
    assert r.content == installed  # httpx decodes the gzip body
    assert int(r.headers["content-length"]) < len(installed) / 2
    etag = r.headers["etag"]
    assert client.get(path, headers={"If-None-Match": etag}).status_code == 304
    plain = client.get(path, headers={"Accept-Encoding": "identity"})
    assert "content-encoding" not in plain.headers and plain.content == installed
    # the home page draws no chart, so it neither loads nor preloads the bundle
    assert path not in parse(home).scripts and path not in [link["href"] for link in parse(home).links]


def test_plotly_of_another_version_is_a_plain_404(client: Any) -> None:
    from web_helpers import assert_error

    r = client.get(urls.plotly_bundle("0.0.1"))
    assert_error(r, 404, "not_found")


@pytest.mark.parametrize("name", ["urls.js", "scenario.js", "map.js", "style.css", "print.css"])
def test_static_files_are_served(client: Any, name: str) -> None:
    r = client.get(urls.static(name))
    assert r.status_code == 200
    kind = "css" if name.endswith(".css") else "javascript"
    assert kind in r.headers["content-type"]
    assert r.content == (ASSETS / "static" / name).read_bytes()


def test_nothing_is_loaded_from_another_host() -> None:
    # pages must work on an air-gapped network: no absolute URL to another host in any template or script
    pattern = re.compile(r"""(?:src|href|import|from|url\()\s*=?\s*["'(]?\s*(?:https?:)?//""", re.IGNORECASE)
    for path in list((ASSETS / "templates").rglob("*.html")) + list((ASSETS / "static").rglob("*.*")):
        text = path.read_text(encoding="utf-8")
        assert not pattern.search(text), path
        assert "cdn" not in text.lower(), path


def test_partials_start_with_underscore() -> None:
    pages = {
        "layout.html",
        "home.html",
        "scenario.html",
        "print.html",
        "missing.html",
        "compare.html",
        "compare_print.html",
        "uncertainty.html",
    }
    for path in (ASSETS / "templates").glob("*.html"):
        text = path.read_text(encoding="utf-8")
        for included in re.findall(r'{%\s*include\s+"([^"]+)"', text):
            assert included.startswith("_"), (path.name, included)
            assert (ASSETS / "templates" / included).exists(), included
        assert path.name in pages or path.name.startswith("_"), path.name


def test_templates_build_no_urls_by_concatenation() -> None:
    # URLs come from exomap.web.urls (urls.*(...)); a template never glues "/scenarios/" + id itself
    for path in (ASSETS / "templates").glob("*.html"):
        text = path.read_text(encoding="utf-8")
        for attr in re.findall(r'(?:href|src)="([^"]*)"', text):
            assert attr.startswith("{{ urls.") or attr.startswith("{{ twin") or attr.startswith("{{ plotly_url"), (
                path.name,
                attr,
            )


def test_view_state_round_trips_through_urls() -> None:
    state = {
        "panel": "check",
        "residence_time": 2400.0,
        "feed_temperature": 308.15,
        "map_feed_temperature": (273.15, 373.15),
        "points": (60, 50),
        "branch": "high",
    }
    url = urls.scenario_page("ab/c d", state)
    assert url.startswith("/scenarios/ab%2Fc%20d?residence_time=2400&feed_temperature=308.15")
    from urllib.parse import parse_qsl, urlsplit

    back = urls.view_state(dict(parse_qsl(urlsplit(url).query)))
    assert list(back) == [k for k in urls.VIEW_KEYS if k in state]
    assert back["map_feed_temperature"] == "273.15,373.15" and back["points"] == "60,50"
    assert float(back["feed_temperature"]) == 308.15
    twin = urls.api_twin_of_page("x", back)
    assert twin == "/api/v1/scenarios/x/check?residence_time=2400&feed_temperature=308.15&branch=high"
    assert urls.api_map_of_page("x", back, "csv") == (
        "/api/v1/scenarios/x/map?feed_temperature=273.15,373.15&points=60,50&format=csv"
    )
    with pytest.raises(ValueError, match="unknown answer kind"):
        urls.api_answer("x", "nonsense")


def test_links_carry_no_float_noise_and_the_sheet_keeps_its_sign_off() -> None:
    # 37.06 min in seconds is 2223.6000000000004 in binary floating point; a link says 2223.6
    url = urls.scenario_page("x", {"residence_time": 37.06 * 60, "feed_temperature": 273.15 + 50.1})
    assert url == "/scenarios/x?residence_time=2223.6&feed_temperature=323.25"
    state = {"residence_time": 2223.6, "prepared_by": "A. Engineer", "sim_events": "at 10 min do feed_stop"}
    sheet = urls.print_page("x", state)
    assert "prepared_by=A.%20Engineer" in sheet and "sim_events=at%2010%20min%20do%20feed_stop" in sheet
    # the scenario page's own link does not carry the sign-off (it belongs to the sheet)
    assert "prepared_by" not in urls.scenario_page("x", state)


def test_missing_scenario_is_a_404_page_in_words(client: Any) -> None:
    r = client.get("/scenarios/0000000000000000")
    assert r.status_code == 404 and r.headers["content-type"].startswith("text/html")
    assert "has no scenario with the id" in r.text and "0000000000000000" in r.text
    assert client.get("/scenarios/0000000000000000/print").status_code == 404
    for line in cautions_text():
        assert line in html.unescape(r.text)


def test_a_demo_named_by_its_file_name_redirects_to_its_id(client: Any) -> None:
    demos = [s for s in client.get("/api/v1/scenarios").json()["scenarios"] if s["demo"] and s["name"]]
    assert demos
    d = demos[0]
    r = client.get(f"/scenarios/{d['name']}", params={"residence_time": "600"}, follow_redirects=False)
    assert r.status_code == 307
    assert r.headers["location"] == f"/scenarios/{d['id']}?residence_time=600"
    r = client.get(f"/scenarios/{d['name']}/print", follow_redirects=False)
    assert r.headers["location"] == f"/scenarios/{d['id']}/print"


def _srgb_to_lab_l(hex_colour: str) -> float:
    """CIE L* of an sRGB colour: IEC 61966-2-1 transfer function, then CIE 1976 L* (D65 white)."""
    rgb = [int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    # relative luminance Y, ITU-R BT.709 primaries (as IEC 61966-2-1)
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return 116 * y ** (1 / 3) - 16 if y > (6 / 29) ** 3 else y * (29 / 3) ** 3


def test_region_colours_differ_in_lightness() -> None:
    """The region colours stay apart without hue (colour-blind readers, greyscale print): lightness falls with
    the hazard (stable, sensitive, multiple, unstable, runaway), each step at least 12 in CIE L* (our own
    threshold; a step of about 10 is easy to see, common practice) and at least 40 of 255 in the grey value a
    greyscale conversion makes (Rec. 709 luma of the sRGB values, as CSS grayscale() uses)."""
    text = (ASSETS / "static" / "palette.js").read_text(encoding="utf-8")
    block = text[text.index("REGION_COLOURS") : text.index("};", text.index("REGION_COLOURS"))]
    colours = dict(re.findall(r'(\w+): "(#[0-9a-fA-F]{6})"', block))
    order = ["stable", "sensitive", "multiple", "unstable", "runaway"]
    assert set(colours) == set(order)
    lightness = [_srgb_to_lab_l(colours[k]) for k in order]
    grey = [_luma709(colours[k]) for k in order]
    for i in range(len(order) - 1):
        assert lightness[i] - lightness[i + 1] >= 12, (order[i], order[i + 1], lightness)
        assert grey[i] - grey[i + 1] >= 40, (order[i], order[i + 1], grey)


def _luma709(hex_colour: str) -> float:
    """Grey value 0..255 of an sRGB colour with the Rec. 709 weights on the encoded values (CSS grayscale())."""
    r, g, b = (int(hex_colour[i : i + 2], 16) for i in (1, 3, 5))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def test_simulate_takes_the_event_lines_the_page_teaches(client: Any) -> None:
    """POST /simulate and its GET twin read event lines ("at 10 min add feed_temperature 10 K") exactly as the
    objects they stand for."""
    sid = next(s["id"] for s in client.get("/api/v1/scenarios").json()["scenarios"] if s["demo"])
    base = {"scenario_id": sid, "residence_time": "40 min", "duration": "1 h"}
    objects = [
        {"at": "10 min", "add": "feed_temperature", "value": "10 K"},
        {"at": "20 min", "scale": "feed_flow", "by": 1.2},
        {"at": "30 min", "do": "feed_stop"},
    ]
    lines = ["at 10 min add feed_temperature 10 K", "at 20 min scale feed_flow by 1.2", "at 30 min do feed_stop"]
    want = client.post("/api/v1/simulate", json={**base, "events": objects})
    assert want.status_code == 200, want.text
    got = client.post("/api/v1/simulate", json={**base, "events": lines})
    assert got.status_code == 200, got.text
    assert got.json() == want.json()
    twin = client.get(
        f"/api/v1/scenarios/{sid}/simulate",
        params={"residence_time": "40 min", "duration": "1 h", "events": "\n".join(["# comment", *lines, ""])},
    )
    assert twin.status_code == 200, twin.text
    assert twin.json() == want.json()
    bad = client.post("/api/v1/simulate", json={**base, "events": [lines[0], "at noon open the valve"]})
    assert bad.status_code == 422
    fields = bad.json()["error"]["fields"]
    assert fields[0]["field"] == "events[1]" and "not an event line" in fields[0]["message"]


def test_coolant_temperature_is_a_setpoint_of_a_jacketed_tank(client: Any) -> None:
    """check, simulate and map take the coolant temperature; each answer is the core's on the scenario with
    that coolant (the API's own default when it is absent), and a tank without a jacket refuses it by name."""
    import dataclasses

    from exomap import schema
    from exomap.core.check import check_setpoint
    from exomap.web.jobs import dumps

    listing = client.get("/api/v1/scenarios").json()["scenarios"]
    jacketed = next(s for s in listing if s["name"] == "jacketed-first-order")
    doc = client.get(f"/api/v1/scenarios/{jacketed['id']}").json()
    core = schema.parse_scenario(doc).to_core()
    # 15 degC = 288.15 K (SI Brochure §2.3.1)
    warm = dataclasses.replace(core, T_c=288.15)
    want = json.loads(dumps(check_setpoint(warm, tau=2400.0, T_in=core.T_in).to_dict()))
    got = client.get(
        f"/api/v1/scenarios/{jacketed['id']}/check", params={"residence_time": 2400, "coolant_temperature": "15 degC"}
    )
    assert got.status_code == 200, got.text
    assert got.json() == want
    plain = client.get(f"/api/v1/scenarios/{jacketed['id']}/check", params={"residence_time": 2400}).json()
    assert plain != want  # the coolant moved the answer, so the test can tell
    m = client.get(
        f"/api/v1/scenarios/{jacketed['id']}/map", params={"points": "20,20", "coolant_temperature": 288.15}
    ).json()
    m0 = client.get(f"/api/v1/scenarios/{jacketed['id']}/map", params={"points": "20,20"}).json()
    assert m["region"] != m0["region"] or m["boundaries"] != m0["boundaries"]
    sim = client.post(
        "/api/v1/simulate",
        json={"scenario_id": jacketed["id"], "residence_time": 2400, "duration": 600, "coolant_temperature": "15 degC"},
    )
    assert sim.status_code == 200, sim.text
    adiabatic = next(s for s in listing if s["name"] == "adiabatic-second-order")
    bad = client.get(f"/api/v1/scenarios/{adiabatic['id']}/check", params={"coolant_temperature": "15 degC"})
    assert bad.status_code == 422
    assert bad.json()["error"]["fields"][0]["field"] == "coolant_temperature"
