"""The hand-written pipelines lobewatch is measured against: what a competent user would
write in an afternoon with numpy, scipy and pyzmq, kept small so anyone can check them.

* :class:`HandEma`: one joined parse per drain, ``np.frombuffer``, two ``np.bincount``
  (linear power sum and count per bin) and a per-bin exponential average in receive
  time -- the same recurrence as the estimator's ``ema`` mode, without sweep detection,
  mean-angle bins, validation or counting.
* :func:`hand_metrics`: peak by ``argmax``, half-power points by ``np.interp``, side
  lobes by ``scipy.signal.find_peaks``; with ``smooth`` > 0 a Savitzky-Golay filter
  (``scipy.signal.savgol_filter``) first, without which noisy data give wrong widths.
* :func:`hand_replay`: ``sqlite3`` rows of a session file, numpy arrays, the hand EMA
  and the hand metrics at every recorded tick.

tests/test_bench.py checks each computes the same numbers as lobewatch on the same
input, so every ratio in ``lobewatch bench`` compares like with like.

References:
    [1] A. Eckner, "Algorithms for unevenly spaced time series", 2012 working paper
        (the exact EMA for irregular updates, alpha = 1 - exp(-dt/tau); from memory).
    [2] A. Savitzky, M. J. E. Golay, Anal. Chem. 36(8), 1964 (smoothing filter).
"""

from __future__ import annotations

import json
import sqlite3
import time
from typing import Any

import numpy as np
import zmq

#: -3.0103 dB: half power (10 log10 0.5).
_HALF_DB = 10.0 * np.log10(0.5)


class HandEma:
    """Per-bin exponential average of linear power (bins of ``bin_deg`` centred on
    multiples of it, as the estimator's), time constant ``tau_s``."""

    def __init__(self, bin_deg: float = 1.0, tau_s: float = 3.0) -> None:
        self.nb = int(round(360.0 / bin_deg))
        self.w = 360.0 / self.nb
        self.tau_s = tau_s
        self.p = np.zeros(self.nb)
        self.last_t = np.full(self.nb, -np.inf)
        self.samples = 0

    def fold(self, angle_deg: np.ndarray, power_db: np.ndarray, now: float) -> None:
        """All samples received at ``now`` (Unix s)."""
        idx = np.floor((angle_deg + 180.0) / self.w + 0.5).astype(np.intp) % self.nb
        s = np.bincount(idx, weights=10.0 ** (power_db / 10.0), minlength=self.nb)
        c = np.bincount(idx, minlength=self.nb)
        hit = c > 0
        alpha = -np.expm1((self.last_t[hit] - now) / self.tau_s)
        self.p[hit] += alpha * (s[hit] / c[hit] - self.p[hit])
        self.last_t[hit] = now
        self.samples += int(angle_deg.size)

    def readout(self) -> tuple[np.ndarray, np.ndarray]:
        """Centres (deg) and power (dB) of the filled bins."""
        sel = np.flatnonzero(self.last_t > -np.inf)
        return -180.0 + self.w * sel, 10.0 * np.log10(self.p[sel])


def drain_raw_f32(sock: zmq.Socket, ema: HandEma, limit: int = 2000) -> int:
    """Receive what is queued (up to ``limit`` messages), one joined parse, fold."""
    frames = []
    for _ in range(limit):
        try:
            frames.append(sock.recv(zmq.NOBLOCK))
        except zmq.Again:
            break
    if frames:
        pairs = np.frombuffer(b"".join(frames), dtype="<f4").reshape(-1, 2)
        ema.fold(pairs[:, 0].astype(np.float64), pairs[:, 1].astype(np.float64), time.time())
    return len(frames)


def drain_json_single(sock: zmq.Socket, ema: HandEma, limit: int = 2000) -> int:
    """JSON single samples: one ``json.loads`` of the joined messages per drain."""
    frames = []
    for _ in range(limit):
        try:
            frames.append(sock.recv(zmq.NOBLOCK))
        except zmq.Again:
            break
    if frames:
        objs = json.loads(b"[" + b",".join(frames) + b"]")
        a = np.array([o["angle_deg"] for o in objs])
        p = np.array([o["power_dbm"] for o in objs])
        ema.fold(a, p, time.time())
    return len(frames)


def hand_metrics(angle_deg: np.ndarray, power_db: np.ndarray,
                 smooth: int = 0) -> dict[str, float | None]:
    """Peak angle (deg), HPBW (deg) and side lobe level (dB re peak) of a sector
    pattern sorted by angle; ``smooth`` odd > 2 applies a quadratic Savitzky-Golay
    filter over that many samples first."""
    from scipy.signal import find_peaks, savgol_filter  # here: keeps `lobewatch` start-up quick
    a = np.asarray(angle_deg, dtype=np.float64)
    p = np.asarray(power_db, dtype=np.float64)
    if smooth > 2:
        p = savgol_filter(p, smooth, 2, mode="interp")
    i = int(p.argmax())
    level = p[i] + _HALF_DB
    r = i + int(np.argmax(p[i:] < level))
    left = i - int(np.argmax(p[i::-1] < level))
    if r == i or left == i:
        return {"peak_angle_deg": float(a[i]), "hpbw_deg": None, "sll_db": None}
    x_r = float(np.interp(level, [p[r], p[r - 1]], [a[r], a[r - 1]]))
    x_l = float(np.interp(level, [p[left], p[left + 1]], [a[left], a[left + 1]]))
    peaks, _ = find_peaks(p, prominence=1.0)  # 1 dB: ripples of noise are not lobes
    nulls, _ = find_peaks(-p, prominence=1.0)
    n_r = nulls[nulls > i]
    n_l = nulls[nulls < i]
    side = peaks[((peaks > n_r[0]) if n_r.size else False)
                 | ((peaks < n_l[-1]) if n_l.size else False)]
    sll = float(p[side].max() - p[i]) if side.size else None
    return {"peak_angle_deg": float(a[i]), "hpbw_deg": x_r - x_l, "sll_db": sll}


def hand_replay(path: str, tau_s: float = 3.0) -> dict[str, Any]:
    """Replay a session file by hand: every batch into :class:`HandEma` at its receive
    time, the hand metrics at every recorded tick.  The columns are decoded with the
    file format's own codec (replay.codec), which any reader of the format needs."""
    from replay.codec import decode_block
    ema = HandEma(tau_s=tau_s)
    con = sqlite3.connect(f"file:{path}?mode=ro&immutable=1", uri=True)
    ticks = [t for (t,) in con.execute("SELECT t FROM ticks ORDER BY id")]
    k = 0
    readouts = 0
    last: dict[str, float | None] = {}
    for enc, n, cb, rb, sb, tb, ab, pb in con.execute(
            "SELECT enc, n, counts, rx, seq, t, angle_deg, power_db FROM blocks ORDER BY id"):
        _, a, p, counts, rx, _ = decode_block(enc, int(n), cb, rb, sb, tb, ab, pb)
        ends = np.cumsum(counts)
        start = 0
        for end, now in zip(ends.tolist(), rx.tolist(), strict=True):
            while k < len(ticks) and ticks[k] < now:
                ang, pw = ema.readout()
                if ang.size > 2:
                    last = hand_metrics(ang, pw)
                readouts += 1
                k += 1
            ema.fold(a[start:end], p[start:end], now)
            start = end
    for _ in ticks[k:]:
        ang, pw = ema.readout()
        if ang.size > 2:
            last = hand_metrics(ang, pw)
        readouts += 1
    con.close()
    return {"samples": ema.samples, "readouts": readouts, "last": last, "ema": ema}
