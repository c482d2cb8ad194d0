"""Wire format version 1, one message at a time: the limits, the reasons a message is
refused, and the parsers of a JSON object, a binary batch and a raw-f32 frame (each
returns a :class:`SampleBatch` or raises :class:`Reject`).  Pure: no counters, no
sockets; :class:`stream.wire.Decoder` keeps the per-stream accounting and the fast
paths, and ``docs/wire-format.md`` describes the shapes.
"""

from __future__ import annotations

import json
import math
from typing import Any

import numpy as np

from stream.batch import SampleBatch

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
#: Largest ``seq`` (and ``count``) accepted: a signed 64-bit integer.
SEQ_LIMIT: int = 2 ** 63

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

#: Data types of a binary batch's data frame.
DTYPES = {"<f8": np.dtype("<f8"), "<f4": np.dtype("<f4")}
_BIN_FIELDS = frozenset({"t", "angle_deg", "power_dbm", "power_db"})


class Reject(ValueError):
    """A message refused for ``reason`` (one of :data:`REJECT_REASONS`)."""

    def __init__(self, reason: str, detail: str = "") -> None:
        super().__init__(reason if not detail else f"{reason}: {detail}")
        self.reason = reason


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


def ranges_ok(a: np.ndarray, p: np.ndarray) -> bool:
    """Fast vectorised check; NaN fails every comparison, so it fails here too."""
    amin = a.min()
    amax = a.max()
    pmin = p.min()
    pmax = p.max()
    return bool(amin >= ANGLE_MIN_DEG and amax < ANGLE_MAX_DEG
                and pmin >= POWER_MIN_DB and pmax <= POWER_MAX_DB)


def seq_epoch(obj: dict) -> tuple[int | None, str | None]:
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
    seq, epoch = seq_epoch(obj)
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
    dtype = DTYPES.get(dname) if type(dname) is str else None
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


def parse_binary(header_frame: Any, data_frame: Any, rx_t: float, stream: str,
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
    seq, epoch = seq_epoch(hdr)
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


def parse_raw_f32(frame: Any, rx_t: float, stream: str, max_samples: int) -> SampleBatch:
    buf = memoryview(frame)
    if buf.nbytes == 0:
        raise Reject("empty", "empty frame")
    if buf.nbytes % 8:
        raise Reject("bad_binary", "raw-f32 frame length is not a multiple of 8")
    if buf.nbytes // 8 > max_samples:
        raise Reject("oversize", "too many pairs")
    pairs = np.frombuffer(buf, dtype="<f4").reshape(-1, 2)
    with np.errstate(invalid="ignore"):  # a signalling-NaN pattern: refused as non_finite
        a = pairs[:, 0].astype(np.float64)
        p = pairs[:, 1].astype(np.float64)
    if not ranges_ok(a, p):
        _check_ranges(None, a, p)
    return SampleBatch(np.full(a.size, float(rx_t)), a, p, rx_t=float(rx_t), stream=stream,
                       calibrated=False)
