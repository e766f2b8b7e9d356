"""Text fields of a scenario are bounded and printable (issue 12, defect 3): titles, descriptions, labels and
species names refuse control and invisible characters, with one message naming the field."""

from __future__ import annotations

import copy
import json
from importlib import resources

import pytest
from exomap import schema
from exomap.schema.text import DESCRIPTION_MAX, LABEL_MAX, TITLE_MAX


def _demo() -> dict:
    return json.loads((resources.files("exomap.demos") / "adiabatic-second-order.json").read_text(encoding="utf-8"))


def _errors(doc: dict) -> dict[str, str]:
    with pytest.raises(schema.ScenarioError) as info:
        schema.parse_scenario(doc)
    return {e["field"]: e["message"] for e in info.value.errors}


# The characters a review pasted into every text field: NUL, escape, the right-to-left override, the zero-width
# space and joiner, the byte-order mark, a line separator, a private-use code point (Unicode general categories
# Cc, Cf, Zl, Co: from the Unicode Character Database, as Python's unicodedata reports them).
BAD = ["\x00", "\x1b", "\u202e", "\u200b", "\u200d", "\ufeff", "\u2028", "\ue000"]


@pytest.mark.parametrize("ch", BAD)
@pytest.mark.parametrize("where", ["title", "description", "label", "species"])
def test_invisible_or_control_characters_are_refused_by_field(ch: str, where: str) -> None:
    doc = _demo()
    if where == "label":
        doc["reactions"][0]["label"] = f"main{ch}reaction"
        field = "reactions[0].label"
    elif where == "species":
        doc["species"][0] = f"A{ch}"
        field = "species[0]"
    else:
        doc[where] = f"Tank 3{ch} review"
        field = where
    errors = _errors(doc)
    assert field in errors, errors
    assert f"U+{ord(ch):04X}" in errors[field]


@pytest.mark.parametrize(
    ("where", "limit"), [("title", TITLE_MAX), ("description", DESCRIPTION_MAX), ("label", LABEL_MAX)]
)
def test_text_fields_are_bounded(where: str, limit: int) -> None:
    doc = _demo()
    target = doc["reactions"][0] if where == "label" else doc
    target[where] = "x" * limit
    schema.parse_scenario(copy.deepcopy(doc))  # exactly at the bound: accepted
    target[where] = "x" * (limit + 1)
    errors = _errors(doc)
    field = "reactions[0].label" if where == "label" else where
    assert errors[field] == f"too long: at most {limit} characters, got {limit + 1}"


def test_printable_text_in_any_script_is_kept() -> None:
    doc = _demo()
    doc["title"] = "Réacteur R-101 — Ansatz 3 · 反应釜"
    doc["description"] = "Line one.\nLine two,\twith a tab.\r\nΔT_ad ≈ 120 K; invented, not plant data."
    doc["reactions"][0]["label"] = "A + B → P"
    parsed = schema.parse_scenario(doc)
    assert parsed.title == doc["title"]
    assert parsed.description == doc["description"]
    assert parsed.reactions[0].label == "A + B → P"


def test_a_line_break_in_a_title_is_refused() -> None:
    doc = _demo()
    doc["title"] = "one\ntwo"
    assert "U+000A" in _errors(doc)["title"]
