"""Fuzzing the decoder (hypothesis) and the source (a bounded random-frame run on a real
socket): junk never stops the process, every refused message is counted once under a
known reason, and valid samples interleaved with the junk all arrive, in order.

The properties are the decoder's own contract (docs/wire-format.md: every message is
accepted or counted under one of ``REJECT_REASONS``); the valid messages come from the
project's encoders and the expected samples are the arrays they were built from.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import socket
import time

import numpy as np
import pytest
import zmq
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from stream.wire import Decoder
from stream.wire_encode import encode_binary_batch, encode_json_batch, encode_json_single
from stream.wire_format import MAX_PARTS, REJECT_REASONS
from stream.zmq_source import ZmqSource

FUZZ = settings(max_examples=100, deadline=None,
                suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

# -- junk that can never be a valid message ----------------------------------------------------
#: A frame that is not UTF-8 JSON (0xff never starts a UTF-8 character).
bad_frame = st.binary(max_size=64).map(lambda b: b"\xff" + b)
#: Random multi-part messages of junk frames, up to many more parts than allowed.
junk_parts = st.lists(bad_frame, min_size=1, max_size=3 * MAX_PARTS + 40)


@st.composite
def truncated_binary(draw: st.DrawFn) -> list[bytes]:
    """A well-formed binary header whose data frame is cut short (or padded)."""
    n = draw(st.integers(1, 300))
    dtype = draw(st.sampled_from(["<f8", "<f4"]))
    frames = encode_binary_batch(np.linspace(-60, 60, n), np.full(n, -40.0),
                                 1767225600.0 + np.arange(n) * 1e-3, dtype=dtype)
    data = frames[-1]
    cut = draw(st.integers(-len(data), 16).filter(lambda k: k != 0))
    frames[-1] = data[:cut] if cut < 0 else data + b"\0" * cut
    return frames


@st.composite
def bad_json(draw: st.DrawFn) -> list[bytes]:
    """JSON objects with a field missing, of the wrong type, out of range or not finite."""
    base = {"angle_deg": 10.0, "power_dbm": -40.0, "t": 1767225600.0}
    how = draw(st.sampled_from(["missing", "type", "angle", "power", "nan", "ragged",
                                "version"]))
    if how == "missing":
        del base[draw(st.sampled_from(["angle_deg", "power_dbm"]))]
    elif how == "type":
        base[draw(st.sampled_from(["angle_deg", "power_dbm"]))] = draw(
            st.sampled_from(["10", True, None, {"a": 1}, [[1.0]]]))
    elif how == "angle":
        base["angle_deg"] = draw(st.one_of(st.floats(360.0, 1e9), st.floats(-1e9, -180.001)))
    elif how == "power":
        base["power_dbm"] = draw(st.one_of(st.floats(60.001, 1e9), st.floats(-1e9, -200.001)))
    elif how == "nan":
        return [b'{"angle_deg": NaN, "power_dbm": -40.0}']
    elif how == "ragged":
        base = {"angle_deg": [1.0, 2.0, 3.0], "power_dbm": [-40.0, -41.0]}
    else:
        base["v"] = draw(st.integers(2, 99))
    return [json.dumps(base).encode()]


junk = st.one_of(junk_parts, truncated_binary(), bad_json(), st.just([b""]))


@st.composite
def valid(draw: st.DrawFn) -> tuple[list[bytes], np.ndarray]:
    """A valid message and the angles it carries."""
    kind = draw(st.sampled_from(["single", "json-batch", "binary"]))
    n = 1 if kind == "single" else draw(st.integers(1, 50))
    ang = np.round(np.asarray(draw(st.lists(st.floats(-90, 90), min_size=n, max_size=n))), 3)
    pw = np.full(n, -45.0)
    if kind == "single":
        return encode_json_single(float(ang[0]), -45.0, 1767225600.0), ang
    if kind == "json-batch":
        return encode_json_batch(ang, pw, t0=1767225600.0, dt=1e-3, decimals=3), ang
    return encode_binary_batch(ang, pw, 1767225600.0 + np.arange(n) * 1e-3), ang


def _rejected_total(d: Decoder) -> int:
    return sum(d.rejected.values())


# -- decoder properties --------------------------------------------------------------------

@FUZZ
@given(st.lists(st.lists(st.binary(max_size=200), max_size=8), max_size=30))
def test_arbitrary_frames_never_raise_and_every_refusal_has_a_known_reason(messages):
    d = Decoder()
    out = d.decode_many(messages, 1767225600.0)
    assert all(len(b) > 0 for b in out)
    assert set(d.rejected) <= set(REJECT_REASONS)
    assert d.rejected.get("internal_error", 0) == 0
    assert d.messages + _rejected_total(d) == len(messages)  # each counted exactly once


@FUZZ
@given(st.lists(junk, min_size=1, max_size=20))
def test_junk_is_all_refused_by_reason(messages):
    d = Decoder()
    assert d.decode_many(messages, 1767225600.0) == []
    assert _rejected_total(d) == len(messages) and d.messages == 0
    assert set(d.rejected) <= set(REJECT_REASONS) - {"internal_error"}
    assert d.rejected.get("too_many_parts", 0) == sum(len(m) > MAX_PARTS for m in messages)


@FUZZ
@given(st.lists(st.tuples(valid(), st.lists(junk, max_size=3)), min_size=1, max_size=15))
def test_valid_samples_interleaved_with_junk_all_arrive_in_order(rounds):
    d = Decoder()
    messages: list[list[bytes]] = []
    expected: list[np.ndarray] = []
    n_junk = 0
    for (msg, ang), junks in rounds:
        messages.append(msg)
        expected.append(ang)
        messages.extend(junks)
        n_junk += len(junks)
    out = d.decode_many(messages, 1767225600.0)
    got = np.concatenate([b.angle_deg for b in out]) if out else np.empty(0)
    np.testing.assert_allclose(got, np.concatenate(expected), atol=1e-9)
    assert _rejected_total(d) == n_junk
    assert d.messages == len(rounds)


@FUZZ
@given(st.integers(MAX_PARTS + 1, 20_000))
def test_huge_frame_counts_are_one_refusal_each(n_parts):
    d = Decoder()
    msg = [b"{}"] * n_parts
    assert d.decode_many([msg, msg], 1767225600.0) == []
    assert d.rejected == {"too_many_parts": 2}


# -- a bounded random-frame run over a real socket ----------------------------------------------

def _free_endpoint() -> str:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return f"tcp://127.0.0.1:{s.getsockname()[1]}"


@pytest.mark.timeout(60)
async def test_random_frames_over_a_socket():
    """200 rounds of junk (random frames, a few 30,000-part messages, truncated binary
    batches) each followed by one valid binary batch: every valid sample arrives, every
    junk message is counted once, the loop keeps running (bounded waits only)."""
    rng = np.random.default_rng(7)
    ep = _free_endpoint()
    src = ZmqSource(ep, hwm=0)  # connects; the test's PUB binds
    ctx = zmq.Context()
    pub = ctx.socket(zmq.PUB)
    pub.linger = 0
    pub.sndhwm = 0
    pub.bind(ep)
    xs: list[np.ndarray] = []
    n_junk = n_huge = n_trunc = 0
    got: list[np.ndarray] = []

    async def receive() -> None:
        async for bs in src.batches():
            got.extend(b.angle_deg for b in bs)

    task = asyncio.create_task(receive())
    try:
        # the subscription reaches the publisher: probe until one message lands
        deadline = time.monotonic() + 10
        probe = encode_json_single(0.0, -40.0, 1767225600.0)
        while not got and time.monotonic() < deadline:
            pub.send_multipart(probe)
            await asyncio.sleep(0.02)
        assert got, "no subscription within 10 s"
        await asyncio.sleep(0.1)
        base = src.stats(time.time())
        n0 = sum(a.size for a in got)
        for r in range(200):
            k = int(rng.integers(0, 4))
            if k == 0:
                parts = int(rng.integers(1, 12))
                pub.send_multipart([b"\xff" + rng.bytes(int(rng.integers(0, 40)))
                                    for _ in range(parts)])
                n_huge += parts > MAX_PARTS
            elif k == 1 and n_huge < 4:
                pub.send_multipart([b"x"] * 30_000)
                n_huge += 1
            else:
                n = int(rng.integers(1, 200))
                frames = encode_binary_batch(np.zeros(n), np.full(n, -40.0), np.ones(n))
                frames[-1] = frames[-1][: int(rng.integers(0, len(frames[-1])))]
                pub.send_multipart(frames)
                n_trunc += 1
            n_junk += 1
            x = np.round(rng.uniform(-90, 90, int(rng.integers(1, 100))), 3)
            xs.append(x)
            pub.send_multipart(encode_binary_batch(x, np.full(x.size, -40.0),
                                                   1767225600.0 + np.arange(x.size)))
            if r % 20 == 0:
                await asyncio.sleep(0.005)
        want = sum(a.size for a in xs)
        deadline = time.monotonic() + 30
        while sum(a.size for a in got) - n0 < want and time.monotonic() < deadline:
            await asyncio.sleep(0.02)
        st_ = src.stats(time.time())
        rejected = {k: v - base.rejected.get(k, 0) for k, v in st_.rejected.items()}
        while sum(rejected.values()) < n_junk and time.monotonic() < deadline:
            await asyncio.sleep(0.02)
            st_ = src.stats(time.time())
            rejected = {k: v - base.rejected.get(k, 0) for k, v in st_.rejected.items()}
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
        pub.close(0)
        ctx.term()
        await src.aclose()
    received = np.concatenate(got)[n0:]
    np.testing.assert_allclose(received, np.concatenate(xs), atol=1e-9)
    assert sum(rejected.values()) == n_junk
    assert rejected.get("too_many_parts", 0) == n_huge
    assert rejected.get("bad_binary", 0) + rejected.get("empty", 0) == n_trunc
    assert set(rejected) <= set(REJECT_REASONS) - {"internal_error"}
    assert st_.lost == 0
