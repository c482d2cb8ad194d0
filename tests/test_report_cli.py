"""``lobewatch report``: table, JSON records, model comparison, and errors for bad input.

Expected model values come from outside the metric code where possible: C. A. Balanis,
*Antenna Theory*, ch. 6 (uniform array, d = lambda/2: first nulls at +/-30 deg for
N = 4, so FNBW 60.00 deg) and the brute-force values quoted in tests/test_pattern.py
(N = 4 HPBW 26.32 deg, SLL -11.30 dB).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from stream.array_model import ArrayModel
from stream.beam import METRIC_KEYS
from tui.cli import main

ROOT = Path(__file__).resolve().parents[1]
EX = ROOT / "examples"
EX1, EX2, EX4 = (str(EX / f"sweep_{n}col_5deg.csv") for n in (1, 2, 4))
BASE_KEYS = {"source", "samples", "angle_min_deg", "angle_max_deg",
             "uncertainty", "notes"}  # 1-sigma figures, and the reason beside each null


def model_csv(tmp_path: Path, name: str = "model.csv", span: float = 90.0,
              step: float = 1.0, n: int = 4) -> Path:
    g = np.arange(-span, span + 1e-9, step)
    p = ArrayModel(n).power_db(g) - 30.0
    path = tmp_path / name
    path.write_text("angle_deg,power_dbm\n" + "".join(f"{a:g},{v:.6f}\n"
                                                      for a, v in zip(g, p, strict=True)))
    return path


def test_table_for_one_file(capsys: pytest.CaptureFixture[str]) -> None:
    """The table names every metric with its unit and shows the 4-column example's
    values (HPBW 22.73 deg, SLL -12.72 dB); n/a values carry a note with the reason."""
    assert main(["report", EX4]) == 0
    out, err = capsys.readouterr()
    assert err == ""
    for label in ("peak direction (deg)", "peak power (dBm)", "half-power beamwidth (deg)",
                  "-10 dB beamwidth (deg)", "first-null beamwidth (deg)",
                  "side lobe level (dB re peak)", "front-to-back ratio (dB)"):
        assert label in out
    assert "22.73" in out and "-12.72" in out
    assert "n/a [1]" in out and "[1] " + EX4 + ": the data do not cover the back" in out


def test_side_by_side_comparison_of_1_2_4_columns(capsys: pytest.CaptureFixture[str]) -> None:
    """Three files -> three columns in the given order; the beam narrows as columns are
    added (pattern multiplication, Balanis ch. 6)."""
    assert main(["report", EX1, EX2, EX4]) == 0
    out = capsys.readouterr().out
    header = out.splitlines()[0]
    assert header.index(EX1) < header.index(EX2) < header.index(EX4)
    assert main(["report", "--json", EX1, EX2, EX4]) == 0
    recs = [json.loads(line) for line in capsys.readouterr().out.splitlines()]
    widths = [r["hpbw_deg"] for r in recs]
    assert widths[0] > widths[1] > widths[2]
    assert recs[0]["sll_db"] is None and recs[2]["sll_db"] < -10


def test_json_has_exactly_the_specified_keys(capsys: pytest.CaptureFixture[str]) -> None:
    """--json: one object per file per line with exactly the metric keys plus source,
    samples, angle_min_deg, angle_max_deg (no model key without --elements)."""
    assert main(["report", "--json", EX4, EX1]) == 0
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) == 2
    for line, src in zip(lines, (EX4, EX1), strict=True):
        rec = json.loads(line)
        assert set(rec) == set(METRIC_KEYS) | BASE_KEYS
        assert rec["source"] == src and rec["samples"] == 37
        assert (rec["angle_min_deg"], rec["angle_max_deg"]) == (-90.0, 90.0)
        assert rec["front_to_back_db"] is None
        assert rec["notes"]["front_to_back_db"]  # never a bare null


def test_model_comparison_json_and_table(tmp_path: Path,
                                         capsys: pytest.CaptureFixture[str]) -> None:
    """A sweep written from the N = 4 model at 1-deg steps, compared with --elements 4:
    expected values are Balanis/brute-force ones (HPBW 26.32, FNBW 60.00, SLL -11.30,
    to 0.01), measured matches within the 1-deg-step accuracy (0.03 deg, 0.01 dB), and
    the table shows measured - model."""
    path = model_csv(tmp_path)
    assert main(["report", "--json", "--elements", "4", str(path)]) == 0
    rec = json.loads(capsys.readouterr().out)
    assert set(rec) == set(METRIC_KEYS) | BASE_KEYS | {"model"}
    assert rec["model"]["parameters"] == {"n_elements": 4, "spacing_wl": 0.5,
                                          "element_exp": 0.0, "steer_deg": 0.0,
                                          "taper": "none"}
    exp = rec["model"]["expected"]
    assert set(exp) == set(METRIC_KEYS)
    assert exp["hpbw_deg"] == pytest.approx(26.32, abs=0.01)
    assert exp["fnbw_deg"] == pytest.approx(60.00, abs=0.01)
    assert exp["sll_db"] == pytest.approx(-11.30, abs=0.01)
    assert rec["hpbw_deg"] == pytest.approx(exp["hpbw_deg"], abs=0.03)
    assert rec["sll_db"] == pytest.approx(exp["sll_db"], abs=0.01)
    assert main(["report", "--elements", "4", "--taper", "none", str(path)]) == 0
    out = capsys.readouterr().out
    assert "meas - model" in out and "model: 4 elements" in out
    row = next(line for line in out.splitlines() if line.startswith("half-power beamwidth"))
    assert "26.32" in row and ("-0.02" in row or "-0.01" in row)


def test_model_is_measured_over_the_files_span(tmp_path: Path,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    """A +/-40 deg sweep of N = 8: the model's side lobe is taken inside +/-40 deg too.
    Brute-force N = 8 first side lobe -12.80 dB at 21 deg lies inside; FNBW from the
    Balanis null formula 2 arcsin(1/4) = 28.955 deg."""
    path = model_csv(tmp_path, span=40.0, step=0.5, n=8)
    assert main(["report", "--json", "--elements", "8", str(path)]) == 0
    rec = json.loads(capsys.readouterr().out)
    assert (rec["angle_min_deg"], rec["angle_max_deg"]) == (-40.0, 40.0)
    assert rec["model"]["expected"]["sll_db"] == pytest.approx(-12.80, abs=0.01)
    assert rec["model"]["expected"]["fnbw_deg"] == pytest.approx(28.955, abs=0.01)


BAD_FILES = [
    ("empty.csv", "", "empty.csv: the file is empty"),
    ("header.csv", "angle,power\n0,-30\n", "header.csv:1: "),
    ("text.csv", "angle_deg,power_dbm\n0,-30\n5,high\n", "text.csv:3: 'high'"),
    ("single.csv", "angle_deg,power_dbm\n0,-30\n", "single.csv:2: only one data row"),
    ("flat.csv", "angle_deg,power_dbm\n0,-30\n5,-30\n10,-30\n", "flat.csv: all 3 samples"),
    ("two.csv", "angle_deg,power_dbm\n0,-30\n5,-31\n", "two.csv: only 2 distinct"),
]


@pytest.mark.parametrize("name,text,expected", BAD_FILES)
def test_bad_files_exit_1_with_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                        name: str, text: str, expected: str) -> None:
    """Empty, wrong header, text in a number column, a single row, all-equal power:
    exit 1, one line on stderr with file(:line), nothing on stdout, no traceback."""
    p = tmp_path / name
    p.write_text(text)
    assert main(["report", str(p)]) == 1
    out, err = capsys.readouterr()
    assert out == ""
    assert err.count("\n") == 1 and "Traceback" not in err
    assert err.startswith("lobewatch report: ")
    assert str(tmp_path / expected) in err or expected in err, err


@pytest.mark.parametrize("argv,words", [
    (["--taper", "hann"], "--taper describe the array model and need --elements"),
    (["--elements", "0"], "--elements must be at least 1"),
    (["--elements", "4", "--spacing-wl", "0"], "--spacing-wl must be a positive"),
    (["--elements", "4", "--steer-deg", "95"], "--steer-deg must lie between"),
])
def test_bad_model_options_exit_2(capsys: pytest.CaptureFixture[str], argv: list[str],
                                  words: str) -> None:
    """Model options that make no sense: usage error, exit 2, one line."""
    assert main(["report", EX4, *argv]) == 2
    err = capsys.readouterr().err
    assert words in err and err.count("\n") == 1


def test_help_explains_every_option_with_units(capsys: pytest.CaptureFixture[str]) -> None:
    """--help lists every option with its unit and the safety note."""
    with pytest.raises(SystemExit) as info:
        main(["report", "--help"])
    assert info.value.code == 0
    out = capsys.readouterr().out
    for words in ("--elements N", "--spacing-wl D", "wavelengths", "--element-exp Q",
                  "cos^Q(theta)", "--steer-deg A", "degrees from broadside",
                  "--taper NAME", "cheb30", "--json", "RF", "exposure"):
        assert words in out, words


def test_installed_console_script(tmp_path: Path) -> None:
    """The installed `lobewatch` script (console entry point) runs the report in a
    subprocess: exit 0 and JSON on stdout; a bad file gives exit 1 and one line."""
    exe = Path(sys.executable).with_name("lobewatch")
    assert exe.exists(), "install the project first: pip install -e .[test]"
    ok = subprocess.run([str(exe), "report", "--json", EX4], capture_output=True, text=True,
                        timeout=60, cwd=tmp_path)
    assert ok.returncode == 0, ok.stderr
    assert json.loads(ok.stdout)["samples"] == 37
    bad = tmp_path / "bad.csv"
    bad.write_text("angle_deg,power_dbm\n0,x\n")
    res = subprocess.run([str(exe), "report", str(bad)], capture_output=True, text=True,
                         timeout=60, cwd=tmp_path)
    assert res.returncode == 1
    assert res.stderr.strip() == f"lobewatch report: {bad}:2: 'x' in column power_dbm is " \
                                 "not a number; fix the value (a dot as decimal point, no units)"


def test_differences_wrap_angles_and_skip_absolute_power() -> None:
    """measured - expected wraps directions to [-180, 180) (179 vs -179 deg is -2 deg
    apart, not 358) and is not formed for the absolute peak power."""
    from replay.report import difference

    assert difference("peak_angle_deg", 179.0, -179.0) == pytest.approx(-2.0)
    assert difference("hpbw_deg", 20.0, 25.0) == pytest.approx(-5.0)
    assert difference("peak_power_db", -30.0, 0.0) is None
    assert difference("sll_db", None, -13.0) is None


def test_side_lobe_directions_on_opposite_sides_are_not_subtracted(
        capsys: pytest.CaptureFixture[str]) -> None:
    """The invented 4-column sweep's highest side lobe is at -42 deg while the
    symmetric broadside model's two first side lobes are equal (Balanis ch. 6: |AF| is
    even in sin(theta) at broadside) and it names +45 deg: subtracting them (-87 deg)
    would be meaningless, so the table says so instead."""
    assert main(["report", EX4, "--elements", "4",
                 "--element-exp", "1.2"]) == 0
    row = next(line for line in capsys.readouterr().out.splitlines()
               if "side lobe direction" in line)
    assert row.rstrip().endswith("other side"), row
