"""The beam screen in the app, one behaviour per test.

No sleeps and no polling: the refresh timer is off (``refresh_hz=0``) and each test
sets ``monitor.last_tick`` and calls ``refresh_view()`` itself; the app's clock is
injected; workers are awaited with ``app.workers.wait_for_complete()``; what is on
screen is read from the app's own screenshot (public API), not from private state.
"""

from __future__ import annotations

import asyncio
import html
import re
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
from tui.beam_screen import STALL_S, BeamScreen
from tui.gc_pacing import GC_FULL_EVERY, GC_MIDDLE_EVERY, GcPacer
from tui.screens import HelpScreen
from tui.widgets.alarmlist import AlarmList
from tui.widgets.polar import PolarPlot
from tui.widgets.readout import MetricGrid, Readout
from tui.widgets.sample import sample_model, sample_tick
from tui.widgets.status import StatusLine


class FakePlayer:
    """A playback driver that records the controls it is given; runs until stopped."""

    def __init__(self, position=None) -> None:
        self.calls: list[tuple] = []
        self.speed = 1.0
        self.paused = False
        self._position = position

    async def run(self, stop: asyncio.Event) -> None:
        await stop.wait()

    @property
    def position(self):
        return self._position

    def pause(self) -> None:
        self.calls.append(("pause",))

    def resume(self) -> None:
        self.calls.append(("resume",))

    def set_speed(self, speed: float) -> None:
        self.calls.append(("set_speed", speed))

    def seek(self, delta_s: float) -> None:
        self.calls.append(("seek", delta_s))

    def next_event(self) -> None:
        self.calls.append(("next_event",))

    def prev_event(self) -> None:
        self.calls.append(("prev_event",))


class WaitingDriver:
    """Runs until stopped."""

    async def run(self, stop: asyncio.Event) -> None:
        await stop.wait()


class FakeRecorder:
    def __init__(self, path: str) -> None:
        self.path = path
        self.size_bytes = 12_345
        self.closed = False

    def close(self) -> None:
        self.closed = True


class FakeClock:
    def __init__(self, t: float = 1000.0) -> None:
        self.t = t

    def __call__(self) -> float:
        return self.t


def make_monitor(alarms=None, model=None) -> Monitor:
    return Monitor(RollingPattern(EstimatorConfig()), alarms, model)


def make_app(mon: Monitor | None = None, driver=None, **kw) -> LobewatchApp:
    mon = mon if mon is not None else make_monitor()
    if mon.last_tick is None:
        mon.last_tick = sample_tick()
    kw.setdefault("refresh_hz", 0)
    return LobewatchApp(mon, driver, **kw)


def beam(app: LobewatchApp) -> BeamScreen:
    assert isinstance(app.screen, BeamScreen)
    return app.screen


def screen_text(app: LobewatchApp) -> str:
    """The screen as plain text, rows in order, from the app's SVG screenshot."""
    svg = app.export_screenshot()
    rows: dict[int, dict[int, str]] = {}
    pat = (r'<text class="[^"]*" x="([\d.]+)" y="[\d.]+" textLength="[\d.]+" '
           r'clip-path="url\(#terminal-(?:\d+-)?line-(\d+)\)">(.*?)</text>')
    cell_w = 12.2  # Textual's SVG export: 0.61 em at 20 px per cell column
    for m in re.finditer(pat, svg):
        col = round(float(m.group(1)) / cell_w)
        row = rows.setdefault(int(m.group(2)), {})
        for i, ch in enumerate(html.unescape(m.group(3)).replace("\xa0", " ")):
            row[col + i] = ch
    return "\n".join("".join(r.get(i, " ") for i in range(max(r, default=-1) + 1))
                     for _, r in sorted(rows.items()))


def record_notes(app: LobewatchApp) -> list[str]:
    notes: list[str] = []
    original = app.notify

    def notify(message, *a, **kw):
        notes.append(str(message))
        return original(message, *a, **kw)

    app.notify = notify  # type: ignore[method-assign]
    return notes


# -- readout ----------------------------------------------------------------------------

async def test_readout_shows_the_values_of_a_known_tick() -> None:
    mon = make_monitor(model=sample_model())
    tick = sample_tick()
    mon.last_tick = tick
    app = make_app(mon)
    async with app.run_test(size=(80, 24)):
        v = app.screen.query_one(Readout).values()
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
        text = screen_text(app)
        assert "PEAK BEARING" in text and "HPBW" in text


async def test_hovering_a_metric_names_its_key_and_an_undetermined_one_says_why() -> None:
    app = make_app(make_monitor(model=sample_model()))
    async with app.run_test(size=(80, 24)) as pilot:
        assert str(app.screen.query_one("#rd-peak-label").tooltip).startswith(
            "peak_angle_deg")
        grid = app.screen.query_one(MetricGrid)
        await pilot.hover(grid, offset=(1, 0))  # row 0, left pair: HPBW label
        assert str(grid.tooltip).startswith("hpbw_deg")
        await pilot.hover(grid, offset=(grid.pair_width() + 9, 2))  # row 2, right value
        assert str(grid.tooltip).startswith("sll_angle_deg")
        await pilot.hover(grid, offset=(2, 3))  # row 3, left: peak power
        assert str(grid.tooltip).startswith("peak_power_db")
        await pilot.hover(grid, offset=(grid.pair_width() + 2, 1))  # F/B, undetermined
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
    batches = _sweep_batches(model, 4, 1_767_268_800.0)
    for b in batches:
        mon.ingest(b)
    tick = mon.tick(batches[-1].rx_t + 0.01, SourceStats(state="receiving", messages=32))
    app = make_app(mon)
    async with app.run_test(size=(80, 24)):
        assert tick.metrics.hpbw_deg is not None
        assert abs(tick.metrics.hpbw_deg - 12.80) < 0.5
        v = app.screen.query_one(Readout).values()
        sigma = tick.metrics.uncertainty.get("hpbw_deg")
        shown_sigma = "" if sigma is None else (f"±{sigma:.1f}" if sigma >= 0.05 else "±<0.1")
        assert v["rd-v-hpbw"] == f"{tick.metrics.hpbw_deg:.1f}{shown_sigma}°"
        # rounded as shown, and never "-0.0"
        assert v["rd-digits"].strip() == f"{round(tick.metrics.peak_angle_deg, 1) + 0.0:+.1f}"
        assert v["rd-digits"].strip() != "-0.0"
        assert abs(tick.metrics.peak_angle_deg) < 0.3
        assert v["rd-v-exp"] == f"{tick.expected_hpbw_deg:.1f}°"


# -- footer and help --------------------------------------------------------------------

LIVE_KEYS = {"p": "pause", "r": "ref", "c": "unref", "t": "target", "z": "reset",
             "d": "dB/lin", "v": "swap", "a": "ack", "w": "rec", "question_mark": "help",
             "q": "quit"}


async def test_footer_offers_every_live_key_and_no_replay_key() -> None:
    app = make_app()
    async with app.run_test(size=(100, 24)) as pilot:
        await pilot.pause()
        screen = beam(app)
        shown = {key: b.binding.description for key, b in screen.active_bindings.items()
                 if b.binding.show and b.enabled
                 and screen.check_action(b.binding.action, ())}
        for key, desc in LIVE_KEYS.items():
            assert shown.get(key) == desc, key
        footer = screen_text(app).splitlines()[-1]
        for desc in LIVE_KEYS.values():
            assert desc in footer, desc
        assert "space" not in shown and "left" not in shown


async def help_text(app: LobewatchApp, pilot, size=(100, 160)) -> str:
    """The help page as shown on a terminal tall enough to hold all of it."""
    await pilot.resize_terminal(*size)
    await pilot.press("question_mark")
    await pilot.pause()
    assert isinstance(app.screen, HelpScreen)
    return screen_text(app)


async def test_help_page_lists_every_offered_key_from_the_bindings() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        keys = beam(app).help_keys()
        body = " ".join((await help_text(app, pilot)).split())
        assert ("p", "pause / resume the display (data keeps flowing in)") in keys
        assert all(not text.startswith("replay:") for _, text in keys)
        for _, text in keys:
            assert text[:40] in body, text  # long ones wrap inside the page's frame


async def test_help_page_indents_a_wrapped_key_line_under_its_text() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        lines = (await help_text(app, pilot, size=(56, 160))).splitlines()
        row = next(i for i, line in enumerate(lines) if "│ p  pause" in line)
        text_col = lines[row].index("pause")
        follow = lines[row + 1]  # "(data keeps flowing in)" wrapped to the next line
        assert follow[text_col - 3:text_col] == "   " and follow[text_col] != " "


async def test_help_page_indents_a_wrapped_safety_bullet() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        lines = (await help_text(app, pilot, size=(56, 160))).splitlines()
        row = next(i for i, line in enumerate(lines) if "• RF exposure" in line)
        text_col = lines[row].index("RF exposure")
        assert lines[row + 1][text_col - 1] == " " and lines[row + 1][text_col] != " "


async def test_help_page_explains_readings_and_carries_safety() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        body = " ".join((await help_text(app, pilot)).split())
        for word in ("HPBW", "FNBW", "SLL", "F/B", "half-power", "STALE",
                     "main beam", "RF exposure", "Work at height", "licensed",
                     "Local codes"):
            assert word in body, word


async def test_escape_closes_the_help_page() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("question_mark")
        await pilot.press("escape")
        assert isinstance(app.screen, BeamScreen)


# -- live keys, one each -----------------------------------------------------------------

async def test_p_freezes_the_display_and_says_so() -> None:
    mon = make_monitor()
    tick = sample_tick()
    mon.last_tick = tick
    app = make_app(mon)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("p")
        mon.last_tick = replace(tick, t=tick.t + 1.0)
        beam(app).refresh_view()
        assert beam(app).shown_tick is tick
        assert "DISPLAY PAUSED" in app.screen.query_one(StatusLine).plain


async def test_p_again_shows_the_latest_tick() -> None:
    mon = make_monitor()
    tick = sample_tick()
    mon.last_tick = tick
    app = make_app(mon)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("p")
        newer = replace(tick, t=tick.t + 1.0)
        mon.last_tick = newer
        await pilot.press("p")
        assert beam(app).shown_tick is newer
        assert "DISPLAY PAUSED" not in app.screen.query_one(StatusLine).plain


async def test_r_captures_the_reference_and_draws_it_at_once() -> None:
    mon = make_monitor(model=sample_model())
    mon.last_tick = sample_tick(with_reference=False)
    app = make_app(mon)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("r")
        assert mon.reference is not None
        assert app.screen.query_one(PolarPlot).tick.reference is mon.reference


async def test_c_clears_the_reference() -> None:
    mon = make_monitor()
    mon.last_tick = sample_tick(with_reference=False)
    app = make_app(mon)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("r")
        await pilot.press("c")
        assert mon.reference is None
        assert app.screen.query_one(PolarPlot).tick.reference is None


async def test_t_sets_the_target_to_the_current_peak_with_a_tolerance() -> None:
    mon = make_monitor()
    tick = sample_tick(target_deg=None)
    mon.last_tick = tick
    app = make_app(mon)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("t")
        assert mon.target_deg == pytest.approx(round(tick.metrics.peak_angle_deg, 1))
        assert mon.tolerance_deg is not None and mon.tolerance_deg > 0
        assert app.screen.query_one(Readout).values()["rd-target"].startswith("tgt ")


async def test_z_resets_the_estimator_and_the_next_readout_says_so() -> None:
    mon = make_monitor()
    mon.estimator.update(SampleBatch.from_arrays([1.0, 2.0], [-30.0, -31.0], 1.0,
                                                 rx_t=1.0), 1.0)
    app = make_app(mon)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("z")
        assert mon.estimator.samples == 0
        tick = mon.tick(2.0, SourceStats(state="receiving"))
        assert any(e.kind == "reset" for e in tick.events)


async def test_d_switches_the_polar_radius_between_db_and_linear() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        polar = app.screen.query_one(PolarPlot)
        await pilot.press("d")
        assert polar.scale == "linear"
        await pilot.press("d")
        assert polar.scale == "db"


async def test_v_gives_the_trace_the_larger_share() -> None:
    app = make_app(make_monitor(model=sample_model()))
    async with app.run_test(size=(80, 24)) as pilot:
        polar, trace = app.screen.query_one("#polar"), app.screen.query_one("#trace")
        h_polar = polar.size.height
        await pilot.press("v")
        await pilot.pause()
        assert polar.size.height < h_polar
        assert trace.size.height > polar.size.height


async def test_a_acknowledges_the_active_alarms() -> None:
    engine = AlarmEngine(AlarmConfig())
    calls: list = []
    engine.acknowledge = lambda key=None: calls.append(key) or []  # type: ignore
    app = make_app(make_monitor(alarms=engine))
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("a")
        assert calls == [None]


async def test_w_starts_a_recording_in_a_worker_and_shows_its_file_and_size(tmp_path) -> None:
    made: list[FakeRecorder] = []

    def factory() -> FakeRecorder:
        made.append(FakeRecorder(str(tmp_path / "s0.lwsession")))
        return made[-1]

    app = make_app(recorder_factory=factory)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("w")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert beam(app).recorder is made[0]
        assert "REC s0.lwsession 12.3 kB" in app.screen.query_one(StatusLine).plain


async def test_w_again_closes_the_recording_in_a_worker_and_says_its_size(tmp_path) -> None:
    rec = FakeRecorder(str(tmp_path / "s0.lwsession"))
    app = make_app(recorder=rec, recorder_factory=lambda: FakeRecorder("unused"))
    notes = record_notes(app)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("w")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert rec.closed and beam(app).recorder is None
        assert any("Recording stopped" in n and "12.3 kB" in n for n in notes)
        assert "REC" not in app.screen.query_one(StatusLine).plain


async def test_a_recording_that_cannot_start_is_said(tmp_path) -> None:
    from stream.errors import UserError

    def factory():
        raise UserError("disk full: cannot create the session file")

    app = make_app(recorder_factory=factory)
    notes = record_notes(app)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("w")
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert beam(app).recorder is None
        assert any("disk full" in n for n in notes)


async def test_recording_unavailable_is_said() -> None:
    app = make_app()
    notes = record_notes(app)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("w")
        assert any("Recording is unavailable" in n for n in notes)


async def test_no_alarm_rules_is_said_and_shown() -> None:
    app = make_app()
    notes = record_notes(app)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("a")
        assert any("No alarm rules configured" in n for n in notes)
        assert app.screen.query_one(AlarmList).lines == ["no alarm rules configured"]


async def test_q_quits_and_tells_the_driver_to_stop() -> None:
    app = make_app(driver=WaitingDriver())
    async with app.run_test(size=(80, 24)) as pilot:
        screen = beam(app)
        await pilot.press("q")
    assert app.return_value == 0
    assert screen.stop_event.is_set()


async def test_a_recording_started_by_the_command_line_shows_at_once(tmp_path) -> None:
    """`lobewatch live --record FILE` starts recording before the screen opens."""
    rec = FakeRecorder(str(tmp_path / "site.lwsession"))
    app = make_app(recorder=rec)
    async with app.run_test(size=(80, 24)):
        assert "REC site.lwsession 12.3 kB" in app.screen.query_one(StatusLine).plain


async def test_the_recording_size_is_read_at_most_once_a_second(tmp_path) -> None:
    rec = FakeRecorder(str(tmp_path / "site.lwsession"))
    clock = FakeClock()
    app = make_app(recorder=rec, clock=clock)
    async with app.run_test(size=(80, 24)):
        status = app.screen.query_one(StatusLine)
        rec.size_bytes = 2_000_000
        clock.t += 0.5
        beam(app).refresh_view()
        assert "12.3 kB" in status.plain
        clock.t += 0.5
        beam(app).refresh_view()
        assert "2.0 MB" in status.plain


# -- replay keys ------------------------------------------------------------------------

@pytest.mark.parametrize(("keys", "calls"), [
    (["space"], [("pause",)]),
    (["space", "space"], [("pause",), ("resume",)]),
    (["plus"], [("set_speed", 2.0)]),
    (["minus"], [("set_speed", 0.5)]),
    (["left"], [("seek", -10.0)]),
    (["right"], [("seek", 10.0)]),
    (["pageup"], [("seek", -60.0)]),
    (["pagedown"], [("seek", 60.0)]),
    (["left_square_bracket"], [("prev_event",)]),
    (["right_square_bracket"], [("next_event",)]),
])
async def test_replay_key_calls_the_player(keys, calls) -> None:
    t = sample_tick()
    player = FakePlayer(position=(t.t, t.t - 100.0, t.t + 300.0))
    app = make_app(driver=player, mode="replay")
    async with app.run_test(size=(160, 30)) as pilot:
        for key in keys:
            await pilot.press(key)
        assert player.calls == calls


async def test_replay_status_shows_speed_and_position() -> None:
    t = sample_tick()
    player = FakePlayer(position=(t.t, t.t - 100.0, t.t + 300.0))
    app = make_app(driver=player, mode="replay")
    async with app.run_test(size=(160, 30)) as pilot:
        await pilot.press("minus")
        plain = app.screen.query_one(StatusLine).plain
        assert "replay" in plain and "0.5×" in plain and "01:40/06:40" in plain
        assert "╸" in plain  # the position bar


async def test_replay_key_bar_at_80_columns_keeps_the_playback_keys_and_help() -> None:
    """At 80 columns not every key fits: the playback keys and ``? help`` (where the
    rest are listed) stay, the bar is not cut mid-word."""
    app = make_app(driver=FakePlayer(), mode="replay")
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        bar = screen_text(app).splitlines()[-1]
        for word in ("␣ play", "- + speed", "← → ±10s", "[ ] event", "? help", "q quit"):
            assert word in bar, word
        assert len(bar.rstrip()) <= 80 and "…" not in bar


async def test_live_key_bar_at_80_columns_shows_every_live_key() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        bar = screen_text(app).splitlines()[-1]
        for desc in LIVE_KEYS.values():
            assert desc in bar, desc


async def test_replay_footer_offers_the_playback_keys_and_not_recording() -> None:
    app = make_app(driver=FakePlayer(), mode="replay")
    async with app.run_test(size=(160, 30)) as pilot:
        await pilot.pause()
        footer = screen_text(app).splitlines()[-1]
        for word in ("play", "speed", "±10s", "±1m", "event", "help", "quit"):
            assert word in footer, word
        assert "rec" not in footer.split()


# -- states -----------------------------------------------------------------------------

async def test_dead_source_shows_stale() -> None:
    mon = make_monitor()
    mon.last_tick = sample_tick(state="stale")
    app = make_app(mon)
    async with app.run_test(size=(80, 24)):
        status = app.screen.query_one(StatusLine)
        assert "STALE" in status.plain and status.has_class("-stale")
        assert app.screen.query_one("#rd-source").has_class("-stale")
        assert "STALE" in screen_text(app).splitlines()[0]


async def test_a_pipeline_that_stops_ticking_is_flagged() -> None:
    clock = FakeClock()
    app = make_app(driver=WaitingDriver(), clock=clock)
    async with app.run_test(size=(80, 24)):
        status = app.screen.query_one(StatusLine)
        clock.t += STALL_S / 2
        beam(app).refresh_view()
        assert "no update" not in status.plain
        clock.t += STALL_S
        beam(app).refresh_view()
        assert "no update" in status.plain


async def test_driver_failure_is_shown_not_raised() -> None:
    class Broken:
        async def run(self, stop):
            raise RuntimeError("socket exploded")

    app = make_app(driver=Broken())
    notes = record_notes(app)
    async with app.run_test(size=(80, 24)) as pilot:
        await app.workers.wait_for_complete()
        await pilot.pause()
        assert "socket exploded" in (app.driver_error or "")
        assert any("socket exploded" in n for n in notes)
        assert "ended" in app.screen.query_one(StatusLine).plain


class TwoAlarms:
    def active(self):
        return [
            AlarmStatus("drift", "drift", "raised", "minor", 1767269000.0, 2.5, 2.0,
                        "deg", "peak off target", acknowledged=True),
            AlarmStatus("gain_loss", "gain_loss", "raised", "critical", 1767269100.0,
                        7.2, 3.0, "dB", "gain down"),
        ]

    def acknowledge(self, key=None):
        return []


async def test_alarm_list_shows_active_alarms_worst_first() -> None:
    app = make_app(make_monitor(alarms=TwoAlarms()))
    async with app.run_test(size=(160, 30)):
        lines = app.screen.query_one(AlarmList).lines
        # one row format: time, rule, "value vs limit unit"
        assert lines[0].startswith("CRIT ! ") and "gain_loss 7.2 vs 3.0 dB" in lines[0]
        assert lines[1].startswith("MINR ✓ ") and "drift 2.5 vs 2.0°" in lines[1]
        assert "12:" in lines[0] or ":" in lines[0].split()[2]


async def test_alarm_rows_keep_value_and_threshold_on_a_narrow_screen() -> None:
    app = make_app(make_monitor(alarms=TwoAlarms()))
    async with app.run_test(size=(160, 30)) as pilot:
        await pilot.resize_terminal(80, 24)
        await pilot.pause()
        beam(app).refresh_view()
        alarm_list = app.screen.query_one(AlarmList)
        lines = alarm_list.lines
        assert "7.2 vs 3.0 dB" in lines[0] and "2.5 vs 2.0°" in lines[1]
        assert all(len(line) <= alarm_list.content_size.width for line in lines)


# -- sizes ------------------------------------------------------------------------------

@pytest.mark.parametrize("size", [(80, 24), (160, 50)])
async def test_screen_fits_and_resizes(size) -> None:
    app = make_app(make_monitor(model=sample_model()))
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.resize_terminal(*size)
        await pilot.pause()
        w, h = size
        assert app.screen.size == (w, h)
        for wid in ("#status", "#polar", "#trace", "#readout", "#trend", "#alarms"):
            r = app.screen.query_one(wid).region
            assert r.width > 0 and r.height > 0, wid
            assert r.right <= w and r.bottom <= h, wid
        text = screen_text(app)
        polar = app.screen.query_one(PolarPlot)
        assert polar.geometry is not None and polar.geometry.width == polar.size.width
        assert len(text.splitlines()) == h
        for word in ("PEAK BEARING", "HPBW", "FNBW", "SLL", "sweeps", "rej", "◆", "quit"):
            assert word in text, word


async def test_no_color_keeps_every_mark_readable(monkeypatch) -> None:
    """NO_COLOR (no-color.org): Textual renders in monochrome; the marks must still be
    told apart by shape and words: peak diamond, target ring, legend patterns, states."""
    monkeypatch.setenv("NO_COLOR", "1")
    mon = make_monitor(model=sample_model())
    mon.last_tick = sample_tick(target_deg=-20.0)
    app = make_app(mon)
    assert app.no_color
    async with app.run_test(size=(120, 40)):
        text = screen_text(app)
        for mark in ("◆", "◎", "━ live", "╌ −3dB", "╍ ref", "┈ model", "┊ target",
                     "● receiving", "OUT"):
            assert mark in text, mark


# -- garbage-collector pacing -------------------------------------------------------------

def test_garbage_is_collected_between_frames_on_a_schedule(monkeypatch) -> None:
    """Young generation after every frame, middle every 20th, full every 600th."""
    import gc

    calls: list[int] = []
    monkeypatch.setattr(gc, "collect", lambda generation=2: calls.append(generation) or 0)
    pacer = GcPacer()
    for _ in range(GC_FULL_EVERY):
        pacer.after_frame()
    assert calls.count(2) == 1 and calls[-1] == 2
    assert calls.count(1) == GC_FULL_EVERY // GC_MIDDLE_EVERY - 1
    assert calls.count(0) == len(calls) - calls.count(1) - 1


async def test_the_app_leaves_the_collector_alone_under_tests() -> None:
    app = make_app()
    async with app.run_test(size=(80, 24)):
        assert not app.gc_pacer.active


# -- a large terminal: readout and alarms get the room; the alarm history ----------------

async def test_at_120x40_the_side_column_is_wider_than_at_80x24() -> None:
    app = make_app(make_monitor(alarms=TwoAlarms()))
    async with app.run_test(size=(80, 24)) as pilot:
        narrow = app.screen.query_one("#side").size.width
        await pilot.resize_terminal(120, 40)
        await pilot.pause()
        wide = app.screen.query_one("#side").size.width
        assert wide >= 50 > narrow
        history = app.screen.query_one("#history")
        assert history.display and history.size.height >= 5
        assert app.screen.query_one("#alarms").size.height >= 2  # both alarms, one row each


class AckingAlarms(TwoAlarms):
    def acknowledge(self, key=None):
        return ["gain_loss"]


async def test_alarm_history_keeps_raised_acknowledged_and_cleared_rows() -> None:
    from stream.tick import Event
    mon = make_monitor(alarms=AckingAlarms())
    app = make_app(mon)
    async with app.run_test(size=(120, 40)) as pilot:
        t0 = 1767269000.0
        base = {"rule": "gain_loss", "value": 7.2, "threshold": 3.0, "unit": "dB",
                "key": "gain_loss"}
        mon.emit(Event(t0, "alarm", {**base, "transition": "raise"}))
        beam(app).refresh_view()
        await pilot.press("a")
        mon.emit(Event(t0 + 60.0, "alarm", {**base, "value": 1.0, "transition": "clear"}))
        beam(app).refresh_view()
        rows = app.screen.query_one("#history").rows
        assert [r.split()[1] for r in rows] == ["RAISED", "ACKED", "CLEARED"]
        assert rows[0].endswith("gain_loss 7.2 vs 3.0 dB")
        assert rows[2].endswith("gain_loss 1.0 vs 3.0 dB")
        assert all(re.match(r"\d\d:\d\d:\d\d ", r) for r in rows)


async def test_alarm_history_scrolls_to_the_newest_row() -> None:
    from stream.tick import Event
    mon = make_monitor(alarms=TwoAlarms())
    app = make_app(mon)
    async with app.run_test(size=(120, 40)) as pilot:
        for k in range(60):
            mon.emit(Event(1767269000.0 + k, "alarm", {
                "rule": "drift", "value": 2.5, "threshold": 2.0, "unit": "deg",
                "transition": "raise" if k % 2 == 0 else "clear"}))
        beam(app).refresh_view()
        history = app.screen.query_one("#history")
        # RichLog scrolls after its next refresh; on a busy machine that can take
        # more than one turn of the event loop, so wait a bounded number of turns.
        for _ in range(100):
            await pilot.pause()
            if history.max_scroll_y > 0 and history.scroll_y == history.max_scroll_y:
                break
        assert len(history.rows) == 60
        assert history.max_scroll_y > 0 and history.scroll_y == history.max_scroll_y


async def test_the_status_line_says_when_simulated_time_runs_faster() -> None:
    app = make_app(mode="demo", mode_note="sim time 10×")
    async with app.run_test(size=(80, 24)):
        assert "demo · sim time 10×" in app.screen.query_one(StatusLine).plain


# -- honest state: stale, provisional, uncertainty, reasons, columns, bearing, record -----

async def test_a_stale_readout_greys_the_bearing_and_says_its_age() -> None:
    mon = make_monitor()
    mon.last_tick = replace(sample_tick(state="stale"), age_s=42.0, provisional=False)
    app = make_app(mon)
    async with app.run_test(size=(80, 24)):
        readout = app.screen.query_one(Readout)
        assert readout.values()["rd-spread"] == "STALE · 42 s old"
        assert app.screen.query_one("#rd-digits").has_class("-stale")


async def test_a_readout_before_the_first_full_sweep_is_marked_provisional() -> None:
    mon = make_monitor()
    mon.last_tick = replace(sample_tick(), provisional=True)
    app = make_app(mon)
    async with app.run_test(size=(80, 24)):
        assert app.screen.query_one(Readout).values()["rd-spread"].startswith("provisional")
        assert app.screen.query_one("#rd-digits").has_class("-provisional")


async def test_one_sigma_uncertainty_is_shown_beside_hpbw_and_sll() -> None:
    mon = make_monitor()
    t = sample_tick()
    m = replace(t.metrics, uncertainty={"hpbw_deg": 0.3, "sll_db": 0.4,
                                        "peak_angle_deg": 0.05})
    mon.last_tick = replace(t, metrics=m, provisional=False)
    app = make_app(mon)
    async with app.run_test(size=(120, 40)):
        v = app.screen.query_one(Readout).values()
        assert v["rd-v-hpbw"] == f"{m.hpbw_deg:.1f}±0.3°"
        assert v["rd-v-sll"] == f"{m.sll_db:.1f}±0.4 dB"
        assert "σ0.05°" in v["rd-spread"]
        assert f"{m.hpbw_deg:.1f}±0.3°" in screen_text(app)


async def test_the_reason_for_a_dash_is_on_screen_without_a_mouse() -> None:
    mon = make_monitor(model=sample_model())
    mon.last_tick = sample_tick()  # front-to-back undetermined in the sample
    app = make_app(mon)
    notes = record_notes(app)
    async with app.run_test(size=(80, 24)) as pilot:
        why = app.screen.query_one(Readout).values()["rd-why"]
        assert why.startswith("— F/B: ") and "back direction" in why
        await pilot.press("e")
        assert any("F/B:" in n and "back direction" in n for n in notes)


async def test_bearing_and_column_diagnosis_are_shown_when_set() -> None:
    from stream.bearing import BearingConvention
    from stream.diagnosis import ColumnDiagnosis
    mon = make_monitor(model=sample_model())
    t = sample_tick()
    cols = ColumnDiagnosis([1.0, 0.0, 1.0, 1.0], 3.0, [[2, 3]], ["dead"])
    mon.last_tick = replace(t, bearing=BearingConvention(100.0), columns=cols)
    app = make_app(mon)
    async with app.run_test(size=(120, 40)):
        extra = app.screen.query_one(Readout).values()["rd-extra"]
        peak = t.metrics.peak_angle_deg
        assert f"brg {100.0 + peak:05.1f}°T" in extra  # clockwise sense: offset + angle
        assert "3.0 of 4 columns; suspect 2 or 3 (dead)" in extra


async def test_the_radio_lag_estimate_is_on_the_readout_with_its_sigma() -> None:
    """Issue: the lag between the IQ and angle clocks is shown in the readout with its
    uncertainty; it arrives as a ``radio`` event and stays on every later tick."""
    from stream.angle_join import LagEstimate
    from tui.iq_options import lag_event
    mon = make_monitor()
    mon.emit(lag_event(5.0, LagEstimate(0.0412, 0.0013, 3, 30.0)))
    tick = mon.tick(6.0, SourceStats(state="receiving"))
    assert tick.radio == "lag 41.2 +/- 1.3 ms (3 pairs)"
    mon.last_tick = replace(sample_tick(), radio=tick.radio)
    app = make_app(mon)
    async with app.run_test(size=(120, 40)):
        assert "lag 41.2 ± 1.3 ms (3 pairs)" in app.screen.query_one(Readout).values()["rd-extra"]


async def test_k_writes_a_commissioning_record_in_a_worker_and_says_where(tmp_path) -> None:
    mon = make_monitor(model=sample_model())
    mon.last_tick = sample_tick()
    app = make_app(mon, record_dir=str(tmp_path))
    notes = record_notes(app)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.press("k")
        await app.workers.wait_for_complete()
        await pilot.pause()
    written = [n for n in notes if n.startswith("Commissioning record written: ")]
    assert written, notes
    path = written[0].split(": ", 1)[1]
    assert path.startswith(str(tmp_path)) and path.endswith("record.html")
    import os
    assert os.path.exists(path)
