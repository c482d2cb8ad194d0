"""The rolling estimator's hot path: ``update()`` and ``snapshot()``, and the speed-up
over the naive per-sample estimator (:mod:`tui.bench.naive`).

On invented data (a simulated 4-element array swept back and forth with receiver
noise), 1,000-sample batches: a dense stream (a batch spans a hundredth of a degree, as
at megasample rates) and a sparse one (a batch spans more than the reversal hysteresis,
so every batch is scanned for sweep ends), 1 deg and 0.1 deg bins, both averaging
modes.  Rates are per wall-clock second and per CPU second of the benchmark thread.
Targets (issue 7): >= 10,000,000 samples/s, snapshot <= 0.2 ms at 3,600 bins, >= 20x
the naive estimator.
"""

from __future__ import annotations

import time
from typing import Any

import numpy as np

from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.estimator import EstimatorConfig, RollingPattern
from tui.bench.figures import figure, median
from tui.bench.naive import bench_naive

BATCH = 1000
TARGET_SPS = 10_000_000.0
TARGET_SNAPSHOT_MS = 0.2
TARGET_SPEEDUP = 20.0


def sweep_stream(n_samples: int, deg_per_sample: float, seed: int = 1) -> list[SampleBatch]:
    """Back-and-forth sweeps over -60..60 deg of an invented 4-element array with 0.5 dB
    receiver noise, cut into 1,000-sample batches."""
    rng = np.random.default_rng(seed)
    travel = np.arange(n_samples) * deg_per_sample
    phase = np.mod(travel, 240.0)
    ang = np.where(phase < 120.0, -60.0 + phase, 180.0 - phase)
    pw = ArrayModel(n_elements=4, spacing_wl=0.5).power_db(ang) - 30.0
    pw = pw + rng.normal(0.0, 0.5, n_samples)
    return [SampleBatch.from_arrays(ang[i:i + BATCH], pw[i:i + BATCH])
            for i in range(0, n_samples, BATCH)]


def _time_updates(batches: list[SampleBatch], cfg: EstimatorConfig,
                  dt_s: float) -> tuple[float, float]:
    """(wall seconds, this thread's CPU seconds) to feed ``batches``."""
    est = RollingPattern(cfg)
    now = 1.0e9
    c0 = time.thread_time()
    t0 = time.perf_counter()
    for b in batches:
        now += dt_s
        est.update(b, now)
    return time.perf_counter() - t0, time.thread_time() - c0


def bench_update(batches: list[SampleBatch], cfg: EstimatorConfig,
                 runs: int) -> tuple[float, float]:
    """Median samples/s of ``update()`` over ``runs`` runs (after a warm-up run), per
    wall-clock second and per CPU second of this thread."""
    n = sum(len(b) for b in batches)
    _time_updates(batches[: len(batches) // 10 + 1], cfg, 1e-4)
    wall, cpu = zip(*(_time_updates(batches, cfg, 1e-4) for _ in range(runs)), strict=True)
    return n / median(wall), n / median(cpu)


def bench_snapshot(calls: int, runs: int) -> float:
    """Median time of ``snapshot()`` in ms with all 3,600 bins of 0.1 deg valid."""
    est = RollingPattern(EstimatorConfig(bin_deg=0.1))
    ang = np.arange(-180.0, 180.0, 0.025)
    pw = np.random.default_rng(2).normal(-40.0, 3.0, ang.size)
    est.update(SampleBatch.from_arrays(ang, pw), 1.0)
    per_run = []
    for _ in range(runs):
        t0 = time.perf_counter()
        for _ in range(calls):
            est.snapshot(1.5)
        per_run.append((time.perf_counter() - t0) / calls)
    return median(per_run) * 1e3


def naive_speedup(batches: list[SampleBatch], runs: int,
                  naive_runs: int = 3) -> dict[str, float]:
    """The real estimator (EMA, 1 deg bins) against the naive one on the same batches:
    rates per wall and CPU second, and the ratio of the CPU rates."""
    n_wall, n_cpu = bench_naive(batches, naive_runs)
    r_wall, r_cpu = bench_update(batches, EstimatorConfig(bin_deg=1.0), runs)
    return {"naive_sps": n_wall, "naive_cpu_sps": n_cpu, "real_sps": r_wall,
            "real_cpu_sps": r_cpu, "speedup": r_cpu / n_cpu}


def run(quick: bool = False) -> dict[str, dict[str, Any]]:
    """All figures, keyed by name, each ``{"value", "unit", "target", "pass"}`` (rates
    also carry ``cpu_value``, the same rate per CPU second of the benchmark thread)."""
    runs = 3 if quick else 7
    n = 300_000 if quick else 2_000_000
    streams = {"dense": sweep_stream(n, 1.2e-5),    # 120 deg/s at 10 Msamples/s
               "sparse": sweep_stream(n, 6.0e-4)}   # 0.6 deg per batch: every batch scanned
    out: dict[str, dict[str, Any]] = {}
    for label, batches in streams.items():
        for bin_deg in (1.0, 0.1):
            for avg in ("ema", "sweeps"):
                wall, cpu = bench_update(
                    batches, EstimatorConfig(bin_deg=bin_deg, averaging=avg), runs)
                key = f"update_{label}_{avg}_{bin_deg:g}deg_sps".replace(".", "p")
                out[key] = figure(wall, "samples/s", TARGET_SPS, cpu_value=cpu)
    out["snapshot_3600_ms"] = figure(bench_snapshot(200 if quick else 2000, runs), "ms",
                                     TARGET_SNAPSHOT_MS, higher_is_better=False)
    for label, batches in streams.items():
        r = naive_speedup(batches[: (20 if quick else 100)], runs)
        suffix = "" if label == "dense" else "_sparse"
        out[f"naive{suffix}_sps"] = figure(r["naive_sps"], "samples/s",
                                           cpu_value=r["naive_cpu_sps"])
        out[f"naive_speedup{suffix}"] = figure(r["speedup"], "x", TARGET_SPEEDUP,
                                               cpu_value=r["speedup"])
    return out


def _num(v: float | None) -> str:
    if v is None:
        return ""
    return f"{v:,.0f}" if abs(v) >= 1000 else f"{v:.4g}"


def estimator_table(figs: dict[str, dict[str, Any]]) -> str:
    rows = [f"{'figure':34} {'value (wall)':>14} {'per CPU s':>14} {'unit':10} "
            f"{'target':>12}  result"]
    for name, f in figs.items():
        res = "" if f["pass"] is None else ("pass" if f["pass"] else "short")
        rows.append(f"{name:34} {_num(f['value']):>14} {_num(f.get('cpu_value')):>14} "
                    f"{f['unit']:10} {_num(f['target']):>12}  {res}")
    return "\n".join(rows)
