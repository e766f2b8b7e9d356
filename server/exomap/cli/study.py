"""``exomap study STUDY.json --out RESULTS.jsonl [--scheduler ADDRESS] [--workers N] [--store DIR|URL]``: a batch
of scenarios x setpoints x analyses (``exomap.study``), one JSON line per case, with a progress bar on stderr.

A rerun with the same ``--out`` skips every case already written; ``--retry-failed`` runs the failed ones again.
Exit status 0 when every case succeeded, 3 when some failed (their lines say why), 2 for a bad study or option.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from exomap.cli import EXIT_INPUT, EXIT_SOLVER

#: Width of the progress bar, in characters.
BAR = 30


def add_parser(subparsers: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``study`` sub-command."""
    parser = subparsers.add_parser(
        "study",
        help="run a batch study: scenarios x setpoints x analyses, one JSON line each",
        description="Run a study (format exomap-study/1: scenarios, setpoints, analyses) on a local process pool, "
        "or on an existing Dask cluster with --scheduler. One JSON line per (scenario, setpoint, analysis) is "
        "appended to --out as each finishes; a rerun skips what is already there.",
    )
    parser.add_argument("study", metavar="STUDY", type=Path, help="the study file (JSON, format exomap-study/1)")
    parser.add_argument("--out", required=True, type=Path, metavar="RESULTS", help="the results file (JSON lines)")
    parser.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="address of a running Dask scheduler, e.g. tcp://10.0.0.5:8786 (its workers need exomap installed); "
        "default: a local process pool",
    )
    parser.add_argument("--workers", type=int, metavar="N", help="local worker processes (default: the number of CPUs)")
    parser.add_argument(
        "--store",
        metavar="DIR|URL",
        help="scenario store for ids and 'all saved': a data folder or a database URL (default: the study's "
        "'store', else EXOMAP_DATABASE_URL, else EXOMAP_DATA_DIR, else ./data)",
    )
    parser.add_argument("--retry-failed", action="store_true", help="run the cases written as failed again")
    return parser


def _clock(seconds: float | None) -> str:
    if seconds is None:
        return "--:--"
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m:02d}:{s:02d}"


class ProgressBar:
    """A one-line bar with counts, elapsed time and ETA on stderr (redrawn in place on a terminal; on a pipe or
    a log file, a line every 10 s and at the end)."""

    def __init__(self, stream=None) -> None:  # noqa: ANN001 - a text stream; default: sys.stderr at that moment
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(stream, "isatty", lambda: False)())
        self._last = 0.0

    def __call__(self, p) -> None:  # noqa: ANN001 - exomap.study.Progress
        todo = p.total - p.skipped
        finished = p.done >= todo
        now = time.monotonic()
        if not self.tty and not finished and now - self._last < 10 and p.done > 0:
            return
        self._last = now
        share = (p.skipped + p.done) / p.total if p.total else 1.0
        filled = int(round(BAR * share))
        line = (
            f"[{'#' * filled}{'.' * (BAR - filled)}] {p.skipped + p.done}/{p.total} {share:4.0%}"
            f"  elapsed {_clock(p.elapsed)}  ETA {_clock(0.0 if finished else p.eta)}"
            + (f"  failed {p.failed}" if p.failed else "")
            + (f"  (skipped {p.skipped} already written)" if p.skipped else "")
        )
        if self.tty:
            self.stream.write("\r" + line + ("\n" if finished else ""))
        else:
            self.stream.write(line + "\n")
        self.stream.flush()


def run(args: argparse.Namespace) -> int:
    """Plan and run the study; the exit status says whether every case succeeded."""
    from exomap.study import StudyError, load_study, plan_study, run_study

    if args.workers is not None and args.workers < 1:
        print("error: --workers: expected a whole number >= 1", file=sys.stderr)
        return EXIT_INPUT
    try:
        doc = load_study(args.study)
        plan = plan_study(doc, base_dir=args.study.resolve().parent, store=args.store)
        where = f"Dask scheduler {args.scheduler}" if args.scheduler else "a local process pool"
        print(
            f"study {plan.title or args.study.name}: {len(plan.keys)} cases, on {where}; results in {args.out}",
            file=sys.stderr,
        )
        state = run_study(
            plan,
            args.out,
            scheduler=args.scheduler,
            workers=args.workers,
            retry_failed=args.retry_failed,
            progress=ProgressBar(),
        )
    except StudyError as exc:
        for e in exc.errors:
            print(f"error: {e['field']}: {e['message']}", file=sys.stderr)
        return EXIT_INPUT
    if state.failed:
        print(f"{state.failed} case(s) failed; their lines in {args.out} say why", file=sys.stderr)
        return EXIT_SOLVER
    return 0
