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
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np

from stream.batch import SampleBatch
from stream.tick import SourceStats

#: Wire format version this module speaks.
WIRE_VERSION: int = 1

#: Accepted angle range, degrees: [ANGLE_MIN_DEG, ANGLE_MAX_DEG).  Angles are kept as sent.
ANGLE_MIN_DEG: float = -180.0
ANGLE_MAX_DEG: float = 360.0
#: Accepted power range, dB (dBm when calibrated), both ends included.
POWER_MIN_DB: float = -200.0
POWER_MAX_DB: float = 60.0

#: Default cap on one message's total size, bytes.
DEFAULT_MAX_MESSAGE_BYTES: int = 4 * 1024 * 1024
#: Cap on the samples in one message.
MAX_SAMPLES_PER_MESSAGE: int = 1_000_000
#: A message has at most this many frames (topic + header + data).
MAX_PARTS: int = 3
#: Consecutive batches of one stream decoded together are merged up to this many
#: samples: the estimator's cost is mostly per call below about 10,000 samples.
MERGE_SAMPLES: int = 8192
#: Largest ``seq`` (and ``count``) accepted: a signed 64-bit integer.
SEQ_LIMIT: int = 2 ** 63
#: Bytes of a refused message kept as its example (``SourceStats.reject_examples``).
EXAMPLE_BYTES: int = 80
#: Epochs remembered per topic to recognise two senders alternating.
_EPOCHS_KEPT: int = 8
#: A ``seq`` at most this far below the last one in its epoch is ``seq_backward``;
#: further back the numbering started again (a restart, or another sender).  Without
#: an epoch any step back is taken as the numbering starting again.
REORDER_WINDOW: int = 1000

#: Every reason a message can be rejected for, in a stable order.
REJECT_REASONS: tuple[str, ...] = (
    "bad_json",         # not UTF-8 JSON, or not a JSON object / header
    "bad_type",         # a key holds the wrong type (string, bool, nested list, ...)
    "missing_field",    # no angle_deg, or no power_dbm / power_db
    "ragged",           # arrays of unequal length
    "empty",            # zero samples, or an empty frame
    "non_finite",       # NaN or infinity in t, angle or power
    "angle_range",      # angle outside [-180, 360) degrees
    "power_range",      # power outside [-200, +60] dB
    "out_of_range",     # a number too large for float64 (e.g. a 310-digit literal), or a
                        # seq / count beyond a signed 64-bit integer
    "unknown_version",  # "v" present and not 1
    "oversize",         # message bytes or sample count over the cap
    "too_many_parts",   # more frames than topic + header + data
    "bad_binary",       # bad binary header or data frame length
    "auth_failed",      # a peer failed the CURVE handshake (counted by the socket)
    "duplicate",        # the same seq again in one epoch (a repeated message)
    "seq_backward",     # a seq lower than one already seen in the same epoch
    "internal_error",   # a bug in this module (should stay at zero)
)

FORMATS: tuple[str, ...] = ("auto", "raw-f32")

_DTYPES = {"<f8": np.dtype("<f8"), "<f4": np.dtype("<f4")}
_BIN_FIELDS = frozenset({"t", "angle_deg", "power_dbm", "power_db"})


class Refused(NamedTuple):
    """A message the socket layer already refused while reading it (too many frames or
    bytes): it stands in the drain's list so it is counted in order."""

    reason: str
    example: str


class Reject(ValueError):
    """A message refused for ``reason`` (one of :data:`REJECT_REASONS`)."""

    def __init__(self, reason: str, detail: str = "") -> None:
        super().__init__(reason if not detail else f"{reason}: {detail}")
        self.reason = reason


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
# detailed (slow-path) checks
# ---------------------------------------------------------------------------------------
def _is_num(x: Any) -> bool:
    return (type(x) is float or type(x) is int) and not isinstance(x, bool)


def _scalar(obj: dict, key: str) -> float:
    v = obj[key]
    if not _is_num(v):
        raise Reject("bad_type", f"{key} must be a number")
    try:
        v = float(v)
    except OverflowError:
        raise Reject("out_of_range", f"{key} does not fit a 64-bit float") from None
    if not math.isfinite(v):
        raise Reject("non_finite", key)
    return v


def _array(v: Any, key: str) -> np.ndarray:
    """A JSON value (number or list of numbers) as a 1-D float64 array."""
    if _is_num(v):
        try:
            return np.array([float(v)], dtype=np.float64)
        except OverflowError:
            raise Reject("out_of_range", f"{key} does not fit a 64-bit float") from None
    if type(v) is not list:
        raise Reject("bad_type", f"{key} must be a number or an array of numbers")
    if len(v) > MAX_SAMPLES_PER_MESSAGE:
        raise Reject("oversize", f"{key} has {len(v)} values")
    if not v:
        raise Reject("empty", key)
    try:
        arr = np.array(v)
    except (ValueError, TypeError, OverflowError):
        raise Reject("bad_type", f"{key} must be a flat array of numbers") from None
    if arr.ndim == 1 and arr.dtype.kind == "O" and all(_is_num(x) for x in v):
        # integers beyond int64 make an object array: too large for float64?
        try:
            return np.array([float(x) for x in v], dtype=np.float64)
        except OverflowError:
            raise Reject("out_of_range", f"{key} does not fit a 64-bit float") from None
    if arr.ndim != 1 or arr.dtype.kind not in "iuf":
        raise Reject("bad_type", f"{key} must be a flat array of numbers")
    return arr.astype(np.float64, copy=False)


def _check_ranges(t: np.ndarray | None, a: np.ndarray, p: np.ndarray) -> None:
    """Raise the reason for the first failing check (finite, angle, power)."""
    if t is not None and not np.all(np.isfinite(t)):
        raise Reject("non_finite", "t")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(p))):
        raise Reject("non_finite", "angle_deg/power")
    if not (a.min() >= ANGLE_MIN_DEG and a.max() < ANGLE_MAX_DEG):
        raise Reject("angle_range", "angle_deg outside [-180, 360)")
    if not (p.min() >= POWER_MIN_DB and p.max() <= POWER_MAX_DB):
        raise Reject("power_range", "power outside [-200, +60] dB")


def _ranges_ok(a: np.ndarray, p: np.ndarray) -> bool:
    """Fast vectorised check; NaN fails every comparison, so it fails here too."""
    amin = a.min()
    amax = a.max()
    pmin = p.min()
    pmax = p.max()
    return bool(amin >= ANGLE_MIN_DEG and amax < ANGLE_MAX_DEG
                and pmin >= POWER_MIN_DB and pmax <= POWER_MAX_DB)


def _seq_epoch(obj: dict) -> tuple[int | None, str | None]:
    seq = obj.get("seq")
    if seq is not None:
        if type(seq) is not int or seq < 0:
            raise Reject("bad_type", "seq must be a non-negative integer")
        if seq >= SEQ_LIMIT:
            raise Reject("out_of_range", "seq must be below 2**63")
    epoch = obj.get("epoch")
    if epoch is not None:
        if type(epoch) is int:
            epoch = str(epoch)
        elif type(epoch) is not str or len(epoch) > 64:
            raise Reject("bad_type", "epoch must be a short string or an integer")
    return seq, epoch


def _version(obj: dict) -> None:
    v = obj.get("v", WIRE_VERSION)
    if v != WIRE_VERSION or isinstance(v, bool):
        raise Reject("unknown_version", f"v={v!r}")


def _power_key(obj: dict) -> tuple[str, bool]:
    has_cal = "power_dbm" in obj
    has_raw = "power_db" in obj
    if has_cal and has_raw:
        raise Reject("bad_type", "give power_dbm or power_db, not both")
    if has_cal:
        return "power_dbm", True
    if has_raw:
        return "power_db", False
    raise Reject("missing_field", "power_dbm or power_db")


def parse_json_object(obj: Any, rx_t: float, stream: str = "") -> SampleBatch:
    """Validate one decoded JSON object (single or batch) into a batch; raises
    :class:`Reject` (a ``ValueError``) with the reason."""
    if type(obj) is not dict:
        raise Reject("bad_json", "message is not a JSON object")
    _version(obj)
    if "angle_deg" not in obj:
        raise Reject("missing_field", "angle_deg")
    pkey, calibrated = _power_key(obj)
    seq, epoch = _seq_epoch(obj)
    a = _array(obj["angle_deg"], "angle_deg")
    p = _array(obj[pkey], pkey)
    if a.shape != p.shape:
        raise Reject("ragged", f"angle_deg has {a.size} values, {pkey} {p.size}")
    n = a.size
    t: np.ndarray | None
    if "t" in obj and obj["t"] is not None:
        t = _array(obj["t"], "t")
        if t.size == 1 and n > 1 and _is_num(obj["t"]):
            t = np.full(n, t[0])  # one scalar t: all samples were taken at t
        if t.size != n:
            raise Reject("ragged", f"t has {t.size} values, angle_deg {n}")
    elif "t0" in obj:
        t0 = _scalar(obj, "t0")
        dt = _scalar(obj, "dt") if "dt" in obj else 0.0
        t = t0 + dt * np.arange(n, dtype=np.float64)
    else:
        t = None
    _check_ranges(t, a, p)
    if t is None:
        t = np.full(n, float(rx_t))
    return SampleBatch(t, a, p, rx_t=float(rx_t), seq=seq, epoch=epoch, stream=stream,
                       calibrated=calibrated)


def decode_json_object(obj: Any, rx_t: float) -> SampleBatch:
    """One JSON object (a parsed line of a JSON Lines file, say) as a batch.

    Raises ``ValueError`` whose ``reason`` attribute (and message start) is one of
    :data:`REJECT_REASONS`.
    """
    return parse_json_object(obj, rx_t)


def _binary_layout(hdr: dict) -> tuple[np.dtype, int, int, int, int, bool]:
    """Check a binary header's dtype and fields; ``(dtype, n_fields, i_angle, i_power,
    i_t or -1, calibrated)``.  Raises :class:`Reject`."""
    dname = hdr.get("dtype", "<f8")
    dtype = _DTYPES.get(dname) if type(dname) is str else None
    if dtype is None:
        raise Reject("bad_binary", "dtype must be '<f8' or '<f4'")
    fields = hdr.get("fields")
    if (type(fields) is not list or not fields or len(fields) > 8
            or any(type(f) is not str for f in fields) or len(set(fields)) != len(fields)):
        raise Reject("bad_binary", "fields must be a list of distinct names")
    if "angle_deg" not in fields:
        raise Reject("missing_field", "angle_deg")
    if ("power_dbm" in fields) == ("power_db" in fields):
        raise Reject("missing_field", "exactly one of power_dbm, power_db")
    if any(f not in _BIN_FIELDS for f in fields):
        raise Reject("bad_binary", "unknown field name")
    calibrated = "power_dbm" in fields
    return (dtype, len(fields), fields.index("angle_deg"),
            fields.index("power_dbm" if calibrated else "power_db"),
            fields.index("t") if "t" in fields else -1, calibrated)


#: Layout cache size bound (a publisher uses one or two layouts).
_MAX_LAYOUTS: int = 64


def _parse_binary(header_frame: Any, data_frame: Any, rx_t: float, stream: str,
                  max_samples: int, layouts: dict | None = None) -> SampleBatch:
    """One binary batch; ``layouts`` caches checked (dtype, fields) layouts so a stream's
    repeated header shape is checked once (only ``v``, ``count``, ``seq`` and ``epoch``
    are read per message)."""
    try:
        hdr = json.loads(header_frame if type(header_frame) is bytes else bytes(header_frame))
    except (ValueError, RecursionError):
        raise Reject("bad_json", "binary header is not JSON") from None
    if type(hdr) is not dict:
        raise Reject("bad_binary", "binary header is not a JSON object")
    if "v" not in hdr:
        raise Reject("bad_binary", "binary header has no v")
    _version(hdr)
    count = hdr.get("count")
    if type(count) is not int:
        raise Reject("bad_binary", "count must be an integer")
    if count <= 0:
        raise Reject("empty" if count == 0 else "bad_binary", "count")
    if count >= SEQ_LIMIT:
        raise Reject("out_of_range", f"count {count}")
    if count > max_samples:
        raise Reject("oversize", f"count {count}")
    layout = None
    key: Any = None
    if layouts is not None:
        fields = hdr.get("fields")
        if type(fields) is list:
            try:
                key = (hdr.get("dtype", "<f8"), *fields)
                layout = layouts.get(key)
            except TypeError:  # an unhashable field entry: the full check names it
                key = None
    if layout is None:
        layout = _binary_layout(hdr)
        if key is not None and len(layouts) < _MAX_LAYOUTS:  # type: ignore[arg-type]
            layouts[key] = layout  # type: ignore[index]
    dtype, nf, ia, ip, it, calibrated = layout
    seq, epoch = _seq_epoch(hdr)
    buf = memoryview(data_frame)
    if buf.nbytes != count * nf * dtype.itemsize:
        raise Reject("bad_binary", f"data frame has {buf.nbytes} bytes, header says "
                                   f"{count} x {nf} x {dtype.itemsize}")
    block = np.frombuffer(buf, dtype=dtype).reshape(nf, count)
    if dtype.itemsize != 8:
        block = block.astype(np.float64)
    a = block[ia]
    p = block[ip]
    # Two reductions check every field (NaN propagates through min/max and fails the
    # comparisons); the detailed checks run only to name the reason.
    lo = block.min(axis=1).tolist()
    hi = block.max(axis=1).tolist()
    if not (lo[ia] >= ANGLE_MIN_DEG and hi[ia] < ANGLE_MAX_DEG
            and lo[ip] >= POWER_MIN_DB and hi[ip] <= POWER_MAX_DB
            and (it < 0 or (-1e300 < lo[it] and hi[it] < 1e300))):
        _check_ranges(block[it] if it >= 0 else None, a, p)
    if it >= 0:
        t = block[it]
    elif "t0" in hdr:
        t0 = _scalar(hdr, "t0")
        dt = _scalar(hdr, "dt") if "dt" in hdr else 0.0
        t = t0 + dt * np.arange(count, dtype=np.float64)
    else:
        t = np.full(count, float(rx_t))
    return SampleBatch(t, a, p, rx_t=float(rx_t), seq=seq, epoch=epoch, stream=stream,
                       calibrated=calibrated)


def _parse_raw_f32(frame: Any, rx_t: float, stream: str, max_samples: int) -> SampleBatch:
    buf = memoryview(frame)
    if buf.nbytes == 0:
        raise Reject("empty", "empty frame")
    if buf.nbytes % 8:
        raise Reject("bad_binary", "raw-f32 frame length is not a multiple of 8")
    if buf.nbytes // 8 > max_samples:
        raise Reject("oversize", "too many pairs")
    pairs = np.frombuffer(buf, dtype="<f4").reshape(-1, 2)
    a = pairs[:, 0].astype(np.float64)
    p = pairs[:, 1].astype(np.float64)
    if not _ranges_ok(a, p):
        _check_ranges(None, a, p)
    return SampleBatch(np.full(a.size, float(rx_t)), a, p, rx_t=float(rx_t), stream=stream,
                       calibrated=False)


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
        a = pairs[:, 0].astype(np.float64)
        p = pairs[:, 1].astype(np.float64)
        if not _ranges_ok(a, p):
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
                seq, epoch = _seq_epoch(obj)
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
            return _parse_raw_f32(frames[-1], rx_t, stream, self.max_samples)
        if nparts == 3:
            stream = _topic(frames[0])
            return _parse_binary(frames[1], frames[2], rx_t, stream, self.max_samples,
                                 self._layouts)
        if nparts == 2:
            first = memoryview(frames[0])
            if first.nbytes and first[0] == 0x7B:  # '{': header + data
                return _parse_binary(frames[0], frames[1], rx_t, stream,
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


# ---------------------------------------------------------------------------------------
# encoders (publishers, tests, benchmarks)
# ---------------------------------------------------------------------------------------
def _power_name(calibrated: bool) -> str:
    return "power_dbm" if calibrated else "power_db"


def _with_topic(topic: bytes | None, frames: list[bytes]) -> list[bytes]:
    return [topic, *frames] if topic else frames


def encode_json_single(angle_deg: float, power_db: float, t: float | None = None,
                       seq: int | None = None, epoch: str | None = None, *,
                       calibrated: bool = True, topic: bytes | None = None) -> list[bytes]:
    """One sample as a JSON single message (list of frames)."""
    obj: dict[str, Any] = {"angle_deg": float(angle_deg),
                           _power_name(calibrated): float(power_db)}
    if t is not None:
        obj["t"] = float(t)
    if seq is not None:
        obj["seq"] = int(seq)
    if epoch is not None:
        obj["epoch"] = epoch
    return _with_topic(topic, [json.dumps(obj, separators=(",", ":")).encode()])


def encode_json_batch(angle_deg: np.ndarray, power_db: np.ndarray,
                      t: np.ndarray | None = None, seq: int | None = None,
                      epoch: str | None = None, *, t0: float | None = None,
                      dt: float | None = None, calibrated: bool = True,
                      topic: bytes | None = None, decimals: int | None = None) -> list[bytes]:
    """A JSON batch message; give ``t`` (array) or ``t0`` and ``dt``."""
    a = np.asarray(angle_deg, dtype=np.float64)
    p = np.asarray(power_db, dtype=np.float64)
    if decimals is not None:
        a = np.round(a, decimals)
        p = np.round(p, decimals)
    obj: dict[str, Any] = {"v": WIRE_VERSION, "angle_deg": a.tolist(),
                           _power_name(calibrated): p.tolist()}
    if t is not None:
        obj["t"] = np.asarray(t, dtype=np.float64).tolist()
    elif t0 is not None:
        obj["t0"] = float(t0)
        obj["dt"] = float(dt or 0.0)
    if seq is not None:
        obj["seq"] = int(seq)
    if epoch is not None:
        obj["epoch"] = epoch
    return _with_topic(topic, [json.dumps(obj, separators=(",", ":")).encode()])


def encode_binary_batch(angle_deg: np.ndarray, power_db: np.ndarray,
                        t: np.ndarray | None = None, seq: int | None = None,
                        epoch: str | None = None, *, dtype: str = "<f8",
                        t0: float | None = None, dt: float | None = None,
                        calibrated: bool = True, topic: bytes | None = None) -> list[bytes]:
    """A binary batch message: JSON header frame + one field-major data frame."""
    if dtype not in _DTYPES:
        raise ValueError("dtype must be '<f8' or '<f4'")
    cols = []
    fields = []
    if t is not None:
        fields.append("t")
        cols.append(np.asarray(t, dtype=np.float64))
    fields += ["angle_deg", _power_name(calibrated)]
    cols += [np.asarray(angle_deg, dtype=np.float64), np.asarray(power_db, dtype=np.float64)]
    n = int(cols[-1].size)
    hdr: dict[str, Any] = {"v": WIRE_VERSION, "count": n, "dtype": dtype, "fields": fields}
    if t is None and t0 is not None:
        hdr["t0"] = float(t0)
        hdr["dt"] = float(dt or 0.0)
    if seq is not None:
        hdr["seq"] = int(seq)
    if epoch is not None:
        hdr["epoch"] = epoch
    data = np.stack(cols).astype(_DTYPES[dtype], copy=False).tobytes()
    return _with_topic(topic, [json.dumps(hdr, separators=(",", ":")).encode(), data])


def encode_raw_f32(angle_deg: np.ndarray, power_db: np.ndarray, *,
                   topic: bytes | None = None) -> list[bytes]:
    """Interleaved little-endian float32 (angle_deg, power_db) pairs, no header."""
    pairs = np.empty((np.size(angle_deg), 2), dtype="<f4")
    pairs[:, 0] = angle_deg
    pairs[:, 1] = power_db
    return _with_topic(topic, [pairs.tobytes()])
