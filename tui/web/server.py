"""Serve lobewatch screens to browsers with textual-serve, and own their processes.

textual-serve (the Textual project's own server) does the web side: the page, the
terminal emulator in the browser, a websocket per tab and one app process per tab.
Three things are ours:

- **The page** (``templates/beam_page.html``) uses only files this server sends: the
  terminal's script, its stylesheet and its monospace font come from textual-serve's
  installed ``static`` folder; nothing is fetched from another host, so a field laptop
  without internet shows the same page.  Its URLs are built from the request's ``Host``
  header, so the page works through an ``ssh -L`` tunnel on any local port.
- **The screen processes**: each tab's process starts in a session of its own
  (``start_new_session``) and is told to die with the server (``PR_SET_PDEATHSIG`` on
  Linux), so a crashed server leaves no screen behind.  Ending one is graceful first
  (textual-serve's quit message), then ``SIGTERM`` and ``SIGKILL`` to the whole process
  group after :data:`QUIT_GRACE_S` and :data:`TERM_GRACE_S` — a demo publisher or any
  other child of the screen ends with it.
- **Shutdown**: on Ctrl-C or ``SIGTERM`` every screen process is ended the same way
  before the server returns.
"""

from __future__ import annotations

import asyncio
import contextlib
import ctypes
import logging
import os
import signal
import sys
from asyncio.subprocess import Process
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import aiohttp_jinja2
from aiohttp import web
from textual_serve.app_service import AppService
from textual_serve.server import Server

log = logging.getLogger("lobewatch.serve")

#: Seconds a screen may take to quit after the quit message before it is sent SIGTERM.
QUIT_GRACE_S: float = 3.0
#: Seconds after SIGTERM before the screen's process group is killed outright.
TERM_GRACE_S: float = 2.0
#: ``prctl`` option that sends a signal to a child when its parent dies (Linux).
_PR_SET_PDEATHSIG: int = 1

TEMPLATES = Path(__file__).resolve().parent / "templates"


def _die_with_parent() -> None:  # pragma: no cover - runs in the forked child
    """In the child before exec: ask the kernel for SIGTERM when the server dies."""
    with contextlib.suppress(Exception):
        ctypes.CDLL(None, use_errno=True).prctl(_PR_SET_PDEATHSIG, int(signal.SIGTERM))


def screen_argv(args: Sequence[str]) -> list[str]:
    """The command line of one served screen: this Python running ``lobewatch ARGS``."""
    return [sys.executable, "-m", "tui.cli", *args]


async def end_process_group(process: Process, *, quit_grace_s: float = QUIT_GRACE_S,
                            term_grace_s: float = TERM_GRACE_S) -> int | None:
    """Wait for ``process`` to leave, then escalate: SIGTERM, then SIGKILL, to its group.

    The group is signalled even when the leader has already exited, so that nothing it
    started outlives it.  Returns the leader's exit status (None if unknown).
    """
    pgid = process.pid  # leader of its own session (start_new_session=True)
    with contextlib.suppress(asyncio.TimeoutError):
        await asyncio.wait_for(process.wait(), quit_grace_s)
    for sig, grace in ((signal.SIGTERM, term_grace_s), (signal.SIGKILL, 5.0)):
        with contextlib.suppress(ProcessLookupError, PermissionError):
            os.killpg(pgid, sig)
        if process.returncode is not None and sig == signal.SIGTERM:
            # the leader is gone; SIGTERM reached any stragglers, give them a moment
            await asyncio.sleep(0.05)
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(pgid, signal.SIGKILL)
            break
        with contextlib.suppress(asyncio.TimeoutError):
            await asyncio.wait_for(process.wait(), grace)
        if process.returncode is not None:
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(pgid, signal.SIGKILL)
            break
    return process.returncode


class ScreenService(AppService):
    """One tab's screen process, started in its own process group."""

    def __init__(self, argv: list[str], **kwargs: Any) -> None:
        super().__init__(" ".join(argv), **kwargs)
        self.argv = argv

    async def _open_app_process(self, width: int = 80, height: int = 24) -> Process:
        env = self._build_environment(width=width, height=height)
        env["LOBEWATCH_SERVED"] = "1"
        self._process = process = await asyncio.create_subprocess_exec(
            *self.argv, stdin=asyncio.subprocess.PIPE, stdout=asyncio.subprocess.PIPE,
            stderr=asyncio.subprocess.PIPE, env=env, start_new_session=True,
            preexec_fn=_die_with_parent if sys.platform.startswith("linux") else None)
        assert process.stdin is not None
        self._stdin = process.stdin
        return process

    async def stop(self) -> None:
        """Quit message first (textual-serve's own), then the process-group escalation."""
        process = self._process
        if process is None:
            return
        with contextlib.suppress(Exception):
            await self.send_meta({"type": "quit"})
        await end_process_group(process)
        if self._task is not None:
            with contextlib.suppress(Exception, asyncio.CancelledError):
                await asyncio.wait_for(self._task, 2.0)
            self._task = None


class BeamServer(Server):
    """textual-serve's server with lobewatch's page and process ownership."""

    def __init__(self, args: Sequence[str], *, host: str, port: int, title: str) -> None:
        super().__init__(" ".join(args), host=host, port=port, title=title,
                         templates_path=TEMPLATES)
        self.argv = screen_argv(args)
        self.services: set[ScreenService] = set()
        self.started = asyncio.Event()

    async def on_startup(self, app: web.Application) -> None:
        self.started.set()

    async def on_shutdown(self, app: web.Application) -> None:
        """End every screen process before the server returns."""
        services = list(self.services)
        if services:
            await asyncio.gather(*(s.stop() for s in services), return_exceptions=True)

    @aiohttp_jinja2.template("beam_page.html")
    async def handle_index(self, request: web.Request) -> dict[str, Any]:
        font_size = request.query.get("fontsize", "16")
        scheme = "wss" if request.secure else "ws"
        return {
            "title": self.title,
            "font_size": int(font_size) if font_size.isdigit() else 16,
            "static_url": "/static/",
            "websocket_url": f"{scheme}://{request.host}/ws",
        }

    async def handle_websocket(self, request: web.Request) -> web.WebSocketResponse:
        """One tab: a websocket and the screen process behind it."""
        websocket = web.WebSocketResponse(heartbeat=15)
        width = _int(request.query.get("width"), 80)
        height = _int(request.query.get("height"), 24)
        service: ScreenService | None = None
        try:
            await websocket.prepare(request)
            service = ScreenService(self.argv, write_bytes=websocket.send_bytes,
                                    write_str=websocket.send_str, close=websocket.close,
                                    download_manager=self.download_manager)
            self.services.add(service)
            await service.start(width, height)
            await self._process_messages(websocket, service)
        except asyncio.CancelledError:
            with contextlib.suppress(Exception):
                await websocket.close()
        except Exception as error:  # a broken tab must not take the server down
            log.exception(error)
        finally:
            if service is not None:
                await service.stop()
                self.services.discard(service)
        return websocket


def _int(value: str | None, default: int) -> int:
    try:
        return max(1, int(value)) if value is not None else default
    except ValueError:
        return default
