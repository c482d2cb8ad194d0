"""Benchmark of the rolling estimator's hot path (not a test: nothing here asserts).

A thin command line over :mod:`tui.bench.estimator` and :mod:`tui.bench.naive` (also
used by ``lobewatch bench``): ``update()`` throughput with 1,000-sample batches (dense
and sparse streams, 1 and 0.1 deg bins, both averaging modes), ``snapshot()`` time at
3,600 bins, and the speed-up over a naive pure-Python per-sample estimator, as a ratio
of CPU rates measured in the same run.

Run from the repository root::

    .venv/bin/python bench/bench_estimator.py [--quick] [--json]

Targets (issue 7): >= 10,000,000 samples/s (<= 100 us per 1,000-sample batch),
snapshot <= 0.2 ms at 3,600 bins, >= 20x the naive estimator.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

if __package__ in (None, ""):  # run as a script: make the repository importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from tui.bench.estimator import estimator_table, run  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description="Benchmark the rolling estimator.")
    ap.add_argument("--quick", action="store_true", help="fewer samples and runs")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    args = ap.parse_args(argv)
    figs = run(quick=args.quick)
    print(json.dumps(figs) if args.json else estimator_table(figs))
    return 0


if __name__ == "__main__":
    sys.exit(main())
