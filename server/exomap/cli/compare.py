"""``exomap compare A B [--residence-time LO HI] [--feed-temperature LO HI] [--points N M] [--setpoint-a TAU T_IN]
[--setpoint-b TAU T_IN] [--no-checks] [--json]``: before and after a change, side by side
(``exomap.core.compare``, ``exomap.schema.diff``).

A and B are scenario files, demo names or ids of scenarios saved in the server's store (``--data-dir``, default
``$EXOMAP_DATA_DIR`` or ``data``). Give the same scenario twice with two setpoints to compare setpoints.
"""

from __future__ import annotations

import argparse
import json
import os
import re
from pathlib import Path
from typing import Any

from exomap.cli import CliInputError, demo_names, print_json, quantity, read_scenario_document
from exomap.cli import _format as fmt

_ID_RE = re.compile(r"^[0-9a-f]{16}$")


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``compare`` sub-command."""
    parser = subparsers.add_parser(
        "compare",
        help="before and after a change: fields, map cells that changed region, both checks",
        description="Compare two scenarios, or two setpoints of one: the fields that differ (plant units), the "
        "map cells whose region changed (from -> to, counted; worse and better apart) on one shared grid, both "
        "sets of boundaries and both setpoint checks. Values take units ('5 min', '20 degC').",
    )
    where = "a scenario JSON file, a demo name (" + ", ".join(demo_names()) + ") or a saved scenario's id"
    parser.add_argument("a", metavar="A", help=f"before: {where}")
    parser.add_argument("b", metavar="B", help=f"after: {where}")
    parser.add_argument("--residence-time", nargs=2, metavar=("LO", "HI"), help="shared map window, e.g. '5 min' '3 h'")
    parser.add_argument("--feed-temperature", nargs=2, metavar=("LO", "HI"), help="e.g. '0 degC' '80 degC'")
    parser.add_argument("--points", nargs=2, type=int, metavar=("N_TAU", "N_TIN"), help="grid of the shared map")
    parser.add_argument("--setpoint-a", nargs=2, metavar=("TAU", "T_IN"), help="A's setpoint (default: A's feed)")
    parser.add_argument("--setpoint-b", nargs=2, metavar=("TAU", "T_IN"), help="B's setpoint (default: B's feed)")
    parser.add_argument("--branch-a", choices=("low", "high"), help="A's branch where there are several states")
    parser.add_argument("--branch-b", choices=("low", "high"), help="B's branch where there are several states")
    parser.add_argument("--no-checks", action="store_true", help="compare the maps only (skip both checks)")
    parser.add_argument("--data-dir", help="store folder for saved ids (default: $EXOMAP_DATA_DIR or 'data')")
    parser.add_argument("--json", action="store_true", help="print the compare answer document (SI) as JSON")
    return parser


def document(ref: str, data_dir: str | None, option: str) -> dict[str, Any]:
    """The scenario document of a file, a demo name or a saved id."""
    if Path(ref).is_file() or ref in demo_names() or ref.removesuffix(".json") in demo_names():
        return read_scenario_document(ref)
    if _ID_RE.match(ref):
        # the store lives in the web layer; only its plain SQLite reader is used here, no app is built
        from exomap.web.store import ScenarioStore

        folder = Path(data_dir or os.environ.get("EXOMAP_DATA_DIR") or "data")
        if (folder / ScenarioStore.FILE_NAME).is_file():
            stored = ScenarioStore(folder).get(ref)
            if stored is not None:
                return json.loads(stored.document)
        raise CliInputError(option, f"no saved scenario with id {ref!r} in {folder}")
    return read_scenario_document(ref)


def _setpoint(values: list[str] | None, branch: str | None, option: str, sc: Any) -> Any:
    from exomap.core.compare import Setpoint

    if values is None:
        return Setpoint(sc.tau_nominal, sc.T_in, branch)
    tau = quantity(values[0], "time", option)
    T_in = quantity(values[1], "temperature", option)
    return Setpoint(float(tau), float(T_in), branch)  # type: ignore[arg-type]


def render(answer: dict[str, Any]) -> str:
    """A readable summary in plant units."""
    a, b = answer["a"], answer["b"]
    lines = [fmt.heading("Compare"), "", f"A (before): {a['title'] or a['scenario_id']}  [{a['scenario_id']}]"]
    lines.append(f"B (after):  {b['title'] or b['scenario_id']}  [{b['scenario_id']}]")
    for side in ("a", "b"):
        sp = answer[f"setpoint_{side}"]
        lines.append(
            f"setpoint {side.upper()}: residence time {fmt.minutes(sp['residence_time_s'])}, "
            f"flow {fmt.flow(sp['flow_m3_per_s'])}, feed {fmt.celsius(sp['feed_temperature_K'])}"
        )
    lines.append("")
    if answer["same_scenario"]:
        lines.append("Fields: the same scenario on both sides")
    elif not answer["fields"]:
        lines.append("Fields: none differ")
    else:
        rows = [[d["field"], d["change"], d["a_text"], d["b_text"]] for d in answer["fields"]]
        lines.append(fmt.table(["field", "change", "A", "B"], rows))
    m = answer["map"]
    lines += [
        "",
        f"Map: {m['changed_count']} of {m['cells']} cells changed region "
        f"({m['worse_count']} became worse, {m['better_count']} became better)",
    ]
    labels = {d["key"]: d["key"] for d in m["legend"]}
    if m["transitions"]:
        rows = [[labels[t["from"]], labels[t["to"]], str(t["cells"])] for t in m["transitions"]]
        lines.append(fmt.table(["from", "to", "cells"], rows, right=[False, False, True]))
    checks = answer.get("checks")
    if checks:
        lines += ["", "Checks:"]
        for side in ("a", "b"):
            c = checks[side]
            lines.append(f"  {side.upper()}: {c['verdict']}")
            for r in c.get("reasons", []):
                lines.append(f"     - {r}")
    lines += ["", fmt.cautions_block()]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Compare and print; 0 on success."""
    from exomap.core.compare import compare
    from exomap.schema import parse_scenario
    from exomap.schema.diff import compare_header

    doc_a = document(args.a, args.data_dir, "A")
    doc_b = document(args.b, args.data_dir, "B")
    pa, pb = parse_scenario(doc_a), parse_scenario(doc_b)
    sc_a, sc_b = pa.to_core(), pb.to_core()
    tau_range = tin_range = None
    if args.residence_time:
        tau_range = tuple(quantity(v, "time", "--residence-time") for v in args.residence_time)
    if args.feed_temperature:
        tin_range = tuple(quantity(v, "temperature", "--feed-temperature") for v in args.feed_temperature)
    result = compare(
        sc_a,
        sc_b,
        setpoint_a=_setpoint(args.setpoint_a, args.branch_a, "--setpoint-a", sc_a),
        setpoint_b=_setpoint(args.setpoint_b, args.branch_b, "--setpoint-b", sc_b),
        tau_range=tau_range,  # type: ignore[arg-type]
        T_in_range=tin_range,  # type: ignore[arg-type]
        points=tuple(args.points) if args.points else None,  # type: ignore[arg-type]
        checks=not args.no_checks,
    )
    answer = {**compare_header(pa, pb), **result.to_dict()}
    if args.json:
        print_json(answer)
    else:
        print(render(answer))
    return 0
