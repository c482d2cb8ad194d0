"""ZeroMQ SUB source: receives wire-format messages and yields decoded batches.

Draining strategy (measured with ``python bench/bench_ingest.py --drain``): the source
awaits readiness once with ``zmq.asyncio`` (``await poll``), then drains up to
``drain_max`` messages (or ``drain_budget_s`` of work) with non-blocking receives on the
plain socket underneath, decodes them in one go, yields, and gives the event loop a
turn (``asyncio.sleep(0)``).  Measured on the project's 2-core machine, pyzmq 27.3 /
libzmq 4.3.5, a publisher process flooding 75-byte JSON singles, a 10 ms timer task
alongside, medians of 3 runs of 2 s (the machine was shared with other jobs, load
average about 6, so the absolute rates are low; the comparison is what counts):

====================================  ===========  ===============  ==============
consumer                              messages/s   timer runs/s     worst timer gap
====================================  ===========  ===============  ==============
``await recv_multipart()`` per msg    10,300       0 (starved)      --
await poll + drain 2,000 (this one)   99,900       45.7             53 ms
sync socket in a thread + hand-off    107,500      50.6             120 ms
====================================  ===========  ===============  ==============

The thread is no faster here (it competes with the loop for the GIL) and delays the
timer more, so the awaited-poll-then-drain design is used; a time budget per drain
(5 ms by default) keeps the loop's latency bounded whatever the message size.

Robustness (figures in docs/reliability.md):

* a byte budget for the receive queue (``queue_bytes``, 64 MiB): libzmq's high-water
  mark counts messages, so the source lowers it on the live socket once it sees large
  ones (budget / largest size, :mod:`stream.rx_queue`); a burst of large batches then
  waits in the publisher instead of in this process;
* options are set before connect/bind: receive high-water mark, maximum message size
  (per frame, enforced by libzmq), ZMTP heartbeats (a frozen publisher is dropped within
  ``heartbeat_timeout_ms``) and a fixed reconnect interval (no back-off:
  ``RECONNECT_IVL_MAX`` 0), so a restarted publisher is found again within about one
  interval (100 ms);
* a disconnect never discards what was received: libzmq's own reconnect keeps the queue.
  Only when libzmq gives a peer up without retrying (it does so after a protocol error,
  e.g. a frame over the maximum size) is the socket recreated, and only once the queue
  has been drained and decoded;
* bounded work per loop turn: the drain checks its time budget after every message and
  stops after ``drain_bytes_max`` bytes, so decoding what it took stays bounded too; a
  message's frames are received one at a time, frames past
  :data:`stream.wire_format.MAX_PARTS` or past ``max_message_bytes`` in total are dropped as
  they arrive (never accumulated) and the message counted as refused;
* load shedding: when the queue has not been seen empty for ``shed_after_s`` the
  receiver is behind; it then drops queued messages unread (cheap) until the queue is
  empty, counting them as lost (``SourceStats.shed``, which the input alarm sees),
  rather than falling further behind;
* ``ipc://`` endpoints it binds get socket files of mode 0600 (created under umask 077),
  removed again on close; :func:`private_ipc_endpoint` gives an address in a fresh
  0700 folder;
* ``aclose`` closes every socket with linger 0 and terminates the private context.
"""

from __future__ import annotations

import asyncio
import contextlib
import itertools
import os
import shutil
import tempfile
import time
from collections.abc import AsyncIterator, Callable
from typing import Any

import zmq
import zmq.asyncio
from zmq.utils.monitor import recv_monitor_message

from stream.batch import SampleBatch
from stream.curve import AUTH_FAILED, HANDSHAKE_FAILED_EVENTS, CurveConfig, CurveGuard
from stream.errors import UserError
from stream.rx_queue import DEFAULT_QUEUE_BYTES, QueueBudget
from stream.tick import RESTART_SHOW_S, SourceStats
from stream.wire import Decoder, Refused
from stream.wire_format import DEFAULT_MAX_MESSAGE_BYTES, FORMATS, MAX_PARTS

#: Default receive high-water mark, messages.
DEFAULT_HWM: int = 20_000
#: Messages drained per wake-up before the event loop gets a turn.
DEFAULT_DRAIN_MAX: int = 2_000
#: Parts discarded per drain when a message has too many.
_DISCARD_BUDGET: int = 20_000
#: Bytes taken per drain before decoding them (bounds one loop turn's decoding work).
DEFAULT_DRAIN_BYTES: int = 2 * 1024 * 1024
#: Default reconnect interval, ms (fixed: no exponential back-off).
DEFAULT_RECONNECT_IVL_MS: int = 100
#: A queue not seen empty for this long means the receiver is behind: shed, seconds.
DEFAULT_SHED_AFTER_S: float = 1.0

_MONITOR_EVENTS = (zmq.EVENT_CONNECTED | zmq.EVENT_DISCONNECTED | zmq.EVENT_ACCEPTED
                   | zmq.EVENT_HANDSHAKE_SUCCEEDED | zmq.EVENT_CLOSED
                   | zmq.EVENT_CONNECT_RETRIED | zmq.EVENT_CONNECT_DELAYED
                   | HANDSHAKE_FAILED_EVENTS)
_ENDPOINT_SCHEMES = ("tcp://", "ipc://", "inproc://")
_counter = itertools.count()


def private_ipc_endpoint(name: str = "lobewatch") -> str:
    """An ``ipc://`` address inside a fresh folder only this user can enter (0700);
    a :class:`ZmqSource` that binds it removes the folder again on close."""
    folder = tempfile.mkdtemp(prefix="lobewatch-ipc-")  # mkdtemp makes it 0700
    return f"ipc://{os.path.join(folder, name)}"


def _ipc_path(endpoint: str) -> str | None:
    return endpoint[len("ipc://"):] if endpoint.startswith("ipc://") else None


def check_endpoint(endpoint: str) -> str:
    """Refuse an endpoint libzmq would not understand, with a one-line hint."""
    if not isinstance(endpoint, str) or not endpoint.startswith(_ENDPOINT_SCHEMES):
        raise UserError(f"endpoint {endpoint!r} is not a ZeroMQ address; use e.g. "
                        "tcp://127.0.0.1:5557 or ipc:///path/to/socket")
    return endpoint


class ZmqSource:
    """A SUB socket turned into an async stream of :class:`SampleBatch` lists.

    Time comes from ``clock`` (Unix seconds): it stamps each drain's receive time and
    decides the state (``waiting`` until the first sample, ``receiving``, ``stale``
    after ``stale_after_s`` without samples, ``restarted`` for
    :data:`stream.tick.RESTART_SHOW_S` after a new publisher epoch, ``ended`` once
    closed).  ``mono`` (seconds, any origin) times the work budgets and shedding.
    """

    def __init__(self, endpoint: str, *, bind: bool = False, topic: bytes = b"",
                 fmt: str = "auto", hwm: int = DEFAULT_HWM,
                 max_message_bytes: int = DEFAULT_MAX_MESSAGE_BYTES,
                 stale_after_s: float = 3.0, clock: Callable[[], float] = time.time,
                 drain_max: int = DEFAULT_DRAIN_MAX, drain_budget_s: float = 0.005,
                 batch_wait_s: float = 0.01,
                 heartbeat_ivl_ms: int = 1000,
                 heartbeat_timeout_ms: int = 3000,
                 reconnect_ivl_ms: int = DEFAULT_RECONNECT_IVL_MS,
                 poll_ms: int = 200, curve: CurveConfig | None = None,
                 drain_bytes_max: int = DEFAULT_DRAIN_BYTES,
                 shed_after_s: float = DEFAULT_SHED_AFTER_S,
                 queue_bytes: int = DEFAULT_QUEUE_BYTES,
                 mono: Callable[[], float] = time.perf_counter) -> None:
        self.endpoint = check_endpoint(endpoint)
        if fmt not in FORMATS:
            raise UserError(f"unknown format {fmt!r}; choose from {', '.join(FORMATS)}")
        self.bind = bool(bind)
        self.topic = topic.encode() if isinstance(topic, str) else bytes(topic)
        self.hwm = int(hwm)
        self.max_message_bytes = int(max_message_bytes)
        # the mark actually set: from a byte budget and the sizes seen (stream.rx_queue)
        self.queue = QueueBudget(queue_bytes, self.hwm)
        self.stale_after_s = float(stale_after_s)
        self.drain_max = int(drain_max)
        self.drain_budget_s = float(drain_budget_s)
        self.batch_wait_s = float(batch_wait_s)
        self.drain_bytes_max = int(drain_bytes_max)
        self.shed_after_s = float(shed_after_s)
        self._mono = mono
        self._drain_full = False
        self._behind_since: float | None = None  # queue last seen non-empty since then
        self._disconnected_at: float | None = None
        self._retrying = False
        self._ipc_file: str | None = None
        self._ipc_folder: str | None = None
        self.heartbeat_ivl_ms = int(heartbeat_ivl_ms)
        self.heartbeat_timeout_ms = int(heartbeat_timeout_ms)
        self.reconnect_ivl_ms = int(reconnect_ivl_ms)
        self.poll_ms = int(poll_ms)
        self._clock = clock
        self.decoder = Decoder(fmt, self.max_message_bytes)
        self.reconnects = 0
        self.disconnects = 0
        self.connected = False
        self._last_rx: float | None = None
        self._closed = False
        self._discarding = False
        self._need_reopen = False
        self._ctx = zmq.Context()
        # CURVE keys per socket; when binding, the allow list's ZAP handler (stream.curve)
        self.curve = CurveGuard(curve, self._ctx) if curve is not None else None
        self._sock: zmq.Socket | None = None
        self._asock: zmq.asyncio.Socket | None = None
        self._mon: zmq.Socket | None = None
        self._open()

    # -- socket life cycle -------------------------------------------------------------
    def _open(self) -> None:
        s = self._ctx.socket(zmq.SUB)
        s.setsockopt(zmq.LINGER, 0)
        s.setsockopt(zmq.RCVHWM, self.queue.hwm)
        s.setsockopt(zmq.MAXMSGSIZE, self.max_message_bytes)
        s.setsockopt(zmq.HEARTBEAT_IVL, self.heartbeat_ivl_ms)
        s.setsockopt(zmq.HEARTBEAT_TIMEOUT, self.heartbeat_timeout_ms)
        s.setsockopt(zmq.HEARTBEAT_TTL, 2 * self.heartbeat_timeout_ms)
        s.setsockopt(zmq.RECONNECT_IVL, self.reconnect_ivl_ms)
        s.setsockopt(zmq.RECONNECT_IVL_MAX, 0)  # no back-off: find a restart at once
        s.setsockopt(zmq.SUBSCRIBE, self.topic)
        if self.curve is not None:
            self.curve.apply(s)
        addr = f"inproc://lobewatch-monitor-{id(self)}-{next(_counter)}"
        s.monitor(addr, _MONITOR_EVENTS)
        mon = self._ctx.socket(zmq.PAIR)
        mon.setsockopt(zmq.LINGER, 0)
        mon.connect(addr)
        try:
            if self.bind:
                self._bind(s)
            else:
                s.connect(self.endpoint)
        except zmq.ZMQError as exc:
            self._close_sockets(s, mon)
            if self.curve is not None:
                self.curve.close()
            raise UserError(f"cannot {'bind' if self.bind else 'connect'} "
                            f"{self.endpoint}: {exc.strerror}; check the address "
                            "(is the port in use?)") from None
        self._sock = s
        self._mon = mon
        self._asock = None  # the asyncio view is made inside the running loop
        self._discarding = False
        self._need_reopen = False
        self._disconnected_at = None

    def _bind(self, s: zmq.Socket) -> None:
        """Bind; an ``ipc://`` socket file is created 0600 (umask 077 around the bind,
        then chmod) and remembered so close removes it."""
        path = _ipc_path(self.endpoint)
        if path is None:
            s.bind(self.endpoint)
            return
        old = os.umask(0o077)
        try:
            s.bind(self.endpoint)
        finally:
            os.umask(old)
        with contextlib.suppress(OSError):
            os.chmod(path, 0o600)
        self._ipc_file = path
        folder = os.path.dirname(path)
        if os.path.basename(folder).startswith("lobewatch-ipc-"):
            self._ipc_folder = folder  # made by private_ipc_endpoint: ours to remove

    def _remove_ipc(self) -> None:
        if self._ipc_file is not None:
            with contextlib.suppress(OSError):
                os.unlink(self._ipc_file)
            self._ipc_file = None
        if self._ipc_folder is not None:
            shutil.rmtree(self._ipc_folder, ignore_errors=True)
            self._ipc_folder = None

    def _close_sockets(self, s: zmq.Socket | None, mon: zmq.Socket | None) -> None:
        if s is not None and not s.closed:
            try:
                s.disable_monitor()
            except zmq.ZMQError:
                pass
            s.close(linger=0)
        if mon is not None and not mon.closed:
            mon.close(linger=0)

    def _reopen(self) -> None:
        """Recreate the socket (after a disconnect libzmq may not retry)."""
        asock, s, mon = self._asock, self._sock, self._mon
        self._asock = self._sock = self._mon = None
        if asock is not None:
            asock.close(linger=0)
        self._close_sockets(s, mon)
        self.reconnects += 1
        self.connected = False
        self._open()

    def _poll_monitor(self) -> None:
        mon = self._mon
        if mon is None:
            return
        while True:
            try:
                ev = recv_monitor_message(mon, zmq.NOBLOCK)
            except zmq.ZMQError:  # zmq.Again included: no more events
                break
            kind = ev.get("event")
            if self.curve is not None and kind is not None and kind & HANDSHAKE_FAILED_EVENTS:
                self.decoder.reject(AUTH_FAILED)  # a peer without the right keys
            if kind == zmq.EVENT_DISCONNECTED:
                self.disconnects += 1
                self.connected = False
                if not self.bind:
                    # libzmq reconnects by itself (keeping the queue) unless it gave
                    # the peer up; a retry event within a few intervals tells which
                    self._disconnected_at = self._mono()
                    self._retrying = False
            elif kind in (zmq.EVENT_CONNECT_RETRIED, zmq.EVENT_CONNECT_DELAYED):
                self._retrying = True
            elif kind in (zmq.EVENT_CONNECTED, zmq.EVENT_ACCEPTED,
                          zmq.EVENT_HANDSHAKE_SUCCEEDED):
                self.connected = True
                self._disconnected_at = None
        if (self._disconnected_at is not None and not self._retrying
                and self._mono() - self._disconnected_at
                > 3 * self.reconnect_ivl_ms / 1000.0 + 0.1):
            self._need_reopen = True  # given up by libzmq: recreate once drained
            self._disconnected_at = None

    # -- receiving ---------------------------------------------------------------------
    def _drain(self) -> list[Any]:
        """Up to ``drain_max`` messages or ``drain_bytes_max`` bytes, non-blocking,
        checking the time budget after every message.  A message with too many frames
        or too many bytes is dropped frame by frame as it is read and stands in the list
        as a :class:`stream.wire.Refused` (so it is counted in order)."""
        s = self._sock
        assert s is not None
        recv = s.recv
        msgs: list[Any] = []
        budget = _DISCARD_BUDGET
        if self._discarding:  # finish throwing away an over-long message
            while budget > 0:
                try:
                    recv(zmq.NOBLOCK, copy=False)
                except zmq.Again:
                    return msgs
                budget -= 1
                if not s.getsockopt(zmq.RCVMORE):
                    self._discarding = False
                    break
            else:
                return msgs
        self._drain_full = True  # until the queue is seen empty
        more = s.getsockopt
        rcvmore = zmq.RCVMORE
        noblock = zmq.NOBLOCK
        mono = self._mono
        deadline = mono() + self.drain_budget_s
        bytes_left = self.drain_bytes_max
        max_bytes = self.max_message_bytes
        biggest = 0
        for _ in range(self.drain_max):
            try:
                f = recv(noblock)
            except zmq.Again:
                self._drain_full = False
                break
            if not more(rcvmore):
                msgs.append([f])
                size = len(f)
                bytes_left -= size
                if size > biggest:
                    biggest = size
            else:
                parts: list[Any] = [f]
                total = len(f)
                nframes = 1
                while True:
                    g = recv(noblock, copy=False)  # dropped unread if over a cap
                    nframes += 1
                    if nframes <= MAX_PARTS:
                        total += len(g)
                        if total <= max_bytes:
                            parts.append(g.bytes)
                    if not more(rcvmore):
                        break
                    budget -= 1
                    if budget <= 0:
                        self._discarding = True
                        break
                if nframes > MAX_PARTS:
                    msgs.append(Refused("too_many_parts", f"({nframes}+ frames)"
                                        if self._discarding else f"({nframes} frames)"))
                elif total > max_bytes:
                    msgs.append(Refused("oversize", f"({total} bytes in {nframes} frames)"))
                else:
                    msgs.append(parts)
                bytes_left -= total
                if total > biggest:
                    biggest = total
                if self._discarding:
                    break
            if bytes_left <= 0 or mono() > deadline:
                break
        if biggest > self.queue.largest:
            mark = self.queue.observe(biggest)
            if mark is not None:  # bytes, not messages, bound the queue (stream.rx_queue)
                s.setsockopt(zmq.RCVHWM, mark)
        return msgs

    def _shed(self) -> int:
        """Drop queued messages unread until the queue is empty (or the turn's budget is
        spent), counting them as shed; returns how many."""
        s = self._sock
        assert s is not None
        recv = s.recv
        more = s.getsockopt
        n = 0
        deadline = self._mono() + 4 * self.drain_budget_s
        while True:
            try:
                recv(zmq.NOBLOCK, copy=False)
            except zmq.Again:
                self._behind_since = None
                self._drain_full = False
                break
            while more(zmq.RCVMORE):
                recv(zmq.NOBLOCK, copy=False)
            n += 1
            if not n & 63 and self._mono() > deadline:
                break
        if n:
            self.decoder.shed_messages(n)
        return n

    def _check_behind(self) -> None:
        """Shed when the queue has not been seen empty for ``shed_after_s``."""
        if not self._drain_full:
            self._behind_since = None
            return
        now = self._mono()
        if self._behind_since is None:
            self._behind_since = now
        elif now - self._behind_since >= self.shed_after_s:
            self._shed()

    async def batches(self) -> AsyncIterator[list[SampleBatch]]:
        """Yield the decoded batches of each drain (never an empty list).

        After a drain that emptied the queue the source sleeps ``batch_wait_s`` before
        looking again, so at moderate rates each wake-up takes many messages at once
        (the fixed cost of a wake-up dominates otherwise); a drain that stopped on its
        count, byte or time budget only yields the loop a turn.
        """
        while not self._closed:
            msgs = self._drain()
            self._poll_monitor()
            if not msgs and self._need_reopen and not self._drain_full:
                # libzmq gave the peer up: recreate the socket, but only with the queue
                # empty, so nothing already received is thrown away
                await asyncio.sleep(self.reconnect_ivl_ms / 1000.0)
                if self._closed:
                    return
                msgs = self._drain()
                if not msgs and not self._drain_full:
                    self._reopen()
                    continue
            if not msgs:
                asock = self._asock
                if asock is None:
                    assert self._sock is not None
                    asock = self._asock = zmq.asyncio.Socket.from_socket(self._sock)
                try:
                    ready = await asock.poll(self.poll_ms, zmq.POLLIN)
                except zmq.ZMQError:
                    if self._closed:
                        return
                    self._need_reopen = True
                    continue
                if not ready or self._closed:
                    self._poll_monitor()
                    continue
                msgs = self._drain()
            if msgs:
                rx = self._clock()
                out = self.decoder.decode_many(msgs, rx)
                if out:
                    self._last_rx = rx
                    yield out
                if self._closed:
                    return
            self._check_behind()
            if self._drain_full or self.batch_wait_s <= 0:
                await asyncio.sleep(0)  # a full socket must not starve the loop
            else:
                await asyncio.sleep(self.batch_wait_s)

    # -- status ------------------------------------------------------------------------
    def state(self, now: float) -> str:
        """``waiting``, ``receiving``, ``stale``, ``restarted`` or ``ended`` at ``now``."""
        if self._closed:
            return "ended"
        if self._last_rx is None:
            return "waiting"
        if now - self._last_rx > self.stale_after_s:
            return "stale"
        r = self.decoder.last_restart_rx
        if r is not None and 0.0 <= now - r < RESTART_SHOW_S:
            return "restarted"
        return "receiving"

    def stats(self, now: float) -> SourceStats:
        return self.decoder.stats(self.state(now))

    @property
    def last_rx(self) -> float | None:
        """Receive time of the last drain that yielded samples."""
        return self._last_rx

    async def aclose(self) -> None:
        """Close the sockets with linger 0 and terminate the context (never hangs)."""
        if self._closed:
            return
        self._close_all_sockets()
        await asyncio.sleep(0)  # let the loop drop its watch on the closed sockets
        self._ctx.term()

    def close(self) -> None:
        """Synchronous close for code outside an event loop."""
        if self._closed:
            return
        self._close_all_sockets()
        self._ctx.term()

    def _close_all_sockets(self) -> None:
        self._closed = True
        asock, s, mon = self._asock, self._sock, self._mon
        self._asock = self._sock = self._mon = None
        if asock is not None:
            asock.close(linger=0)
        self._close_sockets(s, mon)
        if self.curve is not None:
            self.curve.close()  # its ZAP socket would hold ctx.term() up
        self._remove_ipc()
