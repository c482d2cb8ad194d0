"""Garbage-collector pacing: collections between frames instead of inside them.

Every frame allocates thousands of short-lived objects; with CPython's default
thresholds the collector then runs several times per frame and now and then walks
Textual's whole widget tree (30-130 ms outliers at 120x40, measured with
bench/bench_redraw.py).  :func:`tune_gc` freezes the objects alive after start-up out
of the collector's sight and makes automatic collection rare; :class:`GcPacer` then
collects the young generations right after each repaint, so the pause falls between
frames.  Process-wide, so only for a real terminal run, never under tests.
"""

from __future__ import annotations

import gc

#: Automatic-collection threshold of the youngest generation once paced.
PACED_THRESHOLD = (20_000, 20, 100)
#: Frames between collections of the middle and the oldest generation.
GC_MIDDLE_EVERY = 20
GC_FULL_EVERY = 600


def tune_gc() -> None:
    """Freeze what is alive now and make automatic collection rare."""
    gc.collect()
    gc.freeze()
    gc.set_threshold(*PACED_THRESHOLD)


class GcPacer:
    """Counts frames and collects: the young generation after every frame, the middle
    one every ``GC_MIDDLE_EVERY`` frames, everything every ``GC_FULL_EVERY`` frames."""

    def __init__(self) -> None:
        self.frames = 0
        self.active = False

    def start(self) -> None:
        """Take over from the automatic collector (see :func:`tune_gc`)."""
        tune_gc()
        self.active = True

    def after_frame(self) -> None:
        self.frames += 1
        if self.frames % GC_FULL_EVERY == 0:
            gc.collect()
        elif self.frames % GC_MIDDLE_EVERY == 0:
            gc.collect(1)
        else:
            gc.collect(0)
