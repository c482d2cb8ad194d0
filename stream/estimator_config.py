"""Settings of the rolling pattern (:class:`stream.estimator.RollingPattern`), checked
on construction so the command line, the settings file and the fleet table refuse a bad
value in one line before any data flows."""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

_AVERAGING: tuple[str, ...] = ("ema", "sweeps")


def _is_real(v: object) -> bool:
    return isinstance(v, numbers.Real) and not isinstance(v, bool)


def _is_int(v: object) -> bool:
    return isinstance(v, numbers.Integral) and not isinstance(v, bool)


@dataclass(frozen=True, slots=True)
class EstimatorConfig:
    """Settings of the rolling pattern.

    ``bin_deg`` is rounded to the nearest width that divides the circle evenly
    (``360 / round(360 / bin_deg)``; exact for 0.1, 0.25, 0.5, 1, 2, 5, 10 ...).
    ``averaging`` is ``"ema"`` (exponential in receive time, time constant ``tau_s``) or
    ``"sweeps"`` (mean over the last ``sweeps_k`` complete sweeps and the one in
    progress).  A bin not refreshed for ``stale_after_s`` seconds is left out of the
    snapshot.  ``history`` sweep records are kept.
    """

    bin_deg: float = 1.0
    averaging: str = "ema"
    tau_s: float = 3.0
    sweeps_k: int = 3
    stale_after_s: float = 30.0
    history: int = 256

    def __post_init__(self) -> None:
        b = self.bin_deg
        if not (_is_real(b) and math.isfinite(b) and 0.1 <= b <= 10.0):
            raise ValueError(f"bin width must be between 0.1 and 10 degrees, got {b!r}")
        if self.averaging not in _AVERAGING:
            raise ValueError(f"averaging must be 'ema' or 'sweeps', got {self.averaging!r}")
        if not (_is_real(self.tau_s) and math.isfinite(self.tau_s) and self.tau_s > 0):
            raise ValueError(f"averaging time constant must be a positive number of seconds, "
                             f"got {self.tau_s!r}")
        if not (_is_int(self.sweeps_k) and 1 <= self.sweeps_k <= 1000):
            raise ValueError(f"sweeps to average must be a whole number from 1 to 1000, "
                             f"got {self.sweeps_k!r}")
        if not (_is_real(self.stale_after_s) and self.stale_after_s > 0):
            raise ValueError(f"bin maximum age must be a positive number of seconds, "
                             f"got {self.stale_after_s!r}")
        if not (_is_int(self.history) and 1 <= self.history <= 1_000_000):
            raise ValueError(f"sweep history must be a whole number from 1 to 1000000, "
                             f"got {self.history!r}")

    @property
    def n_bins(self) -> int:
        """Number of bins around the circle."""
        return int(round(360.0 / self.bin_deg))

    @property
    def bin_width_deg(self) -> float:
        """The bin width actually used (divides 360 evenly)."""
        return 360.0 / self.n_bins
