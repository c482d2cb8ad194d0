"""What the pipeline hands to front ends: source status, events and one tick's readout."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from stream.beam import BeamMetrics

#: Source states a front end can show.
SOURCE_STATES: tuple[str, ...] = ("waiting", "receiving", "stale", "ended")


@dataclass(frozen=True, slots=True)
class SourceStats:
    """A source's counters at one instant (cumulative since the source started).

    ``rejected`` maps a reason (e.g. ``"non_finite"``, ``"bad_json"``) to a count;
    ``lost`` counts messages missing from the ``seq`` numbering, ``restarts`` the
    publisher restarts seen (a new ``epoch``), ``lost_after_restart`` the share of
    ``lost`` that fell right after a restart (the slow-joiner effect).
    """

    state: str = "waiting"
    messages: int = 0
    rejected: dict[str, int] = field(default_factory=dict)
    lost: int = 0
    restarts: int = 0
    lost_after_restart: int = 0

    @property
    def rejected_total(self) -> int:
        return int(sum(self.rejected.values()))

    def to_dict(self) -> dict[str, Any]:
        return {"state": self.state, "messages": self.messages, "rejected": dict(self.rejected),
                "lost": self.lost, "restarts": self.restarts,
                "lost_after_restart": self.lost_after_restart}

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> SourceStats:
        return cls(state=str(d.get("state", "waiting")), messages=int(d.get("messages", 0)),
                   rejected={str(k): int(v) for k, v in dict(d.get("rejected", {})).items()},
                   lost=int(d.get("lost", 0)), restarts=int(d.get("restarts", 0)),
                   lost_after_restart=int(d.get("lost_after_restart", 0)))


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
    in replay).  ``angle_deg``/``power_db`` are the live pattern's valid bins."""

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

    def metrics_record(self) -> dict[str, Any]:
        """The headless ``metrics`` JSON line as a dict."""
        rec: dict[str, Any] = {"type": "metrics", "t": self.t}
        rec.update(self.metrics.to_dict())
        rec.update({
            "samples": self.samples,
            "sweeps": self.sweeps,
            "rate_sps": self.rate_sps,
            "peak_angle_spread_deg": self.peak_angle_spread_deg,
            "rejected": dict(self.source.rejected),
            "lost": self.source.lost,
            "state": self.source.state,
        })
        return rec
