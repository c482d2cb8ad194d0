"""The ZeroMQ source on real sockets (loopback tcp and ipc), and the live driver."""

from __future__ import annotations

import asyncio
import contextlib
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import psutil
import pytest
import zmq

from stream.estimator import EstimatorConfig, RollingPattern
from stream.live import LiveDriver, status_change
from stream.monitor import Monitor
from stream.synth import SynthConfig, run_publisher
from stream.wire_encode import encode_binary_batch, encode_json_single
from stream.zmq_source import ZmqSource

pytestmark = pytest.mark.timeout(30)
ROOT = Path(__file__).resolve().parents[1]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


async def collect(src: ZmqSource, until, timeout: float = 5.0) -> list:
    """Batches from ``src`` until ``until(batches)`` is true or ``timeout`` passes."""
    got: list = []

    async def run() -> None:
        async for bs in src.batches():
            got.extend(bs)
            if until(got):
                return

    with contextlib.suppress(TimeoutError):
        await asyncio.wait_for(run(), timeout)
    return got


class Pub:
    """A PUB socket in this process (the test drives what is sent)."""

    def __init__(self, endpoint: str, bind: bool = True, sndhwm: int = 1000) -> None:
        self.ctx = zmq.Context()
        self.sock = self.ctx.socket(zmq.PUB)
        self.sock.setsockopt(zmq.LINGER, 0)
        self.sock.setsockopt(zmq.SNDHWM, sndhwm)
        if bind:
            self.sock.bind(endpoint)
        else:
            self.sock.connect(endpoint)

    def send(self, frames) -> None:
        self.sock.send_multipart(frames)

    def close(self) -> None:
        self.sock.close(0)
        self.ctx.term()


def start_publisher(config: SynthConfig, endpoint: str) -> tuple[threading.Event,
                                                                threading.Thread, list]:
    stop = threading.Event()
    ready: list = []
    th = threading.Thread(target=run_publisher, args=(endpoint, config, stop),
                          kwargs={"on_ready": ready.append}, daemon=True)
    th.start()
    t = time.monotonic()
    while not ready and time.monotonic() - t < 5:
        time.sleep(0.01)
    assert ready, "publisher did not bind"
    return stop, th, ready


async def test_tcp_synth_publisher_end_to_end():
    stop, th, ready = start_publisher(SynthConfig(rate_sps=4000, batch=200),
                                      "tcp://127.0.0.1:*")
    src = ZmqSource(ready[0])
    try:
        got = await collect(src, lambda g: sum(len(b) for b in g) >= 4000)
        n = sum(len(b) for b in got)
        assert n >= 4000
        st = src.stats(time.time())
        assert st.state == "receiving" and st.lost == 0 and not st.rejected
        assert all(b.epoch and b.calibrated for b in got)
        # batches received in one drain are merged (the merged batch keeps the last
        # seq): the numbering rises, and every message's 200 samples arrived
        seqs = [b.seq for b in got]
        assert seqs == sorted(set(seqs))
        assert n == 200 * src.decoder.messages
    finally:
        stop.set()
        th.join(5)
        await src.aclose()
    assert src.stats(time.time()).state == "ended"


async def test_ipc_bind_mode_with_topic_filter(tmp_path):
    ep = f"ipc://{tmp_path}/beam.sock"
    src = ZmqSource(ep, bind=True, topic=b"mast-a")
    pub = Pub(ep, bind=False)
    try:
        async def sender() -> None:
            for i in range(400):
                pub.send(encode_json_single(1.0, -40.0, None, i, "e", topic=b"mast-b"))
                pub.send(encode_json_single(2.0, -41.0, None, i, "e", topic=b"mast-a"))
                await asyncio.sleep(0.002)

        task = asyncio.create_task(sender())
        got = await collect(src, lambda g: any(b.seq == 399 for b in g), timeout=6)
        await task
        assert got and {b.stream for b in got} == {"mast-a"}
        assert np.all(np.concatenate([b.angle_deg for b in got]) == 2.0)
    finally:
        await src.aclose()
        pub.close()


async def test_oversize_frame_drops_connection_and_source_reconnects():
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    pub = Pub(ep)
    src = ZmqSource(ep, max_message_bytes=10_000, reconnect_ivl_ms=100)
    stop = asyncio.Event()

    async def sender() -> None:
        i = 0
        while not stop.is_set():
            pub.send(encode_json_single(1.0, -40.0, None, i, "e"))
            if i == 100:
                pub.send([b"x" * 50_000])  # over MAXMSGSIZE: libzmq drops the peer
            i += 1
            await asyncio.sleep(0.002)

    task = asyncio.create_task(sender())
    try:
        got = await collect(src, lambda g: src.reconnects >= 1 and len(g) > 0
                            and g[-1].seq is not None and g[-1].seq > 400, timeout=8)
        assert src.reconnects >= 1 and src.disconnects >= 1
        assert got[-1].seq > 400  # receiving again after the reconnect
        assert src.stats(time.time()).lost > 0  # the gap is accounted
    finally:
        stop.set()
        await task
        await src.aclose()
        pub.close()


async def test_many_part_messages_are_refused_without_blocking():
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    pub = Pub(ep, sndhwm=100_000)
    src = ZmqSource(ep)
    try:
        # wait for the subscription to reach the publisher
        for i in range(200):
            pub.send(encode_json_single(1.0, -40.0, None, i, "e"))
            got = await collect(src, lambda g: len(g) > 0, timeout=0.05)
            if got:
                break
        pub.sock.send_multipart([b"p"] * 5_000)
        pub.sock.send_multipart([b"q"] * 60_000)  # discarded over several drains
        pub.send(encode_json_single(3.0, -40.0, None, 1000, "e"))
        got = await collect(src, lambda g: any(b.angle_deg[0] == 3.0 for b in g), timeout=8)
        assert any(b.angle_deg[0] == 3.0 for b in got)
        assert src.stats(time.time()).rejected.get("too_many_parts") == 2
    finally:
        await src.aclose()
        pub.close()


class StepClock:
    """An injected monotonic clock: each reading advances it by ``step_s``, so a drain's
    time budget runs out after a known number of messages whatever the machine's load."""

    def __init__(self, step_s: float) -> None:
        self.t = 0.0
        self.step_s = step_s

    def __call__(self) -> float:
        self.t += self.step_s
        return self.t


async def _subscribed(src: ZmqSource, pub: Pub) -> None:
    """Send numbered singles until one arrives (the subscription is up)."""
    for i in range(400):
        pub.send(encode_json_single(1.0, -40.0, None, i, "warm"))
        if await collect(src, lambda g: len(g) > 0, timeout=0.05):
            return
    raise AssertionError("subscription never came up")


async def _queued(src: ZmqSource, n: int, timeout: float = 10.0) -> None:
    """Wait until ``n`` messages sit in the source's queue (without reading them)."""
    assert src._sock is not None
    t = time.monotonic()
    while time.monotonic() - t < timeout:
        await asyncio.sleep(0.1)
        # the PUB side has handed everything over once its queue stops draining;
        # the test's sends are synchronous, so a short settle is enough
        if src._sock.poll(0, zmq.POLLIN):
            return
    raise AssertionError("nothing queued")


async def test_drain_checks_its_time_budget_per_message_and_yields_the_loop():
    """A queue of 3,000 messages, a clock that says each message took 1 ms, a 5 ms
    budget: every drain stops within a few messages and the event loop gets a turn
    between drains (the flood figures themselves are in ``lobewatch bench``)."""
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    pub = Pub(ep, sndhwm=100_000)
    src = ZmqSource(ep, mono=StepClock(0.001), drain_budget_s=0.005, shed_after_s=1e9)
    try:
        await _subscribed(src, pub)
        for i in range(3000):
            pub.send(encode_json_single(2.0, -40.0, None, 10_000 + i, "e"))
        await _queued(src, 3000)
        await asyncio.sleep(0.5)
        turns = 0
        seen: list[int] = []

        async def other_task() -> None:
            nonlocal turns
            while True:
                await asyncio.sleep(0)
                turns += 1

        task = asyncio.create_task(other_task())
        sizes: list[int] = []
        total = 0
        async for bs in src.batches():
            sizes.append(sum(len(b) for b in bs))
            seen.append(turns)
            total += sizes[-1]
            if total >= 3000:
                break
        task.cancel()
        assert total == 3000 and src.decoder.lost == 0
        assert max(sizes) <= 8, sizes[:20]  # budget 5 ms at 1 ms a message
        # a turn for the other task between any two drains (it starts one turn late)
        assert all(b > a for a, b in zip(seen[1:], seen[2:], strict=False))
    finally:
        await src.aclose()
        pub.close()


async def test_a_receiver_that_falls_behind_sheds_visibly_and_counts_everything():
    """Shedding: once the queue has not been seen empty for ``shed_after_s`` (on the
    injected clock), queued messages are dropped unread and counted as lost (shed);
    accepted + lost adds up to what was sent."""
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    pub = Pub(ep, sndhwm=100_000)
    src = ZmqSource(ep, mono=StepClock(0.001), drain_max=50, shed_after_s=0.5)
    try:
        await _subscribed(src, pub)
        m0 = src.decoder.messages
        n_sent = 4000
        for i in range(n_sent):
            pub.send(encode_json_single(2.0, -40.0, None, i, "e2"))
        await _queued(src, n_sent)
        await asyncio.sleep(0.5)
        got: list = []

        async def consume() -> None:
            async for bs in src.batches():
                got.extend(bs)

        task = asyncio.create_task(consume())
        d = src.decoder
        for _ in range(200):  # until every message is accepted or shed
            await asyncio.sleep(0.05)
            if d.messages - m0 + d.shed >= n_sent:
                break
        # the next message shows the numbering: nothing counted twice, nothing missed
        pub.send(encode_json_single(3.0, -40.0, None, n_sent, "e2"))
        for _ in range(100):
            await asyncio.sleep(0.05)
            if got and got[-1].angle_deg[-1] == 3.0:
                break
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
        assert got and got[-1].angle_deg[-1] == 3.0
        st = src.stats(time.time())
        accepted = d.messages - m0
        assert st.shed > 0 and st.lost >= st.shed
        assert accepted + st.lost - 1 == n_sent  # every message counted exactly once
        assert st.restarts == 1 and st.lost_after_restart == 0  # "e2" after "warm"
    finally:
        await src.aclose()
        pub.close()


async def test_slow_consumer_memory_bounded_and_losses_counted():
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    src = ZmqSource(ep, hwm=500)
    pub = Pub(ep, sndhwm=500)
    proc = psutil.Process()
    try:
        # make sure the subscription is up
        for _ in range(200):
            pub.send(encode_json_single(1.0, -40.0, None, 0, "e"))
            if await collect(src, lambda g: len(g) > 0, timeout=0.05):
                break
        rss0 = proc.memory_info().rss
        m0 = src.decoder.messages
        payload = np.zeros(2000)
        n_sent = 3000  # 3000 x 48 kB = 144 MB offered while nobody reads
        for i in range(1, n_sent + 1):
            pub.send(encode_binary_batch(payload, payload - 40.0, seq=i, epoch="e"))
        await asyncio.sleep(0.3)
        rss_peak = proc.memory_info().rss
        await collect(src, lambda g: False, timeout=1.0)
        received = src.decoder.messages - m0
        assert 0 < received < n_sent
        # the dropped tail shows as a gap once the next message arrives
        pub.send(encode_binary_batch(payload[:1], payload[:1], seq=n_sent + 1, epoch="e"))
        got = await collect(src, lambda g: any(b.seq == n_sent + 1 for b in g), timeout=3)
        assert got[-1].seq == n_sent + 1
        st = src.stats(time.time())
        assert src.decoder.messages - m0 == received + 1
        assert received + st.lost == n_sent
        assert st.lost > 0
        assert (rss_peak - rss0) < 100e6, f"RSS grew {(rss_peak - rss0) / 1e6:.0f} MB"
    finally:
        await src.aclose()
        pub.close()


async def test_aclose_does_not_hang_with_pending_poll():
    port = free_port()
    src = ZmqSource(f"tcp://127.0.0.1:{port}")
    task = asyncio.create_task(collect(src, lambda g: False, timeout=10))
    await asyncio.sleep(0.2)
    task.cancel()
    with contextlib.suppress(asyncio.CancelledError):
        await task
    t = time.monotonic()
    await src.aclose()
    assert time.monotonic() - t < 1.0


def test_bad_endpoint_is_a_user_error():
    from stream.errors import UserError
    with pytest.raises(UserError):
        ZmqSource("localhost:5557")


def test_status_change_names():
    assert status_change(None, "waiting") == "waiting"
    assert status_change("waiting", "receiving") == "receiving"
    assert status_change("receiving", "stale") == "stale"
    assert status_change("stale", "receiving") == "resumed"
    assert status_change("receiving", "receiving") is None
    assert status_change("receiving", "ended") == "ended"
    assert status_change("stale", "restarted") == "restarted"
    assert status_change("restarted", "receiving") is None


#: A publisher process as light to start as possible (the whole CLI takes seconds to
#: import on a loaded machine): the simulator's own publish loop, killed with SIGKILL.
SYNTH = """
import sys
from stream.synth import SynthConfig, run_publisher
run_publisher(sys.argv[1], SynthConfig(rate_sps=4000, batch=200))
"""


def _synth_proc(port: int) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-c", SYNTH, f"tcp://127.0.0.1:{port}"],
        cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        env={**os.environ, "PYTHONPATH": str(ROOT)})


@pytest.mark.timeout(60)
async def test_publisher_killed_and_restarted_goes_stale_then_resumes():
    port = free_port()
    proc = _synth_proc(port)
    src = ZmqSource(f"tcp://127.0.0.1:{port}", stale_after_s=0.6, reconnect_ivl_ms=100)
    monitor = Monitor(RollingPattern(EstimatorConfig()))
    events: list = []
    monitor.event_sinks.append(events.append)
    driver = LiveDriver(src, monitor, interval_s=0.05)
    stop = asyncio.Event()
    run = asyncio.create_task(driver.run(stop))
    proc2 = None
    try:
        async def wait_for(state: str, timeout: float) -> None:
            t = time.monotonic()
            while time.monotonic() - t < timeout:
                if any(e.kind == "status" and e.data["state"] == state for e in events):
                    return
                await asyncio.sleep(0.05)
            raise AssertionError(f"no {state!r} status; got {[e.data for e in events]}")

        await wait_for("receiving", 12)
        proc.send_signal(signal.SIGKILL)
        proc.wait(5)
        await wait_for("stale", 5)
        proc2 = _synth_proc(port)
        await wait_for("restarted", 15)
        st = src.stats(time.time())
        assert st.restarts == 1  # new epoch seen, same monitor and source
        assert st.lost == 0  # a restart is announced, never counted as loss
        assert monitor.last_tick is not None
        assert monitor.last_tick.source.state in ("restarted", "receiving")
    finally:
        stop.set()
        await asyncio.wait_for(run, 5)
        for p in (proc, proc2):
            if p is not None and p.poll() is None:
                p.send_signal(signal.SIGINT)
                p.wait(5)
    names = [e.data["state"] for e in events if e.kind == "status"]
    assert names[:2] == ["waiting", "receiving"] and names[-1] == "ended"
    assert names.index("stale") < names.index("restarted")
    assert "resumed" not in names


async def test_a_publisher_that_leaves_loses_nothing_already_received():
    """A finite sweep that publishes and exits: the disconnect must not throw away what
    sits in the queue (libzmq's own reconnect keeps it; the socket is never recreated
    with messages in it)."""
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    src = ZmqSource(ep)
    pub = Pub(ep, sndhwm=100_000)
    try:
        await _subscribed(src, pub)
        m0 = src.decoder.messages
        n = 1500
        payload = np.linspace(-60.0, 60.0, 512)
        for i in range(n):
            pub.send(encode_binary_batch(payload, payload * 0 - 40.0, seq=i, epoch="fin"))
        pub.sock.close(linger=2000)  # flush, then leave
        pub.ctx.term()
        await asyncio.sleep(1.0)  # the disconnect happens while nothing is read
        got = await collect(src, lambda g: src.decoder.messages - m0 >= n, timeout=10)
        assert src.decoder.messages - m0 == n
        assert sum(len(b) for b in got) == n * 512
        st = src.stats(time.time())
        assert st.lost == 0 and not st.rejected and src.reconnects == 0
    finally:
        await src.aclose()


async def test_a_message_over_the_byte_cap_is_dropped_frame_by_frame():
    port = free_port()
    ep = f"tcp://127.0.0.1:{port}"
    src = ZmqSource(ep, max_message_bytes=100_000)
    pub = Pub(ep)
    try:
        await _subscribed(src, pub)
        # each frame is under the cap (libzmq lets it through), the message is not
        pub.send([b"t", b"{" + b" " * 60_000 + b"}", b"\0" * 60_000])
        pub.send(encode_json_single(3.0, -40.0, None, 1000, "e"))
        got = await collect(src, lambda g: g[-1].angle_deg[-1] == 3.0, timeout=5)
        assert got[-1].angle_deg[-1] == 3.0
        st = src.stats(time.time())
        assert st.rejected == {"oversize": 1}
        assert st.reject_examples["oversize"].startswith("(120")
    finally:
        await src.aclose()
        pub.close()


async def test_ipc_socket_file_is_private_and_removed_on_close():
    from stream.zmq_source import private_ipc_endpoint
    ep = private_ipc_endpoint("feed")
    path = Path(ep[len("ipc://"):])
    assert (path.parent.stat().st_mode & 0o777) == 0o700
    src = ZmqSource(ep, bind=True)
    try:
        assert path.exists() and (path.stat().st_mode & 0o777) == 0o600
        pub = Pub(ep, bind=False)
        await asyncio.sleep(0.2)
        for i in range(50):
            pub.send(encode_json_single(1.0, -40.0, None, i, "e"))
            got = await collect(src, lambda g: len(g) > 0, timeout=0.05)
            if got:
                break
        assert got
        pub.close()
    finally:
        await src.aclose()
    assert not path.exists() and not path.parent.exists()


async def test_ipc_file_in_a_folder_of_the_users_choosing_is_0600(tmp_path):
    ep = f"ipc://{tmp_path}/feed.sock"
    src = ZmqSource(ep, bind=True)
    try:
        assert ((tmp_path / "feed.sock").stat().st_mode & 0o777) == 0o600
    finally:
        src.close()
    assert not (tmp_path / "feed.sock").exists() and tmp_path.exists()
