"""``lobewatch bench`` figure ``app_cpu_pct``: the whole app's CPU at a 10 Hz refresh
while it takes in 1,000,000 samples/s.

A paced publisher in another process (:data:`PACED_PUBLISHER`: one noisy sweep of the
textbook 8-element pattern computed once, sent as wire-format binary batches of 1,000
at 1,000 messages/s with fresh ``seq`` and times, so the publisher's own CPU does not
limit the rate on a 2-core machine) feeds the real ZeroMQ source, estimator, alarms and
the beam screen at 120x40 in Textual's headless driver, refreshing at 10 Hz with the
garbage collector paced between frames as in a real terminal.  CPU is this process's
(all threads, libzmq's included) over the window, as % of one core; the refresh rate
achieved and the sample rate taken in are reported beside it.  Target (issue 16):
<= 35 % of a core.
"""

from __future__ import annotations

import asyncio
import os
import socket
import subprocess
import sys
import time
from typing import Any

TARGET_APP_CPU_PCT = 35.0
RATE_SPS = 1_000_000.0

PACED_PUBLISHER = r"""
import sys, time, secrets
import numpy as np, zmq
from stream.array_model import ArrayModel
from stream.wire_encode import encode_binary_batch
endpoint, duration = sys.argv[1], float(sys.argv[2])
ctx = zmq.Context(); sock = ctx.socket(zmq.PUB); sock.setsockopt(zmq.LINGER, 0)
sock.setsockopt(zmq.SNDHWM, 100000); sock.bind(endpoint)
a = np.concatenate((np.linspace(-60, 60, 5000), np.linspace(60, -60, 5000)))
rng = np.random.default_rng(1)
p = ArrayModel(8, 0.5).power_db(a) - 40.0 + rng.normal(0, 0.3, a.size)
chunks = [(a[i:i + 1000], p[i:i + 1000]) for i in range(0, a.size, 1000)]
epoch = secrets.token_hex(4); seq = 0; start = time.time(); dt = np.arange(1000) * 1e-6
while time.time() - start < duration:
    due = int((time.time() - start) * 1000)
    while seq < due:
        ca, cp = chunks[seq % len(chunks)]
        t = start + seq * 1e-3 + dt
        sock.send_multipart(encode_binary_batch(ca, cp, t, seq, epoch))
        seq += 1
    time.sleep(0.001)
sock.close(0); ctx.term()
"""


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def start_publisher(endpoint: str, duration_s: float) -> subprocess.Popen:
    """The paced 1 M samples/s publisher process (see the module docstring)."""
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    return subprocess.Popen([sys.executable, "-c", PACED_PUBLISHER, endpoint,
                             str(duration_s)], cwd=root, env={**os.environ, "PYTHONPATH": root},
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


async def _measure(seconds: float, warm_s: float, size: tuple[int, int]) -> dict[str, float]:
    from stream.alarms import AlarmEngine
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.live import LiveDriver
    from stream.monitor import Monitor
    from stream.zmq_source import ZmqSource
    from tui.app import LobewatchApp
    from tui.widgets.sample import sample_model

    endpoint = f"tcp://127.0.0.1:{_free_port()}"
    pub = start_publisher(endpoint, seconds + warm_s + 30.0)
    try:
        mon = Monitor(RollingPattern(EstimatorConfig()), AlarmEngine(), sample_model(0.0))
        src = ZmqSource(endpoint, stale_after_s=3.0)
        drv = LiveDriver(src, mon, interval_s=0.1)
        app = LobewatchApp(mon, drv, mode="live", refresh_hz=10.0)
        async with app.run_test(size=size) as pilot:
            app.pace_gc()  # as in a real terminal; its pacer counts the frames
            await pilot.pause(warm_s)
            s0, f0 = mon.estimator.samples, app.gc_pacer.frames
            c0, w0 = time.process_time(), time.perf_counter()
            await asyncio.sleep(seconds)
            c1, w1 = time.process_time(), time.perf_counter()
            s1, f1 = mon.estimator.samples, app.gc_pacer.frames
            lost = float(src.stats(time.time()).lost)
            await pilot.press("q")
    finally:
        pub.terminate()
        pub.wait(10)
    dt = w1 - w0
    return {"cpu_pct": 100.0 * (c1 - c0) / dt, "refresh_hz": (f1 - f0) / dt,
            "rate_sps": (s1 - s0) / dt, "lost": lost}


def run_app_cpu(seconds: float = 8.0, warm_s: float = 2.0,
                size: tuple[int, int] = (120, 40)) -> dict[str, Any]:
    """The app's CPU at 10 Hz with 1 M samples/s in (run it in a fresh process)."""
    return asyncio.run(_measure(seconds, warm_s, size))
