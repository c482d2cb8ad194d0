"""``lobewatch keys``: make and show CURVE key pairs for secure feeds.

The files are ZeroMQ's own certificate format, written by ``zmq.auth.create_certificates``
(so any pyzmq program reads them with ``zmq.auth.load_certificate``): ``NAME.key`` holds
the public key and may be copied anywhere; ``NAME.key_secret`` holds both keys and stays
with its owner (mode 0600).
"""

from __future__ import annotations

import argparse
import os
import re
import sys
import tempfile
from pathlib import Path
from typing import Any

import zmq.auth

from stream.errors import UserError
from tui.cli import UsageError

DESCRIPTION = """\
Make and show CURVE key pairs (ZeroMQ's built-in authentication and encryption) for
`lobewatch live` and `lobewatch synth` (--curve-secret, --curve-server, --curve-allow).

  lobewatch keys new radio monitor --dir keys   two pairs: keys/radio.key(_secret), ...
  lobewatch keys show keys/radio.key            print the public key (Z85 text)

Copy NAME.key (public) to the other side: a publisher's into the monitor's --curve-allow
folder or --curve-server option, a monitor's into the publisher's --curve-allow folder.
Never copy NAME.key_secret; it is written readable by its owner only (mode 0600).
See docs/security.md.
"""

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "keys", help="make and show CURVE key pairs for secure feeds",
        description=DESCRIPTION, formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = p.add_subparsers(dest="keys_command", metavar="ACTION")
    n = sub.add_parser("new", help="make key pairs NAME.key and NAME.key_secret",
                       description="Make a CURVE key pair per NAME: NAME.key (public) and "
                                   "NAME.key_secret (secret, mode 0600).  Existing files are "
                                   "never overwritten.")
    n.add_argument("names", nargs="+", metavar="NAME",
                   help="name of the key pair (letters, digits, '.', '_', '-')")
    n.add_argument("--dir", default=".", metavar="DIR",
                   help="folder to write into (created if missing; default: current folder)")
    n.set_defaults(func=run_new)
    s = sub.add_parser("show", help="print the public key of a certificate file",
                       description="Print the public key (40 Z85 characters) held in a "
                                   "NAME.key or NAME.key_secret file; never the secret.")
    s.add_argument("file", metavar="FILE", help="a .key or .key_secret file")
    s.set_defaults(func=run_show)
    p.set_defaults(func=lambda args: (p.print_help(), 2)[1])


def create_key_pair(name: str, directory: str | os.PathLike[str]) -> tuple[Path, Path]:
    """Write ``NAME.key`` and ``NAME.key_secret`` into ``directory``, refusing to replace
    either.  The pair is made in a private temporary folder (mode 0700) and linked into
    place, so the secret is never readable by others, not even for a moment, and an
    existing file is never touched (``os.link`` fails instead of replacing)."""
    if not _NAME.match(name):
        raise UsageError(f"key name {name!r}: use letters, digits, '.', '_' or '-' (up to "
                         "64 characters, not starting with '.' or '-')")
    folder = Path(directory)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"--dir {folder}: cannot create it ({exc.strerror})") from None
    public, secret = folder / f"{name}.key", folder / f"{name}.key_secret"
    for path in (public, secret):
        if path.exists() or path.is_symlink():
            raise UserError(f"{path} exists; keys are never overwritten: pick another NAME "
                            "or --dir, or remove the old pair yourself")
    try:
        with tempfile.TemporaryDirectory(prefix=".lobewatch-keys-", dir=folder) as tmp:
            tmp_pub, tmp_sec = zmq.auth.create_certificates(tmp, name)
            os.chmod(tmp_sec, 0o600)
            os.chmod(tmp_pub, 0o644)
            os.link(tmp_pub, public)
            try:
                os.link(tmp_sec, secret)
            except OSError:
                public.unlink()
                raise
    except FileExistsError as exc:
        raise UserError(f"{exc.filename2 or exc.filename} appeared while writing; keys are "
                        "never overwritten") from None
    except OSError as exc:
        raise UserError(f"cannot write keys into {folder}: {exc.strerror}") from None
    return public, secret


def public_key_of(path: str | os.PathLike[str]) -> str:
    """The Z85 public key in a certificate file (one-line error when it is not one)."""
    p = Path(path)
    if not p.is_file():
        raise UserError(f"{p}: no such file; give a NAME.key or NAME.key_secret file")
    try:
        public, _ = zmq.auth.load_certificate(p)
    except (OSError, ValueError) as exc:
        raise UserError(f"{p}: not a CURVE certificate ({exc})") from None
    return public.decode("ascii")


def run_new(args: argparse.Namespace) -> int:
    for name in args.names:
        public, secret = create_key_pair(name, args.dir)
        print(f"{public}  public: copy it to the other side")
        print(f"{secret}  secret: keep it here (mode 0600)")
    return 0


def run_show(args: argparse.Namespace) -> int:
    print(public_key_of(args.file))
    if str(args.file).endswith(".key_secret"):
        from stream.curve import secret_file_warning
        warning = secret_file_warning(args.file)
        if warning:
            print(f"lobewatch: {warning}", file=sys.stderr)
    return 0
