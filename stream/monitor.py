"""The one pipeline used by live, replay, demo, headless and the TUI.

``ingest`` takes batches (per batch, vectorised); ``tick`` takes a snapshot of the
rolling pattern, measures it, evaluates the alarms and returns a :class:`Tick`.
Time is always injected: receive time live, recorded time in replay.  Nothing here
reads a clock, touches a socket or a file, or prints.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Callable
from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

from stream.array_model import ArrayModel
from stream.batch import SampleBatch
from stream.bearing import BearingConvention
from stream.pattern import measure
from stream.tick import Event, Reference, SourceStats, Tick

if TYPE_CHECKING:
    from stream.alarms import AlarmEngine
    from stream.estimator import RollingPattern

#: Window over which the sample rate is averaged, seconds.
RATE_WINDOW_S: float = 2.0
#: The column diagnosis (a few least-squares fits, 40 ms on the demo's pattern and more on
#: a clean one with deep nulls) runs at most this often, in tick time, s: which columns
#: are alive does not change between sweeps, and a tick must stay short.
DIAGNOSE_EVERY_S: float = 5.0


class Monitor:
    """Estimator + metrics + alarms, with sinks for batches, ticks and events."""

    def __init__(self, estimator: RollingPattern, alarms: AlarmEngine | None = None,
                 model: ArrayModel | None = None, *, target_deg: float | None = None,
                 tolerance_deg: float | None = None) -> None:
        self.estimator = estimator
        self.alarms = alarms
        self.model = model
        self.target_deg = target_deg
        self.tolerance_deg = tolerance_deg
        self.reference: Reference | None = None
        self.bearing: BearingConvention | None = None  # array angle -> compass bearing
        self.calibrated = True
        self.last_sample_t: float | None = None
        self.last_tick: Tick | None = None
        self._rate_hist: deque[tuple[float, int]] = deque()
        self._pending: list[Event] = []
        self.batch_sinks: list[Callable[[SampleBatch], None]] = []
        self.tick_sinks: list[Callable[[Tick], None]] = []
        self.event_sinks: list[Callable[[Event], None]] = []
        self._expected_hpbw = _model_hpbw(model) if model is not None else None
        #: (sweep count, tick time, ColumnDiagnosis) of the last diagnosis
        self._columns: tuple[int, float, object] | None = None
        #: Diagnose the columns (Tick.columns) after a completed sweep, at most every
        #: DIAGNOSE_EVERY_S, when a model is set.  Off by default: the fits are worth it on
        #: a screen, not in a fast replay or a headless run; the beam screen on show turns
        #: it on.
        self.diagnose_columns = False
        #: Latest ``radio`` event's text (the IQ front end's lag estimate), else None.
        self.radio_text: str | None = None

    # -- data in ---------------------------------------------------------------------
    def ingest(self, batch: SampleBatch) -> None:
        """Fold one batch into the rolling pattern (at the batch's receive time)."""
        if len(batch) == 0:
            return
        self.estimator.update(batch, batch.rx_t)
        self.calibrated = batch.calibrated
        self.last_sample_t = batch.rx_t
        for sink in self.batch_sinks:
            sink(batch)

    def ingest_many(self, batches: list[SampleBatch]) -> None:
        """:meth:`ingest` each batch in order (a replay's run of rows between readouts):
        the same state afterwards, with the estimator's per-call cost shared when no
        batch sink needs to see each batch as it is folded in."""
        update_many = getattr(self.estimator, "update_many", None)
        if self.batch_sinks or update_many is None:
            for b in batches:
                self.ingest(b)
            return
        batches = [b for b in batches if len(b)]
        if not batches:
            return
        update_many(batches, [b.rx_t for b in batches])
        last = batches[-1]
        self.calibrated = last.calibrated
        self.last_sample_t = last.rx_t

    # -- user actions (each becomes an event) ----------------------------------------
    def emit(self, event: Event) -> Event:
        """Send an event to the sinks now and attach it to the next tick (sources use this
        for status changes; replay uses it to re-apply recorded ones)."""
        self._pending.append(event)
        if event.kind == "radio":  # the lag estimate, shown with every later readout
            self.radio_text = str(event.data.get("text") or "") or None
        for sink in self.event_sinks:
            sink(event)
        return event

    _emit = emit  # old private name, still used by the live driver

    def capture_reference(self, t: float) -> Event | None:
        """Keep the current pattern as the installation reference."""
        tick = self.last_tick
        if tick is None or tick.metrics.peak_angle_deg is None:
            return None
        self.reference = Reference(t, tick.angle_deg.copy(), tick.power_db.copy(), tick.metrics)
        return self.emit(Event(t, "reference", {
            "peak_angle_deg": tick.metrics.peak_angle_deg,
            "peak_power_db": tick.metrics.peak_power_db, "hpbw_deg": tick.metrics.hpbw_deg}))

    def clear_reference(self, t: float) -> Event:
        self.reference = None
        return self.emit(Event(t, "reference_cleared", {}))

    def set_target(self, t: float, target_deg: float | None,
                   tolerance_deg: float | None = None) -> Event:
        self.target_deg = target_deg
        if tolerance_deg is not None:
            self.tolerance_deg = tolerance_deg
        return self.emit(Event(t, "target", {"target_deg": target_deg,
                                              "tolerance_deg": self.tolerance_deg}))

    def mark(self, t: float, text: str) -> Event:
        return self.emit(Event(t, "marker", {"text": text}))

    def reset(self, t: float) -> Event:
        """The user's reset: forget the pattern (an event, so a replay does it too)."""
        self.estimator.reset()
        self._rate_hist.clear()
        return self.emit(Event(t, "reset", {}))

    def restart(self) -> None:
        """Back to the state of a new monitor, keeping settings and sinks and emitting
        nothing: a replay seek starts from here."""
        self.estimator.reset()
        self._rate_hist.clear()
        self._pending.clear()
        self.last_tick = None
        self.last_sample_t = None
        self.reference = None
        self._columns = None
        self.radio_text = None
        if self.alarms is not None:
            self.alarms.reset()

    # -- readout -----------------------------------------------------------------------
    def tick(self, t: float, source: SourceStats | None = None) -> Tick:
        """Measure the pattern as it stands at ``t`` and evaluate the alarms."""
        source = source or SourceStats()
        snap = self.estimator.snapshot(t)
        metrics = measure(snap.angle_deg, snap.power_db)
        samples = self.estimator.samples
        self._rate_hist.append((t, samples))
        while len(self._rate_hist) > 2 and self._rate_hist[1][0] <= t - RATE_WINDOW_S:
            self._rate_hist.popleft()
        t0, s0 = self._rate_hist[0]
        rate = (samples - s0) / (t - t0) if t > t0 else 0.0
        sweeps = self.estimator.sweeps
        peaks = np.array([s.peak_angle_deg if s.peak_angle_deg is not None else np.nan
                          for s in sweeps], dtype=np.float64)
        peak_t = np.array([s.t for s in sweeps], dtype=np.float64)
        expected = self._expected_hpbw
        tick = Tick(
            t=t, metrics=metrics, angle_deg=snap.angle_deg, power_db=snap.power_db,
            samples=samples, sweeps=self.estimator.sweep_count, rate_sps=float(rate),
            peak_angle_spread_deg=self.estimator.peak_angle_spread_deg(),
            sweep_peaks_deg=peaks, sweep_peak_t=peak_t, last_sample_t=self.last_sample_t,
            source=source, target_deg=self.target_deg, tolerance_deg=self.tolerance_deg,
            reference=self.reference, expected_hpbw_deg=expected, calibrated=self.calibrated,
            bearing=self.bearing, columns=self._column_diagnosis(snap, t),
            radio=self.radio_text,
            age_s=(max(0.0, t - self.last_sample_t)
                   if self.last_sample_t is not None else None),
            provisional=self.estimator.sweep_count < 1,
        )
        events = list(self._pending)
        self._pending.clear()
        if self.alarms is not None:
            for ev in self.alarms.evaluate(tick):
                ev = self._with_bearings(ev, metrics.peak_angle_deg)
                events.append(ev)
                for sink in self.event_sinks:
                    sink(ev)
        if events:
            tick = replace(tick, events=tuple(events))
        self.last_tick = tick
        for sink in self.tick_sinks:
            sink(tick)
        return tick

    def _with_bearings(self, event: Event, peak_deg: float | None) -> Event:
        """An alarm event with compass bearings beside the array angles (peak and any
        watched direction) when the user set a bearing convention."""
        conv = self.bearing
        if conv is None:
            return event
        data = dict(event.data)
        if peak_deg is not None:
            data["peak_bearing_deg"] = conv.bearing_deg(peak_deg)
        watch = data.get("watch_deg")
        if isinstance(watch, (int, float)):
            data["watch_bearing_deg"] = conv.bearing_deg(float(watch))
        data["bearing_reference"] = conv.reference
        return replace(event, data=data)

    def _column_diagnosis(self, snap: object, t: float) -> object:
        """Column diagnosis of the pattern, recomputed when a sweep has completed since
        the last one and ``DIAGNOSE_EVERY_S`` of tick time have passed; None without a
        model or while off."""
        count = self.estimator.sweep_count
        if self.model is None or not self.diagnose_columns or count < 1:
            return None
        last = self._columns
        if last is None or (last[0] != count and t - last[1] >= DIAGNOSE_EVERY_S):
            # Imported here: scipy.optimize costs start-up time a model-less run never needs.
            from stream.diagnosis import diagnose
            from stream.fit import FitError
            try:
                result = diagnose(snap.angle_deg, snap.power_db, self.model)
            except (FitError, ValueError):
                result = None
            self._columns = (count, t, result)
        return self._columns[2]


def _model_hpbw(model: ArrayModel) -> float | None:
    """The model's HPBW, measured on a fine grid with the same metric code."""
    grid = np.arange(-180.0, 180.0, 0.05)
    return measure(grid, model.power_db(grid)).hpbw_deg
