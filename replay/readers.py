"""Read a measured sweep from a file into one :class:`SampleBatch`.

Formats (chosen by extension, see :func:`read_sweep`):

* CSV (``.csv``, ``.tsv``, ``.txt``): a header row naming ``angle_deg`` and
  ``power_dbm`` (calibrated) or ``power_db`` (uncalibrated), optionally ``t`` (Unix
  seconds); names are case-insensitive and may carry spaces around them.  Comma,
  semicolon or tab separated (detected from the header line).  Lines starting with
  ``#`` and blank lines are skipped; other columns are allowed and ignored.  With a
  semicolon separator a decimal comma (``-31,2``) is accepted.
* JSON Lines (``.jsonl``, ``.ndjson``): one wire-format message per line, single
  sample or batch (``angle_deg``, ``power_dbm`` | ``power_db``, ``t`` or
  ``t0`` + ``dt``, ``seq``).
* Session files (``.lwsession``): every recorded sample, through ``replay.session``.

Every problem raises :class:`stream.errors.InputFileError` naming the file, the line
and what to do; no row is dropped silently and the input is only ever opened for
reading.
"""

from __future__ import annotations

import importlib
import json
import math
import os
from pathlib import Path

import numpy as np

from stream.batch import SampleBatch
from stream.errors import InputFileError, UserError
from stream.wire_format import decode_json_object

CSV_EXTENSIONS: tuple[str, ...] = (".csv", ".tsv", ".txt")
JSONL_EXTENSIONS: tuple[str, ...] = (".jsonl", ".ndjson")
SESSION_EXTENSIONS: tuple[str, ...] = (".lwsession",)

#: Angles accepted in a sweep file, degrees (one turn either way of zero).
ANGLE_LIMIT_DEG: float = 360.0

_SEPARATORS: tuple[tuple[str, str], ...] = ((",", "comma"), (";", "semicolon"),
                                            ("\t", "tab"))
_EXPECTED = "angle_deg and power_dbm (or power_db), optionally t"
_EXAMPLE_HEADER = "angle_deg,power_dbm"


def read_sweep(path: str | os.PathLike[str]) -> SampleBatch:
    """Read any supported sweep file, choosing the format by its extension."""
    p = Path(path)
    ext = p.suffix.lower()
    if ext in SESSION_EXTENSIONS:
        _check_readable(p)
        try:
            session = importlib.import_module("replay.session")
        except ModuleNotFoundError as exc:
            if exc.name != "replay.session":
                raise
            raise UserError(f"{p}: session files (.lwsession) cannot be read: session support is "
                            "missing from this installation; export the session to CSV "
                            "or JSON Lines first") from None
        return session.read_all_samples(p)
    if ext in CSV_EXTENSIONS:
        return read_csv(p)
    if ext in JSONL_EXTENSIONS:
        return read_jsonl(p)
    kinds = ", ".join(CSV_EXTENSIONS + JSONL_EXTENSIONS + SESSION_EXTENSIONS)
    raise InputFileError(str(p), f"unknown file type {ext or '(no extension)'!r}; name the "
                         f"file with one of {kinds}")


# -- CSV -------------------------------------------------------------------------------


def read_csv(path: str | os.PathLike[str]) -> SampleBatch:
    """Read a CSV sweep (see module docstring for the format)."""
    p = Path(path)
    name = str(p)
    lines = _numbered_lines(p)
    header: tuple[int, str] | None = None
    for no, text in lines:
        if _is_skippable(text):
            continue
        header = (no, text)
        break
    if header is None:
        raise InputFileError(name, "the file is empty (no header and no data); write a "
                             f"header line such as '{_EXAMPLE_HEADER}' and one row per angle")
    hno, htext = header
    sep, sep_name = _detect_separator(htext)
    cols = [c.strip().strip('"').strip().lower() for c in (htext.split(sep) if sep else [htext])]
    i_angle, i_power, i_t, calibrated = _header_columns(name, hno, cols, sep_name)
    ncols = len(cols)
    decimal_comma = sep == ";"

    angles: list[float] = []
    powers: list[float] = []
    times: list[float] = []
    first_row = None
    for no, text in lines:
        if no <= hno or _is_skippable(text):
            continue
        fields = [f.strip().strip('"').strip() for f in text.split(sep)] if sep else [text.strip()]
        if len(fields) != ncols:
            raise InputFileError(name, f"row has {len(fields)} field(s) but the header has "
                                 f"{ncols} ({sep_name} separated); fix the row or the header",
                                 no)
        if first_row is None:
            first_row = no
        angles.append(_number(name, no, fields[i_angle], cols[i_angle], decimal_comma))
        powers.append(_number(name, no, fields[i_power], cols[i_power], decimal_comma))
        if i_t is not None:
            times.append(_number(name, no, fields[i_t], cols[i_t], decimal_comma))
        if abs(angles[-1]) > ANGLE_LIMIT_DEG:
            raise InputFileError(name, f"angle {fields[i_angle]!r} is outside "
                                 f"[-{ANGLE_LIMIT_DEG:g}, {ANGLE_LIMIT_DEG:g}] degrees; give "
                                 "angles in degrees", no)
    if not angles:
        raise InputFileError(name, "the header is there but there are no data rows; add one "
                             "row per angle", hno)
    if len(angles) == 1:
        raise InputFileError(name, "only one data row; a beam needs samples at several "
                             "angles across it", first_row)
    return SampleBatch.from_arrays(angles, powers, times if i_t is not None else None,
                                   calibrated=calibrated, stream=name)


def _check_readable(p: Path) -> None:
    if not p.exists():
        raise InputFileError(str(p), "no such file; check the path")
    if p.is_dir():
        raise InputFileError(str(p), "is a directory, not a sweep file")


def _numbered_lines(p: Path) -> list[tuple[int, str]]:
    """All lines (1-based numbers, without line ends); read-only access."""
    _check_readable(p)
    try:
        with open(p, encoding="utf-8-sig", newline="") as fh:
            text = fh.read()
    except UnicodeDecodeError as exc:
        line = _line_of_byte(p, exc.start)
        raise InputFileError(str(p), "not a UTF-8 text file; save it as plain text (CSV "
                             "or JSON Lines)", line) from None
    except OSError as exc:
        raise InputFileError(str(p), f"cannot be read ({exc.strerror or exc})") from None
    return list(enumerate(text.splitlines(), start=1))


def _line_of_byte(p: Path, offset: int) -> int | None:
    """Line number (1-based) holding byte ``offset`` of the file."""
    try:
        with open(p, "rb") as fh:
            return fh.read(offset).count(b"\n") + 1
    except OSError:
        return None


def _is_skippable(text: str) -> bool:
    s = text.strip()
    return not s or s.startswith("#")


def _detect_separator(header: str) -> tuple[str | None, str]:
    counts = [(header.count(s), s, n) for s, n in _SEPARATORS]
    best = max(counts, key=lambda c: c[0])
    if best[0] == 0:
        return None, "single-column"
    return best[1], best[2]


def _header_columns(name: str, line: int, cols: list[str],
                    sep_name: str) -> tuple[int, int, int | None, bool]:
    """Indices of the angle, power and time columns, and whether power is in dBm."""
    found = ", ".join(repr(c) for c in cols)
    if all(_looks_numeric(c) for c in cols):
        raise InputFileError(name, f"the first line is data, not a header; add a header "
                             f"line such as '{_EXAMPLE_HEADER}' above it", line)
    if len(cols) < 2:
        raise InputFileError(name, f"the header has one column ({found}); expected "
                             f"{_EXPECTED}, separated by comma, semicolon or tab", line)
    dup = sorted({c for c in cols if cols.count(c) > 1 and c})
    if dup:
        raise InputFileError(name, f"column {dup[0]!r} appears twice in the header; keep "
                             "one", line)
    missing = []
    if "angle_deg" not in cols:
        missing.append("angle_deg")
    has_dbm = "power_dbm" in cols
    has_db = "power_db" in cols
    if has_dbm and has_db:
        raise InputFileError(name, "the header has both power_dbm and power_db; keep one "
                             "(power_dbm for calibrated dBm, power_db for relative dB)", line)
    if not (has_dbm or has_db):
        missing.append("power_dbm (or power_db)")
    if missing:
        raise InputFileError(name, f"header ({sep_name} separated) has columns {found} but "
                             f"lacks {' and '.join(missing)}; expected {_EXPECTED}", line)
    i_power = cols.index("power_dbm" if has_dbm else "power_db")
    i_t = cols.index("t") if "t" in cols else None
    return cols.index("angle_deg"), i_power, i_t, has_dbm


def _looks_numeric(s: str) -> bool:
    try:
        float(s.replace(",", "."))
    except ValueError:
        return False
    return True


def _number(name: str, line: int, text: str, column: str, decimal_comma: bool) -> float:
    s = text
    if decimal_comma and "," in s and "." not in s:
        s = s.replace(",", ".")
    if not s:
        raise InputFileError(name, f"empty value in column {column}; fill it in or delete "
                             "the row", line)
    try:
        v = float(s)
    except ValueError:
        raise InputFileError(name, f"{text!r} in column {column} is not a number; fix the "
                             "value (a dot as decimal point, no units)", line) from None
    if not math.isfinite(v):
        raise InputFileError(name, f"{text!r} in column {column} is not a finite number; "
                             "give a measured value or delete the row", line)
    return v


# -- JSON Lines ------------------------------------------------------------------------


def read_jsonl(path: str | os.PathLike[str]) -> SampleBatch:
    """Read JSON Lines of wire-format sample messages (single or batch)."""
    p = Path(path)
    name = str(p)
    parts: list[SampleBatch] = []
    kinds: set[bool] = set()
    first_line: int | None = None
    for no, text in _numbered_lines(p):
        if not text.strip():
            continue
        try:
            obj = json.loads(text)
        except json.JSONDecodeError as exc:
            raise InputFileError(name, f"not valid JSON ({exc.msg} at column {exc.colno}); "
                                 "each line must be one JSON sample or batch message",
                                 no) from None
        if isinstance(obj, dict) and "type" in obj and "angle_deg" not in obj:
            raise InputFileError(name, f"a {str(obj['type'])!r} record, not a sample "
                                 "message; give lines with angle_deg and power_dbm "
                                 "(or power_db)", no)
        try:
            batch = decode_json_object(obj, 0.0)
        except ValueError as exc:
            raise InputFileError(name, f"rejected sample message ({exc}); see the wire "
                                 "format: angle_deg, power_dbm or power_db, optional t",
                                 no) from None
        kinds.add(bool(batch.calibrated))
        if len(kinds) > 1:
            raise InputFileError(name, "mixes power_dbm (calibrated) and power_db "
                                 "(relative) messages; use one kind per file", no)
        if first_line is None:
            first_line = no
        parts.append(batch)
    if not parts:
        raise InputFileError(name, "the file is empty (no sample messages); write one JSON "
                             "message per line, e.g. {\"angle_deg\": 0, \"power_dbm\": -30}")
    t = np.concatenate([b.t for b in parts])
    a = np.concatenate([b.angle_deg for b in parts])
    pw = np.concatenate([b.power_db for b in parts])
    if a.size == 1:
        raise InputFileError(name, "only one sample; a beam needs samples at several angles "
                             "across it", first_line)
    return SampleBatch.from_arrays(a, pw, t, calibrated=kinds.pop(), stream=name)
