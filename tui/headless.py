"""Headless monitor: the pipeline's readout as JSON Lines on stdout.

One JSON object per line, each with a ``type``:

* ``metrics`` -- every tick (:meth:`stream.tick.Tick.metrics_record`): the metric values,
  ``uncertainty`` (1 sigma), ``notes`` (the reason beside every ``null``), the counters,
  ``state``, ``stale`` (true while no samples arrive: the values are the last ones
  measured, ``age_s`` old), ``provisional`` (true until one complete sweep) and, once
  something was refused, ``reject_examples`` (the start of the first refused message
  per reason, so a publisher's author sees what to fix);
* ``alarm``   -- each alarm change: ``t``, ``rule``, ``state``, ``severity``, ``value``,
  ``threshold`` (+ ``watch_deg`` for the watch rule) and the rest of the event data;
* ``status``  -- source state changes (``receiving``, ``stale``, ``resumed``,
  ``restarted``, ``ended``);
* ``event``   -- anything else (reference captured, marker, target, reset);
* ``summary`` -- one last line when the run ends (end of input, SIGINT or SIGTERM).

Live and replay print through the same :func:`format_record`, so a replay of a
recording prints what the live run printed.  Exit status: 0, or 3 when ``--fail-on``
was given and an alarm of that severity or worse was raised (the run stops there).
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import math
import signal
import sys
from typing import Any, TextIO

import numpy as np

from stream.tick import Event, Tick

#: Exit status when ``--fail-on`` fired.
EXIT_ALARM: int = 3
#: Decimal places kept for floats in the output.
DECIMALS: int = 4
#: X.733 perceived severities that can trigger ``--fail-on``, worst first.
SEVERITY_ORDER: tuple[str, ...] = ("critical", "major", "minor", "warning")


def _clean(v: Any) -> Any:
    if isinstance(v, bool) or v is None or isinstance(v, str | int):
        return v
    if isinstance(v, float | np.floating):
        f = float(v)
        return round(f, DECIMALS) if math.isfinite(f) else None
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.bool_):
        return bool(v)
    if isinstance(v, dict):
        return {str(k): _clean(x) for k, x in v.items()}
    if isinstance(v, list | tuple):
        return [_clean(x) for x in v]
    if isinstance(v, np.ndarray):
        return [_clean(x) for x in v.tolist()]
    return str(v)


def format_record(rec: dict[str, Any]) -> str:
    """One JSON line: floats rounded to :data:`DECIMALS`, NaN/inf as ``null``, numpy
    types as plain JSON; keys in insertion order."""
    return json.dumps(_clean(rec), separators=(",", ":"), allow_nan=False)


def event_record(event: Event) -> dict[str, Any]:
    """The JSON object printed for an event."""
    if event.kind in ("alarm", "status"):
        rec: dict[str, Any] = {"type": event.kind, "t": event.t}
    else:
        rec = {"type": "event", "kind": event.kind, "t": event.t}
    for k, v in event.data.items():
        rec.setdefault(k, v)
    return rec


def _severity_rank(sev: str) -> int:
    try:
        return len(SEVERITY_ORDER) - SEVERITY_ORDER.index(sev)
    except ValueError:
        return 0


def fail_on_hit(event: Event, floor: str | None) -> bool:
    """True when ``event`` raises an alarm of severity ``floor`` or worse."""
    if floor is None or event.kind != "alarm":
        return False
    try:
        from tui.notify import fail_on_hit as hit
    except ModuleNotFoundError:  # pragma: no cover - notification helpers absent
        d = event.data
        if d.get("transition") not in (None, "raise", "escalate"):
            return False
        return _severity_rank(str(d.get("severity"))) >= _severity_rank(floor) > 0
    return bool(hit(event, floor))


class HeadlessPrinter:
    """Monitor sinks that print JSON Lines and keep what the summary needs."""

    def __init__(self, out: TextIO, fail_on: str | None = None) -> None:
        if fail_on is not None and fail_on not in SEVERITY_ORDER:
            raise ValueError(f"fail_on must be one of {', '.join(SEVERITY_ORDER)}")
        self.out = out
        self.fail_on = fail_on
        self.failed = False
        self.broken = False
        self.first_t: float | None = None
        self.last_tick: Tick | None = None
        self.alarms: dict[str, int] = {}
        self.worst: str | None = None
        self.on_fail: Any = None

    def write(self, rec: dict[str, Any]) -> None:
        if self.broken:
            return
        try:
            self.out.write(format_record(rec) + "\n")
            self.out.flush()
        except (BrokenPipeError, ValueError):  # reader went away / closed stream
            self.broken = True
            if self.on_fail is not None:
                self.on_fail()

    def on_tick(self, tick: Tick) -> None:
        if self.first_t is None:
            self.first_t = tick.t
        self.last_tick = tick
        rec = tick.metrics_record()
        expected = getattr(tick, "expected_hpbw_deg", None)
        if expected is not None:  # --elements N: the model's value, as the screen shows it
            rec["expected_hpbw_deg"] = expected
        self.write(rec)

    def on_event(self, event: Event) -> None:
        self.write(event_record(event))
        if event.kind == "alarm":
            sev = str(event.data.get("severity", ""))
            if _severity_rank(sev) > 0 and event.data.get("transition") in (None, "raise",
                                                                            "escalate"):
                self.alarms[sev] = self.alarms.get(sev, 0) + 1
                if self.worst is None or _severity_rank(sev) > _severity_rank(self.worst):
                    self.worst = sev
            if fail_on_hit(event, self.fail_on):
                self.failed = True
                if self.on_fail is not None:
                    self.on_fail()

    def summary(self, reason: str) -> dict[str, Any]:
        tick = self.last_tick
        rec: dict[str, Any] = {"type": "summary", "t": tick.t if tick else None,
                               "reason": reason,
                               "duration_s": (tick.t - self.first_t)
                               if tick and self.first_t is not None else 0.0}
        if tick is not None:
            src = tick.source
            rec.update({"samples": tick.samples, "sweeps": tick.sweeps,
                        "messages": src.messages, "rejected": dict(src.rejected),
                        "lost": src.lost, "restarts": src.restarts,
                        "lost_after_restart": src.lost_after_restart,
                        "shed": src.shed, "senders": src.senders,
                        "reject_examples": dict(src.reject_examples),
                        "state": src.state, "metrics": tick.metrics.to_dict(),
                        "peak_angle_spread_deg": tick.peak_angle_spread_deg})
        rec["alarms_raised"] = dict(self.alarms)
        rec["worst_severity"] = self.worst
        rec["exit"] = EXIT_ALARM if self.failed else 0
        return rec


def run_headless(driver: Any, monitor: Any, out: TextIO | None = None,
                 fail_on: str | None = None) -> int:
    """Run ``driver.run(stop)`` (a live driver or a replay player) printing JSON Lines
    until it ends, SIGINT/SIGTERM arrive or ``fail_on`` fires.  Returns the exit status."""
    out = out if out is not None else sys.stdout
    printer = HeadlessPrinter(out, fail_on)
    monitor.tick_sinks.append(printer.on_tick)
    monitor.event_sinks.append(printer.on_event)
    reason = "end"

    async def main() -> None:
        nonlocal reason
        stop = asyncio.Event()
        loop = asyncio.get_running_loop()

        def on_signal(name: str) -> None:
            nonlocal reason
            reason = name
            stop.set()

        def on_fail() -> None:
            nonlocal reason
            reason = "fail_on" if printer.failed else "output_closed"
            stop.set()

        printer.on_fail = on_fail
        installed = []
        for sig in (signal.SIGINT, signal.SIGTERM):
            with contextlib.suppress(NotImplementedError, RuntimeError, ValueError):
                loop.add_signal_handler(sig, on_signal, sig.name)
                installed.append(sig)
        try:
            await driver.run(stop)
        finally:
            for sig in installed:
                loop.remove_signal_handler(sig)

    try:
        asyncio.run(main())
    except KeyboardInterrupt:
        reason = "SIGINT"
    finally:
        with contextlib.suppress(ValueError):
            monitor.tick_sinks.remove(printer.on_tick)
        with contextlib.suppress(ValueError):
            monitor.event_sinks.remove(printer.on_event)
    printer.write(printer.summary(reason))
    return EXIT_ALARM if printer.failed else 0
