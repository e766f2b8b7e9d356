"""``exomap replay SCENARIO DATA.csv --map TAG=ROLE ... [--time COLUMN] [--unit TAG=UNIT] [--json]``: the scenario
driven by the recorded inputs, beside the recorded outputs (``exomap.core.replay``)."""

from __future__ import annotations

import argparse

from exomap.cli import _format as fmt
from exomap.cli import load_scenario, print_json
from exomap.cli.plant import add_data_arguments, load_dataset, windowed


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "replay",
        help="drive the scenario with recorded plant inputs and compare with the recorded outputs",
        description="Replay plant data: the scenario starts at the steady state of the first record and is driven "
        "by the recorded feed flow, feed temperature, coolant temperature and feed concentrations; the simulated "
        "reactor temperature, level, valve opening and outlet flow are compared with the recorded ones.",
    )
    add_data_arguments(parser)
    parser.add_argument("--json", action="store_true", help="print the replay answer document (SI) as JSON")
    return parser


def answer(ds, res, window=None) -> dict:  # noqa: ANN001 - Dataset, ReplayResult, window description
    from exomap.schema.plantdata import window as whole

    return {"dataset": ds.summary(), "window": window or whole(ds)[1], **res.to_dict()}


def run(args: argparse.Namespace) -> int:
    from exomap.core.replay import replay

    sc = load_scenario(args.scenario)
    ds = load_dataset(args)
    part, win = windowed(args, ds)
    res = replay(sc, part.record())
    if args.json:
        print_json(answer(ds, res, win))
        return 0
    s = ds.summary()
    lines = [
        f"Dataset {s['dataset_id']}: {s['records']} records, {s['start']} .. {s['end']}"
        f" ({fmt.minutes(s['duration_s'])}), {len(s['gaps'])} gaps, "
        f"bad values dropped: {sum(s['dropped_bad'].values())}",
        *[f"note: {n}" for n in s["notes"]],
        *([] if win["whole"] else [f"window: {win['start']} .. {win['end']}, {win['records']} records"]),
        f"start: steady state at {fmt.celsius(res.start_T)}",
        "",
    ]
    rows = []
    units = {"reactor_temperature": ("K", 1.0), "level": ("m", 1.0), "valve_opening": ("%", 100.0),
             "outlet_flow": ("m^3/h", 3600.0)}  # fmt: skip
    for role, st in res.residual_statistics().items():
        u, f = units[role]
        rows.append([role.replace("_", " "), str(st["count"]), f"{st['mean'] * f:.3g} {u}", f"{st['rms'] * f:.3g} {u}",
                     f"{st['max_abs'] * f:.3g} {u}"])  # fmt: skip
    lines.append(fmt.table(["output", "records", "mean residual", "RMS", "largest"], rows))
    lines += ["", "residual = simulated - recorded", "", fmt.cautions_block()]
    print("\n".join(lines))
    return 0
