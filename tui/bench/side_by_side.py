"""Side by side: lobewatch against the hand-written pipelines (tui/bench/baselines.py) in
the same run, on the same input, plus the readout figures a user feels.

Figures (each ``{value, target, pass}``; a ratio is hand-written time / lobewatch time,
or lobewatch rate / hand-written rate, so >= 1 means lobewatch is ahead):

* ``ingest_binary_ratio``: raw float32 pairs x1000, a queued burst drained;
* ``ingest_json_ratio``: JSON single samples, a queued burst drained (the baseline
  parses each drain with one ``json.loads``);
* ``metrics_clean_ms``, ``metrics_noisy_ms`` (3,600 points) and ``metrics_ratio`` (the
  worse of the two ratios);
* ``replay_10k_hour_s``: one hour recorded at 10 k samples/s (batches of 100) with a
  tick every 0.1 s, replayed headless, scaled from a shorter session; target: the
  hand-written replay's hour; ``replay_ratio``; per sample and per readout figures at
  10 k and 1 M samples/s alongside;
* ``readout_gap_max_intervals``: the largest gap between readouts over runs offered
  1, 5, 10 and 20 M samples/s (raw float32), in readout intervals;
* ``latency_readout_p99_ms``: from the publisher's send time to the readout that first
  includes the sample (the readout every 0.1 s is part of the wait).
"""

from __future__ import annotations

import asyncio
import functools
import os
import tempfile
import time
from typing import Any

import numpy as np

from tui.bench.baselines import HandEma, drain_json_single, drain_raw_f32, hand_metrics, hand_replay
from tui.bench.figures import Progress, figure, median

FIGURES: tuple[str, ...] = (
    "ingest_binary_ratio", "ingest_json_ratio", "metrics_clean_ms", "metrics_noisy_ms",
    "metrics_ratio", "replay_10k_hour_s", "replay_ratio", "replay_10k_us_per_sample",
    "replay_10k_ms_per_readout", "replay_1m_us_per_sample", "replay_1m_ms_per_readout",
    "readout_gap_max_intervals", "latency_readout_p99_ms")

TARGET_RATIO = 1.0
TARGET_CLEAN_MS = 0.3
TARGET_NOISY_MS = 1.0
TARGET_GAP_INTERVALS = 2.0
INTERVAL_S = 0.1
#: p99 target from publish to readout: one readout interval of waiting plus 50 ms.
TARGET_LATENCY_MS = 1e3 * INTERVAL_S + 50.0
LOADS_MSPS = (1, 5, 10, 20)


# -- ingest -------------------------------------------------------------------------------
def hand_capacity(pub: Any, endpoint: str, kind: str, n_total: int) -> dict[str, float]:
    """Drain a queued burst with the hand-written pipeline."""
    from tui.bench.ingest import LAND_S, SUBSCRIBE_S, _sub
    ctx, s = _sub(endpoint)
    drain = drain_raw_f32 if kind == "raw-f32" else drain_json_single
    ema = HandEma()
    try:
        time.sleep(SUBSCRIBE_S)
        pub.command("burst", kind, n_total)
        time.sleep(LAND_S)
        n_msg = 0
        t0 = time.perf_counter()
        while n_msg < n_total and s.poll(200):
            n_msg += drain(s, ema)
        dt = time.perf_counter() - t0
    finally:
        s.close(0)
        ctx.term()
    return {"msgs_per_s": n_msg / dt, "samples_per_s": ema.samples / dt}


def _ingest(pub: Any, endpoint: str, quick: bool, runs: int,
            progress: Progress) -> dict[str, float]:
    from tui.bench.ingest import BURST, BURST_QUICK, pipeline_capacity
    burst = BURST_QUICK if quick else BURST
    out: dict[str, list[float]] = {}
    for r in range(runs):
        for kind, key in (("raw-f32", "samples_per_s"), ("json-single", "msgs_per_s")):
            progress(f"side by side: {kind} burst, lobewatch and hand-written "
                     f"(run {r + 1}/{runs})")
            lw = asyncio.run(pipeline_capacity(pub, endpoint, kind, burst[kind]))[key]
            hand = hand_capacity(pub, endpoint, kind, burst[kind])[key]
            out.setdefault(kind, []).append(lw / hand)
    return {k: median(v) for k, v in out.items()}


def monitor() -> Any:
    """The monitor a plain ``lobewatch live`` / ``replay`` runs: estimator, metrics,
    alarms; no array model (a fit the hand-written pipeline has no counterpart for)."""
    from stream.alarms import AlarmEngine
    from stream.estimator import RollingPattern
    from stream.monitor import Monitor
    return Monitor(RollingPattern(), AlarmEngine())


def replay_headless(path: str) -> int:
    """``lobewatch replay --headless`` in-process, output to /dev/null; samples fed."""
    import math

    from replay.player import Player
    from tui.headless import run_headless
    mon = monitor()
    with open(os.devnull, "w") as out, Player(path, mon, speed=math.inf) as player:
        run_headless(player, mon, out=out)
        return int(player.samples_fed)


# -- readouts under load and latency --------------------------------------------------------
async def _readouts(pub: Any, endpoint: str, cmd: tuple, seconds: float) -> dict[str, Any]:
    """Run source + LiveDriver + full monitor under a paced publisher; the wall time of
    every readout and, for a stamped stream, each sample's publish-to-readout delay."""
    from tui.bench.ingest import SUBSCRIBE_S, _pipeline_parts
    fmt = "raw-f32" if cmd[0] == "rate" and cmd[1] == "raw-f32" else "auto"
    src, _, driver = _pipeline_parts(endpoint, fmt)
    mon = monitor()
    driver.monitor = mon
    times: list[float] = []
    pending: list[np.ndarray] = []
    delays: list[np.ndarray] = []
    recording = False
    tick_once = driver.tick_once

    def timed_tick() -> None:
        tick_once()
        now = time.time()
        if recording:
            times.append(time.perf_counter())
            if pending:
                delays.append(now - np.concatenate(pending))
        pending.clear()

    driver.tick_once = timed_tick  # type: ignore[method-assign]
    if cmd[0] == "stamp":
        mon.batch_sinks.append(lambda b: pending.append(b.t) if recording else None)
    stop = asyncio.Event()
    task = asyncio.create_task(driver.run(stop))
    await asyncio.sleep(SUBSCRIBE_S)
    pub.command(*cmd)
    await asyncio.sleep(0.3)  # warm-up
    recording = True
    await asyncio.sleep(seconds)
    recording = False
    pub.command("idle")
    stop.set()
    await task
    gaps = np.diff(times) if len(times) > 1 else np.array([seconds])
    d = np.concatenate(delays) if delays else np.array([np.nan])
    return {"gap_max_s": float(gaps.max()), "delays_s": d, "readouts": len(times)}


# -- replay ---------------------------------------------------------------------------------
def _replay(quick: bool, runs: int, progress: Progress) -> dict[str, float]:
    from tui.bench.replay import generate
    out: dict[str, float] = {}
    with tempfile.TemporaryDirectory(prefix="lobewatch-bench-") as d:
        for label, rate, per_batch, seconds in (
                ("10k", 10_000.0, 100, 10.0 if quick else 120.0),
                ("1m", 1_000_000.0, 1000, 0.5 if quick else 5.0)):
            path = os.path.join(d, f"{label}.lwsession")
            n = int(rate * seconds)
            progress(f"side by side: replay, a {n:,}-sample session at {rate:,.0f} "
                     "samples/s")
            generate(path, n, rate_sps=rate, per_batch=per_batch)
            lw, hand = [], []
            for _ in range(runs):
                t0 = time.perf_counter()
                replay_headless(path)
                lw.append(time.perf_counter() - t0)
                t0 = time.perf_counter()
                h = hand_replay(path)
                hand.append(time.perf_counter() - t0)
            lw_s, hand_s = median(lw), median(hand)
            out[f"{label}_us_per_sample"] = lw_s / n * 1e6
            out[f"{label}_ms_per_readout"] = lw_s / max(h["readouts"], 1) * 1e3
            out[f"{label}_hour_s"] = lw_s * 3600.0 / seconds
            out[f"{label}_hand_hour_s"] = hand_s * 3600.0 / seconds
            out[f"{label}_ratio"] = hand_s / lw_s
    return out


# -- metrics --------------------------------------------------------------------------------
def _cpu_pair(f: Any, g: Any, runs: int) -> tuple[float, float]:
    """Median CPU seconds of ``f()`` and of ``g()``, calls interleaved so a busy machine
    slows both alike (thread CPU time: other processes do not count)."""
    f()
    g()
    tf, tg = [], []
    for _ in range(runs):
        t0 = time.thread_time()
        f()
        t1 = time.thread_time()
        g()
        t2 = time.thread_time()
        tf.append(t1 - t0)
        tg.append(t2 - t1)
    return median(tf), median(tg)


def _metrics(runs: int) -> dict[str, float]:
    from stream.pattern import measure
    from tui.bench.metrics import patterns
    out: dict[str, float] = {}
    for n, label, a, p in patterns():
        if n != 3600:
            continue
        order = np.argsort(a)
        a, p = a[order], p[order]
        noisy = label != "clean"
        m = measure(a, p)
        # The baseline's smoothing window: about a third of the beamwidth, odd.
        step = float(np.median(np.diff(a)))
        win = 2 * int((m.hpbw_deg or 30.0) / 3.0 / step / 2) + 1 if noisy else 0
        lw, hand = _cpu_pair(functools.partial(measure, a, p),
                             functools.partial(hand_metrics, a, p, win), runs)
        key = "noisy" if noisy else "clean"
        out[f"{key}_ms"] = lw * 1e3
        out[f"{key}_ratio"] = hand / lw
    return out


# -- the group ------------------------------------------------------------------------------
def run_group(plan: Any, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    """All side-by-side figures (one publisher process for the network ones)."""
    from tui.bench.ingest import LATENCY_BATCH, Publisher, tcp_endpoint
    runs = 1 if quick else 3
    seconds = 1.0 if quick else 3.0
    monitor()  # imports done before anything is timed
    progress("side by side: measure() and the scipy baseline on 3,600 points")
    met = _metrics(plan.metrics_runs)
    rep = _replay(quick, runs, progress)
    endpoint = tcp_endpoint()
    progress("side by side: starting the publisher process")
    with Publisher(endpoint, small=quick) as pub:
        ing = _ingest(pub, endpoint, quick, runs, progress)
        gaps: dict[int, float] = {}
        for load in LOADS_MSPS:
            progress(f"side by side: readouts at {load} M samples/s offered")
            r = asyncio.run(_readouts(pub, endpoint, ("rate", "raw-f32", load * 1000.0),
                                      seconds))
            gaps[load] = r["gap_max_s"] / INTERVAL_S
        progress("side by side: publish-to-readout latency at 100,000 samples/s")
        lat = asyncio.run(_readouts(pub, endpoint, ("stamp", 100_000.0 / LATENCY_BATCH),
                                    seconds))
    worst = max(gaps, key=lambda k: gaps[k])
    metrics_ratio = min(met["clean_ratio"], met["noisy_ratio"])
    lat_p99 = float(np.nanpercentile(lat["delays_s"], 99) * 1e3)
    gap_note = ", ".join(f"{k} M: {v:.1f}" for k, v in gaps.items())
    return {
        "ingest_binary_ratio": figure(ing["raw-f32"], "ratio", TARGET_RATIO,
                                      note="raw f32 pairs x1000 burst: lobewatch / "
                                           "hand-written samples/s"),
        "ingest_json_ratio": figure(ing["json-single"], "ratio", TARGET_RATIO,
                                    note="JSON singles burst: lobewatch / hand-written "
                                         "(joined parse) msgs/s"),
        "metrics_clean_ms": figure(met["clean_ms"], "ms", TARGET_CLEAN_MS,
                                   higher_is_better=False, note="measure(), 3,600 points"),
        "metrics_noisy_ms": figure(met["noisy_ms"], "ms", TARGET_NOISY_MS,
                                   higher_is_better=False,
                                   note="measure(), 3,600 points, 0.3 dB noise"),
        "metrics_ratio": figure(metrics_ratio, "ratio", TARGET_RATIO,
                                note=f"hand-written / measure() time, worse of clean "
                                     f"({met['clean_ratio']:.2f}) and noisy "
                                     f"({met['noisy_ratio']:.2f})"),
        "replay_10k_hour_s": figure(rep["10k_hour_s"], "s", rep["10k_hand_hour_s"],
                                    higher_is_better=False,
                                    note="1 h at 10 k samples/s, tick every 0.1 s; "
                                         "target: the hand-written replay's time"),
        "replay_ratio": figure(rep["10k_ratio"], "ratio", TARGET_RATIO,
                               note=f"hand-written / lobewatch time at 10 k samples/s "
                                    f"(1 M samples/s: {rep['1m_ratio']:.2f})"),
        "replay_10k_us_per_sample": figure(rep["10k_us_per_sample"], "us",
                                           note="replay at 10 k samples/s, per sample"),
        "replay_10k_ms_per_readout": figure(rep["10k_ms_per_readout"], "ms",
                                            note="replay at 10 k samples/s, per readout"),
        "replay_1m_us_per_sample": figure(rep["1m_us_per_sample"], "us",
                                          note="replay at 1 M samples/s, per sample"),
        "replay_1m_ms_per_readout": figure(rep["1m_ms_per_readout"], "ms",
                                           note="replay at 1 M samples/s, per readout"),
        "readout_gap_max_intervals": figure(gaps[worst], "intervals", TARGET_GAP_INTERVALS,
                                            higher_is_better=False,
                                            note=f"largest gap between readouts ({gap_note})"),
        "latency_readout_p99_ms": figure(lat_p99, "ms", TARGET_LATENCY_MS,
                                         higher_is_better=False,
                                         note="publish -> readout at 100 k samples/s, "
                                              "readout every 0.1 s"),
    }
