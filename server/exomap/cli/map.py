"""``exomap map SCENARIO [--residence-time LO HI] [--feed-temperature LO HI] [--points N M]
[--json | --csv FILE]``: the operating map (``exomap.core.opmap.operating_map``)."""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from exomap.cli import CliInputError, add_scenario_argument, load_scenario, print_json, quantity
from exomap.cli import _format as fmt


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``map`` sub-command."""
    parser = subparsers.add_parser(
        "map",
        help="operating map of residence time against feed temperature",
        description="Operating map: each cell's region (stable, sensitive, multiple, unstable, runaway), number "
        "of steady states and highest reachable steady temperature, with the ignition, extinction, Hopf and "
        "maximum-temperature boundaries solved exactly. Values take units ('5 min', '20 degC').",
    )
    add_scenario_argument(parser)
    parser.add_argument(
        "--residence-time",
        nargs=2,
        metavar=("LO", "HI"),
        help="residence-time window, e.g. '5 min' '3 h' (default: the scenario's map window)",
    )
    parser.add_argument(
        "--feed-temperature", nargs=2, metavar=("LO", "HI"), help="feed-temperature window, e.g. '0 degC' '60 degC'"
    )
    parser.add_argument(
        "--points",
        nargs=2,
        type=int,
        metavar=("N_TAU", "N_TIN"),
        help="grid points along residence time and feed temperature (default: the scenario's)",
    )
    parser.add_argument(
        "--spacing", choices=("log", "linear"), default="log", help="spacing of the residence time axis (default: log)"
    )
    out = parser.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="print the map answer document (SI) as JSON")
    out.add_argument("--csv", metavar="FILE", help="write one row per cell to FILE ('-' for stdout)")
    return parser


def render(sc, m) -> str:  # noqa: ANN001 - Scenario, MapResult
    """A readable summary: the share of each region, the boundaries and the window."""
    lines = []
    if sc.title:
        lines += [fmt.heading(sc.title), ""]
    lines.append(
        f"Operating map: residence time {fmt.minutes(m.tau[0])} .. {fmt.minutes(m.tau[-1])} "
        f"({m.spacing}), feed {fmt.celsius(m.T_in[0])} .. {fmt.celsius(m.T_in[-1])}, "
        f"{m.tau.size} x {m.T_in.size} cells"
    )
    lines.append("")
    counts = np.bincount(m.region.ravel(), minlength=5)
    rows = [
        [key, label, fmt.percent(counts[code] / m.region.size, 1)]
        for code, key, label in [(d["code"], d["key"], d["label"]) for d in m.to_dict()["legend"]]
    ]
    lines.append(fmt.table(["region", "meaning", "share of map"], rows, right=[False, False, True]))
    lines.append("")
    b = m.boundaries
    for key, label in (("ignition", "ignition"), ("extinction", "extinction")):
        pts = b[key]
        if len(pts):
            lines.append(
                f"{label}: {len(pts)} points, feed {fmt.celsius(float(np.nanmin(pts[:, 1])))} .. "
                f"{fmt.celsius(float(np.nanmax(pts[:, 1])))}"
            )
        else:
            lines.append(f"{label}: none in the window")
    for c in b["cusp"]:
        lines.append(f"cusp: residence time {fmt.minutes(c[0])}, feed {fmt.celsius(c[1])}, tank {fmt.celsius(c[2])}")
    lines.append(f"Hopf points: {len(b['hopf'])}")
    lines.append(f"valve outside its usable range at {int(m.valve_limited.sum())} of {m.tau.size} residence times")
    lines += ["", fmt.cautions_block()]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Compute the map and print or write it; 0 on success."""
    from exomap.core.opmap import operating_map

    sc = load_scenario(args.scenario)
    tau_range = None
    if args.residence_time:
        tau_range = tuple(quantity(v, "time", "--residence-time") for v in args.residence_time)
    tin_range = None
    if args.feed_temperature:
        tin_range = tuple(quantity(v, "temperature", "--feed-temperature") for v in args.feed_temperature)
    m = operating_map(
        sc,
        tau_range=tau_range,
        T_in_range=tin_range,
        points=tuple(args.points) if args.points else None,
        spacing=args.spacing,
    )
    if args.json:
        print_json(m.to_dict())
    elif args.csv:
        text = m.to_csv()
        if args.csv == "-":
            print(text, end="")
        else:
            try:
                Path(args.csv).write_text(text, encoding="utf-8")
            except OSError as exc:
                raise CliInputError("--csv", f"cannot write {args.csv}: {exc.strerror}") from None
            print(f"wrote {m.region.size} cells to {args.csv}")
    else:
        print(render(sc, m))
    return 0
