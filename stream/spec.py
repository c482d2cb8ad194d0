"""Specification and verdict: each criterion's measured value, limit, margin and result.

A :class:`Spec` holds the criteria an installer signs off against:

=================  =============================================  ======================
criterion          passes when                                     margin (>= 0 passes)
=================  =============================================  ======================
pointing           |peak - target| <= tolerance                    tolerance - |error|
hpbw               |HPBW - design| <= tolerance (design: a value   tolerance - |error|
                   or the model's HPBW over the same arc)
sll                side lobe level <= max (e.g. -10 dB)           max - measured
front_to_back      front-to-back >= min                            measured - min
mask               no sample above the envelope mask               worst mask margin
=================  =============================================  ======================

A criterion whose value the data cannot give is ``undetermined`` with the reason
(the metric's own reason from :func:`stream.pattern.measure`).  The verdict is
``fail`` if any criterion fails, else ``incomplete`` if any is undetermined or none
was given, else ``pass``.  :func:`assess` runs the whole chain on one pattern:
metrics, model fit, column diagnosis, mask, criteria.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from stream.array_model import ArrayModel
from stream.beam import BeamMetrics
from stream.diagnosis import ColumnDiagnosis, diagnose
from stream.errors import UserError
from stream.fit import FitError, ModelFit, fit_model
from stream.mask import Mask, MaskResult, check_mask
from stream.pattern import measure, sweep_arc

#: Default HPBW tolerance as a fraction of the design value.
HPBW_TOLERANCE_FRACTION: float = 0.10
#: Grid step on which the model's own HPBW is measured, deg.
MODEL_GRID_DEG: float = 0.05

RESULTS: tuple[str, ...] = ("pass", "fail", "undetermined")
VERDICTS: tuple[str, ...] = ("pass", "fail", "incomplete")


@dataclass(frozen=True, slots=True)
class Spec:
    """The criteria; ``None`` = not part of the specification."""

    target_deg: float | None = None
    tolerance_deg: float | None = None
    hpbw_deg: float | str | None = None          # a value, or "model"
    hpbw_tolerance_deg: float | None = None
    max_sll_db: float | None = None
    min_front_to_back_db: float | None = None
    mask: Mask | None = None
    source: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {"target_deg": self.target_deg, "tolerance_deg": self.tolerance_deg,
                "hpbw_deg": self.hpbw_deg, "hpbw_tolerance_deg": self.hpbw_tolerance_deg,
                "max_sll_db": self.max_sll_db,
                "min_front_to_back_db": self.min_front_to_back_db,
                "mask": self.mask.source if self.mask is not None else None,
                "source": self.source}

    def merged(self, **overrides: Any) -> Spec:
        """This spec with the non-None ``overrides`` (command-line options win)."""
        return replace(self, **{k: v for k, v in overrides.items() if v is not None})


@dataclass(frozen=True, slots=True)
class Criterion:
    """One row of the verdict table (angles deg, levels dB)."""

    name: str
    measured: float | None
    limit: float | None
    margin: float | None
    result: str
    unit: str = ""
    target: float | None = None
    limit_text: str = ""
    reason: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "measured": _num(self.measured), "limit": _num(self.limit),
                "margin": _num(self.margin), "result": self.result, "unit": self.unit,
                "target": _num(self.target), "limit_text": self.limit_text,
                "reason": self.reason}


@dataclass(frozen=True, slots=True)
class Assessment:
    """Everything the commissioning record reports about one pattern."""

    angle_deg: np.ndarray
    power_db: np.ndarray
    metrics: BeamMetrics
    criteria: list[Criterion]
    verdict: str
    verdict_reason: str
    model: ArrayModel | None = None
    fit: ModelFit | None = None
    columns: ColumnDiagnosis | None = None
    mask_result: MaskResult | None = None
    notes: list[str] = field(default_factory=list)


def spec_from_dict(d: dict[str, Any], source: str = "spec",
                   mask: Mask | None = None) -> Spec:
    """Spec from a parsed TOML table (see docs/commissioning.md); the mask file named in
    ``[mask] file`` is read by the caller and passed as ``mask``."""
    known = {"pointing", "beamwidth", "side_lobes", "front_to_back", "mask", "record"}
    for key in d:
        if key not in known:
            raise UserError(f"{source}: unknown table [{key}]; use "
                            f"{', '.join(sorted(known))}")

    def num(table: str, key: str, allow_model: bool = False) -> float | str | None:
        v = d.get(table, {}).get(key)
        if v is None:
            return None
        if allow_model and v == "model":
            return "model"
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise UserError(f"{source}: [{table}] {key} must be a number"
                            + (" or \"model\"" if allow_model else "") + f", got {v!r}")
        return float(v)

    return Spec(target_deg=num("pointing", "target_deg"),
                tolerance_deg=num("pointing", "tolerance_deg"),
                hpbw_deg=num("beamwidth", "hpbw_deg", allow_model=True),
                hpbw_tolerance_deg=num("beamwidth", "tolerance_deg"),
                max_sll_db=num("side_lobes", "max_db"),
                min_front_to_back_db=num("front_to_back", "min_db"),
                mask=mask, source=source)


def model_hpbw_deg(model: ArrayModel, angle_deg: np.ndarray) -> BeamMetrics:
    """The nominal model measured over the same arc as the data, by the same code."""
    start, stop, _ = sweep_arc(angle_deg)
    n = max(3, int(round((stop - start) / MODEL_GRID_DEG)) + 1)
    grid = np.linspace(start, stop, n, endpoint=stop - start < 360.0)
    return measure(grid, model.power_db(grid))


def evaluate(spec: Spec, metrics: BeamMetrics, angle_deg: np.ndarray, power_db: np.ndarray,
             model: ArrayModel | None = None) -> tuple[list[Criterion], MaskResult | None]:
    """The criteria rows for one measured pattern."""
    rows: list[Criterion] = []
    why = metrics.reasons
    if spec.target_deg is not None:
        tol = spec.tolerance_deg
        if tol is None:
            raise UserError("a pointing target needs a tolerance: give --tolerance-deg or "
                            "[pointing] tolerance_deg")
        pk = metrics.peak_angle_deg
        text = f"{spec.target_deg:g} ± {tol:g} deg"
        if pk is None:
            rows.append(Criterion("pointing", None, tol, None, "undetermined", "deg",
                                  spec.target_deg, text, why.get("peak_angle_deg", "")))
        else:
            err = (pk - spec.target_deg + 180.0) % 360.0 - 180.0
            margin = tol - abs(err)
            rows.append(Criterion("pointing", pk, tol, margin, _res(margin), "deg",
                                  spec.target_deg, text))
    if spec.hpbw_deg is not None:
        design = spec.hpbw_deg
        reason = ""
        if design == "model":
            if model is None:
                raise UserError("an HPBW of \"model\" needs the array model: give --elements")
            design_v = model_hpbw_deg(model, angle_deg).hpbw_deg
            if design_v is None:
                reason = "the model's own HPBW cannot be measured over this sweep"
        else:
            design_v = float(design)
        tol = spec.hpbw_tolerance_deg
        if tol is None and design_v is not None:
            tol = HPBW_TOLERANCE_FRACTION * design_v
        hp = metrics.hpbw_deg
        text = (f"{design_v:.2f} ± {tol:.2f} deg" if design_v is not None and tol is not None
                else "model HPBW")
        if design == "model":
            text += " (model)"
        if hp is None or design_v is None or tol is None:
            rows.append(Criterion("hpbw", hp, tol, None, "undetermined", "deg", design_v, text,
                                  reason or why.get("hpbw_deg", "")))
        else:
            margin = tol - abs(hp - design_v)
            rows.append(Criterion("hpbw", hp, tol, margin, _res(margin), "deg", design_v,
                                  text))
    if spec.max_sll_db is not None:
        lim = -abs(spec.max_sll_db)
        v = metrics.sll_db
        text = f"<= {lim:g} dB"
        if v is None:
            rows.append(Criterion("sll", None, lim, None, "undetermined", "dB", None, text,
                                  why.get("sll_db", "")))
        else:
            rows.append(Criterion("sll", v, lim, lim - v, _res(lim - v), "dB", None, text))
    if spec.min_front_to_back_db is not None:
        lim = spec.min_front_to_back_db
        v = metrics.front_to_back_db
        text = f">= {lim:g} dB"
        if v is None:
            rows.append(Criterion("front_to_back", None, lim, None, "undetermined", "dB", None,
                                  text, why.get("front_to_back_db", "")))
        else:
            rows.append(Criterion("front_to_back", v, lim, v - lim, _res(v - lim), "dB", None,
                                  text))
    mres: MaskResult | None = None
    if spec.mask is not None:
        text = f"envelope {spec.mask.source}"
        if metrics.peak_angle_deg is None or metrics.peak_power_db is None:
            rows.append(Criterion("mask", None, 0.0, None, "undetermined", "dB", None, text,
                                  why.get("peak_angle_deg", "")))
        else:
            mres = check_mask(angle_deg, power_db, spec.mask, metrics.peak_angle_deg,
                              metrics.peak_power_db)
            if mres.checked == 0:
                rows.append(Criterion("mask", None, 0.0, None, "undetermined", "dB", None,
                                      text, "no sample lies within the mask's offsets"))
            else:
                where = f"worst at {mres.worst_angle_deg:.1f} deg"
                if mres.violations:
                    where += "; violated " + ", ".join(f"{a:.1f}..{b:.1f} deg"
                                                       for a, b in mres.violations)
                rows.append(Criterion("mask", mres.worst_margin_db, 0.0, mres.worst_margin_db,
                                      "pass" if mres.passed else "fail", "dB", None, text,
                                      where))
    return rows, mres


def verdict(criteria: list[Criterion]) -> tuple[str, str]:
    """Overall verdict and a sentence saying why."""
    if not criteria:
        return "incomplete", "no criterion was given (target, HPBW, side lobes, " \
                             "front-to-back or mask)"
    failed = [c.name for c in criteria if c.result == "fail"]
    if failed:
        return "fail", "failed: " + ", ".join(failed)
    open_ = [c.name for c in criteria if c.result == "undetermined"]
    if open_:
        return "incomplete", "undetermined: " + ", ".join(open_)
    return "pass", f"all {len(criteria)} criteria pass"


def assess(angle_deg: np.ndarray, power_db: np.ndarray, spec: Spec,
           model: ArrayModel | None = None, *, fit_spacing: bool = False) -> Assessment:
    """Metrics, model fit and column diagnosis (with a model), mask and verdict."""
    a = np.asarray(angle_deg, dtype=np.float64).reshape(-1)
    p = np.asarray(power_db, dtype=np.float64).reshape(-1)
    metrics = measure(a, p)
    notes: list[str] = []
    fit = cols = None
    if model is not None:
        try:
            fit = fit_model(a, p, model, fit_spacing=fit_spacing)
            cols = diagnose(a, p, model, fit)
        except FitError as exc:
            notes.append(f"model fit: {exc}")
    criteria, mres = evaluate(spec, metrics, a, p, model)
    v, why = verdict(criteria)
    return Assessment(a, p, metrics, criteria, v, why, model, fit, cols, mres, notes)


def _res(margin: float) -> str:
    return "pass" if margin >= 0 else "fail"


def _num(v: float | None) -> float | None:
    if v is None or not math.isfinite(v):
        return None
    return round(float(v), 4)
