"""The Textual app: a thin shell around one :class:`~tui.beam_screen.BeamScreen`.

The app owns only what is process-wide: the stylesheet, garbage-collector pacing
(:mod:`tui.gc_pacing`), leaving cleanly on SIGHUP/SIGTERM with the exit watchdog
(:mod:`tui.exit_watchdog`), and the exit status.  Everything about the beam (layout,
refresh, keys, recording, replay controls) lives in the beam screen.  The command line
builds the app through :func:`tui.options.run_app`.
"""

from __future__ import annotations

import asyncio
import contextlib
import signal
from typing import TYPE_CHECKING

from textual.app import App

from tui.beam_screen import BeamOptions, BeamScreen
from tui.exit_watchdog import start_exit_watchdog
from tui.gc_pacing import GcPacer

if TYPE_CHECKING:
    from typing import Any

    from stream.live import Driver
    from stream.monitor import Monitor
    from stream.tick import Tick


class LobewatchApp(App[int]):
    """One beam screen for ``monitor`` fed by ``driver``; keyword arguments are the
    fields of :class:`~tui.beam_screen.BeamOptions` (``mode``, ``refresh_hz``, ``bell``,
    ``recorder_factory``, ``recorder``, ``clock``, ...)."""

    CSS_PATH = "lobewatch.tcss"
    ENABLE_COMMAND_PALETTE = False
    TITLE = "lobewatch"

    def __init__(self, monitor: Monitor, driver: Driver | None = None, *,
                 title: str | None = None, **options: Any) -> None:
        super().__init__()
        if title:
            self.title = title
        self.gc_pacer = GcPacer()
        self.beam = BeamScreen(monitor, driver,
                               BeamOptions(**{**options, "exits_app": True,
                                              "on_frame": self._after_frame}))
        self._signals: list[int] = []

    def on_mount(self) -> None:
        self.push_screen(self.beam)
        if self.is_headless:
            return  # tests: leave the process's signal handling and collector alone
        self.gc_pacer.start()
        # Terminal closed or ``kill``: leave like ``q`` does, so the driver, the
        # recorder and (in demo) the publisher shut down cleanly.
        loop = asyncio.get_running_loop()
        for name in ("SIGHUP", "SIGTERM"):
            sig = getattr(signal, name, None)
            if sig is None:
                continue
            with contextlib.suppress(NotImplementedError, RuntimeError, ValueError):
                loop.add_signal_handler(sig, self._leave_on_signal)
                self._signals.append(sig)

    def on_unmount(self) -> None:
        with contextlib.suppress(Exception):
            loop = asyncio.get_running_loop()
            for sig in self._signals:
                loop.remove_signal_handler(sig)

    def _leave_on_signal(self) -> None:
        self.beam.stop()
        self.exit(0)
        start_exit_watchdog()

    def _after_frame(self) -> None:
        if self.gc_pacer.active:
            self.gc_pacer.after_frame()

    # -- the beam screen's state, for the command line and the benchmarks ------------------
    @property
    def monitor(self) -> Monitor:
        return self.beam.monitor

    @property
    def driver_error(self) -> str | None:
        """Why the driver failed, once it has (the command line reports it on exit)."""
        return self.beam.driver_error

    def show_tick(self, tick: Tick | None) -> None:
        """Show ``tick`` at once (benchmarks and snapshots, with ``refresh_hz=0``)."""
        self.beam.show_tick(tick)

    def refresh_view(self) -> None:
        self.beam.refresh_view()

    def pace_gc(self) -> None:
        """Collect between frames as in a real terminal (the redraw benchmark)."""
        self.gc_pacer.start()

    def collect_between_frames(self) -> None:
        self.gc_pacer.after_frame()
