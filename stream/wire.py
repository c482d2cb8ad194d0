"""Wire format version 1: ZeroMQ messages carrying (t, angle, power) samples.

One SUB socket accepts four shapes of message (see ``docs/wire-format.md``); each may be
preceded by one topic frame:

* JSON single   ``{"angle_deg": 12.5, "power_dbm": -31.2, "t": 1767225600.125, "seq": 42}``
* JSON batch    the same keys with arrays of equal length; ``t`` an array, or ``t0``+``dt``
* binary batch  a JSON header frame ``{"v": 1, "count": N, "dtype": "<f8", "fields": [...]}``
  followed by one raw little-endian data frame, **field-major** (all N values of the first
  field, then all N of the second ...), decoded zero-copy with ``np.frombuffer``
* raw-f32       one frame of interleaved little-endian float32 ``(angle_deg, power_db)``
  pairs, no header; only when the decoder is built with ``fmt="raw-f32"``.

The :class:`Decoder` never raises: a message it cannot use is dropped and counted under a
stable snake_case reason (:data:`REJECT_REASONS`), and the start of the first message
refused for each reason is kept so a publisher's author sees what to fix.  Every message
is counted once: accepted, rejected, or lost.  ``seq`` gaps are counted as lost messages
per ``(topic, epoch)``, less the messages refused in between whose ``seq`` could not be
read (they are already counted as rejected); a repeated ``seq`` is ``duplicate`` and one
that goes back within an epoch ``seq_backward``.  A new ``epoch`` is a publisher restart:
the messages missing at the start of the new epoch are the slow-joiner loss
(``lost_after_restart``), which is not counted as lost.  Two epochs that keep
alternating on one topic are two senders (reported once in ``senders``), not restarts.

Speed: JSON singles are parsed with one ``json.loads`` and a fast path of a few type and
range checks; consecutive singles of one stream received in one drain are coalesced into
one :class:`SampleBatch` (:meth:`Decoder.decode_many`) so the estimator sees few large
batches.  Only a message failing the fast path goes through the detailed checks that name
the reason.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np

from stream.batch import SampleBatch
from stream.tick import SourceStats
from stream.wire_format import (
    ANGLE_MAX_DEG,
    ANGLE_MIN_DEG,
    DEFAULT_MAX_MESSAGE_BYTES,
    FORMATS,
    MAX_PARTS,
    MAX_SAMPLES_PER_MESSAGE,
    POWER_MAX_DB,
    POWER_MIN_DB,
    SEQ_LIMIT,
    Reject,
    parse_binary,
    parse_json_object,
    parse_raw_f32,
    ranges_ok,
    seq_epoch,
)

#: Consecutive batches of one stream decoded together are merged up to this many
#: samples: the estimator's cost is mostly per call below about 10,000 samples.
MERGE_SAMPLES: int = 8192
#: Bytes of a refused message kept as its example (``SourceStats.reject_examples``).
EXAMPLE_BYTES: int = 80
#: Epochs remembered per topic to recognise two senders alternating.
_EPOCHS_KEPT: int = 8
#: A ``seq`` at most this far below the last one in its epoch is ``seq_backward``;
#: further back the numbering started again (a restart, or another sender).  Without
#: an epoch any step back is taken as the numbering starting again.
REORDER_WINDOW: int = 1000

class Refused(NamedTuple):
    """A message the socket layer already refused while reading it (too many frames or
    bytes): it stands in the drain's list so it is counted in order."""

    reason: str
    example: str


class _Bad:
    """Placeholder for a frame that failed to parse, with the reason (counted in order
    with the other messages, so a seq gap after it sees it)."""

    __slots__ = ("reason",)

    def __init__(self, reason: str) -> None:
        self.reason = reason


_OVERSIZE, _EMPTY, _BAD_JSON = _Bad("oversize"), _Bad("empty"), _Bad("bad_json")


@dataclass
class _StreamSeq:
    """Numbering state of one topic: the current epoch and its last ``seq``, plus the
    last ``seq`` of the other epochs seen recently (a second sender's)."""

    epoch: str | None
    last_seq: int
    #: other numberings seen on this topic: [epoch, last_seq, restart_lost, flagged]
    others: list[list[Any]] | None = None
    senders: int = 1
    restart_lost: int | None = None  # slow-joiner count when it began as a restart
    flagged: bool = False            # known to be one of several senders


# ---------------------------------------------------------------------------------------
# decoder
# ---------------------------------------------------------------------------------------
class Decoder:
    """Turns received ZeroMQ messages into batches, counting what it refuses and loses.

    ``fmt`` is ``"auto"`` (JSON single, JSON batch, binary batch) or ``"raw-f32"``.
    Counters are cumulative; :meth:`stats` reports them as a :class:`SourceStats`.
    """

    def __init__(self, fmt: str = "auto",
                 max_message_bytes: int = DEFAULT_MAX_MESSAGE_BYTES,
                 max_samples: int = MAX_SAMPLES_PER_MESSAGE,
                 merge_samples: int = MERGE_SAMPLES) -> None:
        if fmt not in FORMATS:
            raise ValueError(f"unknown format {fmt!r}; choose from {', '.join(FORMATS)}")
        self.fmt = fmt
        self.max_message_bytes = int(max_message_bytes)
        self.max_samples = int(max_samples)
        self.merge_samples = int(merge_samples)
        self.messages = 0
        self.samples = 0
        self.rejected: dict[str, int] = {}
        self.reject_examples: dict[str, str] = {}
        self.lost = 0
        self.shed = 0
        self.restarts = 0
        self.lost_after_restart = 0
        self.senders = 0
        #: Receive time of the last restart (``None`` once explained as a second sender).
        self.last_restart_rx: float | None = None
        self._rx = 0.0
        # messages refused or shed since the last numbered one whose seq was not read:
        # a following seq gap is first filled by them (they are already counted)
        self._unnumbered = 0
        self._seq: dict[str, _StreamSeq] = {}
        self._layouts: dict[tuple, tuple] = {}  # checked binary header layouts

    # -- counters ----------------------------------------------------------------------
    def reject(self, reason: str, n: int = 1, example: Any = None) -> None:
        """Count ``n`` messages refused for ``reason`` (also used by the socket layer);
        ``example`` (bytes or text) is kept for the first refusal of each reason."""
        self.rejected[reason] = self.rejected.get(reason, 0) + n
        self._unnumbered += n
        if reason not in self.reject_examples:
            self.reject_examples[reason] = excerpt(example)

    def shed_messages(self, n: int) -> None:
        """Count ``n`` messages dropped unread because the receiver fell behind: they
        are lost (``lost`` and ``shed``), never also counted as a ``seq`` gap."""
        self.shed += n
        self.lost += n
        self._unnumbered += n

    def stats(self, state: str = "waiting") -> SourceStats:
        return SourceStats(state=state, messages=self.messages, rejected=dict(self.rejected),
                           lost=self.lost, restarts=self.restarts,
                           lost_after_restart=self.lost_after_restart, shed=self.shed,
                           senders=self.senders,
                           reject_examples=dict(self.reject_examples))

    def _account(self, stream: str, seq: int | None, epoch: str | None) -> str | None:
        """Seq accounting for one message; the reject reason (``duplicate``,
        ``seq_backward``) when its number says it must not be used, else ``None``."""
        if seq is None:
            return None
        st = self._seq.get(stream)
        if st is None:  # first contact: we joined whenever; nothing to call lost
            self._seq[stream] = _StreamSeq(epoch, seq)
            self.senders = max(self.senders, 1)
            self._unnumbered = 0
            return None
        if epoch == st.epoch:
            last = st.last_seq
            if seq == last:
                return "duplicate"
            if epoch is not None and last - REORDER_WINDOW <= seq < last:
                return "seq_backward"  # (without an epoch, going back is a restart)
            if seq > last + REORDER_WINDOW and self._switch(st, epoch, seq):
                return self._account(stream, seq, epoch)
            if seq > last:
                gap = seq - last - 1 - self._unnumbered
                if gap > 0:
                    self.lost += gap
                st.last_seq = seq
                self._unnumbered = 0
                return None
            # numbering far back in the same epoch: another sender, or it started again
            if self._switch(st, epoch, seq):
                return self._account(stream, seq, epoch)
        elif self._switch(st, epoch, seq):
            return self._account(stream, seq, epoch)
        # A new epoch (or, in the same epoch, numbering that started again): a restart.
        # The messages before this one in the new numbering never arrived: slow joiner.
        self.restarts += 1
        self.lost_after_restart += seq
        self.last_restart_rx = self._rx
        others = st.others if st.others is not None else []
        others.append([st.epoch, st.last_seq, seq, st.flagged])
        if len(others) > _EPOCHS_KEPT:
            del others[0]
        st.others = others
        st.epoch, st.last_seq, st.restart_lost, st.flagged = epoch, seq, seq, False
        self._unnumbered = 0
        return None

    def _switch(self, st: _StreamSeq, epoch: str | None, seq: int) -> bool:
        """When ``(epoch, seq)`` continues a numbering remembered from before the last
        restart, that "restart" was a second sender: make that numbering current, take
        back the restart it was counted as (once), and return True."""
        others = st.others
        if not others:
            return False
        for i in range(len(others) - 1, -1, -1):
            o_epoch, o_last, o_restart_lost, o_flagged = others[i]
            if o_epoch == epoch and o_last - REORDER_WINDOW <= seq <= o_last + REORDER_WINDOW:
                break
        else:
            return False
        del others[i]
        if not st.flagged and st.restart_lost is not None:
            # the current numbering was counted as a restart when it appeared: it was not
            self.restarts -= 1
            self.lost_after_restart -= st.restart_lost
            self.last_restart_rx = None
        others.append([st.epoch, st.last_seq, None, True])
        st.epoch, st.last_seq, st.restart_lost, st.flagged = o_epoch, o_last, None, True
        flagged = 1 + sum(1 for o in others if o[3])
        st.senders = max(st.senders, flagged)
        self.senders = max(self.senders, st.senders)
        return True

    # -- decoding ----------------------------------------------------------------------
    def decode(self, frames: Sequence[Any], rx_t: float) -> SampleBatch | None:
        """Decode one message (its frames); ``None`` when it was rejected.  Never raises."""
        out = self.decode_many((frames,), rx_t)
        return out[0] if out else None

    def decode_many(self, messages: Iterable[Sequence[Any]], rx_t: float) -> list[SampleBatch]:
        """Decode several messages received together, in order.

        Consecutive JSON singles of one stream, epoch and calibration are merged into one
        batch (their own ``t`` kept per sample), so a drain of thousands of singles costs
        one estimator update.  Never raises.
        """
        out: list[SampleBatch] = []
        rx = float(rx_t)
        self._rx = rx
        pending: list[bytes] = []
        fast = self.fmt == "auto"
        raw = self.fmt == "raw-f32"
        raw_max = min(self.max_samples * 8, self.max_message_bytes)
        for frames in messages:
            try:
                nparts = len(frames)
                if nparts == 1 and type(frames) is not Refused:
                    f = frames[0]
                    if fast:
                        pending.append(f if type(f) is bytes else bytes(f))
                        continue
                    if raw and type(f) is bytes and 0 < len(f) <= raw_max and not len(f) % 8:
                        pending.append(f)  # well-formed pairs: parsed joined below
                        continue
                if pending:
                    (self._raw_joined if raw else self._singles)(pending, rx, out)
                    pending = []
                if type(frames) is Refused:
                    self.reject(frames.reason, example=frames.example)
                    continue
                if nparts == 0:
                    self.reject("empty")
                    continue
                if nparts > MAX_PARTS:
                    self.reject("too_many_parts", example=f"({nparts} frames)")
                    continue
                self._accept(self._decode_slow(frames, rx), out)
            except Reject as exc:
                self.reject(exc.reason, example=_frames_example(frames))
                self._account_rejected_frames(frames)
            except Exception:  # noqa: BLE001 - the loop must never see a decoder bug
                self.reject("internal_error", example=_frames_example(frames))
        if pending:
            try:
                (self._raw_joined if raw else self._singles)(pending, rx, out)
            except Exception:  # noqa: BLE001
                self.reject("internal_error")
        if len(out) > 1:
            out = merge_batches(out, self.merge_samples)
        return out

    def _raw_joined(self, frames: list[bytes], rx: float, out: list[SampleBatch]) -> None:
        """Raw float32 pair frames already checked for length: one join, one
        ``frombuffer``, one float64 conversion per column and one range check for the
        whole drain; batches of at most ``merge_samples`` cut at message boundaries
        (views, no copy) with a per-batch time base (every sample's ``t`` is the
        receive time, a read-only broadcast).  Any value out of range sends the frames
        one by one through the checked path, so refusals are counted per message."""
        pairs = np.frombuffer(b"".join(frames), dtype="<f4").reshape(-1, 2)
        with np.errstate(invalid="ignore"):  # a signalling-NaN pattern: refused as non_finite
            a = pairs[:, 0].astype(np.float64)
            p = pairs[:, 1].astype(np.float64)
        if not ranges_ok(a, p):
            for f in frames:
                try:
                    self._accept(self._decode_slow((f,), rx), out)
                except Reject as exc:
                    self.reject(exc.reason, example=_frames_example((f,)))
            return
        self.messages += len(frames)
        self.samples += int(a.size)
        cap = self.merge_samples
        start = size = 0
        for f in frames:
            n = len(f) >> 3
            if size and size + n > cap:
                self._raw_batch(a, p, start, start + size, rx, out)
                start += size
                size = 0
            size += n
        self._raw_batch(a, p, start, start + size, rx, out)

    @staticmethod
    def _raw_batch(a: np.ndarray, p: np.ndarray, i: int, j: int, rx: float,
                   out: list[SampleBatch]) -> None:
        t = np.broadcast_to(np.float64(rx), (j - i,))
        out.append(SampleBatch(t, a[i:j], p[i:j], rx_t=rx, calibrated=False))

    def _load_all(self, payloads: list[bytes]) -> list[Any]:
        """Parse single-frame JSON messages; a frame that fails holds a :class:`_Bad`
        with the reason in its slot.

        Fast path: when every frame starts with ``{``, ends with ``}`` and holds no other
        brace, the frames joined by commas inside ``[...]`` parse as a list whose items are
        exactly the frames (a brace inside a string or a frame that does not close would
        leave fewer than ``n`` items, which sends the drain to the per-frame path), so one
        ``json.loads`` call parses the whole drain.
        """
        n = len(payloads)
        max_bytes = self.max_message_bytes
        if n > 1:
            ok = True
            for f in payloads:
                if f[:1] != b"{" or f[-1:] != b"}" or len(f) > max_bytes:
                    ok = False
                    break
            if ok:
                joined = b",".join(payloads)
                if joined.count(b"{") == n and joined.count(b"}") == n:
                    try:
                        objs = json.loads("[" + joined.decode() + "]")
                    except (ValueError, RecursionError):
                        objs = None
                    if type(objs) is list and len(objs) == n:
                        return objs
        res: list[Any] = []
        loads = json.loads
        for f in payloads:
            if len(f) > max_bytes:
                res.append(_OVERSIZE)
            elif not f:
                res.append(_EMPTY)
            else:
                try:
                    res.append(loads(f))
                except (ValueError, RecursionError):
                    res.append(_BAD_JSON)
        return res

    def _singles(self, payloads: list[bytes], rx: float, out: list[SampleBatch]) -> None:
        """Decode a run of single-frame JSON messages, merging plain singles."""
        run_t: list[float] = []
        run_a: list[float] = []
        run_p: list[float] = []
        run_key: tuple[str | None, bool] | None = None
        run_seq: int | None = None
        account = self._account
        seq_state = self._seq.get("")
        a_min, a_max = ANGLE_MIN_DEG, ANGLE_MAX_DEG
        p_min, p_max = POWER_MIN_DB, POWER_MAX_DB
        seq_limit = SEQ_LIMIT

        def flush() -> None:
            if run_a:
                assert run_key is not None
                out.append(SampleBatch(np.array(run_t, dtype=np.float64),
                                       np.array(run_a, dtype=np.float64),
                                       np.array(run_p, dtype=np.float64), rx_t=rx,
                                       seq=run_seq, epoch=run_key[0], stream="",
                                       calibrated=run_key[1]))
                self.samples += len(run_a)
                run_t.clear()
                run_a.clear()
                run_p.clear()

        for payload, obj in zip(payloads, self._load_all(payloads), strict=True):
            if type(obj) is _Bad:
                self.reject(obj.reason, example=payload)
                continue
            try:
                if type(obj) is dict and "v" not in obj and "t0" not in obj:
                    a = obj.get("angle_deg")
                    p = obj.get("power_dbm")
                    cal = True
                    if p is None:
                        p = obj.get("power_db")
                        cal = False
                    elif "power_db" in obj:
                        p = None
                    t = obj.get("t", rx)
                    seq = obj.get("seq")
                    epoch = obj.get("epoch")
                    ta = type(a)
                    tp = type(p)
                    tt = type(t)
                    if ((ta is float or ta is int) and (tp is float or tp is int)
                            and (tt is float or tt is int)
                            and a_min <= a < a_max and p_min <= p <= p_max
                            and -1e300 < t < 1e300
                            and (epoch is None or type(epoch) is str)
                            and (seq is None or (type(seq) is int
                                                 and 0 <= seq < seq_limit))):
                        if seq is not None:
                            # in-order fast case inline; anything else goes to _account
                            if (seq_state is not None and seq_state.epoch == epoch
                                    and seq == seq_state.last_seq + 1
                                    and not self._unnumbered):
                                seq_state.last_seq = seq
                            else:
                                why = account("", seq, epoch)
                                seq_state = self._seq.get("")
                                if why is not None:
                                    self.rejected[why] = self.rejected.get(why, 0) + 1
                                    if why not in self.reject_examples:
                                        self.reject_examples[why] = excerpt(payload)
                                    continue
                        key = (epoch, cal)
                        if key != run_key:
                            flush()
                            run_key = key
                        run_t.append(t)
                        run_a.append(a)
                        run_p.append(p)
                        run_seq = seq
                        self.messages += 1
                        continue
                batch = parse_json_object(obj, rx)
                flush()
                run_key = None
                self._accept(batch, out)
                seq_state = self._seq.get("")
            except Reject as exc:
                self.reject(exc.reason, example=payload)
                self._account_rejected(obj)
                seq_state = self._seq.get("")
            except Exception:  # noqa: BLE001
                self.reject("internal_error", example=payload)
        flush()

    def _account_rejected(self, obj: Any, stream: str = "") -> None:
        """A rejected message whose ``seq`` can be read still advances the numbering, so
        it is not counted a second time as lost."""
        if type(obj) is dict:
            try:
                seq, epoch = seq_epoch(obj)
            except Reject:
                return
            if seq is not None:
                self._unnumbered -= 1  # this refusal is numbered after all
                self._account(stream, seq, epoch)

    def _account_rejected_frames(self, frames: Sequence[Any]) -> None:
        """:meth:`_account_rejected` for a multi-frame message (its JSON header or
        payload is parsed again: only refused messages pay for this)."""
        try:
            n = len(frames)
            if n < 2 or self.fmt != "auto":
                return
            if n == 3:
                stream, head = _topic(frames[0]), frames[1]
            elif memoryview(frames[0]).nbytes and memoryview(frames[0])[0] == 0x7B:
                stream, head = "", frames[0]
            else:
                stream, head = _topic(frames[0]), frames[1]
            if memoryview(head).nbytes > self.max_message_bytes:
                return
            obj = json.loads(bytes(head))
        except Exception:  # noqa: BLE001 - unreadable: stays unnumbered
            return
        self._account_rejected(obj, stream)

    def _accept(self, batch: SampleBatch, out: list[SampleBatch]) -> None:
        why = self._account(batch.stream, batch.seq, batch.epoch)
        if why is not None:
            raise Reject(why)
        self.messages += 1
        self.samples += len(batch)
        out.append(batch)

    def _decode_slow(self, frames: Sequence[Any], rx_t: float) -> SampleBatch:
        """Any message shape; raises :class:`Reject`."""
        total = 0
        for f in frames:
            total += memoryview(f).nbytes
        if total > self.max_message_bytes:
            raise Reject("oversize", f"{total} bytes")
        nparts = len(frames)
        stream = ""
        if self.fmt == "raw-f32":
            if nparts > 2:
                raise Reject("too_many_parts")
            if nparts == 2:
                stream = _topic(frames[0])
            return parse_raw_f32(frames[-1], rx_t, stream, self.max_samples)
        if nparts == 3:
            stream = _topic(frames[0])
            return parse_binary(frames[1], frames[2], rx_t, stream, self.max_samples,
                                 self._layouts)
        if nparts == 2:
            first = memoryview(frames[0])
            if first.nbytes and first[0] == 0x7B:  # '{': header + data
                return parse_binary(frames[0], frames[1], rx_t, stream,
                                     self.max_samples, self._layouts)
            stream = _topic(frames[0])
            payload = frames[1]
        else:
            payload = frames[0]
        if memoryview(payload).nbytes == 0:
            raise Reject("empty", "empty frame")
        try:
            obj = json.loads(bytes(payload))
        except (ValueError, RecursionError):
            raise Reject("bad_json") from None
        return parse_json_object(obj, rx_t, stream)


def merge_batches(batches: list[SampleBatch], max_samples: int = MERGE_SAMPLES
                  ) -> list[SampleBatch]:
    """Join consecutive batches of the same stream, epoch and calibration (same receive
    time) into batches of at most ``max_samples`` (a longer batch stays whole); the
    merged batch keeps the last ``seq``."""
    out: list[SampleBatch] = []
    group: list[SampleBatch] = []
    size = 0

    def close() -> None:
        if len(group) == 1:
            out.append(group[0])
        elif group:
            last = group[-1]
            out.append(SampleBatch(np.concatenate([b.t for b in group]),
                                   np.concatenate([b.angle_deg for b in group]),
                                   np.concatenate([b.power_db for b in group]),
                                   rx_t=last.rx_t, seq=last.seq, epoch=last.epoch,
                                   stream=last.stream, calibrated=last.calibrated))

    for b in batches:
        n = len(b)
        if group:
            g = group[-1]
            if (size + n > max_samples or b.stream != g.stream or b.epoch != g.epoch
                    or b.calibrated != g.calibrated or b.rx_t != g.rx_t):
                close()
                group = []
                size = 0
        group.append(b)
        size += n
    close()
    return out


def _topic(frame: Any) -> str:
    return bytes(frame).decode("utf-8", "replace")


def excerpt(data: Any, limit: int = EXAMPLE_BYTES) -> str:
    """The start of a refused message as printable text (bytes decoded as UTF-8 with
    escapes; ``...`` marks a cut) -- enough for a publisher's author to recognise it."""
    if data is None:
        return ""
    if isinstance(data, str):
        text = data
    else:
        try:
            raw = bytes(memoryview(data)[:limit * 4])
        except TypeError:
            return str(data)[:limit]
        text = raw.decode("utf-8", "backslashreplace")
    return text if len(text) <= limit else text[:limit] + "..."


def _frames_example(frames: Any) -> str:
    """The example kept for a refused multi-frame message: its JSON part."""
    try:
        n = len(frames)
        if n == 0:
            return ""
        if n == 1:
            return excerpt(frames[0])
        head = frames[-2] if n <= 3 else frames[0]
        return f"({n} frames) " + excerpt(head)
    except Exception:  # noqa: BLE001
        return ""
