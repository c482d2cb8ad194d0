"""Replay through the same pipeline: exactness, pacing, pause, seek and event jumps.

The reference for "right" here is the live run itself: a monitor fed in-process while a
recorder is attached computes metrics at each tick; replaying the file into a fresh
monitor must give the identical records at the identical times (the session format's
promise, docs/session-format.md).
"""

from __future__ import annotations

import asyncio
import json
import math

import numpy as np
import pytest

from replay.player import Player
from replay.recorder import Recorder
from replay.session import SessionReader
from replay.session_writer import SessionWriter
from stream.alarms import AlarmConfig, AlarmEngine
from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from stream.tick import SourceStats

T0 = 1_767_225_600.0  # invented session start (Unix s)
MODEL = ArrayModel(n_elements=8, spacing_wl=0.5)
_GRID = np.arange(-180.0, 180.0, 0.01)
_TABLE = MODEL.power_db(_GRID)  # model evaluated once; the generator interpolates


def model_db(angle_deg: np.ndarray) -> np.ndarray:
    return np.interp((angle_deg + 180.0) % 360.0 - 180.0, _GRID, _TABLE)


def make_monitor(alarms: bool = True) -> Monitor:
    eng = AlarmEngine(AlarmConfig(target_deg=2.0, tolerance_deg=1.0, sll_limit_db=-14.0)) \
        if alarms else None
    return Monitor(RollingPattern(EstimatorConfig(tau_s=1.0)), eng, MODEL,
                   target_deg=2.0, tolerance_deg=1.0)


def sweep_batches(duration_s: float, rate_sps: float = 20_000.0, per_batch: int = 200,
                  seed: int = 1, drift_deg_per_s: float = 0.2):
    """Invented test data: an 8-element beam swept -60..60 deg every 4 s, slowly
    drifting, with receiver noise; yields (rx_t, batch)."""
    rng = np.random.default_rng(seed)
    n_batches = int(duration_s * rate_sps / per_batch)
    dt = 1.0 / rate_sps
    for k in range(n_batches):
        t = T0 + (k * per_batch + np.arange(per_batch)) * dt
        phase = ((t - T0) / 4.0) % 1.0
        angle = np.where(phase < 0.5, -60 + 240 * phase, 180 - 240 * phase)
        point = drift_deg_per_s * (t - T0)
        power = -30.0 + model_db(angle - point) + rng.normal(0, 0.3, per_batch)
        power = np.maximum(power, -90.0)
        yield float(t[-1]), SampleBatch(t, angle, power, rx_t=float(t[-1]), seq=k, epoch="ab")


def record_live(path, duration_s: float = 12.0, threaded: bool = True):
    """Run a monitor 'live' with a recorder attached; returns the live records."""
    mon = make_monitor()
    rec = Recorder(path, {"notes": "invented test session"}, threaded=threaded).attach(mon)
    records: list[str] = []
    events: list[str] = []
    mon.event_sinks.append(lambda ev: events.append(json.dumps(ev.to_dict())))
    mon.tick_sinks.append(lambda tk: records.append(json.dumps(tk.metrics_record())))
    next_tick = T0 + 0.1
    msgs = 0
    for rx_t, b in sweep_batches(duration_s):
        while next_tick < rx_t:
            mon.tick(next_tick, SourceStats(state="receiving", messages=msgs,
                                            rejected={"bad_json": msgs // 50}))
            if abs(next_tick - (T0 + 5.0)) < 0.05:
                mon.capture_reference(next_tick)
                mon.mark(next_tick, "installer: bracket tightened (invented)")
            if abs(next_tick - (T0 + 8.0)) < 0.05:
                mon.set_target(next_tick, 1.0, 0.5)
            next_tick += 0.1
        mon.ingest(b)
        msgs += 1
    mon.tick(next_tick, SourceStats(state="ended", messages=msgs))
    rec.close()
    return records, events


def replay_records(path, **kw):
    mon = make_monitor()
    records: list[str] = []
    events: list[str] = []
    mon.event_sinks.append(lambda ev: events.append(json.dumps(ev.to_dict())))
    mon.tick_sinks.append(lambda tk: records.append(json.dumps(tk.metrics_record())))
    with Player(path, mon, speed=math.inf, **kw) as p:
        p.run_fast()
    return records, events


@pytest.fixture(scope="module")
def live_session(tmp_path_factory):
    path = tmp_path_factory.mktemp("s") / "live.lwsession"
    records, events = record_live(path)
    return path, records, events


def test_replay_reproduces_live_metrics_exactly(live_session):
    path, live, live_events = live_session
    assert len(live) > 100
    got, got_events = replay_records(path)
    assert got == live  # same times, same metrics, same counters, line for line
    assert got_events == live_events  # user events re-applied, alarms re-judged the same
    kinds = {json.loads(e)["kind"] for e in live_events}
    assert {"reference", "marker", "target", "alarm"} <= kinds


def test_two_replays_identical_and_reader_counts(live_session):
    path = live_session[0]
    assert replay_records(path) == replay_records(path)


def test_replay_with_other_thresholds_rejudges(live_session):
    """Recorded alarm events are not re-emitted: a monitor without alarms sees none."""
    path = live_session[0]
    mon = make_monitor(alarms=False)
    seen: list[str] = []
    mon.event_sinks.append(lambda ev: seen.append(ev.kind))
    with Player(path, mon, speed=math.inf) as p:
        p.run_fast()
    assert "alarm" not in seen and "marker" in seen


def test_seek_settles_pattern_and_reads_few_rows(live_session):
    path, live, _ = live_session
    target = T0 + 10.0
    full = make_monitor()
    with Player(path, full, speed=math.inf) as p:
        for _ in p._seek_steps(target):  # seek from the start = full replay up to target
            pass
        assert p.position.t == target
    want = full.last_tick
    mon = make_monitor()
    with Player(path, mon, speed=math.inf, warmup_s=5.0) as p:
        p.seek_to(target)
        got = mon.last_tick
        assert got.t == want.t
        # 5 time constants of warm-up: the EMA keeps e^-5 of the reset state
        assert got.metrics.peak_angle_deg == pytest.approx(want.metrics.peak_angle_deg, abs=0.05)
        assert got.metrics.hpbw_deg == pytest.approx(want.metrics.hpbw_deg, abs=0.1)
        # reference captured at T0+5 s and target set at T0+8 s are in force after the seek
        assert mon.reference is not None and mon.target_deg == 1.0
        n_rows = sum(SessionReader(path).counts()[k] for k in ("batches", "ticks", "events"))
        assert p.reader.rows_read < 0.6 * n_rows


def test_next_and_prev_event(live_session):
    path = live_session[0]
    with Player(path, make_monitor(), speed=math.inf, warmup_s=2.0) as p:
        evs = p.reader.events()
        first = p.next_event()
        assert first is not None and first.t == evs[0].t and p.position.t == first.t
        second = p.next_event()
        later = [e.t for e in evs if e.t > first.t]
        assert second is not None and second.t == later[0]
        back = p.prev_event()
        assert back is not None and back.t == first.t
        p.seek_to(p.t_end)
        assert p.next_event() is None


def test_grid_ticks_for_session_without_ticks(tmp_path):
    path = tmp_path / "imp.lwsession"
    with SessionWriter(path, {"kind": "import"}) as w:
        for k in range(25):  # 25 batches at 0.04 s spacing: span 0.96 s
            w.write_batch(SampleBatch.from_arrays(np.linspace(-10, 10, 5), -np.ones(5) * 3,
                                                  rx_t=k * 0.04))
    mon = make_monitor(alarms=False)
    times: list[float] = []
    mon.tick_sinks.append(lambda tk: times.append(tk.t))
    with Player(path, mon, speed=math.inf, interval_s=0.25) as p:
        p.run_fast()
    assert times == [0.25, 0.5, 0.75, 0.96]
    assert mon.estimator.samples == 125


async def _until(cond, limit_s: float = 30.0) -> None:
    """Let the player's task run until ``cond()`` holds (a bound against hanging, not a
    timing assertion: a loaded machine only makes this wait longer)."""
    loop = asyncio.get_running_loop()
    end = loop.time() + limit_s
    while not cond():
        assert loop.time() < end, "condition never met"
        await asyncio.sleep(0.01)


async def test_paced_run_pause_and_seek(live_session):
    """With an injected clock nothing past the paced position is applied."""
    path = live_session[0]
    now = [0.0]
    mon = make_monitor()
    p = Player(path, mon, speed=2.0, clock=lambda: now[0], hold_at_end=True)
    stop = asyncio.Event()
    task = asyncio.create_task(p.run(stop))
    await asyncio.sleep(0.2)
    assert mon.last_tick is None or mon.last_tick.t <= p.t_start + 1e-9
    now[0] = 1.0  # one wall second at 2x: two recorded seconds
    await _until(lambda: mon.last_tick is not None
                 and mon.last_tick.t >= p.t_start + 1.8)
    await asyncio.sleep(0.1)
    assert p.t_start + 1.8 <= mon.last_tick.t <= p.t_start + 2.0
    p.pause()
    t_paused = mon.last_tick.t
    now[0] = 5.0
    await asyncio.sleep(0.2)
    assert mon.last_tick.t == t_paused and p.position.t <= p.t_start + 2.0
    p.resume()
    p.seek(5.0)
    assert p.seeking
    await _until(lambda: not p.seeking)
    assert p.position.t == pytest.approx(p.t_start + 2.0 + 5.0, abs=0.11)
    p.set_speed(1000.0)
    now[0] = 10.0
    await _until(lambda: p.ended)  # reached the end, and holds there
    assert not task.done()
    stop.set()
    await asyncio.wait_for(task, 2.0)
    p.close()


async def test_screen_keys_drive_the_player(live_session):
    """The beam screen in replay mode: pause, seek and event keys move the player."""
    from tui.app import LobewatchApp

    path = live_session[0]
    mon = make_monitor()
    player = Player(path, mon, speed=1.0, hold_at_end=True)
    app = LobewatchApp(mon, player, mode="replay", refresh_hz=0)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause(0.2)
        await pilot.press("space")
        await pilot.pause(0.1)
        assert player.paused
        t0 = player.position.t
        await pilot.press("right")
        for _ in range(50):
            await pilot.pause(0.05)
            if player.position.t >= t0 + 10 - 1e-6:
                break
        assert player.position.t == pytest.approx(min(t0 + 10, player.t_end))
        assert mon.last_tick is not None and mon.last_tick.t <= player.position.t
        t1 = player.position.t
        await pilot.press("left_square_bracket")
        for _ in range(50):
            await pilot.pause(0.05)
            if player.position.t < t1:
                break
        before = [e.t for e in player.reader.events() if e.t < t1 - 1e-6]
        assert player.position.t == pytest.approx(before[-1])
        await pilot.press("plus")
        await pilot.pause(0.1)
        assert player.speed > 1.0
        await pilot.press("q")
    player.close()


@pytest.mark.timeout(600)  # four processes; slow on a loaded machine
def test_cli_live_record_then_headless_replay_prints_the_live_lines(tmp_path):
    """synth -> live --headless --record -> replay --headless (twice), as a user runs it."""
    import os
    import signal
    import subprocess
    import sys
    import time
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent
    env = dict(os.environ, PYTHONPATH=str(root))
    cli = [sys.executable, "-m", "tui.cli"]
    endpoint = f"ipc://{tmp_path}/b.sock"
    rec = tmp_path / "site.lwsession"
    pub = subprocess.Popen(cli + ["synth", "--endpoint", endpoint, "--rate-sps", "20000",
                                  "--seed", "4", "--scenario", "steady", "--duration", "300"],
                           cwd=root, env=env, stdout=subprocess.DEVNULL,
                           stderr=subprocess.DEVNULL)
    try:
        live = subprocess.Popen(cli + ["live", endpoint, "--headless", "--interval", "0.2",
                                       "--record", str(rec), "--elements", "4",
                                       "--sll-limit-db", "-30", "--raise-hold-s", "0",
                                       "--bearing-offset-deg", "200"],
                                cwd=root, env=env, stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE)
        deadline = time.monotonic() + 120  # a bound against hanging (slow start under load)
        lines: list[str] = []
        while time.monotonic() < deadline:  # until some readouts with samples are out
            line = live.stdout.readline().decode()
            lines.append(line)
            if '"samples":' in line and json.loads(line).get("sweeps", 0) >= 2:
                break
        live.send_signal(signal.SIGINT)
        out, err = live.communicate(timeout=20)
        assert live.returncode == 0, err.decode()
    finally:
        pub.kill()
        pub.wait(5)
    live_lines = [ln for ln in "".join(lines).splitlines() + out.decode().splitlines() if ln]
    runs = [subprocess.run(cli + ["replay", str(rec), "--headless"], cwd=root, env=env,
                           capture_output=True, timeout=60) for _ in range(2)]
    assert runs[0].returncode == 0 and runs[0].stdout == runs[1].stdout
    replay_lines = runs[0].stdout.decode().splitlines()

    def body(ls):  # everything but the summary (its "reason" says SIGINT live, end here)
        return [ln for ln in ls if json.loads(ln)["type"] != "summary"]

    assert body(replay_lines) == body(live_lines)
    types = {json.loads(ln)["type"] for ln in live_lines}
    assert {"metrics", "status", "alarm"} <= types  # side lobes above -30 dB must alarm
    # the compass convention was recorded: replay gives the same bearings (compared above)
    recs = [json.loads(ln) for ln in live_lines]
    assert all("peak_bearing_deg" in r for r in recs if r["type"] in ("metrics", "alarm")
               and r.get("peak_angle_deg", r.get("rule")) is not None)
    assert json.loads(replay_lines[-1])["type"] == "summary"
    # the recorded thresholds were used above; other ones re-judge the same samples
    import io
    from contextlib import redirect_stdout

    from tui.cli import main
    buf = io.StringIO()
    with redirect_stdout(buf):
        assert main(["replay", str(rec), "--headless", "--sll-limit-db", "-3"]) == 0
    rejudged = [json.loads(ln) for ln in buf.getvalue().splitlines()]
    assert not [r for r in rejudged if r["type"] == "alarm" and r["rule"] == "sidelobe_rise"]
    assert [r for r in rejudged if r["type"] == "metrics"] == \
        [json.loads(ln) for ln in live_lines if json.loads(ln)["type"] == "metrics"]


def test_prefetched_and_plain_reading_agree_and_errors_arrive_in_order(tmp_path, live_session):
    path = live_session[0]
    assert replay_records(path, prefetch=False) == replay_records(path, prefetch=True)
    # damage the block row holding batch 300 in a copy: every batch stored in the rows
    # before it is played, then one clear error (the checksum covers one stored row)
    import sqlite3

    from stream.errors import InputFileError
    bad = tmp_path / "bad.lwsession"
    data = bytearray(path.read_bytes())
    with SessionReader(path) as r:
        ids = [it.id for it in r.iter_items(kinds=("batch",))]
    con = sqlite3.connect(f"file:{path}?mode=ro&immutable=1", uri=True)
    first, blob = con.execute("SELECT id, power_db FROM blocks WHERE id <= ? AND id_last >= ?",
                              (ids[300], ids[300])).fetchone()
    con.close()
    i = bytes(data).find(blob[:24])
    assert i > 0 and len(blob) > 8
    data[i + 5] ^= 0x10
    bad.write_bytes(bytes(data))
    mon = make_monitor()
    with Player(bad, mon, speed=math.inf) as p:
        with pytest.raises(InputFileError, match="checksum"):
            p.run_fast()
        before = sum(1 for x in ids if x < first)
        assert p.batches_fed == before and before <= 300


def _tick_record(tk) -> str:
    d = tk.metrics_record()
    d["sweeps_seen"] = tk.sweeps
    d["sweep_peaks_deg"] = np.asarray(tk.sweep_peaks_deg).tolist()
    return json.dumps(d)


def test_readouts_after_seeks_equal_the_straight_through_replay(live_session):
    """A seek (forward, back, back to the start, to an event) leaves the monitor in the
    state the straight-through replay had there: the readouts that follow, sweep count
    and sweep history included, are the same line for line."""
    path = live_session[0]
    mon = make_monitor()
    straight: dict[float, str] = {}
    mon.tick_sinks.append(lambda tk: straight.setdefault(tk.t, _tick_record(tk)))
    with Player(path, mon, speed=math.inf) as p:
        p.run_fast()
    times = sorted(straight)
    mon = make_monitor()
    got: list[tuple[float, str]] = []
    mon.tick_sinks.append(lambda tk: got.append((tk.t, _tick_record(tk))))
    checked = 0
    with Player(path, mon, speed=math.inf) as p:
        for target in (T0 + 7.3, T0 + 9.05, T0 + 3.2, T0 + 0.5, T0 + 11.0, T0 + 6.0):
            p.seek_to(target)
            assert not p.seeking and not p.approximate
            got.clear()
            # play on for one second of recorded time, one row at a time
            while (item := p._next()) is not None:
                if item.t > target + 1.0:
                    p._peek = item  # not played: the next seek starts from here
                    break
                p._apply(item)
            for t, line in got:
                assert line == straight[t], f"readout at {t - T0:.2f} s after a seek to " \
                                            f"{target - T0:.2f} s differs"
                checked += 1
            if target > T0 + 4.0:  # a sweep takes 2 s: history to rebuild
                assert json.loads(got[-1][1])["sweeps_seen"] > 0
    assert checked >= 40 and times


def test_windowed_seek_says_it_is_approximate(live_session):
    path = live_session[0]
    with Player(path, make_monitor(), speed=math.inf, warmup_s=2.0) as p:
        p.seek_to(T0 + 9.0)
        assert p.approximate
        p.seek_to(T0 + 10.0)  # forward from an approximate state: still approximate
        assert p.approximate
