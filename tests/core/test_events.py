"""The event syntax of simulations (exomap.core.events): parsing, SI values, errors naming event and key."""

from __future__ import annotations

import re

import pytest
from exomap.core.errors import ModelInputError
from exomap.core.events import ACTIONS, QUANTITIES, Event, parse_events

SPECIES = ("A", "P")


def test_each_form_parses_to_si_and_round_trips():
    raw = [
        {"at": 600, "set": "feed_flow", "to": 1e-3},
        {"at": 0, "add": "feed_temperature", "value": 10},
        {"at": 60, "scale": "feed_concentration.A", "by": 1.2},
        {"at": 120, "ramp": "coolant_temperature", "to": 290.0, "over": 300},
        {"at": 30, "do": "feed_stop"},
    ]
    events = parse_events(raw, species=SPECIES, duration=3600)
    # sorted by time, stable, each keeping the index it had in the list
    assert [e.t for e in events] == [0.0, 30.0, 60.0, 120.0, 600.0]
    assert [e.index for e in events] == [1, 4, 2, 3, 0]
    ramp = next(e for e in events if e.kind == "ramp")
    assert (ramp.quantity, ramp.value, ramp.over) == ("coolant_temperature", 290.0, 300.0)
    assert next(e for e in events if e.kind == "scale").species == "A"
    again = parse_events([e.to_dict() for e in events], species=SPECIES)
    assert [(e.t, e.kind, e.quantity, e.value, e.over, e.action) for e in again] == [
        (e.t, e.kind, e.quantity, e.value, e.over, e.action) for e in events
    ]


def test_every_action_and_quantity_is_accepted():
    raw = [{"at": 1.0, "do": a} for a in ACTIONS]
    raw += [
        {"at": 2.0, "set": q if q != "feed_concentration" else "feed_concentration.P", "to": 0.5} for q in QUANTITIES
    ]
    assert len(parse_events(raw, species=SPECIES)) == len(ACTIONS) + len(QUANTITIES)


def test_units_go_through_the_unit_parser():
    from exomap.schema.quantity import parse_quantity

    raw = [
        {"at": "10 min", "set": "feed_flow", "to": "3.6 m^3/h"},
        {"at": "1 h", "add": "feed_temperature", "value": "10 K"},
        {"at": 0, "set": "feed_temperature", "to": "30 degC"},
        {"at": 0, "ramp": "feed_concentration.A", "to": "2 mol/L", "over": "5 min"},
        {"at": 0, "set": "valve_opening", "to": "45 %"},
    ]
    ev = {e.index: e for e in parse_events(raw, parse_quantity, species=SPECIES)}
    # unit definitions (exact): 10 min = 600 s, 3.6 m^3/h = 1e-3 m^3/s, 1 h = 3600 s
    assert ev[0].t == pytest.approx(600.0, rel=1e-15)
    assert ev[0].value == pytest.approx(1e-3, rel=1e-12)
    assert ev[1].t == pytest.approx(3600.0, rel=1e-15)
    # a rise of 10 K is a difference, not an absolute temperature (analytic)
    assert ev[1].value == pytest.approx(10.0, rel=1e-15)
    # 30 degC = 303.15 K (definition of the Celsius scale)
    assert ev[2].value == pytest.approx(303.15, rel=1e-15)
    # 2 mol/L = 2000 mol/m^3, 5 min = 300 s (unit definitions)
    assert (ev[3].value, ev[3].over) == (pytest.approx(2000.0, rel=1e-15), pytest.approx(300.0, rel=1e-15))
    assert ev[4].value == pytest.approx(0.45, rel=1e-15)


@pytest.mark.parametrize(
    ("raw", "field", "words"),
    [
        ([{"at": 0, "set": "feed_pressure", "to": 1.0}], "events[0].set", "unknown quantity"),
        ([{"at": 0, "do": "feed_start"}], "events[0].do", "must be one of"),
        ([{"at": 0, "set": "feed_concentration.Z", "to": 1.0}], "events[0].set", "unknown species"),
        ([{"at": 0, "set": "feed_concentration", "to": 1.0}], "events[0].set", "unknown quantity"),
        ([{"at": 0, "do": "feed_stop"}, {"at": -5, "do": "feed_stop"}], "events[1].at", ">= 0"),
        ([{"at": 7200, "do": "feed_stop"}], "events[0].at", "after the end"),
        ([{"at": 0, "set": "feed_flow"}], "events[0].to", "missing"),
        ([{"at": 0, "ramp": "feed_flow", "to": 1e-3}], "events[0].over", "missing"),
        ([{"at": 0, "ramp": "feed_flow", "to": 1e-3, "over": 0}], "events[0].over", "> 0"),
        ([{"set": "feed_flow", "to": 1e-3}], "events[0].at", "missing"),
        ([{"at": 0, "set": "feed_flow", "to": 1e-3, "by": 2}], "events[0].by", "not a key"),
        ([{"at": 0, "set": "feed_flow", "add": "feed_flow", "to": 1}], "events[0].add", "exactly one"),
        ([{"at": 0}], "events[0]", "one action key"),
        ([{"at": 0, "set": "valve_opening", "to": 1.5}], "events[0].to", "0..1"),
        ([{"at": 0, "set": "feed_temperature", "to": -3}], "events[0].to", "absolute temperature"),
        ([{"at": 0, "scale": "feed_flow", "by": -1}], "events[0].by", ">= 0"),
        ([{"at": 0, "set": "feed_flow", "to": "3 m^3/h"}], "events[0].to", "SI units"),
        ([{"at": 0, "set": "feed_flow", "to": True}], "events[0].to", "number"),
        ([{"at": float("nan"), "do": "feed_stop"}], "events[0].at", "finite"),
        (["feed_stop"], "events[0]", "object"),
    ],
)
def test_malformed_events_name_the_event_and_key(raw, field, words):
    with pytest.raises(ModelInputError, match=re.escape(field)) as info:
        parse_events(raw, species=SPECIES, duration=3600)
    assert info.value.field == field
    assert words in str(info.value)


def test_a_single_object_is_not_a_list():
    with pytest.raises(ModelInputError, match="list") as info:
        parse_events({"at": 0, "do": "feed_stop"})
    assert info.value.field == "events"


def test_describe_is_plain_words():
    (e,) = parse_events([{"at": 0, "add": "feed_temperature", "value": 10}])
    assert isinstance(e, Event)
    assert e.describe() == "feed temperature changed by +10 K"


@pytest.mark.parametrize(
    ("line", "obj"),
    [
        ("at 10 min set feed_temperature to 45 degC", {"at": "10 min", "set": "feed_temperature", "to": "45 degC"}),
        ("at 10 min add feed_temperature 10 K", {"at": "10 min", "add": "feed_temperature", "value": "10 K"}),
        ("at 10 min add feed_temperature by 10 K", {"at": "10 min", "add": "feed_temperature", "value": "10 K"}),
        ("at 1800 scale feed_flow by 1.5", {"at": 1800.0, "scale": "feed_flow", "by": 1.5}),
        (
            "AT 1 h  ramp coolant_temperature to 40 degC over 20 min",
            {"at": "1 h", "ramp": "coolant_temperature", "to": "40 degC", "over": "20 min"},
        ),
        ("at 5 min do feed_stop", {"at": "5 min", "do": "feed_stop"}),
    ],
)
def test_event_lines_read_as_the_objects_they_stand_for(line, obj):
    from exomap.core.events import event_from_text, parse_events

    assert event_from_text(line) == obj
    # parsed with SI numbers, a line and its object give the same event
    if all(not isinstance(v, str) or k in ("set", "add", "scale", "ramp", "do") for k, v in obj.items()):
        assert parse_events([line]) == parse_events([obj])


@pytest.mark.parametrize("line", ["", "bogus", "at 10 min jump feed_temperature", "at 10 min set feed_temperature 45"])
def test_a_line_that_is_not_an_event_names_its_index(line):
    from exomap.core.events import parse_events

    with pytest.raises(ModelInputError, match=r"^events\[1\]: ") as info:
        parse_events([{"at": 0, "do": "feed_stop"}, line])
    assert info.value.field == "events[1]"
