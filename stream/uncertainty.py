"""One-sigma uncertainty of the headline beam numbers: peak direction, HPBW, SLL.

Method: **analytic first-order propagation** (the "delta method"), not resampling -- it
runs on every readout, and a bootstrap of :func:`stream.pattern.measure` would cost
tens of its calls per tick.  Two sources are combined as a root sum of squares:

1. *Measured noise.*  The per-sample power noise sigma is estimated from the pattern
   itself: from the residuals of the least-squares quartic through the main lobe
   (``RSS / (m - 5)``) when the lobe holds :data:`LOBE_SAMPLES_FOR_NOISE` samples;
   otherwise, when the step is fine, from second differences (for white noise
   ``p[i-1] - 2 p[i] + p[i+1]`` has variance ``6 sigma^2``; a robust spread over the
   samples within ``NOISE_SPAN_DB`` of the peak keeps nulls out); on a coarse sweep
   noise cannot be told from the pattern's shape and the step term speaks alone.
   Then, mirroring what ``measure`` does:

   * peak direction: a least-squares quartic ``f`` through the main lobe above half
     power; its vertex ``x*`` moves by ``-delta f'(x*) / f''(x*)``, so
     ``var(x*) = g^T C g / f''(x*)^2`` with ``g = (0, 1, 2x*, 3x*^2, 4x*^3)`` and
     ``C = sigma^2 (A^T A)^-1`` the coefficients' covariance [1, ch. 7];
   * HPBW: each half-power edge moves by ``(delta p_edge - delta p_peak) / s`` with ``s``
     the slope there (dB/deg); ``delta p_edge`` has variance ``sigma^2 sum h^2`` where
     ``h`` are the Savitzky-Golay weights of the smoothing ``measure`` applies to noisy
     lobes [2] (``scipy.signal.savgol_coeffs``); ``var(peak level) = g0^T C g0``,
     ``g0 = (1, x*, ..., x*^4)``.  ``HPBW = x_R - x_L``, so
     ``var = sigma_e^2 (1/s_R^2 + 1/s_L^2) + var(pk) (1/s_R - 1/s_L)^2`` [1, ch. 3];
   * SLL: the level of a least-squares parabola through the side lobe top (window of
     half the half-power width, as ``measure``), minus the peak level.

2. *Sampling step.*  Two standard three-point interpolations of the same samples -- a
   parabola in dB (a Gaussian) and a parabola in linear power for a maximum; linear in
   dB and linear in power for a half-power crossing [3] -- agree when the step is fine
   and disagree when it is coarse.  Their difference is taken as the step's one sigma,
   and for a direction at least ``step / sqrt(12) x min(1, step / HPBW)`` (a uniform
   error over one step, scaled by how coarse the step is against the beam).  When it
   dominates (or fewer than :data:`MIN_SAMPLES_PER_HPBW` samples span the half-power
   beam) the metric gets a caveat in ``BeamMetrics.reasons`` saying that the step
   limits the answer.

Coverage is checked in tests/test_uncertainty.py on brute-force array patterns with
seeded noise: the stated +/-1 sigma holds for about 68 % of draws.

References:
    [1] P. R. Bevington and D. K. Robinson, *Data Reduction and Error Analysis for the
        Physical Sciences*, 3rd ed., McGraw-Hill, 2003 (ch. 3 propagation of errors,
        ch. 7 least-squares fit covariance) -- from memory.
    [2] A. Savitzky and M. J. E. Golay, "Smoothing and differentiation of data by
        simplified least squares procedures", *Anal. Chem.* 36 (8), 1964.
    [3] M. Gasior and J. L. Gonzalez, "Improving FFT frequency measurement resolution
        by parabolic and Gaussian spectrum interpolation", CERN AB-Note-2004-021, 2004
        (three-point peak interpolators) -- from memory.
"""

from __future__ import annotations

import math
from dataclasses import replace
from functools import lru_cache

import numpy as np

from stream.batch import wrap180
from stream.beam import HALF_POWER_DB, BeamMetrics
from stream.lobe_fits import savgol_weights

#: Samples within this many dB of the peak are used to estimate the noise.
NOISE_SPAN_DB: float = 20.0
#: Below this many samples across the half-power beam the step limits the answer.
MIN_SAMPLES_PER_HPBW: float = 10.0
#: A step term below this share of the step (angles) or this many dB (levels) is no
#: reason for a caveat, even when the noise term is smaller still.
_NOTE_STEP_FRAC: float = 0.1
_NOTE_LEVEL_DB: float = 0.1
#: Quartic-fit residual (dB rms) above which ``measure`` treats a lobe as noisy (its
#: ``_NOISE_DB``); below it there is no smoothing.
NOISY_DB: float = 0.02
#: A main lobe with at least this many samples above half power gives the noise from
#: its least-squares quartic's residuals (dof-corrected).
LOBE_SAMPLES_FOR_NOISE: int = 9
#: Consistency factor of the median absolute deviation for a normal distribution.
_MAD_TO_SIGMA: float = 1.4826


def with_uncertainty(metrics: BeamMetrics, angle_deg: np.ndarray,
                     power_db: np.ndarray) -> BeamMetrics:
    """``metrics`` with ``uncertainty`` filled in (and step caveats added to
    ``reasons``); unchanged when there is no peak.  ``angle_deg`` / ``power_db`` are the
    pattern ``measure`` used (sorted, duplicates merged, any frame)."""
    pk = metrics.peak_angle_deg
    if pk is None:
        return metrics
    x = np.asarray(angle_deg, dtype=np.float64)
    p = np.asarray(power_db, dtype=np.float64)
    if x.size < 5:
        return metrics
    r = wrap180(x - pk)  # offsets from the peak, any frame
    dr = r[1:] - r[:-1]
    if float(dr.min()) <= 0.0:  # measure() hands them sorted unless circular
        o = np.argsort(r, kind="stable")
        r, p = r[o], p[o]
        dr = r[1:] - r[:-1]
    pk_db = float(metrics.peak_power_db) if metrics.peak_power_db is not None else p.max()
    step = _median(dr[::-(-dr.size // 512)])  # <= 512 steps give the median
    unc: dict[str, float] = {}
    reasons = dict(metrics.reasons)
    hpbw = metrics.hpbw_deg

    # Main-lobe fit: samples above half power around the peak, as measure() fits.
    ic = int(r.searchsorted(0.0))  # r is sorted: the sample nearest offset 0
    if ic == r.size or (ic > 0 and -float(r[ic - 1]) < float(r[ic])):
        ic -= 1
    lo, hi = _lobe_span(p, ic, pk_db + HALF_POWER_DB)
    fit = _poly_fit(r[lo:hi], p[lo:hi], 4 if hi - lo >= 7 else 2)
    # The noise: from the quartic's residuals when the lobe holds enough samples (a
    # clean lobe leaves a few mdB), else from second differences when the step is fine
    # enough to tell noise from the pattern's own curvature, else unknown (0: the step
    # term and its caveat speak for the data).
    if fit is not None and hi - lo >= LOBE_SAMPLES_FOR_NOISE:
        res = p[lo:hi] - np.polyval(fit[0][::-1], r[lo:hi])
        sigma = math.sqrt(float(res @ res) / (hi - lo - fit[0].size))
    elif hpbw is not None and hpbw / step >= MIN_SAMPLES_PER_HPBW:
        sigma = noise_sigma_db(p, pk_db)
    else:
        sigma = 0.0
    var_pk_db = sigma ** 2
    s_pk_noise = None
    if fit is not None:
        coef, cov_unit, x_v = fit
        d2 = _poly_der(coef, x_v, 2)
        pw = [x_v ** j for j in range(coef.size)]
        g0 = np.array(pw)
        g = np.array([0.0] + [j * pw[j - 1] for j in range(1, coef.size)])
        var_pk_db = sigma ** 2 * float(g0 @ cov_unit @ g0)
        if d2 < 0:
            s_pk_noise = sigma * math.sqrt(max(float(g @ cov_unit @ g), 0.0)) / abs(d2)
    # step floor for a direction: a uniform error over one step, scaled by how coarse
    # the step is against the beam (negligible at fine steps)
    floor = step / math.sqrt(12.0) * min(1.0, step / hpbw) if hpbw else step / math.sqrt(12.0)
    s_pk_step = abs(_vertex_db(r, p, ic) - _vertex_lin(r, p, ic)) if 0 < ic < r.size - 1 \
        else step
    s_pk_step = max(s_pk_step, floor)
    if s_pk_noise is None:
        s_pk_noise = sigma * step / max(abs(p[min(ic + 1, p.size - 1)] - p[max(ic - 1, 0)]),
                                        1e-3)
    unc["peak_angle_deg"] = math.hypot(s_pk_noise, s_pk_step)
    coarse = hpbw is not None and hpbw / step < MIN_SAMPLES_PER_HPBW
    if coarse or s_pk_step > max(s_pk_noise, _NOTE_STEP_FRAC * step):
        reasons.setdefault("peak_angle_deg", _step_note(step, hpbw))

    # HPBW from the two edges.
    if hpbw is not None and metrics.hpbw_left_deg is not None \
            and metrics.hpbw_right_deg is not None:
        level = pk_db + HALF_POWER_DB
        gain = _smoothing_gain(hi - lo) if sigma > NOISY_DB else 1.0
        s_e2 = sigma ** 2 * gain
        var = 0.0
        inv = []
        step_var = 0.0
        for edge in (metrics.hpbw_left_deg, metrics.hpbw_right_deg):
            e = (edge - pk + 180.0) % 360.0 - 180.0
            slope, d_step = _edge(r, p, e, level)
            inv.append(1.0 / slope if slope != 0 else 0.0)
            var += s_e2 * inv[-1] ** 2
            step_var += max(d_step, floor) ** 2
        var += var_pk_db * (inv[1] - inv[0]) ** 2
        s_hp_noise = math.sqrt(var)
        s_hp_step = math.sqrt(step_var)
        unc["hpbw_deg"] = math.hypot(s_hp_noise, s_hp_step)
        if coarse or s_hp_step > max(s_hp_noise, _NOTE_STEP_FRAC * step):
            reasons.setdefault("hpbw_deg", _step_note(step, hpbw))

    # Side lobe level: parabola through the side lobe top minus the peak level.
    if metrics.sll_db is not None and metrics.sll_angle_deg is not None:
        e = (metrics.sll_angle_deg - pk + 180.0) % 360.0 - 180.0
        k = _nearest(r, e)
        half = 0.5 * hpbw if hpbw is not None else 3.0 * step
        w0, w1 = _within(r, k, max(0.5 * half, 1.01 * step))
        fit_s = _poly_fit(r[w0:w1] - r[k], p[w0:w1], 2)
        var_sl = sigma ** 2
        if fit_s is not None:
            coef, cov_unit, x_v = fit_s
            g0 = np.array([x_v ** j for j in range(coef.size)])
            var_sl = sigma ** 2 * float(g0 @ cov_unit @ g0)
        s_sl_noise = math.sqrt(var_sl + var_pk_db)
        s_sl_step = 0.0
        if 0 < k < r.size - 1:
            s_sl_step = abs(_vertex_db(r, p, k, level=True)
                            - _vertex_lin(r, p, k, level=True))
        s_sl_step = math.hypot(s_sl_step, s_pk_step_level(r, p, ic))
        unc["sll_db"] = math.hypot(s_sl_noise, s_sl_step)
        if coarse or s_sl_step > max(s_sl_noise, _NOTE_LEVEL_DB):
            reasons.setdefault("sll_db", _step_note(step, hpbw))
    return replace(metrics, uncertainty=unc, reasons=reasons)


def noise_sigma_db(power_db: np.ndarray, peak_db: float | None = None) -> float:
    """Per-sample noise (dB, 1 sigma) from the robust spread of second differences:
    ``var(p[i-1] - 2 p[i] + p[i+1]) = 6 sigma^2`` for white noise."""
    p = np.asarray(power_db, dtype=np.float64)
    if p.size < 5:
        return 0.0
    top = p.max() if peak_db is None else peak_db
    d2 = p[:-2] - 2.0 * p[1:-1] + p[2:]
    keep = p[1:-1] >= top - NOISE_SPAN_DB
    if keep.sum() >= 5:
        d2 = d2[keep]
    mad = float(np.median(np.abs(d2 - np.median(d2))))
    return _MAD_TO_SIGMA * mad / np.sqrt(6.0)


def _nearest(r: np.ndarray, e: float) -> int:
    """Index of the sorted ``r`` nearest ``e`` (the first on a tie), as
    ``np.abs(r - e).argmin()`` gives it, by bisection; ``r`` distinct by far more than
    an ulp, as measure() leaves it (duplicates within 1e-9 deg merged)."""
    j = int(r.searchsorted(e))
    if j == 0:
        return 0
    if j == r.size or abs(float(r[j - 1]) - e) <= abs(float(r[j]) - e):
        return j - 1
    return j


def _within(r: np.ndarray, k: int, h: float) -> tuple[int, int]:
    """Slice bounds of the sorted ``r`` where ``abs(r - r[k]) <= h`` (the same test,
    made on a bisected neighbourhood only; the run is contiguous in sorted data)."""
    c = float(r[k])
    lo = int(r.searchsorted(c - 2.0 * h))
    hi = int(r.searchsorted(c + 2.0 * h, side="right"))
    ok = (np.abs(r[lo:hi] - c) <= h).nonzero()[0]
    return lo + int(ok[0]), lo + int(ok[-1]) + 1


def _median(v: np.ndarray) -> float:
    """``np.median`` of a non-empty 1-D array, the same float, by one sort: np.median's
    checks and dispatch cost more than the work at these sizes (a few hundred steps;
    partition is slow on the equal values of a regular grid).
    tests/test_uncertainty.py holds it equal to np.median."""
    srt = np.sort(v)
    m = v.size // 2
    if v.size % 2:
        return float(srt[m])
    return (float(srt[m - 1]) + float(srt[m])) / 2.0


def _step_note(step_deg: float, hpbw_deg: float | None) -> str:
    across = f"; {hpbw_deg / step_deg:.1f} samples across the half-power beam" \
        if hpbw_deg else ""
    return (f"the sampling step ({step_deg:.2g} deg) limits this value more than the "
            f"noise does{across}; sweep in finer steps for a firmer answer")


def _lobe_span(p: np.ndarray, ic: int, level: float) -> tuple[int, int]:
    """Slice bounds of the contiguous run of samples at or above ``level`` around ic."""
    below = (p < level).nonzero()[0]
    k = int(below.searchsorted(ic))
    lo = int(below[k - 1]) + 1 if k > 0 else 0
    hi = int(below[k]) if k < below.size else p.size
    return lo, hi


def _poly_fit(x: np.ndarray, y: np.ndarray, deg: int
              ) -> tuple[np.ndarray, np.ndarray, float] | None:
    """Least squares polynomial (coefficients low order first), the unit-variance
    covariance ``(A^T A)^-1`` and the vertex nearest 0; None when under-determined."""
    if x.size < deg + 1:
        if x.size >= 3 and deg > 2:
            return _poly_fit(x, y, 2)
        return None
    scale = max(abs(float(x[0])), abs(float(x[-1]))) or 1.0  # x is sorted
    u = x / scale
    a = _vander_inc(u, deg)
    try:
        ata_inv = np.linalg.inv(a.T @ a)
    except np.linalg.LinAlgError:
        return None
    c = ata_inv @ (a.T @ y)
    # back to unscaled x: c_k -> c_k / scale^k, covariance likewise
    s = scale ** -np.arange(deg + 1, dtype=np.float64)
    coef = c * s
    cov = ata_inv * (s[:, None] * s)
    # vertex: Newton's method on f' from 0 (the peak is at offset ~0)
    cl = coef.tolist()
    d1 = _derivative(cl, 1)
    d2 = _derivative(cl, 2)
    x_v = 0.0
    for _ in range(6):
        h = _horner(d2, x_v)
        if h == 0.0:
            break
        dx = _horner(d1, x_v) / h
        x_v -= dx
        if abs(dx) < 1e-9 * scale:
            break
    if not abs(x_v) <= 2.0 * scale:  # diverged: the vertex is not inside the fit
        x_v = 0.0
    return coef, cov, x_v


def _vander_inc(u: np.ndarray, deg: int) -> np.ndarray:
    """``np.vander(u, deg + 1, increasing=True)``, the same floats (each power the
    previous times ``u``, as numpy forms them) at a third of its per-call cost."""
    a = np.empty((u.shape[0], deg + 1))
    a[:, 0] = 1.0
    a[:, 1] = u
    for j in range(2, deg + 1):
        np.multiply(a[:, j - 1], u, out=a[:, j])
    return a


def _derivative(coef: list[float], m: int) -> list[float]:
    """Coefficients (low order first) of the m-th derivative of a polynomial; plain
    Python on a handful of scalars (numpy.polynomial's per-call cost dominated here)."""
    for _ in range(m):
        coef = [k * c for k, c in enumerate(coef)][1:] or [0.0]
    return coef


def _horner(coef: list[float], x: float) -> float:
    """Value at x of the polynomial with coefficients ``coef`` (low order first)."""
    y = 0.0
    for c in reversed(coef):
        y = y * x + c
    return y


def _poly_der(coef: np.ndarray, x: float, m: int) -> float:
    return _horner(_derivative(coef.tolist(), m), x)


def _three(r: np.ndarray, p: np.ndarray, k: int) -> tuple[float, float, float, float,
                                                          float, float]:
    x0, x1, x2 = r[k - 1:k + 2].tolist()
    y0, y1, y2 = p[k - 1:k + 2].tolist()
    return x0, x1, x2, y0, y1, y2


def _parabola_vertex(x0: float, x1: float, x2: float, y0: float, y1: float, y2: float
                     ) -> tuple[float, float]:
    """Vertex (x, y) of the parabola through three points, in Newton form
    ``y = y0 + d1 (x - x0) + a (x - x0)(x - x1)``; the middle point when not concave."""
    d1 = (y1 - y0) / (x1 - x0)
    d2 = (y2 - y1) / (x2 - x1)
    a = (d2 - d1) / (x2 - x0)
    if a >= 0:
        return x1, y1
    xv = 0.5 * (x0 + x1) - d1 / (2.0 * a)
    return xv, y0 + d1 * (xv - x0) + a * (xv - x0) * (xv - x1)


def _vertex_db(r: np.ndarray, p: np.ndarray, k: int, level: bool = False) -> float:
    x0, x1, x2, y0, y1, y2 = _three(r, p, k)
    xv, yv = _parabola_vertex(x0, x1, x2, y0, y1, y2)
    return yv if level else xv


def _vertex_lin(r: np.ndarray, p: np.ndarray, k: int, level: bool = False) -> float:
    x0, x1, x2, y0, y1, y2 = _three(r, p, k)
    xv, yv = _parabola_vertex(x0, x1, x2, 10.0 ** (y0 / 10.0), 10.0 ** (y1 / 10.0),
                              10.0 ** (y2 / 10.0))
    return 10.0 * math.log10(max(yv, 1e-30)) if level else xv


def s_pk_step_level(r: np.ndarray, p: np.ndarray, ic: int) -> float:
    """Step term of the peak level, dB (the two interpolators' disagreement)."""
    if not 0 < ic < r.size - 1:
        return 0.0
    return abs(_vertex_db(r, p, ic, level=True) - _vertex_lin(r, p, ic, level=True))


@lru_cache(maxsize=64)
def _smoothing_gain(lobe_samples: int) -> float:
    """Noise variance gain sum(h^2) of the Savitzky-Golay (quadratic) smoothing that
    ``measure`` applies to a noisy lobe of ``lobe_samples`` samples (window 2k - 1,
    k = 2 (n // 12) + 1); 1 without smoothing."""
    k = 2 * (lobe_samples // 12) + 1
    if k < 3:
        return 1.0
    h = savgol_weights(2 * k - 1)  # the weights measure() smooths with
    return float(np.sum(h * h))


def _edge(r: np.ndarray, p: np.ndarray, e: float, level: float) -> tuple[float, float]:
    """Slope (dB/deg) of the pattern at the crossing near offset ``e`` and the
    disagreement (deg) of linear-in-dB and linear-in-power interpolation there."""
    j = int(r.searchsorted(e))
    j = min(max(j, 1), r.size - 1)
    # slope from a least-squares line through up to 5 samples around the crossing
    lo, hi = max(j - 3, 0), min(j + 2, r.size)
    rs, ps = r[lo:hi].tolist(), p[lo:hi].tolist()
    x0, x1, y0, y1 = rs[j - 1 - lo], rs[j - lo], ps[j - 1 - lo], ps[j - lo]
    if hi - lo >= 3:
        mean = sum(rs) / len(rs)
        xs = [x - mean for x in rs]
        slope = (sum(x * y for x, y in zip(xs, ps, strict=True))
                 / sum(x * x for x in xs))  # least-squares line
    else:
        slope = (y1 - y0) / (x1 - x0) if x1 != x0 else 0.0
    if y1 == y0 or x1 == x0:
        return slope, 0.0
    x_db = x0 + (level - y0) * (x1 - x0) / (y1 - y0)
    l0, l1, lv = 10.0 ** (y0 / 10.0), 10.0 ** (y1 / 10.0), 10.0 ** (level / 10.0)
    x_lin = x0 + (lv - l0) * (x1 - x0) / (l1 - l0) if l1 != l0 else x_db
    if not (min(x0, x1) <= x_db <= max(x0, x1)):
        return slope, 0.0
    return slope, abs(x_db - x_lin)
