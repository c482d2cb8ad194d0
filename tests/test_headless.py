"""Headless monitor: JSON Lines format, exit codes, and end to end over real sockets.

Model values: uniform linear array, N = 4, d = 0.5 wavelength, broadside, isotropic
elements.  HPBW 26.32 deg and first side lobe -11.30 dB from the closed-form array
factor sin(N psi/2) / (N sin(psi/2)) (C. A. Balanis, *Antenna Theory*, 3rd ed., ch. 6;
solved numerically in tests/test_synth.py and re-derived here with scipy).
"""

from __future__ import annotations

import asyncio
import io
import json
import math
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor
from stream.tick import Event, SourceStats
from tui.headless import EXIT_ALARM, event_record, format_record, run_headless

ROOT = Path(__file__).resolve().parents[1]


def af2(theta_deg: float, n: int = 4, d: float = 0.5) -> float:
    psi = 2 * math.pi * d * math.sin(math.radians(theta_deg))
    if abs(math.sin(psi / 2)) < 1e-12:
        return 1.0
    return (math.sin(n * psi / 2) / (n * math.sin(psi / 2))) ** 2


HPBW_N4 = 2 * brentq(lambda x: af2(x) - 0.5, 1e-6, 40.0)
SLL_N4 = 10 * math.log10(max(af2(x) for x in np.linspace(30.0, 90.0, 60001)))


def test_model_values():
    assert HPBW_N4 == pytest.approx(26.32, abs=0.01)
    assert SLL_N4 == pytest.approx(-11.30, abs=0.01)


# -- format --------------------------------------------------------------------------------
def test_format_record_rounds_and_never_prints_nan():
    line = format_record({"type": "metrics", "a": float("nan"), "b": 1.234567891,
                          "c": np.float32(2.5), "d": np.int64(7), "e": [np.inf, 1.0],
                          "f": {"x": None}, "g": True, "t": 1767225600.123456789})
    obj = json.loads(line)
    assert "NaN" not in line and "Infinity" not in line
    assert obj == {"type": "metrics", "a": None, "b": 1.2346, "c": 2.5, "d": 7,
                   "e": [None, 1.0], "f": {"x": None}, "g": True, "t": 1767225600.1235}
    assert "\n" not in line


def test_event_records():
    a = event_record(Event(5.0, "alarm", {"rule": "drift", "state": "raised",
                                          "severity": "major", "value": 3.0,
                                          "threshold": 2.0}))
    assert a == {"type": "alarm", "t": 5.0, "rule": "drift", "state": "raised",
                 "severity": "major", "value": 3.0, "threshold": 2.0}
    s = event_record(Event(6.0, "status", {"state": "stale"}))
    assert s == {"type": "status", "t": 6.0, "state": "stale"}
    m = event_record(Event(7.0, "marker", {"text": "hi"}))
    assert m == {"type": "event", "kind": "marker", "t": 7.0, "text": "hi"}


def test_metrics_line_is_honest_about_state_age_provisional_and_nulls():
    from stream.batch import SampleBatch
    m = Monitor(RollingPattern(EstimatorConfig()))
    first = m.tick(100.0)
    rec = first.metrics_record()
    assert rec["age_s"] is None and rec["provisional"] is True and rec["stale"] is False
    assert rec["peak_angle_deg"] is None and rec["notes"]["peak_angle_deg"]
    a = np.linspace(-30.0, 30.0, 121)
    m.ingest(SampleBatch.from_arrays(a, -0.02 * a ** 2, rx_t=101.0))  # half a sweep
    stats = SourceStats(state="stale", rejected={"angle_range": 2},
                        reject_examples={"angle_range": '{"angle_deg": 999'})
    rec = json.loads(format_record(m.tick(105.5, stats).metrics_record()))
    assert rec["stale"] is True and rec["state"] == "stale" and rec["age_s"] == 4.5
    assert rec["provisional"] is True  # no complete sweep yet
    assert rec["reject_examples"] == {"angle_range": '{"angle_deg": 999'}
    # every null has its reason beside it, and only nulls and caveats have one
    from stream.beam import METRIC_KEYS
    for k in METRIC_KEYS:
        if rec[k] is None:
            assert rec["notes"][k], k


# -- run_headless with a scripted driver ---------------------------------------------------
class ScriptDriver:
    """Feeds synthetic batches and ticks on a fake clock; emits scripted events."""

    def __init__(self, monitor: Monitor, events: dict[int, Event] | None = None,
                 ticks: int = 20) -> None:
        from stream.synth import SynthConfig, SynthSource
        self.monitor = monitor
        self.src = SynthSource(SynthConfig(element_exp=0.0, rate_sps=2000.0), start_t=1e9)
        self.events = events or {}
        self.ticks = ticks

    async def run(self, stop: asyncio.Event) -> None:
        t = 1e9
        for k in range(self.ticks):
            if stop.is_set():
                return
            for b in self.src.batches(t, 0.5):
                self.monitor.ingest(b)
            t += 0.5
            if k in self.events:
                self.monitor.emit(self.events[k])
            self.monitor.tick(t, SourceStats(state="receiving", messages=k))
            await asyncio.sleep(0)


def _lines(buf: io.StringIO) -> list[dict]:
    return [json.loads(x) for x in buf.getvalue().splitlines()]


def test_run_headless_prints_metrics_events_and_summary():
    m = Monitor(RollingPattern(EstimatorConfig()))
    ev = {3: Event(0.0, "alarm", {"rule": "drift", "state": "raised", "severity": "minor",
                                  "transition": "raise", "value": 2.5, "threshold": 2.0}),
          5: Event(0.0, "status", {"state": "stale"})}
    out = io.StringIO()
    rc = run_headless(ScriptDriver(m, ev), m, out=out)
    lines = _lines(out)
    assert rc == 0
    types = [x["type"] for x in lines]
    assert types.count("metrics") == 20 and types[-1] == "summary"
    assert types.index("alarm") < types.index("status")
    s = lines[-1]
    assert s["exit"] == 0 and s["alarms_raised"] == {"minor": 1} and s["reason"] == "end"
    assert s["duration_s"] == pytest.approx(9.5)
    assert m.tick_sinks == [] and m.event_sinks == []  # sinks removed afterwards


@pytest.mark.parametrize("floor,expect", [("minor", EXIT_ALARM), ("major", 0),
                                          ("warning", EXIT_ALARM)])
def test_fail_on_stops_with_exit_3(floor, expect):
    m = Monitor(RollingPattern(EstimatorConfig()))
    ev = {3: Event(0.0, "alarm", {"rule": "gain_loss", "state": "raised",
                                  "severity": "minor", "transition": "raise",
                                  "value": -4.0, "threshold": -3.0})}
    out = io.StringIO()
    rc = run_headless(ScriptDriver(m, ev), m, out=out, fail_on=floor)
    lines = _lines(out)
    assert rc == expect
    assert lines[-1]["exit"] == expect
    n_metrics = sum(1 for x in lines if x["type"] == "metrics")
    assert (n_metrics < 20) == (expect == EXIT_ALARM)


def test_same_input_prints_the_same_lines():
    outs = []
    for _ in range(2):
        m = Monitor(RollingPattern(EstimatorConfig()))
        buf = io.StringIO()
        run_headless(ScriptDriver(m), m, out=buf)
        outs.append(buf.getvalue())
    assert outs[0] == outs[1]


# -- end to end: two processes over loopback tcp -------------------------------------------
def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _cli(*args: str, **kw) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "tui.cli", *args], cwd=ROOT,
                            env={**os.environ, "PYTHONPATH": str(ROOT)}, text=True, **kw)


@pytest.mark.timeout(40)
def test_live_headless_converges_to_the_model_and_stops_cleanly_on_sigint():
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    pub = _cli("synth", "--endpoint", ep, "--element-exp", "0", "--rate-sps", "8000",
               "--sweeps-per-s", "2", "--step-deg", "0.25", "--seed", "5",
               stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    mon = _cli("live", ep, "--headless", "--interval", "0.5", "--elements", "4",
               "--bin-deg", "0.5", stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    lines: list[dict] = []
    try:
        t0 = time.monotonic()
        assert mon.stdout is not None
        while time.monotonic() - t0 < 25:
            raw = mon.stdout.readline()
            if not raw:
                break
            rec = json.loads(raw)
            lines.append(rec)
            if rec["type"] == "metrics" and rec["sweeps"] >= 16:
                break
        mon.send_signal(signal.SIGINT)
        rest, err = mon.communicate(timeout=10)
    finally:
        for p in (mon, pub):
            if p.poll() is None:
                p.kill()
                p.wait(5)
    lines += [json.loads(x) for x in rest.splitlines()]
    assert mon.returncode == 0, err
    assert lines[-1]["type"] == "summary" and lines[-1]["reason"] == "SIGINT"
    assert lines[-1]["lost"] == 0 and lines[-1]["rejected"] == {}
    status = [x["state"] for x in lines if x["type"] == "status"]
    assert "receiving" in status
    metrics = [x for x in lines if x["type"] == "metrics" and x["hpbw_deg"] is not None]
    assert metrics, "no metrics with a beam"
    last = metrics[-1]
    # Tolerances: 0.5-degree bins and 0.25-degree steering steps, 0.3 dB noise and
    # 0.5 dB fading averaged by the 3 s EMA -> a few tenths of a degree / dB.
    assert last["peak_angle_deg"] == pytest.approx(0.0, abs=0.75)
    assert last["hpbw_deg"] == pytest.approx(HPBW_N4, abs=1.0)
    assert last["sll_db"] == pytest.approx(SLL_N4, abs=1.0)
    assert last["peak_power_db"] == pytest.approx(-40.0, abs=1.5)
    # the receive rate is a wall-clock figure (a loaded machine changes it): only its
    # presence is checked here; rates are measured by ``lobewatch bench``
    assert last["rate_sps"] > 0
    assert last["provisional"] is False and last["stale"] is False
    assert 0.0 <= last["age_s"] < 5.0


@pytest.mark.timeout(20)
def test_live_rejects_a_bad_endpoint_in_one_line():
    p = _cli("live", "localhost:1", "--headless", stdout=subprocess.PIPE,
             stderr=subprocess.PIPE)
    out, err = p.communicate(timeout=15)
    assert p.returncode == 1
    assert len(err.strip().splitlines()) == 1 and "tcp://" in err
