"""The ``--on-alarm`` hook: JSON on stdin and arguments, no shell, timeout, never blocks.

"No shell" is checked the way POSIX defines shell behaviour (IEEE Std 1003.1, Shell
Command Language: ';' separates commands, '$(...)' substitutes): with an argument list
neither is interpreted, the characters arrive verbatim.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import pytest

from stream.errors import UserError
from stream.tick import Event
from tui.notify import AlarmHook, alarm_record, fail_on_hit, hook_arguments, should_ring

RECORDER = """\
import json, sys
out = sys.argv[1]
data = sys.stdin.read()
with open(out, "a", encoding="utf-8") as fh:
    fh.write(json.dumps({"argv": sys.argv[2:], "stdin": data}) + "\\n")
"""


def alarm(transition="raise", severity="major", rule="drift", value=3.5, **extra) -> Event:
    data = {"rule": rule, "state": "quiet" if transition == "clear" else "raised",
            "severity": severity, "value": value, "threshold": 2.0, "message": "m",
            "key": rule, "transition": transition, "unit": "deg", **extra}
    return Event(1767225600.5, "alarm", data)


@pytest.fixture
def recorder(tmp_path):
    script = tmp_path / "rec.py"
    script.write_text(RECORDER, encoding="utf-8")
    return script, tmp_path / "calls.jsonl"


def calls(path: Path) -> list[dict]:
    if not path.exists():
        return []
    return [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines()]


def test_json_on_stdin_and_arguments(recorder):
    script, out = recorder
    hook = AlarmHook([sys.executable, str(script), str(out)], timeout_s=10)
    try:
        assert hook.submit(alarm())
        assert hook.submit(alarm("clear", "cleared", value=None))
        assert not hook.submit(Event(1.0, "marker", {"text": "x"}))  # not an alarm
        assert hook.wait_idle(20)
    finally:
        hook.close(5)
    got = calls(out)
    assert [c["argv"] for c in got] == [["drift", "raised", "major", "3.5"],
                                        ["drift", "quiet", "cleared", "null"]]
    rec = json.loads(got[0]["stdin"])
    assert rec == {"type": "alarm", "t": 1767225600.5, **alarm().data}
    assert hook.errors() == [] and hook.runs == 2


def test_no_shell_interpretation(recorder, tmp_path):
    script, out = recorder
    victim = tmp_path / "should-not-exist"
    cmd = f"{sys.executable} {script} {out} 'a; touch {victim}' '$(touch {victim})' `x`"
    hook = AlarmHook.from_command_line(cmd, timeout_s=10)
    try:
        hook.submit(alarm())
        assert hook.wait_idle(20)
    finally:
        hook.close(5)
    argv = calls(out)[0]["argv"]
    assert argv[:3] == [f"a; touch {victim}", f"$(touch {victim})", "`x`"]
    assert not victim.exists()


def test_timeout_kills_and_reports_and_submit_never_blocks(tmp_path):
    script = tmp_path / "slow.py"
    script.write_text("import time, sys\nsys.stdin.read()\ntime.sleep(30)\n", encoding="utf-8")
    errors: list[str] = []
    hook = AlarmHook([sys.executable, str(script)], timeout_s=0.5, on_error=errors.append)
    try:
        t0 = time.perf_counter()
        for _ in range(3):
            hook.submit(alarm())
        assert time.perf_counter() - t0 < 0.1  # the caller is never held up
        assert hook.wait_idle(20)
    finally:
        hook.close(5)
    assert len(errors) == 3 and all("timed out" in e and "killed" in e for e in errors)
    assert hook.errors() == errors and hook.errors() == []


def test_failing_command_is_reported_not_raised(tmp_path):
    script = tmp_path / "fail.py"
    script.write_text("import sys\nsys.stderr.write('pager offline\\n')\nsys.exit(4)\n",
                      encoding="utf-8")
    hook = AlarmHook([sys.executable, str(script)], timeout_s=10)
    try:
        hook.submit(alarm())
        assert hook.wait_idle(20)
    finally:
        hook.close(5)
    (err,) = hook.errors()
    assert "status 4" in err and "pager offline" in err and "drift raise" in err


def test_full_queue_drops_and_reports(tmp_path):
    script = tmp_path / "slow.py"
    script.write_text("import time, sys\nsys.stdin.read()\ntime.sleep(30)\n", encoding="utf-8")
    hook = AlarmHook([sys.executable, str(script)], timeout_s=1.0, max_queue=2)
    try:
        results = [hook.submit(alarm()) for _ in range(6)]
        assert results[:2] == [True, True] and not all(results)
        assert any("busy" in e for e in hook.errors())
    finally:
        hook.close(10)


def test_bad_commands_are_user_errors():
    with pytest.raises(UserError, match="empty"):
        AlarmHook([])
    with pytest.raises(UserError, match="not found"):
        AlarmHook(["surely-no-such-command-4711"])
    with pytest.raises(UserError, match="quotes"):
        AlarmHook.from_command_line("echo 'open")
    with pytest.raises(UserError, match="positive"):
        AlarmHook(["true"], timeout_s=0)


def test_bell_and_fail_on_decisions():
    assert should_ring(alarm("raise")) and should_ring(alarm("escalate", "critical"))
    assert not should_ring(alarm("clear", "cleared")) and not should_ring(alarm("deescalate"))
    assert fail_on_hit(alarm("raise", "major"), "major")
    assert fail_on_hit(alarm("escalate", "critical"), "major")
    assert not fail_on_hit(alarm("raise", "minor"), "major")
    assert not fail_on_hit(alarm("clear", "cleared"), "warning")
    assert not fail_on_hit(alarm("raise", "critical"), None)


def test_record_and_arguments_for_watch():
    ev = alarm(rule="watch", value=-4.25, watch_deg=40.0)
    assert hook_arguments(ev) == ["watch", "raised", "major", "-4.25"]
    assert alarm_record(ev)["watch_deg"] == 40.0
