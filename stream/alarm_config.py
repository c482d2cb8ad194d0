"""Alarm settings: rule names, X.733 severities and every threshold with its default.

Kept apart from the rules themselves (:mod:`stream.alarms`) because the command line,
the settings file, the fleet table and the exporter read and check settings without
running an engine.  Severities are the ITU-T X.733 perceived-severity values (ITU-T Rec.
X.733, "Alarm reporting function", section 8.1.2.3).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from typing import Any

from stream.errors import UserError

#: Rule names, in evaluation (and event) order.
RULES: tuple[str, ...] = ("drift", "broadening", "gain_loss", "sidelobe_rise", "stale",
                          "input", "watch")

#: ITU-T X.733 perceived severities, most severe first.
SEVERITIES: tuple[str, ...] = ("critical", "major", "minor", "warning", "indeterminate",
                               "cleared")

#: Order used for sorting and for ``--fail-on`` (higher is worse).
SEVERITY_RANK: dict[str, int] = {"critical": 5, "major": 4, "minor": 3, "warning": 2,
                                 "indeterminate": 1, "cleared": 0}

#: Default (base, escalated) severity per rule.  The escalated severity applies beyond
#: the rule's second threshold (e.g. drift beyond 2 x tolerance is critical); ``None``
#: means the rule has a single level.
DEFAULT_SEVERITY: dict[str, tuple[str, str | None]] = {
    "drift": ("major", "critical"),
    "broadening": ("minor", "major"),
    "gain_loss": ("minor", "major"),
    "sidelobe_rise": ("warning", "minor"),
    "stale": ("major", None),
    "input": ("warning", None),
    "watch": ("warning", None),
}

#: Built-in per-rule (raise, clear) hold times in seconds that differ from the global
#: ones (``None``: use the global value).  Stale raises at once because ``stale_s``
#: already is its persistence time, and clears 2 s after samples flow again.
RULE_HOLD_DEFAULTS: dict[str, tuple[float | None, float | None]] = {"stale": (0.0, 2.0)}

_STEP_UP = {"warning": "minor", "minor": "major", "major": "critical", "critical": "critical",
            "indeterminate": "indeterminate"}


def severity_at_least(severity: str, floor: str) -> bool:
    """True when ``severity`` is ``floor`` or worse (``cleared`` never is)."""
    if severity == "cleared":
        return False
    return SEVERITY_RANK.get(severity, 0) >= SEVERITY_RANK[floor]


@dataclass(frozen=True)
class AlarmConfig:
    """Every alarm threshold, with its default.  Units are in the field names.

    Drift (needs a target; ``tick.target_deg``/``tick.tolerance_deg`` from the monitor
    take precedence over ``target_deg``/``tolerance_deg`` here):

    * the offset is the median of the last ``drift_sweeps`` per-sweep peak angles (at
      least ``drift_min_sweeps``, none older than ``drift_max_age_s``) minus the target;
    * raised when \\|offset\\| > tolerance, cleared when \\|offset\\| < tolerance x
      (1 - ``drift_margin_frac``), critical beyond ``drift_critical_factor`` x tolerance;
    * without a tolerance, ``tolerance_hpbw_frac`` x the expected HPBW (model, else
      reference) is used -- a rule of thumb, see docs/alarms.md; ``None`` disables it.

    Broadening: HPBW / expected HPBW - 1 above ``broadening_frac`` (major above
    ``broadening_major_frac``); expected = array model, else the captured reference.

    Gain loss: reference peak power - current peak power above ``gain_loss_db`` dB
    (major above ``gain_loss_major_db``); needs a captured reference.

    Side lobe rise: ``sll_db`` above ``sll_limit_db`` (minor above ``sll_minor_db``).

    Stale: ``tick.t - tick.last_sample_t > stale_s`` or the source reports ``stale``;
    cleared once samples are younger than ``stale_s / 2`` again.

    Input: (rejected + lost messages) per second over the last ``input_window_s`` above
    ``input_rate_per_s``; cleared below ``input_rate_per_s x (1 - input_margin_frac)``.
    Also raised by ``input_auth_failures`` failed security handshakes (a publisher
    without the right CURVE keys, ``rejected["auth_failed"]``) within ``input_window_s``.

    Watch: for each angle in ``watch_deg``, the mean linear power within
    +-``watch_window_deg`` is compared with a baseline learned over the first
    ``watch_learn_s`` seconds after the first complete sweep, then followed by a slow
    exponential average (time constant ``watch_track_s``; ``None`` keeps it fixed) that
    is frozen while the direction is not quiet.  \\|departure\\| > ``watch_db`` ->
    "changed"; \\|departure\\| < ``watch_db - watch_margin_db`` held -> "back to baseline".

    Hold times: a condition must persist ``raise_hold_s`` to raise and its absence
    ``clear_hold_s`` to clear (also used for severity up/down changes);
    ``rule_raise_hold_s`` / ``rule_clear_hold_s`` override them per rule.  Built-in
    exception (:data:`RULE_HOLD_DEFAULTS`): stale raises at once (``stale_s`` already is
    its persistence time) and clears after 2 s.

    ``severity`` overrides a rule's base severity (the escalated level becomes one step
    up); ``disabled`` lists rules that are never evaluated.
    """

    target_deg: float | None = None
    tolerance_deg: float | None = None
    tolerance_hpbw_frac: float | None = 0.25
    drift_sweeps: int = 5
    drift_min_sweeps: int = 3
    drift_max_age_s: float = 120.0
    drift_margin_frac: float = 0.2
    drift_critical_factor: float = 2.0
    broadening_frac: float = 0.25
    broadening_major_frac: float = 0.5
    broadening_margin_frac: float = 0.05
    gain_loss_db: float = 3.0
    gain_loss_major_db: float = 6.0
    gain_loss_margin_db: float = 1.0
    sll_limit_db: float = -10.0
    sll_minor_db: float = -7.0
    sll_margin_db: float = 1.0
    stale_s: float = 5.0
    input_rate_per_s: float = 1.0
    input_window_s: float = 10.0
    input_margin_frac: float = 0.5
    input_auth_failures: int = 3
    watch_deg: tuple[float, ...] = ()
    watch_window_deg: float = 2.0
    watch_db: float = 3.0
    watch_margin_db: float = 1.0
    watch_learn_s: float = 30.0
    watch_track_s: float | None = 600.0
    raise_hold_s: float = 5.0
    clear_hold_s: float = 15.0
    rule_raise_hold_s: Mapping[str, float] = field(default_factory=dict)
    rule_clear_hold_s: Mapping[str, float] = field(default_factory=dict)
    severity: Mapping[str, str] = field(default_factory=dict)
    disabled: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "watch_deg", tuple(float(a) for a in self.watch_deg))
        object.__setattr__(self, "disabled", tuple(str(r) for r in self.disabled))
        object.__setattr__(self, "rule_raise_hold_s", dict(self.rule_raise_hold_s))
        object.__setattr__(self, "rule_clear_hold_s", dict(self.rule_clear_hold_s))
        object.__setattr__(self, "severity", dict(self.severity))
        self.validate()

    def validate(self) -> None:
        """Reject values no rule can work with (one-line :class:`UserError`)."""
        def bad(name: str, why: str) -> UserError:
            return UserError(f"alarm setting {name} = {getattr(self, name)!r}: {why}")

        positive = ("tolerance_deg", "tolerance_hpbw_frac", "drift_max_age_s",
                    "broadening_frac", "broadening_major_frac", "gain_loss_db",
                    "gain_loss_major_db", "stale_s", "input_rate_per_s", "input_window_s",
                    "input_auth_failures",
                    "watch_window_deg", "watch_db", "watch_track_s",
                    "drift_critical_factor")
        for name in positive:
            v = getattr(self, name)
            if v is not None and not (math.isfinite(v) and v > 0):
                raise bad(name, "must be a positive number")
        non_negative = ("drift_margin_frac", "broadening_margin_frac", "gain_loss_margin_db",
                        "sll_margin_db", "input_margin_frac", "watch_margin_db",
                        "watch_learn_s", "raise_hold_s", "clear_hold_s")
        for name in non_negative:
            v = getattr(self, name)
            if not (math.isfinite(v) and v >= 0):
                raise bad(name, "must be zero or a positive number")
        for name in ("sll_limit_db", "sll_minor_db"):
            if not math.isfinite(getattr(self, name)):
                raise bad(name, "must be a finite number of dB")
        if self.target_deg is not None and not math.isfinite(self.target_deg):
            raise bad("target_deg", "must be a finite angle in degrees")
        if self.drift_sweeps < 1 or self.drift_min_sweeps < 1:
            raise bad("drift_sweeps", "drift_sweeps and drift_min_sweeps must be at least 1")
        if self.drift_min_sweeps > self.drift_sweeps:
            raise bad("drift_min_sweeps", "must not exceed drift_sweeps")
        if self.drift_margin_frac >= 1 or self.input_margin_frac >= 1:
            raise bad("drift_margin_frac", "margin fractions must be below 1")
        if self.watch_margin_db >= self.watch_db:
            raise bad("watch_margin_db", "must be smaller than watch_db")
        if self.broadening_margin_frac >= self.broadening_frac:
            raise bad("broadening_margin_frac", "must be smaller than broadening_frac")
        if self.drift_critical_factor <= 1:
            raise bad("drift_critical_factor", "must be above 1")
        for a in self.watch_deg:
            if not math.isfinite(a):
                raise bad("watch_deg", "every watched direction must be a finite angle")
        for name in ("rule_raise_hold_s", "rule_clear_hold_s", "severity"):
            for rule, v in getattr(self, name).items():
                if rule not in RULES:
                    raise bad(name, f"unknown rule {rule!r}; rules are {', '.join(RULES)}")
                if name == "severity":
                    if v not in SEVERITIES or v == "cleared":
                        raise bad(name, f"unknown severity {v!r} for {rule}; choose from "
                                        f"{', '.join(SEVERITIES[:-1])}")
                elif not (math.isfinite(v) and v >= 0):
                    raise bad(name, f"hold time for {rule} must be zero or positive")
        for rule in self.disabled:
            if rule not in RULES:
                raise bad("disabled", f"unknown rule {rule!r}; rules are {', '.join(RULES)}")

    def holds(self, rule: str) -> tuple[float, float]:
        """(raise hold, clear hold) in seconds for ``rule``: the per-rule setting, else
        the built-in per-rule default (:data:`RULE_HOLD_DEFAULTS`), else the global one."""
        dr, dc = RULE_HOLD_DEFAULTS.get(rule, (None, None))
        r = self.rule_raise_hold_s.get(rule, self.raise_hold_s if dr is None else dr)
        c = self.rule_clear_hold_s.get(rule, self.clear_hold_s if dc is None else dc)
        return float(r), float(c)

    def severities(self, rule: str) -> tuple[str, str | None]:
        """(base, escalated) severity for ``rule`` after overrides."""
        base, esc = DEFAULT_SEVERITY[rule]
        if rule in self.severity:
            base = self.severity[rule]
            esc = _STEP_UP[base] if esc is not None else None
        return base, esc

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready settings (recorded in session metadata)."""
        out: dict[str, Any] = {}
        for f in fields(self):
            v = getattr(self, f.name)
            out[f.name] = list(v) if isinstance(v, tuple) else (
                dict(v) if isinstance(v, Mapping) else v)
        return out
