"""Benchmark of ``stream.pattern.measure`` (not a test: nothing here asserts).

A thin command line over :mod:`tui.bench.metrics` (also used by ``lobewatch bench``):
median time of ``measure()`` on 360 and 3,600 points, clean and noisy, next to a naive
pure-Python implementation of the same job.

Run from the repository root::

    .venv/bin/python bench/bench_metrics.py [--runs N] [--json]

Target (issue 2): <= 1 ms for 3,600 points.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tui.bench.metrics import metrics_table, run_metrics  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=200, help="runs per case (>= 50)")
    ap.add_argument("--json", action="store_true", help="print JSON instead of a table")
    args = ap.parse_args(argv)
    runs = max(50, args.runs)
    rows = run_metrics(runs)
    if args.json:
        print(json.dumps({"runs": runs, "results": rows}))
    else:
        print(metrics_table(rows, runs))
    return 0


if __name__ == "__main__":
    sys.exit(main())
