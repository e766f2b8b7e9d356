"""Map regions of DESIGN.md §5: keys, codes, plain-word labels, and the rule that assigns one.

Priority from the top: ``runaway`` (a reachable, i.e. stable, steady state lies above the maximum
temperature), ``unstable`` (no stable steady state), ``multiple`` (more than one steady state), ``sensitive``
(one stable state whose temperature moves more than the sensitivity threshold per kelvin of feed
temperature), ``stable``.
"""

from __future__ import annotations

from collections.abc import Sequence

from exomap.core.scenario import Scenario

#: (code, key, label), in code order. Codes are what the map's ``region`` grid holds.
REGIONS: tuple[tuple[int, str, str], ...] = (
    (0, "stable", "One stable state, below the limits"),
    (1, "sensitive", "One stable state, but steep: the temperature follows the feed strongly"),
    (2, "multiple", "More than one steady state: history decides, an upset can make it jump"),
    (3, "unstable", "No stable steady state: the tank oscillates or drifts"),
    (4, "runaway", "A reachable steady state is above the maximum temperature"),
)
REGION_KEYS = tuple(key for _, key, _ in REGIONS)
CODE = {key: code for code, key, _ in REGIONS}


def legend() -> list[dict]:
    return [{"code": c, "key": k, "label": lbl} for c, k, lbl in REGIONS]


def region_of(sc: Scenario, states: Sequence) -> str:
    """Region key of an operating point from its steady states (objects with ``T``, ``stable`` and
    ``sensitivity``)."""
    stable = [s for s in states if s.stable]
    if any(s.T > sc.limits.T_max for s in stable):
        return "runaway"
    if not stable:
        return "unstable"
    if len(states) > 1:
        return "multiple"
    if abs(stable[0].sensitivity) > sc.policy.sensitivity:
        return "sensitive"
    return "stable"
