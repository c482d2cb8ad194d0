"""Angle join: interpolation, gaps, dwell positions and the clock lag from sweep pairs."""

from __future__ import annotations

import numpy as np
import pytest

from stream.angle_join import (
    AngleJoin,
    JoinConfig,
    dwell_angle,
    estimate_lag,
    interpolate_angle,
    pattern_shift_deg,
    sweep_runs,
)


def _triangle_deg(t: np.ndarray, span_deg: float, rate_dps: float) -> np.ndarray:
    """Sweep -span -> +span -> -span ... at rate_dps, starting at -span at t = 0."""
    period = 4.0 * span_deg / rate_dps
    ph = np.mod(t, period) / period
    return -span_deg + 2.0 * span_deg * (1.0 - np.abs(2.0 * ph - 1.0))


def _pattern_db(angle_deg: np.ndarray, peak_deg: float, n: int = 8) -> np.ndarray:
    """Brute-force array factor of n isotropic elements at half a wavelength, steered to
    peak_deg: |sum_k exp(j pi k (sin a - sin a0))|^2 / n^2 (Balanis ch. 6)."""
    k = np.arange(n)
    psi = np.pi * (np.sin(np.deg2rad(angle_deg)) - np.sin(np.deg2rad(peak_deg)))
    af = np.exp(1j * np.multiply.outer(psi, k)).sum(axis=-1) / n
    return 10 * np.log10(np.maximum(np.abs(af) ** 2, 1e-12))


def test_interpolation_matches_numpy_interp_inside_the_telemetry() -> None:
    tel_t = np.array([0.0, 0.1, 0.2, 0.3])
    tel_a = np.array([0.0, 3.0, 4.0, 10.0])
    q = np.array([0.0, 0.05, 0.15, 0.29, 0.3])
    a, known = interpolate_angle(q, tel_t, tel_a, gap_s=0.5)
    assert known.all()
    np.testing.assert_allclose(a, np.interp(q, tel_t, tel_a))  # reference: numpy.interp


def test_blocks_in_a_gap_or_outside_are_unknown_not_guessed() -> None:
    tel_t = np.array([0.0, 0.1, 1.5, 1.6])
    tel_a = np.array([0.0, 1.0, 15.0, 16.0])
    a, known = interpolate_angle(np.array([-0.01, 0.05, 0.8, 1.55, 1.7]), tel_t, tel_a, 0.5)
    assert known.tolist() == [False, True, False, True, False]
    assert np.isnan(a[[0, 2, 4]]).all()


def test_interpolation_turns_through_north_the_short_way() -> None:
    a, known = interpolate_angle(np.array([0.5]), np.array([0.0, 1.0]),
                                 np.array([359.0, 1.0]), 2.0)
    assert known[0] and a[0] == pytest.approx(0.0, abs=1e-9)


def test_dwell_attributes_only_settled_blocks_inside_one_position() -> None:
    ann_t = np.array([0.0, 1.0, 2.0])
    ann_a = np.array([-10.0, 0.0, 10.0])
    t0 = np.array([0.05, 0.25, 0.95, 1.30, 2.5])
    t1 = t0 + 0.1
    a, ok = dwell_angle(t0, t1, ann_t, ann_a, settle_s=0.2)
    # 0.05: settling; 0.25: ok at -10; 0.95: spans the move at 1.0; 1.30: ok at 0; 2.5: ok
    assert ok.tolist() == [False, True, False, True, True]
    assert a[1] == -10.0 and a[3] == 0.0 and a[4] == 10.0


def test_sweep_runs_find_the_turnarounds() -> None:
    t = np.arange(0.0, 16.0, 0.05)
    runs = sweep_runs(t, _triangle_deg(t, 60.0, 30.0), 10.0)
    assert [d for *_, d in runs] == [1, -1, 1, -1]
    assert runs[0][1] == pytest.approx(4.0, abs=0.05)


def test_pattern_shift_recovers_a_known_offset() -> None:
    a = np.arange(-60.0, 60.0, 0.3)
    shift = pattern_shift_deg(a, 10 ** (_pattern_db(a, 5.0) / 10), a,
                              10 ** (_pattern_db(a - 1.37, 5.0) / 10))
    assert shift == pytest.approx(1.37, abs=0.02)


@pytest.mark.parametrize("lag_s", [0.040, -0.025, 0.120])
def test_lag_from_forward_and_reverse_sweeps(lag_s: float) -> None:
    # truth: the telemetry stamps each angle lag_s late; equation (1) must return lag_s
    rate = 30.0
    blk_t = np.arange(0.005, 20.0, 0.01)
    true_a = _triangle_deg(blk_t, 60.0, rate)
    p = _pattern_db(true_a, 7.3)
    tel_true_t = np.arange(0.0, 20.0, 0.02)
    tel_t = tel_true_t + lag_s
    tel_a = _triangle_deg(tel_true_t, 60.0, rate)
    est = estimate_lag(blk_t, p, tel_t, tel_a, gap_s=0.5)
    assert est is not None and est.pairs >= 3
    assert est.lag_s == pytest.approx(lag_s, abs=0.002)
    assert est.rate_dps == pytest.approx(rate, rel=0.01)
    assert est.sigma_s is not None and est.sigma_s < 0.005


def test_auto_join_holds_blocks_until_the_lag_is_known() -> None:
    lag_s = 0.040
    j = AngleJoin(JoinConfig(lag_s=None), block_s=0.01)
    out = []
    for k in range(200):  # 20 s in 0.1 s steps
        t0 = k * 0.1
        bt = t0 + 0.005 + np.arange(10) * 0.01
        j.add_blocks(bt, _pattern_db(_triangle_deg(bt, 60.0, 30.0), 7.3))
        tt = t0 + np.arange(5) * 0.02
        j.add_angles(tt + lag_s, _triangle_deg(tt, 60.0, 30.0))
        got = j.pop()
        if k < 70:  # one forward and one reverse sweep take 8 s (+ the next one starting)
            assert len(got) == 0
        out.append(got)
    assert j.estimate is not None and abs(j.estimate.lag_s - lag_s) < 0.002
    a = np.concatenate([o.angle_deg for o in out])
    t = np.concatenate([o.t for o in out])
    # every joined block carries the true angle of its time (within interpolation error)
    np.testing.assert_allclose(a, _triangle_deg(t, 60.0, 30.0), atol=0.2)
    assert j.counts.joined == a.size > 1500


def test_fixed_lag_join_counts_gaps() -> None:
    j = AngleJoin(JoinConfig(lag_s=0.0, gap_s=0.2, hold_s=0.5), block_s=0.01)
    j.add_angles(np.array([0.0, 0.1, 0.2, 1.2, 1.3]), np.array([0.0, 1.0, 2.0, 12.0, 13.0]))
    j.add_blocks(np.arange(0.005, 1.3, 0.01), np.zeros(130))
    got = j.pop()
    assert j.counts.dropped["angle_gap"] == 100  # 0.2 .. 1.2 s is a 1 s gap
    assert len(got) == j.counts.joined == 30
    np.testing.assert_allclose(got.angle_deg, got.t * 10.0, atol=1e-9)


def test_dwell_needs_a_fixed_lag() -> None:
    with pytest.raises(ValueError, match="dwell"):
        JoinConfig(dwell=True, lag_s=None).validate()


def test_dwell_join_attributes_settled_blocks_and_counts_the_rest() -> None:
    # a steered array announcing a new position every 0.5 s; 10 ms blocks; settle 0.1 s:
    # per position the blocks starting 0.1 s or more after the announcement and ending by
    # the next one count (40 of 50), the first 10 are settling
    j = AngleJoin(JoinConfig(lag_s=0.0, dwell=True, settle_s=0.1, hold_s=0.3), block_s=0.01)
    ann_t = np.arange(0.0, 3.0, 0.5)
    j.add_angles(ann_t, np.linspace(-25.0, 25.0, ann_t.size))
    j.add_blocks(np.arange(0.005, 2.5, 0.01), np.zeros(250))
    got = j.pop()
    assert j.counts.dropped["settling"] == 50 and len(got) == 200
    pos = np.floor(got.t / 0.5).astype(int)
    np.testing.assert_array_equal(got.angle_deg, np.linspace(-25.0, 25.0, ann_t.size)[pos])
    assert np.all(got.t - 0.005 - 0.5 * pos >= 0.1 - 1e-9)
