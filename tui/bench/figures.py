"""One benchmark figure: a value with its unit and target, and whether it passes.

Every figure of ``lobewatch bench`` is a plain dict ``{"value", "unit", "target",
"pass"}`` (extra keys allowed) so the table and ``--json`` print the same thing.
"""

from __future__ import annotations

import statistics
import sys
from collections.abc import Callable, Iterable
from typing import Any

#: Writes one progress line (stderr by default).
Progress = Callable[[str], None]


def figure(value: float | None, unit: str, target: float | None = None, *,
           higher_is_better: bool = True, **extra: Any) -> dict[str, Any]:
    """A figure; ``pass`` is ``None`` when there is no target or no value."""
    ok: bool | None = None
    if target is not None and value is not None:
        ok = bool(value >= target) if higher_is_better else bool(value <= target)
    fig: dict[str, Any] = {"value": value, "unit": unit, "target": target, "pass": ok}
    if target is not None:
        fig["better"] = "higher" if higher_is_better else "lower"
    fig.update(extra)
    return fig


def median(values: Iterable[float]) -> float:
    """Median of several runs (the figures are noisy on a shared machine)."""
    return float(statistics.median(list(values)))


def stderr_progress(message: str) -> None:
    print(f"bench: {message}", file=sys.stderr, flush=True)


def quiet(_message: str) -> None:
    """A progress callback that says nothing."""
