"""Readable output of the CLI in plant units: degC, min, m^3/h, %.

The JSON output (``--json``) stays SI, exactly the answer documents of DESIGN.md §4; these helpers are only
for the tables a person reads. Every human-readable answer ends with the cautions (DESIGN.md §9).
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Iterable, Sequence

#: 0 degC in K (ITS-90 / SI definition of the Celsius scale).
ZERO_CELSIUS = 273.15


def _missing(x: float | None) -> bool:
    return x is None or not math.isfinite(x)


def celsius(T: float | None, digits: int = 1) -> str:
    """A temperature [K] as ``"75.5 degC"``."""
    return "-" if _missing(T) else f"{T - ZERO_CELSIUS:.{digits}f} degC"


def kelvin_difference(dT: float | None, digits: int = 1) -> str:
    """A temperature difference [K] as ``"12.0 K"``."""
    return "-" if _missing(dT) else f"{dT:.{digits}f} K"


def minutes(t: float | None, digits: int = 1) -> str:
    """A time [s] as ``"44.5 min"`` (hours above 10 h)."""
    if _missing(t):
        return "-"
    if t >= 36000.0:
        return f"{t / 3600.0:.{digits}f} h"
    return f"{t / 60.0:.{digits}f} min"


def flow(q: float | None, digits: int = 2) -> str:
    """A volumetric flow [m^3/s] as ``"2.70 m^3/h"``."""
    return "-" if _missing(q) else f"{q * 3600.0:.{digits}f} m^3/h"


def percent(x: float | None, digits: int = 0) -> str:
    """A fraction [-] as ``"38 %"``."""
    return "-" if _missing(x) else f"{100.0 * x:.{digits}f} %"


def opening(x: float) -> str:
    """A valve opening needed [-] as ``"38 % open"``, or in words when no valve can take it."""
    from exomap.core.valve import ABOVE_RANGE, BELOW_RANGE, opening_status

    status = opening_status(x)
    if status == BELOW_RANGE:
        return "below its range"
    if status == ABOVE_RANGE:
        return "above its range (too small)"
    return "-" if _missing(x) else f"{100.0 * x:.0f} % open"


def number(x: float | None, fmt: str = ".3g") -> str:
    return "-" if _missing(x) else format(x, fmt)


def table(headers: Sequence[str], rows: Iterable[Sequence[str]], *, right: Sequence[bool] | None = None) -> str:
    """Plain-text table with aligned columns (numbers right-aligned where ``right`` says so)."""
    body = [[str(c) for c in row] for row in rows]
    widths = [len(h) for h in headers]
    for row in body:
        for i, cell in enumerate(row):
            widths[i] = max(widths[i], len(cell))
    right = list(right) if right is not None else [False] * len(headers)

    def line(cells: Sequence[str]) -> str:
        return "  ".join(c.rjust(w) if r else c.ljust(w) for c, w, r in zip(cells, widths, right, strict=True))

    out = [line(headers), line(["-" * w for w in widths])]
    out.extend(line(row) for row in body)
    return "\n".join(s.rstrip() for s in out)


def cautions_block(width: int = 100) -> str:
    """The cautions of DESIGN.md §9, from their one place (``exomap.core.cautions``)."""
    from exomap.core.cautions import CAUTIONS

    return textwrap.fill("Cautions: " + " ".join(CAUTIONS), width=width, subsequent_indent=" " * 10)


def heading(title: str) -> str:
    return f"{title}\n{'=' * len(title)}" if title else ""
