"""The per-file beam report: a side-by-side text table and JSON records.

Pure formatting: the caller reads the files and measures them; this module only turns
:class:`ReportEntry` values into text.  Model levels are relative to the model's own
peak (0 dB), so no measured - expected difference is given for the peak power.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from stream.array_model import ArrayModel
from stream.beam import METRIC_KEYS, BeamMetrics

#: Row labels with units; ``{p}`` is the unit of the peak power (dBm or dB).
LABELS: dict[str, str] = {
    "peak_angle_deg": "peak direction (deg)",
    "peak_power_db": "peak power ({p})",
    "hpbw_deg": "half-power beamwidth (deg)",
    "hpbw_left_deg": "  half-power left edge (deg)",
    "hpbw_right_deg": "  half-power right edge (deg)",
    "bw10_deg": "-10 dB beamwidth (deg)",
    "fnbw_deg": "first-null beamwidth (deg)",
    "sll_db": "side lobe level (dB re peak)",
    "sll_angle_deg": "  side lobe direction (deg)",
    "front_to_back_db": "front-to-back ratio (dB)",
}

#: Metrics that are directions: their differences wrap to [-180, 180).
ANGLE_KEYS: frozenset[str] = frozenset(
    {"peak_angle_deg", "hpbw_left_deg", "hpbw_right_deg", "sll_angle_deg"})

#: Decimals shown in the table per metric.
_DECIMALS = 2
#: Decimals kept in JSON (far below any measurement's accuracy).
JSON_DECIMALS = 4

MISSING = "n/a"


@dataclass(frozen=True, slots=True)
class ReportEntry:
    """One measured file, and optionally what the array model expects over its span."""

    source: str
    metrics: BeamMetrics
    samples: int
    angle_min_deg: float
    angle_max_deg: float
    calibrated: bool = True
    model: ArrayModel | None = None
    expected: BeamMetrics | None = None
    notes: tuple[str, ...] = field(default=())


def difference(key: str, measured: float | None, expected: float | None) -> float | None:
    """measured - expected (angles wrapped to [-180, 180)); ``None`` if either is
    missing or the metric is the absolute peak power."""
    if measured is None or expected is None or key == "peak_power_db":
        return None
    d = measured - expected
    if key in ANGLE_KEYS:
        d = (d + 180.0) % 360.0 - 180.0
    return d


def _other_side(measured: dict, expected: dict) -> bool:
    """True when the highest side lobe lies on opposite sides of the peak in the
    measurement and the model: near-equal first side lobes (a symmetric pattern) make
    which one is highest a matter of noise, so their directions are not compared."""
    vals = (measured["sll_angle_deg"], measured["peak_angle_deg"],
            expected["sll_angle_deg"], expected["peak_angle_deg"])
    if any(v is None for v in vals):
        return False
    ms, mp, xs, xp = vals
    return (difference("sll_angle_deg", ms, mp) or 0.0) * (
        difference("sll_angle_deg", xs, xp) or 0.0) < 0


def _fmt(v: float | None, decimals: int = _DECIMALS, signed: bool = False) -> str:
    if v is None:
        return MISSING
    if abs(v) < 0.5 * 10.0 ** -decimals:
        v = 0.0
    return f"{v:+.{decimals}f}" if signed else f"{v:.{decimals}f}"


def format_table(entries: list[ReportEntry]) -> str:
    """A readable table: one row per metric, one column group per file.

    With a model, each file gets three columns (measured, model, measured - model)
    under the file's name.  Undetermined values read ``n/a [k]``; note k under the table
    says why.
    """
    if not entries:
        return ""
    with_model = any(e.expected is not None for e in entries)
    units = {e.calibrated for e in entries}
    p_unit = "dBm" if units == {True} else "dB" if units == {False} else "dBm or dB"
    labels = [LABELS[k].format(p=p_unit) for k in METRIC_KEYS]
    head_rows = ["samples", "angle span (deg)"]

    notes: list[str] = []
    note_index: dict[tuple[str, str], int] = {}

    def note(source: str, reason: str) -> str:
        key = (source, reason)
        if key not in note_index:
            notes.append(f"[{len(notes) + 1}] {source}: {reason}")
            note_index[key] = len(notes)
        return f"{MISSING} [{note_index[key]}]"

    # Columns: list of (title, cells for head rows + metric rows).
    # Columns: (file title, column title, cells); the file title heads its group.
    columns: list[tuple[str, str, list[str]]] = []
    for e in entries:
        m = e.metrics.to_dict()
        meas = [str(e.samples), f"{_fmt(e.angle_min_deg, 1)} .. {_fmt(e.angle_max_deg, 1)}"]
        for k in METRIC_KEYS:
            v = m[k]
            meas.append(_fmt(v) if v is not None
                        else note(e.source, e.metrics.reasons.get(k, "not determined")))
        columns.append((e.source, "measured" if with_model else "", meas))
        if with_model:
            x = e.expected.to_dict() if e.expected is not None else dict.fromkeys(METRIC_KEYS)
            exp = ["", ""]
            dif = ["", ""]
            for k in METRIC_KEYS:
                if k == "peak_power_db":
                    exp.append("0 (ref)" if x[k] is not None else MISSING)
                    dif.append("")
                    continue
                exp.append(_fmt(x[k]))
                if k == "sll_angle_deg" and _other_side(m, x):
                    dif.append("other side")
                    continue
                d = difference(k, m[k], x[k])
                dif.append(_fmt(d, signed=True) if d is not None else "")
            columns.append(("", "model", exp))
            columns.append(("", "meas - model", dif))

    row_labels = head_rows + labels
    lw = max(len(s) for s in row_labels)
    widths = [max(len(t2), *(len(c) for c in cells)) for _, t2, cells in columns]
    # A file title wider than its group's first column widens that column.
    for i, (t1, _, _) in enumerate(columns):
        if t1:
            group = [i] + [k for k in range(i + 1, len(columns)) if not columns[k][0]]
            span = sum(widths[k] for k in group) + 2 * (len(group) - 1)
            if len(t1) > span:
                widths[i] += len(t1) - span

    def line(label: str, cells: list[str]) -> str:
        return label.ljust(lw) + "".join("  " + c.rjust(w)
                                         for c, w in zip(cells, widths, strict=True))

    out = []
    if with_model:
        head = ""
        for i, (t1, _, _) in enumerate(columns):
            if t1:
                group = [i] + [k for k in range(i + 1, len(columns)) if not columns[k][0]]
                span = sum(widths[k] for k in group) + 2 * (len(group) - 1)
                head += "  " + t1.ljust(span)
        out.append((" " * lw + head).rstrip())
        out.append(line("", [t2 for _, t2, _ in columns]))
    else:
        out.append(line("", [t1 for t1, _, _ in columns]))
    for r, label in enumerate(row_labels):
        out.append(line(label, [cells[r] for _, _, cells in columns]))
    if with_model:
        models = {_model_text(e.model) for e in entries if e.model is not None}
        for text in sorted(models):
            out.append("")
            out.append(f"model: {text}; model levels relative to its own peak; expected "
                       "values measured over each file's angle span")
    extra = [f"{e.source}: {n}" for e in entries for n in e.notes]
    if notes or extra:
        out.append("")
        out.extend(notes)
        out.extend(extra)
    return "\n".join(out) + "\n"


def _model_text(model: ArrayModel | None) -> str:
    if model is None:
        return ""
    return (f"{model.n_elements} elements, spacing {model.spacing_wl:g} wavelength, "
            f"element cos^{model.element_exp:g}, steered {model.steer_deg:g} deg, "
            f"taper {model.taper}")


def _round(v: float | None) -> float | None:
    if v is None or not math.isfinite(v):
        return None
    r = round(float(v), JSON_DECIMALS)
    return 0.0 if r == 0 else r


def json_record(entry: ReportEntry) -> dict[str, Any]:
    """The ``--json`` object for one file: source, samples, angle span, the metric keys,
    ``uncertainty`` (1 sigma), ``notes`` (``{key: reason}`` for each null and caveat)
    and, with a model, ``model`` = {parameters, expected}."""
    rec: dict[str, Any] = {
        "source": entry.source,
        "samples": int(entry.samples),
        "angle_min_deg": _round(entry.angle_min_deg),
        "angle_max_deg": _round(entry.angle_max_deg),
    }
    for k, v in entry.metrics.to_dict().items():
        rec[k] = _round(v)
    # 1-sigma uncertainty, and the reason beside every null (and step caveats)
    rec["uncertainty"] = {k: _round(v) for k, v in entry.metrics.uncertainty.items()}
    rec["notes"] = entry.metrics.notes()
    if entry.model is not None:
        exp = entry.expected.to_dict() if entry.expected is not None \
            else dict.fromkeys(METRIC_KEYS)
        rec["model"] = {
            "parameters": entry.model.to_dict(),
            "expected": {k: _round(v) for k, v in exp.items()},
        }
    return rec
