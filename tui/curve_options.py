"""Command-line options for secure feeds: CURVE keys and the listening-address rule.

``live`` and ``synth`` share these (``add_curve_arguments``, ``curve_from_args``,
``check_listen``).  A listener on an address other than loopback without CURVE needs
``--insecure-listen`` and prints who can then reach it; ``ipc://`` and ``inproc://``
are local to the machine (file permissions guard ``ipc://``).  The rule for the metrics
port (tui/fleet_options.py) uses the same flag.
"""

from __future__ import annotations

import argparse
import ipaddress
import sys
from typing import TextIO

from stream.curve import CurveConfig
from stream.errors import UserError
from tui.cli import UsageError


def add_curve_arguments(parser: argparse.ArgumentParser, *, role: str = "subscriber") -> None:
    """``--curve-secret``, ``--curve-server``, ``--curve-allow`` and, unless another
    option group added it already, ``--insecure-listen``.  ``role`` words the help."""
    peer = "publisher" if role == "subscriber" else "subscriber"
    g = parser.add_argument_group(
        "secure feed (CURVE)",
        "Authenticate and encrypt the ZeroMQ connection with ZeroMQ's CURVE "
        "mechanism; make key pairs with `lobewatch keys new NAME` (docs/security.md).")
    g.add_argument("--curve-secret", metavar="FILE",
                   help="our own secret certificate (NAME.key_secret, mode 0600)")
    if role == "subscriber":  # the publisher (synth) always binds
        g.add_argument("--curve-server", metavar="FILE",
                       help=f"when connecting: the {peer}'s public certificate (NAME.key); "
                            "we only talk to the holder of its secret")
    g.add_argument("--curve-allow", metavar="DIR",
                   help=f"when binding: folder of the public certificates (*.key) of "
                        f"every {peer} allowed to connect; others are refused and counted")
    try:
        g.add_argument("--insecure-listen", action="store_true",
                       help="allow listening on an address other than loopback without "
                            "CURVE (anyone who can reach the port can connect)")
    except argparse.ArgumentError:
        pass  # already there (the metrics options add the same flag)


def curve_from_args(args: argparse.Namespace, *, bind: bool,
                    warn: TextIO | None = None) -> CurveConfig | None:
    """The :class:`CurveConfig` the options ask for (``None`` without ``--curve-secret``);
    prints its warnings (a readable secret file, an empty allow list) to ``warn``."""
    secret = getattr(args, "curve_secret", None)
    server = getattr(args, "curve_server", None)
    allow = getattr(args, "curve_allow", None)
    if secret is None:
        if server or allow:
            raise UsageError("--curve-server / --curve-allow need --curve-secret FILE (our "
                             "own .key_secret; make one with `lobewatch keys new NAME`)")
        return None
    if bind and server:
        raise UsageError("--curve-server is for connecting; when binding give --curve-allow "
                         "DIR (the allowed peers' public .key files)")
    if not bind and allow:
        raise UsageError("--curve-allow is for binding; when connecting give --curve-server "
                         "FILE (the peer's public .key file)")
    if bind and not allow:
        raise UsageError("binding with --curve-secret needs --curve-allow DIR (the allowed "
                         "peers' public .key files)")
    if not bind and not server:
        raise UsageError("connecting with --curve-secret needs --curve-server FILE (the "
                         "peer's public .key file)")
    try:
        cfg = CurveConfig.load(secret, server=server, allow=allow)
    except UserError as exc:
        raise UsageError(str(exc)) from None
    for line in cfg.warnings:
        print(f"lobewatch: {line}", file=warn if warn is not None else sys.stderr, flush=True)
    return cfg


def endpoint_host(endpoint: str) -> str | None:
    """The host of a ``tcp://HOST:PORT`` endpoint (``None`` for ipc/inproc)."""
    if not endpoint.startswith("tcp://"):
        return None
    host = endpoint[len("tcp://"):].rpartition(":")[0] or endpoint[len("tcp://"):]
    return host.strip("[]")


def is_loopback_host(host: str) -> bool:
    """127.0.0.0/8, ::1 and ``localhost``; ``*``, 0.0.0.0, names and interfaces are not."""
    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def check_listen(endpoint: str, *, curve: CurveConfig | None, insecure: bool,
                 what: str, warn: TextIO | None = None) -> None:
    """Apply the listening rule to a bound ``endpoint``.

    Loopback, ipc and inproc are always fine; elsewhere CURVE is needed, or
    ``insecure`` (then one warning line saying who can reach it).  ``what`` says what an
    intruder could do ("send samples to this monitor", "read the samples").
    """
    host = endpoint_host(endpoint)
    if host is None or is_loopback_host(host) or curve is not None:
        return
    shown = "every interface" if host in ("*", "0.0.0.0", "::") else host
    if not insecure:
        raise UsageError(f"{endpoint}: listening on {shown} without CURVE lets anyone on the "
                         "network connect; add --curve-secret and --curve-allow (or "
                         "--curve-server), use 127.0.0.1, or add --insecure-listen")
    print(f"lobewatch: warning: {endpoint} listens on {shown} without authentication; "
          f"anyone who can reach that port can {what}",
          file=warn if warn is not None else sys.stderr, flush=True)


def refuse_curve(args: argparse.Namespace, mode: str) -> None:
    """Refuse ``--curve-*`` in a mode whose sockets do not take CURVE yet, rather than
    silently running without it."""
    if any(getattr(args, k, None) for k in ("curve_secret", "curve_server", "curve_allow")):
        raise UsageError(f"--curve-secret/--curve-server/--curve-allow do not apply to {mode} "
                         "yet; carry that feed over an SSH tunnel instead "
                         "(docs/wire-format.md)")
