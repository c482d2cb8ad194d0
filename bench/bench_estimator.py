"""Benchmark of the rolling estimator's hot path (not a test: nothing here asserts).

Measures, on invented data (a simulated 4-element array swept back and forth with
receiver noise):

* ``update()`` throughput with 1,000-sample batches, samples/s, median of several runs,
  for a dense stream (a batch spans a hundredth of a degree, as at megasample rates) and a
  sparse one (a batch spans more than the reversal hysteresis, so every batch is scanned
  for sweep ends), at 1 deg and 0.1 deg bins, both averaging modes;
* ``snapshot()`` time with 3,600 bins (0.1 deg, the full circle filled);
* a naive pure-Python estimator doing the same job one sample at a time (dict of bins,
  the same EMA recurrence, the reversal rule for sweeps), on the same data, for the
  speed-up ratio (as a ratio of CPU rates measured in the same run).

Rates are given per wall-clock second (what the machine delivered, including whatever
else ran) and per CPU second of the benchmark thread (what the estimator costs).

Run from the repository root::

    .venv/bin/python bench/bench_estimator.py [--quick] [--json]

Targets (issue 7): >= 10,000,000 samples/s (<= 100 us per 1,000-sample batch),
snapshot <= 0.2 ms at 3,600 bins, >= 20x the naive estimator.
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

if __package__ in (None, ""):  # run as a script: make the repository importable
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from stream.array_model import ArrayModel  # noqa: E402
from stream.batch import SampleBatch  # noqa: E402
from stream.estimator import MIN_REVERSAL_DEG, EstimatorConfig, RollingPattern  # noqa: E402

BATCH = 1000
TARGET_SPS = 10_000_000.0
TARGET_SNAPSHOT_MS = 0.2
TARGET_SPEEDUP = 20.0


def _stream(n_samples: int, deg_per_sample: float, seed: int = 1) -> list[SampleBatch]:
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
    wall-clock second and per CPU second of this thread (the second is what the
    estimator costs; the first also carries whatever else the machine was doing)."""
    n = sum(len(b) for b in batches)
    _time_updates(batches[: len(batches) // 10 + 1], cfg, 1e-4)
    wall, cpu = zip(*(_time_updates(batches, cfg, 1e-4) for _ in range(runs)), strict=True)
    return n / statistics.median(wall), n / statistics.median(cpu)


def bench_snapshot(calls: int, runs: int) -> float:
    """Median time of ``snapshot()`` in ms with all 3,600 bins of 0.1 deg valid."""
    cfg = EstimatorConfig(bin_deg=0.1)
    est = RollingPattern(cfg)
    ang = np.arange(-180.0, 180.0, 0.025)
    pw = np.random.default_rng(2).normal(-40.0, 3.0, ang.size)
    est.update(SampleBatch.from_arrays(ang, pw), 1.0)
    assert len(est.snapshot(1.0)) == 3600
    per_run = []
    for _ in range(runs):
        t0 = time.perf_counter()
        for _ in range(calls):
            est.snapshot(1.5)
        per_run.append((time.perf_counter() - t0) / calls)
    return statistics.median(per_run) * 1e3


class NaiveRollingPattern:
    """The same job written the obvious way: a dict of bins and a loop per sample.

    Per batch: each sample is wrapped, binned and summed into a dict; then every touched
    bin gets ``P += (1 - exp(-dt/tau)) * (x - P)``; the sweep rule (reversal by more than
    the hysteresis from the furthest angle) is followed sample by sample, with a per-sweep
    dict of bins.  Only for the speed-up ratio."""

    def __init__(self, bin_deg: float = 1.0, tau_s: float = 3.0) -> None:
        self.nb = int(round(360.0 / bin_deg))
        self.w = 360.0 / self.nb
        self.tau = tau_s
        self.h = max(0.5 * self.w, MIN_REVERSAL_DEG)
        self.bins: dict[int, list[float]] = {}     # bin -> [power, last_t]
        self.sweep: dict[int, list[float]] = {}    # bin -> [sum, count]
        self.direction = 0
        self.ext: float | None = None
        self.sweeps = 0

    def update(self, angle_deg: np.ndarray, power_db: np.ndarray, now: float) -> None:
        acc: dict[int, list[float]] = {}
        for a, p in zip(angle_deg.tolist(), power_db.tolist(), strict=True):
            a = (a + 180.0) % 360.0 - 180.0
            b = int((a + 180.0) / self.w + 0.5) % self.nb
            lin = 10.0 ** (p / 10.0)
            self._follow(a)
            cell = acc.setdefault(b, [0.0, 0])
            cell[0] += lin
            cell[1] += 1
            sw = self.sweep.setdefault(b, [0.0, 0])
            sw[0] += lin
            sw[1] += 1
        for b, (s, c) in acc.items():
            x = s / c
            cur = self.bins.get(b)
            if cur is None:
                self.bins[b] = [x, now]
            else:
                alpha = 1.0 - math.exp(-(now - cur[1]) / self.tau)
                cur[0] += alpha * (x - cur[0])
                cur[1] = now

    def _follow(self, a: float) -> None:
        if self.ext is None:
            self.ext = a
            return
        if self.direction == 0:
            if abs(a - self.ext) > self.h:
                self.direction = 1 if a > self.ext else -1
                self.ext = a
            return
        if self.direction > 0:
            self.ext = max(self.ext, a)
            turned = a < self.ext - self.h
        else:
            self.ext = min(self.ext, a)
            turned = a > self.ext + self.h
        if turned:
            if len(self.sweep) >= 5:
                self.sweeps += 1
                self.sweep = {}
            self.direction = -self.direction
            self.ext = a


def bench_naive(batches: list[SampleBatch], runs: int) -> tuple[float, float]:
    """Median samples/s of the naive estimator, per wall second and per CPU second."""
    n = sum(len(b) for b in batches)
    wall, cpu = [], []
    for _ in range(runs):
        est = NaiveRollingPattern()
        now = 1.0e9
        c0 = time.thread_time()
        t0 = time.perf_counter()
        for b in batches:
            now += 1e-4
            est.update(b.angle_deg, b.power_db, now)
        wall.append(time.perf_counter() - t0)
        cpu.append(time.thread_time() - c0)
    return n / statistics.median(wall), n / statistics.median(cpu)


def _figure(value: float, unit: str, target: float | None, higher_is_better: bool = True,
            cpu: float | None = None) -> dict:
    ok = None if target is None else (value >= target if higher_is_better else value <= target)
    fig = {"value": value, "unit": unit, "target": target, "pass": ok}
    if cpu is not None:
        fig["cpu_value"] = cpu
    return fig


def run(quick: bool = False) -> dict[str, dict]:
    """All figures, keyed by name, each ``{"value", "unit", "target", "pass"}`` (rates
    also carry ``cpu_value``, the same rate per CPU second of the benchmark thread)."""
    runs = 3 if quick else 7
    n = 300_000 if quick else 2_000_000
    streams = {"dense": _stream(n, 1.2e-5),    # 120 deg/s at 10 Msamples/s
               "sparse": _stream(n, 6.0e-4)}   # 0.6 deg per batch: every batch scanned
    out: dict[str, dict] = {}
    for label, batches in streams.items():
        for bin_deg in (1.0, 0.1):
            for avg in ("ema", "sweeps"):
                wall, cpu = bench_update(
                    batches, EstimatorConfig(bin_deg=bin_deg, averaging=avg), runs)
                key = f"update_{label}_{avg}_{bin_deg:g}deg_sps".replace(".", "p")
                out[key] = _figure(wall, "samples/s", TARGET_SPS, cpu=cpu)
    out["snapshot_3600_ms"] = _figure(bench_snapshot(200 if quick else 2000, runs), "ms",
                                      TARGET_SNAPSHOT_MS, higher_is_better=False)
    # Speed-up against the naive estimator, same data, same settings (EMA, 1 deg bins),
    # as a ratio of CPU rates measured in this run.
    for label, batches in streams.items():
        part = batches[: (20 if quick else 100)]
        n_wall, n_cpu = bench_naive(part, 3)
        r_wall, r_cpu = bench_update(part, EstimatorConfig(bin_deg=1.0), runs)
        suffix = "" if label == "dense" else "_sparse"
        out[f"naive{suffix}_sps"] = _figure(n_wall, "samples/s", None, cpu=n_cpu)
        out[f"naive_speedup{suffix}"] = _figure(r_cpu / n_cpu, "x", TARGET_SPEEDUP,
                                                cpu=r_cpu / n_cpu)
    return out


def _num(v: float | None) -> str:
    if v is None:
        return ""
    return f"{v:,.0f}" if abs(v) >= 1000 else f"{v:.4g}"


def _table(figs: dict[str, dict]) -> str:
    rows = [f"{'figure':34} {'value (wall)':>14} {'per CPU s':>14} {'unit':10} "
            f"{'target':>12}  result"]
    for name, f in figs.items():
        res = "" if f["pass"] is None else ("pass" if f["pass"] else "short")
        rows.append(f"{name:34} {_num(f['value']):>14} {_num(f.get('cpu_value')):>14} "
                    f"{f['unit']:10} {_num(f['target']):>12}  {res}")
    return "\n".join(rows)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description="Benchmark the rolling estimator.")
    ap.add_argument("--quick", action="store_true", help="fewer samples and runs")
    ap.add_argument("--json", action="store_true", help="print one JSON object")
    args = ap.parse_args(argv)
    figs = run(quick=args.quick)
    print(json.dumps(figs) if args.json else _table(figs))
    return 0


if __name__ == "__main__":
    sys.exit(main())
