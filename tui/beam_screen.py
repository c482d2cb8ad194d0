"""The beam screen: one monitor's readout, plots, alarms and keys.

Data flow (never a redraw per message):
  * the driver (live ZeroMQ driver or session player) runs in a worker; it feeds the
    :class:`~stream.monitor.Monitor` and ticks it, which leaves ``monitor.last_tick``;
  * a timer at ``refresh_hz`` reads ``monitor.last_tick`` and, when it changed, sets it
    on the widgets (each widget's ``tick`` reactive; each rasterises once);
  * keys are this screen's actions: they call the monitor's user actions or the
    driver's controls and show the result at once;
  * workers report upward with the messages of :mod:`tui.messages` (driver ended,
    recording started/stopped); recorder files are opened and closed in thread workers.

Where things live: a key's action is ``action_<name>`` below (its binding and help
text in :attr:`BeamScreen.BINDINGS`); a widget's state is its ``reactive`` attributes
in ``tui/widgets/``; what the status line shows is :meth:`BeamScreen.status_info`.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Callable
from dataclasses import replace
from typing import TYPE_CHECKING, Any

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import Screen

from stream.errors import UserError
from stream.live import Driver, PlaybackDriver
from stream.tick import Tick
from tui.beam_options import (  # noqa: F401  (re-exported for callers and tests)
    MIN_TOLERANCE_DEG,
    MODES,
    REC_SIZE_EVERY_S,
    SPEEDS,
    STALL_S,
    BeamOptions,
    default_tolerance_deg,
)
from tui.messages import DriverEnded, RecordingStarted, RecordingStopped, RecordWritten
from tui.screens import HelpScreen
from tui.widgets.alarmlist import AlarmHistory, AlarmList, history_row
from tui.widgets.keybar import KeyBar, key_items
from tui.widgets.polar import PolarPlot
from tui.widgets.readout import Readout
from tui.widgets.status import StatusInfo, StatusLine, fmt_bytes
from tui.widgets.trace import TracePlot
from tui.widgets.trend import TrendPlot

if TYPE_CHECKING:
    from stream.monitor import Monitor

_G_SPEED = Binding.Group("speed", compact=True)
_G_SEEK = Binding.Group("±10s", compact=True)
_G_JUMP = Binding.Group("±1m", compact=True)
_G_EVENT = Binding.Group("event", compact=True)

#: Replay keys in the order the key bar keeps them when the width is short.
REPLAY_KEY_ORDER: tuple[str, ...] = ("replay_pause", "slower", "seek", "next_event",
                                     "prev_event")
#: Actions that only make sense when replaying a session file.
REPLAY_ACTIONS = frozenset({"replay_pause", "faster", "slower", "seek", "next_event",
                            "prev_event"})


class BeamScreen(Screen[None]):
    """One stream's beam screen.

    Width and height classes (``-wide`` from 110 columns, ``-tall`` from 34 rows) let
    the stylesheet give a large terminal's room to the readout and the alarms.

    ``BeamScreen(monitor, driver, options)``: ``monitor`` is the stream's
    :class:`~stream.monitor.Monitor`; ``driver`` (a :class:`stream.live.Driver`, or a
    :class:`stream.live.PlaybackDriver` for replay keys, or None) feeds it and runs in
    this screen's worker until the screen closes, unless ``options.run_driver`` is
    False; ``options`` is a :class:`BeamOptions`.  A fleet pushes one per stream with
    ``app.push_screen(BeamScreen(monitor, driver, BeamOptions(run_driver=False)))``;
    ``q`` then closes the screen (``exits_app=True`` makes it quit the app instead).
    """

    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (110, "-wide")]
    VERTICAL_BREAKPOINTS = [(0, "-short"), (34, "-tall")]

    BINDINGS = [
        Binding("p", "toggle_pause", "pause",
                tooltip="pause / resume the display (data keeps flowing in)"),
        Binding("r", "capture_reference", "ref",
                tooltip="capture the current pattern as the reference trace"),
        Binding("c", "clear_reference", "unref", tooltip="clear the reference trace"),
        Binding("t", "set_target", "target",
                tooltip="set the target bearing to the current peak"),
        Binding("z", "reset", "reset",
                tooltip="reset the estimator (forget the averaged pattern and sweeps)"),
        Binding("d", "toggle_scale", "dB/lin",
                tooltip="polar radius: dB rings or linear power"),
        Binding("v", "swap_view", "swap",
                tooltip="swap emphasis between the polar sketch and the trace"),
        Binding("a", "acknowledge", "ack",
                tooltip="acknowledge the active alarms (they stay until they clear)"),
        Binding("w", "toggle_recording", "rec",
                tooltip="start / stop recording a session file"),
        Binding("e", "explain", "why",
                tooltip="explain every dash in the readout (what the data cannot tell)"),
        Binding("k", "write_record", "report",
                tooltip="write a commissioning record of the current pattern (record.html "
                        "and its data) into a new folder under the sessions folder"),
        Binding("question_mark", "help", "help", key_display="?",
                tooltip="this help page"),
        Binding("q", "quit_app", "quit", tooltip="quit"),
        Binding("space", "replay_pause", "play", key_display="␣",
                tooltip="replay: pause / resume playback"),
        Binding("minus", "slower", "slower", key_display="-", group=_G_SPEED,
                tooltip="replay: slower"),
        Binding("plus", "faster", "faster", key_display="+", group=_G_SPEED,
                tooltip="replay: faster"),
        Binding("equals_sign", "faster", "faster", show=False),
        Binding("left", "seek(-10)", "-10 s", key_display="←", group=_G_SEEK,
                tooltip="replay: seek back 10 s"),
        Binding("right", "seek(10)", "+10 s", key_display="→", group=_G_SEEK,
                tooltip="replay: seek forward 10 s"),
        Binding("pageup", "seek(-60)", "-1 min", key_display="PgUp", group=_G_JUMP,
                tooltip="replay: seek back 1 min"),
        Binding("pagedown", "seek(60)", "+1 min", key_display="PgDn", group=_G_JUMP,
                tooltip="replay: seek forward 1 min"),
        Binding("left_square_bracket", "prev_event", "previous event", key_display="[",
                group=_G_EVENT, tooltip="replay: previous event"),
        Binding("right_square_bracket", "next_event", "next event", key_display="]",
                group=_G_EVENT, tooltip="replay: next event"),
    ]

    def __init__(self, monitor: Monitor, driver: Driver | None = None,
                 options: BeamOptions | None = None, *, name: str | None = None,
                 id: str | None = None) -> None:
        super().__init__(name=name, id=id)
        self.monitor = monitor
        self.driver = driver
        self.options = options or BeamOptions()
        self.mode = self.options.mode
        self.clock = self.options.clock
        self.playback: PlaybackDriver | None = (
            driver if self.mode == "replay" and isinstance(driver, PlaybackDriver) else None)
        self.recorder: Any | None = self.options.recorder
        self.display_paused = False
        self.replay_paused = bool(self.playback.paused) if self.playback else False
        self.replay_speed = float(self.playback.speed) if self.playback else 1.0
        self.driver_done = False
        self.driver_error: str | None = None
        self.stop_event = asyncio.Event()
        self._alarm_events: list[Any] = []
        self._recording_busy = False
        self._shown: Tick | None = None
        self._shown_at = self.clock()
        self._rec_size: int | None = None
        self._rec_size_at: float | None = None

    # -- layout ------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield StatusLine(id="status")
        with Horizontal(id="body"):
            with Vertical(id="plots"):
                yield PolarPlot(id="polar")
                yield TracePlot(model=self.monitor.model, id="trace")
            with Vertical(id="side"):
                yield Readout(id="readout")
                yield TrendPlot(id="trend")
                yield AlarmList(id="alarms")
                yield AlarmHistory(id="history")
        yield KeyBar(id="keys")

    def on_mount(self) -> None:
        self.w_status = self.query_one(StatusLine)
        self.w_polar = self.query_one(PolarPlot)
        self.w_trace = self.query_one(TracePlot)
        self.w_trend = self.query_one(TrendPlot)
        self.w_readout = self.query_one(Readout)
        self.w_alarms = self.query_one(AlarmList)
        self.w_body = self.query_one("#body")
        self.w_trace.border_title = "power vs bearing"
        self.w_trend.border_title = "peak bearing per sweep"
        self.w_alarms.border_title = "alarms"
        self.w_history = self.query_one(AlarmHistory)
        self.w_history.border_title = "alarm history"
        self._fill_key_bar()
        self.monitor.event_sinks.append(self._on_event)
        if self.driver is not None and self.options.run_driver:
            self.run_worker(self._drive(), name="driver", group="driver", exclusive=True,
                            exit_on_error=False)
        if self.options.refresh_hz > 0:
            self.set_interval(1.0 / self.options.refresh_hz, self.refresh_view,
                              name="refresh")
        self.refresh_view()

    def _fill_key_bar(self) -> None:
        """The key bar's items: in replay the playback keys come first, then help/quit."""
        first = (REPLAY_KEY_ORDER if self.mode == "replay" else ()) + ("help", "quit_app")
        items = key_items(self.BINDINGS, lambda a: self.check_action(a, ()) is not False,
                          first)
        bar = self.query_one(KeyBar)
        bar.items = tuple(items)
        bar.more = next((it for it in items if it.description == "help"), None)

    def on_unmount(self) -> None:
        self.stop()
        if self._on_event in self.monitor.event_sinks:
            self.monitor.event_sinks.remove(self._on_event)

    # -- driver ------------------------------------------------------------------------
    async def _drive(self) -> None:
        """Run the driver until the stop event; report how it ended as a message."""
        assert self.driver is not None
        error: str | None = None
        try:
            await self.driver.run(self.stop_event)
        except asyncio.CancelledError:
            raise
        except UserError as exc:
            error = str(exc)
        except Exception as exc:  # shown, not raised: the screen stays usable
            error = f"{type(exc).__name__}: {exc}"
        self.post_message(DriverEnded(error))

    def on_driver_ended(self, message: DriverEnded) -> None:
        self.driver_done = True
        self.driver_error = message.error
        if message.error:
            self.notify(message.error, title="source failed", severity="error", timeout=15)
        self.refresh_view()

    def stop(self) -> None:
        """Stop the driver and close a running recording (on the way out)."""
        self.stop_event.set()
        rec, self.recorder = self.recorder, None
        if rec is not None:
            try:
                rec.close()
            except Exception:  # nothing more to do on the way out
                pass

    def on_screen_resume(self) -> None:
        # A screen on show has the time for the column diagnosis (the monitor leaves it
        # off for headless runs and fast replays; it needs the array model); a fleet's
        # hidden streams do not pay for it.
        self.monitor.diagnose_columns = self.monitor.model is not None

    def on_screen_suspend(self) -> None:
        self.monitor.diagnose_columns = False

    def _on_event(self, event: Any) -> None:
        """Monitor event sink: keep alarm events for the next refresh (no redraw here)."""
        if getattr(event, "kind", None) == "alarm":
            self._alarm_events.append(event)

    def _announce_alarms(self) -> None:
        """Alarm events since the last refresh: into the history, then the bell."""
        events, self._alarm_events = self._alarm_events, []
        for ev in events:
            self.w_history.add_event(ev)
        if not events or not self.options.bell:
            return
        from tui.notify import should_ring
        if any(should_ring(ev) for ev in events):
            self.app.bell()

    # -- the refresh timer -------------------------------------------------------------
    def refresh_view(self) -> None:
        """Read the monitor's latest tick and push it down (only when it changed)."""
        tick = self.monitor.last_tick
        now = self.clock()
        if tick is not self._shown:
            self._shown_at = now
        self.w_status.show(tick, self.status_info(tick, now))
        if not self.display_paused and tick is not self._shown:
            self.show_tick(tick)
        self.w_alarms.show(self.monitor.alarms)
        self._announce_alarms()
        if self.options.on_frame is not None:
            self.call_after_refresh(self.options.on_frame)

    def show_tick(self, tick: Tick | None) -> None:
        """Push one tick into every widget (the refresh timer and tests call this)."""
        self._shown = tick
        self.w_polar.tick = tick
        self.w_trace.tick = tick
        self.w_trend.tick = tick
        self.w_readout.tick = tick

    @property
    def shown_tick(self) -> Tick | None:
        """The tick the widgets show (frozen while the display is paused)."""
        return self._shown

    def status_info(self, tick: Tick | None, now: float | None = None) -> StatusInfo:
        """What the status line shows besides the tick."""
        now = self.clock() if now is None else now
        stalled = None
        if (self.mode != "replay" and self.driver is not None and tick is not None
                and not self.driver_done and now - self._shown_at > STALL_S):
            stalled = now - self._shown_at
        rec_path = None
        if self.recorder is not None:
            rec_path = str(self.recorder.path)
            if self._rec_size_at is None or now - self._rec_size_at >= REC_SIZE_EVERY_S:
                self._rec_size = int(self.recorder.size_bytes)
                self._rec_size_at = now
        pos = self.playback.position if self.playback is not None else None
        return StatusInfo(
            mode=self.mode + (f" · {self.options.mode_note}" if self.options.mode_note
                              else "")
            + (" · ended" if self.driver_done and self.mode != "replay" else ""),
            display_paused=self.display_paused, stalled_s=stalled,
            recording_path=rec_path, recording_bytes=self._rec_size,
            replay_t=pos[0] if pos else None, replay_start=pos[1] if pos else None,
            replay_end=pos[2] if pos else None,
            replay_speed=self.replay_speed if self.mode == "replay" else None,
            replay_paused=self.replay_paused)

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
        return tick.t if tick is not None else self.options.wall_clock()

    def _show_overlay(self) -> None:
        """Redraw at once with the monitor's current reference and target."""
        tick = self.monitor.last_tick
        if tick is None:
            return
        m = self.monitor
        self.show_tick(replace(tick, reference=m.reference, target_deg=m.target_deg,
                               tolerance_deg=m.tolerance_deg))
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
        polar = self.w_polar
        polar.scale = "linear" if polar.scale == "db" else "db"
        self.notify(f"Polar radius: {'dB' if polar.scale == 'db' else 'linear power'}.",
                    timeout=2)

    def action_swap_view(self) -> None:
        self.w_body.toggle_class("-trace-first")

    def action_acknowledge(self) -> None:
        alarms = self.monitor.alarms
        if alarms is None:
            self.notify("No alarm rules configured: nothing to acknowledge.",
                        severity="warning")
            return
        active = {getattr(a, "key", None): a for a in alarms.active()}
        n = len(active)
        for key in alarms.acknowledge() or []:
            a = active.get(key)
            if a is not None:
                self.w_history.add_row(history_row(
                    self._pipeline_t(), "ack", a.rule, a.value, a.threshold, a.unit,
                    getattr(a, "watch_deg", None)))
        self.w_alarms.show(alarms)
        self.notify(f"Acknowledged {n} alarm(s)." if n else "No active alarm.")

    def action_help(self) -> None:
        self.app.push_screen(HelpScreen(self.help_keys()))

    def help_keys(self) -> list[tuple[str, str]]:
        """(key, meaning) of every binding offered in this mode, from :attr:`BINDINGS`."""
        rows: list[tuple[str, str]] = []
        seen: set[str] = set()
        for b in self.BINDINGS:
            assert isinstance(b, Binding)
            name = b.action.split("(", 1)[0]
            if not b.show or self.check_action(name, ()) is False or b.action in seen:
                continue
            seen.add(b.action)
            key = "space" if b.key == "space" else (b.key_display or b.key)
            rows.append((key, b.tooltip or b.description))
        return rows

    def action_quit_app(self) -> None:
        self.stop()
        if self.options.exits_app:
            self.app.exit(0)
        else:
            self.dismiss(None)

    # -- recording (file work in thread workers) ----------------------------------------
    def action_toggle_recording(self) -> None:
        if self._recording_busy:
            self.notify("The recorder is still busy; try again in a moment.",
                        severity="warning")
            return
        if self.recorder is not None:
            rec, self.recorder = self.recorder, None
            self._recording_busy = True
            self._close_recording(rec)
            self.refresh_view()
            return
        if self.options.recorder_factory is None:
            self.notify("Recording is unavailable here (no session file set up for this "
                        "source).", severity="warning")
            return
        self._recording_busy = True
        self._open_recording(self.options.recorder_factory)

    @work(thread=True, group="recorder", exit_on_error=False)
    def _open_recording(self, factory: Callable[[], Any]) -> None:
        try:
            rec = factory()
        except UserError as exc:
            self.post_message(RecordingStopped(None, error=str(exc)))
            return
        except Exception as exc:
            self.post_message(RecordingStopped(None, error=f"{type(exc).__name__}: {exc}"))
            return
        self.post_message(RecordingStarted(rec))

    @work(thread=True, group="recorder", exit_on_error=False)
    def _close_recording(self, rec: Any) -> None:
        path = str(rec.path)
        try:
            rec.close()
        except Exception as exc:
            self.post_message(RecordingStopped(path, error=str(exc)))
            return
        self.post_message(RecordingStopped(path, int(rec.size_bytes)))

    def on_recording_started(self, message: RecordingStarted) -> None:
        self._recording_busy = False
        if self.stop_event.is_set():  # the screen closed meanwhile
            message.recorder.close()
            return
        self.recorder = message.recorder
        self._rec_size_at = None
        self.notify(f"Recording to {self.recorder.path}.")
        self.refresh_view()

    def on_recording_stopped(self, message: RecordingStopped) -> None:
        self._recording_busy = False
        if message.error:
            title = "recording" if message.path is None else "recording stopped"
            self.notify(message.error, title=title, severity="error", timeout=10)
        else:
            self.notify(f"Recording stopped: {message.path} "
                        f"({fmt_bytes(message.size_bytes)}).")
        self.refresh_view()

    # -- explaining the readout and writing a commissioning record ------------------------
    def action_explain(self) -> None:
        tick = self.monitor.last_tick
        if tick is None:
            self.notify("No readout yet: waiting for samples.", severity="warning")
            return
        from tui.widgets.readout import undetermined
        missing = undetermined(tick)
        notes = [f"{label}: {reason}" for label, reason in missing]
        if tick.provisional:
            notes.insert(0, "provisional: no complete sweep seen yet")
        if tick.source.state == "stale":
            notes.insert(0, "STALE: no samples for a while; values are the last ones")
        self.notify("\n".join(notes) if notes else "Every value is determined.",
                    title="why", timeout=20)

    def action_write_record(self) -> None:
        tick = self.monitor.last_tick
        if tick is None or tick.metrics.peak_angle_deg is None:
            self.notify("No beam measured yet: nothing to record.", severity="warning")
            return
        from replay.session_writer import default_sessions_dir
        base = self.options.record_dir or str(default_sessions_dir())
        stamp = time.strftime("%Y%m%d-%H%M%S", time.localtime(tick.t))
        out_dir = f"{base}/record-{stamp}"
        self.notify(f"Writing a commissioning record to {out_dir} …", timeout=4)
        self._write_record(tick, out_dir)

    @work(thread=True, group="record", exit_on_error=False)
    def _write_record(self, tick: Tick, out_dir: str) -> None:
        from replay.record import write_record_from_tick
        meta = {"source": f"{self.mode} pattern on screen"}
        try:
            path = write_record_from_tick(tick, self.monitor.model, out_dir, meta)
        except UserError as exc:
            self.post_message(RecordWritten(None, str(exc)))
        except Exception as exc:
            self.post_message(RecordWritten(None, f"{type(exc).__name__}: {exc}"))
        else:
            self.post_message(RecordWritten(path))

    def on_record_written(self, message: RecordWritten) -> None:
        if message.error:
            self.notify(message.error, title="record", severity="error", timeout=10)
        else:
            self.notify(f"Commissioning record written: {message.path}", timeout=15)

    # -- replay controls (the driver is a session player) -------------------------------
    def _player(self) -> PlaybackDriver | None:
        if self.playback is None:
            self.notify("This source has no playback controls.", severity="warning")
        return self.playback

    def action_replay_pause(self) -> None:
        if (p := self._player()) is None:
            return
        if self.replay_paused:
            p.resume()
        else:
            p.pause()
        self.replay_paused = not self.replay_paused
        self.refresh_view()

    def _set_speed(self, step: int) -> None:
        if (p := self._player()) is None:
            return
        i = min(range(len(SPEEDS)), key=lambda k: abs(SPEEDS[k] - self.replay_speed))
        new = SPEEDS[max(0, min(len(SPEEDS) - 1, i + step))]
        p.set_speed(new)
        self.replay_speed = new
        self.refresh_view()

    def action_faster(self) -> None:
        self._set_speed(+1)

    def action_slower(self) -> None:
        self._set_speed(-1)

    def action_seek(self, delta_s: float) -> None:
        if (p := self._player()) is not None:
            p.seek(float(delta_s))
            self.refresh_view()

    def action_next_event(self) -> None:
        if (p := self._player()) is not None:
            p.next_event()
            self.refresh_view()

    def action_prev_event(self) -> None:
        if (p := self._player()) is not None:
            p.prev_event()
            self.refresh_view()
