"""Power from IQ samples, checked against textbook identities and scipy's own estimator."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from stream.iq import (
    Channel,
    IqReducer,
    block_power,
    channel_power,
    decode_iq,
    power_to_db,
)

FS = 1.0e6


def _tone(n: int, amp: float, f_hz: float, fs: float = FS, phase: float = 0.3) -> np.ndarray:
    k = np.arange(n)
    return (amp * np.exp(1j * (2 * np.pi * f_hz / fs * k + phase))).astype(np.complex64)


def _noise(n: int, var: float, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    s = np.sqrt(var / 2.0)
    return (rng.normal(0, s, n) + 1j * rng.normal(0, s, n)).astype(np.complex64)


# -- decoding: against numpy's own view of the bytes --------------------------------------------
def test_cf32_decode_matches_numpy_view() -> None:
    x = _tone(1000, 0.7, 12_345.0) + _noise(1000, 0.01)
    got = decode_iq(x.astype("<c8").tobytes(), "cf32")
    np.testing.assert_array_equal(got, x)
    # interleaved I, Q floats: numpy's float32 view of the same bytes
    raw = np.frombuffer(x.astype("<c8").tobytes(), dtype="<f4")
    np.testing.assert_array_equal(got.real, raw[0::2])
    np.testing.assert_array_equal(got.imag, raw[1::2])


def test_ci16_full_scale_is_32768() -> None:
    # -32768 is exactly -1.0 full scale; 16384 is 0.5 (two's-complement int16, common practice)
    iq = np.array([-32768, 16384, 32767, -1, 0, 8192], dtype="<i2")
    got = decode_iq(iq.tobytes(), "ci16")
    ref = iq.astype(np.float64).reshape(-1, 2) / 32768.0
    np.testing.assert_allclose(got.real, ref[:, 0], rtol=0, atol=1e-7)
    np.testing.assert_allclose(got.imag, ref[:, 1], rtol=0, atol=1e-7)
    assert got[0].real == -1.0 and got[0].imag == 0.5


def test_partial_item_is_refused() -> None:
    with pytest.raises(ValueError, match="whole number"):
        decode_iq(b"\x00" * 10, "cf32")
    with pytest.raises(ValueError, match="unknown IQ format"):
        decode_iq(b"\x00" * 8, "cu8")


# -- block power: Parseval ------------------------------------------------------------------------
@pytest.mark.parametrize("amp", [1.0, 0.25, 3e-3])
def test_block_power_of_a_tone_is_amplitude_squared(amp: float) -> None:
    # |A exp(j w k)|^2 = A^2 at every sample (Parseval / definition of mean power)
    p = block_power(_tone(10_000, amp, 3_000.0), 1000)
    assert p.shape == (10,)
    np.testing.assert_allclose(p, amp ** 2, rtol=1e-6)
    np.testing.assert_allclose(power_to_db(p), 20 * np.log10(amp), atol=1e-5)


def test_block_power_of_white_noise_is_its_variance() -> None:
    # E|n|^2 = sigma^2 for complex white noise; the mean over 100k samples is within
    # 4 standard errors (std of |n|^2 is sigma^2 for complex Gaussian noise)
    var = 0.04
    p = block_power(_noise(100_000, var), 100_000)
    assert abs(p[0] - var) < 4 * var / np.sqrt(100_000)


def test_block_power_ignores_the_partial_tail() -> None:
    assert block_power(_tone(2500, 1.0, 0.0), 1000).shape == (2,)
    assert block_power(_tone(500, 1.0, 0.0), 1000).shape == (0,)


# -- channel power: against scipy.signal.welch integrated over the channel -----------------------
def test_channel_power_matches_welch_integrated_over_the_channel() -> None:
    # reference: scipy.signal.welch over the whole block, integrated over the channel
    # with numpy's trapezoid rule, independently of the module's bin sum
    n = 8192
    x = _tone(n, 0.1, 100_000.0) + _tone(n, 0.5, -300_000.0) + _noise(n, 1e-4)
    ch = Channel(offset_hz=100_000.0, bw_hz=50_000.0, nperseg=1024)
    p, floor = channel_power(x, n, FS, ch)
    f, s = scipy.signal.welch(x, fs=FS, window="hann", nperseg=1024, noverlap=512,
                              detrend=False, return_onesided=False, scaling="density")
    order = np.argsort(f)
    f, s = f[order], s[order]
    sel = np.abs(f - 100_000.0) <= 25_000.0
    ref = np.trapezoid(s[sel], f[sel])
    assert abs(power_to_db(p[0]) - power_to_db(ref)) < 0.1
    # the tone's A^2 = 0.01 (-20 dBFS) plus the noise in 50 kHz of 1 MHz (1e-4 * 0.05)
    assert abs(power_to_db(p[0]) - power_to_db(0.01 + 1e-4 * 0.05)) < 0.1
    # the floor beside the channel: noise PSD (1e-4 / 1 MHz) x 50 kHz = 5e-6 (-53 dBFS);
    # the strong carrier at -300 kHz must not lift it (median)
    assert abs(power_to_db(floor[0]) - power_to_db(5e-6)) < 0.5


def test_vectorised_psd_equals_scipy_welch() -> None:
    # reference: scipy.signal.welch itself, row by row
    from stream.iq import channel_psd
    x = (_tone(3 * 5000, 0.2, 70_000.0) + _noise(3 * 5000, 1e-3)).reshape(3, 5000)
    f, psd = channel_psd(x, FS, 512)
    for row, p in zip(x, psd, strict=True):
        fr, ref = scipy.signal.welch(row, fs=FS, window="hann", nperseg=512, noverlap=256,
                                     detrend=False, return_onesided=False,
                                     scaling="density")
        np.testing.assert_allclose(f, fr)
        np.testing.assert_allclose(p, ref, rtol=2e-5, atol=1e-12)


def test_channel_power_of_noise_scales_with_bandwidth() -> None:
    # white noise: in-channel power = sigma^2 x B / fs (flat PSD, Parseval)
    n = 1 << 17
    x = _noise(n, 1.0, seed=5)
    p, _ = channel_power(x, n, FS, Channel(0.0, 200_000.0, 512))
    assert abs(power_to_db(p[0]) - power_to_db(0.2)) < 0.1


def test_channel_must_fit_in_the_band() -> None:
    with pytest.raises(ValueError, match="outside"):
        Channel(450_000.0, 200_000.0).validate(FS, 4096)
    with pytest.raises(ValueError, match="narrower"):
        Channel(0.0, 100.0, 256).validate(FS, 4096)


# -- the reducer: frames of any length give the same blocks ---------------------------------------
def test_reducer_is_independent_of_frame_cuts() -> None:
    x = _tone(10_000, 0.3, 5_000.0) * np.linspace(0.1, 1.0, 10_000).astype(np.float32)
    whole = IqReducer(1000, FS).feed(x)
    r = IqReducer(1000, FS, cal_db=-30.0)
    cuts = [0, 17, 1500, 1501, 4999, 10_000]
    parts = [r.feed(x[a:b]) for a, b in zip(cuts[:-1], cuts[1:], strict=True)]
    mids = np.concatenate([b.mid_index for b in parts])
    pw = np.concatenate([b.power_db for b in parts])
    np.testing.assert_array_equal(mids, whole.mid_index)
    np.testing.assert_allclose(pw, whole.power_db - 30.0, atol=1e-9)
    np.testing.assert_array_equal(mids, 1000 * np.arange(10) + 499.5)
    assert r.count == 10_000 and r.calibrated
