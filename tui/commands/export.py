"""``lobewatch export SESSION.lwsession -o FILE.csv``: samples (or events) of a session as CSV."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from replay.convert import export_events, export_samples


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "export", help="write a session's samples (or --events) as CSV",
        description="Write every sample of a session as CSV (angle_deg, power_dbm or "
                    "power_db, t) with floats printed so they read back exactly, or with "
                    "--events the recorded events (t, kind, then their fields).  The session "
                    "is only read.")
    p.add_argument("file", metavar="SESSION.lwsession", help="session file")
    p.add_argument("-o", "--output", required=True, metavar="FILE.csv", help="CSV to write")
    p.add_argument("--events", action="store_true", help="export the events, not the samples")
    p.add_argument("--force", action="store_true", help="overwrite the output if it exists")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    if args.events:
        n = export_events(args.file, args.output, force=args.force)
        print(f"exported {n} events to {args.output}", file=sys.stderr)
    else:
        n = export_samples(args.file, args.output, force=args.force)
        print(f"exported {n} samples to {args.output}", file=sys.stderr)
    return 0
