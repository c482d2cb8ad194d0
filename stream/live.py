"""Drive the monitor from a live source: ingest every batch, tick at a fixed interval.

Two tasks share the event loop: the drain task folds each drained list of batches into
``monitor.ingest`` (the source gives the loop a turn after every drain), and the tick
loop calls ``monitor.tick(t, source.stats(t))`` every ``interval_s`` with ``t`` from the
injected clock.  Source state changes become ``status`` events (``receiving`` the first
time samples arrive, ``stale``, ``resumed``, ``ended``) emitted through the monitor so
front ends, recorders and the headless printer all see them in order.
"""

from __future__ import annotations

import asyncio
import contextlib
import time
from collections.abc import Callable
from typing import Any, NamedTuple, Protocol, runtime_checkable

from stream.batch import SampleBatch
from stream.monitor import Monitor
from stream.tick import Event, SourceStats
from stream.waiting import HINT_AFTER_S, source_settings, waiting_hint


class LiveSource(Protocol):
    def batches(self) -> Any: ...  # async iterator of list[SampleBatch]
    def stats(self, now: float) -> SourceStats: ...
    async def aclose(self) -> None: ...


@runtime_checkable
class Driver(Protocol):
    """What a screen runs in a worker: feeds a monitor until ``stop`` is set or its data
    ends (a :class:`LiveDriver`, a session player, a test double)."""

    async def run(self, stop: asyncio.Event) -> None: ...


class Position(NamedTuple):
    """Where playback stands: current, first and last time (Unix seconds)."""

    t: float
    t_start: float
    t_end: float


@runtime_checkable
class PlaybackDriver(Driver, Protocol):
    """A driver over recorded data that the screen's replay keys control
    (``replay.player.Player``).  Controls return at once; the next tick shows them."""

    speed: float
    paused: bool

    @property
    def position(self) -> Position: ...
    def pause(self) -> None: ...
    def resume(self) -> None: ...
    def set_speed(self, speed: float) -> None: ...
    def seek(self, delta_s: float) -> None: ...
    def next_event(self) -> Any: ...
    def prev_event(self) -> Any: ...


def status_change(previous: str | None, state: str) -> str | None:
    """The status event name for a state change, or ``None`` when nothing to report.

    waiting -> receiving is ``receiving`` (first samples), stale -> receiving is
    ``resumed``, anything -> stale is ``stale``, anything -> restarted is ``restarted``
    (a new publisher; restarted -> receiving says nothing more), anything -> ended is
    ``ended``.
    """
    if state == previous:
        return None
    if state == "receiving":
        if previous == "restarted":
            return None  # the restart was announced; receiving goes on
        return "resumed" if previous == "stale" else "receiving"
    if state in ("stale", "restarted", "ended"):
        return state
    if state == "waiting" and previous is None:
        return "waiting"
    return None


#: asyncio timers may wake this much before their time, s.
_EARLY_S: float = 1e-3


class LiveDriver:
    """Runs ``source`` into ``monitor`` until ``stop`` is set (or the source ends)."""

    def __init__(self, source: LiveSource, monitor: Monitor, interval_s: float = 0.1,
                 clock: Callable[[], float] = time.time, close_source: bool = True) -> None:
        if interval_s <= 0:
            raise ValueError("interval_s must be positive")
        self.source = source
        self.monitor = monitor
        self.interval_s = float(interval_s)
        self.clock = clock
        self.close_source = close_source
        self.state: str | None = None
        self.batches = 0
        #: Loop time of the next readout while :meth:`run` runs (the drain ticks too when
        #: it finds one due), else None.
        self._next_at: float | None = None
        #: What was tried and the usual causes, once waiting has lasted HINT_AFTER_S.
        self.waiting_hint: str | None = None
        self._waiting_since: float | None = None

    def _ingest(self, batches: list[SampleBatch]) -> None:
        ingest = self.monitor.ingest
        for b in batches:
            ingest(b)
        self.batches += len(batches)

    async def _drain(self) -> None:
        loop = asyncio.get_running_loop()
        async for batches in self.source.batches():
            self._ingest(batches)
            if self._next_at is not None and loop.time() >= self._next_at:
                self._tick_due(loop)  # due while the loop is busy: the readout on time

    def _tick_due(self, loop: asyncio.AbstractEventLoop) -> None:
        """The readout that is due, and the next one's time (no catching up when late)."""
        self.tick_once()
        assert self._next_at is not None
        self._next_at = max(self._next_at + self.interval_s, loop.time())

    def _status(self, t: float, stats: SourceStats) -> None:
        name = status_change(self.state, stats.state)
        if name is not None:
            self.monitor.emit(Event(t, "status", {"state": name, "source_state": stats.state,
                                                  "previous": self.state}))
        self.state = stats.state
        self._hint_if_waiting(t, stats)

    def _hint_if_waiting(self, t: float, stats: SourceStats) -> None:
        """After HINT_AFTER_S at waiting with no message: one status event with a hint
        (stream/waiting.py); headless prints it, the screen shows ``waiting_hint``."""
        if stats.state != "waiting" or stats.messages or self.waiting_hint is not None:
            return
        if self._waiting_since is None:
            self._waiting_since = t
        elif t - self._waiting_since >= HINT_AFTER_S:
            ep, bind, topic = source_settings(self.source)
            self.waiting_hint = waiting_hint(ep, bind, topic, t - self._waiting_since)
            self.monitor.emit(Event(t, "status", {"state": "waiting", "source_state": "waiting",
                                                  "hint": self.waiting_hint}))

    def tick_once(self) -> None:
        """One readout now (also used at the end of a run)."""
        t = self.clock()
        stats = self.source.stats(t)
        self._status(t, stats)
        self.monitor.tick(t, stats)

    async def run(self, stop: asyncio.Event) -> None:
        """Tick every ``interval_s`` until ``stop`` is set; closes the source at the end
        (when ``close_source``).  A failure in the drain task is re-raised here."""
        loop = asyncio.get_running_loop()
        drain = asyncio.create_task(self._drain(), name="lobewatch-drain")
        # One waiter for the whole run: asyncio.wait(..., timeout) returns one loop turn
        # after the timer, where wait_for would cancel and re-create the waiter each
        # time, which takes several turns -- each as long as one drain step under load
        # (a readout came 0.4 s late behind 3.2 MB JSON batches).  The drain ending (the
        # source ended) wakes it too.
        stopped = asyncio.ensure_future(stop.wait())
        self._next_at = loop.time()
        try:
            while not stop.is_set():
                if drain.done():
                    drain.result()  # re-raise a failure
                    break  # source ended
                # the drain may have ticked meanwhile (timers fire up to 1 ms early)
                if loop.time() + _EARLY_S >= self._next_at:
                    self._tick_due(loop)
                delay = max(self._next_at - loop.time(), 0.0)
                await asyncio.wait((stopped, drain), timeout=delay,
                                   return_when=asyncio.FIRST_COMPLETED)
        finally:
            self._next_at = None
            stopped.cancel()
            drain.cancel()
            with contextlib.suppress(asyncio.CancelledError, Exception):
                await drain
            if self.close_source:
                await self.source.aclose()
            # the final readout shows the source as ended
            with contextlib.suppress(Exception):
                self.tick_once()
