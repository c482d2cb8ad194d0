"""Column diagnosis (stream.diagnosis) on brute-force patterns with columns switched off.

Reference patterns: tests.test_fit.brute_db, a plain complex sum over the elements
(array factor by definition, Balanis ch. 6, from memory), independent of the model code.
All random draws use fixed seeds, so the counts below are deterministic.
"""

from __future__ import annotations

import numpy as np
import pytest
from brute_array import brute_db

from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.diagnosis import ColumnDiagnosis, diagnose, mirror_pairs
from stream.estimator import EstimatorConfig, RollingPattern
from stream.monitor import Monitor

ANGLES = np.arange(-90.0, 90.5, 1.0)


def test_a_power_pattern_cannot_tell_a_column_from_its_mirror():
    # Why suspects are pairs: a real sequence and its reverse have the same DTFT
    # magnitude (Oppenheim & Schafer, Discrete-Time Signal Processing, from memory).
    amps = np.array([0.2, 1.0, 0.7, 1.0, 1.0, 0.9, 1.0, 1.0])
    assert np.allclose(brute_db(ANGLES, 8, 0.5, 10.0, 1.0, amps),
                       brute_db(ANGLES, 8, 0.5, 10.0, 1.0, amps[::-1]), atol=1e-9)


def test_mirror_pairs():
    assert mirror_pairs(4) == [[1, 4], [2, 3]]
    assert mirror_pairs(5) == [[1, 5], [2, 4], [3]]
    assert mirror_pairs(8)[3] == [4, 5]


@pytest.mark.parametrize("k", range(1, 9))
def test_n8_each_dead_column_is_reported_as_its_mirror_pair(k):
    # Issue check: N = 8, every single dead column k reported as {k, 9-k}.
    amps = np.ones(8)
    amps[k - 1] = 0.0
    p = brute_db(ANGLES, 8, 0.5, 5.0, 1.2, amps) \
        + np.random.default_rng(k).normal(0.0, 0.5, ANGLES.size)
    d = diagnose(ANGLES, p, ArrayModel(8))
    assert d.suspects == [sorted({k, 9 - k})]
    assert d.kinds == ["dead"]
    assert d.elements_effective == pytest.approx(7.0, abs=0.3)


def test_weak_column_at_minus_6_db_is_reported_weak():
    amps = np.ones(8)
    amps[2] = 10 ** (-6 / 20)    # -6 dB in amplitude
    p = brute_db(ANGLES, 8, 0.5, 5.0, 1.2, amps) \
        + np.random.default_rng(9).normal(0.0, 0.5, ANGLES.size)
    d = diagnose(ANGLES, p, ArrayModel(8))
    assert d.suspects == [[3, 6]]
    assert d.kinds == ["weak"]
    weak = d.amplitudes[2] if d.amplitudes[2] < 0.9 else d.amplitudes[5]
    assert weak == pytest.approx(0.5, abs=0.1)


def test_four_columns_one_dead_behaves_like_three():
    # The story: "behaves like 3 of 4 columns, the dead one is 1 or its mirror 4",
    # on a 5-degree hand sweep like the examples.
    a = np.arange(-90.0, 90.5, 5.0)
    p = brute_db(a, 4, 0.5, 1.0, 1.2, [0.0, 1, 1, 1]) - 30 \
        + np.random.default_rng(4).normal(0.0, 0.3, a.size)
    d = diagnose(a, p, ArrayModel(4))
    assert d.suspects == [[1, 4]]
    assert d.elements_effective == pytest.approx(3.0, abs=0.2)
    assert "1 or 4 (dead)" in d.summary()


def test_healthy_array_with_0p5_db_noise_reports_nothing_in_99_of_100_draws():
    false_alarms = 0
    for seed in range(100):
        p = brute_db(ANGLES, 8, 0.5, 5.0, 1.2) \
            + np.random.default_rng(1000 + seed).normal(0.0, 0.5, ANGLES.size)
        d = diagnose(ANGLES, p, ArrayModel(8))
        false_alarms += bool(d.suspects)
    assert false_alarms <= 1


def test_single_column_has_nothing_to_diagnose():
    p = brute_db(ANGLES, 1, 0.5, 0.0, 1.2)
    d = diagnose(ANGLES, p, ArrayModel(1))
    assert d.suspects == [] and d.amplitudes == [1.0]


def test_monitor_puts_the_diagnosis_on_ticks_per_sweep_at_most_every_few_seconds():
    model = ArrayModel(4, element_exp=1.0)
    amps = [1.0, 0.0, 1.0, 1.0]
    mon = Monitor(RollingPattern(EstimatorConfig(bin_deg=1.0)), None, model)
    off = Monitor(RollingPattern(EstimatorConfig(bin_deg=1.0)), None, model)
    mon.diagnose_columns = True      # the beam screen's setting; off by default
    bare = Monitor(RollingPattern(EstimatorConfig(bin_deg=1.0)), None, None)
    t = 1000.0
    seen: list[ColumnDiagnosis | None] = []
    for sweep in range(12):  # 0.7 s of tick time per sweep
        a = np.arange(-90.0, 90.5, 1.0)
        a = a if sweep % 2 == 0 else a[::-1]
        p = brute_db(a, 4, 0.5, 0.0, 1.0, amps)
        for i in range(0, a.size, 30):
            t += 0.1
            b = SampleBatch.from_arrays(a[i:i + 30], p[i:i + 30], t, rx_t=t)
            mon.ingest(b)
            bare.ingest(b)
            off.ingest(b)
            seen.append(mon.tick(t).columns)
            assert bare.tick(t).columns is None
            assert off.tick(t).columns is None
    assert seen[0] is None                         # no completed sweep yet
    last = seen[-1]
    assert isinstance(last, ColumnDiagnosis)
    assert last.suspects == [[2, 3]]
    # recomputed only after a sweep and DIAGNOSE_EVERY_S of tick time: the same object
    # in between (12 sweeps in 8.4 s: the first completed sweep, then once more)
    from stream.monitor import DIAGNOSE_EVERY_S
    assert DIAGNOSE_EVERY_S == 5.0
    assert len({id(c) for c in seen if c is not None}) == 2


@pytest.mark.parametrize(("suspects", "kinds", "text"), [
    ([[1, 4]], ["dead"], "suspect 1 or 4 (dead)"),
    # one live column of four: 1 and 4 are both low, and one of the mirror pair 2/3
    ([[1], [4], [2, 3]], ["dead"] * 3, "suspect 1 and 4 (dead), 2 or 3 (dead)"),
    ([[2, 3], [1]], ["weak", "dead"], "suspect 1 (dead), 2 or 3 (weak)"),
    ([], [], "no suspect"),
])
def test_summary_groups_lone_columns_and_keeps_mirror_pairs_as_either_or(
        suspects: list[list[int]], kinds: list[str], text: str) -> None:
    d = ColumnDiagnosis([1.0] * 4, 4.0, suspects, kinds)
    assert d.summary().endswith(text)
