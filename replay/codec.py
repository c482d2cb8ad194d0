"""Compact, lossless storage of sample columns in session files (format version 2).

Why lossless: replay feeds the monitor exactly what it was fed live, so the readouts a
replay prints are the live run's, bit for bit.  Rounding stored samples to float32
would break that for sources that send float64.  Instead each column of each batch
takes the smallest encoding that gives back the very same float64 values:

``base``  (``t`` only) 16 bytes ``<dd`` t0, dt: ``t = t0 + dt * arange(n)``, the
          arithmetic a wire batch with ``t0`` and ``dt`` is decoded with.
``tq``    (``t`` only) 16 bytes ``<dd`` t0, u, then int32 steps: ``u`` is the spacing
          of float64 values near ``t0`` (a power of two), ``q = cumsum(steps)`` and
          ``t = t0 + q * u``; every time within 2^31 u (about 8 minutes near today's
          Unix time) of t0 is stored this way, exactly.
``f4``    little-endian float32, when every value is exactly a float32 (sources that
          send float32, such as raw pairs, give such values).
``f8``    little-endian float64, anything else.

A ``+z`` suffix means the bytes were byte-shuffled (all first bytes, then all second
bytes, ...) and zlib-compressed (level 1): sign and exponent bytes of neighbouring
samples repeat and the steps of ``tq`` are nearly constant, so they compress well.

The codes of one batch are kept in ``batches.enc`` as ``"T,A,P"``, e.g.
``"tq+z,f4+z,f4+z"``; a version 1 file has no such column and means ``"f8,f8,f8"``.
"""

from __future__ import annotations

import struct
import zlib

import numpy as np

#: The encoding of a version 1 file (and of ``compact=False``).
PLAIN = "f8,f8,f8"

_DD = struct.Struct("<dd")
_LEVEL = 1


class CodecError(ValueError):
    """A stored column cannot be decoded (damaged or unknown encoding)."""


def _shuffle_z(raw: bytes, width: int) -> bytes:
    b = np.frombuffer(raw, dtype=np.uint8)
    return zlib.compress(b.reshape(-1, width).T.tobytes(), _LEVEL)


def _unshuffle(blob: bytes, width: int, n: int) -> bytes:
    raw = zlib.decompress(blob)
    if len(raw) != width * n:
        raise CodecError("wrong length after decompression")
    return np.frombuffer(raw, dtype=np.uint8).reshape(width, n).T.tobytes()


def encode_values(x: np.ndarray, compress: bool) -> tuple[str, bytes]:
    """Encode angle or power values: ``f4`` when exact, else ``f8``."""
    x8 = np.ascontiguousarray(x, dtype="<f8")
    with np.errstate(over="ignore", invalid="ignore"):
        x4 = x8.astype("<f4")
    if np.array_equal(x4, x8, equal_nan=True) and not _nan_payload_lost(x8, x4):
        code, raw, width = "f4", x4.tobytes(), 4
    else:
        code, raw, width = "f8", x8.tobytes(), 8
    if compress and x8.size >= 16:
        return code + "+z", _shuffle_z(raw, width)
    return code, raw


def _nan_payload_lost(x8: np.ndarray, x4: np.ndarray) -> bool:
    """True when a NaN would come back with other bits (kept exact: store as f8)."""
    nan = np.isnan(x8)
    if not nan.any():
        return False
    return not np.array_equal(x4[nan].astype("<f8").view("<u8"), x8[nan].view("<u8"))


def encode_times(t: np.ndarray, compress: bool) -> tuple[str, bytes]:
    """Encode sample times: ``base`` or ``tq`` when they give the same bits, else ``f8``."""
    t8 = np.ascontiguousarray(t, dtype="<f8")
    n = t8.size
    if n == 0:
        return "f8", b""
    t0 = float(t8[0])
    if np.isfinite(t0):
        k = np.arange(n, dtype=np.float64)
        cands = [0.0] if n == 1 else [float(t8[-1] - t0) / (n - 1), float(t8[1] - t0)]
        for dt in cands:
            if np.array_equal(t0 + dt * k, t8):
                return "base", _DD.pack(t0, dt)
        u = float(np.spacing(t0)) if t0 != 0.0 else 2.0 ** -40
        with np.errstate(invalid="ignore"):
            qf = (t8 - t0) / u
        if np.all(np.isfinite(qf)) and np.all(np.abs(qf) < 2.0 ** 31):
            q = qf.astype(np.int64)
            if np.array_equal(t0 + q * u, t8):
                steps = np.diff(q, prepend=0).astype("<i4")
                if np.array_equal(np.cumsum(steps, dtype=np.int64), q):
                    body = steps.tobytes()
                    if compress:
                        return "tq+z", _DD.pack(t0, u) + _shuffle_z(body, 4)
                    return "tq", _DD.pack(t0, u) + body
    if compress and n >= 16:
        return "f8+z", _shuffle_z(t8.tobytes(), 8)
    return "f8", t8.tobytes()


def decode(code: str, blob: bytes, n: int) -> np.ndarray:
    """The float64 column stored as ``blob`` with encoding ``code`` (n values)."""
    z = code.endswith("+z")
    base = code[:-2] if z else code
    try:
        if base == "f8":
            raw = _unshuffle(blob, 8, n) if z else blob
            if len(raw) != 8 * n:
                raise CodecError("wrong length")
            return np.frombuffer(raw, dtype="<f8")
        if base == "f4":
            raw = _unshuffle(blob, 4, n) if z else blob
            if len(raw) != 4 * n:
                raise CodecError("wrong length")
            return np.frombuffer(raw, dtype="<f4").astype(np.float64)
        if base == "base" and not z:
            if len(blob) != 16:
                raise CodecError("wrong length")
            t0, dt = _DD.unpack(blob)
            return t0 + dt * np.arange(n, dtype=np.float64)
        if base == "tq":
            if len(blob) < 16:
                raise CodecError("wrong length")
            t0, u = _DD.unpack_from(blob)
            body = _unshuffle(blob[16:], 4, n) if z else blob[16:]
            if len(body) != 4 * n:
                raise CodecError("wrong length")
            q = np.cumsum(np.frombuffer(body, dtype="<i4"), dtype=np.int64)
            return t0 + q * u
    except zlib.error as exc:
        raise CodecError(f"cannot decompress ({exc})") from None
    raise CodecError(f"unknown encoding {code!r}")


def encode_batch(t: np.ndarray, angle_deg: np.ndarray, power_db: np.ndarray,
                 compact: bool = True, compress: bool = True) -> tuple[str, bytes, bytes,
                                                                      bytes]:
    """``(enc, t_blob, angle_blob, power_blob)`` for one batch."""
    if not compact:
        return (PLAIN, np.ascontiguousarray(t, "<f8").tobytes(),
                np.ascontiguousarray(angle_deg, "<f8").tobytes(),
                np.ascontiguousarray(power_db, "<f8").tobytes())
    ct, bt = encode_times(t, compress)
    ca, ba = encode_values(angle_deg, compress)
    cp, bp = encode_values(power_db, compress)
    return f"{ct},{ca},{cp}", bt, ba, bp


def decode_batch(enc: str, n: int, tb: bytes, ab: bytes, pb: bytes
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Inverse of :func:`encode_batch`."""
    if enc == PLAIN:
        if len(tb) != 8 * n or len(ab) != 8 * n or len(pb) != 8 * n:
            raise CodecError("wrong length")
        return (np.frombuffer(tb, dtype="<f8"), np.frombuffer(ab, dtype="<f8"),
                np.frombuffer(pb, dtype="<f8"))
    parts = enc.split(",")
    if len(parts) != 3:
        raise CodecError(f"unknown encoding {enc!r}")
    return decode(parts[0], tb, n), decode(parts[1], ab, n), decode(parts[2], pb, n)


# ---------------------------------------------------------------------------------------
# blocks: a run of consecutive batch rows stored as one row (format version 2)
# ---------------------------------------------------------------------------------------

#: A block is closed when it holds this many samples or batches.
BLOCK_MAX_SAMPLES = 1 << 16
BLOCK_MAX_BATCHES = 1024


def encode_block(ts: list[np.ndarray], angles: list[np.ndarray], powers: list[np.ndarray],
                 rx_t: list[float], seqs: list[int] | None, compact: bool = True,
                 compress: bool = True) -> tuple[str, bytes, bytes, bytes | None, bytes,
                                                 bytes, bytes]:
    """``(enc, counts, rx, seq, t, angle, power)`` blobs of one block of batches."""
    counts = np.fromiter((x.size for x in angles), dtype="<i4", count=len(angles))
    t = np.concatenate(ts) if len(ts) > 1 else np.asarray(ts[0])
    a = np.concatenate(angles) if len(angles) > 1 else np.asarray(angles[0])
    p = np.concatenate(powers) if len(powers) > 1 else np.asarray(powers[0])
    enc, tb, ab, pb = encode_batch(t, a, p, compact, compress)
    rx = np.asarray(rx_t, dtype="<f8").tobytes()
    sq = None if seqs is None else np.asarray(seqs, dtype="<i8").tobytes()
    return enc, counts.tobytes(), rx, sq, tb, ab, pb


def decode_block(enc: str, n: int, counts: bytes, rx: bytes, seq: bytes | None, tb: bytes,
                 ab: bytes, pb: bytes) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                np.ndarray, np.ndarray, np.ndarray | None]:
    """``(t, angle, power, counts, rx_t, seq or None)`` of one stored block."""
    c = np.frombuffer(counts, dtype="<i4")
    r = np.frombuffer(rx, dtype="<f8")
    s = None if seq is None else np.frombuffer(seq, dtype="<i8")
    if (len(counts) % 4 or c.size != r.size or (s is not None and s.size != c.size)
            or int(c.sum(dtype=np.int64)) != n or (c.size and int(c.min()) < 0)):
        raise CodecError("per-batch columns disagree")
    t, a, p = decode_batch(enc, n, tb, ab, pb)
    return t, a, p, c, r, s
