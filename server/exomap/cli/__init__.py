"""Command-line interface: ``exomap serve|steady|branch|map|check|simulate|compare``.

Each sub-command lives in its own module ``exomap.cli.<name>`` exposing ``add_parser(subparsers)`` and
``run(args) -> int``. Only the module of the command being run is imported (``exomap steady`` never loads the
web layer); a module that is missing from the installation gives a one-line error, not a traceback.

Shared here: the scenario argument (a JSON file or the name of a bundled demo), option values with units
(``"40 min"``, ``"35 degC"``), and the mapping of domain errors to ``error: <field>: <message>`` on stderr
with exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import json
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

#: Sub-commands in the order they are listed, with their one-line help.
COMMANDS: dict[str, str] = {
    "serve": "run the web service (JSON API and pages)",
    "steady": "every steady state and its stability at an operating point",
    "branch": "steady states along residence time or feed temperature, with turning and Hopf points",
    "map": "operating map of residence time against feed temperature",
    "check": "check a setpoint: margins, upsets, verdict",
    "simulate": "dynamic response to events",
    "replay": "drive the scenario with recorded plant data, beside the recorded outputs",
    "calibrate": "fit scenario parameters to plant data, with uncertainty",
    "compare": "before and after a change: fields, map cells that changed region, both checks",
    "study": "run a batch study: scenarios x setpoints x analyses, one JSON line each",
}

#: Exit status for bad input (argparse uses 2 as well).
EXIT_INPUT = 2
#: Exit status when a solver fails or a time budget runs out.
EXIT_SOLVER = 3


class CliInputError(ValueError):
    """Bad command-line input; ``field`` names the option or argument."""

    def __init__(self, field: str, message: str) -> None:
        super().__init__(message)
        self.field = field


# -- scenarios --------------------------------------------------------------------------------------------
def demo_names() -> list[str]:
    """Names of the bundled demo scenarios (files of the package ``exomap.demos``, without ``.json``)."""
    from importlib import resources

    try:
        folder = resources.files("exomap.demos")
    except ModuleNotFoundError:
        return []
    return sorted(p.name[: -len(".json")] for p in folder.iterdir() if p.name.endswith(".json"))


def read_scenario_document(name_or_path: str) -> dict[str, Any]:
    """The JSON document of a scenario given as a file path or a bundled demo name."""
    from importlib import resources

    path = Path(name_or_path)
    if path.is_file():
        text = path.read_text(encoding="utf-8")
        where = str(path)
    else:
        stem = name_or_path[: -len(".json")] if name_or_path.endswith(".json") else name_or_path
        if stem not in demo_names():
            names = ", ".join(demo_names()) or "none installed"
            raise CliInputError(
                "scenario", f"no file {name_or_path!r} and no bundled demo of that name (demos: {names})"
            )
        text = (resources.files("exomap.demos") / f"{stem}.json").read_text(encoding="utf-8")
        where = f"demo {stem}"
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise CliInputError(
            "scenario", f"{where} is not valid JSON: {exc.msg} at line {exc.lineno} column {exc.colno}"
        ) from None
    if not isinstance(doc, dict):
        raise CliInputError("scenario", f"{where} is not a JSON object")
    return doc


def load_scenario(name_or_path: str) -> Any:
    """The core ``Scenario`` of a file path or bundled demo name (raises ScenarioError when invalid)."""
    from exomap.schema import parse_scenario

    return parse_scenario(read_scenario_document(name_or_path)).to_core()


def add_scenario_argument(parser: argparse.ArgumentParser) -> None:
    """The positional SCENARIO argument every computing sub-command takes."""
    parser.add_argument(
        "scenario",
        metavar="SCENARIO",
        help="a scenario JSON file, or the name of a bundled demo (" + ", ".join(demo_names()) + ")",
    )


def add_operating_point_arguments(parser: argparse.ArgumentParser, *, what: str = "") -> None:
    """The ``--residence-time`` and ``--feed-temperature`` options of the computing sub-commands; ``what``
    qualifies them (e.g. "held fixed or marked")."""
    tail = f" {what}" if what else ""
    parser.add_argument(
        "--residence-time",
        metavar="VALUE",
        help=f"residence time V/q{tail}, e.g. '40 min' (default: the scenario's feed flow)",
    )
    parser.add_argument(
        "--feed-temperature",
        metavar="VALUE",
        help=f"feed temperature{tail}, e.g. '35 degC' (default: the scenario's)",
    )


def operating_point(args: argparse.Namespace) -> tuple[float | None, float | None]:
    """(tau [s], T_in [K]) from the options of :func:`add_operating_point_arguments`; None where not given."""
    return (
        quantity(args.residence_time, "time", "--residence-time"),
        quantity(args.feed_temperature, "temperature", "--feed-temperature"),
    )


def quantity(value: str | None, dimension: str, option: str) -> float | None:
    """An option value with units (``"40 min"``) in SI; a bare number is SI (s, K, m^3/s, ...)."""
    if value is None:
        return None
    from exomap.schema import parse_quantity

    text = value.strip()
    try:
        number: object = float(text)
    except ValueError:
        number = text
    return parse_quantity(number, dimension, option)


def _plain(value: Any) -> Any:
    # numpy scalars and arrays orjson does not take natively (e.g. a non-contiguous slice)
    for name in ("tolist", "item"):
        convert = getattr(value, name, None)
        if callable(convert):
            return convert()
    raise TypeError(f"{type(value).__name__} is not JSON serializable")


def print_json(document: Any) -> None:
    """Write an answer document as JSON to stdout: indented for a person at a terminal, compact when piped
    or redirected (a program reads it; indenting a 200 x 200 map would cost more than computing it).

    orjson encodes (NaN and infinities become null, so the output is strict JSON), the same encoder as the API.
    """
    import orjson

    option = orjson.OPT_SERIALIZE_NUMPY | orjson.OPT_NON_STR_KEYS
    if _is_terminal(sys.stdout):
        option |= orjson.OPT_INDENT_2
    sys.stdout.write(orjson.dumps(document, default=_plain, option=option).decode("utf-8"))
    sys.stdout.write("\n")


def _is_terminal(stream: Any) -> bool:
    isatty = getattr(stream, "isatty", None)
    try:
        return bool(isatty()) if callable(isatty) else False
    except (OSError, ValueError):  # a closed or detached stream
        return False


# -- parser and dispatch ----------------------------------------------------------------------------------
def _chosen(argv: Sequence[str]) -> str | None:
    for arg in argv:
        if arg in COMMANDS:
            return arg
        if not arg.startswith("-"):
            return None
    return None


def _missing(name: str, reason: str) -> Any:
    def run(args: argparse.Namespace) -> int:
        print(f"error: {name}: this command is not available in this installation ({reason})", file=sys.stderr)
        return EXIT_INPUT

    return run


def build_parser(argv: Sequence[str]) -> argparse.ArgumentParser:
    """The ``exomap`` parser; only the chosen sub-command's module is imported."""
    from exomap import __version__

    parser = argparse.ArgumentParser(
        prog="exomap",
        description="Steady states, operating maps, setpoint checks and dynamics of exothermic stirred tanks. "
        "Screening aid, not a design or safety basis.",
    )
    parser.add_argument("--version", action="version", version=f"exomap {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    chosen = _chosen(argv)
    for name, help_text in COMMANDS.items():
        if name == chosen:
            try:
                module = importlib.import_module(f"exomap.cli.{name}")
            except ModuleNotFoundError as exc:
                reason = f"module {exc.name} is missing"
            except ImportError as exc:
                reason = f"import failed: {exc}"
            else:
                sub = module.add_parser(subparsers)
                sub.set_defaults(run=module.run)
                continue
            sub = subparsers.add_parser(name, help=help_text, add_help=True)
            sub.add_argument("rest", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)
            sub.set_defaults(run=_missing(name, reason))
        else:
            subparsers.add_parser(name, help=help_text)
    return parser


def report(exc: BaseException) -> int:
    """Print a domain error as ``error: <field>: <message>`` lines; return the exit status."""
    from exomap.core.errors import BudgetExceededError, ConvergenceError, ModelInputError

    errors = getattr(exc, "errors", None)
    if isinstance(errors, list):
        for e in errors:
            print(f"error: {e['field']}: {e['message']}", file=sys.stderr)
        return EXIT_INPUT
    if isinstance(exc, (ModelInputError, CliInputError)):
        print(f"error: {exc.field or 'input'}: {exc}", file=sys.stderr)
        return EXIT_INPUT
    if isinstance(exc, (ConvergenceError, BudgetExceededError)):
        print(f"error: solver: {exc}", file=sys.stderr)
        return EXIT_SOLVER
    raise exc


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``exomap`` console script; returns the exit status."""
    from exomap.core.errors import BudgetExceededError, ConvergenceError, ModelInputError
    from exomap.schema.errors import ScenarioError

    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    run = getattr(args, "run", None)
    if run is None:
        parser.print_help(sys.stderr)
        return EXIT_INPUT
    try:
        return int(run(args) or 0)
    except (ScenarioError, ModelInputError, CliInputError, ConvergenceError, BudgetExceededError) as exc:
        return report(exc)
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # stdout closed early (| head): nothing more to say
        return 0
