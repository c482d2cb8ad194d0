"""``lobewatch commission FILE [FILE ...]``: verdict and commissioning record.

Each file (CSV, JSON Lines or a session) is measured, fitted to the array model,
its columns diagnosed, and judged against the criteria given by options and/or a
TOML spec; ``--out`` writes the record (see :mod:`replay.record`).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

from stream.array_model import TAPER_NAMES
from tui.cli import UsageError

if TYPE_CHECKING:  # the work is imported by run(): scipy and matplotlib load only then
    from replay.pattern_input import PatternInput
    from replay.record import Reference
    from stream.array_model import ArrayModel
    from stream.spec import Assessment, Spec

#: Exit status for a verdict other than pass (the same code ``--fail-on`` uses).
EXIT_NOT_PASSED: int = 3
#: Sessions with more samples than this show a progress bar (on a terminal).
PROGRESS_MIN_SAMPLES: int = 200_000

DESCRIPTION = """\
Judge one or more measured patterns against a specification and, with --out, write a
commissioning record a customer can keep: record.md, a self-contained printable
record.html, record.json, polar.png and cartesian.png (measured pattern, model fit,
envelope mask, -3 dB line, peak and target marked), plus timeline.png and the
alarm/event list for a session file.

Per file: the beam metrics (as 'lobewatch report'); with --elements the textbook
array model fitted by least squares on dB (steering, gain, element exponent q,
optionally spacing; 1-sigma from the Jacobian) and a column diagnosis naming dead or
weak columns.  A power pattern cannot tell column k from its mirror N+1-k, so
suspects are given as pairs, e.g. [1, 4] = "column 1 or column 4".

Criteria (options override the --spec file): pointing (--target-deg with
--tolerance-deg), half-power beamwidth (--hpbw-deg, a value or 'model', with
--hpbw-tolerance-deg, default 10%), highest side lobe (--max-sll-db), front-to-back
(--min-fb-db) and an envelope mask (--mask).  Each criterion is pass, fail or
undetermined (with the reason); the verdict is pass, fail, or incomplete when a
criterion is undetermined or none was given.

Exit status: 0 when every file passes, 3 when any fails or is incomplete, 1 on bad
input (one line saying what and where), 2 on bad options.
"""

EPILOG = """\
examples:
  lobewatch commission examples/sweep_4col_5deg.csv --elements 4 --target-deg 0 \\
      --tolerance-deg 2 --mask examples/mask_4col_invented.csv --out rec/
  lobewatch commission sweep.csv --spec examples/spec_4col_invented.toml --json
  lobewatch commission today.lwsession --elements 4 --reference rec/record.json --out rec2/

Safety: stay out of the main beam of energised antennas while sweeping and follow
your local RF exposure limits; work at height only as your training and local rules
allow; transmit only on spectrum you are licensed for.  Local codes and licensed
practice come first.
"""


def _number(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return v


def _positive(text: str) -> float:
    v = _number(text)
    if v <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number")
    return v


def _hpbw(text: str) -> float | str:
    return "model" if text.strip().lower() == "model" else _positive(text)


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "commission", help="verdict against a specification and a commissioning record",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("files", nargs="+", metavar="FILE",
                   help="measured pattern(s): CSV, JSON Lines or .lwsession; several are "
                        "shown side by side with the difference against the first")
    m = p.add_argument_group("array model (enables the fit and the column diagnosis)")
    m.add_argument("--elements", type=int, metavar="N",
                   help="number of array elements (columns) N >= 1; a session's recorded "
                        "model is used when omitted")
    m.add_argument("--spacing-wl", type=_positive, default=None, metavar="D",
                   help="element spacing in wavelengths (default 0.5; the fit's start "
                        "value with --fit-spacing)")
    m.add_argument("--element-exp", type=_number, default=None, metavar="Q",
                   help="element power pattern cos^Q(theta): the fit's start value "
                        "(default 0; Q is always fitted)")
    m.add_argument("--steer-deg", type=_number, default=None, metavar="A",
                   help="designed steering, degrees from broadside, for an HPBW of 'model' "
                        "(default 0; the steering is always fitted)")
    m.add_argument("--taper", choices=TAPER_NAMES, default=None, metavar="NAME",
                   help=f"amplitude taper: {', '.join(TAPER_NAMES)} (default none)")
    m.add_argument("--fit-spacing", action="store_true",
                   help="let the fit adjust the element spacing too")
    c = p.add_argument_group("criteria (override the same values from --spec)")
    c.add_argument("--spec", metavar="FILE",
                   help="TOML specification ([pointing] [beamwidth] [side_lobes] "
                        "[front_to_back] [mask]; see docs/commissioning.md)")
    c.add_argument("--target-deg", type=_number, metavar="DEG",
                   help="direction the main lobe should point, degrees")
    c.add_argument("--tolerance-deg", type=_positive, metavar="DEG",
                   help="allowed pointing error, degrees (needed with --target-deg)")
    c.add_argument("--hpbw-deg", type=_hpbw, metavar="DEG|model",
                   help="designed half-power beamwidth, degrees, or 'model' for the "
                        "nominal model's HPBW over the same arc")
    c.add_argument("--hpbw-tolerance-deg", type=_positive, metavar="DEG",
                   help="allowed HPBW error, degrees (default 10%% of the design value)")
    c.add_argument("--max-sll-db", type=_number, metavar="DB",
                   help="highest side lobe allowed, dB relative to the peak (e.g. -10)")
    c.add_argument("--min-fb-db", type=_number, metavar="DB",
                   help="lowest front-to-back ratio allowed, dB")
    c.add_argument("--mask", metavar="FILE",
                   help="envelope mask CSV (offset_deg,limit_db; see docs/commissioning.md)")
    r = p.add_argument_group("record")
    r.add_argument("--out", metavar="DIR",
                   help="write the commissioning record into DIR (one sub-folder per file "
                        "when several are given)")
    r.add_argument("--reference", metavar="FILE",
                   help="accepted baseline (sweep, session or an earlier record.json): adds "
                        "measured - reference per metric and on the plots")
    r.add_argument("--site", help="site name for the record")
    r.add_argument("--array", help="array / sector name for the record")
    r.add_argument("--operator", help="who measured")
    r.add_argument("--note", action="append", metavar="TEXT",
                   help="a remark for the record (repeatable)")
    s = p.add_argument_group("session files")
    s.add_argument("--bin-deg", type=_positive, default=1.0, metavar="DEG",
                   help="angle bin width for a session's pattern, degrees (default 1)")
    s.add_argument("--sweeps", type=int, default=10, metavar="K",
                   help="a session's pattern is the mean of its last K complete sweeps "
                        "(default 10)")
    p.add_argument("--json", action="store_true",
                   help="print one JSON object per file (verdict, criteria, fit, columns, "
                        "suspects, ...) instead of the table")
    p.set_defaults(func=run)


def _model(args: argparse.Namespace, inp: PatternInput) -> ArrayModel | None:
    from stream.array_model import ArrayModel

    given = [n for n in ("spacing_wl", "element_exp", "steer_deg", "taper")
             if getattr(args, n) is not None]
    if args.elements is None:
        recorded = inp.meta.get("model")
        if isinstance(recorded, dict) and recorded.get("n_elements"):
            try:
                return ArrayModel(**recorded)
            except (TypeError, ValueError):
                return None
        if given:
            flags = ", ".join("--" + g.replace("_", "-") for g in given)
            raise UsageError(f"{flags} describe the array model and need --elements N")
        return None
    if args.elements < 1:
        raise UsageError(f"--elements must be at least 1 (got {args.elements})")
    steer = 0.0 if args.steer_deg is None else args.steer_deg
    if not -90.0 < steer < 90.0:
        raise UsageError(f"--steer-deg must lie between -90 and 90 degrees (got {steer:g})")
    exp = 0.0 if args.element_exp is None else args.element_exp
    if exp < 0:
        raise UsageError(f"--element-exp must be 0 or more (got {exp:g})")
    return ArrayModel(args.elements, 0.5 if args.spacing_wl is None else args.spacing_wl,
                      exp, steer, args.taper or "none")


def _spec(args: argparse.Namespace) -> Spec:
    from replay.record import load_mask, load_spec
    from stream.spec import Spec

    spec = load_spec(args.spec) if args.spec else Spec()
    mask = load_mask(args.mask) if args.mask else None
    spec = spec.merged(target_deg=args.target_deg, tolerance_deg=args.tolerance_deg,
                       hpbw_deg=args.hpbw_deg, hpbw_tolerance_deg=args.hpbw_tolerance_deg,
                       max_sll_db=args.max_sll_db, min_front_to_back_db=args.min_fb_db,
                       mask=mask)
    if spec.target_deg is not None and spec.tolerance_deg is None:
        raise UsageError("--target-deg needs --tolerance-deg (the allowed pointing error)")
    if spec.tolerance_deg is not None and spec.target_deg is None:
        raise UsageError("--tolerance-deg needs --target-deg")
    return spec


def _read(path: str, args: argparse.Namespace) -> PatternInput:
    from replay.convert import Progress
    from replay.pattern_input import read_pattern

    bar: list[Progress] = []

    def progress(done: int, total: int) -> None:
        if total < PROGRESS_MIN_SAMPLES:
            return
        if not bar:
            bar.append(Progress(total, f"read {Path(path).name}"))
        bar[0].update(done - bar[0].done)

    if not 1 <= args.sweeps <= 1000:
        raise UsageError(f"--sweeps must be from 1 to 1000 (got {args.sweeps})")
    try:
        return read_pattern(path, bin_deg=args.bin_deg, sweeps_k=args.sweeps,
                            progress=progress)
    finally:
        if bar:
            bar[0].close()


def run(args: argparse.Namespace) -> int:
    from replay.record import (
        record_data_from_input,
        record_dict,
        reference_from_input,
        write_record,
    )
    from stream.spec import assess

    spec = _spec(args)
    meta: dict[str, Any] = {"site": args.site, "array": args.array, "operator": args.operator,
                            "notes": "; ".join(args.note) if args.note else None}
    reference: Reference | None = None
    if args.reference:
        reference = reference_from_input(_read(args.reference, args))
    results: list[tuple[PatternInput, Assessment, dict[str, Any]]] = []
    several = len(args.files) > 1
    for i, path in enumerate(args.files):
        inp = _read(path, args)
        model = _model(args, inp)
        asmt = assess(inp.angle_deg, inp.power_db, spec, model, fit_spacing=args.fit_spacing)
        data = record_data_from_input(inp, meta, spec, reference)
        rec = record_dict(asmt, data)
        rec["source"] = path
        if args.out:
            out = Path(args.out) / (f"{i + 1:02d}-{Path(path).stem}" if several else "")
            rec["record"] = str(write_record(asmt, data, out))
        results.append((inp, asmt, rec))
    stdout = sys.stdout
    if args.json:
        for _, _, rec in results:
            stdout.write(json.dumps(rec, allow_nan=False) + "\n")
    else:
        stdout.write(format_results(results, reference))
    stdout.flush()
    ok = all(a.verdict == "pass" for _, a, _ in results)
    return 0 if ok else EXIT_NOT_PASSED


def _f(v: Any, nd: int = 2, signed: bool = False) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "n/a"
    if isinstance(v, float):
        return f"{v:+.{nd}f}" if signed else f"{v:.{nd}f}"
    return str(v)


def _grid(rows: list[list[str]]) -> str:
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    return "".join("  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip()
                   + "\n" for r in rows)


def format_results(results: list[tuple[PatternInput, Assessment, dict[str, Any]]],
                   reference: Reference | None) -> str:
    """The verdict table of each file, then (several files) the side-by-side metrics
    with the difference against the first."""
    from replay.record import reference_differences
    from replay.report import LABELS
    from stream.beam import METRIC_KEYS

    out: list[str] = []
    for inp, asmt, _ in results:
        out.append(f"{inp.path}: {asmt.verdict.upper()} ({asmt.verdict_reason})")
        if asmt.criteria:
            rows = [["criterion", "measured", "limit", "margin", "result", "note"]]
            rows += [[c.name, _f(c.measured) + (f" {c.unit}" if c.measured is not None else ""),
                      c.limit_text,
                      _f(c.margin, signed=True) + (f" {c.unit}" if c.margin is not None else ""),
                      c.result, c.reason] for c in asmt.criteria]
            out.append(_grid(rows))
        if asmt.fit is not None:
            f = asmt.fit
            u = f.uncertainty
            out.append(f"  fit: steering {f.steer_deg:.2f} ± {u.get('steer_deg', 0):.2f} deg, "
                       f"q {f.element_exp:.2f} ± {u.get('element_exp', 0):.2f}, peak "
                       f"{f.gain_db:.2f} {'dBm' if inp.calibrated else 'dB'}, "
                       f"residual {f.residual_rms_db:.2f} dB rms")
        if asmt.columns is not None:
            amps = " ".join(f"{a:.2f}" for a in asmt.columns.amplitudes)
            out.append(f"  columns: {asmt.columns.summary()} (relative amplitudes {amps})")
        for note in asmt.notes:
            out.append(f"  note: {note}")
        if reference is not None and not (len(results) > 1):
            diffs = reference_differences(asmt.metrics, reference.metrics)
            out.append(f"  against {reference.source}: " + ", ".join(
                f"{k} {_f(v, signed=True)}" for k, v in diffs.items() if v is not None))
        out.append("")
    if len(results) > 1:
        head = ["metric"]
        for j, (inp, _, _) in enumerate(results):
            head.append(Path(inp.path).name)
            if j:
                head.append("- first")
        rows = [head]
        first = results[0][1].metrics
        for k in METRIC_KEYS:
            row = [LABELS[k].strip().format(p="dB")]
            for j, (_, a, _) in enumerate(results):
                v = getattr(a.metrics, k)
                row.append(_f(v))
                if j:
                    d = reference_differences(a.metrics, first)[k]
                    row.append(_f(d, signed=True))
            rows.append(row)
        vrow = ["verdict"]
        for j, (_, a, _) in enumerate(results):
            vrow.append(a.verdict)
            if j:
                vrow.append("")
        rows.append(vrow)
        out.append(_grid(rows))
    return "\n".join(out).rstrip("\n") + "\n"
