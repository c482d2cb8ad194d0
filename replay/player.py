"""Play a session file through a :class:`~stream.monitor.Monitor`.

Replay is exact: batches are ingested at their recorded receive times and the
monitor ticks at the recorded tick times with the recorded source counters, in the
recorded order, so the estimator, metrics and alarm engine compute what the live run
computed.  Recorded user actions (reference captured or cleared, target set, markers,
estimator reset) and source status changes are re-applied at their times; recorded
alarm events are not
re-emitted, the monitor's own alarm engine judges again (possibly with other
thresholds).  A session without ticks (an imported file) is ticked on a grid every
``interval_s`` of recorded time, plus once at its end.

Seeking is exact by default: the monitor then holds, at the target, the very state
the straight-through run had there (pattern, sweep history, alarm hold times), so the
readouts after a seek are the live run's.  A forward seek plays the rows up to the
target as fast as possible; a backward seek cannot rewind an estimator, so it restarts
the pipeline and plays from the start of the session.  :attr:`Player.seeking` is true
while that runs (the screen says it is catching up).  With an explicit ``warmup_s``
a seek instead replays only that window before the target (quicker on long sessions,
approximate: an exponential average with time constant tau keeps e^-5 < 1 % of its
reset state after 5 tau, but the sweep count starts again; :attr:`Player.approximate`
says so; see docs/session-format.md).
"""

from __future__ import annotations

import asyncio
import math
import os
import queue
import threading
import time
from collections.abc import Callable, Iterator
from typing import Any, NamedTuple

from replay.session import SessionItem, SessionReader
from stream.errors import InputFileError
from stream.tick import Event, SourceStats

#: Tick spacing for sessions recorded without ticks (imported files), seconds.
DEFAULT_INTERVAL_S: float = 0.1
#: Warm-up before a seek target with averaging "sweeps" (no time constant), seconds.
SWEEPS_WARMUP_S: float = 30.0
#: Time constants of the exponential average replayed before a seek target.
WARMUP_TAUS: float = 5.0
#: Items applied between yields to the event loop when running unpaced.
_CHUNK = 64
#: Consecutive batch rows handed to the monitor in one call when running unpaced.
_RUN = 128


class Prefetcher:
    """Reads session rows ahead in a helper thread (``Player(prefetch=True)``).

    SQLite and zlib release the GIL while they read and check rows, so on a second
    core the file is read while the pipeline works on the previous batches.  Rows are
    handed over in chunks through a short queue (bounded memory); a read error is
    re-raised in the consuming thread.  Not the default: since the monitor takes runs
    of rows in one call, the two threads mostly trade the GIL back and forth (headless
    replay of a 3,000,000-sample session on the project's 2-core machine, median of 6:
    9.6 M samples/s with the helper thread, 12.8 M without).
    """

    _END = object()

    def __init__(self, reader: SessionReader, after_id: int, chunk: int = 16,
                 depth: int = 8) -> None:
        self._q: queue.Queue[Any] = queue.Queue(maxsize=depth)
        self._stop = threading.Event()
        self._chunk = chunk
        self._buf: list[SessionItem] = []
        self._pos = 0
        self._done = False
        self._thread = threading.Thread(target=self._run, args=(reader, after_id),
                                        name="lobewatch-prefetch", daemon=True)
        self._thread.start()

    def _put(self, x: Any) -> bool:
        while not self._stop.is_set():
            try:
                self._q.put(x, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def _run(self, reader: SessionReader, after_id: int) -> None:
        it = reader.iter_items(after_id=after_id)
        chunk: list[SessionItem] = []
        try:
            for item in it:
                chunk.append(item)
                if len(chunk) >= self._chunk:
                    if not self._put(chunk):
                        return
                    chunk = []
            if chunk and not self._put(chunk):
                return
            self._put(self._END)
        except BaseException as exc:  # rows read so far, then the error, to the consumer
            if not chunk or self._put(chunk):
                self._put(exc)
        finally:
            it.close()

    def __iter__(self) -> Prefetcher:
        return self

    def __next__(self) -> SessionItem:
        if self._pos >= len(self._buf):
            if self._done:
                raise StopIteration
            got = self._q.get()
            if got is self._END:
                self._done = True
                raise StopIteration
            if isinstance(got, BaseException):
                self._done = True
                raise got
            self._buf, self._pos = got, 0
        item = self._buf[self._pos]
        self._pos += 1
        return item

    def close(self) -> None:
        """Stop the helper thread and wait for it (before the reader is used again)."""
        self._stop.set()
        while self._thread.is_alive():
            try:
                self._q.get_nowait()
            except queue.Empty:
                self._thread.join(0.01)
        self._done = True


class PlaybackPosition(NamedTuple):
    """Where playback is: current, first and last recorded time (Unix seconds)."""

    t: float
    t_start: float
    t_end: float


def default_warmup_s(monitor: Any) -> float:
    """Seconds to replay before a seek target so the rolling pattern is settled (for an
    approximate, windowed seek)."""
    cfg = getattr(getattr(monitor, "estimator", None), "config", None)
    if cfg is None:
        return SWEEPS_WARMUP_S
    if getattr(cfg, "averaging", "ema") == "ema":
        return WARMUP_TAUS * float(getattr(cfg, "tau_s", 3.0))
    return SWEEPS_WARMUP_S


class Player:
    """Feeds a session's rows to a monitor, as fast as possible or paced.

    ``speed`` is the ratio of recorded time to wall time (``math.inf``: unpaced);
    ``clock`` is the wall clock used for pacing (injected for tests).  With
    ``hold_at_end`` (the TUI) :meth:`run` waits at the end of the session for a seek
    or the stop event instead of returning.  ``warmup_s=None`` (default) makes seeks
    exact; a number makes them replay only that many seconds before the target.
    """

    def __init__(self, path: str | os.PathLike[str], monitor: Any, speed: float = 1.0,
                 clock: Callable[[], float] = time.monotonic, *,
                 interval_s: float = DEFAULT_INTERVAL_S, warmup_s: float | None = None,
                 hold_at_end: bool = False, prefetch: bool = False) -> None:
        self.path = os.fspath(path)
        self.prefetch = prefetch
        self.monitor = monitor
        self.clock = clock
        if not interval_s > 0:
            raise ValueError(f"interval_s must be positive, got {interval_s}")
        self.interval_s = float(interval_s)
        self.warmup_s = None if warmup_s is None else float(warmup_s)
        #: True while a seek is being played up to its target.
        self.seeking = False
        #: True after a windowed (approximate) seek, until the next exact restart.
        self.approximate = False
        self.hold_at_end = hold_at_end
        self.speed = self._check_speed(speed)
        self.reader = SessionReader(self.path)
        span = self.reader.time_span()
        if span is None:
            self.reader.close()
            raise InputFileError(self.path, "session holds no samples, ticks or events; "
                                 "nothing to replay")
        self.t_start, self.t_end = span.t_start, span.t_end
        self.meta = self.reader.meta
        self.grid = not self.reader.has_ticks
        if self.grid:  # imported: time starts at the first sample, not its batch's arrival
            first = self.reader.first_sample_t()
            if first is not None and first < self.t_start:
                self.t_start = first
        self.paused = False
        self.ended = False
        self.samples_fed = 0
        self.batches_fed = 0
        self.ticks_fed = 0
        self._t = self.t_start
        self._next_grid = 1
        self._last_grid_t: float | None = None
        self._it: Iterator[SessionItem] | None = None
        self._peek: SessionItem | None = None
        self._anchor_t = self.t_start
        self._anchor_wall = 0.0
        self._running = False
        self._seek_request: float | None = None
        self._initial_target = (getattr(monitor, "target_deg", None),
                                getattr(monitor, "tolerance_deg", None))
        self._wake: asyncio.Event | None = None

    # -- small helpers --------------------------------------------------------------------
    @staticmethod
    def _check_speed(speed: float) -> float:
        speed = float(speed)
        if not speed > 0:
            raise ValueError(f"speed must be positive, got {speed}")
        return speed

    @property
    def position(self) -> PlaybackPosition:
        t = self._t
        if self._running and not self.paused and not self.ended and math.isfinite(self.speed):
            t = max(t, min(self._anchor_t + (self.clock() - self._anchor_wall) * self.speed,
                           self.t_end))
        return PlaybackPosition(t, self.t_start, self.t_end)

    def _open_items(self, after_id: int) -> Iterator[SessionItem]:
        self._close_items()
        if self.prefetch:
            self._it = Prefetcher(self.reader, after_id)
        else:
            self._it = self.reader.iter_items(after_id=after_id)
        return self._it

    def _close_items(self) -> None:
        it, self._it = self._it, None
        close = getattr(it, "close", None)
        if close is not None:
            close()

    def _items(self) -> Iterator[SessionItem]:
        if self._it is None:
            return self._open_items(0)
        return self._it

    def _next(self) -> SessionItem | None:
        if self._peek is not None:
            item, self._peek = self._peek, None
            return item
        return next(self._items(), None)

    def _grid_t(self, k: int) -> float:
        return self.t_start + k * self.interval_s

    def _grid_ticks_before(self, t: float, inclusive: bool = False) -> None:
        while True:
            g = self._grid_t(self._next_grid)
            if g > t or (g == t and not inclusive):
                return
            self._tick_grid(g)
            self._next_grid += 1

    def _tick_grid(self, g: float) -> None:
        self.monitor.tick(g, SourceStats(state="receiving", messages=self.batches_fed))
        self.ticks_fed += 1
        self._last_grid_t = g

    def _finish_grid(self) -> None:
        if not self.grid or self.ended:
            return
        self._grid_ticks_before(self.t_end, inclusive=True)
        if self._last_grid_t is None or self._last_grid_t < self.t_end:
            self._tick_grid(self.t_end)

    # -- applying rows --------------------------------------------------------------------
    def _apply(self, item: SessionItem) -> None:
        m = self.monitor
        if item.kind == "batch":
            if self.grid:
                self._grid_ticks_before(item.t)
            m.ingest(item.value)
            self.batches_fed += 1
            self.samples_fed += len(item.value)
        elif item.kind == "tick":
            m.tick(item.t, item.value)
            self.ticks_fed += 1
        else:
            self._apply_event(item.value, item.id)
        if item.t > self._t:
            self._t = item.t

    def _apply_batch_run(self, first: SessionItem, until: float = math.inf) -> int:
        """Apply ``first`` (a batch row) and the batch rows right behind it with one
        monitor call (unpaced, ticked sessions only: nothing comes between them), none
        later than ``until``; returns the rows applied.  The monitor ends in the state
        row-by-row gives."""
        items = [first]
        try:
            while len(items) < _RUN:
                nxt = self._next()
                if nxt is None:
                    break
                if nxt.kind != "batch" or nxt.t > until:
                    self._peek = nxt
                    break
                items.append(nxt)
        except BaseException:  # a damaged row: the rows before it are played first
            self._feed_run(items)
            raise
        return self._feed_run(items)

    def _feed_run(self, items: list[SessionItem]) -> int:
        if len(items) == 1:
            self._apply(items[0])
            return 1
        batches = [it.value for it in items]
        self.monitor.ingest_many(batches)
        self.batches_fed += len(items)
        self.samples_fed += sum(len(b) for b in batches)
        t = max(it.t for it in items)
        if t > self._t:
            self._t = t
        return len(items)

    def _apply_event(self, ev: Event, row_id: int = 0) -> None:
        m, d = self.monitor, ev.data
        if ev.kind == "reference":
            if m.capture_reference(ev.t) is None:
                # No readout yet (just after a seek): use the trace stored with the event.
                ref = self.reader.reference_for(row_id, ev)
                if ref is not None:
                    m.reference = ref
        elif ev.kind == "reference_cleared":
            m.clear_reference(ev.t)
        elif ev.kind == "target":
            m.set_target(ev.t, d.get("target_deg"), d.get("tolerance_deg"))
        elif ev.kind == "marker":
            m.mark(ev.t, str(d.get("text", "")))
        elif ev.kind == "reset":
            m.reset(ev.t)
        elif ev.kind == "status":
            # Source status changes were emitted by the live driver through the monitor;
            # emitting the recorded ones again keeps the tick's event list identical.
            m.emit(Event(ev.t, ev.kind, dict(ev.data)))
        # "alarm" events are not replayed: the monitor's alarm engine judges again.

    # -- unpaced ----------------------------------------------------------------------------
    def run_fast(self) -> int:
        """Feed the rest of the session as fast as possible; returns rows applied."""
        n = 0
        runs = not self.grid and hasattr(self.monitor, "ingest_many")
        while (item := self._next()) is not None:
            if runs and item.kind == "batch":
                n += self._apply_batch_run(item)
            else:
                self._apply(item)
                n += 1
        self._finish_grid()
        self.ended = True
        self._t = self.t_end
        return n

    # -- paced ------------------------------------------------------------------------------
    def _reanchor(self, t: float | None = None) -> None:
        self._anchor_t = self._t if t is None else t
        self._anchor_wall = self.clock()

    def _poke(self) -> None:
        if self._wake is not None:
            self._wake.set()

    def pause(self) -> None:
        if not self.paused:
            self._t = self.position.t
            self.paused = True
            self._poke()

    def resume(self) -> None:
        if self.paused:
            self.paused = False
            self._reanchor()
            self._poke()

    def toggle_pause(self) -> None:
        self.resume() if self.paused else self.pause()

    def set_speed(self, speed: float) -> None:
        t = self.position.t
        self.speed = self._check_speed(speed)
        self._t = max(self._t, t)
        self._reanchor()
        self._poke()

    def seek(self, delta_s: float) -> None:
        """Move by ``delta_s`` seconds of recorded time (negative: back)."""
        self.seek_to(self.position.t + delta_s)

    def seek_to(self, t: float) -> None:
        """Jump to recorded time ``t`` (clamped to the session)."""
        if self._running:
            self._seek_request = t
            self.seeking = True
            self._poke()
        else:
            for _ in self._seek_steps(t):
                pass

    def next_event(self) -> Event | None:
        """Jump to the first event after the current position; None if there is none."""
        ev = self.reader.neighbour_event(self.position.t + 1e-6, forward=True)
        if ev is not None:
            self.seek_to(ev.t)
        return ev

    def prev_event(self) -> Event | None:
        """Jump to the last event before the current position; None if there is none."""
        ev = self.reader.neighbour_event(self.position.t - 1e-6, forward=False)
        if ev is not None:
            self.seek_to(ev.t)
        return ev

    def _reset_pipeline(self) -> None:
        self.monitor.restart()

    def _seek_steps(self, target: float) -> Iterator[None]:
        """Do a seek, yielding every few rows so an event loop stays responsive."""
        target = min(max(float(target), self.t_start), self.t_end)
        self.seeking = True
        try:
            if self.warmup_s is None:
                yield from self._seek_exact(target)
            else:
                yield from self._seek_window(target, self.warmup_s)
        finally:
            self.seeking = self._seek_request is not None

    def _restart(self) -> None:
        """The pipeline and the reading position as when the player was opened."""
        self._reset_pipeline()
        m = self.monitor
        m.target_deg, m.tolerance_deg = self._initial_target
        self._open_items(0)
        self._peek = None
        self.ended = False
        self._next_grid = 1
        self._last_grid_t = None
        self._t = self.t_start
        self.approximate = False

    def _seek_exact(self, target: float) -> Iterator[None]:
        """Play every row up to ``target`` (from the start when going back)."""
        if target < self._t or self.ended or self.approximate:
            self._restart()
        runs = not self.grid and hasattr(self.monitor, "ingest_many")
        n = 0
        while (item := self._next()) is not None:
            if item.t > target:
                self._peek = item
                break
            if runs and item.kind == "batch":
                n += self._apply_batch_run(item, until=target)
            else:
                self._apply(item)
                n += 1
            if n >= _CHUNK * 8:
                n = 0
                yield None
        if self.grid:
            self._grid_ticks_before(target, inclusive=True)
        if self._peek is None:
            self._finish_grid()
            self.ended = True
        self._t = target
        self._reanchor()

    def _seek_window(self, target: float, warmup_s: float) -> Iterator[None]:
        """Reset and replay only ``warmup_s`` seconds before ``target`` (approximate)."""
        self.approximate = True
        w0 = max(self.t_start, target - warmup_s)
        start_id = self.reader.start_id(w0) if w0 > self.t_start else 0
        self._reset_pipeline()
        m = self.monitor
        m.target_deg, m.tolerance_deg = self._initial_target
        if start_id:
            tev, ref, _cleared = self.reader.state_before(start_id + 1)
            if tev is not None:
                m.target_deg = tev.data.get("target_deg")
                if tev.data.get("tolerance_deg") is not None:
                    m.tolerance_deg = tev.data.get("tolerance_deg")
            if ref is not None:
                m.reference = ref[1]
        self._open_items(start_id)
        self._peek = None
        self.ended = False
        if self.grid:
            self._next_grid = max(1, math.floor((w0 - self.t_start) / self.interval_s) + 1)
            self._last_grid_t = None
        self._t = w0
        n = 0
        while (item := self._next()) is not None:
            if item.t > target:
                self._peek = item
                break
            self._apply(item)
            n += 1
            if n % _CHUNK == 0:
                yield None
        if self.grid:
            self._grid_ticks_before(target, inclusive=True)
        if self._peek is None:
            self._finish_grid()
            self.ended = True
        self._t = target
        self._reanchor()

    async def _wait(self, seconds: float) -> None:
        if self._wake is None:
            self._wake = asyncio.Event()
        self._wake.clear()
        try:
            await asyncio.wait_for(self._wake.wait(), timeout=max(seconds, 0.0))
        except TimeoutError:
            pass

    async def run(self, stop: asyncio.Event | None = None) -> None:
        """Play the session paced at ``speed`` (unpaced when ``speed`` is infinite),
        obeying pause, speed changes and seeks, until the end or ``stop`` is set."""
        stop = stop or asyncio.Event()
        self._wake = asyncio.Event()
        self._running = True
        self._reanchor()
        n = 0
        next_yield = _CHUNK
        try:
            while not stop.is_set():
                if self._seek_request is not None:
                    target, self._seek_request = self._seek_request, None
                    for _ in self._seek_steps(target):
                        await asyncio.sleep(0)
                    continue
                if self.paused or self.ended:
                    if self.ended and not self.hold_at_end:
                        return
                    await self._wait(0.1)
                    continue
                item = self._next()
                if item is None:
                    self._finish_grid()
                    self.ended = True
                    self._t = self.t_end
                    continue
                if math.isfinite(self.speed):
                    due = self._anchor_wall + (item.t - self._anchor_t) / self.speed
                    delay = due - self.clock()
                    if delay > 0:
                        self._peek = item
                        await self._wait(min(delay, 0.05))
                        continue
                elif item.kind == "batch" and not self.grid and hasattr(self.monitor,
                                                                       "ingest_many"):
                    n += self._apply_batch_run(item)
                    if n >= next_yield:
                        next_yield = n + _CHUNK
                        await asyncio.sleep(0)
                    continue
                self._apply(item)
                n += 1
                if n >= next_yield:
                    next_yield = n + _CHUNK
                    await asyncio.sleep(0)
        finally:
            self._running = False

    def close(self) -> None:
        self._close_items()
        self.reader.close()

    def __enter__(self) -> Player:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

