"""The radio edge: an IQ SUB socket and an angle SUB socket joined into sample batches.

IQ frames (raw cf32 or ci16, any length, items never split across frames) are reduced
to power blocks (:class:`stream.iq.IqReducer`); angle telemetry (wire v1 JSON shapes
without power keys) feeds :class:`stream.angle_join.AngleJoin`; the joined blocks leave
as :class:`SampleBatch` lists, so the one Monitor takes them like any other source
(:class:`stream.live.LiveSource`).

IQ time base
------------
The samples carry no timestamps.  Sample ``k`` is given the time ``t0 + k / fs``, with
the anchor ``t0`` taken from receive times: for the last frame of each drain,
``offset = rx - k_end / fs`` is at least the true start time (a frame cannot arrive
before its last sample was taken), so ``t0`` follows the smallest offset seen (the frame
that waited least); blocks not yet emitted are re-timed with it.  Offsets more than
``drop_tol_s`` above ``t0`` for ``drop_tol_s`` of receive time mean samples went missing
(a full queue drops whole frames; a mere delay is followed by a burst that catches up):
the time base is re-anchored from the first late frame on and the drop counted under
``lost``.  A constant latency in either path is part of the clock
lag that the join estimates from sweep directions.
"""

from __future__ import annotations

import asyncio
import json
import math
import time
from collections.abc import AsyncIterator, Callable
from typing import Any

import numpy as np
import zmq
import zmq.asyncio

from stream.angle_join import AngleJoin, JoinConfig, LagEstimate
from stream.batch import SampleBatch
from stream.errors import UserError
from stream.iq import ITEM_BYTES, Channel, IqReducer, decode_iq
from stream.rx_queue import DEFAULT_QUEUE_BYTES, QueueBudget
from stream.tick import SourceStats
from stream.wire_format import ANGLE_MAX_DEG, ANGLE_MIN_DEG
from stream.zmq_source import DEFAULT_HWM, check_endpoint

#: Frames (or angle messages) taken per drain before the loop gets a turn.
DRAIN_MAX: int = 256
#: Default threshold for a dropped-samples re-anchor, seconds.
DEFAULT_DROP_TOL_S: float = 0.25


def decode_angle_message(payload: bytes, rx_t: float) -> tuple[np.ndarray, np.ndarray]:
    """Times and angles from one telemetry message: ``{"t": T, "angle_deg": A}``, the
    same keys with arrays, or ``t0`` + ``dt`` (wire v1 shapes; power keys, if present,
    are ignored).  No ``t`` means the receive time.  Raises ``ValueError`` saying why."""
    try:
        obj = json.loads(payload)
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise ValueError("not JSON") from None
    if type(obj) is not dict or "angle_deg" not in obj:
        raise ValueError("no angle_deg")
    a = np.atleast_1d(np.asarray(obj["angle_deg"], dtype=np.float64))
    if a.ndim != 1 or a.size == 0:
        raise ValueError("angle_deg must be a number or a flat array")
    if "t" in obj and obj["t"] is not None:
        t = np.atleast_1d(np.asarray(obj["t"], dtype=np.float64))
        if t.size == 1 and a.size > 1:
            t = np.full(a.size, float(t[0]))
    elif "t0" in obj:
        t = float(obj["t0"]) + float(obj.get("dt", 0.0)) * np.arange(a.size)
    else:
        t = np.full(a.size, float(rx_t))
    if t.shape != a.shape:
        raise ValueError("t and angle_deg differ in length")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(a))):
        raise ValueError("non-finite t or angle")
    if a.min() < ANGLE_MIN_DEG or a.max() >= ANGLE_MAX_DEG:
        raise ValueError("angle outside [-180, 360)")
    return t, a


def _payload(frames: list[bytes]) -> bytes:
    """The data frame of a message (a leading topic frame is skipped)."""
    return frames[-1]


class IqSource:
    """Two SUB sockets (IQ, angle) turned into an async stream of SampleBatch lists."""

    def __init__(self, iq_endpoint: str, angle_endpoint: str, *, sample_rate_hz: float,
                 fmt: str = "cf32", block_s: float = 0.01, channel: Channel | None = None,
                 cal_db: float | None = None, join: JoinConfig | None = None,
                 bind: bool = False, iq_topic: bytes = b"", angle_topic: bytes = b"",
                 hwm: int = DEFAULT_HWM, queue_bytes: int = DEFAULT_QUEUE_BYTES,
                 stale_after_s: float = 3.0,
                 drop_tol_s: float = DEFAULT_DROP_TOL_S,
                 clock: Callable[[], float] = time.time, stream: str = "",
                 on_lag: Callable[[float, LagEstimate], None] | None = None) -> None:
        check_endpoint(iq_endpoint)
        check_endpoint(angle_endpoint)
        if fmt not in ITEM_BYTES:
            raise UserError(f"unknown IQ format {fmt!r}; use cf32 or ci16")
        if not sample_rate_hz > 0:
            raise UserError(f"sample rate must be positive, got {sample_rate_hz} Hz")
        block_len = int(round(block_s * sample_rate_hz))
        if block_len < 16:
            raise UserError(f"a block of {block_s} s at {sample_rate_hz:g} Hz holds "
                            f"{block_len} samples; use a longer --block-s (16 samples or more)")
        try:
            self.reducer = IqReducer(block_len, sample_rate_hz, channel=channel, cal_db=cal_db)
            self.join = AngleJoin(join or JoinConfig(), block_len / sample_rate_hz)
        except ValueError as exc:
            raise UserError(str(exc)) from None
        self.iq_endpoint = iq_endpoint
        self.angle_endpoint = angle_endpoint
        self.fmt = fmt
        self.sample_rate_hz = float(sample_rate_hz)
        self.block_s = block_len / self.sample_rate_hz
        self.stale_after_s = float(stale_after_s)
        self.drop_tol_s = float(drop_tol_s)
        self.stream = stream
        self.on_lag = on_lag
        self._clock = clock
        self._t0: float | None = None
        self._anchor_t = -math.inf  # IQ time from which the current anchor holds
        self._elevated: tuple[float, float, float] | None = None
        self.reanchors = 0
        self.frames = 0
        self.angle_messages = 0
        self.bad = {"bad_iq_frame": 0, "bad_angle": 0}
        self.noise_floor_db: float | None = None
        self._last_rx: float | None = None
        self._last_estimate: LagEstimate | None = None
        self._closed = False
        self._ctx = zmq.Context()
        self._socks: list[zmq.Socket] = []
        self._asocks: list[zmq.asyncio.Socket] = []
        # bytes, not messages, bound each socket's queue (stream.rx_queue)
        self._queues = [QueueBudget(queue_bytes, int(hwm)) for _ in range(2)]
        for ep, topic in ((iq_endpoint, iq_topic), (angle_endpoint, angle_topic)):
            s = self._ctx.socket(zmq.SUB)
            s.setsockopt(zmq.LINGER, 0)
            s.setsockopt(zmq.RCVHWM, int(hwm))
            s.setsockopt(zmq.SUBSCRIBE, topic)
            self._socks.append(s)
            try:
                s.bind(ep) if bind else s.connect(ep)
            except zmq.ZMQError as exc:
                self.close()
                raise UserError(f"cannot {'bind' if bind else 'connect'} {ep}: "
                                f"{exc.strerror}; check the address") from None

    # -- receiving ---------------------------------------------------------------------
    def _drain(self, k: int) -> list[list[bytes]]:
        s = self._socks[k]
        out = []
        biggest = 0
        for _ in range(DRAIN_MAX):
            try:
                m = s.recv_multipart(zmq.NOBLOCK)
            except zmq.Again:
                break
            out.append(m)
            size = sum(map(len, m))
            if size > biggest:
                biggest = size
        mark = self._queues[k].observe(biggest)
        if mark is not None:
            s.setsockopt(zmq.RCVHWM, mark)
        return out

    def _take_angles(self, msgs: list[list[bytes]], rx: float) -> None:
        ts, angs = [], []
        for m in msgs:
            try:
                t, a = decode_angle_message(_payload(m), rx)
            except (ValueError, TypeError):
                self.bad["bad_angle"] += 1
                continue
            ts.append(t)
            angs.append(a)
            self.angle_messages += 1
        if ts:
            self.join.add_angles(np.concatenate(ts), np.concatenate(angs))

    def _anchor(self, rx: float, k_first: int) -> None:
        """Update the time base from the last frame of a drain (module docstring)."""
        fs = self.sample_rate_hz
        offset = rx - self.reducer.count / fs
        if self._t0 is None:
            self._t0 = offset
            return
        excess = offset - self._t0
        if excess < 0.0:  # this frame waited less: a better anchor since the last drop
            self.join.retime(excess, since_t=self._anchor_t)
            self._t0 = offset
            self._elevated = None
        elif excess <= self.drop_tol_s:
            self._elevated = None
        elif self._elevated is None:  # late: a delay, or lost samples? wait and see
            self._elevated = (rx, excess, self._t0 + k_first / fs)
        else:
            since_rx, low, from_t = self._elevated
            low = min(low, excess)
            self._elevated = (since_rx, low, from_t)
            if rx - since_rx >= self.drop_tol_s:  # still late: samples were lost
                self.join.retime(low, since_t=from_t)
                self._t0 += low
                self._anchor_t = from_t + low
                self._elevated = None
                self.reanchors += 1

    def _take_iq(self, msgs: list[list[bytes]], rx: float) -> None:
        mids, pows, floors = [], [], []
        k_first = self.reducer.count
        for m in msgs:
            try:
                x = decode_iq(_payload(m), self.fmt)
            except ValueError:
                self.bad["bad_iq_frame"] += 1
                continue
            self.frames += 1
            b = self.reducer.feed(x)
            if len(b):
                mids.append(b.mid_index)
                pows.append(b.power_db)
                floors.append(b.floor_db)
        if not self.frames:
            return
        self._anchor(rx, k_first)
        if mids:
            mid = np.concatenate(mids)
            f = np.concatenate(floors)
            if np.any(np.isfinite(f)):
                self.noise_floor_db = float(np.nanmedian(f))
            self.join.add_blocks(self._t0 + mid / self.sample_rate_hz, np.concatenate(pows), f)

    def _joined(self, rx: float) -> list[SampleBatch]:
        j = self.join.pop()
        est = self.join.estimate
        if est is not None and est is not self._last_estimate:
            self._last_estimate = est
            if self.on_lag is not None:
                self.on_lag(rx, est)
        if not len(j):
            return []
        return [SampleBatch(j.t, j.angle_deg, j.power_db, rx_t=rx, stream=self.stream,
                            calibrated=self.reducer.calibrated,
                            extra={"noise_floor_db": self.noise_floor_db,
                                   "lag_s": self.join.lag_s})]

    async def batches(self) -> AsyncIterator[list[SampleBatch]]:
        """Yield the joined batches of each wake-up (never an empty list)."""
        if not self._asocks:
            self._asocks = [zmq.asyncio.Socket.from_socket(s) for s in self._socks]
        poller = zmq.asyncio.Poller()
        for a in self._asocks:
            poller.register(a, zmq.POLLIN)
        while not self._closed:
            try:
                await poller.poll(200)
            except zmq.ZMQError:
                if self._closed:
                    return
                raise
            if self._closed:
                return
            angles = self._drain(1)
            frames = self._drain(0)
            rx = self._clock()  # after the drain: no frame arrived later than this
            if angles:
                self._take_angles(angles, rx)
            if frames:
                self._take_iq(frames, rx)
                self._last_rx = rx
            out = self._joined(rx)
            if out:
                yield out
            await asyncio.sleep(0)

    # -- status ------------------------------------------------------------------------
    def state(self, now: float) -> str:
        if self._closed:
            return "ended"
        if self._last_rx is None:
            return "waiting"
        if now - self._last_rx > self.stale_after_s:
            return "stale"
        return "receiving"

    def stats(self, now: float) -> SourceStats:
        """Messages are IQ frames plus angle messages; ``rejected`` counts bad frames and
        messages, and blocks dropped by the join (``angle_gap``, ``settling``); ``lost``
        counts re-anchors of the IQ time base (each means frames went missing)."""
        rejected = {k: v for k, v in self.bad.items() if v}
        rejected.update({k: v for k, v in self.join.counts.dropped.items() if v})
        return SourceStats(state=self.state(now), messages=self.frames + self.angle_messages,
                           rejected=rejected, lost=self.reanchors)

    def info(self) -> dict[str, Any]:
        """What a session's metadata keeps: the settings and the lag used."""
        est = self.join.estimate
        ch = self.reducer.channel
        return {
            "kind": "iq", "iq_endpoint": self.iq_endpoint,
            "angle_endpoint": self.angle_endpoint, "format": self.fmt,
            "sample_rate_hz": self.sample_rate_hz, "block_s": self.block_s,
            "channel": None if ch is None else {"offset_hz": ch.offset_hz,
                                                 "bw_hz": ch.bw_hz, "nperseg": ch.nperseg},
            "cal_db": self.reducer.cal_db,
            "lag_mode": "auto" if self.join.config.lag_s is None else "fixed",
            "lag_s": self.join.lag_s,
            "lag_estimate": None if est is None else est.to_dict(),
            "dwell": self.join.config.dwell, "settle_s": self.join.config.settle_s,
            "angle_gap_s": self.join.config.gap_s,
        }

    async def aclose(self) -> None:
        self.close()
        await asyncio.sleep(0)

    def close(self) -> None:
        """Close both sockets with linger 0 and end the private context (never hangs)."""
        if self._closed:
            return
        self._closed = True
        for a in self._asocks:
            a.close(linger=0)
        for s in self._socks:
            if not s.closed:
                s.close(linger=0)
        self._ctx.term()


def lag_text(est: LagEstimate | None) -> str:
    """The lag estimate as a person reads it, e.g. ``lag 41.2 +/- 1.3 ms (3 pairs)``."""
    if est is None:
        return "lag: no estimate yet"
    sig = ""
    if est.sigma_s is not None and math.isfinite(est.sigma_s):
        sig = f" +/- {1e3 * est.sigma_s:.1f}" if est.sigma_s >= 5e-5 else " +/- <0.1"
    return f"lag {1e3 * est.lag_s:.1f}{sig} ms ({est.pairs} pair{'s' * (est.pairs != 1)})"
