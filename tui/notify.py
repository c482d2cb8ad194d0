"""Getting alarms to people: the site's ``--on-alarm`` command, the terminal bell and
the headless ``--fail-on`` decision.

The hook runs the site's command once per alarm event, never through a shell (the user's
string is split with :func:`shlex.split` and run as an argument list), with the alarm as
one JSON object on stdin and ``RULE STATE SEVERITY VALUE`` appended as arguments.  It
runs in one background thread fed by a bounded queue, so a slow or hanging command
never blocks the screen or the pipeline; a command that outlives its timeout is killed
with its whole process group.  Failures are collected (and passed to ``on_error``), never
raised into the caller.
"""

from __future__ import annotations

import collections
import json
import os
import queue
import shlex
import shutil
import signal
import subprocess
import threading
from collections.abc import Callable
from typing import Any

from stream.alarm_config import severity_at_least
from stream.errors import UserError
from stream.tick import Event

#: The terminal bell character.
BELL: str = "\a"

_STOP = object()


def alarm_record(event: Event) -> dict[str, Any]:
    """The alarm as the JSON object the hook receives (same keys as the headless
    ``alarm`` line: ``type``, ``t``, ``rule``, ``state``, ``severity``, ``value``, ...)."""
    rec: dict[str, Any] = {"type": "alarm", "t": event.t}
    rec.update(event.data)
    return rec


def hook_arguments(event: Event) -> list[str]:
    """``RULE STATE SEVERITY VALUE`` (value as JSON: a number or ``null``)."""
    d = event.data
    return [str(d.get("rule", "")), str(d.get("state", "")), str(d.get("severity", "")),
            json.dumps(d.get("value"))]


def should_ring(event: Event) -> bool:
    """Ring the bell for a raise or a worsening, not for a clear or an improvement."""
    return event.kind == "alarm" and event.data.get("transition") in ("raise", "escalate")


def fail_on_hit(event: Event, floor: str | None) -> bool:
    """True when ``event`` raises (or worsens) an alarm of severity ``floor`` or worse."""
    return (floor is not None and should_ring(event)
            and severity_at_least(str(event.data.get("severity", "cleared")), floor))


class AlarmHook:
    """Run a site command for each alarm event, in the background.

    Use it as an event sink (``monitor.event_sinks.append(hook)``); only ``alarm``
    events are passed on.  ``on_error`` (called from the worker thread -- a UI must hand
    it to its own thread) gets one line per failure; :meth:`errors` returns and empties
    the failures seen so far.  Call :meth:`close` at exit.
    """

    def __init__(self, argv: list[str], timeout_s: float = 5.0, *, max_queue: int = 64,
                 on_error: Callable[[str], None] | None = None) -> None:
        if not argv:
            raise UserError("--on-alarm: the command is empty")
        if shutil.which(argv[0]) is None:
            raise UserError(f"--on-alarm: command {argv[0]!r} not found or not executable; "
                            "give a full path or put it on PATH")
        if not timeout_s > 0:
            raise UserError(f"--on-alarm: timeout must be positive, got {timeout_s}")
        self.argv = list(argv)
        self.timeout_s = float(timeout_s)
        self.on_error = on_error
        self.runs = 0
        self.failures = 0
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=max_queue)
        self._errors: collections.deque[str] = collections.deque(maxlen=200)
        self._lock = threading.Lock()
        self._closed = False
        self._thread = threading.Thread(target=self._worker, name="lobewatch-alarm-hook",
                                        daemon=True)
        self._thread.start()

    @classmethod
    def from_command_line(cls, cmd: str, timeout_s: float = 5.0, **kw: Any) -> AlarmHook:
        """Split a user's command line like a POSIX shell would, without running one."""
        try:
            argv = shlex.split(cmd)
        except ValueError as exc:
            raise UserError(f"--on-alarm: cannot split the command line ({exc}); check the "
                            "quotes") from None
        return cls(argv, timeout_s, **kw)

    # -- producer side (never blocks) ------------------------------------------------
    def submit(self, event: Event) -> bool:
        """Queue one alarm event; False (and an error noted) if the queue is full."""
        if event.kind != "alarm" or self._closed:
            return False
        try:
            self._queue.put_nowait(event)
        except queue.Full:
            self._report(f"on-alarm hook is busy ({self._queue.maxsize} alarms waiting); "
                         f"{_label(event)} not passed on")
            return False
        return True

    __call__ = submit

    def errors(self) -> list[str]:
        """Failures since the last call (oldest first)."""
        with self._lock:
            out = list(self._errors)
            self._errors.clear()
        return out

    def close(self, timeout_s: float | None = None) -> None:
        """Stop taking alarms; wait for the queued ones (at most ``timeout_s``)."""
        if self._closed:
            return
        self._closed = True
        try:
            self._queue.put(_STOP, timeout=timeout_s)
        except queue.Full:
            return
        self._thread.join(timeout_s)

    def wait_idle(self, timeout_s: float) -> bool:
        """Block until every queued alarm has been handled (tests, orderly exit)."""
        done = threading.Event()

        def waiter() -> None:
            self._queue.join()
            done.set()
        threading.Thread(target=waiter, daemon=True).start()
        return done.wait(timeout_s)

    # -- worker ------------------------------------------------------------------------
    def _report(self, line: str) -> None:
        with self._lock:
            self._errors.append(line)
            self.failures += 1
        if self.on_error is not None:
            try:
                self.on_error(line)
            except Exception:  # a broken callback must not kill the worker
                pass

    def _worker(self) -> None:
        while True:
            item = self._queue.get()
            try:
                if item is _STOP:
                    return
                self._run(item)
            finally:
                self._queue.task_done()

    def _run(self, event: Event) -> None:
        argv = self.argv + hook_arguments(event)
        payload = (json.dumps(alarm_record(event)) + "\n").encode()
        label = _label(event)
        try:
            proc = subprocess.Popen(argv, stdin=subprocess.PIPE, stdout=subprocess.DEVNULL,
                                    stderr=subprocess.PIPE, shell=False, close_fds=True,
                                    start_new_session=True)
        except OSError as exc:
            self._report(f"on-alarm hook could not start for {label}: {exc}")
            return
        self.runs += 1
        try:
            _, err = proc.communicate(payload, timeout=self.timeout_s)
        except subprocess.TimeoutExpired:
            _kill_group(proc)
            self._report(f"on-alarm hook timed out after {self.timeout_s:g} s for {label}; "
                         "killed")
            return
        if proc.returncode != 0:
            tail = err.decode(errors="replace").strip().splitlines()[-1:] if err else []
            why = f": {tail[0][:200]}" if tail else ""
            self._report(f"on-alarm hook exited with status {proc.returncode} for "
                         f"{label}{why}")


def _label(event: Event) -> str:
    d = event.data
    return f"{d.get('key', d.get('rule', '?'))} {d.get('transition', d.get('state', ''))}"


def _kill_group(proc: subprocess.Popen) -> None:
    """Kill the hook and anything it started (its own session), then reap it."""
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        proc.kill()
    try:
        proc.communicate(timeout=2.0)
    except subprocess.TimeoutExpired:  # a grandchild left its own session holding the pipe
        if proc.stderr is not None:
            proc.stderr.close()
        proc.wait(timeout=2.0)
