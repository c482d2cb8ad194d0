"""The alarm list: active alarms first, each with severity, since when, and the
measured value against its threshold.

Severity words are the ITU-T X.733 perceived-severity values, shortened but spelt
out (so the list reads without colour); an acknowledged alarm carries a tick mark.
"""

from __future__ import annotations

import math
import time
from collections.abc import Sequence
from typing import Any

from rich.text import Text
from textual.widgets import RichLog, Static

#: Short, fixed-width severity tags, most severe first (ITU-T X.733 values).
SEVERITY_TAGS: dict[str, str] = {
    "critical": "CRIT", "major": "MAJR", "minor": "MINR", "warning": "WARN",
    "indeterminate": "INDT", "cleared": "CLRD",
}
SEVERITY_ORDER: tuple[str, ...] = tuple(SEVERITY_TAGS)

#: Units of each rule's value, for display (when the status does not say).
RULE_UNITS: dict[str, str] = {
    "drift": "°", "broadening": "°", "gain_loss": " dB", "sidelobe_rise": " dB",
    "stale": " s", "input": "/s", "watch": " dB",
}
#: Display forms of the units an alarm status reports.
UNIT_TEXT: dict[str, str] = {"deg": "°", "dB": " dB", "db": " dB", "s": " s", "/s": "/s",
                             "%": "%", "": ""}
#: Short rule names for narrow screens.
SHORT_RULES: dict[str, str] = {
    "broadening": "broad", "gain_loss": "gain", "sidelobe_rise": "sll", "watch": "watch",
    "drift": "drift", "stale": "stale", "input": "input",
}


def _get(obj: Any, *names: str, default: Any = None) -> Any:
    """First attribute (or mapping key) of ``names`` present on ``obj``."""
    for n in names:
        if isinstance(obj, dict) and n in obj:
            return obj[n]
        if hasattr(obj, n):
            return getattr(obj, n)
    return default


def _num(v: Any, unit: str) -> str:
    if isinstance(v, (int, float)) and math.isfinite(float(v)):
        return f"{float(v):.1f}{unit}"
    return "—"


def clock_text(t: Any) -> str:
    """The one time format of the alarm rows: local HH:MM:SS."""
    if not isinstance(t, (int, float)) or not math.isfinite(float(t)) or not t:
        return "--:--:--"
    return time.strftime("%H:%M:%S", time.localtime(float(t)))


def value_vs_limit(value: Any, limit: Any, unit: str) -> str:
    """``value vs limit unit``: the reading, its threshold, the unit once."""
    return f"{_num(value, '')} vs {_num(limit, '')}{unit}"


def alarm_variants(status: Any) -> tuple[str, list[str], bool]:
    """(severity, texts from longest to shortest, acknowledged) of an alarm status."""
    severity = str(_get(status, "severity", default="indeterminate")).lower()
    rule = str(_get(status, "rule", default="?"))
    state = str(_get(status, "state", default=""))
    since = _get(status, "since_t", "since", "raised_t", "t")
    ack = bool(_get(status, "acknowledged", "acked", default=False))
    unit_raw = _get(status, "unit")
    unit = UNIT_TEXT.get(str(unit_raw), f" {unit_raw}") if unit_raw is not None \
        else RULE_UNITS.get(rule, "")
    hms = clock_text(since)
    watch = _get(status, "watch_deg")
    where = f"@{float(watch):+.0f}°" if watch is not None else ""
    name, short = rule + where, SHORT_RULES.get(rule, rule) + where
    note = f" ({state})" if state and state not in ("raised", "active") else ""
    reading = value_vs_limit(_get(status, "value"), _get(status, "threshold"), unit)
    texts = [
        f"{hms} {name} {reading}{note}",
        f"{hms} {short} {reading}{note}",
        f"{short} {reading}{note}",
        f"{short} {reading}",
    ]
    return severity, texts, ack


def format_alarm(status: Any, width: int = 1000) -> tuple[str, str, bool]:
    """(severity, the longest text fitting ``width`` after the tag, acknowledged)."""
    severity, texts, ack = alarm_variants(status)
    room = width - 7  # "CRIT ! "
    text = next((t for t in texts if len(t) <= room), texts[-1])
    return severity, text, ack


class AlarmList(Static):
    """Rendered from ``alarms.active()``; shows why it is empty when it is."""

    DEFAULT_CSS = """
    AlarmList { height: auto; min-height: 1; }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__("", name=name, id=id, classes=classes)
        self._last_key: object = None
        self._engine: Any = False  # not shown yet
        self.lines: list[str] = []

    def on_resize(self) -> None:
        """Fit the rows to the new width (longer forms when there is room)."""
        if self._engine is not False:
            self.show(self._engine)

    def show(self, engine: Any | None) -> None:
        """Redraw from the engine's active alarms (``None``: no rules configured)."""
        self._engine = engine
        if engine is None:
            self._render_lines([], "no alarm rules configured")
            return
        try:
            active: Sequence[Any] = list(engine.active())
        except Exception as exc:  # the list must never take the screen down
            self._render_lines([], f"alarm list unavailable: {exc}")
            return
        width = self.content_size.width or 80
        rows = [format_alarm(a, width) for a in active]
        rows.sort(key=lambda r: (SEVERITY_ORDER.index(r[0]) if r[0] in SEVERITY_ORDER
                                 else len(SEVERITY_ORDER), r[1]))
        self._render_lines(rows, "no active alarms")

    def _render_lines(self, rows: list[tuple[str, str, bool]], empty: str) -> None:
        key = (tuple(rows), empty)
        if key == self._last_key:
            return
        self._last_key = key
        text = Text(no_wrap=True, overflow="ellipsis")
        n_before = len(self.lines)
        self.lines = []
        if not rows:
            text.append(empty, style="italic")
            self.lines.append(empty)
        for i, (sev, line, ack) in enumerate(rows):
            if i:
                text.append("\n")
            tag = SEVERITY_TAGS.get(sev, sev[:4].upper())
            text.append(f"{tag}", style=f"bold {_SEV_STYLE.get(sev, '')}".strip())
            text.append(" ✓ " if ack else " ! ", style="bold")
            text.append(line)
            self.lines.append(f"{tag}{' ✓ ' if ack else ' ! '}{line}")
        # the list's height follows its line count: lay out again only when that changes
        self.update(text, layout=len(self.lines) != n_before)
        self.set_class(bool(rows), "-alarming")


#: Colour accents for the severity tag (the tag text itself carries the meaning).
_SEV_STYLE: dict[str, str] = {
    "critical": "reverse red", "major": "red", "minor": "yellow", "warning": "yellow",
    "indeterminate": "", "cleared": "green",
}


#: Words of the alarm history for each transition of an alarm event.
TRANSITION_WORDS: dict[str, str] = {
    "raise": "RAISED", "clear": "CLEARED", "escalate": "WORSE", "deescalate": "EASED",
    "ack": "ACKED",
}
#: Rows kept in the alarm history.
HISTORY_ROWS = 500


def history_row(t: float, transition: str, rule: str, value: Any, threshold: Any,
                unit_raw: Any, watch_deg: Any = None) -> str:
    """One history row: time, what happened, rule, ``value vs limit unit``."""
    unit = UNIT_TEXT.get(str(unit_raw), f" {unit_raw}") if unit_raw is not None \
        else RULE_UNITS.get(rule, "")
    where = f"@{float(watch_deg):+.0f}°" if watch_deg is not None else ""
    word = TRANSITION_WORDS.get(transition, transition.upper())
    return (f"{clock_text(t)} {word:<7} {rule}{where} "
            f"{value_vs_limit(value, threshold, unit)}")


class AlarmHistory(RichLog):
    """Every alarm raised, acknowledged and cleared, newest at the bottom; scrolls
    (mouse wheel; it takes no focus, so the screen's keys stay the screen's)."""

    can_focus = False

    DEFAULT_CSS = """
    AlarmHistory { height: 1fr; min-height: 3; background: $background; }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(max_lines=HISTORY_ROWS, wrap=False, markup=False, name=name,
                         id=id, classes=classes)
        self.rows: list[str] = []

    def add_event(self, event: Any) -> None:
        """Add a monitor alarm event (``kind == "alarm"``)."""
        d = event.data
        self.add_row(history_row(event.t, str(d.get("transition", "?")),
                                 str(d.get("rule", "?")), d.get("value"),
                                 d.get("threshold"), d.get("unit"), d.get("watch_deg")))

    def add_row(self, row: str) -> None:
        self.rows = (self.rows + [row])[-HISTORY_ROWS:]
        self.write(row)
