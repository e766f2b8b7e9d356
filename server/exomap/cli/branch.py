"""``exomap branch SCENARIO --along residence-time|feed-temperature [--residence-time V]
[--feed-temperature V] [--from V --to V] [--json]``: the steady-state branch along one parameter with its
ignition/extinction turning points and Hopf points (``exomap.core.branch.branch``)."""

from __future__ import annotations

import argparse

from exomap.cli import _format as fmt
from exomap.cli import (
    add_operating_point_arguments,
    add_scenario_argument,
    load_scenario,
    operating_point,
    print_json,
    quantity,
)

ALONG = {"residence-time": "residence_time", "feed-temperature": "feed_temperature"}
#: Rows of the readable table (the JSON has every point).
TABLE_ROWS = 24


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``branch`` sub-command."""
    parser = subparsers.add_parser(
        "branch",
        help="steady states along residence time or feed temperature, with turning and Hopf points",
        description="Steady states along residence time (at a fixed feed temperature) or along feed temperature "
        "(at a fixed residence time), with the ignition and extinction turning points and the Hopf points. "
        "Values take units, e.g. '40 min', '35 degC'; a bare number is SI (s, K).",
    )
    add_scenario_argument(parser)
    parser.add_argument("--along", required=True, choices=list(ALONG), help="the parameter that varies")
    add_operating_point_arguments(parser, what="held fixed or marked")
    parser.add_argument(
        "--from",
        dest="lo",
        metavar="VALUE",
        help="start of the range of the varying parameter (default: the scenario's map window)",
    )
    parser.add_argument("--to", dest="hi", metavar="VALUE", help="end of the range of the varying parameter")
    parser.add_argument("--json", action="store_true", help="print the answer document (SI) as JSON")
    return parser


def _value(along: str, v: float) -> str:
    return fmt.minutes(v) if along == "residence_time" else fmt.celsius(v)


def render(sc, result) -> str:  # noqa: ANN001 - Scenario, BranchResult
    """The human-readable summary of a BranchResult."""
    along = result.parameter
    word = "residence time" if along == "residence_time" else "feed temperature"
    fixed = (
        f"feed {fmt.celsius(result.T_in)}" if along == "residence_time" else f"residence time {fmt.minutes(result.tau)}"
    )
    lines = [fmt.heading(sc.title), ""] if sc.title else []
    lines.append(f"Branch along {word} from {_value(along, result.lo)} to {_value(along, result.hi)} at {fixed}")
    lines.append(result.message)
    lines.append("")
    if result.turning_points:
        lines.append("Turning points (ignition: past it the tank can only jump up; extinction: it falls back)")
        lines.append(
            fmt.table(
                ["kind", "residence time", "feed temperature", "temperature"],
                [[t.kind, fmt.minutes(t.tau), fmt.celsius(t.T_in), fmt.celsius(t.T)] for t in result.turning_points],
                right=[False, True, True, True],
            )
        )
    else:
        lines.append("No turning point in the range: one steady state at each value.")
    lines.append("")
    if result.hopf_points:
        lines.append("Hopf points (a stable state turns into sustained oscillations)")
        lines.append(
            fmt.table(
                ["residence time", "feed temperature", "temperature", "period"],
                [
                    [
                        fmt.minutes(h.tau),
                        fmt.celsius(h.T_in),
                        fmt.celsius(h.T),
                        fmt.minutes(6.283185307179586 / h.frequency) if h.frequency > 0 else "-",
                    ]
                    for h in result.hopf_points
                ],
                right=[True, True, True, True],
            )
        )
    else:
        lines.append("No Hopf point in the range.")
    points = list(result.points)
    if points:
        step = max(1, len(points) // TABLE_ROWS)
        shown = points[::step]
        if shown[-1] is not points[-1]:
            shown.append(points[-1])
        lines += ["", f"Points ({len(shown)} of {len(points)}; --json gives all)"]
        lines.append(
            fmt.table(
                [word, "temperature", "conversion", "stable", "branch piece"],
                [
                    [
                        _value(along, p.value),
                        fmt.celsius(p.T),
                        fmt.percent(p.conversion, 1),
                        ("yes" if p.stable else "no") + (" (oscillatory)" if p.oscillatory else ""),
                        str(p.piece),
                    ]
                    for p in shown
                ],
                right=[True, True, True, False, True],
            )
        )
    lines += ["", fmt.cautions_block()]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Compute and print the branch; 0 on success."""
    from exomap.core.branch import branch

    sc = load_scenario(args.scenario)
    along = ALONG[args.along]
    tau, T_in = operating_point(args)
    dimension = "time" if along == "residence_time" else "temperature"
    lo = quantity(args.lo, dimension, "--from")
    hi = quantity(args.hi, dimension, "--to")
    result = branch(sc, along, tau, T_in, lo=lo, hi=hi)
    if args.json:
        print_json(result.to_dict())
    else:
        print(render(sc, result))
    return 0
