"""Read one pattern for commissioning: a sweep file, a session, or an earlier record.

* CSV / JSON Lines: every sample as measured (a hand sweep is its own pattern).
* Session (``.lwsession``): every recorded sample is folded into the rolling pattern
  (:class:`stream.estimator.RollingPattern`, averaging over the last ``sweeps_k``
  complete sweeps, in runs of ``CHUNK_SAMPLES``), which also gives the peak
  direction of every sweep (the timeline); the recorded events and the session's
  metadata come along.
* Record (``record.json`` written by ``lobewatch commission --out``): the pattern it
  stored, for ``--reference``.

The SHA-256 of each file is taken here so the record can name exactly what it read.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from replay.readers import SESSION_EXTENSIONS, read_sweep
from stream.batch import SampleBatch
from stream.errors import InputFileError
from stream.estimator import EstimatorConfig, RollingPattern
from stream.tick import Event

#: Sweeps history kept while reading a session (one entry per sweep for the timeline).
SESSION_HISTORY: int = 1_000_000
#: A session's batches are folded in runs of about this many samples (one estimator call
#: per run; a sweep's end time is then known to within one run, about a second at
#: a few thousand samples per second).
CHUNK_SAMPLES: int = 4096
#: A bin of a session pattern is kept however old it is (the session is read whole).
_NEVER_STALE_S: float = 1e12


@dataclass(frozen=True, slots=True)
class PatternInput:
    """One input: its pattern and what else it carried."""

    path: str
    sha256: str
    kind: str                       # "sweep", "session" or "record"
    angle_deg: np.ndarray
    power_db: np.ndarray
    samples: int
    calibrated: bool = True
    timeline_t: np.ndarray = field(default_factory=lambda: np.empty(0))
    timeline_peak_deg: np.ndarray = field(default_factory=lambda: np.empty(0))
    events: list[Event] = field(default_factory=list)
    meta: dict[str, Any] = field(default_factory=dict)


def sha256_file(path: str | os.PathLike[str]) -> str:
    """Hex SHA-256 of a file's bytes (read in 1 MiB blocks)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_pattern(path: str | os.PathLike[str], *, bin_deg: float = 1.0, sweeps_k: int = 10,
                 progress: Callable[[int, int], None] | None = None) -> PatternInput:
    """Read one input (see module docstring).  ``progress(done, total)`` is called
    while a session's samples are read.  Raises ``UserError`` subclasses on bad input."""
    p = Path(path)
    if not p.is_file():
        raise InputFileError(str(p), "no such file; check the path")
    digest = sha256_file(p)
    if p.suffix.lower() == ".json":
        return _read_record(p, digest)
    if p.suffix.lower() in SESSION_EXTENSIONS:
        return _read_session(p, digest, bin_deg, sweeps_k, progress)
    batch = read_sweep(p)
    if len(batch) == 0:
        raise InputFileError(str(p), "no samples; a sweep needs angle and power rows")
    return PatternInput(str(p), digest, "sweep", batch.angle_deg, batch.power_db, len(batch),
                        batch.calibrated)


def _read_session(p: Path, digest: str, bin_deg: float, sweeps_k: int,
                  progress: Callable[[int, int], None] | None) -> PatternInput:
    from replay.session import SessionReader

    config = EstimatorConfig(bin_deg=bin_deg, averaging="sweeps", sweeps_k=sweeps_k,
                             stale_after_s=_NEVER_STALE_S, history=SESSION_HISTORY)
    est = RollingPattern(config)
    with SessionReader(p) as reader:
        total = reader.counts()["samples"]
        meta = dict(reader.meta)
        done = 0
        calibrated = True
        last_t = 0.0
        run: list[SampleBatch] = []
        size = 0
        for b in reader.iter_batches():
            run.append(b)
            size += len(b)
            calibrated = calibrated and b.calibrated
            last_t = b.rx_t
            if size >= CHUNK_SAMPLES:
                est.update(_merge(run), run[-1].rx_t)
                done += size
                run, size = [], 0
                if progress is not None:
                    progress(done, total)
        if run:
            est.update(_merge(run), run[-1].rx_t)
            done += size
        if progress is not None:
            progress(done, total)
        events = reader.events()
    if done == 0:
        raise InputFileError(str(p), "the session holds no samples; record a sweep first")
    snap = est.snapshot(last_t)
    sweeps = est.sweeps
    tl_t = np.array([s.t for s in sweeps], dtype=np.float64)
    tl_p = np.array([np.nan if s.peak_angle_deg is None else s.peak_angle_deg
                     for s in sweeps], dtype=np.float64)
    return PatternInput(str(p), digest, "session", snap.angle_deg, snap.power_db, done,
                        calibrated, tl_t, tl_p, list(events), meta)


def _merge(run: list[SampleBatch]) -> SampleBatch:
    """Consecutive batches as one (stamped with the last receive time)."""
    if len(run) == 1:
        return run[0]
    return SampleBatch(np.concatenate([b.t for b in run]),
                       np.concatenate([b.angle_deg for b in run]),
                       np.concatenate([b.power_db for b in run]), rx_t=run[-1].rx_t,
                       calibrated=all(b.calibrated for b in run))


def _read_record(p: Path, digest: str) -> PatternInput:
    try:
        rec = json.loads(p.read_text(encoding="utf-8"))
        pat = rec["pattern"]
        a = np.asarray(pat["angle_deg"], dtype=np.float64)
        v = np.asarray(pat["power_db"], dtype=np.float64)
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError) as exc:
        raise InputFileError(str(p), f"not a commissioning record ({exc}); give a "
                             "record.json written by 'lobewatch commission --out'") from None
    if a.shape != v.shape or a.size < 3:
        raise InputFileError(str(p), "the record's pattern has fewer than 3 points or "
                             "unequal angle and power lists")
    return PatternInput(str(p), digest, "record", a, v, int(a.size),
                        bool(rec.get("calibrated", True)), meta=dict(rec.get("meta", {})))
