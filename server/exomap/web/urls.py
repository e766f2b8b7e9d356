"""Every page and API URL the pages need, built in one place (the browser's twin is ``web/static/urls.js``).

View state lives in the query string of a page URL, in SI numbers so a link is exact and unit-free:

==========================  =============================================================
``residence_time``          setpoint residence time [s]
``feed_temperature``        setpoint feed temperature [K]
``coolant_temperature``     setpoint coolant temperature [K] (jacketed tanks; default the scenario's)
``map_residence_time``      map window ``lo,hi`` [s]
``map_feed_temperature``    map window ``lo,hi`` [K]
``points``                  map grid ``n_tau,n_tin``
``branch``                  ``low`` | ``high``: which stable state the check assumes
``panel``                   open panel: ``check`` | ``curves`` | ``simulate`` | ``editor`` | ``plant``
``upset``                   index of the upset whose response is open
``sim_start``               ``low`` | ``high``: the steady state a simulation starts from
``sim_duration``            simulated time [s]
``sim_events``              the simulation's events as typed, one a line (the text of ``exomap.core.events``)
``dataset``                 id of the stored plant dataset the "Plant data" panel shows
==========================  =============================================================

The print sheet adds its sign-off fields (``SIGNOFF_KEYS``: prepared by, reviewed by, change reference, date),
typed on the sheet and carried in its link only, never stored. Numbers are written with 12 significant
digits, so a link never carries binary noise such as ``2223.6000000000004``.

The same names (without the ``map_`` prefix for the map window) are the query parameters of the API's GET
twins, so a page URL maps onto its JSON twin by renaming at most two keys.
"""

from __future__ import annotations

from collections.abc import Mapping
from urllib.parse import quote, urlencode

API = "/api/v1"

#: Query keys of a page's view state, in the order they appear in a link.
VIEW_KEYS = (
    "residence_time",
    "feed_temperature",
    "coolant_temperature",
    "map_residence_time",
    "map_feed_temperature",
    "points",
    "branch",
    "panel",
    "upset",
    "sim_start",
    "sim_duration",
    "sim_events",
    "dataset",
    "data_start",
    "data_end",
)
#: Sign-off fields of the print sheet: in its link only, never stored.
SIGNOFF_KEYS = ("prepared_by", "reviewed_by", "change_reference", "review_date")
PANELS = ("check", "curves", "simulate", "editor", "plant")
BRANCHES = ("low", "high")


def _query(params: Mapping[str, object] | None) -> str:
    if not params:
        return ""
    items = [(k, _text(v)) for k, v in params.items() if v is not None and v != ""]
    return "?" + urlencode(items, safe=",", quote_via=quote) if items else ""


def _text(value: object) -> str:
    if isinstance(value, (list, tuple)):
        return ",".join(_text(v) for v in value)
    if isinstance(value, float):
        # 12 significant digits, then the shortest text that reads back to that number (as the browser's
        # String(Number(x.toPrecision(12))) writes it): no binary noise in a link
        value = float(f"{value:.12g}")
        return str(int(value)) if value.is_integer() and abs(value) < 1e21 else repr(value)
    return str(value)


def _seg(value: str) -> str:
    return quote(str(value), safe="")


def view_state(query: Mapping[str, str], keys: tuple[str, ...] = VIEW_KEYS) -> dict[str, str]:
    """The view-state keys of a request's query string (unknown keys dropped, order fixed)."""
    return {k: query[k] for k in keys if k in query and query[k] != ""}


# -- pages ------------------------------------------------------------------------------------------------
def home() -> str:
    return "/"


def scenario_page(scenario_id: str, state: Mapping[str, object] | None = None) -> str:
    return f"/scenarios/{_seg(scenario_id)}" + _query(_ordered(state))


def print_page(scenario_id: str, state: Mapping[str, object] | None = None) -> str:
    return f"/scenarios/{_seg(scenario_id)}/print" + _query(_ordered(state, VIEW_KEYS + SIGNOFF_KEYS))


def _ordered(state: Mapping[str, object] | None, keys: tuple[str, ...] = VIEW_KEYS) -> dict[str, object]:
    state = state or {}
    return {k: state[k] for k in keys if k in state}


# -- static files -----------------------------------------------------------------------------------------
def static(path: str, version: str | None = None) -> str:
    return "/static/" + path.lstrip("/") + (f"?v={quote(version)}" if version else "")


#: Route of plotly's bundle; the version is in the name so the file can be cached for good.
PLOTLY_ROUTE = "/vendor/plotly-{version}.min.js"


def plotly_bundle(plotly_version: str) -> str:
    """The plotly bundle of one plotly version."""
    return PLOTLY_ROUTE.format(version=_seg(plotly_version))


# -- API --------------------------------------------------------------------------------------------------
def api_health() -> str:
    return f"{API}/health"


def api_version() -> str:
    return f"{API}/version"


def api_scenarios() -> str:
    return f"{API}/scenarios"


def api_scenario(scenario_id: str) -> str:
    return f"{API}/scenarios/{_seg(scenario_id)}"


def api_answer(scenario_id: str, kind: str, params: Mapping[str, object] | None = None) -> str:
    """GET twin of an answer: ``kind`` in steady, branch, map, check, simulate."""
    if kind not in ("steady", "branch", "map", "check", "simulate"):
        raise ValueError(f"unknown answer kind {kind!r}")
    return f"{API}/scenarios/{_seg(scenario_id)}/{kind}" + _query(params)


def api_twin_of_page(scenario_id: str, state: Mapping[str, object] | None = None) -> str:
    """The JSON twin of a scenario page: the check at the page's setpoint (and branch)."""
    state = state or {}
    keys = ("residence_time", "feed_temperature", "coolant_temperature", "branch")
    params = {k: state[k] for k in keys if k in state}
    return api_answer(scenario_id, "check", params)


def api_map_of_page(scenario_id: str, state: Mapping[str, object] | None = None, fmt: str | None = None) -> str:
    """The map of a page's window (``fmt="csv"`` for the CSV download)."""
    state = state or {}
    params: dict[str, object] = {}
    if "map_residence_time" in state:
        params["residence_time"] = state["map_residence_time"]
    if "map_feed_temperature" in state:
        params["feed_temperature"] = state["map_feed_temperature"]
    if "points" in state:
        params["points"] = state["points"]
    if "coolant_temperature" in state:
        params["coolant_temperature"] = state["coolant_temperature"]
    if fmt:
        params["format"] = fmt
    return api_answer(scenario_id, "map", params)


def api_uncertainty_check(scenario_id: str, state: Mapping[str, object] | None = None) -> str:
    """The check with confidence of the page's view: its setpoint (``residence_time``, ``feed_temperature``,
    ``branch``; default the scenario's own feed) with the page's samples and seed."""
    state = state or {}
    params: dict[str, object] = {k: state[k] for k in ("residence_time", "feed_temperature", "branch") if k in state}
    params["samples"] = state.get("samples", 256)
    if "seed" in state:
        params["seed"] = state["seed"]
    return api_answer(scenario_id, "check", params)


# -- compare ----------------------------------------------------------------------------------------------------
#: Query keys of the compare page, in link order (exomap.web.compare.VIEW_KEYS).
COMPARE_KEYS = (
    "a",
    "b",
    "residence_time_a",
    "feed_temperature_a",
    "branch_a",
    "residence_time_b",
    "feed_temperature_b",
    "branch_b",
    "map_residence_time",
    "map_feed_temperature",
    "points",
    "prepared_by",
    "reviewed_by",
    "change_reference",
    "review_date",
)


def compare_page(state: Mapping[str, object]) -> str:
    """The compare page of a view state (``a``, ``b``, setpoints, window, sign-off fields)."""
    return "/compare" + _query({k: state[k] for k in COMPARE_KEYS if k in state})


def compare_print_page(state: Mapping[str, object]) -> str:
    return "/compare/print" + _query({k: state[k] for k in COMPARE_KEYS if k in state})


def api_compare(params: Mapping[str, object]) -> str:
    """GET twin of a comparison (``a``, ``b``, ``residence_time_a`` ..., window ``residence_time=lo,hi``)."""
    return f"{API}/compare" + _query(params)


# -- probability map (DESIGN.md §11) ----------------------------------------------------------------------
#: Query keys of the probability-map page, in link order.
UNCERTAINTY_KEYS = (
    "samples",
    "seed",
    "show",
    "map_residence_time",
    "map_feed_temperature",
    "points",
    "residence_time",
    "feed_temperature",
    "branch",
)
#: Probabilities the page can shade.
SHOWN = ("unsafe", "runaway", "unstable", "multiple")


def uncertainty_state(query: Mapping[str, str]) -> dict[str, str]:
    """The view-state keys of the probability-map page (unknown keys dropped, order fixed)."""
    return {k: query[k] for k in UNCERTAINTY_KEYS if k in query and query[k] != ""}


def uncertainty_page(scenario_id: str, state: Mapping[str, object] | None = None) -> str:
    state = state or {}
    return f"/scenarios/{_seg(scenario_id)}/uncertainty" + _query({k: state[k] for k in UNCERTAINTY_KEYS if k in state})


def api_uncertainty_map(scenario_id: str, state: Mapping[str, object] | None = None, fmt: str | None = None) -> str:
    """The probability map of the page's view (``samples`` default 256, as the uncertainty block's)."""
    state = state or {}
    params: dict[str, object] = {"samples": state.get("samples", 256)}
    if "seed" in state:
        params["seed"] = state["seed"]
    for page_key, api_key in (
        ("map_residence_time", "residence_time"),
        ("map_feed_temperature", "feed_temperature"),
        ("points", "points"),
    ):
        if page_key in state:
            params[api_key] = state[page_key]
    if fmt:
        params["format"] = fmt
    return api_answer(scenario_id, "map", params)
