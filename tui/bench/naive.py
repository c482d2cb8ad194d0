"""A naive per-sample estimator, written for the benchmark only.

It does the job of :class:`stream.estimator.RollingPattern` the obvious way (a dict of
bins and a Python loop per sample) so the real one's speed can be shown as a ratio
measured in the same run on the same data.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence

import numpy as np

from stream.batch import SampleBatch
from stream.estimator import MIN_REVERSAL_DEG
from tui.bench.figures import median


class NaiveRollingPattern:
    """The same job written the obvious way: a dict of bins and a loop per sample.

    Per batch: each sample is wrapped, binned and summed into a dict, with where in its
    bin it fell (each bin is reported at its samples' mean angle, as the real estimator
    does); then every touched bin gets ``P += (1 - exp(-dt/tau)) * (x - P)``; the sweep
    rule (reversal by more than the hysteresis from the furthest angle) is followed
    sample by sample, with a per-sweep dict of bins.  Only for the speed-up ratio."""

    def __init__(self, bin_deg: float = 1.0, tau_s: float = 3.0) -> None:
        self.nb = int(round(360.0 / bin_deg))
        self.w = 360.0 / self.nb
        self.tau = tau_s
        self.h = max(0.5 * self.w, MIN_REVERSAL_DEG)
        self.bins: dict[int, list[float]] = {}     # bin -> [power, last_t]
        self.offsets: dict[int, list[float]] = {}  # bin -> [offset sum, count]
        self.sweep: dict[int, list[float]] = {}    # bin -> [sum, count, offset sum]
        self.direction = 0
        self.ext: float | None = None
        self.sweeps = 0

    def update(self, angle_deg: np.ndarray, power_db: np.ndarray, now: float) -> None:
        acc: dict[int, list[float]] = {}
        for a, p in zip(angle_deg.tolist(), power_db.tolist(), strict=True):
            a = (a + 180.0) % 360.0 - 180.0
            x = (a + 180.0) / self.w + 0.5
            k = int(x)
            off = x - k - 0.5  # where in the bin, -1/2 .. 1/2
            b = k % self.nb
            lin = 10.0 ** (p / 10.0)
            self._follow(a)
            cell = acc.setdefault(b, [0.0, 0])
            cell[0] += lin
            cell[1] += 1
            o = self.offsets.setdefault(b, [0.0, 0])
            o[0] += off
            o[1] += 1
            sw = self.sweep.setdefault(b, [0.0, 0, 0.0])
            sw[0] += lin
            sw[1] += 1
            sw[2] += off
        for b, (s, c) in acc.items():
            x = s / c
            cur = self.bins.get(b)
            if cur is None:
                self.bins[b] = [x, now]
            else:
                alpha = 1.0 - math.exp(-(now - cur[1]) / self.tau)
                cur[0] += alpha * (x - cur[0])
                cur[1] = now

    def angle_deg(self, b: int) -> float:
        """Bin ``b`` reported at its samples' mean angle."""
        o_sum, n = self.offsets[b]
        return -180.0 + b * self.w + o_sum / n * self.w

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


def bench_naive(batches: Sequence[SampleBatch], runs: int) -> tuple[float, float]:
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
    return n / median(wall), n / median(cpu)
