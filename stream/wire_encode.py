"""Messages of wire format version 1, made (publishers, the simulator, tests and the
bench): the inverse of :mod:`stream.wire_format`'s parsers."""

from __future__ import annotations

import json
from typing import Any

import numpy as np

from stream.wire_format import DTYPES, WIRE_VERSION


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
    if dtype not in DTYPES:
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
    data = np.stack(cols).astype(DTYPES[dtype], copy=False).tobytes()
    return _with_topic(topic, [json.dumps(hdr, separators=(",", ":")).encode(), data])


def encode_raw_f32(angle_deg: np.ndarray, power_db: np.ndarray, *,
                   topic: bytes | None = None) -> list[bytes]:
    """Interleaved little-endian float32 (angle_deg, power_db) pairs, no header."""
    pairs = np.empty((np.size(angle_deg), 2), dtype="<f4")
    pairs[:, 0] = angle_deg
    pairs[:, 1] = power_db
    return _with_topic(topic, [pairs.tobytes()])
