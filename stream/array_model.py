"""Textbook model of a linear array's power pattern: element pattern x array factor.

Pure numpy: angles in degrees from broadside, spacing in wavelengths, power in dB
relative to the pattern maximum (0 dB at the peak of the main lobe).

References
----------
C. A. Balanis, *Antenna Theory: Analysis and Design*, 3rd ed., Wiley 2005, ch. 6:
array factor of an N-element linear array (eq. 6-6 form), pattern multiplication
(eq. 6-5), progressive phase for scanning (eq. 6-18 form).  Equation numbers are
quoted from memory.
"""

from __future__ import annotations

import warnings
from dataclasses import asdict, dataclass

import numpy as np

#: Level used for exact nulls so that dB values stay finite.
FLOOR_DB: float = -120.0

TAPER_NAMES: tuple[str, ...] = ("none", "hann", "hamming", "blackman", "cheb20", "cheb25",
                                "cheb30", "cheb35", "cheb40")


def chebyshev_weights(n_elements: int, sll_db: float) -> np.ndarray:
    """Dolph-Chebyshev amplitude weights with equal side lobes ``sll_db`` below the peak
    (C. L. Dolph, Proc. IRE 34(6), 1946; F. J. Harris, Proc. IEEE 66(1), 1978), by
    ``scipy.signal.windows.chebwin``, normalised to a peak weight of 1.
    """
    n = int(n_elements)
    if n < 1:
        raise ValueError("n_elements must be at least 1")
    if n == 1:
        return np.ones(1)
    with warnings.catch_warnings():
        # scipy warns that below ~45 dB the window is poor for *spectral analysis*;
        # as an array taper any side lobe level is the textbook design.
        warnings.simplefilter("ignore", UserWarning)
        # imported here: scipy.signal costs most of a second of start-up, and only
        # this taper needs it
        from scipy.signal.windows import chebwin
        w = chebwin(n, abs(float(sll_db)))
    return w / np.max(w)


def taper_weights(name: str, n_elements: int) -> np.ndarray:
    """Amplitude weights for a named taper (``none`` is uniform; ``chebNN`` is
    Dolph-Chebyshev with NN dB side lobes)."""
    n = int(n_elements)
    key = (name or "none").lower()
    if key in ("none", "uniform", "rect"):
        return np.ones(n)
    if key == "hann":
        # Periodic-free symmetric Hann that keeps the end elements alive.
        return np.hanning(n + 2)[1:-1]
    if key == "hamming":
        return np.hamming(n) if n > 1 else np.ones(1)
    if key == "blackman":
        return np.blackman(n + 2)[1:-1]
    if key.startswith("cheb"):
        try:
            level = float(key[4:])
        except ValueError:
            raise ValueError(f"unknown taper {name!r}; choose from {', '.join(TAPER_NAMES)}") \
                from None
        return chebyshev_weights(n, level)
    raise ValueError(f"unknown taper {name!r}; choose from {', '.join(TAPER_NAMES)}")


def array_factor(angle_deg: np.ndarray, n_elements: int, spacing_wl: float = 0.5,
                 steer_deg: float = 0.0, weights: np.ndarray | None = None) -> np.ndarray:
    """Complex array factor normalised to 1 at the steering direction.

    AF(theta) = sum_n w_n exp(j 2 pi n d (sin theta - sin theta_0)) / sum_n w_n,
    theta from broadside, d in wavelengths (Balanis ch. 6, uniform linear array with
    progressive phase beta = -k d sin theta_0).
    """
    theta = np.deg2rad(np.asarray(angle_deg, dtype=np.float64))
    n = int(n_elements)
    if n < 1:
        raise ValueError("n_elements must be at least 1")
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=np.float64)
    if w.shape != (n,):
        raise ValueError(f"weights must have {n} values, got {w.shape}")
    psi = 2.0 * np.pi * float(spacing_wl) * (np.sin(theta) - np.sin(np.deg2rad(steer_deg)))
    idx = np.arange(n) - (n - 1) / 2.0  # centred phase reference: real AF for symmetric w
    af = np.exp(1j * np.multiply.outer(psi, idx)) @ w
    return af / np.sum(w)


def element_power(angle_deg: np.ndarray, element_exp: float = 0.0) -> np.ndarray:
    """Element power pattern cos^q(theta), zero behind the element (|theta| > 90 deg)
    when q > 0; q = 0 is isotropic."""
    theta = np.deg2rad(np.asarray(angle_deg, dtype=np.float64))
    if element_exp == 0:
        return np.ones_like(theta)
    c = np.cos(theta)
    return np.where(c > 0, np.abs(c) ** float(element_exp), 0.0)


@dataclass(frozen=True, slots=True)
class ArrayModel:
    """Parameters of the textbook linear array (the model the measurement is fitted to)."""

    n_elements: int
    spacing_wl: float = 0.5
    element_exp: float = 0.0
    steer_deg: float = 0.0
    taper: str = "none"

    def weights(self) -> np.ndarray:
        return taper_weights(self.taper, self.n_elements)

    def power_db(self, angle_deg: np.ndarray) -> np.ndarray:
        """Normalised power pattern in dB at ``angle_deg`` (see :func:`pattern_db`)."""
        return pattern_db(angle_deg, self.n_elements, self.spacing_wl, self.steer_deg,
                          self.weights(), self.element_exp)

    def to_dict(self) -> dict:
        return asdict(self)


def pattern_db(angle_deg: np.ndarray, n_elements: int, spacing_wl: float = 0.5,
               steer_deg: float = 0.0, weights: np.ndarray | None = None,
               element_exp: float = 0.0) -> np.ndarray:
    """Power pattern in dB, 0 dB at its maximum over the given angles' circle.

    P(theta) = E(theta) |AF(theta)|^2  (pattern multiplication, Balanis eq. 6-5),
    normalised by its maximum over a 0.01-degree grid of the visible region so the
    normalisation does not depend on the caller's sampling.  Nulls are clipped at
    ``FLOOR_DB``.
    """
    def raw(a: np.ndarray) -> np.ndarray:
        af = array_factor(a, n_elements, spacing_wl, steer_deg, weights)
        return element_power(a, element_exp) * np.abs(af) ** 2

    grid = np.arange(-90.0, 90.0 + 1e-9, 0.01)
    peak = float(np.max(raw(grid)))
    p = raw(np.asarray(angle_deg, dtype=np.float64)) / peak
    with np.errstate(divide="ignore"):
        return np.maximum(10.0 * np.log10(p), FLOOR_DB)
