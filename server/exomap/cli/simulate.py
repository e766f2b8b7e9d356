"""``exomap simulate SCENARIO --duration VALUE [--start low|middle|high|cold|empty] [--events FILE]
[--residence-time V] [--feed-temperature V] [--json | --csv FILE]``: the dynamic response of the tank to a
list of events (``exomap.core.dynamics.simulate``).

The events file is a JSON list in the event syntax of ``exomap.core.events``; values may carry units
(``{"at": "30 min", "add": "feed_temperature", "value": "10 K"}``).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

import numpy as np

from exomap.cli import (
    CliInputError,
    add_operating_point_arguments,
    add_scenario_argument,
    load_scenario,
    operating_point,
    print_json,
    quantity,
)
from exomap.cli import _format as fmt

#: Rows of the readable time table.
TABLE_ROWS = 12


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``simulate`` sub-command."""
    parser = subparsers.add_parser(
        "simulate",
        help="dynamic response to events",
        description="Simulate the tank from a steady state (or a cold or empty tank) through a list of events "
        "(feed steps, ramps, pump trips, blocked outlet, cooling loss, valve manual/auto). Values take units, "
        "e.g. '2 h', '35 degC'; a bare number is SI (s, K).",
    )
    add_scenario_argument(parser)
    parser.add_argument("--duration", metavar="VALUE", required=True, help="simulated time, e.g. '4 h'")
    parser.add_argument(
        "--start",
        default="low",
        choices=("low", "middle", "high", "cold", "empty"),
        help="starting state: a steady state (low, middle = the saddle, high), a cold tank full "
        "of solvent, or an empty tank filling (default: low)",
    )
    parser.add_argument("--events", metavar="FILE", type=Path, help="JSON file with the list of events")
    add_operating_point_arguments(parser)
    out = parser.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="print the answer document (SI) as JSON")
    out.add_argument("--csv", metavar="FILE", help="write the time series (SI) as CSV to FILE ('-' for stdout)")
    return parser


def read_events(path: Path | None, species: tuple[str, ...], duration: float) -> tuple[Any, ...]:
    """Parse the events file (values with units allowed)."""
    from exomap.core.events import parse_events
    from exomap.schema import parse_quantity

    if path is None:
        return ()
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise CliInputError("--events", f"cannot read {path}: {exc.strerror}") from None
    except json.JSONDecodeError as exc:
        raise CliInputError("--events", f"{path} is not valid JSON: {exc.msg} at line {exc.lineno}") from None
    if not isinstance(doc, list):
        raise CliInputError("--events", f"{path} must hold a JSON list of events")
    return parse_events(doc, parse_quantity, species=species, duration=duration)


def describe(event: dict[str, Any]) -> str:
    """An applied event in plain words and plant units (degC, m^3/h, min, %)."""
    if "do" in event:
        return str(event["do"]).replace("_", " ")
    kind = next(k for k in ("set", "add", "scale", "ramp") if k in event)
    quantity = str(event[kind])
    base = quantity.split(".", 1)[0]
    name = quantity.replace("_", " ")

    def show(v: float, difference: bool = False) -> str:
        if base in ("feed_temperature", "coolant_temperature"):
            return f"{v:+.1f} K" if difference else fmt.celsius(v)
        if base == "feed_flow":
            return ("+" if difference and v >= 0 else "") + fmt.flow(v)
        if base == "valve_opening":
            return fmt.percent(v)
        if base == "level_setpoint":
            return f"{v:+.3f} m" if difference else f"{v:.3f} m"
        if base == "jacket_ua":
            return f"{v / 1000:+.4g} kW/K" if difference else f"{v / 1000:.4g} kW/K"
        return f"{v:+.4g} mol/m^3" if difference else f"{v:.4g} mol/m^3"

    if kind == "set":
        return f"{name} set to {show(event['to'])}"
    if kind == "add":
        return f"{name} changed by {show(event['value'], True)}"
    if kind == "scale":
        return f"{name} multiplied by {event['by']:g}"
    return f"{name} ramped to {show(event['to'])} over {fmt.minutes(event['over'])}"


def _alarm_value(kind: str, value: float) -> str:
    """The threshold crossed: a level (level alarms, the vessel's rim for overflow, the empty level) or a
    temperature."""
    return f"{value:.2f} m" if kind.startswith("level") or kind in ("overflow", "empty") else fmt.celsius(value)


def render(sc: Any, r: Any) -> str:
    """The readable summary of a SimulationResult."""
    lines: list[str] = []
    lines.append(fmt.heading(f"Simulation: {sc.title}" if sc.title else "Simulation"))
    lines.append(
        f"Operating point: residence time {fmt.minutes(r.tau)}, feed {fmt.celsius(r.T_in)}; start: "
        f"{r.start}; duration {fmt.minutes(r.duration)}"
    )
    lines.append(
        f"Stop: {r.stop_reason}" + ("" if r.stop_reason == "completed" else f" at {fmt.minutes(r.t_end)} ({r.message})")
    )
    if "not stable" in r.message:
        lines.append(f"Note: {r.message.split('; ', 1)[1]}.")
    lines.append(
        f"Peak temperature {fmt.celsius(r.peak_T)} at {fmt.minutes(r.peak_t)}; end {fmt.celsius(r.T[-1])}, "
        f"level {r.h[-1]:.2f} m" + (", steady" if r.settled() else "")
    )
    lines.append("")
    if r.applied:
        lines.append("Events:")
        lines.extend(f"  {fmt.minutes(a['time_s']):>10s}  {describe(a['event'])}" for a in r.applied)
    else:
        lines.append("Events: none")
    if r.alarms:
        lines.append("Alarms:")
        lines.extend(
            f"  {fmt.minutes(a['time_s']):>10s}  {a['kind'].replace('_', ' ')} ({_alarm_value(a['kind'], a['value'])})"
            for a in r.alarms
        )
    else:
        lines.append("Alarms: none")
    lines.append("")
    targets = np.linspace(0.0, r.t_end, TABLE_ROWS + 1)
    idx = sorted({int(np.searchsorted(r.t, t, side="right")) - 1 for t in targets} | {r.t.size - 1})
    rows = []
    key = sc.species[sc.key_species]
    for k in idx:
        rows.append(
            [
                fmt.minutes(float(r.t[k])),
                f"{r.h[k]:.3f} m",
                fmt.celsius(float(r.T[k])),
                f"{r.C[sc.key_species, k]:.4g}",
                fmt.flow(float(r.q_out[k])),
                fmt.percent(float(r.opening[k])),
            ]
        )
    lines.append(
        fmt.table(["time", "level", "temperature", f"c_{key} [mol/m^3]", "outflow", "valve"], rows, right=[True] * 6)
    )
    lines += ["", fmt.cautions_block()]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Run the simulation and print or write it; 0 on success."""
    from exomap.core.dynamics import simulate

    sc = load_scenario(args.scenario)
    duration = quantity(args.duration, "time", "--duration")
    tau, T_in = operating_point(args)
    if duration is None or duration <= 0:
        raise CliInputError("--duration", "the duration must be positive, e.g. '4 h'")
    if tau is not None and tau <= 0:
        raise CliInputError("--residence-time", "the residence time must be positive, e.g. '40 min'")
    events = read_events(args.events, sc.species, duration)
    result = simulate(sc, tau=tau, T_in=T_in, start=args.start, events=events, duration=duration)
    if args.json:
        print_json(result.to_dict())
    elif args.csv:
        text = result.to_csv()
        if args.csv == "-":
            sys.stdout.write(text)
        else:
            Path(args.csv).write_text(text, encoding="utf-8")
            print(f"wrote {result.t.size} rows to {args.csv} (SI units)")
            print(fmt.cautions_block())
    else:
        print(render(sc, result))
    return 0
