"""Metrics: time of ``stream.pattern.measure`` on 360 and 3,600 bins.

Median time over many runs on invented patterns (a 4-element array with cos^1.2
elements over the full circle), clean and with 0.3 dB of Gaussian noise, next to a naive
pure-Python implementation of the core of the same job (sort, merge duplicates, peak,
half-power crossings, first nulls, highest side lobe, one sample at a time) for the
speed-up ratio.  Target (issue 2): <= 1 ms for 3,600 points.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from typing import Any

import numpy as np

from tui.bench.figures import median

TARGET_3600_MS = 1.0


def naive_measure(angles: list[float], powers: list[float]) -> dict[str, float | None]:
    """The same job the slow way: Python lists and loops, for comparison only."""
    acc: dict[float, list[float]] = {}
    for a, p in zip(angles, powers, strict=True):
        if math.isnan(a) or math.isnan(p):
            continue
        acc.setdefault((a + 180.0) % 360.0 - 180.0, []).append(10 ** (p / 10))
    xs = sorted(acc)
    ps = [10 * math.log10(sum(acc[x]) / len(acc[x])) for x in xs]
    n = len(xs)
    i = max(range(n), key=lambda k: ps[k])
    pk = ps[i]
    lvl = pk - 3.0103

    def walk(step: int) -> tuple[float | None, int | None]:
        k = i
        cross = None
        while 0 <= k + step < n and ps[k + step] >= lvl:
            k += step
        if 0 <= k + step < n:
            a0, a1, p0, p1 = xs[k], xs[k + step], ps[k], ps[k + step]
            cross = a0 + (lvl - p0) * (a1 - a0) / (p1 - p0)
        j = k
        while 0 <= j + step < n and ps[j + step] <= ps[j]:
            j += step
        return cross, (j if 0 <= j + step < n else None)

    left, lnull = walk(-1)
    right, rnull = walk(1)
    side = [ps[k] for k in range(n)
            if (lnull is not None and k < lnull) or (rnull is not None and k > rnull)]
    return {
        "peak_angle_deg": xs[i], "peak_power_db": pk,
        "hpbw_deg": None if left is None or right is None else right - left,
        "fnbw_deg": None if lnull is None or rnull is None else xs[rnull] - xs[lnull],
        "sll_db": max(side) - pk if side else None,
    }


def median_time(fn: Callable[..., Any], *args: Any, runs: int) -> float:
    """Median seconds of ``fn(*args)`` over ``runs`` calls, after one warm-up call."""
    fn(*args)
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn(*args)
        times.append(time.perf_counter() - t0)
    return median(times)


def patterns(seed: int = 1) -> list[tuple[int, str, np.ndarray, np.ndarray]]:
    """(points, label, angle_deg, power_db): invented clean and noisy patterns."""
    from stream.array_model import ArrayModel
    model = ArrayModel(4, 0.5, 1.2)
    rng = np.random.default_rng(seed)
    out = []
    for n in (360, 3600):
        g = np.linspace(-180.0, 180.0, n, endpoint=False)
        clean = model.power_db(g)
        noisy = np.maximum(clean, -40.0) + rng.normal(0.0, 0.3, n)
        out += [(n, "clean", g, clean), (n, "noise 0.3 dB", g, noisy)]
    return out


def run_metrics(runs: int = 200, naive: bool = True) -> list[dict[str, Any]]:
    """One row per pattern: ``measure_ms`` (median of ``runs``) and, with ``naive``, the
    naive implementation's time and the ratio."""
    from stream.pattern import measure
    rows = []
    for n, label, g, p in patterns():
        t_fast = median_time(measure, g, p, runs=runs)
        row: dict[str, Any] = {"points": n, "data": label, "measure_ms": t_fast * 1e3}
        if naive:
            t_naive = median_time(naive_measure, g.tolist(), p.tolist(),
                                  runs=max(10, runs // 4))
            row.update({"naive_python_ms": t_naive * 1e3, "ratio": t_naive / t_fast})
        rows.append(row)
    return rows


def metrics_table(rows: list[dict[str, Any]], runs: int) -> str:
    lines = [f"measure() median of {runs} runs (naive: {max(10, runs // 4)} runs)",
             f"{'points':>6}  {'data':<13}{'measure ms':>11}{'naive ms':>10}{'ratio':>7}"]
    for r in rows:
        lines.append(f"{r['points']:>6}  {r['data']:<13}{r['measure_ms']:>11.3f}"
                     f"{r.get('naive_python_ms', math.nan):>10.3f}"
                     f"{r.get('ratio', math.nan):>7.1f}")
    return "\n".join(lines)
