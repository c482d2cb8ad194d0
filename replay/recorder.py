"""Record what a :class:`~stream.monitor.Monitor` sees into a session file.

The recorder hangs on the monitor's sinks (batches, ticks with the source counters,
events) and hands rows to a writer thread, so the event loop never waits for the
disk: SQLite releases the GIL while it writes, which lets recording run on the
second core.  The writer commits whenever the recorded time has moved on by
``commit_interval_s`` (0.2 s) since the last commit, as a fallback after the same span
of wall time, and whenever ``max_pending_bytes`` (4 MB) are waiting, whichever comes
first -- so a process killed in the very first second of a recording still leaves a
session with what it took in, and a kill loses at most about half a second.
"""

from __future__ import annotations

import os
import queue
import threading
import time
from typing import Any

from replay.session_writer import SessionWriter
from stream.batch import SampleBatch
from stream.errors import UserError
from stream.tick import Event, Reference, Tick

_STOP = object()


class Recorder:
    """Writes batches, ticks and events of a monitor into a new ``.lwsession`` file.

    ``threaded=False`` writes from the sink calls themselves (deterministic, for tests
    and for tools that record without an event loop).  Sink calls never raise: a
    failure (disk full) stops the recording, is kept in :attr:`error`, and is raised
    as a :class:`UserError` by :meth:`close`.
    """

    def __init__(self, path: str | os.PathLike[str], metadata: dict[str, Any] | None = None,
                 force: bool = False, commit_interval_s: float = 0.2, *,
                 threaded: bool = True, max_queue: int = 2048,
                 max_pending_bytes: int = 4 * 1024 * 1024) -> None:
        self.path = os.fspath(path)
        self.commit_interval_s = float(commit_interval_s)
        self.max_pending_bytes = int(max_pending_bytes)
        self._writer = SessionWriter(self.path, dict(metadata or {}), force=force,
                                     check_same_thread=not threaded)
        self.error: str | None = None
        self.samples = 0
        self.commits = 0
        self.last_commit_t: float | None = None  # recorded time of the newest committed row
        self._last_item_t: float | None = None
        self._last_commit_wall = time.monotonic()
        self._monitor: Any = None
        self._closed = False
        self._queue: queue.Queue[Any] | None = None
        self._thread: threading.Thread | None = None
        if threaded:
            self._queue = queue.Queue(maxsize=max_queue)
            self._thread = threading.Thread(target=self._run, name="lobewatch-recorder",
                                            daemon=True)
            self._thread.start()

    # -- state for the UI ----------------------------------------------------------------
    @property
    def recording(self) -> bool:
        return not self._closed and self.error is None

    @property
    def size_bytes(self) -> int:
        """Bytes on disk (session file plus its write-ahead log)."""
        total = 0
        for suffix in ("", "-wal"):
            try:
                total += os.path.getsize(self.path + suffix)
            except OSError:
                pass
        return total

    # -- wiring ----------------------------------------------------------------------------
    def attach(self, monitor: Any) -> Recorder:
        """Subscribe to a monitor's batch, tick and event sinks."""
        self._monitor = monitor
        monitor.batch_sinks.append(self.on_batch)
        monitor.tick_sinks.append(self.on_tick)
        monitor.event_sinks.append(self.on_event)
        return self

    def detach(self) -> None:
        m, self._monitor = self._monitor, None
        if m is None:
            return
        for sinks, fn in ((m.batch_sinks, self.on_batch), (m.tick_sinks, self.on_tick),
                          (m.event_sinks, self.on_event)):
            while fn in sinks:
                sinks.remove(fn)

    # -- sinks -----------------------------------------------------------------------------
    def on_batch(self, batch: SampleBatch) -> None:
        if self.recording:
            self.samples += len(batch)
            self._put(("b", batch.rx_t, batch))

    def on_tick(self, tick: Tick) -> None:
        if self.recording:
            self._put(("t", tick.t, tick.source))

    def on_event(self, event: Event) -> None:
        if not self.recording:
            return
        ref: Reference | None = None
        if event.kind == "reference" and self._monitor is not None:
            cand = getattr(self._monitor, "reference", None)
            if cand is not None and cand.t == event.t:
                ref = cand
        self._put(("e", event.t, (event, ref)))

    def _put(self, item: tuple) -> None:
        if self._queue is None:
            self._handle(item)
        else:
            self._queue.put(item)

    # -- writing ---------------------------------------------------------------------------
    def _handle(self, item: tuple) -> None:
        if self.error is not None:
            return
        kind, t, value = item
        w = self._writer
        try:
            if kind == "b":
                w.write_batch(value)
            elif kind == "t":
                w.write_tick(t, value)
            else:
                w.write_event(value[0], value[1])
            if self._last_item_t is None or t > self._last_item_t:
                self._last_item_t = t
            if self.last_commit_t is None:
                self.last_commit_t = t
            if ((self.commits == 0 and kind == "b")  # the first samples at once
                    or t - self.last_commit_t >= self.commit_interval_s
                    or w.pending_bytes >= self.max_pending_bytes):
                self._commit()
        except UserError as exc:
            self.error = str(exc)

    def _commit(self) -> None:
        self._writer.commit()
        self.commits += 1
        self.last_commit_t = self._last_item_t
        self._last_commit_wall = time.monotonic()

    def _run(self) -> None:
        assert self._queue is not None
        q = self._queue
        while True:
            try:
                item = q.get(timeout=self.commit_interval_s / 2)
            except queue.Empty:
                item = None
            if item is _STOP:
                break
            if item is not None and item[0] == "f":
                if self.error is None and self._writer.has_pending:
                    try:
                        self._commit()
                    except UserError as exc:
                        self.error = str(exc)
                item[2].set()
                continue
            if item is not None:
                self._handle(item)
            if (self.error is None and self._writer.has_pending
                    and time.monotonic() - self._last_commit_wall >= self.commit_interval_s):
                try:
                    self._commit()
                except UserError as exc:
                    self.error = str(exc)
        self._finish()

    def _finish(self) -> None:
        try:
            if self.error is None:
                self._writer.close()
                self.commits += 1
        except UserError as exc:
            self.error = str(exc)
        finally:
            try:
                self._writer.close()
            except UserError:
                pass

    def flush(self, timeout_s: float = 10.0) -> None:
        """Wait until everything handed over so far is committed (tests, UI 'save')."""
        if self._queue is None:
            if self.error is None:
                try:
                    self._commit()
                except UserError as exc:
                    self.error = str(exc)
            return
        done = threading.Event()
        self._queue.put(("f", None, done))
        done.wait(timeout_s)

    def close(self) -> None:
        """Commit what is left and close the file; raise :class:`UserError` if the
        recording failed at any point."""
        if not self._closed:
            self.detach()
            self._closed = True
            if self._thread is not None and self._queue is not None:
                self._queue.put(_STOP)
                self._thread.join()
            else:
                self._finish()
        if self.error is not None:
            raise UserError(f"recording stopped: {self.error}")

    def __enter__(self) -> Recorder:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
