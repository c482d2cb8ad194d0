"""Alarm options for ``live``, ``replay`` and ``demo``: CLI flags and a TOML file.

Precedence: built-in defaults < ``--config FILE`` < command-line flags, so a site file
holds the installation's settings and a flag re-judges a recording with another
threshold.  The file layout is documented in docs/alarms.md with the example
examples/lobewatch.toml; an unknown key or table is an error naming the key and file
(a misspelt threshold must never silently fall back to a default).
"""

from __future__ import annotations

import argparse
import math
import shlex
import tomllib
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

from stream.alarm_config import RULES, SEVERITIES, AlarmConfig
from stream.errors import InputFileError, UserError

#: Keys of each rule's TOML table -> AlarmConfig field.  Every rule table also accepts
#: ``raise_hold_s``, ``clear_hold_s`` and ``severity`` (per-rule overrides).
RULE_KEYS: dict[str, dict[str, str]] = {
    "drift": {"target_deg": "target_deg", "tolerance_deg": "tolerance_deg",
              "tolerance_hpbw_frac": "tolerance_hpbw_frac", "sweeps": "drift_sweeps",
              "min_sweeps": "drift_min_sweeps", "max_age_s": "drift_max_age_s",
              "margin_frac": "drift_margin_frac", "critical_factor": "drift_critical_factor"},
    "broadening": {"frac": "broadening_frac", "major_frac": "broadening_major_frac",
                   "margin_frac": "broadening_margin_frac"},
    "gain_loss": {"db": "gain_loss_db", "major_db": "gain_loss_major_db",
                  "margin_db": "gain_loss_margin_db"},
    "sidelobe_rise": {"limit_db": "sll_limit_db", "minor_db": "sll_minor_db",
                      "margin_db": "sll_margin_db"},
    "stale": {"after_s": "stale_s"},
    "input": {"rate_per_s": "input_rate_per_s", "window_s": "input_window_s",
              "margin_frac": "input_margin_frac"},
    "watch": {"directions_deg": "watch_deg", "window_deg": "watch_window_deg",
              "db": "watch_db", "margin_db": "watch_margin_db", "learn_s": "watch_learn_s",
              "track_s": "watch_track_s"},
}
#: Keys of the ``[alarms]`` table itself.
GENERAL_KEYS: dict[str, str] = {"raise_hold_s": "raise_hold_s",
                                "clear_hold_s": "clear_hold_s", "disable": "disabled"}
#: Keys of the ``[notify]`` table.
NOTIFY_KEYS: tuple[str, ...] = ("bell", "on_alarm", "on_alarm_timeout_s", "fail_on")
#: Fields where 0 in the file means "off" (TOML has no null).
_ZERO_IS_NONE = {"watch_track_s", "tolerance_hpbw_frac"}
_INT_FIELDS = {"drift_sweeps", "drift_min_sweeps"}
#: Severities ``--fail-on`` accepts (``cleared`` is not an alarm).
FAIL_ON_CHOICES: tuple[str, ...] = SEVERITIES[:-1]


@dataclass(frozen=True, slots=True)
class NotifySettings:
    """How alarms reach people: terminal bell, site hook command, headless exit code."""

    bell: bool = False
    on_alarm: tuple[str, ...] | None = None
    on_alarm_timeout_s: float = 5.0
    fail_on: str | None = None


def _number(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return v


def _positive(text: str) -> float:
    v = _number(text)
    if v <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number")
    return v


def _non_negative(text: str) -> float:
    v = _number(text)
    if v < 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be zero or positive")
    return v


def add_alarm_arguments(parser: argparse.ArgumentParser) -> None:
    """Add the alarm and notification options (all default to "not given", so the
    ``--config`` file's values and then the built-in defaults apply)."""
    d = AlarmConfig()
    g = parser.add_argument_group(
        "alarms", "Thresholds for the beam alarms (defaults in brackets). A --config file "
                  "sets them for a site; a flag given here overrides the file.")
    g.add_argument("--config", metavar="FILE",
                   help="TOML file of alarm settings ([alarms], [alarms.RULE], [notify] "
                        "tables; see examples/lobewatch.toml) and, for live, streams "
                        "([streams.NAME] tables; docs/fleet.md)")
    g.add_argument("--target-deg", type=_number, metavar="DEG",
                   help="direction the main lobe should point, degrees; enables the drift "
                        "alarm [none]")
    g.add_argument("--tolerance-deg", type=_positive, metavar="DEG",
                   help="allowed offset of the main lobe from the target, degrees; critical "
                        f"beyond {d.drift_critical_factor:g}x [{d.tolerance_hpbw_frac:g} x the "
                        "expected HPBW when a model or reference gives one]")
    g.add_argument("--watch-deg", type=_number, action="append", metavar="DEG",
                   help="watch the power around this direction, degrees; repeat for several "
                        "directions [none]")
    g.add_argument("--watch-window-deg", type=_positive, metavar="DEG",
                   help="half-width of the watched window, degrees "
                        f"[{d.watch_window_deg:g}]")
    g.add_argument("--watch-db", type=_positive, metavar="DB",
                   help="departure from the learned baseline that counts as a change, dB "
                        f"[{d.watch_db:g}]")
    g.add_argument("--broadening-frac", type=_positive, metavar="F",
                   help="HPBW wider than expected by this fraction raises broadening, e.g. "
                        f"0.25 = 25%% [{d.broadening_frac:g}]")
    g.add_argument("--gain-loss-db", type=_positive, metavar="DB",
                   help="peak power this many dB below the captured reference raises gain "
                        f"loss [{d.gain_loss_db:g}]")
    g.add_argument("--sll-limit-db", type=_number, metavar="DB",
                   help="side lobe level (relative to the peak, negative) above this raises "
                        f"side lobe rise, dB [{d.sll_limit_db:g}]")
    # one staleness setting: live's --stale-after marks the stream stale and raises the
    # stale alarm; --stale-s is its old name (it sets the same value)
    g.add_argument("--stale-s", dest="stale_after", type=_positive, metavar="S",
                   default=argparse.SUPPRESS,
                   help="old name of --stale-after: no samples for this long marks the "
                        f"stream stale and raises the stale alarm, seconds [{d.stale_s:g}; "
                        "live: 3]")
    g.add_argument("--input-rate", type=_positive, metavar="PER_S",
                   help="rejected + lost messages per second (averaged over "
                        f"{d.input_window_s:g} s) that raise input trouble "
                        f"[{d.input_rate_per_s:g}]")
    g.add_argument("--raise-hold-s", type=_non_negative, metavar="S",
                   help="a condition must last this long before it raises, seconds "
                        f"[{d.raise_hold_s:g}; stale raises at once]")
    g.add_argument("--clear-hold-s", type=_non_negative, metavar="S",
                   help="a raised alarm must stay below its clear threshold this long "
                        f"before it clears, seconds [{d.clear_hold_s:g}]")
    n = parser.add_argument_group("alarm notification")
    n.add_argument("--bell", action="store_const", const=True, default=None,
                   help="ring the terminal bell when an alarm is raised or gets worse")
    n.add_argument("--on-alarm", metavar="CMD",
                   help="run CMD for every alarm change, without a shell: the alarm as JSON "
                        "on stdin and RULE STATE SEVERITY VALUE appended as arguments; "
                        "killed after 5 s ([notify] on_alarm_timeout_s in --config)")
    n.add_argument("--fail-on", choices=FAIL_ON_CHOICES, metavar="SEVERITY",
                   help="headless: exit non-zero once an alarm of this severity or worse "
                        f"is raised ({', '.join(FAIL_ON_CHOICES)})")


# -- TOML --------------------------------------------------------------------------------

def load_config_file(path: str | Path) -> dict[str, Any]:
    """Parse a settings file; one-line :class:`InputFileError` for a missing or bad one."""
    p = Path(path)
    try:
        with p.open("rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise InputFileError(str(p), "no such file; check the --config path") from None
    except OSError as exc:
        raise InputFileError(str(p), f"cannot read: {exc.strerror}") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(str(p), f"not valid TOML ({exc}); fix the file") from None


def _check_type(path: str, where: str, key: str, field_name: str, value: Any) -> Any:
    def bad(what: str) -> InputFileError:
        return InputFileError(path, f"[{where}] {key} = {value!r}: expected {what}")

    if field_name == "watch_deg":
        if not isinstance(value, list) or not all(
                isinstance(v, int | float) and not isinstance(v, bool) for v in value):
            raise bad("a list of angles in degrees, e.g. [40.0, -35.0]")
        return tuple(float(v) for v in value)
    if field_name == "disabled":
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise bad(f"a list of rule names from {', '.join(RULES)}")
        return tuple(value)
    if field_name in _INT_FIELDS:
        if not isinstance(value, int) or isinstance(value, bool):
            raise bad("a whole number")
        return value
    if not isinstance(value, int | float) or isinstance(value, bool):
        raise bad("a number")
    v = float(value)
    if field_name in _ZERO_IS_NONE and v == 0:
        return None
    return v


def _unknown(path: str, where: str, key: str, known) -> InputFileError:
    return InputFileError(path, f"unknown key {key!r} in [{where}]; known keys: "
                                f"{', '.join(sorted(known))}")


def alarm_overrides_from_table(alarms: Any, p: str,
                               table: str = "alarms") -> dict[str, Any]:
    """AlarmConfig field overrides from one ``[alarms]``-shaped table (also used for a
    stream's ``[streams.NAME.alarms]``); ``table`` names it in error messages."""
    out: dict[str, Any] = {}
    raise_holds: dict[str, float] = {}
    clear_holds: dict[str, float] = {}
    severity: dict[str, str] = {}
    if not isinstance(alarms, dict):
        raise InputFileError(p, f"'{table}' must be a table: write [{table}]")
    for key, value in alarms.items():
        if key in RULE_KEYS:
            if not isinstance(value, dict):
                raise InputFileError(p, f"'{table}.{key}' must be a table: write "
                                        f"[{table}.{key}]")
            known = {**RULE_KEYS[key], "raise_hold_s": "", "clear_hold_s": "", "severity": ""}
            for k, v in value.items():
                where = f"{table}.{key}"
                if k not in known:
                    raise _unknown(p, where, k, known)
                if k == "severity":
                    if v not in FAIL_ON_CHOICES:
                        raise InputFileError(p, f"[{where}] severity = {v!r}: expected one of "
                                                f"{', '.join(FAIL_ON_CHOICES)}")
                    severity[key] = v
                elif k in ("raise_hold_s", "clear_hold_s"):
                    hold = _check_type(p, where, k, k, v)
                    (raise_holds if k == "raise_hold_s" else clear_holds)[key] = hold
                else:
                    out[RULE_KEYS[key][k]] = _check_type(p, where, k, RULE_KEYS[key][k], v)
        elif key in GENERAL_KEYS:
            out[GENERAL_KEYS[key]] = _check_type(p, table, key, GENERAL_KEYS[key], value)
        else:
            raise _unknown(p, table, key, [*GENERAL_KEYS, *RULE_KEYS])
    if raise_holds:
        out["rule_raise_hold_s"] = raise_holds
    if clear_holds:
        out["rule_clear_hold_s"] = clear_holds
    if severity:
        out["severity"] = severity
    return out


def config_overrides_from_file(path: str | Path) -> tuple[dict[str, Any], dict[str, Any]]:
    """(AlarmConfig field overrides, ``[notify]`` values) read from a TOML file."""
    p = str(path)
    doc = load_config_file(path)
    for top in doc:
        if top not in ("alarms", "notify", "streams"):  # [streams.*]: tui.fleet_options
            raise _unknown(p, "top level", top, ("alarms", "notify", "streams"))
    out = alarm_overrides_from_table(doc.get("alarms", {}), p)
    notify = doc.get("notify", {})
    if not isinstance(notify, dict):
        raise InputFileError(p, "'notify' must be a table: write [notify]")
    nout: dict[str, Any] = {}
    for k, v in notify.items():
        if k not in NOTIFY_KEYS:
            raise _unknown(p, "notify", k, NOTIFY_KEYS)
        if k == "bell":
            if not isinstance(v, bool):
                raise InputFileError(p, f"[notify] bell = {v!r}: expected true or false")
        elif k == "on_alarm":
            if isinstance(v, str):
                v = _split_command(v, where=f"{p}: [notify] on_alarm")
            elif not (isinstance(v, list) and v and all(isinstance(a, str) for a in v)):
                raise InputFileError(p, f"[notify] on_alarm = {v!r}: expected a command line "
                                        "string or a list of strings")
            v = tuple(v)
        elif k == "on_alarm_timeout_s":
            v = _check_type(p, "notify", k, k, v)
            if not v > 0:
                raise InputFileError(p, f"[notify] {k} = {v!r}: expected a positive number")
        elif k == "fail_on" and v not in FAIL_ON_CHOICES:
            raise InputFileError(p, f"[notify] fail_on = {v!r}: expected one of "
                                    f"{', '.join(FAIL_ON_CHOICES)}")
        nout[k] = v
    return out, nout


def _split_command(cmd: str, where: str = "--on-alarm") -> list[str]:
    try:
        argv = shlex.split(cmd)
    except ValueError as exc:
        raise UserError(f"{where}: cannot split the command line ({exc}); check the "
                        "quotes") from None
    if not argv:
        raise UserError(f"{where}: the command is empty")
    return argv


# -- args -> settings --------------------------------------------------------------------

#: CLI attribute -> AlarmConfig field.
_FLAG_FIELDS: dict[str, str] = {
    "target_deg": "target_deg", "tolerance_deg": "tolerance_deg", "watch_deg": "watch_deg",
    "watch_window_deg": "watch_window_deg", "watch_db": "watch_db",
    "broadening_frac": "broadening_frac", "gain_loss_db": "gain_loss_db",
    "sll_limit_db": "sll_limit_db", "stale_after": "stale_s", "input_rate": "input_rate_per_s",
    "raise_hold_s": "raise_hold_s", "clear_hold_s": "clear_hold_s",
}


def alarm_config_from_args(args: argparse.Namespace) -> AlarmConfig:
    """Defaults, then the ``--config`` file, then the flags given on the command line."""
    values: dict[str, Any] = {}
    path = getattr(args, "config", None)
    if path:
        values, _ = config_overrides_from_file(path)
    for attr, name in _FLAG_FIELDS.items():
        v = getattr(args, attr, None)
        if v is not None:
            values[name] = tuple(v) if name == "watch_deg" else v
    known = {f.name for f in fields(AlarmConfig)}
    assert set(values) <= known, set(values) - known
    try:
        return AlarmConfig(**values)
    except UserError as exc:
        where = f"{path}: " if path else ""
        raise UserError(f"{where}{exc}") from None


def notify_settings_from_args(args: argparse.Namespace) -> NotifySettings:
    """Bell, hook command and ``--fail-on``: the file's ``[notify]``, then the flags."""
    values: dict[str, Any] = {}
    path = getattr(args, "config", None)
    if path:
        _, values = config_overrides_from_file(path)
    if getattr(args, "bell", None):
        values["bell"] = True
    cmd = getattr(args, "on_alarm", None)
    if cmd is not None:
        values["on_alarm"] = tuple(_split_command(cmd))
    if getattr(args, "fail_on", None) is not None:
        values["fail_on"] = args.fail_on
    return NotifySettings(**values)


def alarm_hook_from_args(args: argparse.Namespace):
    """The ``--on-alarm`` hook (a :class:`tui.notify.AlarmHook`, started), or ``None``."""
    settings = notify_settings_from_args(args)
    if not settings.on_alarm:
        return None
    from tui.notify import AlarmHook
    return AlarmHook(list(settings.on_alarm), timeout_s=settings.on_alarm_timeout_s)
