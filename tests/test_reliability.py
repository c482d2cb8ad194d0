"""Probes kept as tests (bounded in count, loopback only, no timing asserted): a fuzz of
200,000 malformed frames of 16 kinds among valid ones, and 50 publisher restarts.

Speeds, resume times and memory under bursts are measured by ``lobewatch bench --only
reliability`` and listed in docs/reliability.md.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import random
import socket
import time

import numpy as np
import pytest
import zmq

from stream.wire import Decoder
from stream.wire_encode import encode_binary_batch, encode_json_batch, encode_json_single
from stream.wire_format import REJECT_REASONS
from stream.zmq_source import ZmqSource

RX = 1767225600.0
MAX_BYTES = 4096


def _kinds() -> dict[str, list[list[bytes]]]:
    """Malformed messages by the reason they must be counted under (several shapes per
    kind; none carries a readable seq, so none can touch the numbering)."""
    hdr = b'{"v":1,"count":4,"dtype":"<f8","fields":["angle_deg","power_db"]}'
    return {
        "bad_json": [[b"{not json"], [b'"a string"'], [b"[1, 2, 3]"], [b"\xff\xfe\x00garbage"],
                     [b'{"angle_deg": 1, "power_dbm": -3'], [b"{}}"]],
        "bad_type": [[b'{"angle_deg": "12", "power_dbm": -3}'],
                     [b'{"angle_deg": true, "power_dbm": -3}'],
                     [b'{"angle_deg": [[1]], "power_dbm": [-3]}'],
                     [b'{"angle_deg": 1, "power_dbm": -3, "epoch": [1]}']],
        "missing_field": [[b'{"power_dbm": -3}'], [b'{"angle_deg": 1}'],
                          [b'{"angle_deg": 1, "power": -3}']],
        "ragged": [[b'{"angle_deg": [1, 2], "power_dbm": [-3]}'],
                   [b'{"angle_deg": [1, 2], "power_dbm": [-3, -4], "t": [1, 2, 3]}']],
        "empty": [[b""], [b'{"angle_deg": [], "power_dbm": []}']],
        "non_finite": [[b'{"angle_deg": NaN, "power_dbm": -3}'],
                       [b'{"angle_deg": 1, "power_dbm": -Infinity}'],
                       [b'{"angle_deg": 1, "power_dbm": -3, "t": NaN}']],
        "angle_range": [[b'{"angle_deg": 360, "power_dbm": -3}'],
                        [b'{"angle_deg": [1, -999], "power_dbm": [-3, -3]}']],
        "power_range": [[b'{"angle_deg": 1, "power_dbm": 61}'],
                        [b'{"angle_deg": 1, "power_db": -1e5}']],
        "unknown_version": [[b'{"v": 2, "angle_deg": 1, "power_dbm": -3}'],
                            [hdr.replace(b'"v":1', b'"v":7'), b"\0" * 64]],
        "out_of_range": [[b'{"angle_deg": 1, "power_dbm": -3, "t": 1' + b"0" * 320 + b"}"],
                         [b'{"v": 1, "angle_deg": [1], "power_dbm": [-3], "t0": -1'
                          + b"0" * 330 + b"}"]],
        "too_many_parts": [[b"a", b"b", b"c", b"d"], [b"x"] * 9],
        "bad_binary": [[hdr, b"\0" * 63], [hdr.replace(b"<f8", b">f8"), b"\0" * 64],
                       [b'{"v":1,"count":4,"fields":"angle_deg"}', b"\0" * 64]],
        "oversize": [[b'{"angle_deg": [' + b"1," * 3000 + b'1], "power_dbm": [-3]}']],
    }


def _valid(i: int) -> list[bytes]:
    """Valid messages: numbered singles, a JSON batch and a binary batch (the numbering
    runs over all three)."""
    if i % 3 == 0:
        return encode_json_single(float(i % 90), -40.0, RX, i, "fz")
    if i % 3 == 1:
        return encode_json_batch(np.array([1.0, 2.0]), np.array([-40.0, -41.0]), t=None,
                                 t0=RX, dt=0.001, seq=i, epoch="fz")
    return encode_binary_batch(np.array([3.0, 4.0, 5.0]), np.full(3, -42.0), seq=i,
                               epoch="fz")


def _samples(i: int) -> int:
    return (1, 2, 3)[i % 3]


@pytest.mark.timeout(300)
def test_fuzz_200k_malformed_frames_all_counted_by_reason_valid_ones_all_processed():
    kinds = _kinds()
    names = sorted(kinds)
    assert len(names) >= 12 and set(names) <= set(REJECT_REASONS)
    rng = random.Random(12)
    n_bad = 200_000
    per_valid = 10
    expected = dict.fromkeys(names, 0)
    expected["duplicate"] = 0
    msgs: list[list[bytes]] = []
    valid_samples = 0
    valid = 0
    for i in range(n_bad // per_valid):
        v = _valid(i)
        msgs.append(v)
        valid += 1
        valid_samples += _samples(i)
        for _ in range(per_valid):
            name = names[rng.randrange(len(names))]
            msgs.append(rng.choice(kinds[name]))
            expected[name] += 1
        if i % 97 == 5:  # the same message again: a duplicate
            msgs.append(v)
            expected["duplicate"] += 1
    d = Decoder(max_message_bytes=MAX_BYTES)
    got = 0
    for k in range(0, len(msgs), 700):  # drains of the source's size
        got += sum(len(b) for b in d.decode_many(msgs[k:k + 700], RX))
    s = d.stats()
    assert sum(expected.values()) - expected["duplicate"] == n_bad
    assert s.rejected == expected
    assert "internal_error" not in s.rejected
    assert s.messages == valid and got == valid_samples == d.samples
    assert s.lost == 0 and s.restarts == 0
    assert set(s.reject_examples) == set(expected)


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.timeout(60)
async def test_fuzz_through_a_real_socket_counts_every_message_once():
    """The same kinds through loopback tcp (the part and byte caps are then applied by
    the source while reading, frame by frame)."""
    kinds = _kinds()
    # a single frame over the socket's maximum size is refused by libzmq itself, which
    # drops the connection (counted then as a disconnect and a seq gap): not fuzzed here
    del kinds["oversize"]
    names = sorted(kinds)
    rng = random.Random(7)
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    # no shedding here (a loaded machine could fall 1 s behind): shedding has its own test
    src = ZmqSource(ep, max_message_bytes=MAX_BYTES, hwm=100_000, shed_after_s=1e9)
    ctx = zmq.Context()
    pub = ctx.socket(zmq.PUB)
    pub.setsockopt(zmq.SNDHWM, 100_000)
    pub.setsockopt(zmq.LINGER, 0)
    pub.bind(ep)
    got: list = []

    async def consume() -> None:
        async for bs in src.batches():
            got.extend(bs)

    task = asyncio.create_task(consume())
    try:
        for i in range(400):  # subscription up: a first-contact message arrives
            pub.send_multipart(encode_json_single(1.0, -40.0, RX, i, "warm"))
            await asyncio.sleep(0.01)
            if got:
                break
        assert got
        d = src.decoder
        m0, r0 = d.messages, sum(d.rejected.values())
        expected = dict.fromkeys(names, 0)
        n_valid = 600
        for i in range(n_valid):
            pub.send_multipart(_valid(i))
            for _ in range(10):
                name = names[rng.randrange(len(names))]
                pub.send_multipart(rng.choice(kinds[name]))
                expected[name] += 1
            if i % 50 == 0:
                await asyncio.sleep(0)
        total = n_valid * 11
        for _ in range(200):
            await asyncio.sleep(0.05)
            if d.messages - m0 + sum(d.rejected.values()) - r0 + d.lost >= total:
                break
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
        await src.aclose()
        pub.close(0)
        ctx.term()
    s = src.stats(time.time())
    assert s.lost == 0 and s.restarts == 1  # "fz" after "warm"
    assert s.rejected == {k: v for k, v in expected.items() if v}
    assert d.messages - m0 == n_valid


@pytest.mark.timeout(600)
async def test_50_publisher_restarts_are_restarts_not_loss():
    """51 publishers, one after another, on one address (each binds, sends until it is
    heard, sends 5 more, closes): 50 restarts, no loss, no refusals, no second sender."""
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    src = ZmqSource(ep, stale_after_s=30.0)
    heard: dict[str, int] = {}

    async def consume() -> None:
        async for bs in src.batches():
            for b in bs:
                heard[b.epoch or ""] = heard.get(b.epoch or "", 0) + len(b)  # messages

    task = asyncio.create_task(consume())
    states: set[str] = set()
    try:
        for k in range(51):
            epoch = f"run{k}"
            ctx = zmq.Context()
            pub = ctx.socket(zmq.PUB)
            pub.setsockopt(zmq.LINGER, 0)
            for _ in range(100):  # the previous one's port may take a moment to free
                try:
                    pub.bind(ep)
                    break
                except zmq.ZMQError:
                    await asyncio.sleep(0.05)
            seq = 0
            for _ in range(1000):
                pub.send_multipart(encode_json_single(1.0, -40.0, None, seq, epoch))
                seq += 1
                await asyncio.sleep(0.01)
                if heard.get(epoch):
                    break
            assert heard.get(epoch), f"publisher {k} never heard"
            for _ in range(5):
                pub.send_multipart(encode_json_single(1.0, -40.0, None, seq, epoch))
                seq += 1
            for _ in range(300):
                await asyncio.sleep(0.01)
                if heard.get(epoch, 0) >= 6:
                    break
            states.add(src.stats(time.time()).state)
            pub.close(0)
            ctx.term()
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
        await src.aclose()
    s = src.stats(time.time())
    assert s.restarts == 50 and s.lost == 0 and not s.rejected
    assert s.senders == 1
    assert "restarted" in states and "stale" not in states
    assert json.dumps(s.to_dict())  # JSON-ready for the headless summary
