"""The scenario editor adds and removes species and reactions: driven in the system Chromium, saved through
the real server, and the saved document read back from the JSON API.

Expected SI values are unit conversions of what the test types (analytic: 1 kJ/mol = 1000 J/mol); everything
else is compared with the demo's own document as the API answers it. Screenshots go to artifacts/screenshots/.
"""

from __future__ import annotations

import re
from typing import Any
from urllib.parse import urlparse

import httpx
import pytest
from browser_helpers import screenshot

pytestmark = pytest.mark.browser

MAP_DRAWN = "() => Boolean(document.getElementById('map') && document.getElementById('map').dataset.drawn)"
TIMEOUT = 90_000


@pytest.fixture(scope="module")
def demo_ids(api: httpx.Client) -> dict[str, str]:
    """Ids of the bundled demos by file name."""
    return {s["name"]: s["id"] for s in api.get("/api/v1/scenarios").json()["scenarios"] if s["demo"]}


def describe(page: Any) -> None:
    page.fill("#editor [data-field='description'] textarea", "Invented: edited in a browser test.")


def field(path: str) -> str:
    return f"#editor [data-field='{path}'] input"


def open_editor(page: Any, server: str, scenario_id: str) -> None:
    page.goto(f"{server}/scenarios/{scenario_id}?panel=editor")
    page.wait_for_selector("#editor #f-new-species", timeout=TIMEOUT)


def saved_id(page: Any, old_id: str) -> str:
    page.wait_for_url(re.compile(r"/scenarios/(?!" + old_id + r")[0-9a-f]{16}"), timeout=TIMEOUT)
    return urlparse(page.url).path.rsplit("/", 1)[-1]


def test_add_a_species_and_a_decomposition_reaction(
    page: Any, server: str, api: httpx.Client, demo_ids: dict[str, str]
) -> None:
    old_id = demo_ids["jacketed-first-order"]
    before = api.get(f"/api/v1/scenarios/{old_id}").json()
    assert before["species"] == ["A", "P"] and len(before["reactions"]) == 1
    open_editor(page, server, old_id)
    # typed before the structure changes, and must survive it
    page.fill(field("title"), "Jacketed demo with a decomposition (invented)")

    page.fill("#f-new-species", "D")
    page.click("#add-species")
    page.wait_for_selector("#editor .species-row[data-species='D']")
    assert page.input_value(field("title")) == "Jacketed demo with a decomposition (invented)"
    # the new species has its fields in the existing reaction and in the feed
    assert page.locator(field("reactions[0].stoichiometry.D")).count() == 1
    assert page.locator(field("feed.concentrations.D")).count() == 1

    page.click("#add-reaction")
    group = page.locator("#editor [data-group='reactions[1]']")
    group.wait_for()
    assert page.evaluate("() => document.activeElement.id") == "f-reactions_1__label"
    page.fill(field("reactions[1].label"), "P -> D (decomposition)")
    page.fill(field("reactions[1].stoichiometry.P"), "-1")
    page.fill(field("reactions[1].stoichiometry.D"), "1")
    page.fill(field("reactions[1].orders.P"), "1")
    # the unit shown for the pre-exponential factor follows the orders typed (first order: 1/s)
    assert page.inner_text("#editor [data-field='reactions[1].pre_exponential'] .unit") == "1/s"
    page.fill(field("reactions[1].pre_exponential"), "7.8e13 1/s")
    page.fill(field("reactions[1].activation_energy"), "140 kJ/mol")
    page.fill(field("reactions[1].reaction_enthalpy"), "-300")  # bare number: in the kJ/mol shown
    page.check(field("reactions[1].decomposition"))
    group.scroll_into_view_if_needed()
    screenshot(page, "editor-rows-new-reaction")

    page.fill("#editor [data-field='description'] textarea", "Invented: the jacketed demo with a decomposition.")
    page.click("#editor-save")
    new_id = saved_id(page, old_id)
    page.wait_for_function(MAP_DRAWN, timeout=TIMEOUT)
    screenshot(page, "editor-rows-saved")

    after = api.get(f"/api/v1/scenarios/{new_id}").json()
    assert after["title"] == "Jacketed demo with a decomposition (invented)"
    assert after["species"] == ["A", "P", "D"]
    assert after["reactions"][0] == before["reactions"][0]
    new = after["reactions"][1]
    assert new["label"] == "P -> D (decomposition)" and new["decomposition"] is True
    assert new["stoichiometry"] == {"P": -1.0, "D": 1.0} and new["orders"] == {"P": 1.0}
    # analytic: the values typed, in SI (1/s is SI for a first-order reaction; 1 kJ/mol = 1000 J/mol)
    assert new["pre_exponential"] == pytest.approx(7.8e13, rel=1e-12)
    assert new["activation_energy"] == pytest.approx(140_000.0, rel=1e-12)
    assert new["reaction_enthalpy"] == pytest.approx(-300_000.0, rel=1e-12)
    assert after["feed"] == before["feed"]  # D left blank in the feed: absent, i.e. 0
    # content-addressed: the old link still shows the old scenario
    assert api.get(f"/api/v1/scenarios/{old_id}").json() == before


def test_remove_a_species_from_reactions_and_feed(page: Any, server: str, api: httpx.Client, test_tank: str) -> None:
    before = api.get(f"/api/v1/scenarios/{test_tank}").json()
    assert before["species"] == ["A", "B"] and set(before["feed"]["concentrations"]) == {"A", "B"}
    open_editor(page, server, test_tank)

    # A is the only reactant of A -> B: refused in words beside its button, nothing removed
    page.click("#editor .remove-species[data-species='A']")
    refusal = page.locator("#f-species_0_-err")
    refusal.wait_for(state="visible")
    assert "only reactant of reaction 1 (A -> B)" in refusal.inner_text()
    assert page.locator("#editor .species-row").count() == 2
    screenshot(page, "editor-rows-refuse-species")

    page.click("#editor .remove-species[data-species='B']")
    page.wait_for_selector("#editor .species-row[data-species='B']", state="detached")
    assert page.locator(field("reactions[0].stoichiometry.B")).count() == 0
    assert page.locator(field("reactions[0].orders.B")).count() == 0
    assert page.locator(field("feed.concentrations.B")).count() == 0
    assert "B removed" in page.inner_text("#editor-rows-status")

    describe(page)  # a changed scenario gets its own description (the page asks for one)
    page.click("#editor-save")
    new_id = saved_id(page, test_tank)
    page.wait_for_function(MAP_DRAWN, timeout=TIMEOUT)
    after = api.get(f"/api/v1/scenarios/{new_id}").json()
    assert after["species"] == ["A"]
    assert after["reactions"][0]["stoichiometry"] == {"A": -1.0}
    assert after["reactions"][0]["orders"] == before["reactions"][0]["orders"] == {"A": 1.0}
    assert after["feed"]["concentrations"] == {"A": before["feed"]["concentrations"]["A"]}
    assert api.get(f"/api/v1/scenarios/{test_tank}").json() == before


def test_remove_a_reaction_keeps_what_was_typed_in_the_others(
    page: Any, server: str, api: httpx.Client, demo_ids: dict[str, str]
) -> None:
    old_id = demo_ids["product-decomposition"]
    before = api.get(f"/api/v1/scenarios/{old_id}").json()
    assert len(before["reactions"]) == 2
    open_editor(page, server, old_id)
    page.fill(field("reactions[0].activation_energy"), "72 kJ/mol")
    page.click("#add-reaction")
    page.fill(field("reactions[2].label"), "typed in the third")

    page.click("#remove-reaction-1")
    page.wait_for_selector("#editor [data-group='reactions[2]']", state="detached")
    # the third reaction is now the second, with what was typed in it; the first keeps its edit
    assert page.input_value(field("reactions[1].label")) == "typed in the third"
    assert page.input_value(field("reactions[0].activation_energy")) == "72 kJ/mol"

    page.click("#remove-reaction-1")
    page.wait_for_selector("#editor [data-group='reactions[1]']", state="detached")
    page.click("#remove-reaction-0")  # the last one: refused in words
    refusal = page.locator("#remove-reaction-0-err")
    refusal.wait_for(state="visible")
    assert "at least one reaction" in refusal.inner_text()
    assert page.locator("#editor [data-group='reactions[0]']").count() == 1

    describe(page)  # a changed scenario gets its own description (the page asks for one)
    page.click("#editor-save")
    new_id = saved_id(page, old_id)
    after = api.get(f"/api/v1/scenarios/{new_id}").json()
    assert len(after["reactions"]) == 1
    # analytic: 72 kJ/mol = 72000 J/mol; the rest of reaction 1 as in the demo
    assert after["reactions"][0] == {**before["reactions"][0], "activation_energy": pytest.approx(72_000.0, rel=1e-12)}
    assert after["species"] == before["species"]


def test_bad_value_in_a_new_reaction_is_shown_beside_its_field(
    page: Any, server: str, demo_ids: dict[str, str]
) -> None:
    open_editor(page, server, demo_ids["jacketed-first-order"])
    start_url = page.url
    page.click("#add-reaction")
    page.fill(field("reactions[1].stoichiometry.A"), "-1")
    page.fill(field("reactions[1].stoichiometry.P"), "1")
    page.fill(field("reactions[1].orders.A"), "1")
    page.fill(field("reactions[1].pre_exponential"), "5 m")
    page.fill(field("reactions[1].reaction_enthalpy"), "-50 kJ/mol")  # activation energy left blank
    describe(page)  # a changed scenario gets its own description (the page asks for one)
    page.click("#editor-save")

    err = page.locator("#editor [data-field='reactions[1].pre_exponential'] .field-error")
    err.wait_for(state="visible", timeout=TIMEOUT)
    assert "'5 m'" in err.inner_text() and "1/s" in err.inner_text()
    assert page.get_attribute(field("reactions[1].pre_exponential"), "aria-invalid") == "true"
    missing = page.locator("#editor [data-field='reactions[1].activation_energy'] .field-error")
    assert missing.is_visible() and "missing" in missing.inner_text()
    # the existing reaction's fields carry no error
    assert page.locator("#editor [data-group='reactions[0]'] .field-error:visible").count() == 0
    assert page.url == start_url  # nothing was saved
    err.scroll_into_view_if_needed()
    screenshot(page, "editor-rows-error")


def test_new_species_name_is_checked_and_added_by_keyboard(page: Any, server: str, demo_ids: dict[str, str]) -> None:
    open_editor(page, server, demo_ids["jacketed-first-order"])
    start_url = page.url
    err = page.locator("#f-new-species-err")
    for typed, words in [
        ("A", "already a species named A"),
        ("2x", "not a species name"),
        ("", "Type a name"),
        ("a", "confuse with A"),
    ]:
        page.fill("#f-new-species", typed)
        page.click("#add-species")
        err.wait_for(state="visible")
        assert words in err.inner_text(), typed
        assert page.locator("#editor .species-row").count() == 2

    # Enter in the field adds the species (it does not save the scenario); focus stays for the next name
    page.fill("#f-new-species", "")
    page.focus("#f-new-species")
    page.keyboard.type("Solvent_2")
    page.keyboard.press("Enter")
    page.wait_for_selector("#editor .species-row[data-species='Solvent_2']")
    assert not err.is_visible()
    assert page.evaluate("() => document.activeElement.id") == "f-new-species"
    assert page.input_value("#f-new-species") == ""  # ready for the next name
    assert page.url == start_url
    # Tab from the name reaches its button; the reaction buttons work from the keyboard too
    page.keyboard.press("Tab")
    assert page.evaluate("() => document.activeElement.id") == "add-species"
    page.focus("#add-reaction")
    page.keyboard.press("Enter")
    page.wait_for_selector("#editor [data-group='reactions[1]']")
    assert page.evaluate("() => document.activeElement.id") == "f-reactions_1__label"

    # every new control has a name a screen reader reads, and nothing is wider than the panel at 1366x768
    names = page.evaluate(
        """() => [...document.querySelectorAll('#editor .remove-species, #editor .remove-reaction, #add-species, '
                 + '#add-reaction')].map(b => b.getAttribute('aria-label') || b.textContent.trim())"""
    )
    assert all(names) and "Remove species Solvent_2" in names and "Remove reaction 2" in names
    assert page.evaluate("() => document.querySelector(\"label[for='f-new-species']\").textContent") == (
        "New species name"
    )
    panel = page.locator("#panel-editor")
    assert page.evaluate("(p) => p.scrollWidth <= p.clientWidth", panel.element_handle())
    page.locator("#editor [data-group='species']").scroll_into_view_if_needed()
    screenshot(page, "editor-rows-species")


def test_undo_takes_back_added_and_removed_rows(page: Any, server: str, demo_ids: dict[str, str]) -> None:
    open_editor(page, server, demo_ids["product-decomposition"])
    page.fill("#f-new-species", "constructor")  # a name that is also a built-in property in the browser
    page.click("#add-species")
    page.wait_for_selector("#editor .species-row[data-species='constructor']")
    assert page.input_value(field("feed.concentrations.constructor")) == ""
    page.click("#add-reaction")
    page.fill(field("reactions[2].label"), "side reaction")
    # the group's heading and its remove button follow the label typed
    assert page.inner_text("#editor [data-group='reactions[2]'] > legend") == "Reaction 3: side reaction"
    assert page.get_attribute("#remove-reaction-2", "aria-label") == "Remove reaction 3 (side reaction)"
    page.click("#editor .remove-species[data-species='D']")
    page.wait_for_selector("#editor .species-row[data-species='D']", state="detached")

    page.click("#editor-revert")
    species = page.eval_on_selector_all("#editor .species-row", "rows => rows.map(r => r.dataset.species)")
    assert species == ["A", "P", "D"]
    assert page.locator("#editor [data-group^='reactions[']").count() == 2
    assert page.input_value(field("reactions[1].stoichiometry.D")) == "1"
