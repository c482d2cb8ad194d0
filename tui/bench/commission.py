"""``lobewatch bench`` group ``commission``: model fit + column diagnosis, and a record.

* ``commission_fit_ms``: fit and diagnosis of a 3,600-point pattern (0.1-deg steps over
  +/-180 deg) of an invented 8-column array with 0.5 dB noise (target 200 ms).
* ``commission_record_s``: ``lobewatch commission`` of an invented one-hour session
  (read with a progress callback, fitted, diagnosed, judged, record written with its
  plots; target 10 s).

Medians of several runs; the process CPU time is given beside each (``cpu_ms``,
``cpu_s``), which stays meaningful on a machine busy with other work.  The session is
generated once into a temporary folder by :func:`make_session`, which the tests use too.
"""

from __future__ import annotations

import os
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

from tui.bench.figures import Progress, figure, median

TARGET_FIT_MS: float = 200.0
TARGET_RECORD_S: float = 10.0
#: Invented session: samples per second, sweep span and sweep time.
SESSION_RATE_SPS: float = 1000.0
SESSION_SPAN_DEG: float = 60.0
SESSION_SWEEP_S: float = 6.0
BATCH_SAMPLES: int = 100
#: An invented alarm event is recorded this often, seconds of session time.
EVENT_EVERY_S: float = 60.0


def make_session(path: str | os.PathLike[str], duration_s: float = 3600.0,
                 rate_sps: float = SESSION_RATE_SPS, n_elements: int = 4,
                 dead_column: int | None = None, seed: int = 1) -> Path:
    """Write an invented session: a mount sweeping +/-60 deg back and forth across an
    ``n_elements`` array (cos^1.2 elements, half-wave spacing, 0.3 dB noise, floor
    -62 dBm), a tick every second, and a few invented alarm events."""
    from replay.session_writer import SessionWriter
    from stream.array_model import ArrayModel
    from stream.batch import SampleBatch
    from stream.tick import Event, SourceStats

    amps = np.ones(n_elements)
    if dead_column is not None:
        amps[dead_column - 1] = 0.0
    model = ArrayModel(n_elements, 0.5, 1.2, 0.0)
    grid = np.arange(-90.0, 90.0 + 1e-9, 0.05)
    theta = np.deg2rad(grid)
    af = np.exp(1j * np.pi * np.outer(np.sin(theta), np.arange(n_elements))) @ amps
    lin = np.cos(theta) ** 1.2 * np.abs(af) ** 2 / n_elements ** 2
    table_db = 10 * np.log10(lin * 10 ** (-27.0 / 10) + 10 ** (-62.0 / 10))
    rng = np.random.default_rng(seed)
    t0 = 1_700_000_000.0
    n_total = int(duration_s * rate_sps)
    meta = {"notes": "invented benchmark/test session", "site": "Invented Hill",
            "array": f"invented {n_elements}-column panel", "model": model.to_dict()}
    with SessionWriter(path, meta, force=True, synchronous="OFF") as w:
        next_tick = t0 + 1.0
        every = max(BATCH_SAMPLES, int(EVENT_EVERY_S * rate_sps) // BATCH_SAMPLES * BATCH_SAMPLES)
        for i0 in range(0, n_total, BATCH_SAMPLES):
            i = np.arange(i0, min(i0 + BATCH_SAMPLES, n_total))
            t = t0 + i / rate_sps
            phase = (t - t0) / SESSION_SWEEP_S
            tri = 2.0 * np.abs(phase - np.floor(phase + 0.5))          # 0..1 triangle
            angle = -SESSION_SPAN_DEG + 2.0 * SESSION_SPAN_DEG * tri
            # the beam 0.4 deg off the mount's zero
            power = np.interp(angle - 0.4, grid, table_db) + rng.normal(0.0, 0.3, i.size)
            rx = float(t[-1])
            w.write_batch(SampleBatch(t, angle, power, rx_t=rx))
            if rx >= next_tick:
                w.write_tick(rx, SourceStats(state="receiving", messages=i0 // BATCH_SAMPLES))
                next_tick += 1.0
            if i0 and i0 % every == 0:
                w.write_event(Event(rx, "alarm", {"rule": "invented_drift",
                                                  "severity": "warning",
                                                  "text": "invented test alarm"}))
                w.commit()
    return Path(path)


def time_fit(runs: int = 5) -> tuple[float, float]:
    """Median ms (wall, process CPU) of fit + diagnosis of a 3,600-point N = 8 pattern."""
    from stream.array_model import ArrayModel
    from stream.diagnosis import diagnose
    from stream.fit import fit_model

    a = np.arange(-180.0, 180.0, 0.1)
    th = np.deg2rad(a)
    af = np.exp(1j * np.pi * np.outer(np.sin(th) - np.sin(np.deg2rad(7.0)), np.arange(8)))
    lin = np.where(np.cos(th) > 0, np.cos(th), 0.0) ** 1.2 * np.abs(af.sum(axis=1)) ** 2
    p = 10 * np.log10(lin + 64e-5) + np.random.default_rng(5).normal(0, 0.5, a.size)
    model = ArrayModel(8)
    times, cpu = [], []
    for _ in range(runs):
        t = time.perf_counter()
        c = time.process_time()
        fit = fit_model(a, p, model)
        diagnose(a, p, model, fit)
        times.append(1e3 * (time.perf_counter() - t))
        cpu.append(1e3 * (time.process_time() - c))
    return median(times), median(cpu)


def time_record(session: Path, out: Path, runs: int = 3) -> tuple[float, float]:
    """Median seconds (wall, process CPU) of ``lobewatch commission SESSION --out``
    (in process)."""
    from tui.cli import main

    times, cpu = [], []
    for i in range(runs):
        t = time.perf_counter()
        c = time.process_time()
        rc = main(["commission", str(session), "--elements", "4", "--target-deg", "0",
                   "--tolerance-deg", "2", "--out", str(out / f"run{i}"), "--json"])
        times.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
        if rc not in (0, 3):
            raise RuntimeError(f"commission exited {rc}")
    return median(times), median(cpu)


def run_group(plan: Any, quick: bool, progress: Progress) -> dict[str, dict[str, Any]]:
    """The ``commission`` group's figures for ``lobewatch bench``."""
    import contextlib
    import io

    fit_ms, fit_cpu_ms = time_fit(3 if quick else 7)
    progress(f"commission: fit + diagnosis {fit_ms:.0f} ms ({fit_cpu_ms:.0f} ms CPU)")
    duration = 600.0 if quick else 3600.0
    with tempfile.TemporaryDirectory(prefix="lw-commission-") as tmp:
        session = make_session(Path(tmp) / "invented.lwsession", duration)
        with contextlib.redirect_stdout(io.StringIO()):
            rec_s, rec_cpu_s = time_record(session, Path(tmp), 1 if quick else 3)
    progress(f"commission: record of {duration / 60:.0f} min session {rec_s:.1f} s "
             f"({rec_cpu_s:.1f} s CPU)")
    return {
        "commission_fit_ms": figure(fit_ms, "ms", TARGET_FIT_MS, higher_is_better=False,
                                    cpu_ms=fit_cpu_ms,
                                    note=f"fit + diagnosis, 3,600 points, N = 8; "
                                         f"{fit_cpu_ms:.0f} ms CPU"),
        "commission_record_s": figure(rec_s, "s", TARGET_RECORD_S, higher_is_better=False,
                                      cpu_s=rec_cpu_s,
                                      note=f"record of an invented {duration / 60:.0f}-min "
                                           f"session at {SESSION_RATE_SPS:,.0f} samples/s; "
                                           f"{rec_cpu_s:.1f} s CPU"),
    }
