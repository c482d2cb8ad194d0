"""The receive queue's byte bound (stream/rx_queue.py): the rule, and that libzmq obeys
a mark lowered on a live socket (real sockets on 127.0.0.1)."""

from __future__ import annotations

import asyncio
import socket

import numpy as np
import zmq

from stream.rx_queue import HWM_FLOOR, QueueBudget
from stream.wire_encode import encode_binary_batch
from stream.zmq_source import ZmqSource


def test_mark_is_budget_over_largest_message_within_floor_and_cap() -> None:
    q = QueueBudget(64 * 2**20, 20_000)
    assert q.hwm == 20_000  # nothing seen yet: the user's cap
    assert q.observe(75) is None  # singles: 64 MiB / 75 B is far above the cap
    assert q.observe(3_200_000) == 64 * 2**20 // 3_200_000 == 20
    assert q.hwm == 20
    assert q.observe(1000) is None  # smaller messages never raise it (see the module)
    assert q.observe(3_200_000) is None  # the same size again: nothing to do
    assert q.observe(40 * 2**20) == HWM_FLOOR  # never below the floor


def test_budget_zero_leaves_the_count_limit_alone_and_cap_zero_is_no_cap() -> None:
    off = QueueBudget(0, 500)
    assert off.observe(10 * 2**20) is None and off.hwm == 500
    uncapped = QueueBudget(2**20, 0)  # libzmq's 0: no limit on the count
    assert uncapped.hwm == 0
    assert uncapped.observe(1024) == 1024
    assert uncapped.observe(2048) == 512


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _message(seq: int, epoch: str) -> list[bytes]:
    n = 40_000  # three float64 fields: about 1 MB a message
    return encode_binary_batch(np.linspace(-60, 60, n), np.full(n, -40.0),
                               1.7e9 + np.arange(n) * 1e-4, seq=seq, epoch=epoch)


async def _burst_received(queue_bytes: int) -> tuple[int, int]:
    """A publisher (send queue of 1 message, small kernel send buffer) sends 200 messages
    of ~1 MB, paced, while the source is not read; then everything that reached the
    source is read.  Returns (burst messages received, the source's mark)."""
    port = _free_port()
    ctx = zmq.Context()
    pub = ctx.socket(zmq.PUB)
    pub.setsockopt(zmq.LINGER, 0)
    pub.setsockopt(zmq.SNDHWM, 1)
    pub.setsockopt(zmq.SNDBUF, 128 * 1024)
    pub.bind(f"tcp://127.0.0.1:{port}")
    src = ZmqSource(f"tcp://127.0.0.1:{port}", hwm=20_000, queue_bytes=queue_bytes,
                    max_message_bytes=4 * 2**20)
    it = src.batches().__aiter__()
    try:
        first = asyncio.ensure_future(it.__anext__())
        for k in range(1000):  # until connected and one message is in (bounded: 10 s)
            pub.send_multipart(_message(k, "probe"))
            done, _ = await asyncio.wait({first}, timeout=0.01)
            if done:
                break
        assert first.done(), "the source never received a probe"
        # not reading: what the source may hold is its queue (mark x size) + kernel buffers
        for k in range(200):
            pub.send_multipart(_message(k, "burst"))
            await asyncio.sleep(0.003)
        await asyncio.sleep(0.5)  # let the I/O threads move what they can
        burst = 0
        while True:  # read everything that is there, until 1 s of silence (bounded)
            try:
                batches = await asyncio.wait_for(it.__anext__(), 1.0)
            except TimeoutError:
                break
            burst += sum(b.epoch == "burst" for b in batches)
        return burst, src.queue.hwm
    finally:
        await it.aclose()
        await src.aclose()
        pub.close(0)
        ctx.term()


def test_a_lowered_mark_bounds_what_libzmq_takes_in_from_a_burst() -> None:
    """4 MiB budget, 1 MB messages: the mark drops to the floor (16) after the first
    message, so of 200 sent while the source was not read, only the queue's 16 plus
    what the kernel buffers and the publisher's one-message queue held get through;
    the publisher drops the rest (it would be counted lost from ``seq`` on a live run)."""
    burst, mark = asyncio.run(_burst_received(4 * 2**20))
    assert mark == HWM_FLOOR
    assert burst <= 60, f"{burst} of 200 messages of 1 MB were queued: the byte bound failed"


def test_without_the_byte_bound_the_same_burst_is_queued_whole() -> None:
    """The control for the test above: the same burst with the bound off reaches the
    source almost whole (the count limit 20,000 never bites), so the bound is what
    made the difference."""
    burst, mark = asyncio.run(_burst_received(0))
    assert mark == 20_000
    assert burst > 100, f"only {burst} of 200 arrived even without a byte bound"
