"""What the pipeline hands to front ends: source status, events and one tick's readout."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from stream.beam import BeamMetrics

#: Source states a front end can show: ``waiting`` (nothing yet), ``receiving`` (up),
#: ``stale`` (no samples for the staleness setting), ``restarted`` (receiving again from
#: a new publisher epoch, shown for :data:`RESTART_SHOW_S`), ``ended`` (closed).
SOURCE_STATES: tuple[str, ...] = ("waiting", "receiving", "stale", "restarted", "ended")
#: How long a restart is announced as the state ``restarted``, seconds.
RESTART_SHOW_S: float = 2.0


@dataclass(frozen=True, slots=True)
class SourceStats:
    """A source's counters at one instant (cumulative since the source started).

    Every message is counted once: ``messages`` accepted, ``rejected`` by reason (e.g.
    ``"non_finite"``, ``"duplicate"``), or ``lost``.  ``lost`` counts messages missing
    from the ``seq`` numbering plus ``shed`` (received but dropped unread because the
    receiver fell behind).  ``restarts`` counts publisher restarts (a new ``epoch``);
    ``lost_after_restart`` counts the messages a new publisher sent before this
    receiver reconnected (the slow-joiner effect): it is *not* part of ``lost``, since a
    restart is not input trouble.  ``senders`` is the largest number of publishers seen
    interleaving on one topic (two epochs alternating; 0 before any numbered message).
    ``reject_examples`` keeps the start of the first message refused for each reason.
    """

    state: str = "waiting"
    messages: int = 0
    rejected: dict[str, int] = field(default_factory=dict)
    lost: int = 0
    restarts: int = 0
    lost_after_restart: int = 0
    shed: int = 0
    senders: int = 0
    reject_examples: dict[str, str] = field(default_factory=dict)

    @property
    def rejected_total(self) -> int:
        return int(sum(self.rejected.values()))

    def to_dict(self) -> dict[str, Any]:
        return {"state": self.state, "messages": self.messages, "rejected": dict(self.rejected),
                "lost": self.lost, "restarts": self.restarts,
                "lost_after_restart": self.lost_after_restart, "shed": self.shed,
                "senders": self.senders, "reject_examples": dict(self.reject_examples)}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> SourceStats:
        return cls(state=str(d.get("state", "waiting")), messages=int(d.get("messages", 0)),
                   rejected={str(k): int(v) for k, v in dict(d.get("rejected", {})).items()},
                   lost=int(d.get("lost", 0)), restarts=int(d.get("restarts", 0)),
                   lost_after_restart=int(d.get("lost_after_restart", 0)),
                   shed=int(d.get("shed", 0)), senders=int(d.get("senders", 0)),
                   reject_examples={str(k): str(v) for k, v
                                    in dict(d.get("reject_examples", {})).items()})


@dataclass(frozen=True, slots=True)
class Event:
    """Something that happened at time ``t`` (Unix s): an alarm change, a reference
    captured, a target set, a user marker, a status change.  ``kind`` is one of
    ``alarm``, ``reference``, ``reference_cleared``, ``target``, ``marker``, ``reset``,
    ``status``; ``data`` is JSON-ready."""

    t: float
    kind: str
    data: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"t": self.t, "kind": self.kind, **self.data}


@dataclass(frozen=True, slots=True)
class Reference:
    """A captured reference trace and its metrics (what the installer accepted)."""

    t: float
    angle_deg: np.ndarray
    power_db: np.ndarray
    metrics: BeamMetrics


@dataclass(frozen=True, slots=True)
class Tick:
    """One readout of the pipeline at time ``t`` (receive clock live, recorded clock
    in replay).  ``angle_deg``/``power_db`` are the live pattern's valid bins.

    ``age_s`` is how old the newest sample is at ``t`` (``None`` before any);
    ``provisional`` stays true until one complete sweep has been seen, so a front end
    can mark a peak read from a partial pattern."""

    t: float
    metrics: BeamMetrics
    angle_deg: np.ndarray
    power_db: np.ndarray
    samples: int
    sweeps: int
    rate_sps: float
    peak_angle_spread_deg: float | None
    sweep_peaks_deg: np.ndarray
    sweep_peak_t: np.ndarray
    last_sample_t: float | None
    source: SourceStats
    target_deg: float | None = None
    tolerance_deg: float | None = None
    reference: Reference | None = None
    expected_hpbw_deg: float | None = None
    calibrated: bool = True
    events: tuple[Event, ...] = ()
    age_s: float | None = None
    provisional: bool = True
    bearing: Any = None  # stream.bearing.BearingConvention when the user set one
    #: stream.diagnosis.ColumnDiagnosis of the last completed sweep when a model is set
    #: and Monitor.diagnose_columns is on (recomputed at most once per sweep), else None.
    columns: Any = None
    #: The radio front end's latest clock-lag estimate as text (``lag 39.0 +/- 0.1 ms
    #: (3 pairs)``) when the samples come from IQ + positioner angle, else None.
    radio: str | None = None

    def metrics_record(self) -> dict[str, Any]:
        """The headless ``metrics`` JSON line as a dict."""
        rec: dict[str, Any] = {"type": "metrics", "t": self.t}
        m = self.metrics
        rec.update(m.to_dict())
        unc = getattr(m, "uncertainty", None)
        if unc:
            rec["uncertainty"] = dict(unc)
        notes = m.notes()
        if notes:
            rec["notes"] = notes
        src = self.source
        rec.update({
            "samples": self.samples,
            "sweeps": self.sweeps,
            "rate_sps": self.rate_sps,
            "peak_angle_spread_deg": self.peak_angle_spread_deg,
            "rejected": dict(src.rejected),
            "lost": src.lost,
            "state": src.state,
            "stale": src.state == "stale",
            "age_s": self.age_s,
            "provisional": self.provisional,
        })
        if self.bearing is not None:  # compass bearing of the peak (stream/bearing.py)
            pk = m.peak_angle_deg
            rec["peak_bearing_deg"] = None if pk is None else self.bearing.bearing_deg(pk)
            rec["bearing_reference"] = self.bearing.reference
        if src.reject_examples:
            rec["reject_examples"] = dict(src.reject_examples)
        if src.senders > 1:
            rec["senders"] = src.senders
        return rec
