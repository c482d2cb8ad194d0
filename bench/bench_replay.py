"""Benchmark: session replay and recording rates (not a test; prints a table).

* replay: a generated session of 10,000,000 samples (invented swept-beam data, 1,000
  samples per batch, readouts every 0.1 s of recorded time) replayed headless through
  the full pipeline (estimator, metrics, alarms, JSON Lines printer to /dev/null),
  next to the raw rate of reading the same samples with sqlite3 + numpy alone, in the
  same run; medians of several runs.  Targets: >= 5,000,000 samples/s and >= 0.5 of
  the raw read rate.
* recording: a monitor fed at a paced 1,000,000 samples/s with a recorder attached;
  it keeps up when the feed stays on schedule and the recorder's queue stays short.
  Also the recorder's unpaced throughput.

Run:  .venv/bin/python bench/bench_replay.py [--samples N] [--runs K] [--json]
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sqlite3
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from replay.player import Player  # noqa: E402
from replay.recorder import Recorder  # noqa: E402
from replay.session import SessionReader, SessionWriter  # noqa: E402
from stream.alarms import AlarmEngine  # noqa: E402
from stream.array_model import ArrayModel  # noqa: E402
from stream.batch import SampleBatch  # noqa: E402
from stream.estimator import RollingPattern  # noqa: E402
from stream.monitor import Monitor  # noqa: E402
from stream.tick import SourceStats  # noqa: E402
from tui.headless import run_headless  # noqa: E402

T0 = 1_767_225_600.0  # invented
PER_BATCH = 1000
RATE_SPS = 1_000_000.0
TICK_S = 0.1


def _model_table():
    grid = np.arange(-180.0, 180.0, 0.01)
    return grid, ArrayModel(n_elements=4, spacing_wl=0.5).power_db(grid)


def batches(n_samples: int, seed: int = 3):
    """Invented data: a 4-element beam swept -60..60 deg 4 times a second, noise."""
    grid, table = _model_table()
    rng = np.random.default_rng(seed)
    for k in range(n_samples // PER_BATCH):
        t = T0 + (k * PER_BATCH + np.arange(PER_BATCH)) / RATE_SPS
        phase = ((t - T0) * 4.0) % 1.0
        angle = np.where(phase < 0.5, -60 + 240 * phase, 180 - 240 * phase)
        power = -35.0 + np.interp(angle, grid, table) + rng.normal(0, 0.3, PER_BATCH)
        yield SampleBatch(t, angle, np.maximum(power, -90.0), rx_t=float(t[-1]), seq=k)


def generate(path: str, n_samples: int) -> None:
    with SessionWriter(path, {"notes": "invented benchmark session"},
                       synchronous="OFF") as w:
        next_tick = T0 + TICK_S
        for k, b in enumerate(batches(n_samples)):
            while next_tick < b.rx_t:
                w.write_tick(next_tick, SourceStats("receiving", k))
                next_tick += TICK_S
            w.write_batch(b)
            if w.pending_bytes > 64 * 1024 * 1024:
                w.commit()
        w.write_tick(next_tick, SourceStats("ended", n_samples // PER_BATCH))


def raw_read(path: str) -> tuple[float, int]:
    """Samples/s reading every sample with nothing but sqlite3 + numpy."""
    t0 = time.perf_counter()
    con = sqlite3.connect(f"file:{path}?mode=ro&immutable=1", uri=True)
    n = 0
    acc = 0.0
    for tb, ab, pb in con.execute("SELECT t, angle_deg, power_db FROM batches ORDER BY id"):
        t = np.frombuffer(tb, dtype="<f8")
        a = np.frombuffer(ab, dtype="<f8")
        p = np.frombuffer(pb, dtype="<f8")
        n += a.size
        acc += t[0] + a[0] + p[0]  # touch the arrays
    con.close()
    return n / (time.perf_counter() - t0), n


def read_path(path: str) -> tuple[float, int]:
    """Samples/s of the player's read path alone: rows -> checked SampleBatch, no pipeline."""
    t0 = time.perf_counter()
    n = 0
    with SessionReader(path) as reader:
        for item in reader.iter_items():
            if item.kind == "batch":
                n += len(item.value)
    return n / (time.perf_counter() - t0), n


def pipeline_only(path: str) -> tuple[float, int]:
    """Samples/s of the pipeline alone: the same batches and ticks, from memory."""
    with SessionReader(path) as reader:
        items = list(reader.iter_items())
    mon = Monitor(RollingPattern(), AlarmEngine(), ArrayModel(4))
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
    """Samples/s of `lobewatch replay --headless` (in-process, output to /dev/null)."""
    mon = Monitor(RollingPattern(), AlarmEngine(), ArrayModel(4))
    t0 = time.perf_counter()
    with open(os.devnull, "w") as out, Player(path, mon, speed=math.inf) as player:
        run_headless(player, mon, out=out)
        n = player.samples_fed
    return n / (time.perf_counter() - t0), n


def record_paced(path: str, seconds: float = 5.0) -> dict:
    """Feed a monitor + recorder at a paced RATE_SPS for ``seconds``."""
    mon = Monitor(RollingPattern(), AlarmEngine(), ArrayModel(4))
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
        if rec._queue is not None:
            max_queue = max(max_queue, rec._queue.qsize())
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
    class Sinks:
        batch_sinks: list = []
        tick_sinks: list = []
        event_sinks: list = []
    m = Sinks()
    m.batch_sinks, m.tick_sinks, m.event_sinks = [], [], []
    rec = Recorder(path, {}).attach(m)
    data = list(batches(n_samples))
    t0 = time.perf_counter()
    for b in data:
        rec.on_batch(b)
    rec.close()
    return n_samples / (time.perf_counter() - t0)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10_000_000)
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="lobewatch-bench-") as d:
        path = os.path.join(d, "bench.lws")
        t0 = time.perf_counter()
        generate(path, args.samples)
        gen_s = time.perf_counter() - t0
        raws, reps, reads, pipes = [], [], [], []
        for _ in range(args.runs):  # interleaved, so drift hits all alike
            raws.append(raw_read(path)[0])
            reps.append(replay(path)[0])
            reads.append(read_path(path)[0])
            pipes.append(pipeline_only(path)[0])
        raw, rep = statistics.median(raws), statistics.median(reps)
        rd, pipe = statistics.median(reads), statistics.median(pipes)
        size_mb = os.path.getsize(path) / 1e6
        paced = record_paced(os.path.join(d, "paced.lws"))
        unpaced = record_unpaced(os.path.join(d, "unpaced.lws"))
    res = {
        "samples": args.samples, "session_mb": round(size_mb, 1),
        "generate_s": round(gen_s, 1),
        "replay_sps": round(rep), "raw_read_sps": round(raw),
        "replay_ratio": round(rep / raw, 3),
        "read_path_sps": round(rd), "read_path_ratio": round(rd / raw, 3),
        "pipeline_only_sps": round(pipe),
        "replay_pass": rep >= 5e6 and rep / raw >= 0.5,
        "record_paced": {k: round(v, 2) for k, v in paced.items()},
        "record_unpaced_sps": round(unpaced),
    }
    if args.json:
        print(json.dumps(res, indent=2))
        return 0
    print(f"session: {args.samples:,} samples, {size_mb:.0f} MB, generated in {gen_s:.1f} s")
    print(f"{'figure':<34}{'value':>16}  target")
    print(f"{'headless replay (median)':<34}{rep:>16,.0f}  >= 5,000,000 samples/s")
    print(f"{'raw sqlite3+numpy read (median)':<34}{raw:>16,.0f}  samples/s")
    print(f"{'replay / raw':<34}{rep / raw:>16.3f}  >= 0.5")
    print(f"{'session read path, no pipeline':<34}{rd:>16,.0f}  samples/s")
    print(f"{'read path / raw':<34}{rd / raw:>16.3f}")
    print(f"{'pipeline alone, batches in memory':<34}{pipe:>16,.0f}  samples/s")
    print(f"{'record, paced 1 M/s: rate':<34}{paced['rate_sps']:>16,.0f}  samples/s")
    print(f"{'  worst feed lag':<34}{paced['worst_lag_ms']:>16.1f}  ms")
    print(f"{'  max recorder queue':<34}{paced['max_queue_batches']:>16.0f}  batches")
    print(f"{'  close (final commit)':<34}{paced['close_ms']:>16.1f}  ms")
    print(f"{'  CPU (feed+estimator+recorder)':<34}{paced['cpu_pct_of_one_core']:>16.1f}  % core")
    print(f"{'recorder alone, unpaced':<34}{unpaced:>16,.0f}  samples/s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
