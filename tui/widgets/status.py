"""The status line: mode, source state, clock, recording and replay position.

Every state is spelt out in words next to its glyph, so it reads without colour.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

from rich.text import Text
from textual.widgets import Static

from stream.tick import Tick

#: Glyph and style of each source state.
STATE_GLYPHS: dict[str, tuple[str, str]] = {
    "waiting": ("○", "italic"),
    "receiving": ("●", "bold green"),
    "stale": ("◌", "bold reverse yellow"),
    "restarted": ("↻", "bold yellow"),  # receiving again from a new publisher
    "ended": ("■", "bold"),
}


@dataclass(frozen=True, slots=True)
class StatusInfo:
    """What the status line shows besides the tick (filled in by the app)."""

    mode: str = "live"
    display_paused: bool = False
    stalled_s: float | None = None
    recording_path: str | None = None
    recording_bytes: int | None = None
    replay_t: float | None = None
    replay_start: float | None = None
    replay_end: float | None = None
    replay_speed: float | None = None
    replay_paused: bool = False


def fmt_bytes(n: int | None) -> str:
    if n is None:
        return "?"
    for unit, div in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= div:
            return f"{n / div:.1f} {unit}"
    return f"{n} B"


def clock(t: float | None) -> str:
    if t is None or not math.isfinite(t):
        return "--:--:--"
    return time.strftime("%H:%M:%S", time.localtime(t))


def position_bar(t: float, start: float, end: float, width: int) -> str:
    """A text bar with a head at the replay position."""
    if width <= 0:
        return ""
    span = end - start
    f = 0.0 if span <= 0 else min(1.0, max(0.0, (t - start) / span))
    n = int(round(f * width))
    if n >= width:
        return "━" * width
    return "━" * n + "╸" + "─" * (width - n - 1)


class StatusLine(Static):
    """One line; rebuilt by :meth:`show` only when its text changes."""

    DEFAULT_CSS = """
    StatusLine { height: 1; width: 1fr; }
    """

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__("", name=name, id=id, classes=classes)
        self.plain = ""

    def show(self, tick: Tick | None, info: StatusInfo) -> None:
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(" lobewatch ", style="bold reverse")
        text.append(f" {info.mode} ")
        state = tick.source.state if tick is not None else "waiting"
        glyph, style = STATE_GLYPHS.get(state, ("?", ""))
        label = state.upper() if state == "stale" else state
        if state == "stale" and tick is not None and tick.last_sample_t is not None:
            label += f" {max(0.0, tick.t - tick.last_sample_t):.0f}s"
        text.append(f"{glyph} {label}", style=style)
        if info.stalled_s is not None:
            text.append(f"  ◌ no update {info.stalled_s:.0f}s", style="bold reverse")
        if tick is not None:
            text.append(f"  {clock(tick.t)}")
        if info.display_paused:
            text.append("  ‖ DISPLAY PAUSED", style="bold reverse")
        if info.recording_path is not None:
            name = info.recording_path.rsplit("/", 1)[-1]
            text.append("  ● REC ", style="bold red")
            text.append(f"{name} {fmt_bytes(info.recording_bytes)}")
        if info.replay_t is not None and info.replay_start is not None \
                and info.replay_end is not None:
            sym = "‖" if info.replay_paused else "▶"
            speed = info.replay_speed or 1.0
            text.append(f"  {sym} {speed:g}× ", style="bold")
            used = text.cell_len
            room = max(6, min(30, (self.size.width or 80) - used - 14))
            text.append(position_bar(info.replay_t, info.replay_start, info.replay_end, room))
            total = max(0.0, info.replay_end - info.replay_start)
            pos = max(0.0, info.replay_t - info.replay_start)
            text.append(f" {_mmss(pos)}/{_mmss(total)}")
        if text.plain != self.plain:
            self.plain = text.plain
            self.update(text, layout=False)  # one fixed-size line
        self.set_class(state == "stale" or info.stalled_s is not None, "-stale")


def _mmss(s: float) -> str:
    s = int(s)
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}:{m:02d}:{sec:02d}" if h else f"{m:02d}:{sec:02d}"
