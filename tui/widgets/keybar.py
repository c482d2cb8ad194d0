"""The key bar: the screen's keys on one line, fitted to the width.

Textual's footer cuts the line at the right edge, so at 80 columns a replay lost every
playback key.  Here each key (or compact group, e.g. ``- + speed``) has a priority;
the keys that fit are kept in priority order and shown in binding order, and when some
had to go the line ends with ``? help`` (the help page lists every key).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

from rich.text import Text
from textual.binding import Binding
from textual.reactive import reactive
from textual.widget import Widget

#: Gap between items, columns.
GAP = 1


@dataclass(frozen=True, slots=True)
class KeyItem:
    """One entry of the bar: keys as shown, what they do, and a priority (lower first)."""

    keys: str
    description: str
    priority: int

    @property
    def width(self) -> int:
        return len(self.keys) + 1 + len(self.description)


def key_items(bindings: Iterable[Binding], offered: Callable[[str], bool],
              first: Iterable[str] = ()) -> list[KeyItem]:
    """Items for the shown bindings whose action is ``offered``, compact groups merged;
    actions named in ``first`` come first in priority (then binding order)."""
    first = list(first)
    items: list[KeyItem] = []
    groups: dict[str, int] = {}
    for order, b in enumerate(bindings):
        action = b.action.split("(", 1)[0]
        if not b.show or not offered(action):
            continue
        key = b.key_display or b.key
        rank = first.index(action) if action in first else len(first) + order
        if b.group is not None and b.group.description in groups:
            i = groups[b.group.description]
            it = items[i]
            items[i] = KeyItem(f"{it.keys} {key}", it.description, min(it.priority, rank))
            continue
        if b.group is not None:
            groups[b.group.description] = len(items)
            items.append(KeyItem(key, b.group.description, rank))
        else:
            items.append(KeyItem(key, b.description, rank))
    return items


def fit_items(items: list[KeyItem], width: int, more: KeyItem | None) -> list[KeyItem]:
    """The items that fit ``width``, highest priority first, kept in their order; when
    any is left out and ``more`` is given, ``more`` is kept (it says where the rest is)."""
    def total(sel: list[KeyItem]) -> int:
        return sum(it.width for it in sel) + GAP * max(0, len(sel) - 1)

    if total(items) <= width:
        return items
    keep: list[KeyItem] = [more] if more is not None and more in items else []
    for it in sorted(items, key=lambda it: it.priority):
        if it in keep:
            continue
        if total([*keep, it]) <= width:
            keep.append(it)
    return [it for it in items if it in keep]


class KeyBar(Widget):
    """One line of keys; ``items`` is set by the screen, the fit follows the width."""

    DEFAULT_CSS = """
    KeyBar { dock: bottom; height: 1; width: 1fr; background: $panel; }
    KeyBar > .keybar--key { text-style: bold; color: $accent; }
    """

    COMPONENT_CLASSES = {"keybar--key"}

    #: Every key the screen offers, in binding order.
    items: reactive[tuple[KeyItem, ...]] = reactive((), layout=False)
    #: The item kept when others are left out (where to find the rest).
    more: reactive[KeyItem | None] = reactive(None)

    def shown(self) -> list[KeyItem]:
        """The items on screen at the current width."""
        return fit_items(list(self.items), self.size.width or 80, self.more)

    def render(self) -> Text:
        key_style = self.get_component_rich_style("keybar--key", partial=True)
        text = Text(no_wrap=True, overflow="ellipsis")
        for i, it in enumerate(self.shown()):
            if i:
                text.append(" " * GAP)
            text.append(it.keys, style=key_style)
            text.append(" " + it.description)
        return text
