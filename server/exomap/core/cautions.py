"""The cautions of DESIGN.md §9, in one place. Every page, report and check answer shows them."""

from __future__ import annotations

#: The cautions, one sentence each, in the order they are shown.
CAUTIONS: tuple[str, ...] = (
    "Screening aid, not a design or safety basis.",
    "Kinetic and thermal data must come from calorimetric testing of the real materials; results inherit the "
    "uncertainty of those data.",
    "It does not replace a hazard study, relief-system design or the site's management of change.",
    "Follow local codes, the site's procedures and the judgement of licensed engineers.",
)


def cautions() -> list[str]:
    """The cautions as a new list (safe to modify)."""
    return list(CAUTIONS)
