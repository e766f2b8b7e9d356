"""``exomap steady SCENARIO --residence-time V --feed-temperature V [--json]``: every steady state at an
operating point with its stability (``exomap.core.steady.steady_states``)."""

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


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``steady`` sub-command."""
    parser = subparsers.add_parser(
        "steady",
        help="every steady state and its stability at an operating point",
        description="Every steady state of the tank at one residence time and feed temperature, with its "
        "stability, eigenvalues and the valve opening needed at the set level. Values take units, e.g. "
        "'40 min', '35 degC'; a bare number is SI (s, K).",
    )
    add_scenario_argument(parser)
    add_operating_point_arguments(parser)
    parser.add_argument(
        "--coolant-temperature",
        metavar="VALUE",
        help="coolant temperature, e.g. '15 degC' (default: the scenario's jacket)",
    )
    parser.add_argument("--json", action="store_true", help="print the answer document (SI) as JSON")
    return parser


def render(sc, result) -> str:  # noqa: ANN001 - Scenario, SteadyStateResult
    """The human-readable table of a SteadyStateResult."""
    lines = []
    if sc.title:
        lines += [fmt.heading(sc.title), ""]
    lines.append(
        f"Operating point: residence time {fmt.minutes(result.tau)}, feed {fmt.celsius(result.T_in)}, "
        f"flow {fmt.flow(result.q)}"
    )
    n = len(result.states)
    lines.append(f"{n} steady state{'s' if n != 1 else ''} (lowest temperature first)")
    lines.append("")
    key = sc.species[sc.key_species]
    rows = []
    for i, s in enumerate(result.states, start=1):
        lead = max(s.eigenvalues, key=lambda e: e.real) if s.eigenvalues else None
        rows.append(
            [
                str(i),
                fmt.celsius(s.T),
                fmt.percent(s.conversion, 1),
                s.stability + (" (oscillatory)" if s.oscillatory else ""),
                "-" if lead is None else f"{lead.real:.3g}" + (f" ± {abs(lead.imag):.3g}i" if lead.imag else ""),
                fmt.opening(s.valve_opening),
                fmt.number(s.sensitivity, ".2f"),
                "above max" if s.T > sc.limits.T_max else "",
            ]
        )
    lines.append(
        fmt.table(
            [
                "#",
                "temperature",
                f"conversion of {key}",
                "stability",
                "leading eigenvalue [1/s]",
                "valve opening",
                "dT/dT_in",
                "limit",
            ],
            rows,
            right=[True, True, True, False, True, True, True, False],
        )
    )
    if not result.success:
        lines += ["", f"note: {result.message}"]
    lines += [
        "",
        f"Maximum temperature {fmt.celsius(sc.limits.T_max)}; valve usable range "
        f"{fmt.percent(sc.policy.valve_min)}..{fmt.percent(sc.policy.valve_max)} (common practice).",
        "",
        fmt.cautions_block(),
    ]
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Compute and print the steady states; 0 on success."""
    from exomap.core.steady import steady_states

    sc = load_scenario(args.scenario)
    tau, T_in = operating_point(args)
    T_c = quantity(args.coolant_temperature, "temperature", "--coolant-temperature")
    result = steady_states(sc, sc.tau_nominal if tau is None else tau, sc.T_in if T_in is None else T_in, T_c=T_c)
    if args.json:
        print_json(result.to_dict())
    else:
        print(render(sc, result))
    return 0
