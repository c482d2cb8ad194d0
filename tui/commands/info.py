"""``lobewatch info SESSION``: what a session file holds (metadata, notes, duration,
rates, sizes, event counts), without replaying it."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from replay.info import describe, format_text


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "info", help="describe a session file: notes, duration, rates, sizes, events",
        description="Print what a session file (.lwsession) holds: its notes and source, "
                    "start and end (ISO 8601 UTC), duration (s), samples and sample rate "
                    "(samples/s), readout spacing (s), events by kind, the array model "
                    "recorded with it, and its size on disk (bytes, bytes per sample, MB "
                    "per hour at its rate).  The file is only read.")
    p.add_argument("files", nargs="+", metavar="SESSION.lwsession", help="session file(s)")
    p.add_argument("--json", action="store_true",
                   help="one JSON object per file (keys carry their units)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    for k, path in enumerate(args.files):
        info = describe(path)
        if args.json:
            print(json.dumps(info, separators=(",", ":")))
        else:
            if k:
                print()
            print(format_text(info))
    sys.stdout.flush()
    return 0
