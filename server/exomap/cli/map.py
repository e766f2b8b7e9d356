"""``exomap map SCENARIO [--residence-time LO HI] [--feed-temperature LO HI] [--points N M]
[--samples [N] [--seed S]] [--json | --csv FILE]``: the operating map (``exomap.core.opmap.operating_map``), or
with ``--samples`` the probability map under the scenario's uncertainty block
(``exomap.core.uncertainty.uncertainty_map``)."""

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
    parser.add_argument(
        "--samples",
        nargs="?",
        const=0,
        type=int,
        metavar="N",
        help="probability map under the scenario's uncertainty block, with N samples (a power of two; alone: the "
        "block's own count, 256 by default)",
    )
    parser.add_argument("--seed", type=int, metavar="S", help="seed of the samples (default: the block's, 0)")
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


def render_uncertain(sc, m) -> str:  # noqa: ANN001 - Scenario, UncertaintyMapResult
    """A readable summary of a probability map: the window, how many cells are certain, uncertain or in the
    robust window, the boundary bands and the drivers."""
    lines = []
    if sc.title:
        lines += [fmt.heading(sc.title), ""]
    lines.append(
        f"Probability map: residence time {fmt.minutes(m.tau[0])} .. {fmt.minutes(m.tau[-1])} ({m.spacing}), "
        f"feed {fmt.celsius(m.T_in[0])} .. {fmt.celsius(m.T_in[-1])}, {m.tau.size} x {m.T_in.size} cells, "
        f"{m.samples} samples (seed {m.seed}); rate constants stated at {fmt.celsius(m.T_ref)}"
    )
    lines.append(f"uncertain: {', '.join(m.targets) or 'nothing (every sample is the nominal scenario)'}")
    lines.append("")
    rows = []
    for key in ("runaway", "unstable", "multiple", "unsafe"):
        p = m.probability[key]
        rows.append(
            [
                key,
                fmt.percent(float((p == 0).mean()), 1),
                fmt.percent(float(((p > 0) & (p < 1)).mean()), 1),
                fmt.percent(float((p == 1).mean()), 1),
            ]
        )
    lines.append(
        fmt.table(
            ["region", "never (share of map)", "in some samples", "in every sample"],
            rows,
            right=[False, True, True, True],
        )
    )
    lines.append("")
    lines.append(
        f"robust window: {int(m.robust.sum())} of {m.robust.size} cells (95 % bound on the unsafe probability "
        f"below {m.max_unsafe_probability:g}, check_policy.max_unsafe_probability)"
    )
    for kind in ("ignition", "extinction"):
        band = m.bands[kind]
        q05, q95 = band[0.05][:, 1], band[0.95][:, 1]
        width = q95 - q05
        if np.isfinite(width).any():
            lines.append(
                f"{kind} band (5 % .. 95 %): up to {float(np.nanmax(width)):.1f} K wide, "
                f"median {float(np.nanmedian(width)):.1f} K"
            )
        else:
            lines.append(f"{kind} band: none in the window")
    if m.drivers:
        lines += ["", "drivers (how far one standard deviation of each parameter moves the boundaries):"]
        lines.append(
            fmt.table(
                ["parameter", "ignition K", "extinction K", "unsafe share"],
                [
                    [
                        d["target"],
                        fmt.number(d["ignition_K_per_sd"]),
                        fmt.number(d["extinction_K_per_sd"]),
                        fmt.number(d["unsafe_share_per_sd"]),
                    ]
                    for d in m.drivers
                ],
                right=[False, True, True, True],
            )
        )
    lines += ["", m.message, "", fmt.cautions_block()]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Compute the map and print or write it; 0 on success."""
    from exomap.core.opmap import operating_map

    sc = load_scenario(args.scenario)
    if args.seed is not None and args.samples is None:
        raise CliInputError("--seed", "--seed applies to a probability map: give --samples as well")
    tau_range = None
    if args.residence_time:
        tau_range = tuple(quantity(v, "time", "--residence-time") for v in args.residence_time)
    tin_range = None
    if args.feed_temperature:
        tin_range = tuple(quantity(v, "temperature", "--feed-temperature") for v in args.feed_temperature)
    window = {
        "tau_range": tau_range,
        "T_in_range": tin_range,
        "points": tuple(args.points) if args.points else None,
        "spacing": args.spacing,
    }
    if args.samples is not None:
        from exomap.core.uncertainty import uncertainty_map

        m = uncertainty_map(sc, samples=args.samples or None, seed=args.seed, **window)
    else:
        m = operating_map(sc, **window)
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
        print(render_uncertain(sc, m) if args.samples is not None else render(sc, m))
    return 0
