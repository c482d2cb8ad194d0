"""``lobewatch bench``: can this machine keep up?  Ingest, latency, metrics, redraw,
replay and memory figures against their targets, measured on loopback only."""

from __future__ import annotations

import argparse
import json
import sys
import time
from typing import Any

from tui.cli import UsageError


def register(subparsers: Any) -> None:
    from tui.bench.runner import GROUPS
    p = subparsers.add_parser(
        "bench", help="measure this machine: ingest, latency, metrics, redraw, replay",
        description="Measure the hot paths on this machine, on loopback only, with the "
                    "publisher in a separate process: ingest rates next to raw pyzmq, "
                    "CPU at a paced 1,000,000 samples/s, publish-to-estimate latency, "
                    "metric and screen redraw times, replay rate next to a raw read, "
                    "peak memory, and the speed-up over a naive estimator.  Prints a "
                    "table with each figure's target and pass/short (progress on "
                    "stderr).  Takes under a minute (--quick: about 15 s).  Exit status "
                    "0 even when a figure falls short; 1 if a measurement failed.")
    p.add_argument("--quick", action="store_true",
                   help="fewer and shorter runs (a smoke test; figures are rougher)")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object keyed by figure name instead of the table")
    p.add_argument("--only", metavar="GROUPS", default=None,
                   help=f"comma-separated groups to run, from: {', '.join(GROUPS)}")
    p.set_defaults(func=run)


def _groups(text: str | None) -> tuple[str, ...] | None:
    from tui.bench.runner import GROUPS
    if text is None:
        return None
    names = tuple(g.strip() for g in text.split(",") if g.strip())
    bad = [g for g in names if g not in GROUPS]
    if bad or not names:
        raise UsageError(f"--only: unknown group {bad[0] if bad else repr(text)}; "
                         f"choose from {', '.join(GROUPS)}")
    return names


def run(args: argparse.Namespace) -> int:
    from tui.bench.figures import stderr_progress
    from tui.bench.runner import machine, run_bench, table
    only = _groups(args.only)
    info = machine()
    start = time.perf_counter()
    stderr_progress(f"{'quick' if args.quick else 'full'} run on {info['cpus']} cores, "
                    f"Python {info['python']}, load average {info.get('load_average', '?')}")
    figs, failed = run_bench(quick=args.quick, only=only, progress=stderr_progress)
    elapsed = time.perf_counter() - start
    stderr_progress(f"done in {elapsed:.1f} s")
    if args.json:
        print(json.dumps(figs, allow_nan=False, default=str))
    else:
        print(f"lobewatch bench{' --quick' if args.quick else ''}, {info['date']}: "
              f"{info['cpus']} cores {info['machine']}, {info['system']}, Python "
              f"{info['python']}, numpy {info['numpy']}, pyzmq {info['pyzmq']} "
              f"(libzmq {info['libzmq']}); {elapsed:.0f} s")
        print(table(figs))
        short = [k for k, f in figs.items() if f.get("pass") is False]
        print(f"{len(short)} short of target" + (f": {', '.join(short)}" if short else ""))
    if failed:
        print(f"lobewatch bench: measurement failed: {', '.join(failed)} (see above)",
              file=sys.stderr)
        return 1
    return 0
