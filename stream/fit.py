"""Fit the textbook array model to a measured power pattern (least squares on dB).

Model, in dB of the data's own units (dBm or relative dB)::

    P(theta) = 10 log10( g E(theta) |AF(theta)|^2 / N^2 + 10^(F/10) )
    E(theta) = cos^q(theta)          (element power pattern, 0 behind the element)
    AF(theta) = sum_n w_n exp(j 2 pi d n (sin theta - sin theta_0))

with free parameters steering ``theta_0`` (deg), gain ``g`` (dB), element exponent ``q``
and, optionally, spacing ``d`` (wavelengths); N and the taper ``w`` are the user's
nominal values (:mod:`stream.array_model`).  ``F`` is the noise floor, estimated
beforehand from the lowest samples and held fixed: adding it in linear power keeps the
model's nulls at the floor instead of at -infinity, so a null that noise filled in does
not dominate the fit.  Only samples at least ``ABOVE_FLOOR_DB`` above the floor enter
the residual ("the region above the noise floor").

Solver: :func:`scipy.optimize.least_squares` (trust-region reflective, bounds on every
parameter), started from the measured peak direction.  Uncertainty: 1-sigma from the
Jacobian at the solution, ``cov = s^2 (J^T J)^-1`` with ``s^2 = sum r^2 / (m - p)``
(linearised, Gaussian residuals assumed; not resampled).

References
----------
1. C. A. Balanis, *Antenna Theory*, 3rd ed., Wiley 2005, ch. 6 (array factor,
   pattern multiplication), from memory.
2. SciPy reference, ``scipy.optimize.least_squares`` (trf method, ``jac`` output).
3. W. H. Press et al., *Numerical Recipes*, 3rd ed., section 15.5 (covariance of a
   nonlinear least-squares fit from the Jacobian), from memory.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import least_squares

from stream.array_model import ArrayModel, element_power, taper_weights
from stream.batch import wrap_angle_deg

#: Samples this far above the noise floor enter the fit, dB.
ABOVE_FLOOR_DB: float = 3.0
#: The floor is the mean (linear) of this lowest fraction of the samples ...
FLOOR_FRACTION: float = 0.05
#: ... but never closer than this below the highest sample, dB (a sweep that never
#: leaves the main lobe has no floor to see).
FLOOR_BELOW_PEAK_DB: float = 25.0
#: Bounds of the free parameters.
STEER_LIMIT_DEG: float = 89.0
#: Evaluations allowed from each starting point.  A start that has not converged by
#: then is a poor one: on clean model patterns with exact nulls two of the three ran to
#: scipy's default (400 for four parameters) and ended with five times the best cost,
#: which took half a second of a readout's worker time.
MAX_NFEV: int = 150
ELEMENT_EXP_MAX: float = 20.0
SPACING_MIN_WL: float = 0.05
SPACING_MAX_WL: float = 2.0
#: The starting-point scan looks at about this many samples.
SCAN_SAMPLES: int = 600
#: The fitted floor lies at most this far below the highest sample, dB.
FLOOR_RANGE_DB: float = 90.0
#: Fewest samples above the floor needed for a fit.
MIN_SAMPLES: int = 6

_DB = 10.0 / math.log(10.0)


class FitError(ValueError):
    """The pattern cannot be fitted (too few usable samples, no beam)."""


@dataclass(frozen=True, slots=True)
class ModelFit:
    """Result of :func:`fit_model`.  ``gain_db`` is the fitted model's peak level in the
    data's units; ``uncertainty`` holds 1-sigma values from the Jacobian for
    ``steer_deg``, ``gain_db``, ``element_exp`` and (when free) ``spacing_wl``."""

    steer_deg: float
    gain_db: float
    element_exp: float
    spacing_wl: float
    n_elements: int
    taper: str
    floor_db: float
    residual_rms_db: float
    samples_used: int
    uncertainty: dict[str, float] = field(default_factory=dict)
    spacing_free: bool = False
    residual_all_rms_db: float = float("nan")
    cost: float = float("nan")
    floor_free: bool = True
    method: str = "scipy.optimize.least_squares (trf); 1-sigma from the Jacobian"

    def model(self) -> ArrayModel:
        """The fitted parameters as an :class:`ArrayModel` (normalised pattern)."""
        return ArrayModel(self.n_elements, self.spacing_wl, self.element_exp,
                          self.steer_deg, self.taper)

    def power_db(self, angle_deg: np.ndarray) -> np.ndarray:
        """The fitted pattern in the data's units, floor included."""
        return model_power_db(angle_deg, self.n_elements, self.spacing_wl, self.steer_deg,
                              self.element_exp, self._offset_db(), self.floor_db,
                              taper_weights(self.taper, self.n_elements))

    def _offset_db(self) -> float:
        return self.gain_db - _peak_raw_db(self.n_elements, self.spacing_wl, self.steer_deg,
                                           self.element_exp,
                                           taper_weights(self.taper, self.n_elements))

    def to_dict(self) -> dict:
        return {"steer_deg": self.steer_deg, "gain_db": self.gain_db,
                "element_exp": self.element_exp, "spacing_wl": self.spacing_wl,
                "spacing_free": self.spacing_free, "n_elements": self.n_elements,
                "taper": self.taper, "floor_db": self.floor_db,
                "residual_rms_db": self.residual_rms_db, "samples_used": self.samples_used,
                "uncertainty": dict(self.uncertainty), "method": self.method}


def af_sum(z: np.ndarray, weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A = sum_k w_k z^k and dA/dpsi = j sum_k k w_k z^k for z = exp(j psi), by
    Horner's rule (no complex exponential per element; |A| equals the centred array
    factor's magnitude, and so does Re(conj(A) dA/dpsi))."""
    w = np.asarray(weights, dtype=np.float64)
    p = np.full(z.shape, w[-1], dtype=np.complex128)
    dp = np.zeros(z.shape, dtype=np.complex128)
    for c in w[-2::-1]:
        dp = dp * z + p
        p = p * z + c
    return p, 1j * z * dp


def raw_power(angle_deg: np.ndarray, n_elements: int, spacing_wl: float, steer_deg: float,
              element_exp: float, weights: np.ndarray) -> np.ndarray:
    """E(theta) |AF(theta)|^2 / (sum w)^2, linear, not normalised to its maximum."""
    theta = np.deg2rad(np.asarray(angle_deg, dtype=np.float64))
    psi = 2.0 * np.pi * spacing_wl * (np.sin(theta) - math.sin(math.radians(steer_deg)))
    w = np.asarray(weights, dtype=np.float64)
    if w.size != n_elements:
        raise ValueError(f"weights must have {n_elements} values, got {w.size}")
    af, _ = af_sum(np.exp(1j * psi), w)
    return element_power(angle_deg, element_exp) * (af.real ** 2 + af.imag ** 2) \
        / float(np.sum(w)) ** 2


def _peak_raw_db(n_elements: int, spacing_wl: float, steer_deg: float, element_exp: float,
                 weights: np.ndarray) -> float:
    """Maximum of :func:`raw_power` over the visible region, dB (0.05-deg grid, then
    0.001-deg around the best point)."""
    g = np.arange(-90.0, 90.0 + 1e-9, 0.05)
    r = raw_power(g, n_elements, spacing_wl, steer_deg, element_exp, weights)
    c = float(g[int(np.argmax(r))])
    f = np.arange(c - 0.05, c + 0.05 + 1e-9, 0.001)
    peak = float(np.max(raw_power(f, n_elements, spacing_wl, steer_deg, element_exp, weights)))
    return 10.0 * math.log10(max(peak, 1e-300))


def model_power_db(angle_deg: np.ndarray, n_elements: int, spacing_wl: float,
                   steer_deg: float, element_exp: float, offset_db: float, floor_db: float,
                   weights: np.ndarray) -> np.ndarray:
    """P = 10 log10(10^(offset/10) raw + 10^(floor/10)), dB (see module docstring)."""
    raw = raw_power(angle_deg, n_elements, spacing_wl, steer_deg, element_exp, weights)
    return 10.0 * np.log10(10.0 ** (offset_db / 10.0) * raw + 10.0 ** (floor_db / 10.0))


def noise_floor_db(power_db: np.ndarray) -> float:
    """Noise floor estimate: mean linear power of the lowest ``FLOOR_FRACTION`` of the
    samples, but never above the highest sample minus ``FLOOR_BELOW_PEAK_DB``."""
    p = np.sort(np.asarray(power_db, dtype=np.float64))
    k = max(1, int(round(FLOOR_FRACTION * p.size)))
    floor = 10.0 * math.log10(float(np.mean(10.0 ** (p[:k] / 10.0))))
    return min(floor, float(p[-1]) - FLOOR_BELOW_PEAK_DB)


def _scan_starts(a: np.ndarray, p: np.ndarray, n: int, spacing_wl: float, w: np.ndarray,
                 floor_lin: float, centre_deg: float, hpbw_deg: float,
                 exps: tuple[float, ...], keep: int = 3) -> list[tuple[float, float, float]]:
    """(steer, offset, q) of the ``keep`` lowest-cost points of a grid: steering over
    +/- one beamwidth around ``centre_deg`` in 1/40-beamwidth steps, offset from the
    samples within 6 dB of the peak."""
    steers = centre_deg + np.arange(-40, 41) * (hpbw_deg / 40.0)
    steers = steers[np.abs(steers) < STEER_LIMIT_DEG]
    theta = np.deg2rad(a)
    psi = 2.0 * np.pi * spacing_wl * (np.sin(theta)[None, :]
                                      - np.sin(np.deg2rad(steers))[:, None])
    af, _ = af_sum(np.exp(1j * psi), w)
    afp = (af.real ** 2 + af.imag ** 2) / float(np.sum(w)) ** 2
    near = p > p.max() - 6.0
    found = []
    for q in exps:
        raw = afp * element_power(a, q)[None, :]
        with np.errstate(divide="ignore"):
            raw_db = 10.0 * np.log10(np.maximum(raw, 1e-30))
        off = np.mean(p[near][None, :] - raw_db[:, near], axis=1)
        model = 10.0 * np.log10(10.0 ** (off[:, None] / 10.0) * raw + floor_lin)
        cost = np.sum((model - p[None, :]) ** 2, axis=1)
        for j in np.argsort(cost)[:keep]:
            found.append((float(cost[j]), float(steers[j]), float(off[j]), float(q)))
    found.sort()
    return [(s, o, q) for _, s, o, q in found[:keep]]


def _spacing_from_beamwidth(a: np.ndarray, p: np.ndarray, n: int,
                            peak_dir_deg: float) -> float | None:
    """Spacing whose uniform-array HPBW matches the measured one: HPBW ~ 0.886 / (N d
    cos theta0) rad (Balanis ch. 6, broadside approximation, from memory)."""
    from stream.pattern import measure

    hpbw = measure(a, p).hpbw_deg
    if hpbw is None or hpbw <= 0:
        return None
    return 0.886 / (n * math.radians(hpbw) * max(math.cos(math.radians(peak_dir_deg)), 0.1))


def fit_model(angle_deg: np.ndarray, power_db: np.ndarray, model: ArrayModel, *,
              fit_spacing: bool = False, floor_db: float | None = None) -> ModelFit:
    """Least-squares fit of steering, gain, element exponent (and spacing) to a pattern.

    ``model`` gives N, the taper and the starting spacing/exponent.  Angles are taken
    from broadside (wrapped to [-180, 180)).  Raises :class:`FitError` when fewer than
    ``MIN_SAMPLES`` samples lie above the floor.
    """
    a = wrap_angle_deg(np.asarray(angle_deg, dtype=np.float64).reshape(-1))
    p = np.asarray(power_db, dtype=np.float64).reshape(-1)
    ok = np.isfinite(a) & np.isfinite(p)
    a, p = a[ok], p[ok]
    if a.size < MIN_SAMPLES:
        raise FitError(f"only {a.size} usable samples; the fit needs at least {MIN_SAMPLES}")
    if float(np.ptp(p)) <= 0.0:
        raise FitError("all samples have the same power: there is no beam to fit")
    floor_free = floor_db is None
    floor0 = noise_floor_db(p) if floor_free else float(floor_db)
    above = p > floor0 + ABOVE_FLOOR_DB
    if int(above.sum()) < MIN_SAMPLES:
        raise FitError(f"only {int(above.sum())} samples lie {ABOVE_FLOOR_DB:g} dB above the "
                       f"noise floor ({floor0:.1f} dB); the fit needs at least {MIN_SAMPLES}")
    # With a free floor every sample enters (the floor explains the ones below it);
    # with a given floor only the samples above it do.
    au, pu = (a, p) if floor_free else (a[above], p[above])
    n = int(model.n_elements)
    w = taper_weights(model.taper, n)
    names = ["steer_deg", "offset_db", "element_exp"]
    if floor_free:
        names.append("floor_db")
    if fit_spacing:
        names.append("spacing_wl")
    col = {nm: i for i, nm in enumerate(names)}

    def unpack(x: np.ndarray) -> tuple[float, float, float, float, float]:
        d = float(x[col["spacing_wl"]]) if fit_spacing else float(model.spacing_wl)
        f = float(x[col["floor_db"]]) if floor_free else floor0
        return float(x[0]), float(x[1]), float(x[2]), d, f

    theta = np.deg2rad(au)
    sin_t = np.sin(theta)
    cos_t = np.cos(theta)
    log_cos = np.where(cos_t > 0, np.log(np.maximum(cos_t, 1e-300)), 0.0)
    w_sum2 = float(np.sum(w)) ** 2

    def parts(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        steer, off, q, d, _ = unpack(x)
        u = sin_t - math.sin(math.radians(steer))
        af, daf = af_sum(np.exp(1j * 2.0 * np.pi * d * u), w)
        elem = element_power(au, q)
        raw = elem * (af.real ** 2 + af.imag ** 2) / w_sum2
        return af, daf, elem, raw

    def resid(x: np.ndarray) -> np.ndarray:
        _, off, _, _, f = unpack(x)
        raw = parts(x)[3]
        return 10.0 * np.log10(10.0 ** (off / 10.0) * raw + 10.0 ** (f / 10.0)) - pu

    def jac(x: np.ndarray) -> np.ndarray:
        steer, off, q, d, f = unpack(x)
        af, daf, elem, raw = parts(x)
        g = 10.0 ** (off / 10.0)
        fl = 10.0 ** (f / 10.0)
        total = g * raw + fl
        scale = _DB * g / total
        # d|AF|^2/dpsi = 2 Re(conj(AF) dAF/dpsi); psi = 2 pi d (sin t - sin t0).
        dpow_dpsi = 2.0 * np.real(np.conj(af) * daf) * elem / w_sum2
        dpsi_dsteer = -2.0 * np.pi * d * math.cos(math.radians(steer)) * math.pi / 180.0
        cols = [scale * dpow_dpsi * dpsi_dsteer, g * raw / total, scale * raw * log_cos]
        if floor_free:
            cols.append(fl / total)
        if fit_spacing:
            u = sin_t - math.sin(math.radians(steer))
            cols.append(scale * dpow_dpsi * 2.0 * np.pi * u)
        return np.column_stack(cols)

    i = int(np.argmax(p))
    peak_dir = float(np.clip(a[i], -STEER_LIMIT_DEG + 1, STEER_LIMIT_DEG - 1))
    top = float(p.max())
    lo = [-STEER_LIMIT_DEG, top - 60.0, 0.0]
    hi = [STEER_LIMIT_DEG, top + 60.0, ELEMENT_EXP_MAX]
    scales = [0.1, 1.0, 0.3]
    if floor_free:
        lo.append(top - FLOOR_RANGE_DB)
        hi.append(top - ABOVE_FLOOR_DB)
        scales.append(1.0)
    if fit_spacing:
        lo.append(SPACING_MIN_WL)
        hi.append(SPACING_MAX_WL)
        scales.append(0.02)
    # Starting points: a scan of steering around the measured peak for a few element
    # exponents (the dB cost has local minima wherever a null crosses a sample), the
    # gain for each from the samples near the peak; least squares from the best three.
    hpbw0 = 50.8 / max(n * model.spacing_wl * 2.0, 1.0)  # ~0.886 rad / (N d), deg
    sa, sp = a[above], p[above]
    step = max(1, sa.size // SCAN_SAMPLES)
    starts = _scan_starts(sa[::step], sp[::step], n, float(model.spacing_wl), w,
                          10.0 ** (floor0 / 10.0), peak_dir, hpbw0,
                          (max(model.element_exp, 0.5), 1.5, 3.0))
    spacings = [float(model.spacing_wl)]
    if fit_spacing:
        d_est = _spacing_from_beamwidth(a, p, n, peak_dir)
        if d_est is not None and abs(d_est - spacings[0]) > 0.02:
            spacings.append(float(np.clip(d_est, SPACING_MIN_WL, SPACING_MAX_WL)))
    best = None
    for (s0, off0, q0), d0 in ((s, d) for s in starts for d in spacings):
        x0 = [float(np.clip(s0, -STEER_LIMIT_DEG + 0.5, STEER_LIMIT_DEG - 0.5)),
              float(np.clip(off0, lo[1] + 1, hi[1] - 1)), q0]
        if floor_free:
            x0.append(float(np.clip(floor0, lo[3] + 0.1, hi[3] - 0.1)))
        if fit_spacing:
            x0.append(d0)
        r = least_squares(resid, np.array(x0), jac=jac, bounds=(lo, hi), method="trf",
                          x_scale=np.array(scales), max_nfev=MAX_NFEV)
        if best is None or r.cost < best.cost:
            best = r
    assert best is not None
    steer, off, q, d, floor = unpack(best.x)
    m, k = au.size, best.x.size
    s2 = 2.0 * float(best.cost) / max(m - k, 1)
    try:
        cov = np.linalg.inv(best.jac.T @ best.jac) * s2
        sig = np.sqrt(np.clip(np.diag(cov), 0.0, None))
        unc = {nm: float(v) for nm, v in zip(names, sig, strict=True)}
    except np.linalg.LinAlgError:
        unc = {nm: float("nan") for nm in names}
    unc["gain_db"] = unc.pop("offset_db")
    seen = pu > floor + ABOVE_FLOOR_DB
    rms = float(np.sqrt(np.mean(best.fun[seen] ** 2))) if seen.any() else float("nan")
    gain = off + _peak_raw_db(n, d, steer, q, w)
    return ModelFit(steer_deg=steer, gain_db=gain, element_exp=q, spacing_wl=d,
                    n_elements=n, taper=model.taper, floor_db=floor,
                    residual_rms_db=rms,
                    samples_used=int(seen.sum()), uncertainty=unc, spacing_free=fit_spacing,
                    residual_all_rms_db=float(math.sqrt(2.0 * float(best.cost) / m)),
                    cost=float(best.cost), floor_free=floor_free)
