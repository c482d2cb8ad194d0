"""Many streams in one process: a Station per stream, a Fleet of Stations on one loop.

A :class:`Station` is one stream's own source, :class:`~stream.monitor.Monitor` (with
its own estimator and alarms) and optional recorder, driven by its own
:class:`~stream.live.LiveDriver`.  A :class:`Fleet` runs every station's driver as a
task of the same asyncio loop.  Why this shape:

* nothing is shared between stations except the loop, so a stream that dies or sends
  junk only changes its own counters and state; a station whose driver fails is marked
  ``failed`` with the reason and the others keep running;
* every station keeps its latest :class:`StationReading` (the tick plus the raised
  alarms at that tick), written on the loop by a tick sink.  Front ends on other
  threads (the Prometheus exporter's HTTP thread) read that one immutable object, so
  they never measure anything and never iterate state the loop is changing.

One socket, one topic: without ``--topic`` a SUB socket receives every topic, and the
samples of two arrays would be folded into one pattern.  :class:`TopicGuard` sits
between a source and its driver and refuses a second topic with a message saying how
to select one (:class:`MixedTopicsError`).
"""

from __future__ import annotations

import asyncio
import contextlib
import re
import time
from collections.abc import AsyncIterator, Callable, Iterable
from dataclasses import dataclass, replace
from typing import Any

from stream.alarm_config import SEVERITY_RANK
from stream.alarms import AlarmStatus
from stream.batch import SampleBatch
from stream.errors import UserError
from stream.live import LiveDriver, LiveSource
from stream.monitor import Monitor
from stream.tick import Event, SourceStats, Tick

#: A stream name: letters, digits, ``_ . -``; it names a session file and a label value.
NAME_PATTERN: re.Pattern[str] = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
#: Station state when its driver failed (added to the source states).
FAILED: str = "failed"


def check_stream_name(name: str, where: str = "--stream") -> str:
    """Refuse a name that cannot be a file name or would confuse a reader."""
    if not isinstance(name, str) or not NAME_PATTERN.match(name):
        raise UserError(f"{where}: stream name {name!r} must start with a letter or digit "
                        "and use only letters, digits, '_', '.', '-' (at most 64)")
    return name


class MixedTopicsError(UserError):
    """Messages of more than one topic arrived on a socket meant for one stream."""


class TopicGuard:
    """A :class:`~stream.live.LiveSource` that passes one topic through and refuses a
    second one before any of its samples reach the monitor.

    The topic of a batch is ``SampleBatch.stream`` (the message's topic frame, ``""``
    without one).  The first topic seen is kept; a batch list holding another raises
    :class:`MixedTopicsError`, so two arrays' samples are never merged into one beam.
    With a ``name`` (a fleet station), the batches passed on carry that name in
    ``SampleBatch.stream`` instead of the topic.
    """

    def __init__(self, source: LiveSource, endpoint: str = "", where: str = "",
                 name: str | None = None) -> None:
        self.source = source
        self.endpoint = endpoint
        self.where = where
        self.name = name
        self.topic: str | None = None

    async def batches(self) -> AsyncIterator[list[SampleBatch]]:
        async for batches in self.source.batches():
            topic = self.topic
            for b in batches:
                if topic is None:
                    topic = self.topic = b.stream
                elif b.stream != topic:
                    raise MixedTopicsError(self.message(topic, b.stream))
            name = self.name
            if name is not None and topic != name:  # batches carry the stream's name
                batches = [replace(b, stream=name) for b in batches]
            yield batches

    def message(self, first: str, other: str) -> str:
        """The refusal: what arrived, where, and how to pick one topic."""
        where = f"{self.where}: " if self.where else ""
        shown = self.endpoint or "the socket"
        return (f"{where}messages of several topics arrive on {shown} ({first!r} and "
                f"{other!r}) and would be merged into one beam; watch one with --topic "
                f"{other or first} or each as its own stream ([streams.NAME] tables with "
                "topic = \"...\" in --config, see docs/fleet.md)")

    def stats(self, now: float) -> SourceStats:
        return self.source.stats(now)

    async def aclose(self) -> None:
        await self.source.aclose()


@dataclass(frozen=True, slots=True)
class StationReading:
    """What a station showed at its latest tick: the tick and its raised alarms (worst
    severity first).  Immutable, so another thread may read it while the loop works."""

    tick: Tick
    alarms: tuple[AlarmStatus, ...] = ()

    @property
    def worst_alarm(self) -> AlarmStatus | None:
        """The most severe raised alarm, or ``None``."""
        if not self.alarms:
            return None
        return max(self.alarms, key=lambda a: SEVERITY_RANK.get(a.severity, 0))


class Station:
    """One stream: source + monitor + optional recorder, and the driver between them.

    Without a source the station only keeps readings of a monitor driven elsewhere
    (a replay, a test).  ``endpoint`` and ``topic`` are what the user asked for, for
    display and metadata only.
    """

    def __init__(self, name: str, monitor: Monitor, source: LiveSource | None = None, *,
                 recorder: Any = None, interval_s: float = 1.0,
                 clock: Callable[[], float] = time.time, endpoint: str = "",
                 topic: str = "", close_source: bool = True) -> None:
        self.name = check_stream_name(name, "stream")
        self.monitor = monitor
        self.source = source
        self.recorder = recorder
        self.endpoint = endpoint
        self.topic = topic
        self.error: str | None = None
        self.reading: StationReading | None = None
        self.clock = clock
        self.guard: TopicGuard | None = None
        self.driver: LiveDriver | None = None
        if source is not None:
            self.guard = TopicGuard(source, endpoint, where=f"stream {name}", name=name)
            self.driver = LiveDriver(self.guard, monitor, interval_s=interval_s, clock=clock,
                                     close_source=close_source)
        monitor.tick_sinks.append(self._on_tick)

    def _on_tick(self, tick: Tick) -> None:
        alarms = self.monitor.alarms
        active = tuple(alarms.active()) if alarms is not None else ()
        self.reading = StationReading(tick, active)

    @property
    def state(self) -> str:
        """``failed`` after a driver error, else the source state at the latest tick."""
        if self.error is not None:
            return FAILED
        reading = self.reading
        return reading.tick.source.state if reading is not None else "waiting"

    async def run(self, stop: asyncio.Event) -> None:
        """Drive this stream until ``stop``; a failure is kept in :attr:`error` and
        announced as a ``status`` event (state ``failed``), never raised to the fleet."""
        if self.driver is None:
            raise RuntimeError(f"station {self.name} has no source to drive")
        try:
            await self.driver.run(stop)
        except asyncio.CancelledError:
            raise
        except Exception as exc:  # noqa: BLE001 - one stream must not stop the others
            self.error = str(exc) if isinstance(exc, UserError) else \
                f"{type(exc).__name__}: {exc}"
            with contextlib.suppress(Exception):
                self.monitor.emit(Event(self.clock(), "status", {
                    "state": FAILED, "source_state": FAILED, "reason": self.error}))

    def close(self) -> None:
        """Close the source (if still open) and the recorder; idempotent."""
        src = self.source
        close = getattr(src, "close", None)
        if close is not None:
            with contextlib.suppress(Exception):
                close()
        if self.recorder is not None:
            rec, self.recorder = self.recorder, None
            rec.close()


class Fleet:
    """Stations that share one event loop (and nothing else)."""

    def __init__(self, stations: Iterable[Station]) -> None:
        self.stations: list[Station] = list(stations)
        seen: set[str] = set()
        for s in self.stations:
            if s.name in seen:
                raise UserError(f"stream name {s.name!r} is used twice; give each stream "
                                "its own name")
            seen.add(s.name)

    def __len__(self) -> int:
        return len(self.stations)

    def __iter__(self):
        return iter(self.stations)

    def get(self, name: str) -> Station:
        for s in self.stations:
            if s.name == name:
                return s
        raise KeyError(name)

    async def run(self, stop: asyncio.Event) -> None:
        """Run every station until ``stop`` is set (or every source has ended)."""
        await asyncio.gather(*(s.run(stop) for s in self.stations))

    def close(self) -> None:
        """Close every station; the first recorder error is raised after all closed."""
        first: BaseException | None = None
        for s in self.stations:
            try:
                s.close()
            except Exception as exc:  # noqa: BLE001 - close the rest first
                first = first or exc
        if first is not None:
            raise first
