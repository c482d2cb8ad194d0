"""Compass bearings from array angles (bearings clockwise from north, 0-360: common
practice in navigation)."""

from __future__ import annotations

import numpy as np
import pytest

from stream.bearing import BearingConvention


def test_clockwise_array_adds_its_angle_to_the_offset() -> None:
    b = BearingConvention(offset_deg=90.0)  # broadside faces east
    assert b.bearing_deg(0.0) == 90.0
    assert b.bearing_deg(30.0) == 120.0
    assert b.bearing_deg(-100.0) == 350.0


def test_counter_clockwise_array_subtracts() -> None:
    b = BearingConvention(offset_deg=10.0, sense="ccw", reference="magnetic")
    assert b.bearing_deg(20.0) == 350.0
    assert b.reference == "magnetic"


def test_bearings_stay_in_0_to_360() -> None:
    b = BearingConvention(offset_deg=-720.0)
    out = b.bearing_deg(np.array([-1e-17, 0.0, 359.999, 720.0, -45.0]))
    assert np.all((out >= 0.0) & (out < 360.0))
    np.testing.assert_allclose(out, [0.0, 0.0, 359.999, 0.0, 315.0])


def test_bad_conventions_are_refused() -> None:
    with pytest.raises(ValueError, match="sense"):
        BearingConvention(0.0, sense="left")
    with pytest.raises(ValueError, match="reference"):
        BearingConvention(0.0, reference="grid")
    with pytest.raises(ValueError, match="finite"):
        BearingConvention(float("nan"))


def test_headless_metrics_line_carries_the_peak_bearing() -> None:
    from stream.array_model import ArrayModel
    from stream.batch import SampleBatch
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.monitor import Monitor

    mon = Monitor(RollingPattern(EstimatorConfig(bin_deg=0.5)))
    a = np.arange(-60.0, 60.0, 0.25)
    p = ArrayModel(4, steer_deg=12.0).power_db(a) - 40.0
    mon.ingest(SampleBatch.from_arrays(a, p, rx_t=1.0))
    assert "peak_bearing_deg" not in mon.tick(1.1).metrics_record()
    mon.bearing = BearingConvention(offset_deg=350.0, reference="magnetic")
    rec = mon.tick(1.2).metrics_record()
    assert rec["peak_bearing_deg"] == pytest.approx((350.0 + rec["peak_angle_deg"]) % 360.0)
    assert rec["peak_bearing_deg"] == pytest.approx(2.0, abs=0.3)
    assert rec["bearing_reference"] == "magnetic"


def test_alarm_events_carry_bearings_of_the_peak_and_the_watched_direction() -> None:
    from stream.array_model import ArrayModel
    from stream.batch import SampleBatch
    from stream.estimator import EstimatorConfig, RollingPattern
    from stream.monitor import Monitor
    from stream.tick import Event

    class OneWatchAlarm:  # an engine that raises one watched-direction alarm per tick
        def evaluate(self, tick):
            return [Event(tick.t, "alarm", {"rule": "watch", "watch_deg": -30.0,
                                             "transition": "raise"})]

    mon = Monitor(RollingPattern(EstimatorConfig(bin_deg=0.5)), OneWatchAlarm())
    a = np.arange(-60.0, 60.0, 0.25)
    mon.ingest(SampleBatch.from_arrays(a, ArrayModel(4, steer_deg=12.0).power_db(a),
                                       rx_t=1.0))
    (plain,) = mon.tick(1.1).events
    assert "peak_bearing_deg" not in plain.data
    mon.bearing = BearingConvention(offset_deg=350.0, sense="ccw")
    (ev,) = mon.tick(1.2).events
    peak = mon.last_tick.metrics.peak_angle_deg
    assert ev.data["peak_bearing_deg"] == pytest.approx((350.0 - peak) % 360.0)
    assert ev.data["watch_bearing_deg"] == pytest.approx(20.0)  # 350 - (-30) = 380 -> 20
    assert ev.data["bearing_reference"] == "true"
