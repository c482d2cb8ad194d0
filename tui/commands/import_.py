"""``lobewatch import FILE -o SESSION.lwsession``: turn a measured sweep into a session file."""

from __future__ import annotations

import argparse
import sys
from typing import Any

from replay.convert import SYNTHETIC_RATE_SPS, import_file


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "import", help="convert a CSV or JSON Lines sweep into a session file (.lwsession)",
        description="Read a CSV (angle_deg, power_dbm or power_db, optional t) or JSON Lines "
                    "file of wire-format messages and write it as a session that `lobewatch "
                    "replay` and `lobewatch report` read.  Every sample is kept exactly; the "
                    "input is only read.")
    p.add_argument("file", metavar="FILE", help="CSV or JSON Lines input")
    p.add_argument("-o", "--output", required=True, metavar="SESSION.lwsession",
                   help="session file to create")
    p.add_argument("--force", action="store_true", help="overwrite the output if it exists")
    p.add_argument("--rate", type=float, default=None, metavar="SPS",
                   help="replay the samples at SPS samples/s instead of their t column "
                        f"(files without t always use {SYNTHETIC_RATE_SPS:g} samples/s)")
    p.add_argument("--notes", default=None, metavar="TEXT",
                   help="free text stored with the session (site, operator, ...)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    s = import_file(args.file, args.output, force=args.force, rate_sps=args.rate,
                    notes=args.notes)
    span = s.t_end - s.t_start
    note = " (synthetic times)" if s.synthetic_t else ""
    print(f"imported {s.samples} samples in {s.batches} batches, {span:.3f} s{note}, "
          f"into {s.path}", file=sys.stderr)
    return 0
