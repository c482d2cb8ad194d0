"""live/replay command-line behaviour: the model's expected values in headless lines,
and the hint given when a stream sits at ``waiting``.

References: the half-power beamwidth of a uniform broadside array, computed here by
brute force from the array factor |sin(N psi/2) / (N sin(psi/2))|^2 with
psi = 2 pi d sin(theta) (Balanis, Antenna Theory, ch. 6; from memory) on a fine grid.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from replay.session_writer import SessionWriter
from stream.batch import SampleBatch
from stream.live import LiveDriver
from stream.tick import SourceStats
from stream.waiting import HINT_AFTER_S
from tui.cli import main

ROOT = Path(__file__).resolve().parent.parent
T0 = 1_767_225_600.0  # invented


def _brute_hpbw_deg(n: int, d_wl: float) -> float:
    th = np.radians(np.arange(-30.0, 30.0, 1e-4))
    psi = 2 * np.pi * d_wl * np.sin(th)
    with np.errstate(invalid="ignore", divide="ignore"):
        af = np.sin(n * psi / 2) / (n * np.sin(psi / 2))
    af = np.where(np.abs(psi) < 1e-12, 1.0, af)
    above = np.degrees(th[af ** 2 >= 0.5])
    return float(above.max() - above.min())


def test_headless_lines_carry_the_models_expected_hpbw(tmp_path, capsys):
    path = tmp_path / "s.lwsession"
    with SessionWriter(path, {}) as w:
        for k in range(10):
            t = T0 + k * 0.1 + np.arange(100) * 1e-3
            w.write_batch(SampleBatch(t, np.linspace(-40, 40, 100),
                                      -30 - 0.01 * np.linspace(-40, 40, 100) ** 2,
                                      rx_t=float(t[-1])))
            w.write_tick(float(t[-1]) + 1e-3, SourceStats("receiving", k))
    assert main(["replay", str(path), "--headless", "--elements", "8"]) == 0
    lines = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    metrics = [x for x in lines if x["type"] == "metrics"]
    assert metrics and all("expected_hpbw_deg" in x for x in metrics)
    # uniform 8 elements, half-wave spacing: 12.8 deg (brute force, computed here)
    assert metrics[0]["expected_hpbw_deg"] == pytest.approx(_brute_hpbw_deg(8, 0.5), abs=0.06)
    assert main(["replay", str(path), "--headless"]) == 0  # no model: no expected value
    lines = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert not any("expected_hpbw_deg" in x for x in lines if x["type"] == "metrics")


class _Silent:
    """A source that never delivers (settings like a connecting ZeroMQ source)."""

    endpoint = "tcp://127.0.0.1:5999"
    bind = False
    topic = b"beam"

    def stats(self, now: float) -> SourceStats:
        return SourceStats("waiting", 0)


class _Mon:
    def __init__(self) -> None:
        self.events: list = []

    def emit(self, ev):
        self.events.append(ev)
        return ev

    def tick(self, t, stats):
        return None


def test_waiting_hint_once_after_a_few_seconds_with_what_was_tried():
    now = [100.0]
    mon = _Mon()
    d = LiveDriver(_Silent(), mon, interval_s=0.5, clock=lambda: now[0])  # type: ignore[arg-type]
    while now[0] < 100.0 + HINT_AFTER_S - 0.5:
        d.tick_once()
        now[0] += 0.5
    assert d.waiting_hint is None and [e.data.get("hint") for e in mon.events] == [None]
    for _ in range(4):
        d.tick_once()
        now[0] += 0.5
    hints = [e.data["hint"] for e in mon.events if "hint" in e.data]
    assert len(hints) == 1 and hints[0] == d.waiting_hint
    for needle in ("tcp://127.0.0.1:5999", "connected to", "'beam'", "nothing is bound",
                   "port", "binds", "topic"):
        assert needle in hints[0], needle


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.timeout(300)  # process start-up is slow on a loaded machine
def test_live_headless_prints_the_waiting_hint(tmp_path):
    """Against an address nobody publishes on, headless prints a status line with the
    hint (then stops on SIGINT); bounded, loopback only."""
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    endpoint = f"tcp://127.0.0.1:{_free_port()}"
    proc = subprocess.Popen([sys.executable, "-m", "tui.cli", "live", endpoint, "--headless",
                             "--interval", "0.5"], cwd=ROOT, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
    found = None
    deadline = time.monotonic() + 120  # a bound against hanging, not a timing check
    try:
        for line in proc.stdout:  # type: ignore[union-attr]
            rec = json.loads(line)
            if rec["type"] == "status" and "hint" in rec:
                found = rec
                break
            assert time.monotonic() < deadline
    finally:
        proc.send_signal(signal.SIGINT)
        try:
            proc.wait(30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(5)
    assert found is not None and found["state"] == "waiting"
    assert endpoint in found["hint"] and "nothing is bound there" in found["hint"]
