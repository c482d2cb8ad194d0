# PYTHON_ARGCOMPLETE_OK  (global shell completion: argcomplete looks for this marker)
"""The ``lobewatch`` command line: one sub-command per module in ``tui.commands``."""

from __future__ import annotations

import argparse
import importlib
import os
import sys

from stream.errors import UserError

#: Sub-commands in the order ``--help`` lists them; each names a module in
#: ``tui.commands`` that defines ``register(subparsers)``.
COMMANDS: tuple[str, ...] = ("demo", "live", "synth", "replay", "report", "commission", "info",
                             "import_", "export", "keys", "serve", "bench")

EPILOG = """\
Safety: stay out of the main beam of energised antennas and follow your local RF
exposure limits; work at height only as your training and local rules allow; transmit
only on spectrum you are licensed for.  Local codes and licensed practice come first.
"""


class UsageError(UserError):
    """Bad command-line input: printed as one line, exit status 2."""


def queue_bytes(args: argparse.Namespace) -> int:
    """``--queue-mb`` (MiB) as the byte budget a source gives its receive queue."""
    from stream.rx_queue import DEFAULT_QUEUE_BYTES
    mb = getattr(args, "queue_mb", None)
    return DEFAULT_QUEUE_BYTES if mb is None else int(float(mb) * 2**20)


def version_text() -> str:
    """``lobewatch X.Y.Z`` from the installed package's metadata (one source of truth:
    pyproject.toml), or a note when running from an uninstalled tree."""
    from importlib.metadata import PackageNotFoundError, version
    try:
        return f"lobewatch {version('lobewatch')}"
    except PackageNotFoundError:
        return "lobewatch (version unknown: not installed; run `pip install -e .`)"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lobewatch",
        description="Turn a stream of (angle, power) samples from a swept beam into a live "
                    "beam readout: peak direction, beamwidths, side lobes, model fit, alarms.",
        epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--version", action="version", version=version_text(),
                        help="print the version and exit")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in COMMANDS:
        try:
            mod = importlib.import_module(f"tui.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"tui.commands.{name}":
                continue  # not built yet
            raise
        mod.register(sub)
    return parser


def _complete(parser: argparse.ArgumentParser) -> None:
    """Shell completion through argcomplete (kept up by its maintainers, reads this very
    parser so completions never drift from the options, and does bash and zsh from one
    registration line; see the README).  Does nothing unless the shell asked."""
    if "_ARGCOMPLETE" not in os.environ:
        return
    import argcomplete
    argcomplete.autocomplete(parser)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    _complete(parser)
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except UsageError as exc:
        print(f"lobewatch {args.command}: {exc}", file=sys.stderr)
        return 2
    except UserError as exc:
        print(f"lobewatch {args.command}: {exc}", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
