"""Benchmark: session replay and recording rates (not a test; prints a table).

A thin command line over :mod:`tui.bench.replay` (also used by ``lobewatch bench``):
headless replay of a generated 10,000,000-sample session next to the raw sqlite3+numpy
read rate in the same run (targets: >= 5,000,000 samples/s and >= 0.5 of raw), and
recording at a paced 1,000,000 samples/s.

Run:  .venv/bin/python bench/bench_replay.py [--samples N] [--runs K] [--json]
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from tui.bench.replay import (  # noqa: E402
    TARGET_RATIO,
    TARGET_SPS,
    generate,
    record_paced,
    record_unpaced,
    run_replay,
)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=10_000_000)
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--json", action="store_true")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="lobewatch-bench-") as d:
        path = os.path.join(d, "bench.lwsession")
        t0 = time.perf_counter()
        generate(path, args.samples)
        gen_s = time.perf_counter() - t0
        r = run_replay(path, args.runs)
        size_mb = os.path.getsize(path) / 1e6
        paced = record_paced(os.path.join(d, "paced.lwsession"))
        unpaced = record_unpaced(os.path.join(d, "unpaced.lwsession"))
    rep, raw = r["replay_sps"], r["raw_read_sps"]
    rd, pipe = r["read_path_sps"], r["pipeline_only_sps"]
    res = {
        "samples": args.samples, "session_mb": round(size_mb, 1),
        "generate_s": round(gen_s, 1),
        "replay_sps": round(rep), "raw_read_sps": round(raw),
        "replay_ratio": round(rep / raw, 3),
        "read_path_sps": round(rd), "read_path_ratio": round(rd / raw, 3),
        "pipeline_only_sps": round(pipe),
        "replay_pass": rep >= TARGET_SPS and rep / raw >= TARGET_RATIO,
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
