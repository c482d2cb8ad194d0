"""Plots of the commissioning record (matplotlib, Agg backend: no display needed).

``polar.png`` and ``cartesian.png`` show the measured pattern, the model fit, the
envelope mask placed at the peak, the -3 dB line, the peak and the target, all in dB
relative to the measured peak; with a reference the cartesian plot gains a lower panel
of measured - reference.  ``timeline.png`` shows the peak direction of every sweep.
"""

from __future__ import annotations

import datetime as _dt
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from stream.beam import HALF_POWER_DB

if TYPE_CHECKING:
    from replay.record import RecordData
    from stream.spec import Assessment

#: Picture sizes, inches (x DPI = pixels: 900x560, 640x640, 900x320).
DPI: int = 100
CARTESIAN_IN: tuple[float, float] = (9.0, 5.6)
POLAR_IN: tuple[float, float] = (6.4, 6.4)
TIMELINE_IN: tuple[float, float] = (9.0, 3.2)
#: Lowest level drawn, dB relative to the peak.
PLOT_FLOOR_DB: float = -50.0


def _iso(t: float) -> str:
    return _dt.datetime.fromtimestamp(t, _dt.UTC).strftime("%Y-%m-%d %H:%M:%S UTC")


def _pyplot():
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _curves(asmt: Assessment, data: RecordData) -> dict[str, Any]:
    """Everything drawn, in dB relative to the measured peak."""
    a, p = asmt.angle_deg, asmt.power_db
    order = np.argsort(a)
    a, p = a[order], p[order]
    m = asmt.metrics
    peak_db = m.peak_power_db if m.peak_power_db is not None else float(np.max(p))
    out: dict[str, Any] = {"a": a, "rel": p - peak_db, "peak_db": peak_db}
    lo, hi = float(a.min()), float(a.max())
    grid = np.linspace(lo, hi, max(200, int((hi - lo) / 0.1) + 1))
    if asmt.fit is not None:
        out["fit"] = (grid, asmt.fit.power_db(grid) - peak_db)
    spec = data.spec
    if spec is not None and spec.mask is not None and m.peak_angle_deg is not None:
        mk = spec.mask
        off = np.arange(mk.offset_deg[0], mk.offset_deg[-1] + 1e-9, 0.5)
        out["mask"] = (off + m.peak_angle_deg, mk.limit_at(off))
    if data.reference is not None:
        ra, rp = data.reference.angle_deg, data.reference.power_db
        ro = np.argsort(ra)
        ra, rp = ra[ro], rp[ro]
        out["ref"] = (ra, rp - peak_db)
        inside = (a >= ra[0]) & (a <= ra[-1])
        out["diff"] = (a[inside], p[inside] - np.interp(a[inside], ra, rp))
    return out


def plot_cartesian(asmt: Assessment, data: RecordData, path: str | os.PathLike[str]) -> Path:
    """Level (dB re peak) against angle: measured, model fit, mask, -3 dB, peak, target;
    with a reference, the reference and the difference measured - reference below."""
    plt = _pyplot()
    c = _curves(asmt, data)
    has_ref = "diff" in c
    if has_ref:
        fig, (ax, ax2) = plt.subplots(2, 1, figsize=CARTESIAN_IN, dpi=DPI, sharex=True,
                                      gridspec_kw={"height_ratios": [3, 1]})
    else:
        fig, ax = plt.subplots(figsize=CARTESIAN_IN, dpi=DPI)
    try:
        ax.plot(c["a"], np.maximum(c["rel"], PLOT_FLOOR_DB), "o-", color="#1f3b73", ms=3,
                lw=1.4, label="measured")
        if "fit" in c:
            g, f = c["fit"]
            ax.plot(g, np.maximum(f, PLOT_FLOOR_DB), "--", color="#d2691e", lw=1.3,
                    label="model fit")
        if "ref" in c:
            ra, rr = c["ref"]
            ax.plot(ra, np.maximum(rr, PLOT_FLOOR_DB), "-", color="#888888", lw=1.0,
                    label="reference")
        if "mask" in c:
            mx, my = c["mask"]
            ax.plot(mx, my, "-", color="#c0392b", lw=1.8, label="envelope mask")
        ax.axhline(HALF_POWER_DB, color="#555555", ls=":", lw=1.0, label="-3 dB")
        _marks(ax, asmt, data, polar=False)
        ax.set_ylim(PLOT_FLOOR_DB, 5.0)
        ax.set_xlim(float(c["a"].min()), float(c["a"].max()))
        ax.set_ylabel("level relative to peak (dB)")
        ax.grid(True, alpha=0.3)
        ax.legend(loc="lower center", fontsize=8, ncol=4, framealpha=0.9)
        ax.set_title(_title(asmt, data), fontsize=10)
        last = ax
        if has_ref:
            da, dd = c["diff"]
            ax2.plot(da, dd, ".-", color="#444444", lw=1.0, ms=3)
            ax2.axhline(0.0, color="#999999", lw=0.8)
            ax2.set_ylabel("meas. - ref. (dB)")
            ax2.grid(True, alpha=0.3)
            last = ax2
        last.set_xlabel("angle from broadside (deg)")
        fig.tight_layout()
        fig.savefig(path, dpi=DPI)
    finally:
        plt.close(fig)
    return Path(path)


def plot_polar(asmt: Assessment, data: RecordData, path: str | os.PathLike[str]) -> Path:
    """The same curves on a polar grid (0 deg at the top, angles clockwise)."""
    plt = _pyplot()
    c = _curves(asmt, data)
    fig = plt.figure(figsize=POLAR_IN, dpi=DPI)
    try:
        ax = fig.add_subplot(projection="polar")
        ax.set_theta_zero_location("N")
        ax.set_theta_direction(-1)

        def draw(x: np.ndarray, y: np.ndarray, *args: Any, **kw: Any) -> None:
            ax.plot(np.deg2rad(x), np.maximum(y, PLOT_FLOOR_DB), *args, **kw)

        draw(c["a"], c["rel"], "-", color="#1f3b73", lw=1.5, label="measured")
        if "fit" in c:
            draw(*c["fit"], "--", color="#d2691e", lw=1.2, label="model fit")
        if "ref" in c:
            draw(*c["ref"], "-", color="#888888", lw=1.0, label="reference")
        if "mask" in c:
            draw(*c["mask"], "-", color="#c0392b", lw=1.6, label="envelope mask")
        ring = np.linspace(-180.0, 180.0, 361)
        draw(ring, np.full(ring.shape, HALF_POWER_DB), ":", color="#555555", lw=1.0,
             label="-3 dB")
        _marks(ax, asmt, data, polar=True)
        ticks = np.arange(-150, 181, 30)
        ax.set_thetagrids(np.mod(ticks, 360), [f"{t:+d}°" if t else "0°" for t in ticks])
        ax.set_rlim(PLOT_FLOOR_DB, 3.0)
        ax.set_rticks([-40, -30, -20, -10, 0])
        ax.set_rlabel_position(135)
        ax.tick_params(labelsize=8)
        ax.set_title(_title(asmt, data), fontsize=10, pad=14)
        ax.legend(loc="lower left", bbox_to_anchor=(-0.12, -0.12), fontsize=8)
        fig.savefig(path, dpi=DPI)
    finally:
        plt.close(fig)
    return Path(path)


def plot_timeline(data: RecordData, path: str | os.PathLike[str]) -> Path:
    """Peak direction of every sweep against time (session inputs)."""
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=TIMELINE_IN, dpi=DPI)
    try:
        t = data.timeline_t
        t0 = float(t[0]) if t.size else 0.0
        ax.plot((t - t0) / 60.0, data.timeline_peak_deg, ".", ms=3, color="#1f3b73")
        spec = data.spec
        if spec is not None and spec.target_deg is not None:
            ax.axhline(spec.target_deg, color="#2e8b57", lw=1.0)
            if spec.tolerance_deg is not None:
                ax.axhspan(spec.target_deg - spec.tolerance_deg,
                           spec.target_deg + spec.tolerance_deg, color="#2e8b57", alpha=0.12)
        ax.set_xlabel(f"minutes after {_iso(t0)}")
        ax.set_ylabel("peak direction (deg)")
        ax.grid(True, alpha=0.3)
        fig.tight_layout()
        fig.savefig(path, dpi=DPI)
    finally:
        plt.close(fig)
    return Path(path)


def _title(asmt: Assessment, data: RecordData) -> str:
    site = data.meta.get("site") or ""
    arr = data.meta.get("array") or ""
    head = " / ".join(x for x in (site, arr) if x) or "beam pattern"
    return f"{head} — verdict: {asmt.verdict.upper()}"


def _marks(ax: Any, asmt: Assessment, data: RecordData, polar: bool) -> None:
    m = asmt.metrics
    conv = np.deg2rad if polar else (lambda v: v)
    if m.peak_angle_deg is not None:
        ax.plot([conv(m.peak_angle_deg)], [0.0], "v", color="#1f3b73", ms=9,
                label=f"peak {m.peak_angle_deg:.1f} deg")
    spec = data.spec
    if spec is not None and spec.target_deg is not None:
        tgt = spec.target_deg
        if polar:
            ax.plot([conv(tgt), conv(tgt)], [PLOT_FLOOR_DB, 3.0], "-", color="#2e8b57", lw=1.2,
                    label=f"target {tgt:g} deg")
        else:
            ax.axvline(tgt, color="#2e8b57", lw=1.2, label=f"target {tgt:g} deg")
            if spec.tolerance_deg is not None:
                ax.axvspan(tgt - spec.tolerance_deg, tgt + spec.tolerance_deg,
                           color="#2e8b57", alpha=0.12)
