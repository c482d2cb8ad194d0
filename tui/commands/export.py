"""``lobewatch export SESSION.lwsession -o FILE.csv``: samples (or events) of a session as CSV."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from replay.convert import STDOUT, export_events, export_samples


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "export", help="write a session's samples (or --events) as CSV",
        description="Write every sample of a session as CSV (angle_deg, power_dbm or "
                    "power_db, t) with floats printed so they read back exactly, or with "
                    "--events the recorded events (t in Unix seconds, time_utc in ISO 8601 "
                    "UTC, kind, then their fields).  The session is only read; the output "
                    "gets your usual file permissions (umask).")
    p.add_argument("file", metavar="SESSION.lwsession", help="session file")
    p.add_argument("-o", "--output", required=True, metavar="FILE.csv",
                   help="CSV to write; - writes to standard output")
    p.add_argument("--events", action="store_true", help="export the events, not the samples")
    p.add_argument("--force", action="store_true", help="overwrite the output if it exists")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    where = "standard output" if args.output == STDOUT else args.output
    if args.events:
        n = export_events(args.file, args.output, force=args.force)
        print(f"exported {n} events to {where}", file=sys.stderr)
    else:
        n = export_samples(args.file, args.output, force=args.force)
        print(f"exported {n} samples to {where}", file=sys.stderr)
    return 0
