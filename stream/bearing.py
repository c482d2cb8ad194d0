"""Array or mount angle to a compass bearing people use on a map.

    bearing_deg = (offset_deg + s * angle_deg) mod 360,   s = +1 ("cw"), -1 ("ccw")

``offset_deg`` is the bearing of angle 0 (broadside, or the mount's zero mark);
``sense`` says whether a growing array angle turns clockwise seen from above (as compass
bearings do) or counter-clockwise.  ``reference`` only labels the result: bearings from
"true" north, or "magnetic" north when the offset was read off a compass (declination
is the user's to apply; it changes with place and year).

References
----------
1. Compass bearings are measured clockwise from north, 0-360 degrees (common practice in
   navigation and surveying).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

SENSES: tuple[str, ...] = ("cw", "ccw")
REFERENCES: tuple[str, ...] = ("true", "magnetic")


@dataclass(frozen=True, slots=True)
class BearingConvention:
    """How an array angle maps to a bearing: offset (degrees), sense, north reference."""

    offset_deg: float
    sense: str = "cw"
    reference: str = "true"

    def __post_init__(self) -> None:
        if not math.isfinite(self.offset_deg):
            raise ValueError("bearing offset must be a finite number of degrees")
        if self.sense not in SENSES:
            raise ValueError(f"bearing sense must be 'cw' or 'ccw', got {self.sense!r}")
        if self.reference not in REFERENCES:
            raise ValueError(f"bearing reference must be 'true' or 'magnetic', "
                             f"got {self.reference!r}")

    def bearing_deg(self, angle_deg: float | np.ndarray) -> float | np.ndarray:
        """Bearing in [0, 360) degrees for an array angle (scalar or array)."""
        s = 1.0 if self.sense == "cw" else -1.0
        b = np.mod(self.offset_deg + s * np.asarray(angle_deg, dtype=np.float64), 360.0)
        b = np.where(b >= 360.0, 0.0, b)  # -1e-17 mod 360 rounds to 360.0
        return float(b) if np.ndim(b) == 0 else b

    def to_dict(self) -> dict[str, float | str]:
        return {"offset_deg": self.offset_deg, "sense": self.sense,
                "reference": self.reference}
