"""Envelope mask (stream.mask): the file format, interpolation and the check.

Expected values are worked out by hand from the linear-interpolation definition in
the module docstring (no outside library defines this format: it is lobewatch's own).
"""

from __future__ import annotations

import numpy as np
import pytest

from stream.errors import InputFileError
from stream.mask import check_mask, parse_mask

MASK = """# invented test mask
offset_deg,limit_db
-90,-20
-30,-10
-10,0
10,0
30,-12
90,-20
"""


def test_parse_and_interpolate_linearly_between_rows():
    m = parse_mask(MASK, "t.csv")
    assert list(m.offset_deg) == [-90, -30, -10, 10, 30, 90]
    # halfway between (-30, -10) and (-10, 0) -> -5; between (30, -12) and (90, -20) at 60 -> -16
    assert m.limit_at(np.array([-20.0, 60.0, 0.0])) == pytest.approx([-5.0, -16.0, 0.0])
    assert np.isnan(m.limit_at(np.array([-91.0, 95.0]))).all()


def test_sides_are_independent():
    m = parse_mask(MASK)
    assert m.limit_at(np.array([-30.0]))[0] == -10.0
    assert m.limit_at(np.array([30.0]))[0] == -12.0


@pytest.mark.parametrize("text, match", [
    ("angle,level\n-1,0\n1,0\n", "header"),
    ("offset_deg,limit_db\n-10,0\n-20,-3\n10,0\n", "increase"),
    ("offset_deg,limit_db\n0,0\n10,-3\n", "both sides"),
    ("offset_deg,limit_db\n-10,x\n10,0\n", "two numbers"),
    ("", "header"),
])
def test_bad_masks_are_refused_with_the_line(text, match):
    with pytest.raises(InputFileError, match=match):
        parse_mask(text, "bad.csv")


def test_bad_row_names_its_line():
    with pytest.raises(InputFileError, match=r"bad.csv:4"):
        parse_mask("# c\noffset_deg,limit_db\n-10,0\n10,zero\n", "bad.csv")


def test_check_reports_worst_margin_where_and_violated_ranges():
    m = parse_mask(MASK)
    a = np.arange(-90.0, 91.0, 10.0)
    rel = np.full(a.shape, -30.0)
    rel[a == 0] = 0.0
    rel[np.isin(a, [40.0, 50.0])] = -11.0      # limit at 40: -13.33, at 50: -14.67
    rel[a == -40] = -12.0                      # limit at -40: -11.67 -> margin +0.33 (pass)
    peak = -20.0
    res = check_mask(a, rel + peak, m, peak_angle_deg=0.0, peak_power_db=peak)
    assert not res.passed
    assert res.violations == [(40.0, 50.0)]
    assert res.worst_angle_deg == 50.0
    assert res.worst_margin_db == pytest.approx((-12 - 8 * 20 / 60) - (-11.0))
    # where the limit is 0 dB (the main lobe) nothing is checked
    assert res.checked == int(np.sum(np.abs(a) > 10))


def test_mask_follows_the_measured_peak():
    m = parse_mask(MASK)
    a = np.arange(-60.0, 61.0, 5.0)
    # a beam at +20 deg (0 dB from 10 to 30 deg), -25 dB elsewhere: inside the mask
    # placed at the peak; the same mask placed at 0 deg would be violated at 20..30 deg.
    rel = np.where(np.abs(a - 20.0) <= 10.0, 0.0, -25.0)
    res = check_mask(a, rel, m, peak_angle_deg=20.0, peak_power_db=0.0)
    assert res.passed and res.violations == []
    assert res.worst_margin_db > 0
    wrong = check_mask(a, rel, m, peak_angle_deg=0.0, peak_power_db=0.0)
    assert wrong.violations == [(15.0, 30.0)]
