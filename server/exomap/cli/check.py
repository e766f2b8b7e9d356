"""``exomap check SCENARIO [--residence-time V] [--feed-temperature V] [--branch low|high] [--samples [N]
[--seed S]] [--json]``: the setpoint check (``exomap.core.check.check_setpoint``) as a short report a shift
engineer can paste into a log, or the SI answer document with ``--json``; with ``--samples`` also the check
under the scenario's uncertainty block (``exomap.core.uncertain_check``)."""

from __future__ import annotations

import argparse
from typing import Any

from exomap.cli import _format as fmt
from exomap.cli import (
    add_operating_point_arguments,
    add_scenario_argument,
    load_scenario,
    operating_point,
    print_json,
)

#: Readable names of the margins, with how to print their values.
_MARGINS: tuple[tuple[str, str, str], ...] = (
    ("feed_temperature_rise_to_ignition_K", "feed-temperature rise to ignition", "K"),
    ("residence_time_rise_to_ignition_percent", "residence-time rise to ignition", "%"),
    ("feed_temperature_drop_to_extinction_K", "feed-temperature drop to extinction", "K"),
    ("residence_time_drop_to_extinction_percent", "residence-time drop to extinction", "%"),
    ("steady_temperature_to_max_K", "steady temperature below the maximum", "K"),
    ("mtsr_to_max_K", "MTSR below the maximum", "K"),
    ("valve_opening_to_usable_range_percent", "valve opening inside its usable range", "pt"),
)


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``check`` sub-command."""
    parser = subparsers.add_parser(
        "check",
        help="check a setpoint: margins, upsets, verdict",
        description="Check a setpoint: every steady state, which one the tank is on, its region, margins to "
        "ignition, extinction, the maximum temperature and the valve's usable range, thermal-safety figures, "
        "and a battery of upsets simulated from it; verdict inside, marginal or outside with reasons. Values "
        "take units, e.g. '40 min', '35 degC'; a bare number is SI (s, K).",
    )
    add_scenario_argument(parser)
    add_operating_point_arguments(parser)
    parser.add_argument(
        "--branch",
        choices=("low", "high"),
        help="which stable state the tank is on where there are several (default: low)",
    )
    parser.add_argument(
        "--samples",
        nargs="?",
        const=0,
        type=int,
        metavar="N",
        help="also sample the scenario's uncertainty block: probability that the verdict would be outside or "
        "marginal, quantiles of the steady temperature, MTSR and TMRad (N a power of two; alone: the block's count)",
    )
    parser.add_argument("--seed", type=int, metavar="S", help="seed of the samples (default: the block's, 0)")
    parser.add_argument("--json", action="store_true", help="print the answer document (SI) as JSON")
    return parser


def _margin_value(value: float | None, unit: str) -> str:
    if value is None:
        return "-"
    if unit == "K":
        return fmt.kelvin_difference(value)
    if unit == "pt":
        return f"{value:.1f} % points"
    return f"{value:.0f} %"


def _when(t: float | None) -> str:
    return "-" if t is None else fmt.minutes(t)


#: Alarm kinds in words.
_ALARM_WORDS = {
    "alarm_temperature": "temperature alarm",
    "max_temperature": "maximum temperature",
    "level_high": "level high",
    "level_low": "level low",
    "overflow": "overflow",
    "empty": "empty",
}
#: How an upset ended, in words.
_ENDINGS = {
    "settled": "settled",
    "overflow": "stopped: overflow",
    "empty": "stopped: empty",
    "rising": "still heating at the cap",
    "falling": "still cooling at the cap",
    "oscillating": "still oscillating at the cap",
    "moving": "level still moving at the cap",
    "": "could not be simulated",
}


def _alarms(u: Any) -> str:
    if u.failed:
        return "unknown"
    return ", ".join(f"{_ALARM_WORDS.get(a['kind'], a['kind'])} {fmt.minutes(a['time_s'])}" for a in u.alarms) or "none"


def render(sc: Any, r: Any) -> str:
    """The readable report of a CheckResult."""
    st = r.state
    q = sc.vessel.V_set / r.tau
    lines: list[str] = []
    lines.append(fmt.heading(f"Setpoint check: {sc.title}" if sc.title else "Setpoint check"))
    lines.append(
        f"Operating point: residence time {fmt.minutes(r.tau)}, feed {fmt.celsius(r.T_in)}, flow {fmt.flow(q)}"
    )
    if r.verdict == "undetermined":  # nothing computed from a failed computation is shown (DESIGN.md §6)
        lines += ["VERDICT: UNDETERMINED", "", "What failed:"]
        lines.extend(f"  - {reason}" for reason in r.reasons)
        lines += ["", fmt.cautions_block()]
        return "\n".join(lines)
    lines.append(f"VERDICT: {r.verdict.upper()}   (region: {r.region})")
    lines.append("")
    lines.append("Reasons:")
    lines.extend(f"  - {reason}" for reason in r.reasons)
    lines.append("")
    lines.append(
        f"Tank state: {fmt.celsius(st.T)}, {st.stability}"
        + (" (oscillatory)" if st.oscillatory else "")
        + f", conversion {fmt.percent(st.conversion, 1)}, valve {fmt.opening(st.valve_opening)}"
    )
    lines.append(f"Assumed: {r.assumption}")
    others = [fmt.celsius(s.T) + f" {s.stability}" for i, s in enumerate(r.steady.states) if i != r.state_index]
    if others:
        lines.append("Other steady states: " + ", ".join(others))
    lines.append("")
    rows = []
    for key, label, unit in _MARGINS:
        m = r.margin(key)
        thr = "-" if m.threshold is None else _margin_value(m.threshold, unit)
        status = {True: "ok", False: "LOW", None: ""}[m.ok]
        rows.append([label, _margin_value(m.value, unit), thr, status, m.note if m.value is None else ""])
    lines.append("Margins (thresholds: project defaults unless the scenario's check_policy sets them):")
    lines.append(fmt.table(["margin", "value", "threshold", "", "note"], rows, right=[False, True, True, False, False]))
    lines.append("")
    s = r.safety
    tmr = "-" if s.tmr_ad is None or s.tmr_ad == float("inf") else fmt.minutes(s.tmr_ad)
    decomposition = (
        f"TD24 {fmt.celsius(s.td24)}" if s.has_decomposition else "no decomposition reaction given (no TD24)"
    )
    lines.append(
        f"Thermal safety: dT_ad {fmt.kelvin_difference(s.dT_ad)}, MTSR {fmt.celsius(s.mtsr)}, TMRad {tmr} from the "
        f"operating state, {decomposition}, criticality class "
        + ("-" if s.criticality_class is None else str(s.criticality_class))
        + f" ({s.criticality_reason})"
    )
    mtsr = r.mtsr_block()
    lines.append(f"  {mtsr['assumes']}.")
    if mtsr["note"]:
        lines.append(f"  Beside it: {mtsr['note']}.")
    lines.append("")
    cap = fmt.minutes(r.upsets[0].duration) if r.upsets else "-"
    lines.append(
        f"Upsets from the operating state, each followed until it settles or stops (at most {cap}); maximum "
        f"temperature {fmt.celsius(sc.limits.T_max)}"
        + (f", alarm {fmt.celsius(sc.limits.T_alarm)}" if sc.limits.T_alarm is not None else "")
        + f"; time to act {fmt.minutes(sc.policy.min_time_to_act)}:"
    )
    rows = []
    for u in r.upsets:
        rows.append(
            [
                u.label,
                fmt.celsius(u.peak_T),
                _when(None if u.failed else u.peak_t),
                f"{u.level_min:.2f}..{u.level_max:.2f} m" if u.level_min == u.level_min else "-",
                fmt.celsius(u.final_T),
                _ENDINGS.get(u.ending, u.ending)
                + ("" if u.failed else f" at {fmt.minutes(u.end_time)}")
                + (f", at most {fmt.celsius(u.ceiling_T)}" if u.rising and u.ceiling_T == u.ceiling_T else ""),
                _alarms(u),
            ]
        )
    lines.append(
        fmt.table(
            ["upset", "peak", "at", "level", "end", "how it ended", "alarms (time after the upset)"],
            rows,
            right=[False, True, True, True, True, False, False],
        )
    )
    lines += ["", fmt.cautions_block()]
    return "\n".join(lines)


def render_uncertainty(block: dict) -> str:
    """The uncertainty part of a check answer in words."""
    n = block["samples"]
    c = block["counts"]
    up = block["upper_bound_95"]
    q = block["quantiles"]

    def trio(d: dict, show: Any) -> str:
        return " / ".join("-" if d[k] is None else show(d[k]) for k in ("q05", "q50", "q95"))

    lines = [
        f"Under the stated uncertainty ({n} samples, seed {block['seed']}; upsets on the nominal parameters only):",
        f"  verdict outside in {c['outside']} samples: probability {block['probability_outside']:.3f}, "
        f"95 % upper bound {up['outside']:.3f} (acceptable: {block['max_unsafe_probability']:g})",
        f"  marginal or worse in {c['marginal_or_worse']} samples: probability "
        f"{block['probability_marginal_or_worse']:.3f}, 95 % upper bound {up['marginal_or_worse']:.3f}",
        f"  steady temperature 5/50/95 %: {trio(q['temperature_K'], fmt.celsius)}",
        f"  MTSR 5/50/95 %: {trio(q['mtsr_K'], fmt.celsius)}",
        f"  TMRad 5/50/95 %: {trio(q['tmr_ad_s'], fmt.minutes)}",
    ]
    if c["undetermined"]:
        lines.append(f"  {c['undetermined']} samples could not be computed (counted as outside)")
    lines.append(f"  bounds: {block['upper_bound_basis']}")
    if block["drivers"]:
        lines.append(
            "  drivers (K per standard deviation, steady temperature / MTSR): "
            + "; ".join(
                f"{d['target']} {fmt.number(d['temperature_K_per_sd'])} / {fmt.number(d['mtsr_K_per_sd'])}"
                for d in block["drivers"]
            )
        )
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    """Run the check and print it; 0 on success (whatever the verdict)."""
    from dataclasses import replace

    from exomap.cli import CliInputError
    from exomap.core.check import check_setpoint

    sc = load_scenario(args.scenario)
    tau, T_in = operating_point(args)
    if args.seed is not None and args.samples is None:
        raise CliInputError("--seed", "--seed applies to sampling: give --samples as well")
    if args.samples is not None:
        from exomap.core.uncertain_check import uncertain_check

        u = uncertain_check(sc, tau=tau, T_in=T_in, branch=args.branch, samples=args.samples or None, seed=args.seed)
        if args.json:
            print_json(u.to_dict())
            return 0
        text = render(sc, replace(u.nominal, verdict=u.verdict, reasons=u.reasons))
        head, sep, tail = text.rpartition(fmt.cautions_block())
        print(head + render_uncertainty(u.block()) + "\n\n" + sep + tail)
        return 0
    result = check_setpoint(sc, tau=tau, T_in=T_in, branch=args.branch)
    if args.json:
        print_json(result.to_dict())
    else:
        print(render(sc, result))
    return 0
