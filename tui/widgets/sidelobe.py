"""Which side lobe the readout names, held steady on a symmetric pattern.

On a symmetric pattern the two first side lobes are equal to within the noise, so the
highest one (``BeamMetrics.sll_angle_deg``) jumps between +47 and -47 degrees from one
readout to the next.  The readout keeps naming the side it named before while the lobe
there stays within :data:`SLL_HYSTERESIS_DB` of the highest one (hysteresis), and
switches sides only when the other side is clearly higher.  The measurement itself
(``stream.pattern``) is left unchanged: this is a display choice.
"""

from __future__ import annotations

import numpy as np

from stream.tick import Tick

#: How much lower (dB) the previously named side lobe may be before the readout
#: switches to the higher one on the other side of the peak.
SLL_HYSTERESIS_DB = 1.0


class SideLobeChoice:
    """Remembers the side (left or right of the peak) last shown."""

    def __init__(self, hysteresis_db: float = SLL_HYSTERESIS_DB) -> None:
        self.hysteresis_db = float(hysteresis_db)
        self.side = 0  # -1: left of the peak, +1: right, 0: none shown yet

    def choose(self, tick: Tick) -> tuple[float | None, float | None]:
        """(sll_db, sll_angle_deg) to show for ``tick``."""
        m = tick.metrics
        sll, at, peak = m.sll_db, m.sll_angle_deg, m.peak_angle_deg
        if sll is None or at is None or peak is None or m.peak_power_db is None:
            return sll, at
        side = 1 if at > peak else -1
        if self.side in (0, side):
            self.side = side
            return sll, at
        kept = self._mirror_lobe(tick, peak, at, m.peak_power_db)
        if kept is not None and kept[0] >= sll - self.hysteresis_db:
            return kept
        self.side = side
        return sll, at

    @staticmethod
    def _mirror_lobe(tick: Tick, peak_deg: float, at_deg: float, peak_db: float
                     ) -> tuple[float, float] | None:
        """The highest bin near the mirror image of ``at_deg`` about the peak, as
        (level relative to the peak in dB, angle in degrees), or None without data."""
        a = np.asarray(tick.angle_deg, dtype=np.float64)
        p = np.asarray(tick.power_db, dtype=np.float64)
        mirror = 2.0 * peak_deg - at_deg
        reach = max(2.0, 0.1 * abs(at_deg - peak_deg))
        near = np.flatnonzero((np.abs(a - mirror) <= reach) & np.isfinite(p))
        if near.size == 0:
            return None
        i = near[int(np.argmax(p[near]))]
        return float(p[i] - peak_db), float(a[i])
