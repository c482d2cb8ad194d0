"""``lobewatch report FILE [FILE ...]``: the beam readout of measured sweeps.

Each file is read whole (CSV, JSON Lines or a session), measured with
:func:`stream.pattern.measure`, and printed as a table (several files side by side)
or as one JSON object per file.  With ``--elements`` the textbook array model is
measured too: its pattern is evaluated on a 0.05-degree grid over the same arc the
file covers and passed through the same ``measure``, so a sweep of +/-60 deg is
compared with what the model shows inside +/-60 deg (a side lobe outside the sweep
is not counted in either).
"""

from __future__ import annotations

import argparse
import json
import sys

import numpy as np

from replay.readers import read_sweep
from replay.report import ReportEntry, format_table, json_record
from stream.array_model import TAPER_NAMES, ArrayModel
from stream.beam import BeamMetrics
from stream.errors import InputFileError
from stream.pattern import measure, sweep_arc
from tui.options import taper_help

#: Step of the grid the model pattern is measured on, degrees.
MODEL_GRID_DEG: float = 0.05

DESCRIPTION = """\
Measure one or more recorded sweeps and print the beam readout: peak direction and
power, half-power (-3.01 dB) beamwidth and its edges, -10 dB beamwidth, first-null
beamwidth, side lobe level and direction, front-to-back ratio.  Several files are
shown side by side (e.g. the same mount swept with 1, 2 and 4 columns active).

Files: CSV (.csv .tsv .txt) with a header naming angle_deg and power_dbm (or power_db
for relative dB), optional t; '#' starts a comment line; comma, semicolon or tab
separated.  JSON Lines (.jsonl .ndjson) of sample messages.  Session files (.lwsession).

With --elements the textbook array model is measured too: its pattern is computed on
a 0.05-degree grid over the same angles the file covers and measured by the same code,
so a +/-60 deg sweep is compared with what the model shows inside +/-60 deg.  Model
levels are relative to the model's own peak (0 dB).

A value the data cannot determine (the pattern never falls 3 dB inside the sweep, a
single lobe, the back direction not swept) prints as n/a with a note saying why
(null in --json).
"""

EPILOG = """\
examples:
  lobewatch report examples/sweep_4col_5deg.csv
  lobewatch report examples/sweep_1col_5deg.csv examples/sweep_2col_5deg.csv \\
      examples/sweep_4col_5deg.csv
  lobewatch report examples/sweep_4col_5deg.csv --elements 4 --element-exp 1.2
  lobewatch report sweep.csv --json

Safety: stay out of the main beam of energised antennas while sweeping and follow
your local RF exposure limits; work at height only as your training and local rules
allow; transmit only on spectrum you are licensed for.  Local codes and licensed
practice come first.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "report", help="beam readout of measured sweep files (CSV, JSON Lines, sessions)",
        description=DESCRIPTION, epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("files", nargs="+", metavar="FILE",
                   help="sweep file(s) to measure; several are shown side by side")
    m = p.add_argument_group(
        "array model (optional; adds the model's expected values and measured - model)")
    m.add_argument("--elements", type=int, metavar="N",
                   help="number of array elements (columns) of the model, N >= 1; "
                        "giving it turns the model on")
    m.add_argument("--spacing-wl", type=float, metavar="D",
                   help="element spacing in wavelengths (default 0.5)")
    m.add_argument("--element-exp", type=float, metavar="Q",
                   help="element power pattern cos^Q(theta), theta from broadside in "
                        "degrees; 0 = isotropic (default 0).  For a full-turn sweep give "
                        "Q > 0: isotropic elements radiate as much to the back")
    m.add_argument("--steer-deg", type=float, metavar="A",
                   help="steering angle of the main beam, degrees from broadside "
                        "(default 0)")
    m.add_argument("--taper", choices=TAPER_NAMES, metavar="NAME",
                   help=taper_help("none"))
    p.add_argument("--json", action="store_true",
                   help="print one JSON object per file, one per line, instead of the "
                        "table (angles in deg, levels in dB/dBm; undetermined = null)")
    p.set_defaults(func=run)


def _model_from_args(args: argparse.Namespace) -> ArrayModel | None:
    from tui.cli import UsageError  # the CLI module is loaded whenever run() is called

    given = [name for name in ("spacing_wl", "element_exp", "steer_deg", "taper")
             if getattr(args, name) is not None]
    if args.elements is None:
        if given:
            flags = ", ".join("--" + g.replace("_", "-") for g in given)
            raise UsageError(f"{flags} describe the array model and need --elements N")
        return None
    spacing = 0.5 if args.spacing_wl is None else args.spacing_wl
    exp = 0.0 if args.element_exp is None else args.element_exp
    steer = 0.0 if args.steer_deg is None else args.steer_deg
    if args.elements < 1:
        raise UsageError(f"--elements must be at least 1 (got {args.elements})")
    if not (spacing > 0 and np.isfinite(spacing)):
        raise UsageError(f"--spacing-wl must be a positive number of wavelengths "
                         f"(got {spacing:g})")
    if not (exp >= 0 and np.isfinite(exp)):
        raise UsageError(f"--element-exp must be 0 or more (got {exp:g})")
    if not (-90.0 < steer < 90.0):
        raise UsageError(f"--steer-deg must lie between -90 and 90 degrees (got {steer:g})")
    return ArrayModel(args.elements, spacing, exp, steer, args.taper or "none")


def expected_metrics(model: ArrayModel, angle_deg: np.ndarray) -> BeamMetrics:
    """The model measured the way the data are: same arc, fine grid, same code."""
    start, stop, _ = sweep_arc(angle_deg)
    n = max(3, int(round((stop - start) / MODEL_GRID_DEG)) + 1)
    grid = np.linspace(start, stop, n, endpoint=stop - start < 360.0)
    return measure(grid, model.power_db(grid))


def build_entry(path: str, model: ArrayModel | None) -> ReportEntry:
    """Read and measure one file (raises UserError for a file that is not a sweep)."""
    batch = read_sweep(path)
    a = batch.angle_deg
    p = batch.power_db
    distinct = np.unique(a % 360.0).size
    if distinct < 3:
        raise InputFileError(path, f"only {distinct} distinct angle(s); a beam needs "
                             "samples at 3 or more angles across it")
    if float(np.ptp(p)) == 0.0:
        raise InputFileError(path, f"all {a.size} samples have the same power "
                             f"({p[0]:g} dB): there is no beam to measure; check the "
                             "power column and that the receiver saw the signal")
    metrics = measure(a, p)
    expected = expected_metrics(model, a) if model is not None else None
    return ReportEntry(source=path, metrics=metrics, samples=len(batch),
                       angle_min_deg=float(a.min()), angle_max_deg=float(a.max()),
                       calibrated=batch.calibrated, model=model, expected=expected)


def run(args: argparse.Namespace) -> int:
    model = _model_from_args(args)
    entries = [build_entry(path, model) for path in args.files]
    out = sys.stdout
    if args.json:
        for e in entries:
            out.write(json.dumps(json_record(e), allow_nan=False) + "\n")
    else:
        out.write(format_table(entries))
    out.flush()
    return 0

