"""Hold a speed change to ``stream.pattern.measure`` to the same numbers (a tool, not a test).

Measures a corpus of invented patterns -- textbook arrays of 2 to 16 elements, steered
and not, over full turns, sectors and a sector across the seam, steps of 0.1 to 5 deg,
clean and with 0.1 to 1.5 dB of noise, shuffled, with duplicates and NaN -- with and
without uncertainties, and either saves the results or compares them with saved ones.

Run from the repository root, before and after a change::

    .venv/bin/python bench/measure_corpus.py save /tmp/before.pkl
    .venv/bin/python bench/measure_corpus.py check /tmp/before.pkl

``check`` prints how many values moved and by how much (metrics absolutely, in their
units; uncertainties relatively) and exits 1 when a value appeared, vanished or a reason
changed.  A speed-up should move nothing, or the uncertainties by a few ulps at most.
"""

from __future__ import annotations

import argparse
import pickle
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from stream.array_model import ArrayModel  # noqa: E402
from stream.pattern import measure  # noqa: E402

Case = tuple[np.ndarray, np.ndarray]


def corpus(seed: int = 42) -> list[Case]:
    """The invented patterns, the same for a given seed."""
    rng = np.random.default_rng(seed)
    cases: list[Case] = []
    spans = ((-180, 180, 1.0), (-180, 180, 0.1), (-90, 90, 5.0), (-60, 60, 0.5),
             (100, 250, 1.0), (-180, 180, 2.5))
    for n_el, spacing, q in ((4, .5, 1.2), (8, .5, 1.0), (2, .5, 0.5), (6, .7, 2.0),
                             (16, .5, 1.0)):
        for steer in (0.0, 20.0, -35.0, 170.0):
            model = ArrayModel(n_el, spacing, q, steer_deg=steer)
            for lo, hi, step in spans:
                g = np.arange(lo, hi, step, dtype=float)
                if hi > 180:
                    g = (g + 180.0) % 360.0 - 180.0
                base = model.power_db(g)
                for noise in (0.0, 0.1, 0.5, 1.5):
                    p = np.maximum(base, -45.0)
                    if noise:
                        p = p + rng.normal(0.0, noise, g.size)
                    cases.append((g.copy(), p.copy()))
                    if noise == 0.5:
                        o = rng.permutation(g.size)
                        cases.append((g[o], p[o]))
    cases.append((np.array([0.0, 1, 2]), np.array([0.0, 1, 0])))
    cases.append((np.array([0.0, 1, 2, 3]), np.array([1.0, 1, 1, 1])))
    cases.append((np.array([0.0, 1, 1, 2, np.nan]), np.array([0.0, 1, 2, 0, 3])))
    return cases


def results(cases: list[Case]) -> dict[bool, list[tuple[dict, dict, dict]]]:
    """``measure`` of every case, with and without uncertainties."""
    out: dict[bool, list[tuple[dict, dict, dict]]] = {}
    for unc in (True, False):
        rows = []
        for a, p in cases:
            m = measure(a, p, uncertainty=unc)
            rows.append((m.to_dict(), dict(m.reasons), dict(m.uncertainty)))
        out[unc] = rows
    return out


def compare(ref: dict, new: dict) -> tuple[int, float, float, int]:
    """(values moved, worst metric move, worst relative uncertainty move, structural
    differences: a value or uncertainty present in one and not the other, or a reason
    changed)."""
    moved, worst_m, worst_u, structural = 0, 0.0, 0.0, 0
    for unc in (True, False):
        for (d1, r1, u1), (d2, r2, u2) in zip(ref[unc], new[unc], strict=True):
            for k in d1:
                a, b = d1[k], d2[k]
                if (a is None) != (b is None):
                    structural += 1
                elif a is not None and a != b:
                    moved += 1
                    worst_m = max(worst_m, abs(a - b))
            for k in set(u1) | set(u2):
                a, b = u1.get(k), u2.get(k)
                if a is None or b is None:
                    structural += 1
                elif a != b:
                    moved += 1
                    worst_u = max(worst_u, abs(a - b) / max(abs(a), 1e-12))
            structural += r1 != r2
    return moved, worst_m, worst_u, structural


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("mode", choices=("save", "check"))
    ap.add_argument("path", help="file of saved results (pickle; write with save)")
    args = ap.parse_args(argv)
    cases = corpus()
    new = results(cases)
    if args.mode == "save":
        with open(args.path, "wb") as f:
            pickle.dump(new, f)
        print(f"{len(cases)} patterns measured, results saved to {args.path}")
        return 0
    with open(args.path, "rb") as f:
        ref = pickle.load(f)  # noqa: S301 - a file this tool wrote
    moved, worst_m, worst_u, structural = compare(ref, new)
    print(f"{len(cases)} patterns: {moved} values moved (metrics by at most {worst_m:.3g}, "
          f"uncertainties by at most {worst_u:.3g} relative); {structural} structural "
          "differences")
    return 1 if structural else 0


if __name__ == "__main__":
    raise SystemExit(main())
