"""``lobewatch serve -- COMMAND ...``: the beam screen in a browser, via textual-serve."""

from __future__ import annotations

import argparse
import ipaddress
import socket
import sys
from typing import Any

from tui.cli import UsageError

#: Screen commands that can be served (the others print or write files).
SCREEN_COMMANDS: tuple[str, ...] = ("demo", "live", "replay")
DEFAULT_LISTEN = "127.0.0.1:8000"

DESCRIPTION = """\
Serve a screen command (demo, live or replay) to web browsers, for the engineer who is
not on the mast.  Each browser tab starts its own screen process running COMMAND, so
two tabs are two independent screens of the same stream (about 70 MB of memory and a
few per cent of a core each at the default 10 readouts/s; docs/browser.md has the
measured figures).  Everything the page uses is served from this machine: it works
offline.

The page has no login.  By default it listens on 127.0.0.1 only; from another machine,
reach it through SSH:
  ssh -L 8000:127.0.0.1:8000 USER@THIS-HOST     then open http://127.0.0.1:8000/

Examples:
  lobewatch serve -- demo
  lobewatch serve --listen 127.0.0.1:8080 -- live tcp://127.0.0.1:5557 --elements 4
  lobewatch serve -- replay site-a.lwsession
"""

EPILOG = """\
Safety: stay out of the main beam of energised antennas and follow local RF exposure
limits; work at height only as your training and local rules allow.  Local codes and
licensed practice come first.
"""


def register(subparsers: Any) -> None:
    p = subparsers.add_parser(
        "serve", help="show a screen command in web browsers (textual-serve)",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
        usage="lobewatch serve [--listen HOST:PORT] [--insecure-listen] -- COMMAND [ARGS ...]")
    p.add_argument("--listen", default=DEFAULT_LISTEN, metavar="HOST:PORT",
                   help=f"address the web server listens on (default {DEFAULT_LISTEN}: this "
                        "machine only)")
    p.add_argument("--insecure-listen", action="store_true",
                   help="allow a non-loopback --listen address; the page has no login, so "
                        "anyone who reaches the port sees and drives the screen")
    p.add_argument("--title", default=None, help="title shown in the browser tab "
                                                  "(default: the command)")
    p.add_argument("screen", nargs=argparse.REMAINDER, metavar="COMMAND",
                   help="the screen command and its options, after `--`")
    p.set_defaults(func=run)


def parse_listen(text: str) -> tuple[str, int]:
    """``HOST:PORT`` (``[v6]:PORT`` for IPv6) as a host and a port number."""
    host, sep, port_s = text.rpartition(":")
    if not sep or not host or not port_s.isdigit() or not 0 < int(port_s) < 65536:
        raise UsageError(f"--listen {text!r}: give HOST:PORT, e.g. {DEFAULT_LISTEN}")
    return host.strip("[]"), int(port_s)


def is_loopback(host: str) -> bool:
    """Whether ``host`` names this machine only (127.0.0.0/8, ::1 or localhost)."""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        try:
            return all(ipaddress.ip_address(info[4][0]).is_loopback
                       for info in socket.getaddrinfo(host, None))
        except (OSError, ValueError):
            return False


#: serve's own options: after the command they would reach the screen, which has none.
SERVE_OPTIONS: tuple[str, ...] = ("--listen", "--insecure-listen", "--title")


def screen_command(words: list[str]) -> list[str]:
    """The served command's words, checked: a screen command, not a headless one."""
    if words and words[0] == "--":
        words = words[1:]
    if not words:
        raise UsageError("give the screen command after `--`, e.g. "
                         "`lobewatch serve -- demo`")
    if words[0] not in SCREEN_COMMANDS:
        raise UsageError(f"`{words[0]}` is not a screen command; serve one of "
                         f"{', '.join(SCREEN_COMMANDS)} (e.g. `lobewatch serve -- demo`)")
    own = [w for w in words[1:] if w.split("=", 1)[0] in SERVE_OPTIONS]
    if own:
        raise UsageError(f"{own[0].split('=', 1)[0]} is an option of serve, not of "
                         f"`{words[0]}`: put it before the command, e.g. `lobewatch serve "
                         f"--listen 127.0.0.1:8001 -- {words[0]}`")
    if "--headless" in words:
        raise UsageError("--headless prints JSON Lines, there is no screen to serve; "
                         "drop --headless")
    return words


def run(args: argparse.Namespace) -> int:
    from tui.web.server import BeamServer

    words = screen_command(list(args.screen))
    host, port = parse_listen(args.listen)
    if not is_loopback(host):
        if not args.insecure_listen:
            raise UsageError(f"--listen {args.listen} is reachable from other machines and "
                             "the page has no login; add --insecure-listen to allow it, or "
                             "keep 127.0.0.1 and use an SSH tunnel")
        print(f"warning: serving on {host}:{port} with no login: anyone who can reach this "
              "address sees the screen and can press its keys", file=sys.stderr)
    shown = "127.0.0.1" if host in ("0.0.0.0", "::") else host
    url = f"http://{shown}:{port}/"
    print(f"serving `lobewatch {' '.join(words)}` at {url}", flush=True)
    print(f"from another machine: ssh -L {port}:127.0.0.1:{port} USER@THIS-HOST, then open "
          f"http://127.0.0.1:{port}/  (each tab runs its own screen; Ctrl-C stops them all)",
          flush=True)
    if words[0] == "live" and "--bind" in words:
        print("note: this live stream binds its endpoint; only the first tab can bind it, a "
              "second tab will report the address in use. Let the publisher bind and "
              "lobewatch connect instead to watch it from several tabs.", flush=True)
    server = BeamServer(words, host=host, port=port,
                        title=args.title or f"lobewatch {' '.join(words)}")
    try:
        server.serve()
    except OSError as exc:
        raise UsageError(f"cannot listen on {host}:{port}: {exc.strerror or exc}; pick "
                         "another port with --listen") from None
    return 0
