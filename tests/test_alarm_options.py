"""Alarm CLI flags and the TOML settings file: precedence, validation, the example file.

TOML parsing is Python's stdlib tomllib (TOML v1.0.0, toml.io); argparse behaviour is
the stdlib's.  Everything else here is this project's own contract (docs/alarms.md).
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pytest

from stream.alarms import AlarmConfig, AlarmEngine
from stream.errors import InputFileError, UserError
from tui.alarm_options import (
    RULE_KEYS,
    add_alarm_arguments,
    alarm_config_from_args,
    alarm_hook_from_args,
    notify_settings_from_args,
)

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "lobewatch.toml"


def parse(argv: list[str]) -> argparse.Namespace:
    p = argparse.ArgumentParser(prog="t", exit_on_error=False)
    add_alarm_arguments(p)
    return p.parse_args(argv)


def write(tmp_path: Path, text: str) -> str:
    f = tmp_path / "site.toml"
    f.write_text(text, encoding="utf-8")
    return str(f)


def test_defaults_without_flags_equal_the_dataclass_defaults():
    assert alarm_config_from_args(parse([])) == AlarmConfig()
    assert alarm_config_from_args(argparse.Namespace()) == AlarmConfig()  # options absent
    n = notify_settings_from_args(parse([]))
    assert (n.bell, n.on_alarm, n.fail_on) == (False, None, None)


def test_every_flag_reaches_its_field():
    args = parse(["--target-deg", "12", "--tolerance-deg", "2.5", "--watch-deg", "40",
                  "--watch-deg", "-35", "--watch-window-deg", "1.5", "--watch-db", "4",
                  "--broadening-frac", "0.3", "--gain-loss-db", "2", "--sll-limit-db", "-12",
                  "--stale-s", "8", "--input-rate", "0.5", "--raise-hold-s", "0",
                  "--clear-hold-s", "20"])
    c = alarm_config_from_args(args)
    assert (c.target_deg, c.tolerance_deg, c.watch_deg, c.watch_window_deg, c.watch_db) == \
        (12.0, 2.5, (40.0, -35.0), 1.5, 4.0)
    assert (c.broadening_frac, c.gain_loss_db, c.sll_limit_db, c.stale_s,
            c.input_rate_per_s, c.raise_hold_s, c.clear_hold_s) == \
        (0.3, 2.0, -12.0, 8.0, 0.5, 0.0, 20.0)


@pytest.mark.parametrize("argv", [["--tolerance-deg", "0"], ["--tolerance-deg", "abc"],
                                  ["--stale-s", "-1"], ["--raise-hold-s", "-2"],
                                  ["--watch-deg", "nan"], ["--fail-on", "cleared"],
                                  ["--fail-on", "loud"]])
def test_bad_flag_values_are_usage_errors(argv):
    with pytest.raises((argparse.ArgumentError, SystemExit)):
        parse(argv)


def test_help_names_units():
    p = argparse.ArgumentParser(prog="t")
    add_alarm_arguments(p)
    text = p.format_help()
    for needle in ("degrees", "dB", "seconds", "TOML", "--on-alarm", "without a shell"):
        assert needle in text


def test_example_file_loads_and_flags_override_it():
    c = alarm_config_from_args(parse(["--config", str(EXAMPLE)]))
    assert c.target_deg == 12.0 and c.tolerance_deg == 3.0
    assert c.watch_deg == (40.0, -35.0)
    assert c.holds("watch") == (5.0, 5.0)
    assert c.holds("stale") == (0.0, 2.0)
    assert c.watch_track_s == 600.0
    c2 = alarm_config_from_args(parse(["--config", str(EXAMPLE), "--tolerance-deg", "1.5",
                                       "--watch-deg", "10", "--raise-hold-s", "2"]))
    assert c2.tolerance_deg == 1.5 and c2.watch_deg == (10.0,) and c2.raise_hold_s == 2.0
    assert c2.target_deg == 12.0  # not overridden: the file's value stays
    AlarmEngine(c2)  # and the engine takes it


def test_file_sets_per_rule_holds_severity_and_disable(tmp_path):
    f = write(tmp_path, """
[alarms]
disable = ["input"]
[alarms.drift]
target_deg = 5
severity = "minor"
raise_hold_s = 1
[alarms.watch]
directions_deg = [10, 20.5]
track_s = 0
[notify]
bell = true
on_alarm = ["notify-tool", "--to", "ops desk"]
fail_on = "major"
on_alarm_timeout_s = 2
""")
    args = parse(["--config", f])
    c = alarm_config_from_args(args)
    assert c.disabled == ("input",) and c.target_deg == 5.0
    assert c.severities("drift") == ("minor", "major")
    assert c.holds("drift") == (1.0, 15.0)
    assert c.watch_deg == (10.0, 20.5) and c.watch_track_s is None
    n = notify_settings_from_args(args)
    assert n.bell and n.on_alarm == ("notify-tool", "--to", "ops desk")
    assert n.fail_on == "major" and n.on_alarm_timeout_s == 2.0
    n2 = notify_settings_from_args(parse(["--config", f, "--fail-on", "critical",
                                          "--on-alarm", "other 'a b'"]))
    assert n2.fail_on == "critical" and n2.on_alarm == ("other", "a b")


@pytest.mark.parametrize("text, needle", [
    ("[alarms.drift]\ntolerence_deg = 3\n", "tolerence_deg"),
    ("[alarms]\nraise_hold = 3\n", "raise_hold"),
    ("[alarms.drfit]\ntarget_deg = 3\n", "drfit"),
    ("[estimator]\nbin_deg = 1\n", "estimator"),
    ("[notify]\nbel = true\n", "bel"),
])
def test_unknown_keys_name_the_key_and_the_file(tmp_path, text, needle):
    f = write(tmp_path, text)
    with pytest.raises(InputFileError) as exc:
        alarm_config_from_args(parse(["--config", f]))
    msg = str(exc.value)
    assert needle in msg and f in msg and "\n" not in msg


@pytest.mark.parametrize("text, needle", [
    ("[alarms.drift]\ntolerance_deg = \"3\"\n", "expected a number"),
    ("[alarms.drift]\nsweeps = 2.5\n", "whole number"),
    ("[alarms.drift]\ntolerance_deg = -3\n", "positive"),
    ("[alarms.watch]\ndirections_deg = 40\n", "list of angles"),
    ("[alarms.gain_loss]\nseverity = \"loud\"\n", "loud"),
    ("[alarms]\ndisable = [\"nope\"]\n", "nope"),
    ("[alarms]\nraise_hold_s = true\n", "expected a number"),
    ("[alarms\n", "not valid TOML"),
    ("alarms = 3\n", "must be a table"),
    ("[notify]\nfail_on = \"cleared\"\n", "fail_on"),
    ("[notify]\non_alarm = \"a 'b\"\n", "quotes"),
])
def test_bad_file_values_are_one_line_user_errors(tmp_path, text, needle):
    f = write(tmp_path, text)
    with pytest.raises(UserError) as exc:
        args = parse(["--config", f])
        alarm_config_from_args(args)
        notify_settings_from_args(args)
    msg = str(exc.value)
    assert needle in msg and "\n" not in msg and f in msg


def test_missing_file(tmp_path):
    with pytest.raises(InputFileError, match="no such file"):
        alarm_config_from_args(parse(["--config", str(tmp_path / "nope.toml")]))


def test_every_rule_table_key_maps_to_a_config_field():
    names = set(AlarmConfig.__dataclass_fields__)
    for table in RULE_KEYS.values():
        assert set(table.values()) <= names


def test_hook_from_args(tmp_path):
    assert alarm_hook_from_args(parse([])) is None
    with pytest.raises(UserError, match="not found"):
        alarm_hook_from_args(parse(["--on-alarm", "no-such-command-xyz --flag"]))
    with pytest.raises(UserError, match="quotes"):
        alarm_hook_from_args(parse(["--on-alarm", "echo 'unbalanced"]))
    hook = alarm_hook_from_args(parse(["--on-alarm", "true"]))
    try:
        assert hook is not None and hook.argv == ["true"]
    finally:
        hook.close(2.0)
