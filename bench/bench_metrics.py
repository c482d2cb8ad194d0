"""Benchmark of ``stream.pattern.measure`` (not a test: nothing here asserts).

Prints the median time of ``measure()`` over at least 50 runs on invented patterns (a
4-element array with cos^1.2 elements over the full circle), clean and with 0.3 dB of
Gaussian noise, at 360 points (1 deg) and 3,600 points (0.1 deg), next to a naive
pure-Python implementation of the core of the same job (sort, merge duplicates, peak,
half-power crossings, first nulls, highest side lobe, one sample at a time) for the
speed-up ratio.

Run from the repository root::

    .venv/bin/python bench/bench_metrics.py [--runs N] [--json]

Target (issue 2): <= 1 ms for 3,600 points.
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

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from stream.array_model import ArrayModel  # noqa: E402
from stream.pattern import measure  # noqa: E402


def naive_measure(angles: list[float], powers: list[float]) -> dict[str, float | None]:
    """The same job the slow way: Python lists and loops, for comparison only."""
    acc: dict[float, list[float]] = {}
    for a, p in zip(angles, powers, strict=True):
        if math.isnan(a) or math.isnan(p):
            continue
        acc.setdefault(a % 360.0, []).append(10 ** (p / 10))
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


def median_time(fn, *args, runs: int) -> float:  # noqa: ANN001
    fn(*args)  # warm up
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn(*args)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=200, help="runs per case (>= 50)")
    ap.add_argument("--json", action="store_true", help="print JSON instead of a table")
    args = ap.parse_args(argv)
    runs = max(50, args.runs)
    model = ArrayModel(4, 0.5, 1.2)
    rng = np.random.default_rng(1)
    rows = []
    for n in (360, 3600):
        g = np.linspace(-180.0, 180.0, n, endpoint=False)
        clean = model.power_db(g)
        noisy = np.maximum(clean, -40.0) + rng.normal(0.0, 0.3, n)
        for label, p in (("clean", clean), ("noise 0.3 dB", noisy)):
            t_fast = median_time(measure, g, p, runs=runs)
            t_naive = median_time(naive_measure, g.tolist(), p.tolist(),
                                  runs=max(50, runs // 4))
            rows.append({"points": n, "data": label, "measure_ms": t_fast * 1e3,
                         "naive_python_ms": t_naive * 1e3, "ratio": t_naive / t_fast})
    if args.json:
        print(json.dumps({"runs": runs, "results": rows}))
        return 0
    print(f"measure() median of {runs} runs (naive: {max(50, runs // 4)} runs)")
    print(f"{'points':>6}  {'data':<13}{'measure ms':>11}{'naive ms':>10}{'ratio':>7}")
    for r in rows:
        print(f"{r['points']:>6}  {r['data']:<13}{r['measure_ms']:>11.3f}"
              f"{r['naive_python_ms']:>10.3f}{r['ratio']:>7.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
