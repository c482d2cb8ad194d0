"""What a session file holds, for ``lobewatch info``: metadata, notes, duration,
rates, sizes and event counts, read through :class:`~replay.session.SessionReader`
(read-only; nothing is created beside the file)."""

from __future__ import annotations

import os
from typing import Any

from replay.convert import utc_iso
from replay.session import SessionReader


def file_bytes(path: str | os.PathLike[str]) -> dict[str, int]:
    """Bytes on disk of the session file and of its write-ahead log (if any)."""
    p = os.fspath(path)
    out = {"file": os.path.getsize(p)}
    try:
        out["wal"] = os.path.getsize(p + "-wal")
    except OSError:
        pass
    return out


def describe(path: str | os.PathLike[str]) -> dict[str, Any]:
    """A JSON-ready description of one session (units in the key names)."""
    path = os.fspath(path)
    with SessionReader(path) as r:
        meta = dict(r.meta)
        counts = r.counts()
        span = r.time_span()
        events = r.event_counts()
        encodings = r.encodings()
        calibrated = r.all_calibrated()
        version = r.format_version
        tick_span = r.tick_span()
    sizes = file_bytes(path)
    created = meta.get("created_t")
    total = sum(sizes.values())
    duration = span.duration_s if span is not None else 0.0
    samples = counts["samples"]
    info: dict[str, Any] = {
        "path": path,
        "format_version": version,
        "kind": meta.get("kind", "live" if "source" in meta else None),
        "notes": meta.get("notes"),
        "created_utc": utc_iso(created) if isinstance(created, (int, float)) else None,
        "source": meta.get("source"),
        "start_utc": utc_iso(span.t_start) if span else None,
        "end_utc": utc_iso(span.t_end) if span else None,
        "start_t": span.t_start if span else None,
        "end_t": span.t_end if span else None,
        "duration_s": duration,
        "samples": samples,
        "batches": counts["batches"],
        "readouts": counts["ticks"],
        "events": counts["events"],
        "events_by_kind": events,
        "sample_rate_sps": samples / duration if duration > 0 else None,
        "readout_interval_s": tick_span,
        "calibrated": calibrated,
        "size_bytes": total,
        "size_bytes_by_part": sizes,
        "bytes_per_sample": total / samples if samples else None,
        "mb_per_hour": (total / duration * 3600 / 1e6) if duration > 0 else None,
        "encodings": encodings,
    }
    settings = meta.get("settings")
    if isinstance(settings, dict):
        info["settings"] = settings
    return info


def _fmt_size(n: float) -> str:
    for unit in ("bytes", "kB", "MB", "GB"):
        if n < 1000 or unit == "GB":
            return f"{n:,.0f} {unit}" if unit == "bytes" else f"{n:,.1f} {unit}"
        n /= 1000
    return f"{n:.1f} GB"


def format_text(info: dict[str, Any]) -> str:
    """The description as aligned ``name  value`` lines for a terminal."""
    src = info.get("source") or {}
    src_text = None
    if isinstance(src, dict) and src:
        src_text = " ".join(f"{k}={v}" for k, v in src.items() if v not in (None, ""))
    model = ((info.get("settings") or {}).get("model") or {}) if isinstance(
        info.get("settings"), dict) else {}
    rows: list[tuple[str, Any]] = [
        ("file", info["path"]),
        ("format", f"version {info['format_version']}"),
        ("kind", info.get("kind") or "-"),
        ("notes", info.get("notes") or "-"),
        ("created", info.get("created_utc") or "-"),
        ("source", src_text or "-"),
        ("start", info.get("start_utc") or "-"),
        ("end", info.get("end_utc") or "-"),
        ("duration", f"{info['duration_s']:.3f} s"),
        ("samples", f"{info['samples']:,} in {info['batches']:,} batches"),
        ("sample rate", f"{info['sample_rate_sps']:,.1f} samples/s"
         if info.get("sample_rate_sps") else "-"),
        ("readouts", f"{info['readouts']:,}" + (
            f", every {info['readout_interval_s']:.3g} s"
            if info.get("readout_interval_s") else " (replay makes them up: imported)")),
        ("events", f"{info['events']:,}" + (
            " (" + ", ".join(f"{k} {v}" for k, v in info["events_by_kind"].items()) + ")"
            if info["events_by_kind"] else "")),
        ("power", "dBm (calibrated)" if info["calibrated"] else "dB (relative)"),
        ("array model", ", ".join(f"{k}={v}" for k, v in model.items()) if model else "-"),
        ("size", _fmt_size(info["size_bytes"]) + (
            f" (incl. {_fmt_size(info['size_bytes_by_part']['wal'])} unsaved -wal log)"
            if "wal" in info["size_bytes_by_part"] else "")),
        ("per sample", f"{info['bytes_per_sample']:.2f} bytes"
         if info.get("bytes_per_sample") else "-"),
        ("per hour", f"{info['mb_per_hour']:,.1f} MB at this rate"
         if info.get("mb_per_hour") else "-"),
    ]
    width = max(len(k) for k, _ in rows)
    return "\n".join(f"{k:<{width}}  {v}" for k, v in rows)
