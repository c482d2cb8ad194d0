"""Ingest benchmark: samples/s through receive, decode and estimator, next to raw pyzmq.

A thin command line over :mod:`tui.bench.ingest` (which ``lobewatch bench`` uses too);
see that module for what is measured.  Medians of ``--runs`` runs.  ``--drain``
compares receive strategies instead.

Usage: ``python bench/bench_ingest.py [--runs N] [--window S] [--quick] [--drain] [--json]``
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import os  # noqa: E402

import zmq  # noqa: E402

from tui.bench.figures import stderr_progress  # noqa: E402
from tui.bench.ingest import drain_table, ingest_table, run_drain, run_ingest  # noqa: E402


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--runs", type=int, default=3, help="runs; medians reported (default 3)")
    ap.add_argument("--window", type=float, default=3.0,
                    help="seconds per sustained figure (default 3)")
    ap.add_argument("--quick", action="store_true", help="one run, 1.5 s windows")
    ap.add_argument("--drain", action="store_true",
                    help="compare receive strategies instead of the ingest benchmark")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    args = ap.parse_args(argv)
    if args.quick:
        args.runs, args.window = 1, 1.5
    info = {"cpus": os.cpu_count(), "pyzmq": zmq.__version__, "libzmq": zmq.zmq_version(),
            "python": sys.version.split()[0], "runs": args.runs,
            "date": time.strftime("%Y-%m-%d", time.gmtime())}
    if args.drain:
        med = run_drain(args.runs, args.window)
        table = drain_table(med)
    else:
        med = run_ingest(args.runs, args.window, quick=args.quick, latency_s=args.window,
                         progress=stderr_progress)
        table = ingest_table(med)
    if args.json:
        print(json.dumps({"info": info, "results": med}, indent=1))
    else:
        print(f"# {info}")
        print(table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
