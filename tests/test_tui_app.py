"""The beam screen driven by a fake driver that pushes known ticks (no sockets)."""

from __future__ import annotations

import asyncio
from dataclasses import replace

import numpy as np
import pytest

from stream.alarms import AlarmConfig, AlarmEngine, AlarmStatus
from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from stream.tick import SourceStats
from tui.app import LobewatchApp
from tui.screens import HelpScreen
from tui.widgets.alarmlist import AlarmList
from tui.widgets.polar import PolarPlot
from tui.widgets.readout import MetricGrid, Readout
from tui.widgets.sample import sample_model, sample_tick
from tui.widgets.status import StatusLine


class FakeDriver:
    """Pushes the given ticks into ``monitor.last_tick`` one per loop turn, then waits
    for stop.  Records replay-control calls."""

    def __init__(self, monitor: Monitor, ticks: list, *, position=None) -> None:
        self.monitor = monitor
        self.ticks = list(ticks)
        self.calls: list[tuple] = []
        self.speed = 1.0
        self.paused = False
        self._position = position
        self.stopped = False

    async def run(self, stop: asyncio.Event) -> None:
        for tick in self.ticks:
            self.monitor.last_tick = tick
            await asyncio.sleep(0.01)
        await stop.wait()
        self.stopped = True

    @property
    def position(self):
        return self._position

    def pause(self) -> None:
        self.paused = True
        self.calls.append(("pause",))

    def resume(self) -> None:
        self.paused = False
        self.calls.append(("resume",))

    def set_speed(self, speed: float) -> None:
        self.speed = speed
        self.calls.append(("set_speed", speed))

    def seek(self, delta_s: float) -> None:
        self.calls.append(("seek", delta_s))

    def next_event(self) -> None:
        self.calls.append(("next_event",))

    def prev_event(self) -> None:
        self.calls.append(("prev_event",))


class FakeRecorder:
    def __init__(self, path: str) -> None:
        self.path = path
        self.size_bytes = 12_345
        self.closed = False

    def close(self) -> None:
        self.closed = True


def make_monitor(alarms=None, model=None) -> Monitor:
    return Monitor(RollingPattern(EstimatorConfig()), alarms, model)


def screen_text(app: LobewatchApp) -> str:
    return "\n".join(s.text for s in app.screen._compositor.render_strips())


async def footer_text(pilot, app: LobewatchApp) -> str:
    """The footer row once the footer has laid out its keys (it does so after mount)."""
    for _ in range(100):
        line = screen_text(app).splitlines()[-1]
        if "quit" in line:
            return line
        await pilot.pause(0.02)
    return screen_text(app).splitlines()[-1]


async def settle(pilot, app: LobewatchApp) -> None:
    """Let the driver push its ticks and the refresh timer show the last one (bounded:
    5 s, for a busy machine)."""
    for _ in range(250):
        await pilot.pause(0.02)
        if app._shown is not None and app._shown is app.monitor.last_tick:
            return


# -- readout ----------------------------------------------------------------------------

async def test_readout_shows_the_values_of_a_known_tick() -> None:
    mon = make_monitor(model=sample_model())
    tick = sample_tick()
    app = LobewatchApp(mon, FakeDriver(mon, [tick]), refresh_hz=20)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot, app)
        v = app.query_one(Readout).values()
        m = tick.metrics
        assert v["rd-digits"] == f"{m.peak_angle_deg:+.1f}".rjust(6)
        assert v["rd-v-hpbw"] == f"{m.hpbw_deg:.1f}°"
        assert v["rd-v-bw10"] == f"{m.bw10_deg:.1f}°"
        assert v["rd-v-fnbw"] == f"{m.fnbw_deg:.1f}°"
        assert v["rd-v-sll"] == f"{m.sll_db:.1f} dB"
        assert v["rd-v-slla"] == f"{m.sll_angle_deg:+.1f}°"
        assert v["rd-v-pwr"] == f"{m.peak_power_db:.1f} dBm"
        assert v["rd-v-fb"] == "—"  # undetermined: a dash, never a number
        assert v["rd-v-rate"] == "1.00 MS/s"
        assert v["rd-v-sweeps"] == "151"
        assert v["rd-v-lost"] == "3" and v["rd-v-rej"] == "2"
        assert v["rd-spread"].startswith("±0.21°")
        assert v["rd-target"] == "tgt +10.0°±3.0°"
        assert v["rd-offset"] == f"off {m.peak_angle_deg - 10.0:+.1f}° ok"
        # the figure is on screen, and the label tooltips name the metric keys
        text = screen_text(app)
        assert "PEAK BEARING" in text and "HPBW" in text
        assert str(app.query_one("#rd-peak-label").tooltip).startswith("peak_angle_deg")
        grid = app.query_one(MetricGrid)
        # hovering a label or its value shows a tooltip naming the metric key
        await pilot.hover(grid, offset=(1, 0))  # row 0, left pair: HPBW label
        assert str(grid.tooltip).startswith("hpbw_deg")
        await pilot.hover(grid, offset=(grid._pair_width() + 9, 2))  # row 2, right: value
        assert str(grid.tooltip).startswith("sll_angle_deg")
        await pilot.hover(grid, offset=(2, 3))  # row 3, left: peak power
        assert str(grid.tooltip).startswith("peak_power_db")
        # an undetermined value's tooltip gives the reason
        await pilot.hover(grid, offset=(grid._pair_width() + 2, 1))  # F/B
        assert str(grid.tooltip).startswith("front_to_back_db")
        assert "back direction" in str(grid.tooltip)


def _sweep_batches(model: ArrayModel, n_sweeps: int, t0: float) -> list[SampleBatch]:
    """Noise-free back-and-forth sweeps over -90..+90 in 0.25-degree steps."""
    up = np.arange(-90.0, 90.0 + 1e-9, 0.25)
    out = []
    t = t0
    for k in range(n_sweeps):
        a = up if k % 2 == 0 else up[::-1]
        for chunk in np.array_split(a, 8):
            t += 0.05
            out.append(SampleBatch.from_arrays(chunk, model.power_db(chunk) - 40.0, t,
                                               rx_t=t, seq=len(out)))
    return out


async def test_readout_shows_what_the_estimator_computed_for_a_simulated_beam() -> None:
    """8 elements, half-wave spacing, isotropic, broadside: HPBW 12.80 deg (C. A.
    Balanis, Antenna Theory, 3rd ed., ch. 6, uniform broadside array; value from the
    exact array factor as quoted in this project's pattern checks)."""
    model = ArrayModel(n_elements=8, spacing_wl=0.5)
    mon = make_monitor(model=model)
    t0 = 1_767_268_800.0
    batches = _sweep_batches(model, 4, t0)

    class SimDriver(FakeDriver):
        async def run(self, stop: asyncio.Event) -> None:
            for b in batches:
                mon.ingest(b)
            mon.tick(batches[-1].rx_t + 0.01, SourceStats(state="receiving", messages=32))
            await stop.wait()

    app = LobewatchApp(mon, SimDriver(mon, []), refresh_hz=20)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot, app)
        tick = mon.last_tick
        assert tick is not None and tick.metrics.hpbw_deg is not None
        assert abs(tick.metrics.hpbw_deg - 12.80) < 0.5
        v = app.query_one(Readout).values()
        assert v["rd-v-hpbw"] == f"{tick.metrics.hpbw_deg:.1f}°"
        # rounded as shown, and never "-0.0"
        assert v["rd-digits"].strip() == f"{round(tick.metrics.peak_angle_deg, 1) + 0.0:+.1f}"
        assert v["rd-digits"].strip() != "-0.0"
        assert abs(tick.metrics.peak_angle_deg) < 0.3
        assert v["rd-v-exp"] == f"{tick.expected_hpbw_deg:.1f}°"


# -- keys -------------------------------------------------------------------------------

LIVE_KEYS = {"p": "pause", "r": "ref", "c": "unref", "t": "target", "z": "reset",
             "d": "dB/lin", "v": "swap", "a": "ack", "w": "rec", "question_mark": "help",
             "q": "quit"}


async def test_footer_lists_every_live_key() -> None:
    mon = make_monitor()
    app = LobewatchApp(mon, FakeDriver(mon, [sample_tick()]), refresh_hz=20)
    async with app.run_test(size=(100, 24)) as pilot:
        await settle(pilot, app)
        shown = {key: b.binding.description for key, b in app.screen.active_bindings.items()
                 if b.binding.show and b.enabled and app.check_action(b.binding.action, ())}
        for key, desc in LIVE_KEYS.items():
            assert shown.get(key) == desc, key
        footer = await footer_text(pilot, app)
        for desc in LIVE_KEYS.values():
            assert desc in footer
        # replay controls are not offered live
        assert "space" not in shown and "left" not in shown


async def test_each_live_key_does_what_the_footer_says(tmp_path) -> None:
    engine = AlarmEngine(AlarmConfig())
    mon = make_monitor(alarms=engine, model=sample_model())
    tick = sample_tick(target_deg=None, with_reference=False)
    made: list[FakeRecorder] = []

    def factory() -> FakeRecorder:
        made.append(FakeRecorder(str(tmp_path / f"s{len(made)}.lwsession")))
        return made[-1]

    driver = FakeDriver(mon, [tick])
    app = LobewatchApp(mon, driver, refresh_hz=20, recorder_factory=factory)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot, app)
        status = app.query_one(StatusLine)
        # p: pause / resume the display
        await pilot.press("p")
        assert app.display_paused and "DISPLAY PAUSED" in status.plain
        newer = replace(tick, t=tick.t + 1.0)
        mon.last_tick = newer
        await pilot.pause(0.15)
        assert app._shown is tick  # frozen while paused
        await pilot.press("p")
        await pilot.pause(0.1)
        assert not app.display_paused and app._shown is newer
        # r: capture reference -> drawn at once (dashed reference layer in the polar)
        await pilot.press("r")
        assert mon.reference is not None
        assert app.query_one(PolarPlot).tick.reference is mon.reference
        # c: clear it
        await pilot.press("c")
        assert mon.reference is None
        # t: target = current peak, with a tolerance
        await pilot.press("t")
        assert mon.target_deg == pytest.approx(round(tick.metrics.peak_angle_deg, 1))
        assert mon.tolerance_deg is not None and mon.tolerance_deg > 0
        assert app.query_one(Readout).values()["rd-target"].startswith("tgt ")
        # z: reset the estimator (a reset event is queued for the next tick)
        mon.estimator.update(SampleBatch.from_arrays([1.0, 2.0], [-30.0, -31.0], 1.0,
                                                     rx_t=1.0), 1.0)
        assert mon.estimator.samples == 2
        await pilot.press("z")
        assert mon.estimator.samples == 0
        assert any(e.kind == "reset" for e in mon._pending)
        # d: polar radius dB <-> linear
        await pilot.press("d")
        assert app.query_one(PolarPlot).scale == "linear"
        await pilot.press("d")
        assert app.query_one(PolarPlot).scale == "db"
        # v: swap emphasis
        h_polar = app.query_one("#polar").size.height
        await pilot.press("v")
        await pilot.pause()
        assert app.query_one("#body").has_class("-trace-first")
        assert app.query_one("#polar").size.height < h_polar
        assert app.query_one("#trace").size.height > app.query_one("#polar").size.height
        # a: acknowledge (engine asked to acknowledge)
        calls = []
        engine.acknowledge = lambda key=None: calls.append(key) or []  # type: ignore
        await pilot.press("a")
        assert calls == [None]
        # w: start recording, status shows file and size; w again stops it
        await pilot.press("w")
        assert app.recorder is made[0]
        app.refresh_view()
        assert "REC s0.lwsession 12.3 kB" in status.plain
        await pilot.press("w")
        assert app.recorder is None and made[0].closed
        # ?: help, escape closes it
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        await pilot.press("escape")
        await pilot.pause()
        assert not isinstance(app.screen, HelpScreen)
        # q: quit, stopping the driver
        await pilot.press("q")
        await pilot.pause()
    assert app.return_value == 0
    assert app._stop.is_set()


async def test_recording_unavailable_and_no_alarm_rules_are_said() -> None:
    mon = make_monitor()
    app = LobewatchApp(mon, FakeDriver(mon, [sample_tick()]), refresh_hz=20)
    async with app.run_test(size=(80, 24), notifications=True) as pilot:
        await settle(pilot, app)
        await pilot.press("w")
        await pilot.press("a")
        msgs = [n.message for n in app._notifications]
        assert any("Recording is unavailable" in m for m in msgs)
        assert any("No alarm rules configured" in m for m in msgs)
        assert app.query_one(AlarmList).lines == ["no alarm rules configured"]


async def test_help_page_explains_readings_and_carries_safety() -> None:
    mon = make_monitor()
    app = LobewatchApp(mon, None, refresh_hz=0)
    async with app.run_test(size=(100, 40)) as pilot:
        await pilot.press("question_mark")
        await pilot.pause()
        body = " ".join(str(w.render()) for w in app.screen.query("Static"))
        for word in ("HPBW", "FNBW", "SLL", "F/B", "half-power", "STALE",
                     "main beam", "RF exposure", "Work at height", "licensed",
                     "Local codes"):
            assert word in body, word


async def test_replay_keys_call_the_player() -> None:
    mon = make_monitor()
    t = sample_tick()
    driver = FakeDriver(mon, [t], position=(t.t, t.t - 100.0, t.t + 300.0))
    app = LobewatchApp(mon, driver, mode="replay", refresh_hz=20)
    async with app.run_test(size=(160, 30)) as pilot:
        await settle(pilot, app)
        for key in ("space", "plus", "minus", "minus", "left", "right", "pageup",
                    "pagedown", "left_square_bracket", "right_square_bracket", "space"):
            await pilot.press(key)
        assert driver.calls == [
            ("pause",), ("set_speed", 2.0), ("set_speed", 1.0), ("set_speed", 0.5),
            ("seek", -10.0), ("seek", 10.0), ("seek", -60.0), ("seek", 60.0),
            ("prev_event",), ("next_event",), ("resume",)]
        app.refresh_view()
        plain = app.query_one(StatusLine).plain
        assert "replay" in plain and "0.5×" in plain and "01:40/06:40" in plain
        assert "╸" in plain  # the position bar
        footer = await footer_text(pilot, app)
        for word in ("play", "speed", "±10s", "±1m", "event", "help", "quit"):
            assert word in footer
        # recording is not offered in replay
        assert "rec" not in footer.split()


# -- states -----------------------------------------------------------------------------

async def test_dead_source_shows_stale() -> None:
    mon = make_monitor()
    live = sample_tick()
    dead = replace(sample_tick(state="stale"), t=live.t + 42.0)
    app = LobewatchApp(mon, FakeDriver(mon, [live, dead]), refresh_hz=20)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot, app)
        assert mon.last_tick is dead
        status = app.query_one(StatusLine)
        assert "STALE" in status.plain
        assert status.has_class("-stale")
        assert app.query_one("#rd-source").has_class("-stale")
        assert "STALE" in screen_text(app).splitlines()[0]


async def test_a_pipeline_that_stops_ticking_is_flagged(monkeypatch) -> None:
    import tui.app as appmod
    monkeypatch.setattr(appmod, "STALL_S", 0.1)
    mon = make_monitor()
    app = LobewatchApp(mon, FakeDriver(mon, [sample_tick()]), refresh_hz=20)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot, app)
        await pilot.pause(0.3)
        assert "no update" in app.query_one(StatusLine).plain


async def test_driver_failure_is_shown_not_raised() -> None:
    mon = make_monitor()

    class Broken(FakeDriver):
        async def run(self, stop):
            raise RuntimeError("socket exploded")

    app = LobewatchApp(mon, Broken(mon, []), refresh_hz=20)
    async with app.run_test(size=(80, 24), notifications=True) as pilot:
        await pilot.pause(0.1)
        assert app.driver_done and "socket exploded" in (app.driver_error or "")
        assert any("socket exploded" in n.message for n in app._notifications)
        assert "ended" in app.query_one(StatusLine).plain


async def test_alarm_list_shows_active_alarms_worst_first() -> None:
    class Engine:
        def active(self):
            return [
                AlarmStatus("drift", "drift", "raised", "minor", 1767269000.0, 2.5, 2.0,
                            "deg", "peak off target", acknowledged=True),
                AlarmStatus("gain_loss", "gain_loss", "raised", "critical", 1767269100.0,
                            7.2, 3.0, "dB", "gain down"),
            ]

        def acknowledge(self, key=None):
            return []

    mon = make_monitor(alarms=Engine())
    app = LobewatchApp(mon, FakeDriver(mon, [sample_tick()]), refresh_hz=20)
    async with app.run_test(size=(160, 30)) as pilot:
        await settle(pilot, app)
        lines = app.query_one(AlarmList).lines
        assert lines[0].startswith("CRIT ! ") and "gain_loss 7.2 dB vs 3.0 dB" in lines[0]
        assert lines[1].startswith("MINR ✓ ") and "drift 2.5° vs 2.0°" in lines[1]
        # narrow screen: shorter forms, still value and threshold, nothing cut
        await pilot.resize_terminal(80, 24)
        await pilot.pause(0.2)
        alarm_list = app.query_one(AlarmList)
        lines = alarm_list.lines
        assert "gain 7.2 dB vs 3.0 dB" in lines[0] and "drift 2.5° vs 2.0°" in lines[1]
        assert all(len(line) <= alarm_list.content_size.width for line in lines)


# -- sizes ------------------------------------------------------------------------------

@pytest.mark.parametrize("size", [(80, 24), (160, 50)])
async def test_screen_fits_and_resizes(size) -> None:
    mon = make_monitor(model=sample_model())
    app = LobewatchApp(mon, FakeDriver(mon, [sample_tick()]), refresh_hz=20)
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot, app)
        await pilot.resize_terminal(*size)
        await pilot.pause(0.15)
        w, h = size
        assert app.screen.size == (w, h)
        for wid in ("#status", "#polar", "#trace", "#readout", "#trend", "#alarms"):
            r = app.query_one(wid).region
            assert r.width > 0 and r.height > 0, wid
            assert r.right <= w and r.bottom <= h, wid
        # the polar widget was re-rasterised for its new size
        polar = app.query_one(PolarPlot)
        assert polar.geometry is not None and polar.geometry.width == polar.size.width
        text = screen_text(app)
        lines = text.splitlines()
        assert len(lines) == h
        assert "PEAK BEARING" in text and "HPBW" in text and "FNBW" in text
        assert "SLL" in text and "sweeps" in text and "rej" in text
        assert "◆" in text  # the peak marker
        assert "quit" in await footer_text(pilot, app)


async def test_no_color_keeps_every_mark_readable(monkeypatch) -> None:
    """NO_COLOR (no-color.org): Textual renders in monochrome; the marks must still be
    told apart by shape and words: peak diamond, target ring, legend patterns, states."""
    monkeypatch.setenv("NO_COLOR", "1")
    mon = make_monitor(model=sample_model())
    app = LobewatchApp(mon, FakeDriver(mon, [sample_tick(target_deg=-20.0)]), refresh_hz=20)
    assert app.no_color
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot, app)
        text = screen_text(app)
        for mark in ("◆", "◎", "━ live", "╌ −3dB", "╍ ref", "┈ model", "┊ target",
                     "● receiving", "OUT"):
            assert mark in text, mark


def test_garbage_is_collected_between_frames_on_a_schedule(monkeypatch) -> None:
    """Young generation after every frame, middle every 20th, full every 600th."""
    import gc

    import tui.app as appmod
    calls: list[int] = []
    monkeypatch.setattr(gc, "collect", lambda generation=2: calls.append(generation) or 0)
    app = LobewatchApp(make_monitor(), None, refresh_hz=0)
    for _ in range(appmod.GC_FULL_EVERY):
        app.collect_between_frames()
    assert calls.count(2) == 1 and calls[-1] == 2
    assert calls.count(1) == appmod.GC_FULL_EVERY // appmod.GC_MIDDLE_EVERY - 1
    assert calls.count(0) == len(calls) - calls.count(1) - 1


async def test_a_recording_started_by_the_command_line_shows_and_the_key_stops_it(
        tmp_path) -> None:
    """`lobewatch live --record FILE` starts recording before the screen opens: the
    status line shows it at once and the record key stops that same recording."""
    mon = make_monitor()
    rec = FakeRecorder(str(tmp_path / "site.lwsession"))
    app = LobewatchApp(mon, FakeDriver(mon, [sample_tick()]), refresh_hz=20, recorder=rec,
                       recorder_factory=lambda: FakeRecorder(str(tmp_path / "other.lwsession")))
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot, app)
        app.refresh_view()
        assert "REC site.lwsession 12.3 kB" in app.query_one(StatusLine).plain
        await pilot.press("w")
        assert app.recorder is None and rec.closed
