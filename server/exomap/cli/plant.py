"""Shared options of ``exomap replay`` and ``exomap calibrate``: the scenario, the data file, the tag mapping."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from exomap.cli import CliInputError, add_scenario_argument


def add_data_arguments(parser: argparse.ArgumentParser) -> None:
    add_scenario_argument(parser)
    parser.add_argument("data", metavar="DATA.csv", help="historian export (CSV, wide or long layout)")
    parser.add_argument("--time", metavar="COLUMN", help="time column of a wide file (default: 'time' or the first)")
    parser.add_argument(
        "--map",
        action="append",
        default=[],
        metavar="TAG=ROLE",
        help="what a tag is: feed_flow, feed_temperature, coolant_temperature, feed_concentration.X, "
        "reactor_temperature, level, valve_opening, outlet_flow (repeat for each tag)",
    )
    parser.add_argument(
        "--unit", action="append", default=[], metavar="TAG=UNIT", help="unit of a tag whose header has none"
    )
    parser.add_argument(
        "--start", metavar="TIME", help="use the records from TIME (ISO 8601, no zone: UTC; or epoch seconds)"
    )
    parser.add_argument("--end", metavar="TIME", help="use the records up to TIME (included), after --start")


def pairs(values: list[str], option: str) -> dict[str, str]:
    out: dict[str, str] = {}
    for v in values:
        tag, sep, rest = v.partition("=")
        if not sep or not tag.strip() or not rest.strip():
            raise CliInputError(option, f"expected TAG=VALUE, got {v!r}")
        if tag.strip() in out:
            raise CliInputError(option, f"tag {tag.strip()!r} is given twice")
        out[tag.strip()] = rest.strip()
    return out


def load_dataset(args: argparse.Namespace) -> Any:
    from exomap.schema.plantdata import read_plant_csv

    path = Path(args.data)
    if not path.is_file():
        raise CliInputError("DATA.csv", f"no file {args.data!r}")
    return read_plant_csv(
        path.read_bytes(),
        mapping=pairs(args.map, "--map"),
        time_column=args.time,
        units=pairs(args.unit, "--unit"),
    )


def windowed(args: argparse.Namespace, ds: Any, min_records: int = 2) -> tuple[Any, dict[str, Any]]:
    """The records of ``ds`` between ``--start`` and ``--end`` and what the window was (errors name the option)."""
    from exomap.schema.errors import ScenarioError
    from exomap.schema.plantdata import window

    try:
        return window(ds, args.start, args.end, min_records=min_records)
    except ScenarioError as exc:
        raise CliInputError(f"--{exc.field}", exc.errors[0]["message"]) from None
