"""stream.live.LiveDriver's readout timing when the drain is busy: a readout that falls
due while the drain works through a backlog is taken between two drain steps, not after
the backlog (checked on the loop's own clock, no wall-clock bound)."""

from __future__ import annotations

import asyncio

import numpy as np

from stream.batch import SampleBatch
from stream.estimator import EstimatorConfig, RollingPattern
from stream.live import LiveDriver
from stream.monitor import Monitor
from stream.tick import SourceStats


class BacklogSource:
    """Yields ``n`` batches back to back, as a source with a queue full of messages."""

    def __init__(self, n: int) -> None:
        self.n = n
        self.yielded = 0

    async def batches(self):
        a = np.linspace(-30.0, 30.0, 61)
        for k in range(self.n):
            self.yielded += 1
            yield [SampleBatch.from_arrays(a, -40.0 - 0.01 * a * a, rx_t=100.0 + k)]
            await asyncio.sleep(0)

    def stats(self, now: float) -> SourceStats:
        return SourceStats(state="receiving", messages=self.yielded)

    async def aclose(self) -> None:
        pass


async def test_a_readout_due_during_a_backlog_is_taken_by_the_drain() -> None:
    mon = Monitor(RollingPattern(EstimatorConfig()))
    at: list[int] = []
    src = BacklogSource(5)
    mon.tick_sinks.append(lambda tick: at.append(src.yielded))
    driver = LiveDriver(src, mon, interval_s=3600.0)
    loop = asyncio.get_running_loop()
    driver._next_at = loop.time()  # a readout is due now, while the backlog drains
    await driver._drain()
    assert at == [1]  # right after the first drain step, once; the next is an hour away
    assert driver._next_at > loop.time() + 3000.0


async def test_run_ticks_once_at_start_and_once_at_the_end() -> None:
    mon = Monitor(RollingPattern(EstimatorConfig()))
    ticks: list[float] = []
    mon.tick_sinks.append(lambda tick: ticks.append(tick.t))
    driver = LiveDriver(BacklogSource(3), mon, interval_s=3600.0)
    await driver.run(asyncio.Event())  # returns when the source ends
    assert len(ticks) == 2 and driver._next_at is None
