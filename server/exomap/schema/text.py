"""Bounded, printable text fields of a scenario: titles, descriptions, labels and names.

A scenario's words reach pages, print sheets, listings and other plant tools, so they are bounded in length and
refuse characters that cannot be seen or that change how the text around them reads: control characters (NUL,
escape...), format characters such as the right-to-left override U+202E or the zero-width space U+200B,
line and paragraph separators, private-use, unassigned and surrogate code points. A description may hold line
breaks and tabs; titles, labels and names are one line.

Bounds (project choices, generous for the job): title 200 characters, description 5,000, a label 100, a
species name 40 (set in ``document.py``).
"""

from __future__ import annotations

import unicodedata
from typing import Annotated, Any

from pydantic import AfterValidator, Field
from pydantic_core import PydanticCustomError

TITLE_MAX = 200
DESCRIPTION_MAX = 5000
LABEL_MAX = 100

#: Unicode general categories refused anywhere: control, format, surrogate, private use, unassigned, line and
#: paragraph separators.
REFUSED_CATEGORIES = frozenset({"Cc", "Cf", "Cs", "Co", "Cn", "Zl", "Zp"})
#: Controls a multi-line text may hold.
LINE_BREAKS = frozenset("\n\r\t")


def problem(text: str, multiline: bool) -> str | None:
    """Why ``text`` is not printable text (naming the first bad character and where it is), or None."""
    for i, ch in enumerate(text):
        if multiline and ch in LINE_BREAKS:
            continue
        if unicodedata.category(ch) in REFUSED_CATEGORIES:
            category = unicodedata.category(ch)
            fallback = {"Cc": "a control character", "Cn": "an unassigned code point"}.get(category, category)
            name = unicodedata.name(ch, fallback)
            what = (
                "line breaks and tabs are the only control characters allowed"
                if multiline
                else ("one line of printable text is expected")
            )
            return f"character {i + 1} is U+{ord(ch):04X} ({name}), which is invisible or a control character; {what}"
    return None


def _checker(multiline: bool) -> Any:
    def check(value: str) -> str:
        why = problem(value, multiline)
        if why is not None:
            # the message goes in the context: a literal template would treat braces in user text as placeholders
            raise PydanticCustomError("text", "{text}", {"text": why})
        return value

    return check


def Text(max_length: int, *, multiline: bool = False) -> Any:  # noqa: N802 - a type factory, like Q()
    """A str of at most ``max_length`` characters of printable text (line breaks and tabs when multiline)."""
    return Annotated[str, Field(max_length=max_length), AfterValidator(_checker(multiline))]


Title = Text(TITLE_MAX)
Description = Text(DESCRIPTION_MAX, multiline=True)
Label = Text(LABEL_MAX)
