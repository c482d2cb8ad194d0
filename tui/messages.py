"""Messages the beam screen's workers post upward (Textual ``Message`` classes).

Workers never touch widgets: the driver worker and the recorder's thread workers post
one of these, and the screen's ``on_*`` handler updates the display on the event loop.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from textual.message import Message


class DriverEnded(Message):
    """The driver's ``run`` returned (its data ended, or it was stopped) or failed.

    Attributes:
        error: one-line reason when it failed, ``None`` when it ended normally.
    """

    def __init__(self, error: str | None = None) -> None:
        super().__init__()
        self.error = error


class RecordingStarted(Message):
    """A recorder was created (in a thread worker) and is attached to the monitor.

    Attributes:
        recorder: the running recorder (has ``path``, ``size_bytes`` and ``close()``).
    """

    def __init__(self, recorder: Any) -> None:
        super().__init__()
        self.recorder = recorder


class RecordingStopped(Message):
    """A recording was closed (in a thread worker), or could not start.

    Attributes:
        path: the session file, ``None`` when the recording never started.
        size_bytes: size of the closed file, when known.
        error: one-line reason when closing (or starting) failed.
    """

    def __init__(self, path: str | None, size_bytes: int | None = None,
                 error: str | None = None) -> None:
        super().__init__()
        self.path = path
        self.size_bytes = size_bytes
        self.error = error


class RecordWritten(Message):
    """A commissioning record was written (in a thread worker), or failed.

    Attributes:
        path: the record's folder or file, ``None`` on failure.
        error: one-line reason on failure.
    """

    def __init__(self, path: Path | None, error: str | None = None) -> None:
        super().__init__()
        self.path = path
        self.error = error
