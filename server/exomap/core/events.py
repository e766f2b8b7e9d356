"""The event syntax of simulations: what changes outside the tank, and when (SI values).

An event is a small JSON object with a time ``at`` [s] and exactly one action:

======================================================  ==============================================
form                                                    meaning
======================================================  ==============================================
``{"at": t, "set": Q, "to": v}``                        quantity Q jumps to v
``{"at": t, "add": Q, "value": v}``                     Q jumps by v (a difference: 10 K, not 10 degC)
``{"at": t, "scale": Q, "by": f}``                      Q is multiplied by f [-]
``{"at": t, "ramp": Q, "to": v, "over": d}``            Q moves linearly from its value at t to v in d [s]
``{"at": t, "do": ACTION}``                             a plant action (see ``ACTIONS``)
======================================================  ==============================================

Quantities Q (``QUANTITIES``): ``feed_flow`` [m^3/s], ``feed_temperature`` [K],
``feed_concentration.<species>`` [mol/m^3], ``coolant_temperature`` [K], ``valve_opening`` [-, 0..1],
``level_setpoint`` [m], ``jacket_ua`` [W/K] (the jacket's heat-transfer conductance, e.g. halved by fouling or
a partly lost coolant flow).

Actions: ``feed_stop`` / ``feed_restart`` (the feed pump trips and comes back at the flow it had),
``outlet_block`` / ``outlet_unblock`` (no outflow whatever the valve says), ``cooling_loss`` /
``cooling_restore`` (the jacket stops removing heat: its conductance is taken as zero; the heat-loss term to
ambient stays), ``valve_manual`` / ``valve_auto`` (the level controller's output is frozen where it is / the
controller takes over again, bumplessly).

Setting or ramping ``valve_opening`` puts a controlled valve in manual at that opening. ``level_setpoint``
acts through the level controller; with a fixed valve it changes nothing.

Numbers are SI. ``parse_events(..., unit_parser=f)`` also accepts strings with units: ``f(value, dimension,
field)`` must return the SI number (``exomap.schema.quantity.parse_quantity`` has that signature); the
dimension names it is called with are those of ``DIMENSIONS`` (and ``"temperature_difference"`` for an
``add`` to a temperature, so ``"10 K"`` or ``"10 delta_degC"`` is a rise of 10 K).

An event may also be one line of text, the form the pages teach (``event_from_text``)::

    at 10 min set feed_temperature to 45 degC
    at 10 min add feed_temperature 10 K
    at 30 min scale feed_flow by 1.5
    at 1 h ramp coolant_temperature to 40 degC over 20 min
    at 5 min do feed_stop

Values keep their units as typed (the ``unit_parser`` converts them); a bare number is SI.

Errors are ``ModelInputError`` whose ``field`` names the event and key, e.g. ``"events[2].set"``.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from exomap.core.errors import ModelInputError

#: Quantities an event can change, with the dimension of their value.
DIMENSIONS: dict[str, str] = {
    "feed_flow": "flow",
    "feed_temperature": "temperature",
    "feed_concentration": "concentration",
    "coolant_temperature": "temperature",
    "valve_opening": "fraction",
    "level_setpoint": "length",
    "jacket_ua": "conductance",
}
QUANTITIES: tuple[str, ...] = tuple(DIMENSIONS)
ACTIONS: tuple[str, ...] = (
    "feed_stop",
    "feed_restart",
    "outlet_block",
    "outlet_unblock",
    "cooling_loss",
    "cooling_restore",
    "valve_manual",
    "valve_auto",
)
#: Keys of each form: the action key, the value keys it needs.
FORMS: dict[str, tuple[str, ...]] = {
    "set": ("to",),
    "add": ("value",),
    "scale": ("by",),
    "ramp": ("to", "over"),
    "do": (),
}
_UNITS = {
    "flow": "m^3/s",
    "temperature": "K",
    "concentration": "mol/m^3",
    "fraction": "-",
    "temperature_difference": "K",
    "time": "s",
    "length": "m",
    "conductance": "W/K",
}

UnitParser = Callable[[Any, str, str], float]


@dataclass(frozen=True)
class Event:
    """One parsed event, SI values.

    Attributes
    ----------
    index : int
        Position in the list as given (error messages and the record use it).
    t : float
        Time [s] from the start of the simulation.
    kind : str
        ``set`` | ``add`` | ``scale`` | ``ramp`` | ``do``.
    quantity : str or None
        ``feed_flow`` ... or ``feed_concentration.<species>``; None for ``do``.
    value : float or None
        ``to`` (set, ramp), ``value`` (add) or ``by`` (scale), SI.
    over : float or None
        Ramp duration [s].
    action : str or None
        The action of a ``do`` event.
    """

    index: int
    t: float
    kind: str
    quantity: str | None = None
    value: float | None = None
    over: float | None = None
    action: str | None = None

    @property
    def base_quantity(self) -> str | None:
        """``feed_concentration`` for ``feed_concentration.<species>``, else the quantity."""
        return None if self.quantity is None else self.quantity.split(".", 1)[0]

    @property
    def species(self) -> str | None:
        """The species of a ``feed_concentration.<species>`` event, else None."""
        if self.quantity is None or "." not in self.quantity:
            return None
        return self.quantity.split(".", 1)[1]

    def to_dict(self) -> dict[str, Any]:
        """The event in its own syntax, SI numbers (parses back to an equal event)."""
        d: dict[str, Any] = {"at": self.t}
        if self.kind == "do":
            d["do"] = self.action
            return d
        d[self.kind] = self.quantity
        if self.kind == "set":
            d["to"] = self.value
        elif self.kind == "add":
            d["value"] = self.value
        elif self.kind == "scale":
            d["by"] = self.value
        else:
            d["to"] = self.value
            d["over"] = self.over
        return d

    def describe(self) -> str:
        """Plain words, SI units."""
        if self.kind == "do":
            return str(self.action).replace("_", " ")
        q = str(self.quantity).replace("_", " ")
        unit = _UNITS[DIMENSIONS[str(self.base_quantity)]]
        if self.kind == "set":
            return f"{q} set to {self.value:g} {unit}"
        if self.kind == "add":
            return f"{q} changed by {self.value:+g} {unit}"
        if self.kind == "scale":
            return f"{q} multiplied by {self.value:g}"
        return f"{q} ramped to {self.value:g} {unit} over {self.over:g} s"


def _number(raw: Any, dimension: str, where: str, unit_parser: UnitParser | None) -> float:
    if isinstance(raw, bool):
        raise ModelInputError(f"{where} must be a number, got {raw!r}", field=where)
    if isinstance(raw, (int, float)):
        value = float(raw)
    elif isinstance(raw, str) and unit_parser is not None:
        value = float(unit_parser(raw, dimension, where))
    elif isinstance(raw, str):
        raise ModelInputError(
            f"{where} must be a number in SI units ({_UNITS.get(dimension, dimension)}); "
            f"strings with units are accepted through the API and CLI, got {raw!r}",
            field=where,
        )
    else:
        raise ModelInputError(f"{where} must be a number, got {raw!r}", field=where)
    if not math.isfinite(value):
        raise ModelInputError(f"{where} must be finite, got {raw!r}", field=where)
    return value


def _check_range(quantity: str, value: float, where: str, kind: str) -> None:
    base = quantity.split(".", 1)[0]
    if kind == "scale":
        if value < 0:
            raise ModelInputError(f"{where} must be >= 0 (a factor), got {value:g}", field=where)
        return
    if kind == "add":
        return  # the result is checked when the event is applied
    if base == "valve_opening" and not 0.0 <= value <= 1.0:
        raise ModelInputError(f"{where} must lie in 0..1 (a valve opening), got {value:g}", field=where)
    if base in ("feed_temperature", "coolant_temperature") and value <= 0:
        raise ModelInputError(f"{where} must be a positive absolute temperature [K], got {value:g}", field=where)
    if base == "level_setpoint" and value <= 0:
        raise ModelInputError(f"{where} must be a positive level [m], got {value:g}", field=where)
    if base in ("feed_flow", "feed_concentration", "jacket_ua") and value < 0:
        raise ModelInputError(f"{where} must be >= 0 [{_UNITS[DIMENSIONS[base]]}], got {value:g}", field=where)


_NUMBER_RE = re.compile(r"^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$")
_LINE_RE = re.compile(r"^at\s+(.+?)\s+(set|add|scale|ramp|do)\s+(.+)$", re.IGNORECASE)
_LINE_FORMS = {
    "set": re.compile(r"^(\S+)\s+to\s+(.+)$", re.IGNORECASE),
    "add": re.compile(r"^(\S+)\s+(?:by\s+)?(.+)$", re.IGNORECASE),
    "scale": re.compile(r"^(\S+)\s+by\s+(.+)$", re.IGNORECASE),
    "ramp": re.compile(r"^(\S+)\s+to\s+(.+?)\s+over\s+(.+)$", re.IGNORECASE),
}


def _value_text(text: str) -> float | str:
    text = text.strip()
    return float(text) if _NUMBER_RE.match(text) else text


def event_from_text(line: str, index: int = 0) -> dict[str, Any]:
    """One event written as a line of text -> its event object (values keep their units as typed).

    The grammar is the one the pages teach (``web/static/events.js`` writes the same objects):
    ``at <time> set <Q> to <value>``, ``at <time> add <Q> [by] <amount>``, ``at <time> scale <Q> by <factor>``,
    ``at <time> ramp <Q> to <value> over <time>``, ``at <time> do <action>``.

    Raises
    ------
    ModelInputError
        With ``field`` ``"events[index]"`` when the line does not follow the grammar.

    Examples
    --------
    >>> event_from_text("at 10 min set feed_temperature to 45 degC")
    {'at': '10 min', 'set': 'feed_temperature', 'to': '45 degC'}
    >>> event_from_text("at 600 do feed_stop")
    {'at': 600.0, 'do': 'feed_stop'}
    """
    where = f"events[{index}]"
    text = " ".join(str(line).split())
    m = _LINE_RE.match(text)
    if m is None:
        raise ModelInputError(
            f'{where}: "{text}" is not an event line (nor an event object); write "at <time>" then set, add, '
            'scale, ramp or do, e.g. "at 10 min set feed_temperature to 45 degC"',
            field=where,
        )
    at, verb, rest = _value_text(m.group(1)), m.group(2).lower(), m.group(3).strip()
    if verb == "do":
        return {"at": at, "do": rest}
    r = _LINE_FORMS[verb].match(rest)
    if r is None:
        example = {
            "set": "set feed_temperature to 45 degC",
            "add": "add feed_temperature 10 K",
            "scale": "scale feed_flow by 1.5",
            "ramp": "ramp coolant_temperature to 40 degC over 20 min",
        }[verb]
        raise ModelInputError(f'{where}: could not read "{text}"; write e.g. "at 10 min {example}"', field=where)
    if verb == "set":
        return {"at": at, "set": r.group(1), "to": _value_text(r.group(2))}
    if verb == "add":
        return {"at": at, "add": r.group(1), "value": _value_text(r.group(2))}
    if verb == "scale":
        return {"at": at, "scale": r.group(1), "by": _value_text(r.group(2))}
    return {"at": at, "ramp": r.group(1), "to": _value_text(r.group(2)), "over": _value_text(r.group(3))}


def parse_event(
    raw: Mapping[str, Any] | Event | str,
    index: int,
    unit_parser: UnitParser | None = None,
    *,
    species: Sequence[str] | None = None,
    duration: float | None = None,
) -> Event:
    """Parse one event (see ``parse_events``)."""
    where = f"events[{index}]"
    if isinstance(raw, Event):
        raw = raw.to_dict()
    if isinstance(raw, str):
        raw = event_from_text(raw, index)
    if not isinstance(raw, Mapping):
        raise ModelInputError(f'{where} must be an object such as {{"at": 0, "do": "feed_stop"}}', field=where)
    if "at" not in raw:
        raise ModelInputError(f"{where}.at is missing: the time of the event [s]", field=f"{where}.at")
    t = _number(raw["at"], "time", f"{where}.at", unit_parser)
    if t < 0:
        raise ModelInputError(f"{where}.at must be >= 0 s, got {t:g}", field=f"{where}.at")
    if duration is not None and t > duration:
        raise ModelInputError(
            f"{where}.at = {t:g} s is after the end of the simulation ({duration:g} s)", field=f"{where}.at"
        )
    kinds = [k for k in FORMS if k in raw]
    if not kinds:
        raise ModelInputError(f"{where} needs one action key: one of {', '.join(FORMS)}", field=where)
    if len(kinds) > 1:
        raise ModelInputError(
            f"{where}.{kinds[1]}: an event has exactly one of {', '.join(FORMS)}; got {', '.join(kinds)}",
            field=f"{where}.{kinds[1]}",
        )
    kind = kinds[0]
    allowed = {"at", kind, *FORMS[kind]}
    for key in raw:
        if key not in allowed:
            raise ModelInputError(
                f"{where}.{key} is not a key of a '{kind}' event (keys: {', '.join(sorted(allowed))})",
                field=f"{where}.{key}",
            )
    if kind == "do":
        action = raw["do"]
        if action not in ACTIONS:
            raise ModelInputError(
                f"{where}.do must be one of {', '.join(ACTIONS)}, got {action!r}", field=f"{where}.do"
            )
        return Event(index=index, t=t, kind="do", action=str(action))

    quantity = raw[kind]
    if not isinstance(quantity, str):
        raise ModelInputError(f"{where}.{kind} must name a quantity, got {quantity!r}", field=f"{where}.{kind}")
    base, _, sp = quantity.partition(".")
    if base not in DIMENSIONS or (base == "feed_concentration") != bool(sp):
        raise ModelInputError(
            f"{where}.{kind}: unknown quantity {quantity!r}; known: "
            + ", ".join(q if q != "feed_concentration" else "feed_concentration.<species>" for q in QUANTITIES),
            field=f"{where}.{kind}",
        )
    if sp and species is not None and sp not in species:
        raise ModelInputError(
            f"{where}.{kind}: unknown species {sp!r} (species: {', '.join(species)})", field=f"{where}.{kind}"
        )
    for key in FORMS[kind]:
        if key not in raw or raw[key] is None:
            raise ModelInputError(f"{where}.{key} is missing: a '{kind}' event needs it", field=f"{where}.{key}")
    value_key = FORMS[kind][0]
    dimension = DIMENSIONS[base]
    if kind == "scale":
        dimension = "fraction"
    elif kind == "add" and dimension == "temperature":
        dimension = "temperature_difference"
    value = _number(raw[value_key], dimension, f"{where}.{value_key}", unit_parser)
    _check_range(quantity, value, f"{where}.{value_key}", kind)
    over = None
    if kind == "ramp":
        over = _number(raw["over"], "time", f"{where}.over", unit_parser)
        if over <= 0:
            raise ModelInputError(f"{where}.over must be > 0 s, got {over:g}", field=f"{where}.over")
    return Event(index=index, t=t, kind=kind, quantity=quantity, value=value, over=over)


def parse_events(
    events: Iterable[Mapping[str, Any] | Event] | None,
    unit_parser: UnitParser | None = None,
    *,
    species: Sequence[str] | None = None,
    duration: float | None = None,
) -> tuple[Event, ...]:
    """Parse a list of event objects into ``Event`` s, sorted by time (stable for equal times).

    Parameters
    ----------
    events : list of dict, str (or Event)
        Events in the syntax of this module: objects, or lines of text (``event_from_text``). Numbers are SI.
    unit_parser : callable, optional
        ``unit_parser(value, dimension, field) -> float`` used for string values with units.
    species : sequence of str, optional
        The scenario's species; when given, ``feed_concentration.<species>`` must name one of them.
    duration : float, optional
        Length of the simulation [s]; when given, an event after it is an error.

    Returns
    -------
    tuple of Event

    Raises
    ------
    ModelInputError
        With ``field`` ``"events[i].<key>"``: unknown quantity or action, negative time, event after the end,
        missing or non-numeric value, value out of range, unknown key.

    Examples
    --------
    >>> parse_events([{"at": 600, "do": "feed_stop"}, {"at": 0, "add": "feed_temperature", "value": 10}])[0].kind
    'add'
    """
    if events is None:
        return ()
    if isinstance(events, (str, bytes, Mapping)):
        raise ModelInputError("events must be a list of event objects", field="events")
    parsed = [parse_event(raw, i, unit_parser, species=species, duration=duration) for i, raw in enumerate(events)]
    return tuple(sorted(parsed, key=lambda e: e.t))
