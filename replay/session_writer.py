"""Writing session files (``.lwsession``): where they go, and the writer that commits
what the pipeline saw so a killed process loses at most the last fraction of a second.
The schema, the checksums and the reader are in :mod:`replay.session`.
"""

from __future__ import annotations

import os
import sqlite3
import tempfile
import time
import zlib
from pathlib import Path
from typing import Any

import numpy as np

from replay.codec import BLOCK_MAX_BATCHES, BLOCK_MAX_SAMPLES, encode_block
from replay.session import (
    APPLICATION_ID,
    FORMAT_VERSION,
    SCHEMA,
    SUFFIX,
    block_crc,
    dumps,
    f8_blob,
    text_crc,
)
from stream.batch import SampleBatch
from stream.errors import UserError
from stream.tick import Event, Reference, SourceStats


def _unlink_quietly(path: str) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass


def default_sessions_dir() -> Path:
    """Where recordings go when no file name is given: the platform's user data folder
    (``$XDG_DATA_HOME/lobewatch/sessions``, by default ``~/.local/share/lobewatch/
    sessions`` on Linux; platformdirs knows the macOS and Windows places)."""
    import platformdirs
    return Path(platformdirs.user_data_dir("lobewatch", appauthor=False)) / "sessions"


def new_session_path(directory: str | os.PathLike[str] | None = None, stem: str = "lobewatch",
                     t: float | None = None) -> Path:
    """A new, unused ``DIR/STEM-YYYYmmdd-HHMMSS.lwsession`` (local time; ``-2``, ``-3``
    ... appended when taken).  The folder is created; ``None`` means
    :func:`default_sessions_dir`."""
    d = Path(directory) if directory is not None else default_sessions_dir()
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"{d}: cannot create the sessions folder ({exc.strerror}); give "
                        "--record-dir DIR or --record FILE in a writable place") from None
    base = f"{stem}-{time.strftime('%Y%m%d-%H%M%S', time.localtime(t))}"
    path = d / f"{base}{SUFFIX}"
    k = 2
    while path.exists():
        path = d / f"{base}-{k}{SUFFIX}"
        k += 1
    return path


def user_file_mode() -> int:
    """The mode a new file gets from the user's umask (0o666 & ~umask): sessions and
    exported files are ordinary documents, not secrets."""
    mask = os.umask(0o022)
    os.umask(mask)
    return 0o666 & ~mask


def remove_session(path: str | os.PathLike[str]) -> None:
    """Delete a session file and its SQLite side files (``-wal``, ``-shm``)."""
    for suffix in ("", "-wal", "-shm", "-journal"):
        try:
            os.unlink(f"{os.fspath(path)}{suffix}")
        except FileNotFoundError:
            pass


class SessionWriter:
    """Creates a new session file and appends rows to it.

    Rows are buffered and written with ``executemany`` on :meth:`commit`; nothing is
    durable before a commit.  Refuses to overwrite an existing file unless ``force``.
    Use from one thread only (the recorder gives it its own thread).  ``compact`` stores
    sample columns in the smallest exact encoding, ``compress`` also zlib-compresses them
    (see :mod:`replay.codec`).
    """

    def __init__(self, path: str | os.PathLike[str], metadata: dict[str, Any] | None = None,
                 force: bool = False, *, synchronous: str = "FULL",
                 check_same_thread: bool = True, compact: bool = True,
                 compress: bool = True) -> None:
        self.path = os.fspath(path)
        self.compact = compact
        self.compress = compress
        if os.path.isdir(self.path):
            raise UserError(f"{self.path}: is a directory; give a file name ending in {SUFFIX}")
        if os.path.exists(self.path) and not force:
            raise UserError(f"{self.path}: file exists; choose another name or add --force "
                            "to overwrite it")
        meta = {"format_version": FORMAT_VERSION, "created_t": time.time()}
        meta.update(metadata or {})
        tmp = self._create_complete_file(meta, force)
        try:
            con = sqlite3.connect(self.path, isolation_level=None,
                                  check_same_thread=check_same_thread)
            mode = con.execute("PRAGMA journal_mode = WAL").fetchone()[0]
            if str(mode).lower() != "wal":
                raise sqlite3.OperationalError(f"journal mode {mode}")
            con.execute(f"PRAGMA synchronous = {synchronous}")
        except sqlite3.Error as exc:
            raise UserError(f"{self.path}: cannot open the new session file ({exc}); "
                            "check free space and permissions") from None
        finally:
            _unlink_quietly(tmp)
        self._con: sqlite3.Connection | None = con
        self.meta = meta
        self._next_id = 1
        self._batches: list[tuple] = []  # block rows ready to insert
        self._blk: list[SampleBatch] = []  # batches of the block being filled
        self._blk_id = 0
        self._blk_ids: list[int] = []
        self._blk_samples = 0
        self._ticks: list[tuple] = []
        self._events: list[tuple] = []
        self._refs: list[tuple] = []
        self._meta_updates: list[tuple[str, str]] = []
        self.pending_bytes = 0
        self.samples_written = 0
        self.rows_written = 0

    def _create_complete_file(self, meta: dict[str, Any], force: bool) -> str:
        """Build the schema in a temporary file, then link it to the final name: the
        session file never exists half-initialised, and an existing file is never
        replaced unless ``force``.  Returns the temporary name (to unlink)."""
        d = os.path.dirname(os.path.abspath(self.path))
        try:
            fd, tmp = tempfile.mkstemp(prefix=".lobewatch-new-", suffix=SUFFIX, dir=d)
            os.close(fd)
            os.chmod(tmp, user_file_mode())  # mkstemp makes 0600; a session is a document
        except OSError as exc:
            raise UserError(f"{self.path}: cannot create the session file ({exc.strerror}); "
                            "check the directory exists and is writable") from None
        try:
            con = sqlite3.connect(tmp, isolation_level=None)
            try:
                con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
                con.execute(f"PRAGMA user_version = {FORMAT_VERSION}")
                con.execute("BEGIN")
                for stmt in SCHEMA.split(";"):
                    if stmt.strip():
                        con.execute(stmt)
                con.executemany("INSERT INTO meta (key, value) VALUES (?, ?)",
                                [(str(k), dumps(v)) for k, v in meta.items()])
                con.execute("COMMIT")
                con.execute("PRAGMA journal_mode = WAL")  # persistent, stored in the header
            finally:
                con.close()
            with open(tmp, "rb+") as fh:
                os.fsync(fh.fileno())
        except (sqlite3.Error, OSError) as exc:
            remove_session(tmp)
            raise UserError(f"{self.path}: cannot initialise the session file ({exc}); "
                            "check free space and permissions") from None
        try:
            if force:
                os.replace(tmp, self.path)
            else:
                try:
                    os.link(tmp, self.path)  # fails if the name exists: no overwrite race
                except FileExistsError:
                    raise
                except OSError:  # file systems without hard links
                    if os.path.exists(self.path):
                        raise FileExistsError(self.path) from None
                    os.rename(tmp, self.path)
        except FileExistsError:
            remove_session(tmp)
            raise UserError(f"{self.path}: file appeared while creating it; choose another "
                            "name") from None
        except OSError as exc:
            remove_session(tmp)
            raise UserError(f"{self.path}: cannot create the session file ({exc.strerror}); "
                            "check the directory is writable") from None
        for suffix in ("-wal", "-shm", "-journal"):  # the replaced file's, or left over
            _unlink_quietly(self.path + suffix)
        try:  # make the new directory entry durable too
            dfd = os.open(d, os.O_RDONLY)
            try:
                os.fsync(dfd)
            finally:
                os.close(dfd)
        except OSError:
            pass
        return tmp

    # -- rows --------------------------------------------------------------------------
    def _take_id(self) -> int:
        i = self._next_id
        self._next_id += 1
        return i

    def write_batch(self, batch: SampleBatch) -> int:
        """Queue one batch; returns its row id.  Batches of one stream are stored
        together as one block row, with their ids (ticks and events between them keep
        theirs), closed by a commit, a change of stream, epoch or calibration, or its
        size."""
        n = len(batch)
        blk = self._blk
        if blk and (blk[0].stream != batch.stream or blk[0].epoch != batch.epoch
                    or blk[0].calibrated != batch.calibrated
                    or (blk[0].seq is None) != (batch.seq is None)
                    or self._blk_samples + n > BLOCK_MAX_SAMPLES
                    or len(blk) >= BLOCK_MAX_BATCHES):
            self._close_block()
        i = self._take_id()
        if not self._blk:
            self._blk_id = i
        self._blk.append(batch)
        self._blk_ids.append(i)
        self._blk_samples += n
        self.pending_bytes += 24 * n + 16
        self.samples_written += n
        return i

    def _close_block(self) -> None:
        blk = self._blk
        if not blk:
            return
        first = blk[0]
        enc, cb, rb, sb, tb, ab, pb = encode_block(
            [b.t for b in blk], [b.angle_deg for b in blk], [b.power_db for b in blk],
            [float(b.rx_t) for b in blk],
            None if first.seq is None else [int(b.seq) for b in blk],  # type: ignore[arg-type]
            self.compact, self.compress)
        n = self._blk_samples
        ne = [b for b in blk if len(b)]
        t_first = float(ne[0].t[0]) if ne else None
        t_last = float(ne[-1].t[-1]) if ne else None
        rx0, rx1 = float(first.rx_t), float(blk[-1].rx_t)
        stream = first.stream or ""
        cal = bool(first.calibrated)
        last_id = self._blk_ids[-1]
        ib = None  # ids are consecutive: no blob
        if last_id - self._blk_id + 1 != len(blk):
            ib = np.asarray(self._blk_ids, dtype=np.int64) - self._blk_id
            ib = ib.astype("<i4").tobytes()
        crc = block_crc(rx0, n, len(blk), cal, first.epoch, stream, enc, cb, rb, sb, ib, tb,
                        ab, pb)
        self._batches.append((self._blk_id, last_id, len(blk), rx0, rx1, t_first, t_last, n,
                              first.epoch, stream, 1 if cal else 0, enc, cb, rb, sb, ib, tb,
                              ab, pb, crc))
        self.pending_bytes += len(tb) + len(ab) + len(pb) + len(cb) + len(rb) + 64 - (
            24 * n + 16 * len(blk))
        self._blk = []
        self._blk_ids = []
        self._blk_samples = 0

    def write_tick(self, t: float, source: SourceStats | dict[str, Any] | None) -> int:
        """Queue one tick time with the source counters at that tick."""
        d = source.to_dict() if isinstance(source, SourceStats) else dict(source or {})
        text = dumps(d)
        i = self._take_id()
        self._ticks.append((i, float(t), text, text_crc(t, text)))
        self.pending_bytes += len(text) + 32
        return i

    def write_event(self, event: Event, reference: Reference | None = None) -> int:
        """Queue one event; a ``reference`` event may carry the captured trace."""
        text = dumps(event.data)
        i = self._take_id()
        self._events.append((i, float(event.t), event.kind, text,
                             text_crc(event.t, event.kind, text)))
        self.pending_bytes += len(text) + 32
        if reference is not None:
            ab, pb = f8_blob(reference.angle_deg), f8_blob(reference.power_db)
            mtext = dumps(reference.metrics.to_dict())
            self._refs.append((i, ab, pb, mtext, zlib.crc32(pb, zlib.crc32(ab)) ^ text_crc(
                event.t, mtext)))
            self.pending_bytes += len(ab) + len(pb)
        return i

    def set_meta(self, key: str, value: Any) -> None:
        """Write (or replace) one metadata value; durable at the next commit."""
        self.meta[key] = value
        self._meta_updates.append((key, dumps(value)))

    @property
    def has_pending(self) -> bool:
        return bool(self._blk or self._batches or self._ticks or self._events or self._refs
                    or self._meta_updates)

    def _require(self) -> sqlite3.Connection:
        if self._con is None:
            raise UserError(f"{self.path}: session already closed")
        return self._con

    def commit(self) -> None:
        """Write all queued rows in one transaction (durable when this returns)."""
        con = self._require()
        if not self.has_pending:
            return
        self._close_block()
        try:
            con.execute("BEGIN")
            if self._batches:
                con.executemany("INSERT INTO blocks VALUES (" + ",".join("?" * 20) + ")",
                                self._batches)
            if self._ticks:
                con.executemany("INSERT INTO ticks VALUES (?,?,?,?)", self._ticks)
            if self._events:
                con.executemany("INSERT INTO events VALUES (?,?,?,?,?)", self._events)
            if self._refs:
                con.executemany("INSERT INTO refs VALUES (?,?,?,?,?)", self._refs)
            if self._meta_updates:
                con.executemany("INSERT OR REPLACE INTO meta (key, value) VALUES (?, ?)",
                                self._meta_updates)
                self._meta_updates.clear()
            con.execute("COMMIT")
        except sqlite3.Error as exc:
            try:
                con.execute("ROLLBACK")
            except sqlite3.Error:
                pass
            raise UserError(f"{self.path}: writing the session failed ({exc}); check free "
                            "disk space") from None
        self.rows_written += (sum(r[2] for r in self._batches) + len(self._ticks)
                              + len(self._events))
        self._batches.clear()
        self._ticks.clear()
        self._events.clear()
        self._refs.clear()
        self.pending_bytes = 0

    def close(self) -> None:
        """Commit what is queued, fold the WAL into the main file and close."""
        if self._con is None:
            return
        try:
            self.commit()
        finally:
            con, self._con = self._con, None
            try:
                con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
            except sqlite3.Error:
                pass
            con.close()

    def __enter__(self) -> SessionWriter:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
