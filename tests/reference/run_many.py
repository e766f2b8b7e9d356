"""Run the differential check on many random scenarios and print a summary.

    nice .venv/bin/python tests/reference/run_many.py --start 0 --count 500 --level quick --out results.jsonl

Each line of the output file is one scenario: its seed, what was compared, what was skipped as
ill-conditioned, and every disagreement with exomap. The summary counts them by kind.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
import traceback
import warnings
from collections import Counter
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reference.compare import compare_case  # noqa: E402
from reference.scenarios import random_case  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--start", type=int, default=0)
    ap.add_argument("--count", type=int, default=100)
    ap.add_argument("--level", choices=("bulk", "lite", "quick", "full"), default="quick")
    ap.add_argument("--out", type=Path, default=None)
    args = ap.parse_args(argv)
    # the test suite's policy (pyproject: filterwarnings): a RuntimeWarning raised in exomap is an error
    warnings.filterwarnings("error", category=RuntimeWarning, module=r"exomap\..*")
    kinds: Counter = Counter()
    compared: Counter = Counter()
    skipped: Counter = Counter()
    bad_seeds = []
    t0 = time.time()
    fh = args.out.open("a", encoding="utf-8") if args.out else None
    for seed in range(args.start, args.start + args.count):
        case = random_case(seed)
        try:
            o = compare_case(case, level=args.level)
            rec = {
                "seed": seed,
                "case": o.description,
                "compared": o.compared,
                "skipped": o.skipped,
                "disagreements": o.disagreements,
            }
        except Exception as exc:  # the reference itself failed: counted apart, never as agreement
            rec = {
                "seed": seed,
                "case": case.describe(),
                "reference_error": repr(exc),
                "trace": traceback.format_exc(limit=4)[-800:],
            }
        compared.update(rec.get("compared", {}))
        skipped.update(rec.get("skipped", {}))
        if rec.get("reference_error"):
            kinds["reference error"] += 1
            bad_seeds.append(seed)
        for d in rec.get("disagreements", []):
            kinds[d["what"]] += 1
        if rec.get("disagreements"):
            bad_seeds.append(seed)
        if fh:
            fh.write(json.dumps(rec, default=str) + "\n")
            fh.flush()
    dt = time.time() - t0
    print(
        f"scenarios {args.count} (seeds {args.start}..{args.start + args.count - 1}), level {args.level}, "
        f"{dt:.1f} s, load average {os.getloadavg()[0]:.2f}"
    )
    print("compared:", dict(compared))
    print("skipped as ill-conditioned:", dict(skipped))
    print("disagreements:", dict(kinds) or "none")
    print("scenarios with a disagreement:", sorted(set(bad_seeds)))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
