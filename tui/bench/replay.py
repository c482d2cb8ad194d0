"""Replay and recording rates of session files.

* replay: a generated session (invented swept-beam data, 1,000 samples per batch,
  readouts every 0.1 s of recorded time) replayed headless through the full pipeline
  (estimator, metrics, alarms, JSON Lines printer to /dev/null), next to the raw rate of
  reading the same samples with sqlite3 + numpy alone, in the same run.  Targets:
  >= 5,000,000 samples/s and >= 0.5 of the raw read rate.  Also the player's read path
  alone and the pipeline alone (batches from memory), to show which one limits.
* recording: a monitor fed at a paced 1,000,000 samples/s with a recorder attached;
  it keeps up when the feed stays on schedule and the recorder's queue stays short.
  Also the recorder's unpaced throughput.
"""

from __future__ import annotations

import math
import os
import sqlite3
import time
from collections.abc import Iterator
from typing import Any

import numpy as np

from stream.batch import SampleBatch
from stream.tick import SourceStats

T0 = 1_767_225_600.0  # invented
PER_BATCH = 1000
RATE_SPS = 1_000_000.0
TICK_S = 0.1
TARGET_SPS = 5_000_000.0
TARGET_RATIO = 0.5


def _model_table() -> tuple[np.ndarray, np.ndarray]:
    from stream.array_model import ArrayModel
    grid = np.arange(-180.0, 180.0, 0.01)
    return grid, ArrayModel(n_elements=4, spacing_wl=0.5).power_db(grid)


def batches(n_samples: int, seed: int = 3, rate_sps: float = RATE_SPS,
            per_batch: int = PER_BATCH) -> Iterator[SampleBatch]:
    """Invented data: a 4-element beam swept -60..60 deg 4 times a second, noise."""
    grid, table = _model_table()
    rng = np.random.default_rng(seed)
    for k in range(n_samples // per_batch):
        t = T0 + (k * per_batch + np.arange(per_batch)) / rate_sps
        phase = ((t - T0) * 4.0) % 1.0
        angle = np.where(phase < 0.5, -60 + 240 * phase, 180 - 240 * phase)
        power = -35.0 + np.interp(angle, grid, table) + rng.normal(0, 0.3, per_batch)
        yield SampleBatch(t, angle, np.maximum(power, -90.0), rx_t=float(t[-1]), seq=k)


def generate(path: str, n_samples: int, rate_sps: float = RATE_SPS,
             per_batch: int = PER_BATCH) -> None:
    """Write an invented session of ``n_samples`` recorded at ``rate_sps`` in batches of
    ``per_batch``, with a tick every TICK_S."""
    from replay.session_writer import SessionWriter
    with SessionWriter(path, {"notes": "invented benchmark session"},
                       synchronous="OFF") as w:
        next_tick = T0 + TICK_S
        for k, b in enumerate(batches(n_samples, rate_sps=rate_sps, per_batch=per_batch)):
            while next_tick < b.rx_t:
                w.write_tick(next_tick, SourceStats("receiving", k))
                next_tick += TICK_S
            w.write_batch(b)
            if w.pending_bytes > 64 * 1024 * 1024:
                w.commit()
        w.write_tick(next_tick, SourceStats("ended", n_samples // per_batch))


def raw_read(path: str) -> tuple[float, int]:
    """Samples/s reading every sample with nothing but sqlite3 + numpy."""
    t0 = time.perf_counter()
    con = sqlite3.connect(f"file:{path}?mode=ro&immutable=1", uri=True)
    n = 0
    acc = 0.0
    from replay.codec import decode_batch  # format 2 blocks (docs/session-format.md)
    for m, enc, tb, ab, pb in con.execute(
            "SELECT n, enc, t, angle_deg, power_db FROM blocks ORDER BY id"):
        t, a, p = decode_batch(enc, m, tb, ab, pb)
        n += a.size
        acc += t[0] + a[0] + p[0]  # touch the arrays
    con.close()
    return n / (time.perf_counter() - t0), n


def read_path(path: str) -> tuple[float, int]:
    """Samples/s of the player's read path alone: rows -> checked SampleBatch, no pipeline."""
    from replay.session import SessionReader
    t0 = time.perf_counter()
    n = 0
    with SessionReader(path) as reader:
        for item in reader.iter_items():
            if item.kind == "batch":
                n += len(item.value)
    return n / (time.perf_counter() - t0), n


def _monitor() -> Any:
    from stream.alarms import AlarmEngine
    from stream.array_model import ArrayModel
    from stream.estimator import RollingPattern
    from stream.monitor import Monitor
    return Monitor(RollingPattern(), AlarmEngine(), ArrayModel(4))


def pipeline_only(path: str) -> tuple[float, int]:
    """Samples/s of the pipeline alone: the same batches and ticks, from memory."""
    from replay.session import SessionReader
    with SessionReader(path) as reader:
        items = list(reader.iter_items())
    mon = _monitor()
    t0 = time.perf_counter()
    n = 0
    for it in items:
        if it.kind == "batch":
            mon.ingest(it.value)
            n += len(it.value)
        elif it.kind == "tick":
            mon.tick(it.t, it.value)
    return n / (time.perf_counter() - t0), n


def replay(path: str) -> tuple[float, int]:
    """Samples/s of ``lobewatch replay --headless`` (in-process, output to /dev/null)."""
    from replay.player import Player
    from tui.headless import run_headless
    mon = _monitor()
    t0 = time.perf_counter()
    with open(os.devnull, "w") as out, Player(path, mon, speed=math.inf) as player:
        run_headless(player, mon, out=out)
        n = player.samples_fed
    return n / (time.perf_counter() - t0), n


def run_replay(path: str, runs: int, *, parts: bool = True,
               progress: Any = None) -> dict[str, float]:
    """Medians over ``runs`` interleaved runs (so drift hits all alike): replay, raw read
    and, with ``parts``, the read path and pipeline alone."""
    raws, reps, reads, pipes = [], [], [], []
    for r in range(runs):
        if progress is not None:
            progress(f"replay: run {r + 1}/{runs}")
        raws.append(raw_read(path)[0])
        reps.append(replay(path)[0])
        if parts:
            reads.append(read_path(path)[0])
            pipes.append(pipeline_only(path)[0])
    from tui.bench.figures import median
    out = {"replay_sps": median(reps), "raw_read_sps": median(raws)}
    out["replay_ratio"] = out["replay_sps"] / out["raw_read_sps"]
    if parts:
        out["read_path_sps"] = median(reads)
        out["pipeline_only_sps"] = median(pipes)
    return out


def record_paced(path: str, seconds: float = 5.0) -> dict[str, float]:
    """Feed a monitor + recorder at a paced RATE_SPS for ``seconds``."""
    from replay.recorder import Recorder
    mon = _monitor()
    rec = Recorder(path, {"notes": "invented benchmark recording"}).attach(mon)
    data = list(batches(int(RATE_SPS * seconds)))
    cpu0 = time.process_time()
    start = time.perf_counter()
    worst_lag = 0.0
    max_queue = 0
    next_tick = TICK_S
    for k, b in enumerate(data):
        due = start + (k + 1) * PER_BATCH / RATE_SPS
        now = time.perf_counter()
        if now < due:
            time.sleep(due - now)
        else:
            worst_lag = max(worst_lag, now - due)
        mon.ingest(b.with_rx_t(T0 + (time.perf_counter() - start)))
        if time.perf_counter() - start >= next_tick:
            mon.tick(T0 + next_tick, SourceStats("receiving", k))
            next_tick += TICK_S
        q = getattr(rec, "_queue", None)
        if q is not None:
            max_queue = max(max_queue, q.qsize())
    fed = time.perf_counter() - start
    c0 = time.perf_counter()
    rec.close()
    close_s = time.perf_counter() - c0
    cpu = time.process_time() - cpu0
    return {"rate_sps": len(data) * PER_BATCH / fed, "worst_lag_ms": 1e3 * worst_lag,
            "max_queue_batches": max_queue, "close_ms": 1e3 * close_s,
            "cpu_pct_of_one_core": 100 * cpu / (fed + close_s),
            "file_mb": os.path.getsize(path) / 1e6}


def record_unpaced(path: str, n_samples: int = 5_000_000) -> float:
    """Recorder throughput alone (sink calls as fast as possible, then close)."""
    from replay.recorder import Recorder

    class Sinks:
        def __init__(self) -> None:
            self.batch_sinks: list = []
            self.tick_sinks: list = []
            self.event_sinks: list = []

    rec = Recorder(path, {}).attach(Sinks())
    data = list(batches(n_samples))
    t0 = time.perf_counter()
    for b in data:
        rec.on_batch(b)
    rec.close()
    return n_samples / (time.perf_counter() - t0)
