"""Least-squares fits and smoothing over a window of a sampled pattern.

The noisy-data pass of :func:`stream.pattern.measure` takes its peak from a quartic
fitted through the main lobe, its side lobe top from a parabola, and walks the lobes on
a Savitzky-Golay smoothing; these are those tools.  Angles are offsets in degrees
(sorted), powers in dB; a full turn's windows wrap across the +/-180 seam.

References:
    [1] A. Savitzky, M. J. E. Golay, "Smoothing and differentiation of data by
        simplified least squares procedures", Anal. Chem. 36(8), 1964.
"""

from __future__ import annotations

import functools

import numpy as np

from stream.batch import wrap180


def window(r: np.ndarray, p: np.ndarray, center: float, half: float,
            circular: bool) -> tuple[np.ndarray, np.ndarray]:
    """Offsets from ``center`` and powers of the samples within ``half`` of it (r is
    sorted: a slice, unless a full turn's window crosses the +/-180 seam)."""
    lo, hi = center - half, center + half
    if not circular or (lo >= r[0] and hi <= r[-1]):
        i0 = int(r.searchsorted(lo, side="left"))
        i1 = int(r.searchsorted(hi, side="right"))
        return r[i0:i1] - center, p[i0:i1]
    d = wrap180(r - center)
    sel = np.abs(d) <= half
    return d[sel], p[sel]


def lsq_parabola_vertex(r: np.ndarray, p: np.ndarray, center: float, half: float,
                circular: bool) -> tuple[float, float, float, int] | None:
    """Least-squares parabola (dB) through the samples within ``half`` of ``center``.

    Returns ``(vertex offset, vertex level, rms residual dB, samples used)``, or
    ``None`` with fewer than 7 samples or a non-concave fit.
    """
    d, y = window(r, p, center, half, circular)
    cnt = d.size
    if cnt < 7:
        return None
    u = d / half
    u2 = u * u
    # Normal equations of y = a u^2 + b u + c (u scaled to [-1, 1]: well conditioned).
    s1, s2, s3, s4 = u.sum(), u2.sum(), (u2 * u).sum(), (u2 * u2).sum()
    m = np.array([[s4, s3, s2], [s3, s2, s1], [s2, s1, float(cnt)]])
    rhs = np.array([(u2 * y).sum(), (u * y).sum(), y.sum()])
    try:
        a, b, c = (float(z) for z in np.linalg.solve(m, rhs))
    except np.linalg.LinAlgError:
        return None
    if not a < 0.0:
        return None
    res = y - ((a * u + b) * u + c)
    rms = float(np.sqrt(np.mean(res * res)))
    uv = min(max(-b / (2.0 * a), -1.0), 1.0)
    return center + uv * half, a * uv * uv + b * uv + c, rms, cnt


#: Grid (in units of the fit half-width) on which the fitted quartic's maximum is sought.
_PEAK_GRID = np.linspace(-1.0, 1.0, 401)


def quartic_peak(r: np.ndarray, p: np.ndarray, center: float, half: float,
               circular: bool, peak_above_rms: float = -1.0
               ) -> tuple[float, float, float, int] | None:
    """Maximum of a least-squares quartic (dB) through the samples within ``half`` of
    ``center``: ``(offset, level, rms residual dB, samples used)``, or ``None`` with
    fewer than 9 samples.  The maximum is searched only when the rms residual exceeds
    ``peak_above_rms`` (offset and level are NaN otherwise)."""
    d, y = window(r, p, center, half, circular)
    cnt = d.size
    if cnt < 9:
        return None
    u = d / half
    v = vander4(u)
    vt = v.T
    try:
        coef = np.linalg.solve(vt @ v, vt @ y)
    except np.linalg.LinAlgError:
        return None
    res = y - v @ coef
    rms = float(np.sqrt(res @ res / cnt))
    if rms <= peak_above_rms:
        return float("nan"), float("nan"), rms, cnt
    c4, c3, c2, c1, c0 = (float(c) for c in coef)
    ug = _PEAK_GRID
    yg = (((c4 * ug + c3) * ug + c2) * ug + c1) * ug + c0
    g = int(yg.argmax())
    ub, yb = float(ug[g]), float(yg[g])
    if 0 < g < ug.size - 1:  # refine on the grid with the 3-point parabola
        y0, y1, y2 = yg[g - 1], yg[g], yg[g + 1]
        den = y0 - 2.0 * y1 + y2
        if den < 0.0:
            ub = float(ug[g] + 0.5 * (y0 - y2) / den * (ug[1] - ug[0]))
            yb = (((c4 * ub + c3) * ub + c2) * ub + c1) * ub + c0
    return center + ub * half, yb, rms, cnt


def vander4(u: np.ndarray) -> np.ndarray:
    """``np.vander(u, 5)`` (columns u^4 .. u^0), the same floats: each power is the
    previous one times ``u``, as ``np.vander`` forms them, with a fifth of its overhead."""
    v = np.empty((u.shape[0], 5))
    v[:, 4] = 1.0
    v[:, 3] = u
    np.multiply(u, u, out=v[:, 2])
    np.multiply(v[:, 2], u, out=v[:, 1])
    np.multiply(v[:, 1], u, out=v[:, 0])
    return v


def savgol_smooth(p: np.ndarray, k: int, circular: bool) -> np.ndarray:
    """Savitzky-Golay smoothing, quadratic over k (odd) samples: unlike a moving
    average it does not flatten a curved lobe, so the level crossings keep their place
    (A. Savitzky, M. J. E. Golay, Anal. Chem. 36(8), 1964).  The weights are
    ``scipy.signal.savgol_coeffs`` (cached per window); one ``np.convolve`` applies them
    (``savgol_filter`` itself measured 3-13x slower here: it refits the weights and pads
    through ndimage on every call).  Sector edges are padded with the end values, a full
    turn wraps."""
    m = k // 2
    c = savgol_weights(k)
    if circular and p.size > k:
        ext = np.concatenate((p[-m:], p, p[:m]))
    else:
        ext = np.concatenate((np.full(m, p[0]), p, np.full(m, p[-1])))
    return np.convolve(ext, c, mode="valid")


@functools.lru_cache(maxsize=64)
def savgol_weights(k: int) -> np.ndarray:
    """Quadratic Savitzky-Golay smoothing weights over ``k`` (odd) samples."""
    from scipy.signal import savgol_coeffs  # here: scipy.signal is slow to import
    c = savgol_coeffs(k, 2)
    c.setflags(write=False)
    return c
