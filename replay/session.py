"""Session files (``.lwsession``): one SQLite database per recorded or imported session.

Why SQLite: a committed transaction survives a killed process (WAL journal), the file
is self-describing and readable with nothing but Python's ``sqlite3`` and ``numpy``,
and indexed times make seeking cheap.  The schema is documented for users in
``docs/session-format.md``; this module (reading) and :mod:`replay.session_writer`
(writing) are the only code that knows it.

Rows of ``batches``, ``ticks`` and ``events`` share one id sequence: the order in which
the live pipeline saw them.  Replaying rows in id order feeds the pipeline exactly what
it was fed live, so the replay computes the same numbers.
"""

from __future__ import annotations

import heapq
import json
import os
import sqlite3
import struct
import tempfile
import zlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np

from replay.codec import (
    PLAIN,
    CodecError,
    decode_batch,
    decode_block,
)
from stream.batch import SampleBatch
from stream.beam import METRIC_KEYS, BeamMetrics
from stream.errors import InputFileError
from stream.tick import Event, Reference, SourceStats

#: ``PRAGMA application_id`` of a lobewatch session ("LbWs" in ASCII).
APPLICATION_ID: int = 0x4C625773
#: Session format version, stored as ``PRAGMA user_version`` and in ``meta``.
#: 1: every sample column as float64.  2: compact columns (``batches.enc``), see
#: :mod:`replay.codec`; version 1 files are still read.
FORMAT_VERSION: int = 2
#: File name extension of session files.
SUFFIX: str = ".lwsession"

_SQLITE_MAGIC = b"SQLite format 3\x00"

#: Tables of a version 2 session file (the writer creates them; docs/session-format.md).
SCHEMA = """
CREATE TABLE meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE blocks (
    id INTEGER PRIMARY KEY, id_last INTEGER NOT NULL, nb INTEGER NOT NULL,
    rx_t REAL NOT NULL, rx_t_last REAL NOT NULL, t_first REAL, t_last REAL,
    n INTEGER NOT NULL, epoch TEXT, stream TEXT NOT NULL DEFAULT '',
    calibrated INTEGER NOT NULL, enc TEXT NOT NULL, counts BLOB NOT NULL, rx BLOB NOT NULL,
    seq BLOB, ids BLOB, t BLOB NOT NULL,
    angle_deg BLOB NOT NULL, power_db BLOB NOT NULL, crc INTEGER NOT NULL);
CREATE INDEX blocks_rx_t ON blocks (rx_t);
CREATE TABLE ticks (id INTEGER PRIMARY KEY, t REAL NOT NULL, source TEXT NOT NULL,
    crc INTEGER NOT NULL);
CREATE INDEX ticks_t ON ticks (t);
CREATE TABLE events (id INTEGER PRIMARY KEY, t REAL NOT NULL, kind TEXT NOT NULL,
    data TEXT NOT NULL, crc INTEGER NOT NULL);
CREATE INDEX events_t ON events (t);
CREATE TABLE refs (event_id INTEGER PRIMARY KEY, angle_deg BLOB NOT NULL,
    power_db BLOB NOT NULL, metrics TEXT NOT NULL, crc INTEGER NOT NULL);
"""

#: The version 1 table of batches (one row per batch, float64 columns); read only.
_SCHEMA_V1_BATCHES = """
CREATE TABLE batches (
    id INTEGER PRIMARY KEY, rx_t REAL NOT NULL, t_first REAL, t_last REAL,
    n INTEGER NOT NULL, seq INTEGER, epoch TEXT, stream TEXT NOT NULL DEFAULT '',
    calibrated INTEGER NOT NULL, t BLOB NOT NULL, angle_deg BLOB NOT NULL,
    power_db BLOB NOT NULL, crc INTEGER NOT NULL);
CREATE INDEX batches_rx_t ON batches (rx_t);
"""

_BATCH_COLS = ("id, rx_t, t_first, t_last, n, seq, epoch, stream, calibrated, t, angle_deg, "
               "power_db, crc")
_BLOCK_COLS = ("id, nb, rx_t, n, epoch, stream, calibrated, enc, counts, rx, seq, ids, t, "
               "angle_deg, power_db, crc")

_TABLES = ("meta", "blocks", "ticks", "events", "refs")
_TABLES_V1 = ("meta", "batches", "ticks", "events", "refs")
_HEAD2 = struct.Struct("<dqqq")

_HEAD = struct.Struct("<dqqq")

_FIX_HINT = "use a backup copy of the session, or re-record it"


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, (set, tuple)):
        return list(obj)
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"{type(obj).__name__} is not JSON serialisable")


def dumps(obj: Any) -> str:
    """JSON text as stored in the file (compact, numpy scalars as numbers)."""
    return json.dumps(obj, separators=(",", ":"), default=_json_default)


def f8_blob(a: np.ndarray) -> bytes:
    return np.ascontiguousarray(a, dtype="<f8").tobytes()


def batch_crc(rx_t: float, n: int, seq: int | None, calibrated: bool, epoch: str | None,
              stream: str, t: bytes, a: bytes, p: bytes) -> int:
    """CRC-32 (zlib) over a version 1 batch row's receive time, count, seq, calibrated
    flag, epoch, stream and the three blobs (t_first/t_last are derived, not covered)."""
    c = zlib.crc32(_HEAD.pack(rx_t, n, -1 if seq is None else seq, 1 if calibrated else 0))
    c = zlib.crc32(f"{'' if epoch is None else epoch}\x1f{stream}".encode(), c)
    return zlib.crc32(p, zlib.crc32(a, zlib.crc32(t, c)))


def block_crc(rx_t: float, n: int, k: int, calibrated: bool, epoch: str | None, stream: str,
              enc: str, *blobs: bytes | None) -> int:
    """CRC-32 (zlib) over a block row: first receive time, samples, batches, calibrated
    flag, epoch, stream, encoding and every blob as stored (format version 2)."""
    c = zlib.crc32(_HEAD2.pack(rx_t, n, k, 1 if calibrated else 0))
    c = zlib.crc32(f"{'' if epoch is None else epoch}\x1f{stream}\x1f{enc}".encode(), c)
    for b in blobs:
        c = zlib.crc32(b"\x1e" if b is None else b, c)
    return c


def text_crc(t: float, *texts: str) -> int:
    """CRC-32 over a tick's or event's time (repr) and JSON text."""
    return zlib.crc32("\x1f".join((repr(float(t)), *texts)).encode("utf-8"))


class SessionItem(NamedTuple):
    """One row of a session in recorded order.

    ``kind`` is ``"batch"`` (value: :class:`SampleBatch`), ``"tick"`` (value:
    :class:`SourceStats`) or ``"event"`` (value: :class:`Event`); ``t`` is the batch's
    receive time or the tick's / event's time.
    """

    kind: str
    id: int
    t: float
    value: Any


@dataclass(frozen=True, slots=True)
class TimeSpan:
    """First and last recorded time of a session (Unix seconds)."""

    t_start: float
    t_end: float

    @property
    def duration_s(self) -> float:
        return self.t_end - self.t_start


# ---------------------------------------------------------------------------------------
# reading
# ---------------------------------------------------------------------------------------

def _damaged(path: str, what: str) -> InputFileError:
    return InputFileError(path, f"session file is damaged ({what}); {_FIX_HINT}")


class SessionReader:
    """Read-only access to a session file; never writes to it.

    Opened with SQLite's read-only URI, and never creates a file beside the session.
    A cleanly closed session (no ``-wal`` file beside it) is opened ``immutable``.  A
    session still being recorded, or one whose recorder was killed, has a ``-wal`` file
    holding its newest rows: with its ``-shm`` index present SQLite reads both in place;
    without it (the files were copied, say) the session and its ``-wal`` are read from a
    private temporary copy, removed on :meth:`close`.

    ``rows_read`` counts every row fetched from the data tables (tests use it to show
    that a seek does not read the whole file).
    """

    def __init__(self, path: str | os.PathLike[str]) -> None:
        self.path = os.fspath(path)
        self.rows_read = 0
        self._check_header()
        self._snapshot_dir: str | None = None
        target = self.path
        wal = self.path + "-wal"
        immutable = not os.path.exists(wal)
        if not immutable and not os.path.exists(self.path + "-shm"):
            # The unsaved tail sits in the -wal file, and reading it would make SQLite
            # create a -shm index beside the session: read a private copy instead.
            target = self._private_copy()
        uri = Path(os.path.abspath(target)).as_uri() + "?mode=ro"
        if immutable:
            uri += "&immutable=1"
        try:
            self._con = sqlite3.connect(uri, uri=True, isolation_level=None,
                                        check_same_thread=False)
        except sqlite3.Error as exc:
            self._drop_copy()
            raise InputFileError(self.path, f"cannot open the session ({exc}); check the file "
                                 "and its directory are readable") from None
        try:
            self._validate()
        except BaseException:
            self._con.close()
            self._drop_copy()
            raise

    def _private_copy(self) -> str:
        """Copy the session and its -wal file into a new private temporary folder."""
        import shutil
        d = tempfile.mkdtemp(prefix="lobewatch-read-")
        dst = os.path.join(d, "session" + SUFFIX)
        try:
            shutil.copyfile(self.path, dst)
            shutil.copyfile(self.path + "-wal", dst + "-wal")
        except OSError as exc:
            shutil.rmtree(d, ignore_errors=True)
            raise InputFileError(self.path, f"cannot read the unsaved tail in {self.path}-wal "
                                 f"({exc.strerror}); check free space in the temporary "
                                 "folder") from None
        self._snapshot_dir = d
        return dst

    def _drop_copy(self) -> None:
        d, self._snapshot_dir = self._snapshot_dir, None
        if d is not None:
            import shutil
            shutil.rmtree(d, ignore_errors=True)

    # -- validation --------------------------------------------------------------------
    def _check_header(self) -> None:
        p = self.path
        if not os.path.exists(p):
            raise InputFileError(p, "no such file; check the path")
        if os.path.isdir(p):
            raise InputFileError(p, f"is a directory; give a {SUFFIX} session file")
        try:
            with open(p, "rb") as fh:
                head = fh.read(100)
            size = os.path.getsize(p)
        except OSError as exc:
            raise InputFileError(p, f"cannot read ({exc.strerror}); check permissions") from None
        if len(head) < 100 or head[:16] != _SQLITE_MAGIC:
            if len(head) == 0:
                raise InputFileError(p, "file is empty, not a lobewatch session; "
                                     f"{_FIX_HINT}")
            if len(head) < 100 and _SQLITE_MAGIC.startswith(head[:16]):
                raise _damaged(p, "truncated inside the file header")
            raise InputFileError(p, "not a lobewatch session (not an SQLite database); record "
                                 "one with `lobewatch live --record` or convert a CSV with "
                                 "`lobewatch import`")
        app_id = int.from_bytes(head[68:72], "big")
        if app_id != APPLICATION_ID:
            raise InputFileError(p, "an SQLite database but not a lobewatch session "
                                 f"(application id {app_id:#x}); open a {SUFFIX} file "
                                 "written by lobewatch")
        version = int.from_bytes(head[60:64], "big")
        if version > FORMAT_VERSION:
            raise InputFileError(p, f"session format version {version} is newer than this "
                                 f"lobewatch reads (up to {FORMAT_VERSION}); upgrade lobewatch")
        page_size = int.from_bytes(head[16:18], "big")
        page_size = 65536 if page_size == 1 else page_size
        n_pages = int.from_bytes(head[28:32], "big")
        valid_for = int.from_bytes(head[92:96], "big")
        change = int.from_bytes(head[24:28], "big")
        if page_size < 512 or page_size & (page_size - 1):
            raise _damaged(p, "bad page size in the header")
        if size % page_size:
            raise _damaged(p, f"size {size} bytes is not a whole number of pages; truncated")
        if valid_for == change and n_pages and size < n_pages * page_size:
            raise _damaged(p, f"truncated: {size} bytes of {n_pages * page_size}")

    def _validate(self) -> None:
        p = self.path
        try:
            version = self._con.execute("PRAGMA user_version").fetchone()[0]
            if version > FORMAT_VERSION:
                raise InputFileError(p, f"session format version {version} is newer than "
                                     f"this lobewatch reads (up to {FORMAT_VERSION}); upgrade "
                                     "lobewatch")
            names = {r[0] for r in self._con.execute(
                "SELECT name FROM sqlite_master WHERE type = 'table'")}
            missing = [t for t in (_TABLES_V1 if version < 2 else _TABLES) if t not in names]
            if missing:
                raise InputFileError(p, f"not a complete lobewatch session (no table "
                                     f"{missing[0]!r}); {_FIX_HINT}")
            rows = self._con.execute("SELECT key, value FROM meta").fetchall()
        except sqlite3.OperationalError as exc:
            if os.path.exists(p + "-wal") and ("unable to open" in str(exc)
                                               or "readonly" in str(exc)):
                raise InputFileError(p, f"cannot read the unsaved tail in {p}-wal ({exc}); "
                                     "copy the .lwsession file together with its -wal file into "
                                     "a writable folder and open the copy") from None
            raise _damaged(p, str(exc)) from None
        except sqlite3.DatabaseError as exc:
            raise _damaged(p, str(exc)) from None
        meta: dict[str, Any] = {}
        for key, value in rows:
            try:
                meta[key] = json.loads(value)
            except (TypeError, ValueError):
                raise _damaged(p, f"metadata {key!r} is not valid JSON") from None
        fv = meta.get("format_version")
        if not isinstance(fv, int) or fv < 1:
            raise _damaged(p, "metadata has no valid format_version")
        if fv > FORMAT_VERSION:
            raise InputFileError(p, f"session format version {fv} is newer than this "
                                 f"lobewatch reads (up to {FORMAT_VERSION}); upgrade lobewatch")
        self.meta = meta
        self.format_version = int(version)
        self._v1 = version < 2
        self._btable = "batches" if self._v1 else "blocks"

    # -- queries -----------------------------------------------------------------------
    def _query(self, sql: str, args: tuple = ()) -> list[tuple]:
        try:
            return self._con.execute(sql, args).fetchall()
        except sqlite3.DatabaseError as exc:
            raise _damaged(self.path, str(exc)) from None

    def _one(self, sql: str, args: tuple = ()) -> Any:
        rows = self._query(sql, args)
        return rows[0][0] if rows else None

    def counts(self) -> dict[str, int]:
        """Row counts per data table (and total samples)."""
        return {
            "batches": int(self._one("SELECT count(*) FROM batches" if self._v1 else
                                     "SELECT total(nb) FROM blocks") or 0),
            "samples": int(self._one(f"SELECT total(n) FROM {self._btable}") or 0),
            "ticks": int(self._one("SELECT count(*) FROM ticks") or 0),
            "events": int(self._one("SELECT count(*) FROM events") or 0),
        }

    def event_counts(self) -> dict[str, int]:
        """Number of events per kind."""
        return {str(k): int(c) for k, c in self._query(
            "SELECT kind, count(*) FROM events GROUP BY kind ORDER BY kind")}

    def encodings(self) -> dict[str, int]:
        """Samples per sample-column encoding (``{"f8,f8,f8": n}`` for version 1)."""
        if self._v1:
            return {PLAIN: int(self._one("SELECT total(n) FROM batches") or 0)}
        return {str(e): int(n) for e, n in self._query(
            "SELECT enc, total(n) FROM blocks GROUP BY enc ORDER BY 2 DESC")}

    def all_calibrated(self) -> bool:
        """True when every batch carries calibrated power (dBm)."""
        return bool(self._one(f"SELECT coalesce(min(calibrated), 1) FROM {self._btable}"))

    def time_span(self) -> TimeSpan | None:
        """First and last recorded time (batches, ticks and events), by index."""
        lo: list[float] = []
        hi: list[float] = []
        last = "rx_t" if self._v1 else "rx_t_last"
        for table, col, col2 in ((self._btable, "rx_t", last), ("ticks", "t", "t"),
                                 ("events", "t", "t")):
            a = self._one(f"SELECT min({col}) FROM {table}")
            b = self._one(f"SELECT max({col2}) FROM {table}")
            if a is not None:
                lo.append(float(a))
                hi.append(float(b))
        if not lo:
            return None
        return TimeSpan(min(lo), max(hi))

    def first_sample_t(self) -> float | None:
        """Sample time of the first stored sample (by row order)."""
        v = self._one(f"SELECT t_first FROM {self._btable} WHERE t_first IS NOT NULL "
                      "ORDER BY id LIMIT 1")
        return None if v is None else float(v)

    def tick_span(self) -> float | None:
        """Mean spacing of the recorded readouts, seconds (None with fewer than two)."""
        row = self._query("SELECT count(*), min(t), max(t) FROM ticks")[0]
        if not row[0] or row[0] < 2:
            return None
        return (float(row[2]) - float(row[1])) / (int(row[0]) - 1)

    @property
    def has_ticks(self) -> bool:
        return self._one("SELECT id FROM ticks LIMIT 1") is not None

    def start_id(self, t_from: float) -> int:
        """Id after which to read so that replay starts at ``t_from``: the last tick
        before ``t_from`` (or, for a session without ticks, the batch before it)."""
        row = self._one("SELECT id FROM ticks WHERE t < ? ORDER BY t DESC LIMIT 1", (t_from,))
        if row is None and not self.has_ticks:
            if self._v1:
                row = self._one("SELECT id FROM batches WHERE rx_t < ? ORDER BY rx_t DESC "
                                "LIMIT 1", (t_from,))
            else:
                rows = self._query("SELECT id, rx, ids FROM blocks WHERE rx_t < ? ORDER BY "
                                   "rx_t DESC LIMIT 1", (t_from,))
                if rows:
                    rx = np.frombuffer(rows[0][1], dtype="<f8")
                    j = max(int(np.searchsorted(rx, t_from, side="left")) - 1, 0)
                    off = j if rows[0][2] is None else int(
                        np.frombuffer(rows[0][2], dtype="<i4")[j])
                    row = int(rows[0][0]) + off
        return int(row) if row is not None else 0

    # -- decoding rows -------------------------------------------------------------------
    def _batch(self, row: tuple) -> SampleBatch:
        (i, rx_t, _tf, _tl, n, seq, epoch, stream, cal, tb, ab, pb, crc) = row
        if not isinstance(tb, bytes) or not isinstance(ab, bytes) or not isinstance(pb, bytes):
            raise _damaged(self.path, f"batch {i} has the wrong type")
        if batch_crc(float(rx_t), int(n), seq, bool(cal), epoch, stream or "", tb, ab,
                     pb) != crc:
            raise _damaged(self.path, f"batch {i} fails its checksum")
        try:
            t, a, p = decode_batch(PLAIN, int(n), tb, ab, pb)
        except CodecError as exc:
            raise _damaged(self.path, f"batch {i}: {exc}") from None
        return SampleBatch(t, a, p, rx_t=float(rx_t), seq=seq, epoch=epoch,
                           stream=stream or "", calibrated=bool(cal))

    def _block(self, row: tuple) -> tuple[list[int], list[SampleBatch]]:
        """The row ids and batches of one version 2 block row (checked, decoded, split)."""
        (i, k, rx_t, n, epoch, stream, cal, enc, cb, rb, sb, ib, tb, ab, pb, crc) = row
        blobs = (cb, rb, sb, ib, tb, ab, pb)
        if (not all(isinstance(b, bytes) for b in blobs if b is not None) or cb is None
                or not isinstance(enc, str)):
            raise _damaged(self.path, f"block {i} has the wrong type")
        k = int(k)
        if block_crc(float(rx_t), int(n), k, bool(cal), epoch, stream or "", enc,
                     *blobs) != crc:
            raise _damaged(self.path, f"block {i} fails its checksum")
        if ib is None:
            ids = list(range(int(i), int(i) + k))
        else:
            offs = np.frombuffer(ib, dtype="<i4") if len(ib) % 4 == 0 else np.empty(0)
            if offs.size != k:
                raise _damaged(self.path, f"block {i} has {offs.size} ids for {k} batches")
            ids = (offs.astype(np.int64) + int(i)).tolist()
        try:
            t, a, p, counts, rx, seqs = decode_block(enc, int(n), cb, rb, sb, tb, ab, pb)
        except CodecError as exc:
            raise _damaged(self.path, f"block {i}: {exc}") from None
        if counts.size != k:
            raise _damaged(self.path, f"block {i} has {counts.size} batches, not {k}")
        stream = stream or ""
        cal = bool(cal)
        if k == 1:
            return ids, [SampleBatch(t, a, p, rx_t=float(rx[0]),
                                     seq=None if seqs is None else int(seqs[0]), epoch=epoch,
                                     stream=stream, calibrated=cal)]
        ends = np.cumsum(counts).tolist()
        rxl = rx.tolist()
        sql = [None] * k if seqs is None else seqs.tolist()
        out = []
        lo = 0
        for j in range(k):
            hi = ends[j]
            out.append(SampleBatch(t[lo:hi], a[lo:hi], p[lo:hi], rx_t=rxl[j], seq=sql[j],
                                   epoch=epoch, stream=stream, calibrated=cal))
            lo = hi
        return ids, out

    def _tick(self, row: tuple) -> SourceStats:
        i, t, text, crc = row
        if text_crc(t, text) != crc:
            raise _damaged(self.path, f"tick {i} fails its checksum")
        try:
            return SourceStats.from_dict(json.loads(text))
        except (TypeError, ValueError, AttributeError):
            raise _damaged(self.path, f"tick {i} source counters unreadable") from None

    def _event(self, row: tuple) -> Event:
        i, t, kind, text, crc = row
        if text_crc(t, kind, text) != crc:
            raise _damaged(self.path, f"event {i} fails its checksum")
        try:
            data = json.loads(text)
        except (TypeError, ValueError):
            raise _damaged(self.path, f"event {i} data unreadable") from None
        return Event(float(t), str(kind), data if isinstance(data, dict) else {"value": data})

    def _rows(self, sql: str, args: tuple) -> Iterator[tuple]:
        try:
            cur = self._con.execute(sql, args)
            for row in cur:
                self.rows_read += 1
                yield row
        except sqlite3.DatabaseError as exc:
            raise _damaged(self.path, str(exc)) from None

    def iter_items(self, t_from: float | None = None, *, after_id: int | None = None,
                   kinds: tuple[str, ...] = ("batch", "tick", "event")) -> Iterator[SessionItem]:
        """Rows in recorded order, starting at ``t_from`` (see :meth:`start_id`) or after
        row ``after_id``.  Reads lazily: only rows actually consumed are fetched."""
        start = after_id if after_id is not None else (
            self.start_id(t_from) if t_from is not None else 0)
        streams: list[Iterator[SessionItem]] = []
        if "batch" in kinds:
            streams.append(self._batch_items(start))
        if "tick" in kinds:
            streams.append(SessionItem("tick", r[0], float(r[1]), self._tick(r))
                           for r in self._rows("SELECT * FROM ticks WHERE id > ? ORDER BY id",
                                               (start,)))
        if "event" in kinds:
            streams.append(SessionItem("event", r[0], float(r[1]), self._event(r))
                           for r in self._rows("SELECT * FROM events WHERE id > ? ORDER BY id",
                                               (start,)))
        if len(streams) == 1:
            yield from streams[0]
        else:
            yield from heapq.merge(*streams, key=lambda it: it.id)

    def _batch_items(self, after_id: int) -> Iterator[SessionItem]:
        if self._v1:
            for r in self._rows(f"SELECT {_BATCH_COLS} FROM batches WHERE id > ? ORDER BY id",
                                (after_id,)):
                yield SessionItem("batch", r[0], float(r[1]), self._batch(r))
            return
        for r in self._rows(f"SELECT {_BLOCK_COLS} FROM blocks WHERE id_last > ? ORDER BY id",
                            (after_id,)):
            ids, batches = self._block(r)
            for i, b in zip(ids, batches, strict=True):
                if i > after_id:
                    yield SessionItem("batch", i, b.rx_t, b)

    def iter_batches(self) -> Iterator[SampleBatch]:
        for item in self._batch_items(0):
            yield item.value

    def events(self) -> list[Event]:
        """All events in recorded order."""
        return [self._event(r) for r in self._rows("SELECT * FROM events ORDER BY id", ())]

    def event_rows(self) -> list[tuple[int, Event]]:
        """All events with their row ids, in recorded order."""
        return [(r[0], self._event(r)) for r in self._rows("SELECT * FROM events ORDER BY id",
                                                           ())]

    def state_before(self, before_id: int) -> tuple[Event | None, tuple[Event, Reference] | None,
                                                    bool]:
        """The last target event and the reference in force before row ``before_id``:
        ``(target_event, (reference_event, reference) or None, reference_cleared)``."""
        target = None
        rows = self._query("SELECT * FROM events WHERE id < ? AND kind = 'target' "
                           "ORDER BY id DESC LIMIT 1", (before_id,))
        if rows:
            self.rows_read += 1
            target = self._event(rows[0])
        rows = self._query("SELECT * FROM events WHERE id < ? AND kind IN ('reference', "
                           "'reference_cleared') ORDER BY id DESC LIMIT 1", (before_id,))
        if not rows:
            return target, None, False
        self.rows_read += 1
        ev = self._event(rows[0])
        if ev.kind == "reference_cleared":
            return target, None, True
        ref = self.reference_for(rows[0][0], ev)
        return target, ((ev, ref) if ref is not None else None), False

    def reference_for(self, event_id: int, event: Event) -> Reference | None:
        """The reference trace stored with a ``reference`` event, if any."""
        rows = self._query("SELECT * FROM refs WHERE event_id = ?", (event_id,))
        if not rows:
            return None
        self.rows_read += 1
        _i, ab, pb, mtext, crc = rows[0]
        if zlib.crc32(pb, zlib.crc32(ab)) ^ text_crc(event.t, mtext) != crc or len(ab) != len(pb):
            raise _damaged(self.path, f"reference of event {event_id} fails its checksum")
        md = json.loads(mtext)
        metrics = BeamMetrics(**{k: md.get(k) for k in METRIC_KEYS})
        return Reference(event.t, np.frombuffer(ab, dtype="<f8").copy(),
                         np.frombuffer(pb, dtype="<f8").copy(), metrics)

    def neighbour_event(self, t: float, forward: bool) -> Event | None:
        """The first event strictly after (or before) ``t``, by the time index."""
        if forward:
            rows = self._query("SELECT * FROM events WHERE t > ? ORDER BY t, id LIMIT 1", (t,))
        else:
            rows = self._query("SELECT * FROM events WHERE t < ? ORDER BY t DESC, id DESC "
                               "LIMIT 1", (t,))
        if not rows:
            return None
        self.rows_read += 1
        return self._event(rows[0])

    def close(self) -> None:
        self._con.close()
        self._drop_copy()

    def __enter__(self) -> SessionReader:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def read_all_samples(path: str | os.PathLike[str]) -> SampleBatch:
    """Every sample of a session as one batch (for ``lobewatch report``).

    ``calibrated`` is true only if every batch was calibrated; ``rx_t`` is the last
    receive time.
    """
    with SessionReader(path) as reader:
        ts, angles, powers = [], [], []
        calibrated = True
        rx_t = 0.0
        for b in reader.iter_batches():
            ts.append(b.t)
            angles.append(b.angle_deg)
            powers.append(b.power_db)
            calibrated = calibrated and b.calibrated
            rx_t = b.rx_t
    if not angles:
        empty = np.empty(0, dtype=np.float64)
        return SampleBatch(empty, empty.copy(), empty.copy(), rx_t=0.0)
    return SampleBatch(np.concatenate(ts), np.concatenate(angles), np.concatenate(powers),
                       rx_t=rx_t, calibrated=calibrated)


def is_session_file(path: str | os.PathLike[str]) -> bool:
    """True if the file starts like a lobewatch session (cheap header check only)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(72)
    except OSError:
        return False
    return head[:16] == _SQLITE_MAGIC and int.from_bytes(head[68:72], "big") == APPLICATION_ID

