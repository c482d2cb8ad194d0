"""Snapshots of the beam screen on a fixed, invented tick (no driver, no live timer).

Regenerate after an intended change of the screen with
``python -m pytest tests/test_tui_snapshots.py --snapshot-update`` and look at the
SVGs before committing them.
"""

from __future__ import annotations

import time

import pytest

from stream.alarms import AlarmStatus
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from tui.app import LobewatchApp
from tui.widgets.sample import SAMPLE_T0, sample_model, sample_tick


class FixedAlarms:
    """Two invented alarms, always the same."""

    def active(self) -> list[AlarmStatus]:
        return [
            AlarmStatus("drift", "drift", "raised", "minor", SAMPLE_T0 + 200.0, 3.2, 3.0,
                        "deg", "peak off target"),
            AlarmStatus("sidelobe_rise", "sidelobe_rise", "raised", "warning",
                        SAMPLE_T0 + 250.0, -13.3, -15.0, "dB", "side lobe up",
                        acknowledged=True),
        ]

    def acknowledge(self, key=None) -> list[str]:
        return []


@pytest.fixture
def utc(monkeypatch):
    """Clock texts in UTC whatever the machine's zone."""
    monkeypatch.setenv("TZ", "UTC")
    time.tzset()
    yield
    monkeypatch.undo()
    time.tzset()


def make_app(**tick_kw) -> LobewatchApp:
    mon = Monitor(RollingPattern(EstimatorConfig()), FixedAlarms(), sample_model())  # type: ignore[arg-type]
    mon.last_tick = sample_tick(**tick_kw)
    return LobewatchApp(mon, None, refresh_hz=0)


async def show_fixed_tick(pilot) -> None:
    app = pilot.app
    app.show_tick(app.monitor.last_tick)
    app.refresh_view()
    await pilot.pause()


def test_beam_screen_80x24(snap_compare, utc) -> None:
    assert snap_compare(make_app(), terminal_size=(80, 24), run_before=show_fixed_tick)


def test_beam_screen_120x40(snap_compare, utc) -> None:
    assert snap_compare(make_app(), terminal_size=(120, 40), run_before=show_fixed_tick)


def test_beam_screen_trace_emphasis_linear_80x24(snap_compare, utc) -> None:
    assert snap_compare(make_app(), terminal_size=(80, 24), run_before=show_fixed_tick,
                        press=["v", "d"])


def test_beam_screen_stale_360_120x40(snap_compare, utc) -> None:
    """A turning mount's full-circle data from a source gone stale."""
    assert snap_compare(make_app(state="stale", span_deg=180.0, step_deg=2.0,
                                 with_reference=False),
                        terminal_size=(120, 40), run_before=show_fixed_tick)


class FakePlayer:
    """Replay controls with a fixed position (nothing moves)."""

    speed = 1.0
    paused = False

    async def run(self, stop) -> None:
        await stop.wait()

    @property
    def position(self):
        return (SAMPLE_T0 + 300.0, SAMPLE_T0 + 200.0, SAMPLE_T0 + 600.0)

    def pause(self) -> None: ...
    def resume(self) -> None: ...
    def set_speed(self, speed: float) -> None: ...
    def seek(self, delta_s: float) -> None: ...
    def next_event(self) -> None: ...
    def prev_event(self) -> None: ...


def test_replay_80x24_keeps_the_playback_keys(snap_compare, utc) -> None:
    mon = Monitor(RollingPattern(EstimatorConfig()), FixedAlarms(), sample_model())  # type: ignore[arg-type]
    mon.last_tick = sample_tick()
    app = LobewatchApp(mon, FakePlayer(), mode="replay", refresh_hz=0)
    assert snap_compare(app, terminal_size=(80, 24), run_before=show_fixed_tick)


async def show_alarm_history(pilot) -> None:
    from stream.tick import Event
    app = pilot.app
    for k, (rule, tr, value, limit, unit) in enumerate((
            ("drift", "raise", 3.2, 3.0, "deg"), ("sidelobe_rise", "raise", -13.3, -15.0, "dB"),
            ("sidelobe_rise", "ack", -13.3, -15.0, "dB"), ("gain_loss", "raise", 2.4, 2.0, "dB"),
            ("gain_loss", "clear", 0.4, 2.0, "dB"))):
        app.monitor.emit(Event(SAMPLE_T0 + 200.0 + 25.0 * k, "alarm", {
            "rule": rule, "transition": tr, "value": value, "threshold": limit,
            "unit": unit}))
    await show_fixed_tick(pilot)


def test_beam_screen_120x40_with_alarm_history(snap_compare, utc) -> None:
    assert snap_compare(make_app(), terminal_size=(120, 40), run_before=show_alarm_history)
