"""The fields that differ between two scenarios, shown in plant units.

Both documents are first brought to their canonical form (``exomap.schema.canonical_dict``: every default
filled in, every quantity an SI float), so two spellings of one value ("50 degC" and 323.15) are not a
difference, and a field left at its default on one side and written out on the other is not either. Each
difference names its dotted path (``feed.flow``, ``reactions[0].activation_energy``), both SI values, both
values in the units a plant engineer reads (°C, min, m³/h, bar, kJ/mol, mol/L, kW/K, ...) and the relative
change of a number. A reaction or a jacket present on one side only is one ``added`` or ``removed`` entry.
"""

from __future__ import annotations

import math
from typing import Any

from exomap.schema.canonical import canonical_dict
from exomap.schema.document import Dim, ScenarioDoc
from exomap.schema.parse import _walk, field_path
from exomap.schema.quantity import pre_exponential_units

#: 0 degC in K (SI definition of the Celsius scale).
ZERO_CELSIUS = 273.15

#: dimension -> (plant unit, factor from SI, offset after scaling); value_shown = SI * factor + offset
PLANT_UNITS: dict[str, tuple[str, float, float]] = {
    "length": ("m", 1.0, 0.0),
    "pressure": ("bar", 1e-5, 0.0),
    "temperature": ("°C", 1.0, -ZERO_CELSIUS),
    "temperature_difference": ("K", 1.0, 0.0),
    "density": ("kg/m³", 1.0, 0.0),
    "specific_heat": ("kJ/(kg K)", 1e-3, 0.0),
    "flow": ("m³/h", 3600.0, 0.0),
    "concentration": ("mol/L", 1e-3, 0.0),
    "molar_energy": ("kJ/mol", 1e-3, 0.0),
    "time": ("min", 1.0 / 60.0, 0.0),
    "conductance": ("kW/K", 1e-3, 0.0),
    "power": ("kW", 1e-3, 0.0),
    "inverse_length": ("1/m", 1.0, 0.0),
    "fraction": ("%", 100.0, 0.0),
}


def _dimension(path: tuple[Any, ...]) -> str | None:
    _, meta, _ = _walk(path)
    for m in meta:
        if isinstance(m, Dim):
            return m.dimension
    return None


def _number(x: float) -> str:
    text = f"{x:.4g}"
    return text if "e" in text else f"{x:.6g}"


def shown(value: Any, path: tuple[Any, ...], doc: dict[str, Any]) -> str:
    """A canonical value at ``path`` of canonical document ``doc`` as a plant engineer reads it."""
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, str):
        return value
    if isinstance(value, dict):
        if path and path[0] == "reactions" and len(path) == 2:
            return str(value.get("label") or "a reaction")
        return "given"
    if isinstance(value, list):
        return ", ".join(shown(v, (*path, i), doc) for i, v in enumerate(value))
    x = float(value)
    if path == ("outlet_valve", "kv"):
        return f"Kv {_number(x)} m³/h"
    if len(path) == 3 and path[0] == "reactions" and path[2] == "pre_exponential":
        orders = doc["reactions"][path[1]].get("orders", {})
        species = set(doc.get("species", []))
        total = float(sum(n for s, n in orders.items() if s in species))
        return f"{x:.4g} {pre_exponential_units(total)}"
    dim = _dimension(path)
    if dim is None or dim not in PLANT_UNITS:
        return _number(x)
    unit, factor, offset = PLANT_UNITS[dim]
    y = x * factor + offset
    if dim == "temperature":
        return f"{y:.2f} {unit}"
    return f"{_number(y)} {unit}"


def _entry(change: str, path: tuple[Any, ...], a: Any, b: Any, da: dict, db: dict) -> dict[str, Any]:
    out: dict[str, Any] = {
        "field": field_path(path),
        "change": change,
        "a": a,
        "b": b,
        "a_text": shown(a, path, da) if change != "added" else "—",
        "b_text": shown(b, path, db) if change != "removed" else "—",
        "relative_change": None,
    }
    numeric = isinstance(a, (int, float)) and isinstance(b, (int, float))
    if numeric and not isinstance(a, bool) and not isinstance(b, bool) and a != 0 and math.isfinite(a):
        dim = _dimension(path)
        # a relative change of an absolute temperature in K says nothing a reader can use
        if dim != "temperature":
            out["relative_change"] = (float(b) - float(a)) / abs(float(a))
    return out


def _diff(path: tuple[Any, ...], a: Any, b: Any, da: dict, db: dict, out: list[dict[str, Any]]) -> None:
    if isinstance(a, dict) and isinstance(b, dict):
        for key in sorted(set(a) | set(b), key=str):
            if key not in a:
                out.append(_entry("added", (*path, key), None, b[key], da, db))
            elif key not in b:
                out.append(_entry("removed", (*path, key), a[key], None, da, db))
            else:
                _diff((*path, key), a[key], b[key], da, db, out)
        return
    if isinstance(a, list) and isinstance(b, list) and path == ("reactions",):
        for i in range(max(len(a), len(b))):
            if i >= len(a):
                out.append(_entry("added", (*path, i), None, b[i], da, db))
            elif i >= len(b):
                out.append(_entry("removed", (*path, i), a[i], None, da, db))
            else:
                _diff((*path, i), a[i], b[i], da, db, out)
        return
    if a != b:
        out.append(_entry("changed", path, a, b, da, db))


def scenario_diff(a: dict[str, Any] | ScenarioDoc, b: dict[str, Any] | ScenarioDoc) -> list[dict[str, Any]]:
    """Every field whose canonical value differs between scenarios ``a`` and ``b``, in document order.

    Each entry: ``field`` (dotted path), ``change`` (``changed`` | ``added`` | ``removed``), ``a`` and ``b``
    (canonical SI values, or None for a side that lacks the field), ``a_text`` and ``b_text`` (plant units),
    ``relative_change`` ((b - a)/|a| for numbers other than absolute temperatures, else None).

    Raises
    ------
    ScenarioError
        When either document is not a valid scenario.

    Examples
    --------
    >>> import json, importlib.resources as r
    >>> doc = json.loads((r.files("exomap.demos") / "jacketed-first-order.json").read_text())
    >>> edited = json.loads(json.dumps(doc)); edited["feed"]["flow"] = "3.0 m^3/h"
    >>> [(d["field"], d["a_text"], d["b_text"]) for d in scenario_diff(doc, edited)]
    [('feed.flow', '2.7 m³/h', '3 m³/h')]
    """
    da, db = canonical_dict(a), canonical_dict(b)
    out: list[dict[str, Any]] = []
    _diff((), da, db, da, db, out)
    return out


def compare_header(a: dict[str, Any] | ScenarioDoc, b: dict[str, Any] | ScenarioDoc) -> dict[str, Any]:
    """The scenario part of a compare answer: both ids and titles, whether they are one scenario, and the
    fields that differ (``scenario_diff``)."""
    from exomap.schema.canonical import scenario_id
    from exomap.schema.parse import parse_scenario

    pa, pb = parse_scenario(a), parse_scenario(b)
    ia, ib = scenario_id(pa), scenario_id(pb)
    return {
        "a": {"scenario_id": ia, "title": pa.title},
        "b": {"scenario_id": ib, "title": pb.title},
        "same_scenario": ia == ib,
        "fields": [] if ia == ib else scenario_diff(pa, pb),
    }
