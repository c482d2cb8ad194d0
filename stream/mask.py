"""Envelope mask: the highest level allowed relative to the peak, against the angle
offset from the peak, and the check of a measured pattern against it.

Mask file format (lobewatch's own, CSV; see docs/commissioning.md)::

    # any comment lines start with '#'
    offset_deg,limit_db
    -180,-20
    -30,-9
    -15,0
    15,0
    30,-9
    180,-20

* ``offset_deg``: angle from the measured peak, degrees; negative = towards smaller
  angles (left), positive = towards larger angles (right).  Both sides are written
  out (no symmetry is assumed), rows in increasing offset, at least one row each side
  of zero.
* ``limit_db``: the highest allowed level relative to the peak, dB (0 at the peak,
  negative below it).
* Between rows the limit is interpolated linearly in dB; outside the first and last
  offset the mask says nothing (those samples are counted as not covered).  Where the
  limit is 0 dB or more it does not constrain (no sample lies above the peak), so the
  worst margin is taken where the limit is below 0 dB.

Check: for every sample, margin = limit(offset) - (power - peak power), dB; the mask
passes when no margin is negative.  A violated range runs from the first to the last
of consecutive violating samples.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from stream.batch import wrap_angle_deg
from stream.errors import InputFileError

#: Column names of a mask file.
MASK_COLUMNS: tuple[str, str] = ("offset_deg", "limit_db")


@dataclass(frozen=True, slots=True)
class Mask:
    """Limit (dB relative to the peak) at increasing offsets from the peak (deg)."""

    offset_deg: np.ndarray
    limit_db: np.ndarray
    source: str = ""

    def limit_at(self, offset_deg: np.ndarray) -> np.ndarray:
        """Interpolated limit; NaN outside the mask's offsets."""
        o = np.asarray(offset_deg, dtype=np.float64)
        out = np.interp(o, self.offset_deg, self.limit_db)
        return np.where((o < self.offset_deg[0]) | (o > self.offset_deg[-1]), np.nan, out)


@dataclass(frozen=True, slots=True)
class MaskResult:
    """Outcome of :func:`check_mask`.  ``worst_margin_db`` is the smallest margin (dB;
    negative = violated) at ``worst_angle_deg``/``worst_offset_deg``; ``violations`` are
    (start_deg, end_deg) angle ranges; ``uncovered`` counts samples outside the mask."""

    passed: bool
    worst_margin_db: float
    worst_angle_deg: float
    worst_offset_deg: float
    violations: list[tuple[float, float]] = field(default_factory=list)
    checked: int = 0
    uncovered: int = 0

    def to_dict(self) -> dict:
        return {"passed": self.passed, "worst_margin_db": self.worst_margin_db,
                "worst_angle_deg": self.worst_angle_deg,
                "worst_offset_deg": self.worst_offset_deg,
                "violations": [list(v) for v in self.violations],
                "checked": self.checked, "uncovered": self.uncovered}


def parse_mask(text: str, source: str = "mask") -> Mask:
    """Read the mask format above; raises :class:`InputFileError` naming the line."""
    rows: list[tuple[float, float]] = []
    header_seen = False
    cols: tuple[int, int] = (0, 1)
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        parts = [c.strip() for c in line.split(",")]
        if not header_seen:
            names = [c.lower() for c in parts]
            if not all(c in names for c in MASK_COLUMNS):
                raise InputFileError(source, f"the header must name {MASK_COLUMNS[0]} and "
                                     f"{MASK_COLUMNS[1]} (got {line!r}); start the mask "
                                     "with the line 'offset_deg,limit_db'", lineno)
            cols = (names.index(MASK_COLUMNS[0]), names.index(MASK_COLUMNS[1]))
            header_seen = True
            continue
        try:
            o = float(parts[cols[0]])
            v = float(parts[cols[1]])
        except (ValueError, IndexError):
            raise InputFileError(source, f"expected two numbers (offset_deg, limit_db), got "
                                 f"{line!r}; fix or comment out the line with '#'",
                                 lineno) from None
        if not (math.isfinite(o) and math.isfinite(v)):
            raise InputFileError(source, "offset and limit must be finite numbers", lineno)
        if not -360.0 <= o <= 360.0:
            raise InputFileError(source, f"offset {o:g} deg is outside -360..360", lineno)
        if rows and o <= rows[-1][0]:
            raise InputFileError(source, f"offsets must increase row by row ({o:g} after "
                                 f"{rows[-1][0]:g}); sort the rows by offset_deg", lineno)
        rows.append((o, v))
    if not header_seen:
        raise InputFileError(source, "no header line 'offset_deg,limit_db' found; is this "
                             "a mask file?")
    if not rows or rows[0][0] >= 0 or rows[-1][0] <= 0:
        raise InputFileError(source, "the mask must give both sides explicitly: at least "
                             "one row with a negative and one with a positive offset_deg")
    arr = np.array(rows, dtype=np.float64)
    return Mask(arr[:, 0], arr[:, 1], source)


def check_mask(angle_deg: np.ndarray, power_db: np.ndarray, mask: Mask,
               peak_angle_deg: float, peak_power_db: float) -> MaskResult:
    """Compare a pattern with the mask placed at the measured peak (see module doc)."""
    a = np.asarray(angle_deg, dtype=np.float64).reshape(-1)
    p = np.asarray(power_db, dtype=np.float64).reshape(-1)
    ok = np.isfinite(a) & np.isfinite(p)
    a, p = a[ok], p[ok]
    order = np.argsort(wrap_angle_deg(a - peak_angle_deg), kind="stable")
    a, p = a[order], p[order]
    off = wrap_angle_deg(a - peak_angle_deg)
    limit = mask.limit_at(off)
    covered = np.isfinite(limit) & (limit < 0.0)
    margin = np.where(covered, limit - (p - peak_power_db), np.inf)
    if not covered.any():
        return MaskResult(False, float("nan"), float("nan"), float("nan"), [], 0, int(a.size))
    j = int(np.argmin(margin))
    bad = covered & (margin < 0)
    ranges: list[tuple[float, float]] = []
    if bad.any():
        edges = np.flatnonzero(np.diff(np.concatenate(([0], bad.astype(np.int8), [0]))))
        for s, e in zip(edges[::2], edges[1::2], strict=True):
            ranges.append((float(a[s]), float(a[e - 1])))
    return MaskResult(passed=not bad.any(), worst_margin_db=float(margin[j]),
                      worst_angle_deg=float(a[j]), worst_offset_deg=float(off[j]),
                      violations=ranges, checked=int(covered.sum()),
                      uncovered=int((~covered).sum()))
