"""The beam readout: the metric set measured from one pattern.

The same names are used in code, in ``lobewatch report --json``, in the headless
JSON Lines, in session files and in the screen's tooltips.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

#: Metric keys in the order they are printed.  Angles in degrees, levels in dB
#: (``peak_power_db`` is dBm when the input was calibrated).
METRIC_KEYS: tuple[str, ...] = (
    "peak_angle_deg",
    "peak_power_db",
    "hpbw_deg",
    "hpbw_left_deg",
    "hpbw_right_deg",
    "bw10_deg",
    "fnbw_deg",
    "sll_db",
    "sll_angle_deg",
    "front_to_back_db",
)

#: Half power in dB: 10*log10(0.5).
HALF_POWER_DB: float = -3.010299956639812


@dataclass(frozen=True, slots=True)
class BeamMetrics:
    """Metrics of one pattern; a value the data cannot determine is ``None``.

    ``reasons`` maps a metric key whose value is ``None`` to a short human sentence
    saying why (e.g. "pattern never falls 3 dB below the peak inside the scanned span");
    it may also hold a sentence for a determined value that needs a caveat (e.g. the
    sampling step limits it).  ``uncertainty`` maps ``peak_angle_deg``, ``hpbw_deg``
    and ``sll_db`` to a one-sigma uncertainty in the metric's unit
    (:mod:`stream.uncertainty`); a key is absent when no figure could be given.
    """

    peak_angle_deg: float | None = None
    peak_power_db: float | None = None
    hpbw_deg: float | None = None
    hpbw_left_deg: float | None = None
    hpbw_right_deg: float | None = None
    bw10_deg: float | None = None
    fnbw_deg: float | None = None
    sll_db: float | None = None
    sll_angle_deg: float | None = None
    front_to_back_db: float | None = None
    reasons: dict[str, str] = field(default_factory=dict)
    uncertainty: dict[str, float] = field(default_factory=dict)

    def notes(self) -> dict[str, str]:
        """``{key: reason}`` for every metric that is ``None`` and every caveat given:
        what ``--json`` prints beside the values so a ``null`` is never bare."""
        return {k: self.reasons[k] for k in METRIC_KEYS if k in self.reasons}

    def to_dict(self) -> dict[str, float | None]:
        """The metric keys and their values (JSON-ready; ``None`` becomes null)."""
        return {k: getattr(self, k) for k in METRIC_KEYS}

    @classmethod
    def empty(cls, reason: str) -> BeamMetrics:
        """All metrics undetermined for one stated reason."""
        return cls(reasons={k: reason for k in METRIC_KEYS})


assert tuple(f.name for f in fields(BeamMetrics)
             if f.name not in ("reasons", "uncertainty")) == METRIC_KEYS
