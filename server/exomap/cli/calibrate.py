"""``exomap calibrate SCENARIO DATA.csv --map TAG=ROLE ... --fit TARGET ... [--reference-temperature T]
[--output ROLE] [--save FILE] [--json]``: fit scenario parameters to plant data (``exomap.core.calibrate``)."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from exomap.cli import CliInputError, print_json, quantity, read_scenario_document
from exomap.cli import _format as fmt
from exomap.cli.plant import add_data_arguments, load_dataset, windowed


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    from exomap.core.calibrate import TARGETS_HELP

    parser = subparsers.add_parser(
        "calibrate",
        help="fit scenario parameters to plant data, with standard errors and 95 % intervals",
        description="Calibrate: least squares on the replay of plant data. Estimates with standard errors, 95 % "
        "intervals by profile likelihood, correlations, the residual spread and a warning where the data cannot "
        "determine a parameter; the result is a new scenario with the fitted values.",
    )
    add_data_arguments(parser)
    parser.add_argument("--fit", action="append", default=[], metavar="TARGET", help=f"a target to fit: {TARGETS_HELP}")
    parser.add_argument(
        "--reference-temperature", metavar="T", help="where rate constants are stated (default: mean reactor T)"
    )
    parser.add_argument(
        "--output",
        action="append",
        default=[],
        metavar="ROLE",
        help="recorded output to fit (default: reactor_temperature)",
    )
    parser.add_argument("--save", metavar="FILE", help="write the calibrated scenario document to FILE")
    parser.add_argument("--json", action="store_true", help="print the calibration answer document (SI) as JSON")
    return parser


def answer(doc, ds, cal, source_id=None, window=None) -> dict:  # noqa: ANN001
    from exomap.schema import scenario_id
    from exomap.schema.calibration import calibrated_document
    from exomap.schema.plantdata import window as whole

    win = window or whole(ds)[1]
    out = cal.to_dict()
    out["dataset"] = ds.summary()
    out["window"] = win
    out["scenario"] = calibrated_document(doc, cal, dataset_id=ds.dataset_id, source_id=source_id, window=win)
    out["derived_from"] = {"scenario_id": source_id or scenario_id(doc), "dataset_id": ds.dataset_id,
                           "start": win["start"], "end": win["end"]}  # fmt: skip
    return out


def run(args: argparse.Namespace) -> int:
    from exomap.core.calibrate import calibrate
    from exomap.schema import parse_scenario

    if not args.fit:
        raise CliInputError("--fit", "name at least one target to fit, e.g. --fit reactions[0].rate_constant")
    doc = read_scenario_document(args.scenario)
    sc = parse_scenario(doc).to_core()
    ds = load_dataset(args)
    part, win = windowed(args, ds, len(args.fit) + 2)
    T_ref = quantity(args.reference_temperature, "temperature", "--reference-temperature")
    cal = calibrate(sc, part.record(), args.fit, T_ref=T_ref, outputs=tuple(args.output) or ("reactor_temperature",))
    ans = answer(doc, ds, cal, window=win)
    if args.save:
        try:
            Path(args.save).write_text(json.dumps(ans["scenario"], indent=2) + "\n", encoding="utf-8")
        except OSError as exc:
            raise CliInputError("--save", f"cannot write {args.save}: {exc.strerror}") from None
    if args.json:
        print_json(ans)
        return 0
    rows = []
    for e in ans["estimates"]:
        lo, hi = e["interval_95"]
        rows.append([e["target"], f"{e['value']:.6g}", f"{e['standard_error']:.3g}",
                     f"{'open' if lo is None else format(lo, '.6g')} .. {'open' if hi is None else format(hi, '.6g')}",
                     e["unit"]])  # fmt: skip
    lines = [
        f"Calibration on dataset {ds.dataset_id} ({ans['observations']} residuals), reference temperature "
        f"{fmt.celsius(cal.T_ref)}",
        *([] if win["whole"] else [f"window: {win['start']} .. {win['end']}, {win['records']} records"]),
        "",
        fmt.table(["target", "estimate", "std. error", "95 % interval (profile)", "unit (SI)"], rows),
        "",
        "residual standard deviation: "
        + ", ".join(f"{k.replace('_', ' ')} {v:.3g}" for k, v in ans["residual_sd"].items()),
    ]
    lines += [f"warning: {w}" for w in ans["warnings"]]
    if args.save:
        lines.append(f"calibrated scenario written to {args.save}")
    lines += ["", fmt.cautions_block()]
    print("\n".join(lines))
    return 0
