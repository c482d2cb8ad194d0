"""``lobewatch bench`` group ``iq``: the radio front end's cost.

* ``iq_reduce_sps`` -- cf32 frames of 16,384 samples decoded and reduced to 10 ms block
  powers (:class:`stream.iq.IqReducer`), samples per CPU second of this process;
* ``iq_channel_sps`` -- the same with a channel (Welch spectrum per block), for scale;
* ``iq_paced_cpu_pct`` -- the whole radio edge (:class:`stream.iq_source.IqSource`: two
  sockets, decode, reduce, join) receiving 2 M samples/s of cf32 from a publisher in
  another process, with angle telemetry at 50 Hz: this process's CPU time (all threads)
  over the window as % of one core.  Target (issue 11): <= 50 %;
* ``iq_join_sps`` -- :class:`stream.angle_join.AngleJoin` alone: blocks joined per CPU
  second (a fixed lag; each block becomes one sample).

The signal is invented (a tone in noise, a triangle sweep).
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import multiprocessing as mp
import time
from typing import Any

import numpy as np

from tui.bench.figures import Progress, figure, median

RATE_SPS = 2_000_000.0
FRAME = 16_384
TARGET_CPU_PCT = 50.0


def _frames(n_frames: int, seed: int = 1) -> list[bytes]:
    rng = np.random.default_rng(seed)
    n = n_frames * FRAME
    k = np.arange(n)
    x = 0.1 * np.exp(2j * np.pi * 0.01 * k) + 0.01 * (rng.standard_normal(n)
                                                      + 1j * rng.standard_normal(n))
    b = x.astype("<c8").tobytes()
    return [b[i * FRAME * 8:(i + 1) * FRAME * 8] for i in range(n_frames)]


def reduce_rate(seconds_of_data: float, channel: bool) -> float:
    """Samples per CPU second through decode + reduce (10 ms blocks at 2 MS/s)."""
    from stream.iq import Channel, IqReducer, decode_iq
    frames = _frames(max(1, int(seconds_of_data * RATE_SPS / FRAME)))
    r = IqReducer(int(RATE_SPS * 0.01), RATE_SPS,
                  channel=Channel(100_000.0, 200_000.0, 256) if channel else None)
    c0 = time.process_time()
    for f in frames:
        r.feed(decode_iq(f, "cf32"))
    dt = time.process_time() - c0
    return len(frames) * FRAME / max(dt, 1e-9)


def join_rate(n_blocks: int) -> float:
    """Blocks joined per CPU second (fixed lag, telemetry at 50 Hz, steps of 0.1 s)."""
    from stream.angle_join import AngleJoin, JoinConfig
    j = AngleJoin(JoinConfig(lag_s=0.02), block_s=0.01)
    steps = n_blocks // 10
    tel_t = np.arange(0.0, steps * 0.1 + 1.0, 0.02)
    tel_a = 60.0 * np.sin(0.3 * tel_t)
    c0 = time.process_time()
    joined = 0
    for s in range(steps):
        t0 = s * 0.1
        j.add_angles(tel_t[s * 5:(s + 1) * 5 + 5], tel_a[s * 5:(s + 1) * 5 + 5])
        j.add_blocks(t0 + 0.005 + 0.01 * np.arange(10), np.zeros(10))
        joined += len(j.pop())
    dt = time.process_time() - c0
    return joined / max(dt, 1e-9)


def _publisher_main(iq_ep: str, ang_ep: str, seconds: float, conn: Any) -> None:
    import zmq
    ctx = zmq.Context()
    iq = ctx.socket(zmq.PUB)
    ang = ctx.socket(zmq.PUB)
    for s in (iq, ang):
        s.setsockopt(zmq.LINGER, 0)
        s.setsockopt(zmq.SNDHWM, 1000)
    iq.bind(iq_ep)
    ang.bind(ang_ep)
    frames = _frames(int(RATE_SPS / FRAME) + 1)
    conn.send("ready")
    conn.recv()  # the subscriber is connected
    start = time.time()
    sent = k = j = 0
    while time.time() - start < seconds:
        now = time.time() - start
        while (k + 1) * FRAME / RATE_SPS <= now:
            iq.send(frames[k % len(frames)], copy=False)
            k += 1
            sent += 1
        while j / 50.0 <= now:
            t = start + j / 50.0
            ang.send(json.dumps({"t": t, "angle_deg": 60.0 * np.sin(0.5 * j / 50.0)}).encode())
            j += 1
        time.sleep(0.002)
    conn.send(sent)
    iq.close(0)
    ang.close(0)
    ctx.term()


def paced_cpu(seconds: float) -> dict[str, float]:
    """CPU % of one core for the radio edge at 2 MS/s cf32 (publisher in another process)."""
    from stream.angle_join import JoinConfig
    from stream.iq_source import IqSource
    from tui.bench.ingest import tcp_endpoint
    iq_ep, ang_ep = tcp_endpoint(), tcp_endpoint()
    ctx = mp.get_context("spawn")
    parent, child = ctx.Pipe()
    proc = ctx.Process(target=_publisher_main, args=(iq_ep, ang_ep, seconds + 1.0, child),
                       daemon=True)
    proc.start()
    try:
        if not parent.poll(30):
            raise RuntimeError("IQ publisher did not start")
        parent.recv()
        src = IqSource(iq_ep, ang_ep, sample_rate_hz=RATE_SPS, block_s=0.01,
                       join=JoinConfig(lag_s=0.0), hwm=1000)
        got = {"samples": 0}

        async def consume() -> None:
            async for batches in src.batches():
                for b in batches:
                    got["samples"] += len(b)

        async def main() -> tuple[float, float, float]:
            task = asyncio.create_task(consume())
            await asyncio.sleep(0.3)  # connect
            parent.send("go")
            await asyncio.sleep(0.5)  # warm up
            f0, c0, w0 = src.frames, time.process_time(), time.perf_counter()
            await asyncio.sleep(seconds)
            f1, c1, w1 = src.frames, time.process_time(), time.perf_counter()
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task
            await src.aclose()
            return (c1 - c0) / (w1 - w0), (f1 - f0) * FRAME / (w1 - w0), float(src.reanchors)

        cpu, sps, reanchors = asyncio.run(main())
    finally:
        proc.join(10)
        if proc.is_alive():
            proc.terminate()
    return {"cpu_pct": 100.0 * cpu, "sps": sps, "reanchors": reanchors}


def run_group(plan: Any, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    """The ``iq`` group's figures for ``lobewatch bench``."""
    runs = 1 if quick else 3
    secs = 1.0 if quick else 3.0
    progress("iq: decode + block power, channel power, join, paced 2 MS/s cf32")
    red = median(reduce_rate(2.0, False) for _ in range(runs))
    chan = median(reduce_rate(1.0, True) for _ in range(runs))
    jn = median(join_rate(20_000 if quick else 100_000) for _ in range(runs))
    paced = [paced_cpu(secs) for _ in range(runs)]
    cpu = median(p["cpu_pct"] for p in paced)
    sps = median(p["sps"] for p in paced)
    return {
        "iq_reduce_sps": figure(red, "samples/s", note="cf32 decode + 10 ms block power"),
        "iq_channel_sps": figure(chan, "samples/s", note="the same with a Welch channel"),
        "iq_paced_cpu_pct": figure(cpu, "% core", TARGET_CPU_PCT, higher_is_better=False,
                                   note=f"radio edge at 2 MS/s cf32 (received "
                                        f"{sps:,.0f} samples/s)"),
        "iq_join_sps": figure(jn, "samples/s", note="angle join alone, blocks per CPU s"),
    }
