"""End the process if a signalled exit wedges.

After SIGHUP the terminal is gone and restoring it can block the exit; a process left
behind would keep its driver (and a demo publisher) running for ever.  A daemon thread
waits a grace period and then ends the process outright.
"""

from __future__ import annotations

import os
import threading
import time

#: Seconds a signalled exit may take before the process is ended outright.
EXIT_GRACE_S = 10.0


def _exit_if_still_alive(grace_s: float) -> None:
    time.sleep(grace_s)
    os._exit(1)


def start_exit_watchdog(grace_s: float = EXIT_GRACE_S) -> threading.Thread:
    """Start the watchdog; the process ends ``grace_s`` seconds from now at the latest."""
    thread = threading.Thread(target=_exit_if_still_alive, args=(grace_s,),
                              name="lobewatch-exit-watchdog", daemon=True)
    thread.start()
    return thread
