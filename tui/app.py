"""The beam screen: one Textual app for live, replay and demo.

Data flow (never a redraw per message):
  * the driver (live ZeroMQ driver or replay player) runs in a worker; it feeds the
    :class:`~stream.monitor.Monitor` and ticks it, which leaves ``monitor.last_tick``;
  * a timer at ``refresh_hz`` reads ``monitor.last_tick`` and, when it changed, pushes
    it down into the widgets (plain method calls; each widget rasterises once);
  * keys are app actions that call the monitor's user actions or the driver's
    controls, and show the result at once (without waiting for the next tick).
"""

from __future__ import annotations

import asyncio
import contextlib
import gc
import inspect
import os
import signal
import threading
import time
from collections.abc import Callable
from dataclasses import replace
from typing import TYPE_CHECKING, Any

from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import Footer

from stream.errors import UserError
from stream.tick import Tick
from tui.screens import HelpScreen
from tui.widgets.alarmlist import AlarmList
from tui.widgets.polar import PolarPlot
from tui.widgets.readout import Readout
from tui.widgets.status import StatusInfo, StatusLine
from tui.widgets.trace import TracePlot
from tui.widgets.trend import TrendPlot

if TYPE_CHECKING:
    import argparse

    from stream.monitor import Monitor

MODES: tuple[str, ...] = ("live", "replay", "demo")
#: Seconds without a new tick (live/demo, driver running) before the status line
#: says the pipeline itself has stopped updating.
STALL_S = 3.0
#: Replay speeds the faster/slower keys step through.
SPEEDS: tuple[float, ...] = (0.25, 0.5, 1.0, 2.0, 4.0, 8.0, 16.0, 32.0, 64.0)
#: Tolerance given to a target set from the current peak when none was configured:
#: a quarter of the measured HPBW (a rule of thumb), at least this many degrees.
MIN_TOLERANCE_DEG = 0.5

_G_SPEED = Binding.Group("speed", compact=True)
_G_SEEK = Binding.Group("±10s", compact=True)
_G_JUMP = Binding.Group("±1m", compact=True)
_G_EVENT = Binding.Group("event", compact=True)

#: Actions that only make sense when replaying a session file.
REPLAY_ACTIONS = frozenset({"replay_pause", "faster", "slower", "seek", "next_event",
                            "prev_event"})


def tune_gc() -> None:
    """Take the cyclic garbage collector off the frame path.

    Every frame allocates thousands of short-lived objects; with CPython's default
    thresholds the collector then runs several times per frame and now and then walks
    Textual's whole widget tree (30-130 ms outliers at 120x40 here).  Objects alive
    after start-up are frozen out of its sight and automatic collection is made rare
    (threshold 20,000); :meth:`LobewatchApp.collect_between_frames` then collects the
    young generations right after each repaint instead, so the pause falls between
    frames (measured with bench/bench_redraw.py).  Process-wide, so only for a real
    terminal run, not under tests.
    """
    gc.collect()
    gc.freeze()
    gc.set_threshold(20_000, 20, 100)


#: Seconds a signalled exit may take before the process is ended outright.
EXIT_GRACE_S = 10.0


def _exit_if_still_alive(grace_s: float) -> None:
    time.sleep(grace_s)
    os._exit(1)


#: Frames between collections of the middle and the oldest generation.
GC_MIDDLE_EVERY = 20
GC_FULL_EVERY = 600


def default_tolerance_deg(hpbw_deg: float | None) -> float:
    """Rule of thumb: a quarter of the half-power beamwidth, not below 0.5 degrees."""
    if hpbw_deg is None:
        return 2.0
    return round(max(MIN_TOLERANCE_DEG, hpbw_deg / 4.0), 1)


class LobewatchApp(App[int]):
    """The live beam screen."""

    CSS_PATH = "lobewatch.tcss"
    ENABLE_COMMAND_PALETTE = False
    TITLE = "lobewatch"

    BINDINGS = [
        Binding("p", "toggle_pause", "pause"),
        Binding("r", "capture_reference", "ref"),
        Binding("c", "clear_reference", "unref"),
        Binding("t", "set_target", "target"),
        Binding("z", "reset", "reset"),
        Binding("d", "toggle_scale", "dB/lin"),
        Binding("v", "swap_view", "swap"),
        Binding("a", "acknowledge", "ack"),
        Binding("w", "toggle_recording", "rec"),
        Binding("question_mark", "help", "help", key_display="?"),
        Binding("q", "quit_app", "quit"),
        Binding("space", "replay_pause", "play", key_display="␣"),
        Binding("minus", "slower", "slower", key_display="-", group=_G_SPEED),
        Binding("plus", "faster", "faster", key_display="+", group=_G_SPEED),
        Binding("equals_sign", "faster", "faster", show=False),
        Binding("left", "seek(-10)", "-10 s", key_display="←", group=_G_SEEK),
        Binding("right", "seek(10)", "+10 s", key_display="→", group=_G_SEEK),
        Binding("pageup", "seek(-60)", "-1 min", key_display="PgUp", group=_G_JUMP),
        Binding("pagedown", "seek(60)", "+1 min", key_display="Dn", group=_G_JUMP),
        Binding("left_square_bracket", "prev_event", "previous event", key_display="[",
                group=_G_EVENT),
        Binding("right_square_bracket", "next_event", "next event", key_display="]",
                group=_G_EVENT),
    ]

    #: Key and meaning of every binding, for the help page.
    KEY_HELP: tuple[tuple[str, str], ...] = (
        ("p", "pause / resume the display (data keeps flowing in)"),
        ("r", "capture the current pattern as the reference trace"),
        ("c", "clear the reference trace"),
        ("t", "set the target bearing to the current peak"),
        ("z", "reset the estimator (forget the averaged pattern and sweeps)"),
        ("d", "polar radius: dB rings or linear power"),
        ("v", "swap emphasis between the polar sketch and the trace"),
        ("a", "acknowledge the active alarms (they stay until they clear)"),
        ("w", "start / stop recording a session file"),
        ("space", "replay: pause / resume playback"),
        ("- +", "replay: slower / faster"),
        ("← →", "replay: seek back / forward 10 s"),
        ("PgUp PgDn", "replay: seek back / forward 1 min"),
        ("[ ]", "replay: previous / next event"),
        ("?", "this help"),
        ("q", "quit"),
    )

    def __init__(self, monitor: Monitor, driver: Any | None, *, mode: str = "live",
                 recorder_factory: Callable[[], Any] | None = None,
                 refresh_hz: float = 10.0, title: str | None = None,
                 bell: bool = False, recorder: Any | None = None) -> None:
        if mode not in MODES:
            raise ValueError(f"mode must be one of {MODES}, got {mode!r}")
        super().__init__()
        self.monitor = monitor
        self.driver = driver
        self.mode = mode
        self.recorder_factory = recorder_factory
        self.refresh_hz = float(refresh_hz)
        if title:
            self.title = title
        self.bell_on_alarm = bool(bell)
        self._alarm_events: list[Any] = []
        self.recorder: Any | None = recorder  # one started by --record, or by the key
        self.display_paused = False
        self.replay_paused = False
        self.replay_speed = float(getattr(driver, "speed", 1.0) or 1.0)
        self.driver_done = False
        self.driver_error: str | None = None
        self._gc_paced = False
        self._frames = 0
        self._stop = asyncio.Event()
        self._shown: Tick | None = None
        self._shown_at = time.monotonic()
        self._rec_size: int | None = None
        self._rec_size_at = 0.0

    # -- layout ------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield StatusLine(id="status")
        with Horizontal(id="body"):
            with Vertical(id="plots"):
                yield PolarPlot(id="polar")
                yield TracePlot(model=getattr(self.monitor, "model", None), id="trace")
            with Vertical(id="side"):
                yield Readout(id="readout")
                yield TrendPlot(id="trend")
                yield AlarmList(id="alarms")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        # Keep references: app-level queries search the *active* screen (help page...).
        self.w_status = self.query_one(StatusLine)
        self.w_polar = self.query_one(PolarPlot)
        self.w_trace = self.query_one(TracePlot)
        self.w_trend = self.query_one(TrendPlot)
        self.w_readout = self.query_one(Readout)
        self.w_alarms = self.query_one(AlarmList)
        self.w_body = self.query_one("#body")
        self.query_one("#trace").border_title = "power vs bearing"
        self.query_one("#trend").border_title = "peak bearing per sweep"
        self.query_one("#alarms").border_title = "alarms"
        self._stop = asyncio.Event()
        sinks = getattr(self.monitor, "event_sinks", None)
        if sinks is not None:
            sinks.append(self._on_event)
        if self.driver is not None:
            self.run_worker(self._drive(), name="driver", group="driver", exclusive=True,
                            exit_on_error=False)
        if self.refresh_hz > 0:
            self.set_interval(1.0 / self.refresh_hz, self.refresh_view, name="refresh")
        self._signals: list[int] = []
        if self.is_headless:
            pass  # tests: leave the process's signal handling and collector alone
        else:
            self.pace_gc()
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
        self.refresh_view()

    def _leave_on_signal(self) -> None:
        self._stop.set()
        self._close_recorder()
        self.exit(0)
        # With the terminal gone (SIGHUP), restoring it can wedge the exit; a process
        # left behind would keep its driver (and a demo publisher) running for ever.
        threading.Thread(target=_exit_if_still_alive, args=(EXIT_GRACE_S,),
                         name="lobewatch-exit-watchdog", daemon=True).start()

    async def _drive(self) -> None:
        """Run the driver until the stop event; report a failure on screen."""
        assert self.driver is not None
        try:
            await self.driver.run(self._stop)
        except asyncio.CancelledError:
            raise
        except UserError as exc:
            self.driver_error = str(exc)
            self.notify(str(exc), title="source", severity="error", timeout=15)
        except Exception as exc:  # shown, not raised: the screen stays usable
            self.driver_error = f"{type(exc).__name__}: {exc}"
            self.notify(self.driver_error, title="source failed", severity="error",
                        timeout=15)
        finally:
            self.driver_done = True

    def _on_event(self, event: Any) -> None:
        """Monitor event sink: keep alarm events for the next refresh (no redraw here)."""
        if getattr(event, "kind", None) == "alarm":
            self._alarm_events.append(event)

    def _announce_alarms(self) -> None:
        events, self._alarm_events = self._alarm_events, []
        if not events or not self.bell_on_alarm:
            return
        from tui.notify import should_ring
        if any(should_ring(ev) for ev in events):
            self.bell()

    # -- the refresh timer -------------------------------------------------------------
    def refresh_view(self) -> None:
        """Read the monitor's latest tick and push it down (only when it changed)."""
        tick = self.monitor.last_tick
        now = time.monotonic()
        if tick is not self._shown:
            self._shown_at = now
        self.w_status.show(tick, self.status_info(tick, now))
        if not self.display_paused and tick is not self._shown:
            self.show_tick(tick)
        self.w_alarms.show(getattr(self.monitor, "alarms", None))
        self._announce_alarms()
        if self._gc_paced:
            self.call_after_refresh(self.collect_between_frames)

    def pace_gc(self) -> None:
        """Collect garbage between frames instead of inside them (see :func:`tune_gc`)."""
        tune_gc()
        self._gc_paced = True

    def collect_between_frames(self) -> None:
        """Young generation after every repaint, the middle one every
        ``GC_MIDDLE_EVERY`` frames, everything every ``GC_FULL_EVERY`` frames."""
        self._frames += 1
        if self._frames % GC_FULL_EVERY == 0:
            gc.collect()
        elif self._frames % GC_MIDDLE_EVERY == 0:
            gc.collect(1)
        else:
            gc.collect(0)

    def show_tick(self, tick: Tick | None) -> None:
        """Push one tick into every widget (the refresh timer and tests call this)."""
        self._shown = tick
        self.w_polar.show(tick)
        self.w_trace.show(tick)
        self.w_trend.show(tick)
        self.w_readout.show(tick)

    def status_info(self, tick: Tick | None, now: float | None = None) -> StatusInfo:
        now = time.monotonic() if now is None else now
        stalled = None
        if (self.mode != "replay" and self.driver is not None and tick is not None
                and not self.driver_done and now - self._shown_at > STALL_S):
            stalled = now - self._shown_at
        rec_path = None
        if self.recorder is not None:
            rec_path = str(getattr(self.recorder, "path", "session"))
            if now - self._rec_size_at > 1.0:
                size = getattr(self.recorder, "size_bytes", None)
                self._rec_size = int(size) if isinstance(size, (int, float)) \
                    else _file_size(rec_path)
                self._rec_size_at = now
        pos = self.replay_position()
        return StatusInfo(
            mode=self.mode + (" · ended" if self.driver_done and self.mode != "replay" else ""),
            display_paused=self.display_paused, stalled_s=stalled,
            recording_path=rec_path, recording_bytes=self._rec_size,
            replay_t=pos[0] if pos else None, replay_start=pos[1] if pos else None,
            replay_end=pos[2] if pos else None,
            replay_speed=self.replay_speed if self.mode == "replay" else None,
            replay_paused=bool(getattr(self.driver, "paused", self.replay_paused)))

    def replay_position(self) -> tuple[float, float, float] | None:
        if self.mode != "replay" or self.driver is None:
            return None
        pos = getattr(self.driver, "position", None)
        if callable(pos):
            pos = pos()
        if pos is None:
            return None
        try:
            t, t0, t1 = (float(v) for v in pos)
        except (TypeError, ValueError):
            return None
        return t, t0, t1

    # -- bindings ----------------------------------------------------------------------
    def check_action(self, action: str, parameters: tuple[object, ...]) -> bool | None:
        if action in REPLAY_ACTIONS:
            return self.mode == "replay"
        if action == "toggle_recording":
            return self.mode != "replay"
        return True

    def _pipeline_t(self) -> float:
        """Time for user events: the pipeline clock (recorded time in replay)."""
        tick = self.monitor.last_tick
        return tick.t if tick is not None else time.time()

    def _show_overlay(self) -> None:
        """Redraw at once with the monitor's current reference and target."""
        tick = self.monitor.last_tick
        if tick is None:
            return
        m = self.monitor
        overlay = replace(tick, reference=m.reference, target_deg=m.target_deg,
                          tolerance_deg=m.tolerance_deg)
        self.show_tick(overlay)
        self._shown = tick

    def action_toggle_pause(self) -> None:
        self.display_paused = not self.display_paused
        if not self.display_paused:
            self._shown = None  # force a redraw with the latest tick
        self.refresh_view()

    def action_capture_reference(self) -> None:
        ev = self.monitor.capture_reference(self._pipeline_t())
        if ev is None:
            self.notify("No beam measured yet: nothing to keep as reference.",
                        severity="warning")
            return
        pk = ev.data.get("peak_angle_deg")
        self.notify(f"Reference captured (peak {pk:+.1f}°)." if pk is not None
                    else "Reference captured.")
        self._show_overlay()

    def action_clear_reference(self) -> None:
        if self.monitor.reference is None:
            self.notify("No reference to clear.", severity="warning")
            return
        self.monitor.clear_reference(self._pipeline_t())
        self.notify("Reference cleared.")
        self._show_overlay()

    def action_set_target(self) -> None:
        tick = self.monitor.last_tick
        peak = tick.metrics.peak_angle_deg if tick is not None else None
        if tick is None or peak is None:
            self.notify("No peak measured yet: target not set.", severity="warning")
            return
        tol = self.monitor.tolerance_deg
        if tol is None:
            tol = default_tolerance_deg(tick.metrics.hpbw_deg)
        target = round(float(peak), 1)
        self.monitor.set_target(self._pipeline_t(), target, tol)
        self.notify(f"Target set to {target:+.1f}° ± {tol:.1f}°.")
        self._show_overlay()

    def action_reset(self) -> None:
        self.monitor.reset(self._pipeline_t())
        self.notify("Estimator reset: the pattern builds up again from new samples.")

    def action_toggle_scale(self) -> None:
        scale = self.w_polar.toggle_scale()
        self.notify(f"Polar radius: {'dB' if scale == 'db' else 'linear power'}.",
                    timeout=2)

    def action_swap_view(self) -> None:
        self.w_body.toggle_class("-trace-first")

    def action_acknowledge(self) -> None:
        alarms = getattr(self.monitor, "alarms", None)
        if alarms is None:
            self.notify("No alarm rules configured: nothing to acknowledge.",
                        severity="warning")
            return
        n = len(list(alarms.active()))
        alarms.acknowledge()
        self.w_alarms.show(alarms)
        self.notify(f"Acknowledged {n} alarm(s)." if n else "No active alarm.")

    def action_toggle_recording(self) -> None:
        if self.recorder is not None:
            rec, self.recorder = self.recorder, None
            path = str(getattr(rec, "path", "session"))
            try:
                rec.close()
            except Exception as exc:
                self.notify(f"Recording stopped with an error: {exc}", severity="error")
                return
            self.notify(f"Recording stopped: {path} ({_size_text(_file_size(path))}).")
            self.refresh_view()
            return
        if self.recorder_factory is None:
            self.notify("Recording is unavailable here (no session file set up for this "
                        "source).", severity="warning")
            return
        try:
            self.recorder = self.recorder_factory()
        except UserError as exc:
            self.notify(str(exc), title="recording", severity="error", timeout=10)
            return
        self._rec_size_at = 0.0
        self.notify(f"Recording to {getattr(self.recorder, 'path', 'a session file')}.")
        self.refresh_view()

    def action_help(self) -> None:
        keys = [(k, d) for k, d in self.KEY_HELP
                if self.mode == "replay" or not d.startswith("replay:")]
        self.push_screen(HelpScreen(keys))

    async def action_quit_app(self) -> None:
        self._stop.set()
        self._close_recorder()
        self.exit(0)

    # -- replay controls (the driver is a session player) -------------------------------
    async def _call_driver(self, name: str, *args: Any) -> bool:
        fn = getattr(self.driver, name, None)
        if fn is None:
            self.notify(f"This source cannot {name.replace('_', ' ')}.", severity="warning")
            return False
        result = fn(*args)
        if inspect.isawaitable(result):
            await result
        return True

    async def action_replay_pause(self) -> None:
        name = "resume" if self.replay_paused else "pause"
        if await self._call_driver(name):
            self.replay_paused = not self.replay_paused
            self.refresh_view()

    async def _set_speed(self, step: int) -> None:
        i = min(range(len(SPEEDS)), key=lambda k: abs(SPEEDS[k] - self.replay_speed))
        new = SPEEDS[max(0, min(len(SPEEDS) - 1, i + step))]
        if await self._call_driver("set_speed", new):
            self.replay_speed = new
            self.refresh_view()

    async def action_faster(self) -> None:
        await self._set_speed(+1)

    async def action_slower(self) -> None:
        await self._set_speed(-1)

    async def action_seek(self, delta_s: float) -> None:
        if await self._call_driver("seek", float(delta_s)):
            self.refresh_view()

    async def action_next_event(self) -> None:
        if await self._call_driver("next_event"):
            self.refresh_view()

    async def action_prev_event(self) -> None:
        if await self._call_driver("prev_event"):
            self.refresh_view()

    # -- shutdown ----------------------------------------------------------------------
    def _close_recorder(self) -> None:
        rec, self.recorder = self.recorder, None
        if rec is not None:
            try:
                rec.close()
            except Exception:  # nothing more to do on the way out
                pass

    def on_unmount(self) -> None:
        self._stop.set()
        with contextlib.suppress(Exception):
            loop = asyncio.get_running_loop()
            for sig in getattr(self, "_signals", []):
                loop.remove_signal_handler(sig)
        sinks = getattr(self.monitor, "event_sinks", None)
        if sinks is not None and self._on_event in sinks:
            sinks.remove(self._on_event)
        self._close_recorder()


def _file_size(path: str) -> int | None:
    """Bytes of a session file including its write-ahead log, if any."""
    total = None
    for p in (path, path + "-wal"):
        try:
            total = (total or 0) + os.path.getsize(p)
        except OSError:
            continue
    return total


def _size_text(n: int | None) -> str:
    from tui.widgets.status import fmt_bytes
    return fmt_bytes(n)


def run_app(args: argparse.Namespace | None, monitor: Monitor, driver: Any, mode: str,
            recorder_factory: Callable[[], Any] | None = None,
            recorder: Any | None = None) -> int:
    """Open the beam screen until the user quits; returns the exit status."""
    refresh_hz = float(getattr(args, "refresh_hz", None) or 10.0)
    if not refresh_hz > 0:
        raise UserError(f"--refresh-hz must be positive, got {refresh_hz}")
    title = getattr(args, "title", None)
    bell = False
    if args is not None:
        try:
            from tui.alarm_options import notify_settings_from_args
            bell = notify_settings_from_args(args).bell
        except (ImportError, AttributeError):
            bell = bool(getattr(args, "bell", False))
    app = LobewatchApp(monitor, driver, mode=mode, recorder_factory=recorder_factory,
                       refresh_hz=refresh_hz, title=title, bell=bell, recorder=recorder)
    result = app.run()
    if app.driver_error:
        raise UserError(app.driver_error)
    return int(result or 0)
