"""Import measured sweeps (CSV / JSON Lines) into session files, export sessions to CSV.

Import keeps every sample exactly (float64).  Samples with a ``t`` column are stored
with ``t`` as both the sample time and the receive time (running maximum, so a few
out-of-order stamps keep the file in time order); a file without ``t`` gets synthetic
times at ``SYNTHETIC_RATE_SPS`` from 0 s, and the session remembers that, so export
leaves the ``t`` column out again.  Export writes each float with ``repr`` (the
shortest text that reads back to the identical float64), so import -> export -> import
is lossless.  Outputs are written to a temporary file and renamed into place: an
interrupted export never leaves half a file, and inputs are only ever read.
"""

from __future__ import annotations

import csv
import datetime
import io
import json
import math
import os
import sys
import tempfile
from dataclasses import dataclass
from typing import Any, TextIO

import numpy as np

from replay.session import SUFFIX, SessionReader
from replay.session_writer import SessionWriter, remove_session, user_file_mode
from stream.batch import SampleBatch
from stream.errors import InputFileError, UserError

#: Sample rate of the synthetic times given to files without a ``t`` column, samples/s.
SYNTHETIC_RATE_SPS: float = 1000.0
#: Imported samples are stored in batches of at most this many samples ...
IMPORT_BATCH_SAMPLES: int = 1000
#: ... and at most this span of time, seconds (so replay sees data arrive steadily).
IMPORT_BATCH_S: float = 0.1


class Progress:
    """A one-line progress bar on stderr, shown only when stderr is a terminal."""

    def __init__(self, total: int, label: str, stream: TextIO | None = None,
                 enabled: bool | None = None) -> None:
        self.stream = stream or sys.stderr
        self.total = max(int(total), 1)
        self.label = label
        self.done = 0
        self._shown = -1
        self.enabled = (self.stream.isatty() if hasattr(self.stream, "isatty") else False) \
            if enabled is None else enabled

    def update(self, n: int) -> None:
        self.done += n
        if not self.enabled:
            return
        pct = min(100, int(100 * self.done / self.total))
        if pct != self._shown:
            self._shown = pct
            bar = "#" * (pct // 4) + "." * (25 - pct // 4)
            self.stream.write(f"\r{self.label} [{bar}] {pct:3d}%")
            self.stream.flush()

    def close(self) -> None:
        if self.enabled and self._shown >= 0:
            self.stream.write("\n")
            self.stream.flush()


@dataclass(frozen=True, slots=True)
class ImportSummary:
    """What an import wrote."""

    path: str
    samples: int
    batches: int
    t_start: float
    t_end: float
    synthetic_t: bool


def _same_file(a: str, b: str) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return os.path.abspath(a) == os.path.abspath(b)


def _has_real_t(batch: SampleBatch) -> bool:
    """Did the reader find a ``t`` column?  Readers say so in ``extra['has_t']``;
    otherwise a missing column shows as every t equal to the receive time."""
    if "has_t" in batch.extra:
        return bool(batch.extra["has_t"])
    t = batch.t
    if t.size == 0 or not np.all(np.isfinite(t)):
        return False
    return not (t.size > 1 and np.all(t == t[0]) and t[0] == batch.rx_t)


def chunk_bounds(rx_t: np.ndarray, max_samples: int = IMPORT_BATCH_SAMPLES,
                 max_span_s: float = IMPORT_BATCH_S) -> np.ndarray:
    """Start indices of the stored batches (plus the end), splitting every
    ``max_samples`` samples and at every ``max_span_s`` boundary of receive time."""
    n = rx_t.size
    if n == 0:
        return np.zeros(1, dtype=np.int64)
    cell = np.floor((rx_t - rx_t[0]) / max_span_s)
    cuts = np.flatnonzero(np.diff(cell)) + 1
    bounds = np.union1d(np.union1d(cuts, np.arange(0, n, max_samples)), [0, n])
    return bounds.astype(np.int64)


def import_file(src: str | os.PathLike[str], dst: str | os.PathLike[str], force: bool = False,
                *, rate_sps: float | None = None, notes: str | None = None,
                progress: bool | None = None) -> ImportSummary:
    """Read a CSV or JSON Lines sweep and write it as a new session file.

    ``rate_sps`` forces synthetic receive times at that rate even when the file has a
    ``t`` column (the ``t`` values are still kept), e.g. for a slow hand-measured sweep
    that should replay in a moment.
    """
    src, dst = os.fspath(src), os.fspath(dst)
    if not os.path.exists(src):
        raise InputFileError(src, "no such file; check the path")
    if os.path.exists(dst) and _same_file(src, dst):
        raise UserError(f"{dst}: output is the input file; choose another -o name")
    if os.path.exists(dst) and not force:
        raise UserError(f"{dst}: file exists; choose another name or add --force to overwrite it")
    if rate_sps is not None and not (math.isfinite(rate_sps) and rate_sps > 0):
        raise UserError(f"--rate must be a positive number of samples/s, got {rate_sps}")
    from replay.readers import read_sweep  # written alongside; imported late on purpose

    batch = read_sweep(src)
    n = len(batch)
    if n == 0:
        raise InputFileError(src, "holds no samples; nothing to import")
    has_t = _has_real_t(batch)
    if has_t and rate_sps is None:
        t = np.ascontiguousarray(batch.t, dtype=np.float64)
        rx = np.maximum.accumulate(t)
    else:
        rate = SYNTHETIC_RATE_SPS if rate_sps is None else float(rate_sps)
        rx = np.arange(n, dtype=np.float64) / rate
        t = np.ascontiguousarray(batch.t, dtype=np.float64) if has_t else rx
    meta: dict[str, Any] = {
        "kind": "import",
        "source_file": os.path.basename(src),
        "source_format": "jsonl" if src.lower().endswith((".jsonl", ".ndjson", ".json"))
        else "csv",
        "synthetic_t": not has_t,
        "synthetic_rx_t": not (has_t and rate_sps is None),
        "synthetic_rate_sps": None if (has_t and rate_sps is None)
        else (SYNTHETIC_RATE_SPS if rate_sps is None else float(rate_sps)),
        "calibrated": bool(batch.calibrated),
        "notes": notes or "",
    }
    bounds = chunk_bounds(rx)
    bar = Progress(n, f"import {os.path.basename(src)}", enabled=progress)
    writer = SessionWriter(dst, meta, force=force, synchronous="NORMAL")
    try:
        for k in range(bounds.size - 1):
            i, j = int(bounds[k]), int(bounds[k + 1])
            writer.write_batch(SampleBatch(t[i:j], batch.angle_deg[i:j], batch.power_db[i:j],
                                           rx_t=float(rx[j - 1]), calibrated=batch.calibrated,
                                           stream=batch.stream))
            if writer.pending_bytes > 32 * 1024 * 1024:
                writer.commit()
            bar.update(j - i)
        writer.close()
    except BaseException:
        try:
            writer.close()
        finally:
            remove_session(dst)
        raise
    finally:
        bar.close()
    return ImportSummary(dst, n, bounds.size - 1, float(rx[0]), float(rx[-1]), not has_t)


#: Output name meaning standard output.
STDOUT = "-"


def utc_iso(t: float) -> str:
    """Unix seconds as ISO 8601 UTC with milliseconds, e.g. ``2026-01-01T00:00:00.250Z``."""
    try:
        d = datetime.datetime.fromtimestamp(float(t), tz=datetime.UTC)
    except (OverflowError, OSError, ValueError):
        return ""
    return d.isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _check_output(session: str, dst: str, force: bool) -> None:
    if dst == STDOUT:
        return
    if os.path.isdir(dst):
        raise UserError(f"{dst}: is a directory; give a file name for -o")
    if os.path.exists(dst):
        if _same_file(session, dst):
            raise UserError(f"{dst}: output is the session file itself; choose another -o name")
        if not force:
            raise UserError(f"{dst}: file exists; choose another name or add --force to "
                            "overwrite it")
    if dst.lower().endswith(SUFFIX):
        raise UserError(f"{dst}: export writes CSV; give an output name ending in .csv")


def _atomic_write(dst: str, write: Any) -> None:
    """Run ``write(fh)`` on a temporary file beside ``dst``, then rename it into place
    with the user's usual permissions; ``-`` writes to standard output instead."""
    if dst == STDOUT:
        write(sys.stdout)
        sys.stdout.flush()
        return
    d = os.path.dirname(os.path.abspath(dst))
    try:
        fd, tmp = tempfile.mkstemp(prefix=".lobewatch-", suffix=".part", dir=d)
        os.fchmod(fd, user_file_mode())  # mkstemp makes 0600
    except OSError as exc:
        raise UserError(f"{dst}: cannot write ({exc.strerror}); check the directory is "
                        "writable") from None
    try:
        with os.fdopen(fd, "w", newline="", encoding="utf-8") as fh:
            write(fh)
        os.replace(tmp, dst)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def export_samples(session: str | os.PathLike[str], dst_csv: str | os.PathLike[str],
                   force: bool = False, *, progress: bool | None = None) -> int:
    """Write every sample of a session as CSV (``angle_deg``, ``power_dbm`` or
    ``power_db``, and ``t`` unless the times were synthetic); returns the count."""
    session, dst = os.fspath(session), os.fspath(dst_csv)
    _check_output(session, dst, force)
    with SessionReader(session) as reader:
        counts = reader.counts()
        calibrated = reader.all_calibrated()
        with_t = not bool(reader.meta.get("synthetic_t", False))
        power = "power_dbm" if calibrated else "power_db"
        bar = Progress(counts["samples"], f"export {os.path.basename(session)}",
                       enabled=False if dst == STDOUT else progress)
        written = 0

        def write(fh: io.TextIOBase) -> None:
            nonlocal written
            fh.write(f"angle_deg,{power},t\n" if with_t else f"angle_deg,{power}\n")
            for b in reader.iter_batches():
                a, p = b.angle_deg.tolist(), b.power_db.tolist()
                if with_t:
                    rows = [f"{x!r},{y!r},{z!r}\n" for x, y, z in zip(a, p, b.t.tolist(),
                                                                      strict=True)]
                else:
                    rows = [f"{x!r},{y!r}\n" for x, y in zip(a, p, strict=True)]
                fh.write("".join(rows))
                written += len(a)
                bar.update(len(a))

        try:
            _atomic_write(dst, write)
        finally:
            bar.close()
    return written


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, (dict, list)):
        return json.dumps(v, separators=(",", ":"))
    return str(v)


def export_events(session: str | os.PathLike[str], dst_csv: str | os.PathLike[str],
                  force: bool = False) -> int:
    """Write a session's events as CSV: ``t``, ``kind``, then one column per data key
    (in order of first appearance; nested values as JSON).  Returns the count."""
    session, dst = os.fspath(session), os.fspath(dst_csv)
    _check_output(session, dst, force)
    with SessionReader(session) as reader:
        events = reader.events()
    keys: dict[str, None] = {}
    for ev in events:
        for k in ev.data:
            if k not in ("t", "time_utc", "kind"):
                keys.setdefault(k, None)
    cols = list(keys)

    def write(fh: io.TextIOBase) -> None:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["t", "time_utc", "kind", *cols])
        for ev in events:
            w.writerow([repr(float(ev.t)), utc_iso(ev.t), ev.kind,
                        *(_cell(ev.data.get(k)) for k in cols)])

    _atomic_write(dst, write)
    return len(events)
