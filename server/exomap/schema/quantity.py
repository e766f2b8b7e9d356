"""Quantities with units: ``"30 degC"``, ``"6 m^3/h"``, ``"2.5 mol/L"`` or a bare number in SI base units.

One pint ``UnitRegistry`` is shared by the whole process and built on first use (``registry()``), so importing
this module does no work. Every conversion goes through ``to_si``; ``parse_quantity`` is the public wrapper
that names the field in a ``ScenarioError``.

Rules
-----
* A bare number (int or float, not bool) is taken as SI base units of the expected dimension
  (m, Pa, K, kg/m^3, J/(kg K), m^3/s, mol/m^3, J/mol, s, W/K, W, 1/m).
* A string is ``"<number> <unit>"``. Units are pint's (``m^3/h``, ``L/min``, ``kJ/(kg K)``, ``bar``, ``min``).
* Temperatures: a lone ``degC``/``degF``/``K`` is an absolute temperature (``"30 degC"`` = 303.15 K). Inside a
  compound unit (``"kJ/(kg degC)"``) or for a temperature *difference* (a margin), degC and degF mean a
  temperature interval (1 degC = 1 K, 1 degF = 5/9 K), which is what an engineer means there.
* Values converted from a unit are rounded to 15 significant digits, so ``"2.5 mol/L"`` gives 2500.0 rather
  than the binary artefact 2499.9999999999995; bare SI numbers are kept exactly.
* Gauge pressures: ``barg``, ``psig`` and ``kPag`` (a lone unit on an absolute-pressure field) are read above
  the standard atmosphere, 101325 Pa exactly (ISO 2533; the value that defines 1 atm), so ``"0.2 barg"`` is
  121325 Pa. A site whose gauges read against its local barometer types an absolute pressure instead.
* Superscripts and the middle dot are read as typed on a page: ``m³/h`` = ``m^3/h``, ``kJ/(kg·K)``.
* ``gpm`` is the US gallon (231 in^3 exactly, NIST SP 811 B.8) per minute.
* NaN and infinity are rejected, and so are unit strings containing arithmetic (pint evaluates them) beyond
  exponents, to keep parsing cheap and predictable. A unit that is not understood is named in the message,
  never the parser's internal exception.
"""

from __future__ import annotations

import functools
import math
import re
import threading
from dataclasses import dataclass
from typing import Any

from exomap.schema.errors import ScenarioError


@dataclass(frozen=True)
class Dimension:
    """One physical dimension a field may have."""

    key: str
    #: a noun phrase for messages: "a length"
    noun: str
    #: the SI unit a bare number is taken in
    si_unit: str
    #: a typical value with units, for messages
    example: str


DIMENSIONS: dict[str, Dimension] = {
    d.key: d
    for d in (
        Dimension("length", "a length", "m", "'2 m' or '1800 mm'"),
        Dimension("pressure", "an absolute pressure", "Pa", "'1.2 bar', '0.2 barg' or '30 psig'"),
        Dimension("temperature", "a temperature", "K", "'35 degC' or '308.15 K'"),
        Dimension("temperature_difference", "a temperature difference", "K", "'10 K'"),
        Dimension("density", "a density", "kg/m^3", "'950 kg/m^3'"),
        Dimension("specific_heat", "a specific heat capacity", "J/(kg*K)", "'2.1 kJ/(kg K)'"),
        Dimension("flow", "a volumetric flow", "m^3/s", "'6 m^3/h', '100 L/min' or '25 gpm'"),
        Dimension("concentration", "a concentration", "mol/m^3", "'2.5 mol/L'"),
        Dimension("molar_energy", "an energy per mole", "J/mol", "'80 kJ/mol'"),
        Dimension("time", "a time", "s", "'40 min' or '2 h'"),
        Dimension("conductance", "a heat-transfer conductance UA", "W/K", "'2.5 kW/K'"),
        Dimension("power", "a power", "W", "'3 kW'"),
        Dimension("inverse_length", "a gain per length of level", "1/m", "'2 1/m'"),
        Dimension("fraction", "a fraction", "", "0.45 or '45 %'"),
    )
}

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_VALUE_RE = re.compile(rf"^\s*({_NUMBER})\s*(.*?)\s*$", re.DOTALL)
_UNIT_CHARS_RE = re.compile(r"^[A-Za-z_°µμ%\s*/^().\-0-9]*$")
# exponents like ^3, **2, ^-1, ^(1.5); and a leading "1/" as in "1/s"
_EXPONENT_RE = re.compile(r"(\^|\*\*)\s*\(?\s*-?\d{1,2}(\.\d{1,3})?\s*\)?")
# a power of a power ("m^2^3") is refused: pint would evaluate it, and 9**9**9 never finishes
_STACKED_RE = re.compile(r"(\^|\*\*)[\s()\d.\-]*(\^|\*\*)")
_ONE_OVER_RE = re.compile(r"(?<![\w.])1\s*/")
_CELSIUS = r"(?<![A-Za-z_])(degC|°C|celsius|degree_Celsius|degreeC)(?![A-Za-z_])"
_FAHRENHEIT = r"(?<![A-Za-z_])(degF|°F|fahrenheit|degree_Fahrenheit|degreeF)(?![A-Za-z_])"
_LONE_OFFSET_RE = re.compile(rf"^(?:{_CELSIUS}|{_FAHRENHEIT})$")
_MAX_LEN = 80

#: The standard atmosphere [Pa], exact by definition (ISO 2533; 1 atm = 101325 Pa): the zero of gauge pressures.
STANDARD_ATMOSPHERE_PA = 101325.0
#: Gauge-pressure units (a lone unit on an absolute-pressure field) -> their absolute unit.
_GAUGE_UNITS = {"barg": "bar", "psig": "psi", "kpag": "kPa", "bar(g)": "bar", "psi(g)": "psi"}


_REGISTRY_LOCK = threading.Lock()


@functools.lru_cache(maxsize=1)
def registry() -> Any:
    """The shared pint UnitRegistry, built on first use (once, even when threads race for it: units of two
    registries cannot be combined)."""
    with _REGISTRY_LOCK:
        return _build_registry()


@functools.lru_cache(maxsize=1)
def _build_registry() -> Any:
    import pint

    ureg = pint.UnitRegistry()
    # US gallons per minute, as pump and valve data sheets write it (pint's gallon is the US liquid gallon)
    ureg.define("gpm = gallon / minute")
    return ureg


@functools.lru_cache(maxsize=64)
def _dimensionality(si_unit: str) -> Any:
    ureg = registry()
    return ureg.parse_units(si_unit).dimensionality if si_unit else ureg.parse_units("").dimensionality


class QuantityProblem(ValueError):
    """A value that is not a valid quantity; the message says what was expected (no field name)."""


def expected(dimension: str) -> str:
    """'expected a length, e.g. '2 m' or '1800 mm' (a bare number is in m)'."""
    d = DIMENSIONS[dimension]
    si = f" (a bare number is in {d.si_unit})" if d.si_unit else ""
    return f"expected {d.noun}, e.g. {d.example}{si}"


def _kind(value: object) -> str:
    """The JSON word for a value's type ("an object", "a list"), never a Python class name."""
    words = {dict: "an object", list: "a list", tuple: "a list", str: "a text"}
    return words.get(type(value), "a value that is not a number")


def _finite(x: float, dimension_text: str) -> float:
    if not math.isfinite(x):
        raise QuantityProblem(f"{x!r} is not a finite number; {dimension_text}")
    return x


def _round15(x: float) -> float:
    return float(f"{x:.15g}")


def split_value(value: str, hint: str) -> tuple[float, str]:
    """Split ``"2.5 mol/L"`` into (2.5, "mol/L"); ``hint`` is the 'expected ...' text for messages."""
    if len(value) > _MAX_LEN:
        raise QuantityProblem(f"the text is too long to be a quantity; {hint}")
    m = _VALUE_RE.match(value)
    if m is None:
        raise QuantityProblem(f"{value!r} does not start with a number; {hint}")
    magnitude = _finite(float(m.group(1)), hint)
    # the spellings of a page or a data sheet: m³ -> m^3, kJ/(kg·K) -> kJ/(kg*K)
    unit = m.group(2).replace("³", "^3").replace("²", "^2").replace("·", "*")
    if not _UNIT_CHARS_RE.match(unit):
        raise QuantityProblem(f"unit {unit!r} not understood; {hint}")
    if _STACKED_RE.search(unit):
        raise QuantityProblem(f"unit {unit!r} has a power of a power; {hint}")
    stripped = _ONE_OVER_RE.sub("/", _EXPONENT_RE.sub("", unit))
    if re.search(r"\d", stripped):
        raise QuantityProblem(f"unit {unit!r} contains a number; write one number then the unit; {hint}")
    return magnitude, unit


def _parse_units(unit: str, hint: str) -> Any:
    ureg = registry()
    try:
        return ureg.parse_units(unit)
    except Exception:  # pint's parser raises many kinds (UndefinedUnitError, TokenError, ...)
        raise QuantityProblem(f"unit {unit!r} not understood; {hint}") from None


def _as_interval(unit: str) -> str:
    """degC/degF -> delta_degC/delta_degF (temperature intervals) inside a unit expression."""
    unit = re.sub(_CELSIUS, "delta_degC", unit)
    return re.sub(_FAHRENHEIT, "delta_degF", unit)


def to_si(value: object, dimension: str) -> float:
    """Convert a number (SI) or a ``"<number> <unit>"`` string of ``dimension`` to an SI float.

    Raises ``QuantityProblem`` (a ValueError) whose message names the dimension and unit expected.
    """
    d = DIMENSIONS[dimension]
    hint = expected(dimension)
    if isinstance(value, bool) or value is None:
        raise QuantityProblem(f"got {value!r}; {hint}")
    if isinstance(value, (int, float)):
        x = _finite(float(value), hint)
        if dimension == "temperature" and x <= 0.0:
            raise QuantityProblem(f"{x!r} K is at or below absolute zero; {hint}")
        return x
    if not isinstance(value, str):
        raise QuantityProblem(f"got {_kind(value)}; {hint}")
    magnitude, unit = split_value(value, hint)
    if not unit:
        if dimension == "fraction":
            return magnitude
        raise QuantityProblem(f"{value!r} has no unit; {hint}")
    ureg = registry()
    gauge = _GAUGE_UNITS.get(unit.replace(" ", "").lower())
    if gauge is not None:
        if dimension != "pressure":
            raise QuantityProblem(f"{value!r} is a gauge pressure, not {d.noun}; {hint}")
        x = float(ureg.Quantity(magnitude, gauge).to_base_units().magnitude) + STANDARD_ATMOSPHERE_PA
        if x < 0.0:
            raise QuantityProblem(f"{value!r} is below vacuum (gauge pressures are read above 101325 Pa); {hint}")
        return _finite(_round15(x), hint)
    lone_offset = bool(_LONE_OFFSET_RE.match(unit))
    if not (dimension == "temperature" and lone_offset):
        unit = _as_interval(unit)
    units = _parse_units(unit, hint)
    target = _dimensionality(d.si_unit)
    if units.dimensionality != target:
        raise QuantityProblem(f"{value!r} is not {d.noun}; {hint}")
    q = ureg.Quantity(magnitude, units)
    if dimension == "temperature":
        x = float(q.to("kelvin").magnitude)
        if x <= 0.0:
            raise QuantityProblem(f"{value!r} is at or below absolute zero; {hint}")
    elif dimension == "fraction":
        x = float(q.to("dimensionless").magnitude)
    else:
        x = float(q.to_base_units().magnitude)
    return _finite(_round15(x), hint)


def pre_exponential_units(total_order: float) -> str:
    """Readable SI unit of a pre-exponential factor of total order n: (mol/m^3)^(1-n)/s."""
    n = total_order
    if abs(n - round(n)) < 1e-12:
        n = int(round(n))
        if n == 0:
            return "mol/(m^3 s)"
        if n == 1:
            return "1/s"
        if n == 2:
            return "m^3/(mol s)"
        return f"m^{3 * (n - 1)}/(mol^{n - 1} s)"
    return f"m^{3 * (n - 1):g}/(mol^{n - 1:g} s)"


_K0_EXAMPLES = {0: "'2e12 mol/(m^3 s)'", 1: "'5e9 1/s'", 2: "'1.2e7 L/(mol s)'", 3: "'4e5 L^2/(mol^2 s)'"}


def pre_exponential_order(value: object) -> float | None:
    """The total reaction order n that a pre-exponential factor's own unit implies, (mol/m^3)^(1-n)/s, or
    None when it has no unit or its unit is no rate constant of any order (used when the orders themselves
    are in error, so that k0 is not blamed for them)."""
    if not isinstance(value, str):
        return None
    try:
        magnitude, unit = split_value(value, "")
        if not unit:
            return None
        dims = dict(registry().Quantity(magnitude, _parse_units(unit, "")).to_base_units().dimensionality)
    except Exception:  # noqa: BLE001 - any unreadable unit: no implied order
        return None
    n = 1.0 - float(dims.get("[substance]", 0.0))
    ok = (
        abs(float(dims.get("[time]", 0.0)) + 1.0) < 1e-9
        and abs(float(dims.get("[length]", 0.0)) - 3.0 * (n - 1.0)) < 1e-9
    )
    others = set(dims) - {"[substance]", "[length]", "[time]"}
    return n if ok and not any(abs(float(dims[k])) > 1e-9 for k in others) else None


def pre_exponential_to_si(value: object, total_order: float) -> float:
    """Convert a pre-exponential factor to SI, checking its dimension (mol/m^3)^(1-n)/s against the
    reaction's total order n. A bare number is taken in SI."""
    si = pre_exponential_units(total_order)
    n_int = round(total_order)
    example = _K0_EXAMPLES.get(n_int, f"'1e6 {si}'") if abs(total_order - n_int) < 1e-12 else f"'1e6 {si}'"
    hint = (
        f"expected (mol/m^3)^(1-n)/s = {si} for this reaction's total order n = {total_order:g}, "
        f"e.g. {example} (a bare number is in {si})"
    )
    if isinstance(value, bool) or value is None:
        raise QuantityProblem(f"got {value!r}; {hint}")
    if isinstance(value, (int, float)):
        return _finite(float(value), hint)
    if not isinstance(value, str):
        raise QuantityProblem(f"got {_kind(value)}; {hint}")
    magnitude, unit = split_value(value, hint)
    ureg = registry()
    units = _parse_units(unit, hint) if unit else ureg.parse_units("")
    q = ureg.Quantity(magnitude, units).to_base_units()
    dims = dict(q.dimensionality)
    want = {"[substance]": 1.0 - total_order, "[length]": 3.0 * (total_order - 1.0), "[time]": -1.0}
    keys = set(dims) | {k for k, v in want.items() if v != 0.0}
    if any(abs(float(dims.get(k, 0.0)) - want.get(k, 0.0)) > 1e-9 for k in keys):
        raise QuantityProblem(f"{value!r} has the wrong dimension; {hint}")
    return _finite(_round15(float(q.magnitude)), hint)


def parse_quantity(value: object, dimension: str, field: str) -> float:
    """Turn ``value`` (a number in SI, or a string such as ``"40 min"``, ``"35 degC"``) into an SI float.

    Parameters
    ----------
    value : float or str
        The quantity.
    dimension : str
        One of ``DIMENSIONS`` (``"time"``, ``"temperature"``, ``"flow"``, ...).
    field : str
        Name reported in the error (``"residence_time"``, ``"--feed-temperature"``).

    Returns
    -------
    float
        The value in SI base units (K for temperatures).

    Raises
    ------
    ScenarioError
        With one entry for ``field`` naming the unit expected.

    Examples
    --------
    >>> parse_quantity("40 min", "time", "residence_time")
    2400.0
    >>> parse_quantity("35 degC", "temperature", "feed_temperature")
    308.15
    """
    if dimension not in DIMENSIONS:
        raise ValueError(f"unknown dimension {dimension!r}; one of {', '.join(DIMENSIONS)}")
    try:
        return to_si(value, dimension)
    except QuantityProblem as exc:
        raise ScenarioError.single(field, str(exc)) from None
