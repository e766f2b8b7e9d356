"""Quantities with units: conversions against the unit definitions, and clear errors naming the field."""

from __future__ import annotations

import math
import re
import subprocess
import sys

import pytest
from exomap.schema import ScenarioError, parse_quantity
from hypothesis import given, settings
from hypothesis import strategies as st

# (value, dimension, expected SI value)
CASES = [
    # SI Brochure, 9th ed. (2019) §2.3.1: t/degC = T/K - 273.15
    ("30 degC", "temperature", 303.15),
    # NIST SP 811 (2008) B.9: T/K = (t/degF + 459.67) / 1.8
    ("86 degF", "temperature", (86 + 459.67) / 1.8),
    ("308.15 K", "temperature", 308.15),
    # SI Brochure Table 8: 1 h = 3600 s, so 6 m^3/h = 6/3600 m^3/s
    ("6 m^3/h", "flow", 6 / 3600),
    # SI Brochure Table 8: 1 L = 1e-3 m^3
    ("100 L/min", "flow", 100e-3 / 60),
    ("2.5 mol/L", "concentration", 2500.0),
    ("80 kJ/mol", "molar_energy", 80e3),
    # SI Brochure Table 8: 1 min = 60 s
    ("40 min", "time", 2400.0),
    ("2 h", "time", 7200.0),
    # SI Brochure Table 8: 1 bar = 1e5 Pa
    ("1.2 bar", "pressure", 1.2e5),
    ("1800 mm", "length", 1.8),
    ("950 kg/m^3", "density", 950.0),
    ("2.1 kJ/(kg K)", "specific_heat", 2100.0),
    # a kelvin and a degree Celsius are the same interval (SI Brochure §2.3.1)
    ("2.1 kJ/(kg degC)", "specific_heat", 2100.0),
    ("2.5 kW/K", "conductance", 2500.0),
    ("3 kW", "power", 3000.0),
    ("2 1/m", "inverse_length", 2.0),
    ("45 %", "fraction", 0.45),
    (0.45, "fraction", 0.45),
    # temperature differences: 18 degF = 10 K (NIST SP 811 B.9, interval of 1 degF = 1/1.8 K)
    ("18 degF", "temperature_difference", 10.0),
    ("10 degC", "temperature_difference", 10.0),
    ("10 K", "temperature_difference", 10.0),
    # a bare number is SI
    (1.5, "length", 1.5),
    (300, "temperature", 300.0),
]


@pytest.mark.parametrize(("value", "dimension", "si"), CASES)
def test_conversion(value, dimension, si):
    assert parse_quantity(value, dimension, "x") == pytest.approx(si, rel=1e-14)


@pytest.mark.parametrize(
    ("value", "dimension", "match"),
    [
        ("2 m", "time", r"^vessel\.thing: '2 m' is not a time; expected a time, e\.g\. '40 min'"),
        ("2", "length", r"vessel\.thing: '2' has no unit; expected a length"),
        ("2 blorps", "length", r"vessel\.thing: unit .blorps. not understood; expected a length"),
        ("2 furlongs per fortnight", "length", r"vessel\.thing: .* is not a length; expected a length"),
        (float("nan"), "length", r"vessel\.thing: nan is not a finite number"),
        (float("inf"), "flow", r"vessel\.thing: inf is not a finite number; expected a volumetric flow"),
        ("1e999 m", "length", r"vessel\.thing: inf is not a finite number"),
        ("-300 degC", "temperature", r"vessel\.thing: .* below absolute zero"),
        (-5.0, "temperature", r"vessel\.thing: .* below absolute zero"),
        (True, "length", r"vessel\.thing: got True; expected a length"),
        ("abc", "length", r"vessel\.thing: 'abc' does not start with a number"),
        ("2 m**9**9**9", "length", r"vessel\.thing: unit .* power of a power"),
        ("2 1000 m", "length", r"vessel\.thing: unit .* contains a number"),
    ],
)
def test_bad_quantity_names_field_and_unit(value, dimension, match):
    with pytest.raises(ScenarioError, match=match) as info:
        parse_quantity(value, dimension, "vessel.thing")
    assert [e["field"] for e in info.value.errors] == ["vessel.thing"]


def test_unknown_dimension_is_a_programming_error():
    with pytest.raises(ValueError, match="unknown dimension 'lenght'"):
        parse_quantity("2 m", "lenght", "x")


@settings(deadline=None)  # the first example builds the unit registry (about 1 s)
@given(
    st.floats(min_value=1e-6, max_value=1e9, allow_nan=False),
    st.sampled_from(
        [
            # (unit, factor to SI): SI Brochure Table 8 and the prefixes of Table 7
            ("m^3/h", 1 / 3600),
            ("L/min", 1e-3 / 60),
            ("L/s", 1e-3),
            ("m^3/s", 1.0),
        ]
    ),
)
def test_flow_units_scale_exactly(x, unit_factor):
    unit, factor = unit_factor
    # values are rounded to 15 significant digits after conversion (see exomap.schema.quantity)
    assert parse_quantity(f"{x!r} {unit}", "flow", "feed.flow") == pytest.approx(x * factor, rel=1e-14)


@settings(deadline=None)  # the first example builds the unit registry (about 1 s)
@given(st.floats(min_value=-273.0, max_value=2000.0, allow_nan=False))
def test_celsius_is_offset_by_273_15(t):
    # SI Brochure, 9th ed. (2019) §2.3.1
    assert parse_quantity(f"{t!r} degC", "temperature", "feed.temperature") == pytest.approx(t + 273.15, rel=1e-14)


@settings(deadline=None)  # the first example builds the unit registry (about 1 s)
@given(st.floats(allow_nan=False, allow_infinity=False, min_value=1e-300, max_value=1e300))
def test_bare_numbers_are_kept_exactly(x):
    assert parse_quantity(x, "length", "vessel.diameter") == x


def test_import_builds_no_unit_registry():
    # STYLE.md: no work at import time; the registry is built on first use
    code = (
        "import sys, exomap.schema, exomap.schema.quantity as q; "
        "assert q.registry.cache_info().currsize == 0; assert 'pint' not in sys.modules; "
        "q.parse_quantity('1 m', 'length', 'x'); assert q.registry.cache_info().currsize == 1"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


def test_round_trip_of_magnitudes_is_exact_for_si_numbers():
    # the canonical form stores SI floats; reading one back must not move it (repr is exact for floats)
    for x in (0.1, 1 / 3, 2.5e-7, 303.15, math.pi * 1e5):
        assert parse_quantity(float(repr(x)), "time", "t") == x


@settings(deadline=None)  # the first example builds the unit registry (about 1 s)
@given(
    st.floats(min_value=1e-8, max_value=1e15, allow_nan=False),
    st.sampled_from([0.0, 0.5, 1.0, 1.5, 2.0, 3.0]),
)
def test_pre_exponential_in_litres_for_any_order(x, n):
    from exomap.schema.quantity import pre_exponential_to_si

    a = n - 1.0
    # (L/mol)^(n-1)/s -> (m^3/mol)^(n-1)/s: a factor (1e-3)^(n-1) (SI Brochure Table 8: 1 L = 1e-3 m^3)
    text = f"{x!r} L^({a:g})*mol^({-a:g})/s"
    assert pre_exponential_to_si(text, n) == pytest.approx(x * 1e-3**a, rel=1e-14)
    # the same value in another order's units is refused
    with pytest.raises(ValueError, match="wrong dimension"):
        pre_exponential_to_si(text, n + 1.0)


def test_threads_racing_for_the_first_registry_share_one():
    # the web layer parses in worker threads; units of two pint registries cannot be combined
    code = (
        "import threading; from exomap.schema.quantity import parse_quantity, registry; out = []\n"
        "ts = [threading.Thread(target=lambda: out.append((parse_quantity('6 m^3/h', 'flow', 'f'), id(registry()))))"
        " for _ in range(8)]\n"
        "[t.start() for t in ts]; [t.join() for t in ts]\n"
        "assert len(out) == 8 and len(set(out)) == 1, out"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


# Gauge pressures and US gallons per minute, against scipy.constants (CODATA/NIST values: atm = 101325 Pa
# exactly, psi = 6894.757... Pa, gallon = 3.785411784e-3 m^3 exactly)
@pytest.mark.parametrize(
    ("text", "si"),
    [
        ("0 barg", lambda c: c.atm),
        ("0.2 barg", lambda c: 0.2 * c.bar + c.atm),
        ("1.5 bar(g)", lambda c: 1.5 * c.bar + c.atm),
        ("30 psig", lambda c: 30 * c.psi + c.atm),
        ("50 kPag", lambda c: 50e3 + c.atm),
        # an absolute pressure is not moved
        ("1.2 bar", lambda c: 1.2 * c.bar),
        ("14.7 psi", lambda c: 14.7 * c.psi),
    ],
)
def test_gauge_pressures_read_above_the_standard_atmosphere(text, si):
    import scipy.constants as c

    assert parse_quantity(text, "pressure", "vessel.headspace_pressure") == pytest.approx(si(c), rel=1e-13)


def test_gallons_per_minute():
    import scipy.constants as c

    assert parse_quantity("25 gpm", "flow", "feed.flow") == pytest.approx(25 * c.gallon / 60, rel=1e-13)
    assert parse_quantity("25 gal/min", "flow", "feed.flow") == pytest.approx(25 * c.gallon / 60, rel=1e-13)


@pytest.mark.parametrize(
    ("value", "dimension", "match"),
    [
        ("1 barg", "length", r"x: '1 barg' is a gauge pressure, not a length"),
        ("-2 barg", "pressure", r"x: '-2 barg' is below vacuum .*101325 Pa"),
        ("2 blorps", "length", r"^x: unit 'blorps' not understood; expected a length"),
        ("2 m/)", "length", r"^x: unit 'm/\)' not understood; expected a length"),
        ({"a": 1}, "length", r"^x: got an object; expected a length"),
        ([1, 2], "flow", r"^x: got a list; expected a volumetric flow"),
    ],
)
def test_unit_errors_are_plain_words(value, dimension, match):
    with pytest.raises(ScenarioError, match=match) as info:
        parse_quantity(value, dimension, "x")
    # no internal exception name reaches the message (pint's UndefinedUnitError, TokenError, ...)
    assert not re.search(r"[A-Z][a-z]+(Error|Exception)\b|\bdict\b|\blist\b(?!;)", str(info.value)), str(info.value)
