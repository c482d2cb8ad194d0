"""Specification and verdict (stream.spec) and the TOML spec file (replay.record.load_spec).

Patterns come from tests/brute_array.py (brute-force complex sums, Balanis ch. 6, from
memory).  The 4-column half-wave array's HPBW and first side lobe are facts of the trade
(common practice; about 26 deg and -11.3 dB for a uniform 4-element array, from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from brute_array import brute_db

from replay.record import load_spec
from stream.array_model import ArrayModel
from stream.errors import UserError
from stream.mask import parse_mask
from stream.pattern import measure
from stream.spec import Spec, assess, evaluate, spec_from_dict, verdict

SECTOR = np.arange(-90.0, 90.5, 1.0)


def _pattern(steer=0.0, n=4, a=SECTOR):
    return a, brute_db(a, n, 0.5, steer, 0.0) - 30.0


def test_pointing_pass_and_fail_with_margin():
    a, p = _pattern(steer=1.5)
    m = measure(a, p)
    rows, _ = evaluate(Spec(target_deg=0.0, tolerance_deg=2.0), m, a, p)
    assert rows[0].result == "pass"
    assert rows[0].margin == pytest.approx(2.0 - abs(m.peak_angle_deg), abs=1e-9)
    rows, _ = evaluate(Spec(target_deg=0.0, tolerance_deg=1.0), m, a, p)
    assert rows[0].result == "fail" and rows[0].margin < 0


def test_hpbw_against_the_models_own_and_a_designed_value():
    a, p = _pattern()
    m = measure(a, p)
    rows, _ = evaluate(Spec(hpbw_deg="model"), m, a, p, ArrayModel(4))
    assert rows[0].result == "pass"
    assert rows[0].target == pytest.approx(26.3, abs=0.5)   # common practice, from memory
    assert rows[0].limit == pytest.approx(0.1 * rows[0].target)  # default 10 %
    rows, _ = evaluate(Spec(hpbw_deg=20.0, hpbw_tolerance_deg=2.0), m, a, p)
    assert rows[0].result == "fail"


def test_side_lobe_limit_and_undetermined_front_to_back_with_reason():
    a, p = _pattern()
    m = measure(a, p)
    rows, _ = evaluate(Spec(max_sll_db=-10.0, min_front_to_back_db=15.0), m, a, p)
    sll, fb = rows
    assert sll.result == "pass" and sll.margin == pytest.approx(-10.0 - m.sll_db)
    assert fb.result == "undetermined" and "back direction" in fb.reason
    assert verdict(rows)[0] == "incomplete"
    rows, _ = evaluate(Spec(max_sll_db=-12.0), m, a, p)   # -11.3 dB does not meet -12
    assert rows[0].result == "fail"


def test_verdict_rules():
    assert verdict([])[0] == "incomplete"
    a, p = _pattern()
    res = assess(a, p, Spec(target_deg=0, tolerance_deg=2, max_sll_db=-10))
    assert res.verdict == "pass"
    res = assess(a, p, Spec(target_deg=5, tolerance_deg=2, min_front_to_back_db=10))
    assert res.verdict == "fail"                     # fail wins over undetermined
    assert "pointing" in res.verdict_reason


def test_beam_outside_the_sweep_is_undetermined_not_a_pass():
    a = np.arange(-30.0, 10.5, 1.0)
    p = brute_db(a, 8, 0.5, 20.0, 0.0)
    res = assess(a, p, Spec(target_deg=20.0, tolerance_deg=2.0))
    assert res.criteria[0].result == "undetermined"
    assert "edge of the sweep" in res.criteria[0].reason
    assert res.verdict == "incomplete"


def test_mask_criterion():
    a, p = _pattern()
    tight = parse_mask("offset_deg,limit_db\n-90,-15\n-20,-15\n-15,0\n15,0\n20,-15\n90,-15\n")
    res = assess(a, p, Spec(mask=tight))
    assert res.verdict == "fail"
    assert res.mask_result is not None and res.mask_result.violations
    assert "violated" in res.criteria[0].reason


def test_assess_with_a_model_fits_and_diagnoses():
    a, p = _pattern(steer=3.0)
    res = assess(a, p, Spec(), ArrayModel(4))
    assert res.fit is not None and res.fit.steer_deg == pytest.approx(3.0, abs=0.01)
    assert res.columns is not None and res.columns.suspects == []


def test_toml_spec_file_and_its_mask(tmp_path):
    (tmp_path / "m.csv").write_text("offset_deg,limit_db\n-90,-10\n90,-10\n")
    (tmp_path / "s.toml").write_text(
        '[pointing]\ntarget_deg = 1.5\ntolerance_deg = 2\n[beamwidth]\nhpbw_deg = "model"\n'
        '[side_lobes]\nmax_db = -10\n[mask]\nfile = "m.csv"\n')
    spec = load_spec(tmp_path / "s.toml")
    assert spec.target_deg == 1.5 and spec.hpbw_deg == "model" and spec.max_sll_db == -10
    assert spec.mask is not None and list(spec.mask.limit_db) == [-10, -10]
    assert spec.merged(target_deg=0.0, max_sll_db=None).target_deg == 0.0


@pytest.mark.parametrize("d, match", [
    ({"pointing": {"target_deg": "north"}}, "must be a number"),
    ({"pointng": {}}, "unknown table"),
])
def test_bad_spec_values_are_refused(d, match):
    with pytest.raises(UserError, match=match):
        spec_from_dict(d, "s.toml")


def test_bad_toml_names_the_file(tmp_path):
    f = tmp_path / "s.toml"
    f.write_text("[pointing\n")
    with pytest.raises(UserError, match="s.toml: not valid TOML"):
        load_spec(f)
