"""``lobewatch bench`` group ``reliability``: the figures the reliability tests must not
assert (they depend on the machine's load), measured on loopback.

* ``reliability_resume_p50_ms`` / ``_max_ms``: a publisher restarts on the same address
  (a new epoch); time from its first message sent to the first sample received
  (target 300 ms: the reconnect interval is 100 ms).
* ``reliability_flood_timer_hz`` / ``reliability_flood_gap_ms``: a publisher process
  sends JSON singles as fast as it can; how often a 10 ms timer still runs beside the
  drain, and its worst gap (the drain must leave the event loop free).
* ``reliability_decode_sps``: binary batches of 1,000 samples through the decoder.
* ``reliability_burst_rss_mb`` / ``_gap_ms``: a receiver process (source + monitor +
  1 s readouts) takes a burst of large JSON batches (3.2 MB each) sent at once; its
  peak resident size and longest gap between readouts (targets 300 MB, and a readout in
  every interval: no gap of two intervals, the rule ``readout_gap_max_intervals`` uses
  too; a readout due while one batch is being decoded comes when that one is done, so
  a gap is one interval plus at most one batch's decode);
  ``reliability_burst_rss_hwm50_mb`` the same with ``--hwm 50`` (libzmq queues whole
  messages up to the high-water mark; the source lowers the mark from the 64 MiB queue
  budget once it sees the size, stream/rx_queue.py).

Medians of several runs where runs are cheap.
"""

from __future__ import annotations

import asyncio
import json
import os
import socket
import subprocess
import sys
import time
from typing import Any

import numpy as np

from tui.bench.figures import Progress, figure, median

TARGET_RESUME_MS: float = 300.0
TARGET_BURST_RSS_MB: float = 300.0
TARGET_GAP_MS: float = 2000.0  # two 1 s intervals: no interval without a readout

_FLOOD = """
import sys, zmq
ctx = zmq.Context(); s = ctx.socket(zmq.PUB); s.setsockopt(zmq.SNDHWM, 50000)
s.bind(sys.argv[1])
f = b'{"angle_deg":1.0,"power_dbm":-40.0,"t":1.0}'
while True:
    for _ in range(1000):
        s.send(f)
"""

_BURST_PUB = """
import sys, time, json, zmq, numpy as np
n, ep = int(sys.argv[1]), sys.argv[2]
ctx = zmq.Context(); s = ctx.socket(zmq.XPUB); s.setsockopt(zmq.SNDHWM, 100000)
s.bind(ep)
a = np.round(np.linspace(-60.0, 60.0, 140000), 6)  # 3.2 MB of JSON
p = np.round(-40.0 - 0.01 * a ** 2, 6)
body = json.dumps({"v": 1, "angle_deg": a.tolist(), "power_db": p.tolist()}).encode()
s.recv()  # an XPUB sees the subscription: the receiver is connected
time.sleep(0.2)
for i in range(n):
    s.send(body)
time.sleep(60)
"""

_BURST_RX = """
import asyncio, json, sys, threading, time, psutil
from stream.estimator import EstimatorConfig, RollingPattern
from stream.live import LiveDriver
from stream.monitor import Monitor
from stream.zmq_source import ZmqSource
ep, hwm, run_s = sys.argv[1], int(sys.argv[2]), float(sys.argv[3])
proc = psutil.Process(); peak = [proc.memory_info().rss]; stop_t = [False]
def sample():
    while not stop_t[0]:
        peak[0] = max(peak[0], proc.memory_info().rss); time.sleep(0.05)
threading.Thread(target=sample, daemon=True).start()
src = ZmqSource(ep, hwm=hwm)
mon = Monitor(RollingPattern(EstimatorConfig()))
ticks = []
mon.tick_sinks.append(lambda t: ticks.append(time.monotonic()))
async def main():
    stop = asyncio.Event()
    asyncio.get_running_loop().call_later(run_s, stop.set)
    await LiveDriver(src, mon, interval_s=1.0).run(stop)
asyncio.run(main())
stop_t[0] = True
st = src.stats(time.time())
gaps = [b - a for a, b in zip(ticks, ticks[1:])]
print(json.dumps({"rss_mb": peak[0] / 1e6, "gap_ms": 1000 * max(gaps) if gaps else None,
                  "messages": st.messages, "shed": st.shed, "lost": st.lost,
                  "rejected": st.rejected}))
"""


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _env() -> dict[str, str]:
    root = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    return {**os.environ, "PYTHONPATH": root}


async def _resume_times(restarts: int) -> list[float]:
    import zmq

    from stream.wire_encode import encode_json_single
    from stream.zmq_source import ZmqSource
    ep = f"tcp://127.0.0.1:{_free_port()}"
    src = ZmqSource(ep)
    heard: dict[str, float] = {}

    async def consume() -> None:
        async for bs in src.batches():
            for b in bs:
                heard.setdefault(b.epoch or "", time.monotonic())

    task = asyncio.create_task(consume())
    out: list[float] = []
    try:
        for k in range(restarts + 1):
            ctx = zmq.Context()
            pub = ctx.socket(zmq.PUB)
            pub.setsockopt(zmq.LINGER, 0)
            pub.bind(ep)
            epoch = f"r{k}"
            t0 = time.monotonic()
            seq = 0
            while epoch not in heard and time.monotonic() - t0 < 10.0:
                pub.send_multipart(encode_json_single(1.0, -40.0, None, seq, epoch))
                seq += 1
                await asyncio.sleep(0.005)
            if k and epoch in heard:  # the first is a first contact, not a restart
                out.append(1000.0 * (heard[epoch] - t0))
            pub.close(0)
            ctx.term()
    finally:
        task.cancel()
        try:
            await task
        except asyncio.CancelledError:
            pass
        await src.aclose()
    return out


async def _flood(seconds: float) -> tuple[float, float]:
    from stream.zmq_source import ZmqSource
    ep = f"tcp://127.0.0.1:{_free_port()}"
    proc = subprocess.Popen([sys.executable, "-c", _FLOOD, ep])
    src = ZmqSource(ep)
    ticks = 0
    gaps: list[float] = []
    samples = 0

    async def consume() -> None:
        nonlocal samples
        async for bs in src.batches():
            samples += sum(len(b) for b in bs)

    async def timer() -> None:
        nonlocal ticks
        last = time.monotonic()
        while True:
            await asyncio.sleep(0.01)
            now = time.monotonic()
            gaps.append(now - last)
            last = now
            ticks += 1

    task = asyncio.create_task(consume())
    try:
        t0 = time.monotonic()
        while samples == 0 and time.monotonic() - t0 < 10.0:
            await asyncio.sleep(0.05)
        tm = asyncio.create_task(timer())
        await asyncio.sleep(seconds)
        tm.cancel()
    finally:
        task.cancel()
        proc.kill()
        proc.wait(5)
        await src.aclose()
    return ticks / seconds, 1000.0 * max(gaps[1:] or [0.0])


def _decode_sps(runs: int) -> float:
    from stream.wire import Decoder
    from stream.wire_encode import encode_binary_batch
    msgs = [encode_binary_batch(np.linspace(-60, 60, 1000), np.full(1000, -40.0),
                                1.7e9 + np.arange(1000) * 1e-4, seq=i, epoch="e")
            for i in range(2000)]
    rates = []
    for _ in range(runs):
        d = Decoder()
        t = time.perf_counter()
        d.decode_many(msgs, 1.7e9)
        rates.append(d.samples / (time.perf_counter() - t))
    return median(rates)


def _burst(n_msgs: int, hwm: int, run_s: float) -> dict[str, Any]:
    ep = f"tcp://127.0.0.1:{_free_port()}"
    pub = subprocess.Popen([sys.executable, "-c", _BURST_PUB, str(n_msgs), ep], env=_env())
    try:
        rx = subprocess.run([sys.executable, "-c", _BURST_RX, ep, str(hwm), str(run_s)],
                            env=_env(), capture_output=True, text=True, timeout=run_s + 60)
    finally:
        pub.kill()
        pub.wait(5)
    if rx.returncode != 0:
        raise RuntimeError(rx.stderr.strip().splitlines()[-1] if rx.stderr else "failed")
    return json.loads(rx.stdout.strip().splitlines()[-1])


def run_group(plan: Any, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    """The ``reliability`` group's figures for ``lobewatch bench``."""
    restarts = 10 if quick else 50
    resumes = asyncio.run(_resume_times(restarts))
    progress(f"reliability: {len(resumes)} restarts, resume median "
             f"{median(resumes) if resumes else float('nan'):.0f} ms")
    hz, gap = asyncio.run(_flood(1.5))
    progress(f"reliability: timer {hz:.0f}/s under a flood, worst gap {gap:.0f} ms")
    dec = _decode_sps(3)
    n_burst = 30 if quick else 150
    b = _burst(n_burst, 20_000, 8.0 if quick else 20.0)
    b50 = _burst(n_burst, 50, 8.0 if quick else 20.0)
    progress(f"reliability: burst RSS {b['rss_mb']:.0f} MB (hwm 50: {b50['rss_mb']:.0f} MB)")
    burst_note = (f"{n_burst} JSON batches of 3.2 MB at once; accepted {b['messages']}, "
                  f"shed {b['shed']}, lost {b['lost']}")
    return {
        "reliability_resume_p50_ms": figure(median(resumes) if resumes else None, "ms",
                                            TARGET_RESUME_MS, higher_is_better=False,
                                            note=f"{len(resumes)} publisher restarts"),
        "reliability_resume_max_ms": figure(max(resumes) if resumes else None, "ms",
                                            note="worst of the restarts"),
        "reliability_flood_timer_hz": figure(hz, "1/s", note="10 ms timer beside a flood "
                                                              "(100 when idle)"),
        "reliability_flood_gap_ms": figure(gap, "ms", note="worst timer gap in the flood"),
        "reliability_decode_sps": figure(dec, "samples/s", note="binary batches of 1,000"),
        "reliability_burst_rss_mb": figure(b["rss_mb"], "MB", TARGET_BURST_RSS_MB,
                                           higher_is_better=False, note=burst_note),
        "reliability_burst_gap_ms": figure(b["gap_ms"], "ms", TARGET_GAP_MS,
                                           higher_is_better=False,
                                           note="longest gap between 1 s readouts (a readout "
                                                "in every interval: under 2 s)"),
        "reliability_burst_rss_hwm50_mb": figure(b50["rss_mb"], "MB", TARGET_BURST_RSS_MB,
                                                 higher_is_better=False,
                                                 note=f"the same with --hwm 50; shed "
                                                      f"{b50['shed']}, lost {b50['lost']}"),
    }
