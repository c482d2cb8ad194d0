"""Sweep file readers: accepted variants, and one clear error per kind of bad file.

The format is the project's own (documented in replay/readers.py and examples/README.md);
CSV dialect handling is checked against Python's csv module as a reference reader.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import stat
import sys
import types
from pathlib import Path

import numpy as np
import pytest

from replay.readers import read_csv, read_jsonl, read_sweep
from stream.batch import SampleBatch
from stream.errors import InputFileError, UserError

ROOT = Path(__file__).resolve().parents[1]


def write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


# -- CSV: accepted -----------------------------------------------------------------------


def test_example_sweeps_read_like_pythons_csv_module() -> None:
    """The shipped example files give the same numbers as csv.DictReader (reference)
    after skipping '#' lines; power_dbm -> calibrated."""
    for name in ("sweep_1col_5deg.csv", "sweep_2col_5deg.csv", "sweep_4col_5deg.csv"):
        path = ROOT / "examples" / name
        b = read_csv(path)
        with open(path, encoding="utf-8") as fh:
            rows = list(csv.DictReader(line for line in fh if not line.startswith("#")))
        assert len(b) == len(rows) == 37
        assert np.array_equal(b.angle_deg, [float(r["angle_deg"]) for r in rows])
        assert np.array_equal(b.power_db, [float(r["power_dbm"]) for r in rows])
        assert b.calibrated


@pytest.mark.parametrize("sep", [",", ";", "\t"])
def test_separators_case_spaces_comments_blank_lines_and_t(tmp_path: Path, sep: str) -> None:
    """Comma, semicolon or tab; header names case-insensitive with spaces; '#' comments
    and blank lines anywhere; optional t column; extra columns ignored."""
    rows = ["# invented test data", "", sep.join([" Angle_Deg ", "POWER_DB", " t ", "note"]),
            sep.join(["-10", "-3.5", "100.0", "a"]), "  # comment between rows", "",
            sep.join(["0", "0", "100.5", "b"]), sep.join(["10", "-3.25", "101", "c"])]
    b = read_csv(write(tmp_path, "s.csv", "\n".join(rows) + "\n"))
    assert np.array_equal(b.angle_deg, [-10.0, 0.0, 10.0])
    assert np.array_equal(b.power_db, [-3.5, 0.0, -3.25])
    assert np.array_equal(b.t, [100.0, 100.5, 101.0])
    assert not b.calibrated


def test_semicolon_file_with_decimal_comma_bom_and_crlf(tmp_path: Path) -> None:
    """A spreadsheet export: UTF-8 BOM, CRLF line ends, ';' separator, decimal comma."""
    p = tmp_path / "sheet.csv"
    p.write_bytes("\ufeffangle_deg;power_dbm\r\n-5;-31,5\r\n0;-30\r\n5;-31,25\r\n"
                  .encode("utf-8"))
    b = read_csv(p)
    assert np.array_equal(b.power_db, [-31.5, -30.0, -31.25])
    assert b.calibrated


def test_reading_never_modifies_the_file(tmp_path: Path) -> None:
    """The input is opened read-only: a read-only file reads fine and its bytes and
    modification time are unchanged."""
    p = write(tmp_path, "ro.csv", "angle_deg,power_dbm\n0,-30\n5,-31\n10,-35\n")
    before = (hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns)
    os.chmod(p, stat.S_IRUSR)
    try:
        read_sweep(p)
    finally:
        os.chmod(p, stat.S_IRUSR | stat.S_IWUSR)
    assert (hashlib.sha256(p.read_bytes()).hexdigest(), p.stat().st_mtime_ns) == before


# -- CSV: rejected, one line each with file:line ----------------------------------------

BAD_CSV = [
    # (file text, expected line or None, words the message must contain)
    ("", None, ["empty", "angle_deg,power_dbm"]),
    ("# only a comment\n\n", None, ["empty"]),
    ("angle_deg,power_dbm\n", 1, ["no data rows"]),
    ("angle,power\n0,-30\n5,-31\n", 1, ["'angle'", "'power'", "angle_deg", "power_dbm"]),
    ("angle_deg,level\n0,-30\n", 1, ["'level'", "power_dbm (or power_db)"]),
    ("0,-30\n5,-31\n", 1, ["data, not a header"]),
    ("angle_deg,power_dbm,power_db\n0,1,2\n", 1, ["both"]),
    ("angle_deg,power_dbm\n0,-30\n5,abc\n", 3, ["'abc'", "power_dbm", "not a number"]),
    ("angle_deg,power_dbm\n0,-30\nten,-31\n", 3, ["'ten'", "angle_deg"]),
    ("angle_deg,power_dbm\n0,-30\n5,-31,7\n", 3, ["3 field", "header has 2"]),
    ("angle_deg,power_dbm\n0,-30\n5\n", 3, ["1 field"]),
    ("angle_deg,power_dbm\n# note\n0,-30\n", 3, ["only one data row"]),
    ("angle_deg,power_dbm\n0,-30\n5,nan\n", 3, ["'nan'", "finite"]),
    ("angle_deg,power_dbm\n0,-30\n5,inf\n", 3, ["'inf'", "finite"]),
    ("angle_deg,power_dbm\n0,-30\n5,\n", 3, ["empty value", "power_dbm"]),
    ("angle_deg,power_dbm\n0,-30\n725,-31\n", 3, ["outside"]),
    ("angle_deg\n0\n", 1, ["one column"]),
]


@pytest.mark.parametrize("text,line,words", BAD_CSV)
def test_bad_csv_gives_one_line_error_with_file_and_line(tmp_path: Path, text: str,
                                                         line: int | None,
                                                         words: list[str]) -> None:
    """Each bad file raises InputFileError whose one-line message starts with
    FILE:LINE (or FILE) and says what is wrong."""
    p = write(tmp_path, "bad.csv", text)
    with pytest.raises(InputFileError) as info:
        read_csv(p)
    msg = str(info.value)
    assert "\n" not in msg
    where = f"{p}:{line}: " if line is not None else f"{p}: "
    assert msg.startswith(where), msg
    assert info.value.line == line
    for w in words:
        assert w in msg, (w, msg)


def test_binary_file_is_rejected(tmp_path: Path) -> None:
    """Not UTF-8 text -> InputFileError naming the file."""
    p = tmp_path / "x.csv"
    p.write_bytes(b"angle_deg,power_dbm\n0,-30\n\xff\xfe\x00\x81\n")
    with pytest.raises(InputFileError, match="not a UTF-8 text file"):
        read_csv(p)


# -- JSON Lines --------------------------------------------------------------------------


def test_jsonl_singles_and_batches(tmp_path: Path) -> None:
    """Wire-format singles and batches (t array, t0 + dt, no t) concatenate in order."""
    lines = [
        {"angle_deg": -10.0, "power_dbm": -40.0, "t": 1767225600.0, "seq": 1},
        {"angle_deg": [0.0, 10.0], "power_dbm": [-30.0, -41.0], "t0": 1767225601.0,
         "dt": 0.5, "seq": 2},
        {"angle_deg": [20.0, 30.0], "power_dbm": [-50.0, -45.0],
         "t": [1767225602.0, 1767225603.0]},
    ]
    p = write(tmp_path, "s.jsonl", "\n".join(json.dumps(x) for x in lines) + "\n\n")
    b = read_jsonl(p)
    assert np.array_equal(b.angle_deg, [-10, 0, 10, 20, 30])
    assert np.array_equal(b.power_db, [-40, -30, -41, -50, -45])
    assert np.array_equal(b.t, [1767225600.0, 1767225601.0, 1767225601.5, 1767225602.0,
                                1767225603.0])
    assert b.calibrated
    assert isinstance(read_sweep(p.rename(tmp_path / "s.ndjson")), SampleBatch)


BAD_JSONL = [
    ('{"angle_deg": 0, "power_dbm": -30}\n{"angle_deg": 1, \n', 2, ["not valid JSON"]),
    ('{"angle_deg": 0, "power_dbm": -30}\n{"angle_deg": 1}\n', 2, ["power_db"]),
    ('{"angle_deg": [0, 1], "power_dbm": [-30]}\n', 1, ["rejected"]),
    ('{"angle_deg": 0, "power_dbm": -30}\n{"angle_deg": 1, "power_db": -3}\n', 2,
     ["mixes"]),
    ('{"type": "metrics", "hpbw_deg": 20}\n', 1, ["'metrics' record"]),
    ('{"angle_deg": 0, "power_dbm": -30}\n', 1, ["only one sample"]),
    ("\n\n", None, ["empty"]),
    ('[1, 2]\n', 1, ["rejected"]),
]


@pytest.mark.parametrize("text,line,words", BAD_JSONL)
def test_bad_jsonl_gives_one_line_error(tmp_path: Path, text: str, line: int | None,
                                        words: list[str]) -> None:
    """Bad JSON Lines: InputFileError with FILE:LINE and the reason."""
    p = write(tmp_path, "bad.jsonl", text)
    with pytest.raises(InputFileError) as info:
        read_jsonl(p)
    msg = str(info.value)
    assert "\n" not in msg
    assert msg.startswith(f"{p}:{line}: " if line is not None else f"{p}: "), msg
    for w in words:
        assert w in msg, (w, msg)


# -- dispatch ----------------------------------------------------------------------------


def test_dispatch_by_extension_and_missing_files(tmp_path: Path) -> None:
    """.csv/.tsv/.txt -> CSV; unknown extension, missing file and a directory give
    one-line errors."""
    text = "angle_deg\tpower_dbm\n0\t-30\n5\t-31\n"
    for ext in (".csv", ".tsv", ".txt", ".CSV"):
        assert len(read_sweep(write(tmp_path, "s" + ext, text))) == 2
    with pytest.raises(InputFileError, match="unknown file type '.dat'"):
        read_sweep(write(tmp_path, "s.dat", text))
    with pytest.raises(InputFileError, match="no such file"):
        read_sweep(tmp_path / "missing.csv")
    (tmp_path / "d.csv").mkdir()
    with pytest.raises(InputFileError, match="directory"):
        read_sweep(tmp_path / "d.csv")


def test_session_files_go_to_replay_session(tmp_path: Path,
                                            monkeypatch: pytest.MonkeyPatch) -> None:
    """.lwsession is handed to replay.session.read_all_samples; without that module the
    error says session support is missing."""
    p = tmp_path / "rec.lwsession"
    p.write_bytes(b"")
    seen = []
    fake = types.ModuleType("replay.session")

    def read_all_samples(path: object) -> SampleBatch:
        seen.append(Path(path))
        return SampleBatch.from_arrays([0.0, 1.0, 2.0], [-3.0, 0.0, -3.0])

    fake.read_all_samples = read_all_samples  # type: ignore[attr-defined]
    monkeypatch.setitem(sys.modules, "replay.session", fake)
    assert len(read_sweep(p)) == 3 and seen == [p]
    monkeypatch.setitem(sys.modules, "replay.session", None)
    with pytest.raises(UserError, match="session support is missing"):
        read_sweep(p)
