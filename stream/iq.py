"""Received power from raw IQ samples: frame decoding, block power and channel power.

A software radio publishes complex baseband samples with no timestamps.  This module
turns them into one power value per block of ``block_len`` samples, in dB relative to
full scale (dBFS), optionally restricted to a channel, plus the noise floor beside it.

Symbols
-------
=========================  ==============================================================
x[k]                       complex sample, full scale |x| = 1 (cf32 as sent; ci16 / 32768)
L                          samples per block (``block_len``)
P_block                    (1/L) sum |x[k]|^2 over the block          (mean power)
S(f)                       Welch power spectral density of a block, full-scale^2 per Hz
P_chan                     sum over channel bins of S(f_i) df           (channel power)
N_floor                    median of S outside the channel x B, bias-corrected (noise floor)
=========================  ==============================================================

Power in dBFS is ``10 log10(P)``: a complex tone of amplitude 1 (|x| = 1) reads 0 dBFS.
``cal_db`` (from a signal-generator reading: dBm at the input minus dBFS read) turns
dBFS into dBm: ``P_dBm = P_dBFS + cal_db``.

References
----------
1. A. V. Oppenheim, R. W. Schafer, *Discrete-Time Signal Processing*, 3rd ed., Pearson
   2010: Parseval's relation for the DFT (the block mean of |x|^2 equals the integral of
   the power spectral density).
2. P. D. Welch, "The use of fast Fourier transform for the estimation of power spectra",
   IEEE Trans. Audio Electroacoust. 15(2), 1967: averaged modified periodograms.
3. ``scipy.signal.welch`` (SciPy documentation): ``scaling="density"`` normalises by
   fs * sum(w^2), so the PSD integrates to the mean power.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Sample formats a radio may publish.
IQ_FORMATS: tuple[str, ...] = ("cf32", "ci16")
#: Bytes per complex item of each format.
ITEM_BYTES: dict[str, int] = {"cf32": 8, "ci16": 4}
#: int16 full scale (common practice for SDR ADC samples: -32768 .. 32767).
CI16_FULL_SCALE: float = 32768.0
#: Power floor used instead of log10(0), dBFS.
FLOOR_DBFS: float = -300.0


def decode_iq(frame: bytes | memoryview, fmt: str = "cf32") -> np.ndarray:
    """One frame of interleaved little-endian I/Q as complex64 at full scale 1.

    cf32: (float32 I, float32 Q) pairs, taken as they are (zero-copy view).
    ci16: (int16 I, int16 Q) pairs, divided by 32768 so -32768 maps to -1.0.
    Raises ``ValueError`` when the frame is not a whole number of items.
    """
    if fmt not in ITEM_BYTES:
        raise ValueError(f"unknown IQ format {fmt!r}; choose from {', '.join(IQ_FORMATS)}")
    n = len(frame)
    if n % ITEM_BYTES[fmt]:
        raise ValueError(f"{fmt} frame of {n} bytes is not a whole number of "
                         f"{ITEM_BYTES[fmt]}-byte items")
    if fmt == "cf32":
        return np.frombuffer(frame, dtype="<c8")
    iq = np.frombuffer(frame, dtype="<i2").astype(np.float32)
    iq *= np.float32(1.0 / CI16_FULL_SCALE)
    return iq.view(np.complex64)


def power_to_db(power: np.ndarray | float) -> np.ndarray:
    """10 log10(power), with zero power at :data:`FLOOR_DBFS`."""
    p = np.asarray(power, dtype=np.float64)
    with np.errstate(divide="ignore"):
        return np.maximum(10.0 * np.log10(p), FLOOR_DBFS)


def block_power(x: np.ndarray, block_len: int) -> np.ndarray:
    """Mean power of each whole block of ``block_len`` samples (full-scale^2).

        P_block[b] = (1/L) sum_{k=bL}^{bL+L-1} |x[k]|^2

    A complex tone A exp(j w k) gives A^2; complex white noise of variance s^2 gives
    s^2 on average (Parseval, ref. 1).  Samples past the last whole block are ignored
    (the caller carries them over to the next frame).
    """
    L = int(block_len)
    if L < 1:
        raise ValueError("block_len must be at least 1")
    nb = x.shape[0] // L
    if nb == 0:
        return np.zeros(0)
    xs = np.ascontiguousarray(x[: nb * L])
    if xs.dtype == np.complex64 or xs.dtype == np.complex128:
        r = xs.view(xs.real.dtype).reshape(nb, 2 * L)
    else:
        r = np.abs(xs).reshape(nb, L)
    # einsum row-wise sum of squares: one pass, no temporary |x|^2 array
    return np.einsum("ij,ij->i", r, r, dtype=np.float64) / L


@dataclass(frozen=True, slots=True)
class Channel:
    """A channel inside the receiver's band: centre offset from the tuned frequency and
    width, Hz.  ``nperseg`` is the Welch segment length (frequency resolution
    fs / nperseg)."""

    offset_hz: float
    bw_hz: float
    nperseg: int = 256

    def validate(self, sample_rate_hz: float, block_len: int) -> Channel:
        if not self.bw_hz > 0:
            raise ValueError(f"channel bandwidth must be positive, got {self.bw_hz} Hz")
        lo = self.offset_hz - self.bw_hz / 2.0
        hi = self.offset_hz + self.bw_hz / 2.0
        if lo < -sample_rate_hz / 2.0 or hi > sample_rate_hz / 2.0:
            raise ValueError(f"channel {lo:g} .. {hi:g} Hz lies outside the receiver's band "
                             f"+/-{sample_rate_hz / 2.0:g} Hz (the sample rate)")
        if self.nperseg < 8 or self.nperseg > block_len:
            raise ValueError(f"Welch segment of {self.nperseg} samples must be 8 .. "
                             f"{block_len} (the block length)")
        if self.bw_hz < 2.0 * sample_rate_hz / self.nperseg:
            raise ValueError(f"channel of {self.bw_hz:g} Hz is narrower than two frequency "
                             f"bins ({sample_rate_hz / self.nperseg:g} Hz each); widen it "
                             "or lengthen the block")
        return self


def channel_psd(x_blocks: np.ndarray, sample_rate_hz: float,
                nperseg: int) -> tuple[np.ndarray, np.ndarray]:
    """Two-sided Welch PSD of each row of ``x_blocks`` (full-scale^2 / Hz).

        S(f_i) = mean_m |FFT(w x_m)_i|^2 / (fs sum w^2)

    over segments x_m of ``nperseg`` samples at 50 % overlap, periodic Hann window w, no
    detrending (a tone at 0 Hz is signal, not offset), density scaling (ref. 2, 3): the
    same numbers as ``scipy.signal.welch(x, fs, "hann", nperseg, nperseg // 2,
    detrend=False, return_onesided=False, scaling="density")`` (checked in the tests),
    computed with one strided view and one batched FFT instead of a transform per
    segment, which is what keeps 2 MS/s within budget.  Frequencies are in FFT order.
    """
    n = int(nperseg)
    w = _hann(n)
    seg = np.lib.stride_tricks.sliding_window_view(x_blocks, n, axis=-1)[..., ::n // 2, :]
    import scipy.fft  # here: scipy is slow to import (start-up of every command)
    spec = scipy.fft.fft(seg * w, axis=-1)
    psd = (spec.real ** 2 + spec.imag ** 2).mean(axis=-2, dtype=np.float64)
    psd /= sample_rate_hz * float(np.sum(w.astype(np.float64) ** 2))
    return scipy.fft.fftfreq(n, 1.0 / sample_rate_hz), psd


def _hann(n: int) -> np.ndarray:
    """The periodic Hann window scipy.signal.welch uses for ``window="hann"``."""
    import scipy.signal  # here: scipy is slow to import (start-up of every command)
    return scipy.signal.get_window("hann", n).astype(np.float32)


def channel_power(x: np.ndarray, block_len: int, sample_rate_hz: float,
                  channel: Channel) -> tuple[np.ndarray, np.ndarray]:
    """Channel power and noise floor of each whole block, full-scale^2.

        P_chan[b]  = sum_{|f_i - f_c| <= B/2} S_b(f_i) df,           df = fs / nperseg
        N_floor[b] = median_{outside} S_b(f_i) / m(2K) x B

    where S_b is the block's Welch PSD, K the number of averaged segments and m(nu) the
    median of a chi-square variable with nu degrees of freedom divided by nu (the ratio
    of median to mean of a K-segment average of white noise; overlapping segments make
    it approximate).  The median keeps other carriers outside the channel from raising
    the floor.  Both are in full-scale^2 (take :func:`power_to_db` for dBFS).
    """
    L = int(block_len)
    nb = x.shape[0] // L
    if nb == 0:
        return np.zeros(0), np.zeros(0)
    f_hz, psd = channel_psd(x[: nb * L].reshape(nb, L), sample_rate_hz, channel.nperseg)
    df = sample_rate_hz / channel.nperseg
    inside = np.abs(f_hz - channel.offset_hz) <= channel.bw_hz / 2.0
    p_chan = psd[:, inside].sum(axis=1) * df
    if np.all(inside):
        return p_chan, np.full(nb, np.nan)
    n_seg = max(1, (L - channel.nperseg) // (channel.nperseg // 2) + 1)
    dof = 2 * n_seg
    import scipy.stats  # here: scipy is slow to import (start-up of every command)
    median_over_mean = scipy.stats.chi2.median(dof) / dof
    floor = np.median(psd[:, ~inside], axis=1) / median_over_mean * channel.bw_hz
    return p_chan, floor


@dataclass(frozen=True, slots=True)
class Blocks:
    """Power blocks reduced from a run of samples: the sample index of each block's
    middle (in the stream's running count), power in dB (dBFS, or dBm with a
    calibration) and the noise floor in the channel's bandwidth (NaN without a
    channel)."""

    mid_index: np.ndarray
    power_db: np.ndarray
    floor_db: np.ndarray

    def __len__(self) -> int:
        return int(self.mid_index.shape[0])


class IqReducer:
    """Stateful wrapper: frames of any length in, whole blocks out.

    Samples left over after the last whole block are kept for the next frame, so a
    block never depends on how the radio cut its frames.  ``count`` is the running
    sample count (the IQ stream's only clock, see :mod:`stream.iq_source`).
    """

    def __init__(self, block_len: int, sample_rate_hz: float, *,
                 channel: Channel | None = None, cal_db: float | None = None) -> None:
        if block_len < 1:
            raise ValueError("block_len must be at least 1")
        if not sample_rate_hz > 0:
            raise ValueError("sample rate must be positive")
        self.block_len = int(block_len)
        self.sample_rate_hz = float(sample_rate_hz)
        self.channel = channel.validate(sample_rate_hz, block_len) if channel else None
        self.cal_db = cal_db
        self.count = 0          # samples received so far
        self._carry = np.zeros(0, dtype=np.complex64)

    @property
    def calibrated(self) -> bool:
        return self.cal_db is not None

    def skip(self, n_samples: int) -> None:
        """Forget the partial block (after a drop) and advance the count by ``n_samples``."""
        self.count += int(n_samples)
        self._carry = np.zeros(0, dtype=np.complex64)

    def feed(self, x: np.ndarray) -> Blocks:
        """Reduce one frame of samples (plus the carried-over remainder)."""
        start = self.count - self._carry.shape[0]  # sample index of the first one we hold
        self.count += int(x.shape[0])
        buf = np.concatenate((self._carry, x)) if self._carry.shape[0] else x
        L = self.block_len
        nb = buf.shape[0] // L
        self._carry = np.array(buf[nb * L:], dtype=np.complex64)
        if nb == 0:
            return Blocks(np.zeros(0), np.zeros(0), np.zeros(0))
        mid = start + L * np.arange(nb, dtype=np.float64) + (L - 1) / 2.0
        if self.channel is None:
            p = block_power(buf, L)
            floor = np.full(nb, np.nan)
        else:
            p, floor = channel_power(buf, L, self.sample_rate_hz, self.channel)
        cal = self.cal_db or 0.0
        return Blocks(mid, power_to_db(p) + cal, power_to_db(floor) + cal
                      if self.channel is not None else floor)
