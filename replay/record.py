"""The commissioning record: record.md, record.html, record.json, polar.png, cartesian.png.

One code path for ``lobewatch commission --out`` and the screen's record key
(:func:`write_record_from_tick`).  Plots are drawn with matplotlib's Agg backend
(no display needed); the HTML embeds them as base64 data and carries its own
stylesheet, so the file is self-contained and prints as it shows.  Every input is
named with its SHA-256 so the record can be traced to the exact files.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import json
import math
import os
import time
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from replay.pattern_input import PatternInput
from replay.record_plots import plot_cartesian, plot_polar, plot_timeline
from replay.report import ANGLE_KEYS, LABELS
from stream.array_model import ArrayModel
from stream.beam import METRIC_KEYS, BeamMetrics
from stream.errors import InputFileError, UserError
from stream.mask import Mask, parse_mask
from stream.pattern import measure
from stream.spec import Assessment, Spec, assess, spec_from_dict

#: Events listed in a record at most (the newest are kept).
MAX_EVENTS: int = 500

META_KEYS: tuple[str, ...] = ("site", "array", "operator", "notes", "bearing")


@dataclass(frozen=True, slots=True)
class Reference:
    """An accepted baseline: its pattern and metrics."""

    source: str
    angle_deg: np.ndarray
    power_db: np.ndarray
    metrics: BeamMetrics


@dataclass(slots=True)
class RecordData:
    """What one record shows, besides the assessment."""

    inputs: list[dict[str, Any]] = field(default_factory=list)  # path, sha256, kind, samples
    meta: dict[str, Any] = field(default_factory=dict)          # site, array, operator, notes
    created_t: float = 0.0
    timeline_t: np.ndarray = field(default_factory=lambda: np.empty(0))
    timeline_peak_deg: np.ndarray = field(default_factory=lambda: np.empty(0))
    events: list[dict[str, Any]] = field(default_factory=list)
    reference: Reference | None = None
    spec: Spec | None = None
    calibrated: bool = True


# -- inputs ------------------------------------------------------------------------------


def load_mask(path: str | os.PathLike[str]) -> Mask:
    """Read an envelope mask file (format in :mod:`stream.mask`)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(str(p), f"cannot read the mask ({exc}); check the path") from None
    return parse_mask(text, str(p))


def load_spec(path: str | os.PathLike[str]) -> Spec:
    """Read a TOML specification; ``[mask] file`` is relative to the spec's folder."""
    p = Path(path)
    try:
        d = tomllib.loads(p.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(str(p), f"cannot read the spec ({exc}); check the path") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(str(p), f"not valid TOML ({exc}); fix the syntax") from None
    mask = None
    mfile = d.get("mask", {}).get("file")
    if mfile is not None:
        if not isinstance(mfile, str):
            raise InputFileError(str(p), "[mask] file must be a file name in quotes")
        mask = load_mask(p.parent / mfile)
    return spec_from_dict(d, str(p), mask)


def version() -> str:
    """The installed lobewatch version."""
    try:
        from importlib.metadata import version as _v
        return _v("lobewatch")
    except Exception:  # noqa: BLE001 - a source checkout without metadata
        return "unknown"


# -- numbers shared by JSON, Markdown and HTML ------------------------------------------


def _r(v: Any, nd: int = 4) -> Any:
    if v is None:
        return None
    if isinstance(v, float):
        return round(v, nd) if math.isfinite(v) else None
    return v


def reference_differences(metrics: BeamMetrics, ref: BeamMetrics) -> dict[str, float | None]:
    """measured - reference per metric (angles wrapped to [-180, 180))."""
    out: dict[str, float | None] = {}
    for k in METRIC_KEYS:
        m, r = getattr(metrics, k), getattr(ref, k)
        if m is None or r is None:
            out[k] = None
            continue
        d = m - r
        if k in ANGLE_KEYS:
            d = (d + 180.0) % 360.0 - 180.0
        out[k] = d
    return out


def record_dict(asmt: Assessment, data: RecordData) -> dict[str, Any]:
    """The record as JSON-ready data (also the ``--json`` line of ``commission``)."""
    fit = asmt.fit
    cols = asmt.columns
    d: dict[str, Any] = {
        "verdict": asmt.verdict,
        "verdict_reason": asmt.verdict_reason,
        "criteria": [c.to_dict() for c in asmt.criteria],
        "fit": None if fit is None else {
            "steer_deg": _r(fit.steer_deg), "gain_db": _r(fit.gain_db),
            "element_exp": _r(fit.element_exp), "spacing_wl": _r(fit.spacing_wl),
            "residual_rms_db": _r(fit.residual_rms_db),
            "elements_effective": None if cols is None else _r(cols.elements_effective),
            "floor_db": _r(fit.floor_db),
            "uncertainty": {k: _r(v) for k, v in fit.uncertainty.items()},
            "method": fit.method},
        "columns": None if cols is None else [_r(v, 3) for v in cols.amplitudes],
        "suspects": [] if cols is None else [list(s) for s in cols.suspects],
        "suspect_kinds": [] if cols is None else list(cols.kinds),
        "metrics": {k: _r(v) for k, v in asmt.metrics.to_dict().items()},
        "notes": {k: v for k, v in asmt.metrics.reasons.items()},
        "mask": None if asmt.mask_result is None else asmt.mask_result.to_dict(),
        "model": None if asmt.model is None else asmt.model.to_dict(),
        "spec": None if data.spec is None else data.spec.to_dict(),
        "meta": {k: data.meta.get(k) for k in META_KEYS},
        "date": _iso(data.created_t),
        "lobewatch_version": version(),
        "inputs": data.inputs,
        "calibrated": data.calibrated,
        "remarks": list(asmt.notes),
    }
    if data.reference is not None:
        d["reference"] = {"source": data.reference.source,
                          "differences": {k: _r(v) for k, v in reference_differences(
                              asmt.metrics, data.reference.metrics).items()}}
    return d


def _iso(t: float) -> str:
    return _dt.datetime.fromtimestamp(t, _dt.UTC).strftime("%Y-%m-%d %H:%M:%S UTC")


# -- text --------------------------------------------------------------------------------


def _fmt(v: Any, nd: int = 2, signed: bool = False) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "n/a"
    if isinstance(v, float):
        return f"{v:+.{nd}f}" if signed else f"{v:.{nd}f}"
    return str(v)


def _tables(asmt: Assessment, data: RecordData) -> list[tuple[str, list[str], list[list[str]]]]:
    """(title, header, rows) of every table in the record, shared by MD and HTML."""
    unit = "dBm" if data.calibrated else "dB"
    t: list[tuple[str, list[str], list[list[str]]]] = []
    t.append(("Verdict", ["criterion", "measured", "limit", "margin", "result", "note"],
              [[c.name, _fmt(c.measured) + (f" {c.unit}" if c.measured is not None else ""),
                c.limit_text, _fmt(c.margin, signed=True) + (f" {c.unit}" if c.margin is not None
                                                             else ""),
                c.result.upper(), c.reason]
               for c in asmt.criteria]))
    rows = []
    ref = reference_differences(asmt.metrics, data.reference.metrics) \
        if data.reference is not None else None
    unc = getattr(asmt.metrics, "uncertainty", None) or {}
    for k in METRIC_KEYS:
        v = getattr(asmt.metrics, k)
        sigma = unc.get(k) if v is not None else None
        row = [LABELS[k].strip().format(p=unit), _fmt(v),
               _fmt(sigma) if sigma is not None else ""]
        if ref is not None:
            row += [_fmt(getattr(data.reference.metrics, k)), _fmt(ref[k], signed=True)]
        # the reason for a missing value, or the caveat on a present one (e.g. the step)
        row.append(asmt.metrics.reasons.get(k, ""))
        rows.append(row)
    head = ["metric", "measured", "± 1 sigma"] \
        + (["reference", "meas. - ref."] if ref is not None else []) + ["note"]
    t.append(("Beam metrics", head, rows))
    f = asmt.fit
    if f is not None:
        u = f.uncertainty
        fr = [["steering (deg)", _fmt(f.steer_deg), _fmt(u.get("steer_deg"), 3)],
              [f"peak gain ({unit})", _fmt(f.gain_db), _fmt(u.get("gain_db"), 3)],
              ["element exponent q (cos^q)", _fmt(f.element_exp), _fmt(u.get("element_exp"), 3)],
              ["element spacing (wavelengths)", _fmt(f.spacing_wl, 3)
               + ("" if f.spacing_free else " (fixed)"), _fmt(u.get("spacing_wl"), 3)],
              [f"noise floor ({unit})", _fmt(f.floor_db), _fmt(u.get("floor_db"), 3)],
              ["residual rms above floor (dB)", _fmt(f.residual_rms_db), ""]]
        t.append(("Model fit (1-sigma from the Jacobian)", ["parameter", "value", "1-sigma"],
                  fr))
    c = asmt.columns
    if c is not None:
        cr = [[str(i + 1), _fmt(a), _fmt(20.0 * math.log10(a) if a > 0 else None, 1)]
              for i, a in enumerate(c.amplitudes)]
        t.append((f"Columns: {c.summary()}", ["column", "relative amplitude",
                                              "relative level (dB)"], cr))
    t.append(("Inputs", ["file", "kind", "samples", "SHA-256"],
              [[i["path"], i["kind"], str(i["samples"]), i["sha256"]] for i in data.inputs]))
    return t


#: Who signs a printed record: the one who measured, the one who accepts it.
SIGN_OFF: tuple[str, ...] = ("measured by (operator)", "accepted by (customer)")


def _header_lines(asmt: Assessment, data: RecordData) -> list[tuple[str, str]]:
    m = data.meta
    lines = [("Site", m.get("site") or "—"), ("Array", m.get("array") or "—"),
             ("Operator", m.get("operator") or "—"), ("Date", _iso(data.created_t)),
             ("lobewatch", version()),
             ("Nominal model", "none" if asmt.model is None else ", ".join(
                 f"{k}={v}" for k, v in asmt.model.to_dict().items())),
             ("Specification", "command-line options" if data.spec is None or not data.spec.source
              else data.spec.source)]
    if m.get("notes"):
        lines.append(("Notes", str(m["notes"])))
    bearing = _peak_bearing_text(m.get("bearing"), asmt.metrics.peak_angle_deg)
    if bearing:
        lines.append(("Peak bearing", bearing))
    return lines


def _peak_bearing_text(convention: Any, peak_deg: float | None) -> str:
    """The peak as a compass bearing when the session (or the screen) had a bearing
    convention, with the convention, so the reader can check it; else ""."""
    if not isinstance(convention, dict) or peak_deg is None:
        return ""
    from stream.bearing import BearingConvention
    try:
        conv = BearingConvention(**convention)
    except (TypeError, ValueError):
        return ""
    return (f"{conv.bearing_deg(peak_deg):05.1f}° {conv.reference} (array angle "
            f"{peak_deg:+.2f}°; broadside at {conv.offset_deg:g}°, angles "
            f"{'clockwise' if conv.sense == 'cw' else 'counter-clockwise'})")


def _suspect_text(asmt: Assessment) -> str:
    c = asmt.columns
    if c is None:
        return ""
    if not c.suspects:
        return "No dead or weak column found."
    return ("Suspect columns (a power pattern cannot tell column k from its mirror "
            "N+1-k): " + "; ".join(c.suspect_parts()) + ".")


def render_markdown(asmt: Assessment, data: RecordData, images: dict[str, str]) -> str:
    """record.md: the tables and the pictures (relative file names)."""
    out = ["# Commissioning record", ""]
    out += [f"- **{k}:** {v}" for k, v in _header_lines(asmt, data)]
    out += ["", f"## Verdict: {asmt.verdict.upper()}", "", asmt.verdict_reason, ""]
    for title, head, rows in _tables(asmt, data):
        out += [f"### {title}", "", "| " + " | ".join(head) + " |",
                "|" + "|".join("---" for _ in head) + "|"]
        out += ["| " + " | ".join(cell.replace("|", "/") for cell in r) + " |" for r in rows]
        out.append("")
        if title.startswith("Columns"):
            out += [_suspect_text(asmt), ""]
    for name, fname in images.items():
        out += [f"![{name}]({fname})", ""]
    if data.events:
        out += ["### Alarms and events", "", "| time | kind | detail |", "|---|---|---|"]
        out += [f"| {_iso(e['t'])} | {e['kind']} | {_event_detail(e)} |" for e in data.events]
        out.append("")
    out += [f"- {n}" for n in asmt.notes]
    out += ["", "### Sign-off", ""] + [f"- {who}: ____________________  date: __________"
                                       for who in SIGN_OFF]
    return "\n".join(out) + "\n"


def _event_detail(e: dict[str, Any]) -> str:
    return ", ".join(f"{k}={v}" for k, v in e.items() if k not in ("t", "kind"))


_CSS = """
body{font-family:Helvetica,Arial,sans-serif;max-width:960px;margin:24px auto;color:#1b1b1b}
h1{font-size:22px;margin-bottom:4px} h2{font-size:18px} h3{font-size:15px;margin-top:22px}
table{border-collapse:collapse;width:100%;font-size:13px;margin:6px 0}
th,td{border:1px solid #bbb;padding:3px 6px;text-align:left;vertical-align:top}
th{background:#eef1f6} td.mono{font-family:monospace;font-size:11px;word-break:break-all}
.verdict{font-size:20px;font-weight:bold;padding:8px 12px;border-radius:4px;display:inline-block}
.pass{background:#d8f0dc;color:#14532d} .fail{background:#f8d7d7;color:#7f1d1d}
.incomplete,.undetermined{background:#fdf0c8;color:#6b4f00}
img{max-width:100%;border:1px solid #ddd;margin:6px 0}
dl{display:grid;grid-template-columns:140px auto;gap:2px 10px;font-size:14px}
dt{font-weight:bold} table.sign td{height:34px}
@media print{body{margin:8mm} img{page-break-inside:avoid} table{page-break-inside:auto}}
"""


def render_html(asmt: Assessment, data: RecordData, images: dict[str, bytes]) -> str:
    """record.html: self-contained (inline CSS, base64 PNGs, no external reference)."""
    e = html.escape
    out = ["<!DOCTYPE html>", "<html lang=\"en\"><head><meta charset=\"utf-8\">",
           "<title>Commissioning record</title>", f"<style>{_CSS}</style></head><body>",
           "<h1>Commissioning record</h1>", "<dl>"]
    out += [f"<dt>{e(k)}</dt><dd>{e(str(v))}</dd>" for k, v in _header_lines(asmt, data)]
    out += ["</dl>", f"<h2>Verdict: <span class=\"verdict {e(asmt.verdict)}\">"
            f"{e(asmt.verdict.upper())}</span></h2>", f"<p>{e(asmt.verdict_reason)}</p>"]
    for title, head, rows in _tables(asmt, data):
        out.append(f"<h3>{e(title)}</h3><table><tr>"
                   + "".join(f"<th>{e(h)}</th>" for h in head) + "</tr>")
        for r in rows:
            cells = []
            for h, cell in zip(head, r, strict=True):
                cls = ""
                if h == "result":
                    cls = f" class=\"{e(cell.lower())}\""
                elif h == "SHA-256":
                    cls = " class=\"mono\""
                cells.append(f"<td{cls}>{e(cell)}</td>")
            out.append("<tr>" + "".join(cells) + "</tr>")
        out.append("</table>")
        if title.startswith("Columns"):
            out.append(f"<p>{e(_suspect_text(asmt))}</p>")
    for name, png in images.items():
        b64 = base64.b64encode(png).decode("ascii")
        out.append(f"<h3>{e(name)}</h3><img alt=\"{e(name)}\" src=\"data:image/png;base64,"
                   f"{b64}\">")
    if data.events:
        out.append("<h3>Alarms and events</h3><table><tr><th>time</th><th>kind</th>"
                   "<th>detail</th></tr>")
        out += [f"<tr><td>{e(_iso(ev['t']))}</td><td>{e(str(ev['kind']))}</td>"
                f"<td>{e(_event_detail(ev))}</td></tr>" for ev in data.events]
        out.append("</table>")
    out += [f"<p>{e(n)}</p>" for n in asmt.notes]
    out.append("<h3>Sign-off</h3><table class=\"sign\"><tr><th>role</th><th>name</th>"
               "<th>signature</th><th>date</th></tr>")
    out += [f"<tr><td>{e(who)}</td><td></td><td></td><td></td></tr>" for who in SIGN_OFF]
    out.append("</table>")
    out.append("<p style=\"font-size:11px;color:#666\">Safety: measurements on energised "
               "antennas follow local RF exposure limits and local codes; work at height only "
               "as training and local rules allow.</p>")
    out.append("</body></html>")
    return "\n".join(out) + "\n"


# -- writing -----------------------------------------------------------------------------


def write_record(asmt: Assessment, data: RecordData, out_dir: str | os.PathLike[str]) -> Path:
    """Write the five (six with a timeline) files into ``out_dir``; returns record.html."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserError(f"{out}: cannot create the record folder ({exc}); choose another "
                        "--out") from None
    files = {"Polar pattern": "polar.png", "Cartesian pattern": "cartesian.png"}
    plot_polar(asmt, data, out / "polar.png")
    plot_cartesian(asmt, data, out / "cartesian.png")
    if data.timeline_t.size:
        plot_timeline(data, out / "timeline.png")
        files["Peak direction per sweep"] = "timeline.png"
    rec = record_dict(asmt, data)
    rec["pattern"] = {"angle_deg": [float(v) for v in asmt.angle_deg],
                      "power_db": [float(v) for v in asmt.power_db]}
    if data.timeline_t.size:
        rec["timeline"] = {"t": [float(v) for v in data.timeline_t],
                           "peak_angle_deg": [None if not math.isfinite(v) else float(v)
                                              for v in data.timeline_peak_deg]}
    rec["events"] = data.events
    (out / "record.json").write_text(json.dumps(rec, indent=1, allow_nan=False) + "\n",
                                     encoding="utf-8")
    (out / "record.md").write_text(render_markdown(asmt, data, files), encoding="utf-8")
    images = {name: (out / f).read_bytes() for name, f in files.items()}
    html_path = out / "record.html"
    html_path.write_text(render_html(asmt, data, images), encoding="utf-8")
    return html_path


def record_data_from_input(inp: PatternInput, meta: dict[str, Any], spec: Spec | None,
                           reference: Reference | None = None,
                           created_t: float | None = None) -> RecordData:
    """RecordData for one input file; ``meta`` values win over the session's own."""
    merged = {k: inp.meta.get(k) for k in META_KEYS if inp.meta.get(k)}
    merged.update({k: v for k, v in meta.items() if v})
    events = [ev.to_dict() for ev in inp.events][-MAX_EVENTS:]
    return RecordData(
        inputs=[{"path": inp.path, "sha256": inp.sha256, "kind": inp.kind,
                 "samples": inp.samples}],
        meta=merged, created_t=time.time() if created_t is None else created_t,
        timeline_t=inp.timeline_t, timeline_peak_deg=inp.timeline_peak_deg,
        events=events, reference=reference, spec=spec, calibrated=inp.calibrated)


def reference_from_input(inp: PatternInput) -> Reference:
    return Reference(inp.path, inp.angle_deg, inp.power_db, measure(inp.angle_deg,
                                                                    inp.power_db))


def write_record_from_tick(tick: Any, model: ArrayModel | None, out_dir: str | os.PathLike[str],
                           meta: dict[str, Any] | None = None) -> Path:
    """The screen's record key: a commissioning record of the tick's current pattern
    (target and tolerance from the tick; the tick's sweep peaks as the timeline; the
    reference the user captured as the baseline).  Returns the path of record.html."""
    meta = dict(meta or {})
    if getattr(tick, "bearing", None) is not None:
        meta.setdefault("bearing", tick.bearing.to_dict())
    spec = Spec(target_deg=tick.target_deg,
                tolerance_deg=tick.tolerance_deg if tick.target_deg is not None else None)
    if spec.target_deg is not None and spec.tolerance_deg is None:
        spec = Spec()
    a = np.asarray(tick.angle_deg, dtype=np.float64)
    p = np.asarray(tick.power_db, dtype=np.float64)
    if a.size < 3:
        raise UserError("the pattern has fewer than 3 angles yet; wait for a sweep")
    asmt = assess(a, p, spec, model)
    ref = None
    if tick.reference is not None:
        ref = Reference("reference captured on screen", np.asarray(tick.reference.angle_deg),
                        np.asarray(tick.reference.power_db), tick.reference.metrics)
    inputs = [{"path": meta.pop("source", "live pattern"), "sha256": "n/a (live pattern)",
               "kind": "screen", "samples": int(tick.samples)}]
    data = RecordData(inputs=inputs, meta=meta, created_t=float(tick.t),
                      timeline_t=np.asarray(tick.sweep_peak_t, dtype=np.float64),
                      timeline_peak_deg=np.asarray(tick.sweep_peaks_deg, dtype=np.float64),
                      events=[ev.to_dict() for ev in tick.events], reference=ref, spec=spec,
                      calibrated=bool(tick.calibrated))
    return write_record(asmt, data, out_dir)
