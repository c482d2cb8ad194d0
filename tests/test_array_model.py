"""The textbook array model against closed forms, a brute-force sum and scipy.

References
----------
* C. A. Balanis, *Antenna Theory: Analysis and Design*, 3rd ed., Wiley 2005, ch. 6
  (N-element uniform linear array: array factor as a sum of progressively phased
  element contributions; null directions theta_n = arcsin(sin theta_0 +/- n lambda /
  (N d)); broadside HPBW approximation 2 [pi/2 - arccos(1.391 lambda / (pi N d))]).
  Equation forms are quoted from memory.
* scipy.signal.windows.chebwin (general-purpose reference implementation of the
  Dolph-Chebyshev window).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.signal.windows import chebwin

from stream.array_model import (
    FLOOR_DB,
    TAPER_NAMES,
    ArrayModel,
    array_factor,
    chebyshev_weights,
    element_power,
    pattern_db,
    taper_weights,
)


def brute_force_af(angle_deg: np.ndarray, n: int, d_wl: float, steer_deg: float,
                   weights: np.ndarray | None = None) -> np.ndarray:
    """Balanis ch. 6: AF = sum_n w_n exp(j n (k d sin theta + beta)), beta = -k d sin
    theta_0, summed element by element (a loop, independent of the vectorised code)."""
    w = np.ones(n) if weights is None else np.asarray(weights, float)
    th = np.deg2rad(angle_deg)
    kd = 2.0 * np.pi * d_wl
    beta = -kd * np.sin(np.deg2rad(steer_deg))
    total = np.zeros(th.shape, dtype=complex)
    for m in range(n):
        total += w[m] * np.exp(1j * m * (kd * np.sin(th) + beta))
    return total / w.sum()


@pytest.mark.parametrize("n", [1, 2, 4, 8, 13])
@pytest.mark.parametrize("steer", [0.0, 20.0, -45.0])
def test_array_factor_magnitude_matches_brute_force_sum(n: int, steer: float) -> None:
    """|AF| equals the element-by-element complex sum (Balanis ch. 6) to 1e-12; the
    vectorised code uses a centred phase reference, which changes only the phase."""
    g = np.arange(-90.0, 90.0, 0.01)
    w = taper_weights("hamming", n)
    for weights in (None, w):
        ours = np.abs(array_factor(g, n, 0.5, steer, weights))
        ref = np.abs(brute_force_af(g, n, 0.5, steer, weights))
        assert np.max(np.abs(ours - ref)) < 1e-12


@pytest.mark.parametrize("n,d,steer", [(4, 0.5, 0.0), (8, 0.5, 0.0), (8, 0.5, 20.0),
                                       (6, 0.7, -10.0)])
def test_nulls_where_balanis_puts_them(n: int, d: float, steer: float) -> None:
    """Balanis ch. 6: nulls at arcsin(sin theta_0 +/- k lambda/(N d)), k = 1, 2, ...
    not multiples of N.  The pattern there is below -100 dB (exact zero -> floor)."""
    s0 = np.sin(np.deg2rad(steer))
    k = np.arange(1, 3 * n)
    k = k[k % n != 0]
    s = np.concatenate((s0 + k / (n * d), s0 - k / (n * d)))
    nulls = np.rad2deg(np.arcsin(s[np.abs(s) < 1.0]))
    assert nulls.size >= 2
    assert np.all(pattern_db(nulls, n, d, steer) < -100.0)


@pytest.mark.parametrize("n", [8, 16, 32])
def test_broadside_hpbw_approximation(n: int) -> None:
    """Balanis ch. 6 broadside HPBW ~ 2 [pi/2 - arccos(1.391 lambda/(pi N d))], an
    approximation that improves with N: within 1 % at N = 8, 0.3 % at 16, 0.1 % at 32.  The
    exact half-power point is found here by bisection on the model (no metric code)."""
    d = 0.5
    approx = 2.0 * (90.0 - np.rad2deg(np.arccos(1.391 / (np.pi * n * d))))
    lo, hi = 0.0, 40.0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if pattern_db(np.array([mid]), n, d)[0] > -3.010299956639812:
            lo = mid
        else:
            hi = mid
    exact = 2.0 * lo
    tol = {8: 0.01, 16: 0.003, 32: 0.001}[n]
    assert abs(exact - approx) / exact < tol


def test_pattern_is_normalised_and_steered() -> None:
    """Pattern multiplication (Balanis eq. 6-5 form): 0 dB at the main beam, which
    points at the steering angle for isotropic elements."""
    g = np.arange(-90.0, 90.0, 0.01)
    for steer in (0.0, 25.0, -40.0):
        p = pattern_db(g, 8, 0.5, steer)
        assert abs(p.max()) < 1e-9
        assert abs(g[np.argmax(p)] - steer) < 0.011


def test_element_power_cos_q() -> None:
    """cos^q(theta) element power: cos^2 at 60 deg = 0.25 (-6.02 dB); q = 0 isotropic;
    zero behind the element when q > 0."""
    assert element_power(np.array([60.0]), 2.0)[0] == pytest.approx(0.25)
    assert np.all(element_power(np.array([-120.0, 0.0, 170.0]), 0.0) == 1.0)
    assert element_power(np.array([120.0]), 1.2)[0] == 0.0


@pytest.mark.parametrize("n", [5, 7, 8, 9, 12])
@pytest.mark.parametrize("sll", [20.0, 30.0, 40.0])
def test_chebyshev_weights_match_scipy_chebwin(n: int, sll: float) -> None:
    """Dolph-Chebyshev weights equal scipy.signal.windows.chebwin (normalised to a peak
    of 1) to 1e-12."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # chebwin's note on < 45 dB
        ref = chebwin(n, at=sll)
    ref = ref / ref.max()
    assert np.max(np.abs(chebyshev_weights(n, sll) - ref)) < 1e-12


def test_tapers_and_model_object() -> None:
    """Every named taper gives N positive symmetric weights; ArrayModel.power_db equals
    pattern_db with the same parameters; unknown names raise."""
    for name in TAPER_NAMES:
        w = taper_weights(name, 8)
        assert w.shape == (8,) and np.all(w > 0) and np.allclose(w, w[::-1])
    m = ArrayModel(8, 0.6, 1.2, 10.0, "hann")
    g = np.arange(-90.0, 90.0, 0.5)
    assert np.array_equal(m.power_db(g), pattern_db(g, 8, 0.6, 10.0,
                                                    taper_weights("hann", 8), 1.2))
    assert m.to_dict()["n_elements"] == 8
    assert pattern_db(np.array([30.0]), 4)[0] == FLOOR_DB  # exact null clipped
    with pytest.raises(ValueError):
        taper_weights("gauss", 4)
