"""``lobewatch bench``: every figure in one bounded run, as a table or JSON.

Groups run in this order (``--only`` picks some): ``side`` (lobewatch against the
hand-written pipelines, tui/bench/side_by_side.py), ``metrics``, ``naive`` (a footnote:
a pure-Python strawman, no target), ``ingest`` and
``latency`` (one publisher process for both), ``redraw``, ``replay``.  Ingest runs
before the screen and replay so the peak resident size it samples is the monitor's, not
the Textual app's or a session's.  Each figure is ``{"value", "unit", "target",
"pass"}``: ``pass`` is ``None`` for a figure shown for scale (no target).
"""

from __future__ import annotations

import math
import os
import platform
import sys
import tempfile
import time
import traceback
from dataclasses import dataclass
from typing import Any

from tui.bench import side_by_side
from tui.bench.figures import Progress, figure, quiet

GROUPS: tuple[str, ...] = ("side", "metrics", "naive", "ingest", "latency", "redraw",
                           "replay", "curve", "iq", "fleet", "commission", "reliability")

#: The figures each group yields (a failed group reports these with no value).
GROUP_FIGURES: dict[str, tuple[str, ...]] = {
    "side": side_by_side.FIGURES,  # tui/bench/side_by_side.py: against hand-written
    "metrics": ("metrics_360_ms", "metrics_3600_ms"),
    "naive": ("naive_sps", "naive_speedup"),
    "ingest": ("ingest_binary_sps", "ingest_binary_raw_sps", "ingest_json_batch_sps",
               "ingest_json_batch_raw_sps", "ingest_json_msgs", "ingest_json_raw_msgs",
               "ingest_json_decode_msgs", "ingest_json_decode_ratio", "ingest_paced_cpu_pct",
               "ingest_sweeps_cpu_pct", "ingest_sweeps_rss_mb",
               "ingest_paced_lost", "rss_mb", "rss_burst_mb"),
    "latency": ("latency_p50_ms", "latency_p99_ms"),
    "redraw": ("redraw_median_ms", "redraw_p99_ms", "app_cpu_pct"),
    "replay": ("replay_sps", "replay_raw_sps", "replay_read_ratio"),
    "curve": ("ingest_curve_sps", "ingest_curve_ratio"),  # tui/bench/curve.py
    "iq": ("iq_reduce_sps", "iq_channel_sps", "iq_paced_cpu_pct", "iq_join_sps"),  # tui/bench/iq.py
    "fleet": ("fleet_cpu_pct", "fleet_lost", "fleet_rss_mb", "fleet_scrape_ms",
              "fleet_scrape_max_ms", "fleet_collect_ms", "fleet_sps"),  # tui/bench/fleet.py
    "commission": ("commission_fit_ms", "commission_record_s"),  # tui/bench/commission.py
    "reliability": ("reliability_resume_p50_ms", "reliability_resume_max_ms",
                    "reliability_flood_timer_hz", "reliability_flood_gap_ms",
                    "reliability_decode_sps", "reliability_burst_rss_mb",
                    "reliability_burst_gap_ms",
                    "reliability_burst_rss_hwm50_mb"),  # tui/bench/reliability.py
}

# Targets (issue 7, on the project's 2-core machine).
TARGET_BINARY_SPS = 10_000_000.0
TARGET_PACED_CPU_PCT = 25.0
#: 1 M samples/s when every batch is one whole sweep, % of one core (issue target).
TARGET_SWEEPS_CPU_PCT = 50.0
#: Peak resident size in that run, MB (issue target).
TARGET_SWEEPS_RSS_MB = 250.0
TARGET_JSON_MSGS = 150_000.0
TARGET_JSON_RATIO = 0.5
TARGET_LATENCY_P99_MS = 50.0
TARGET_METRICS_MS = 1.0
TARGET_REDRAW_P99_MS = 20.0
TARGET_REPLAY_SPS = 5_000_000.0
TARGET_REPLAY_RATIO = 0.5
TARGET_RSS_MB = 150.0
TARGET_SPEEDUP = 20.0
LATENCY_SPS = 100_000.0


@dataclass(frozen=True)
class Plan:
    """How much of each measurement to do (the full run, or ``--quick``)."""

    metrics_runs: int
    naive_batches: int
    naive_runs: int
    ingest_runs: int
    paced_s: float
    latency_s: float
    redraw_frames: int
    replay_samples: int
    replay_runs: int

    @classmethod
    def for_run(cls, quick: bool) -> Plan:
        if quick:
            return cls(metrics_runs=50, naive_batches=60, naive_runs=3, ingest_runs=1,
                       paced_s=1.0, latency_s=1.0, redraw_frames=40,
                       replay_samples=1_000_000, replay_runs=1)
        return cls(metrics_runs=200, naive_batches=100, naive_runs=5, ingest_runs=3,
                   paced_s=2.0, latency_s=3.0, redraw_frames=200,
                   replay_samples=10_000_000, replay_runs=3)


# -- groups ------------------------------------------------------------------------------------
def _metrics(plan: Plan, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    from tui.bench.metrics import run_metrics
    progress("metrics: measure() on 360 and 3,600 bins")
    rows = run_metrics(plan.metrics_runs, naive=False)
    worst = {n: max(r["measure_ms"] for r in rows if r["points"] == n) for n in (360, 3600)}
    return {
        "metrics_360_ms": figure(worst[360], "ms", TARGET_METRICS_MS, higher_is_better=False,
                                 note="slower of clean and noisy, median"),
        "metrics_3600_ms": figure(worst[3600], "ms", TARGET_METRICS_MS,
                                  higher_is_better=False,
                                  note="slower of clean and noisy, median"),
    }


def _naive(plan: Plan, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    from tui.bench.estimator import naive_speedup, sweep_stream
    progress("naive: per-sample pure-Python estimator against the real one (footnote)")
    batches = sweep_stream(plan.naive_batches * 1000, 1.2e-5)
    r = naive_speedup(batches, plan.naive_runs)
    return {
        "naive_sps": figure(r["naive_sps"], "samples/s", note="naive estimator, wall"),
        "naive_speedup": figure(r["speedup"], "x",
                                note="footnote: real / a pure-Python per-sample loop, a "
                                     "strawman; the side-by-side ratios are the measure"),
    }


def _ingest(plan: Plan, quick: bool, progress: Progress, *, ingest: bool,
            latency: bool) -> dict[str, dict[str, Any]]:
    from tui.bench.ingest import PACED, PACED_SWEEPS, run_ingest
    med = run_ingest(plan.ingest_runs if ingest else 0, plan.paced_s, quick=quick,
                     decode_kinds=("json-single",), sustained_runs=(PACED, PACED_SWEEPS),
                     latency_s=plan.latency_s if latency else 0.0, latency_sps=LATENCY_SPS,
                     progress=progress)
    out: dict[str, dict[str, Any]] = {}
    if ingest:
        b, br = med["binary/pipeline"], med["binary/raw"]
        jb, jbr = med["json-batch/pipeline"], med["json-batch/raw"]
        js, jsr, jsd = (med["json-single/pipeline"], med["json-single/raw"],
                        med["json-single/raw+decode"])
        paced = med[PACED[0]]
        cpu_ok = paced["cpu_pct"] <= TARGET_PACED_CPU_PCT and paced["lost"] == 0
        sweeps = med[PACED_SWEEPS[0]]
        out.update({
            "ingest_binary_sps": figure(b["samples_per_s"], "samples/s", TARGET_BINARY_SPS,
                                        note="binary batches of 1,000, full pipeline"),
            "ingest_binary_raw_sps": figure(br["samples_per_s"], "samples/s",
                                            note="plain pyzmq receive, same frames"),
            "ingest_json_batch_sps": figure(jb["samples_per_s"], "samples/s",
                                            note="JSON batches of 1,000, full pipeline"),
            "ingest_json_batch_raw_sps": figure(jbr["samples_per_s"], "samples/s",
                                                note="plain pyzmq receive, same frames"),
            "ingest_json_msgs": figure(js["msgs_per_s"], "msgs/s", TARGET_JSON_MSGS,
                                       note="JSON singles, full pipeline"),
            "ingest_json_raw_msgs": figure(jsr["msgs_per_s"], "msgs/s",
                                           note="plain pyzmq receive, same frames"),
            "ingest_json_decode_msgs": figure(jsd["msgs_per_s"], "msgs/s",
                                              note="plain receive + json.loads"),
            "ingest_json_decode_ratio": figure(js["msgs_per_s"] / jsd["msgs_per_s"],
                                               "ratio", TARGET_JSON_RATIO,
                                               note="pipeline / receive + json.loads per "
                                                    "message"),
            "ingest_paced_cpu_pct": figure(paced["cpu_pct"], "% core", TARGET_PACED_CPU_PCT,
                                           higher_is_better=False,
                                           note="binary at 1,000,000 samples/s; pass "
                                                "needs nothing lost too"),
            "ingest_sweeps_cpu_pct": figure(sweeps["cpu_pct"], "% core",
                                            TARGET_SWEEPS_CPU_PCT, higher_is_better=False,
                                            note="the same rate, each batch one whole sweep "
                                                 f"(1,000 sweeps/s); lost {sweeps['lost']:,.0f}"),
            "ingest_sweeps_rss_mb": figure(med["rss_sweeps_peak_mb"], "MB",
                                           TARGET_SWEEPS_RSS_MB, higher_is_better=False,
                                           note="peak resident size in that run "
                                                "(scipy.signal loaded)"),
            "ingest_paced_lost": figure(paced["lost"], "msgs", 0.0, higher_is_better=False,
                                        note=f"of {paced['sent']:,.0f} sent"),
            "rss_mb": figure(med["rss_peak_mb"], "MB", TARGET_RSS_MB, higher_is_better=False,
                             note="peak resident size of the monitor process, paced "
                                  "and latency runs"),
            "rss_burst_mb": figure(med["rss_burst_peak_mb"], "MB",
                                   note="the same while a queued burst of up to ~100 MB "
                                        "waits in the socket"),
        })
        out["ingest_paced_cpu_pct"]["pass"] = cpu_ok
    if latency:
        lat = med["latency"]
        note = f"publish -> estimate at {lat['samples_per_s']:,.0f} samples/s"
        out["latency_p50_ms"] = figure(lat["p50_ms"], "ms", note=note)
        out["latency_p99_ms"] = figure(lat["p99_ms"], "ms", TARGET_LATENCY_P99_MS,
                                       higher_is_better=False, note=note)
    return out


def _redraw(plan: Plan, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    from tui.bench.redraw import SIZE, run_redraw
    progress(f"redraw: beam screen at {SIZE[0]}x{SIZE[1]}, {plan.redraw_frames} frames")
    r = _in_fresh_process(run_redraw, plan.redraw_frames)
    note = "full repaint with the GC pass, headless driver, own process, CPU ms"
    from tui.bench.app_cpu import TARGET_APP_CPU_PCT, run_app_cpu
    # Three runs, each in a fresh process, and the median: one run's CPU moves by 10
    # points of a core with what else the machine does (32-44 % in ten runs of an hour).
    window, runs = (2.0, 1) if quick else (5.0, 3)
    apps = []
    for k in range(runs):
        progress(f"redraw: the app at 10 Hz with 1 M samples/s in, {window:g} s, "
                 f"run {k + 1}/{runs}")
        apps.append(_in_fresh_process(run_app_cpu, window, 1.0 if quick else 2.0))
    apps.sort(key=lambda x: x["cpu_pct"])
    a = apps[len(apps) // 2]
    each = ", ".join(f"{x['cpu_pct']:.1f}" for x in apps)
    return {
        "redraw_median_ms": figure(r["median_ms"], "ms", note=note),
        "redraw_p99_ms": figure(r["p99_ms"], "ms", TARGET_REDRAW_P99_MS,
                                higher_is_better=False, note=note),
        "app_cpu_pct": figure(a["cpu_pct"], "% core", TARGET_APP_CPU_PCT,
                              higher_is_better=False,
                              note=f"median of {runs} ({each}); beam screen 120x40 refreshing "
                                   f"at {a['refresh_hz']:.1f} Hz, {a['rate_sps']:,.0f} "
                                   f"samples/s taken in, lost {a['lost']:,.0f}; own "
                                   "process, all threads"),
    }


def _in_fresh_process(fn: Any, *args: Any) -> Any:
    """``fn(*args)`` in a new Python process (its JSON result): a screen runs in its own
    process, and the bench's heap from earlier groups would make every collection pass
    walk objects the app never has."""
    import json
    import subprocess
    import sys
    code = (f"import json, sys; from {fn.__module__} import {fn.__name__} as f; "
            "print(json.dumps(f(*json.loads(sys.argv[1]))))")
    out = subprocess.run([sys.executable, "-c", code, json.dumps(list(args))],
                         capture_output=True, text=True, check=True, timeout=600)
    return json.loads(out.stdout.strip().splitlines()[-1])


def _replay(plan: Plan, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    from tui.bench.replay import generate, run_replay
    with tempfile.TemporaryDirectory(prefix="lobewatch-bench-") as d:
        path = os.path.join(d, "bench.lwsession")
        progress(f"replay: generating a {plan.replay_samples:,}-sample session")
        generate(path, plan.replay_samples)
        r = run_replay(path, plan.replay_runs, parts=False, progress=progress)
    n = f"{plan.replay_samples:,}-sample session"
    return {
        "replay_sps": figure(r["replay_sps"], "samples/s", TARGET_REPLAY_SPS,
                             note=f"headless replay, {n}"),
        "replay_raw_sps": figure(r["raw_read_sps"], "samples/s",
                                 note="sqlite3 + numpy read alone"),
        "replay_read_ratio": figure(r["replay_ratio"], "ratio", TARGET_REPLAY_RATIO,
                                    note="replay / sqlite3 + numpy read alone"),
    }


# -- the run -------------------------------------------------------------------------------------
def run_bench(quick: bool = False, only: tuple[str, ...] | None = None,
              progress: Progress = quiet) -> tuple[dict[str, dict[str, Any]], list[str]]:
    """Run the chosen groups; returns the figures (in a stable order) and the groups that
    failed (their figures are present with no value and an ``error``)."""
    chosen = [g for g in GROUPS if only is None or g in only]
    plan = Plan.for_run(quick)
    figs: dict[str, dict[str, Any]] = {}
    failed: list[str] = []

    def guarded(groups: tuple[str, ...], fn: Any, *args: Any, **kw: Any) -> None:
        try:
            figs.update(fn(plan, quick, progress, *args, **kw))
        except Exception as exc:  # noqa: BLE001 - report, keep the other groups
            traceback.print_exc(file=sys.stderr)
            for g in groups:
                failed.append(g)
                for name in GROUP_FIGURES[g]:
                    figs.setdefault(name, figure(None, "", error=f"{type(exc).__name__}: "
                                                                 f"{exc}"))

    if "side" in chosen:
        guarded(("side",), side_by_side.run_group)
    for g in ("metrics", "naive"):
        if g in chosen:
            guarded((g,), _metrics if g == "metrics" else _naive)
    net = tuple(g for g in ("ingest", "latency") if g in chosen)
    if net:
        guarded(net, _ingest, ingest="ingest" in net, latency="latency" in net)
    if "redraw" in chosen:
        guarded(("redraw",), _redraw)
    if "replay" in chosen:
        guarded(("replay",), _replay)
    if "curve" in chosen:
        from tui.bench.curve import run_group
        guarded(("curve",), run_group)
    if "iq" in chosen:
        from tui.bench.iq import run_group as run_iq
        guarded(("iq",), run_iq)
    if "fleet" in chosen:
        from tui.bench.fleet import run_group as run_fleet
        guarded(("fleet",), run_fleet)
    if "commission" in chosen:
        from tui.bench.commission import run_group as run_commission
        guarded(("commission",), run_commission)
    if "reliability" in chosen:
        from tui.bench.reliability import run_group as run_reliability
        guarded(("reliability",), run_reliability)
    order = [name for g in GROUPS for name in GROUP_FIGURES[g]]
    ordered = {k: figs[k] for k in order if k in figs}
    ordered.update({k: v for k, v in figs.items() if k not in ordered})
    return ordered, failed


def machine() -> dict[str, Any]:
    """What the figures were measured on."""
    import numpy as np
    import zmq
    info: dict[str, Any] = {
        "date": time.strftime("%Y-%m-%d %H:%M UTC", time.gmtime()),
        "cpus": os.cpu_count(), "machine": platform.machine(),
        "system": f"{platform.system()} {platform.release()}",
        "python": platform.python_version(), "numpy": np.__version__,
        "pyzmq": zmq.__version__, "libzmq": zmq.zmq_version(),
    }
    try:
        info["load_average"] = round(os.getloadavg()[0], 2)
    except OSError:
        pass
    return info


# -- output ------------------------------------------------------------------------------------
def _fmt(v: float | None) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    a = abs(v)
    if a >= 1000:
        return f"{v:,.0f}"
    if a >= 100:
        return f"{v:.0f}"
    if a >= 10:
        return f"{v:.1f}"
    return f"{v:.2f}" if a >= 0.1 or a == 0 else f"{v:.3f}"


def _target(f: dict[str, Any]) -> str:
    t = f.get("target")
    if t is None:
        return ""
    return f"{'>=' if f.get('better', 'higher') == 'higher' else '<='} {_fmt(t)}"


def verdict(f: dict[str, Any]) -> str:
    if f.get("error"):
        return "error"
    if f.get("pass") is None:
        return ""
    return "pass" if f["pass"] else "short"


def table(figs: dict[str, dict[str, Any]]) -> str:
    """The figures as a plain-text table (figure, value, unit, target, pass/short)."""
    rows = [("figure", "value", "unit", "target", "result", "")]
    for name, f in figs.items():
        rows.append((name, _fmt(f.get("value")), f.get("unit", ""), _target(f), verdict(f),
                     f.get("error") or f.get("note", "")))
    w = [max(len(r[i]) for r in rows) for i in range(5)]
    out = []
    for k, r in enumerate(rows):
        line = (f"{r[0]:<{w[0]}}  {r[1]:>{w[1]}}  {r[2]:<{w[2]}}  {r[3]:>{w[3]}}  "
                f"{r[4]:<{w[4]}}  {r[5]}")
        out.append(line.rstrip())
        if k == 0:
            out.append("-" * len(line.rstrip()))
    return "\n".join(out)
