"""Alarm rules over the pipeline's ticks: drift, broadening, gain loss, side lobe rise,
stale stream, input trouble and watched-direction change.

Pure and deterministic: :meth:`AlarmEngine.evaluate` reads only the :class:`Tick` it
is given (time comes from ``tick.t``), never a clock, a file or a socket, so a replay
of a recording re-judges it exactly as the live run did (or with other thresholds).

Each alarm (one per rule; one per direction for ``watch``) moves through a lifecycle::

    quiet --(condition seen)--> suspect --(held raise_hold_s)--> raised
      ^                            |                              |   ^
      |                     (condition gone)              (below clear  (back above
      +----------------------------+                       threshold)   clear threshold)
      |                                                           v   |
      +-----------------(held clear_hold_s)------------------- settling

Raise and clear thresholds differ (hysteresis): a value must go *above* the raise
threshold to start an alarm and *below* the lower clear threshold to end it, so a value
hovering at the threshold raises once.  Events are emitted on transitions only: the
raise (``suspect -> raised``), a severity change while raised, and the clear
(``settling -> quiet``).  ``suspect`` and ``settling`` are silent.

A metric the data cannot determine (``None``: no reference yet, no half-power points,
too few sweeps, a watched window with no valid bins) neither raises nor clears: the
alarm keeps its state and its timers run on, so a dropout neither hides a fault nor
invents one.

Severities are the ITU-T X.733 perceived-severity values (ITU-T Rec. X.733, "Alarm
reporting function", section 8.1.2.3): critical, major, minor, warning, indeterminate,
cleared.  Rule names, severities and thresholds are in :mod:`stream.alarm_config`;
the default mapping is in its ``DEFAULT_SEVERITY`` and docs/alarms.md.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass
from typing import Any

import numpy as np

from stream.alarm_config import RULES, SEVERITY_RANK, AlarmConfig
from stream.tick import Event, Tick

#: Lifecycle states of one alarm (see the module docstring).
STATES: tuple[str, ...] = ("quiet", "suspect", "raised", "settling")


@dataclass(frozen=True, slots=True)
class AlarmStatus:
    """One alarm as the UI lists it.

    ``since_t``: when the alarm was raised (``raised``/``settling``), when the
    condition was first seen (``suspect``), or when it last cleared (``quiet``; ``None``
    if never raised).  ``value`` is the last determinable measurement, ``determinable``
    whether the latest tick could measure it.
    """

    key: str
    rule: str
    state: str
    severity: str
    since_t: float | None
    value: float | None
    threshold: float | None
    unit: str
    message: str
    acknowledged: bool = False
    watch_deg: float | None = None
    determinable: bool = True

    @property
    def active(self) -> bool:
        """Raised and not yet cleared (``raised`` or ``settling``)."""
        return self.state in ("raised", "settling")


@dataclass(frozen=True, slots=True)
class _Reading:
    """A rule's verdict on one tick: ``level`` 0 clear, 1 raised, 2 escalated, ``None``
    undeterminable; ``value`` is what is reported (signed where that means something)."""

    value: float | None
    level: int | None
    threshold: float | None
    unit: str
    detail: str


@dataclass(slots=True)
class _Track:
    """Mutable lifecycle of one alarm.  ``phase_t``: when ``suspect``/``settling`` was
    entered; ``raised_t``: when it was raised (kept while settling); ``cleared_t``: last
    clear; ``pending_level``/``pending_t``: a severity change waiting for its hold."""

    key: str
    rule: str
    watch_deg: float | None = None
    state: str = "quiet"
    level: int = 0
    phase_t: float | None = None
    raised_t: float | None = None
    cleared_t: float | None = None
    pending_level: int | None = None
    pending_t: float | None = None
    value: float | None = None
    threshold: float | None = None
    unit: str = ""
    detail: str = ""
    acknowledged: bool = False
    determinable: bool = True


@dataclass(slots=True)
class _WatchBaseline:
    learn_start: float | None = None
    acc_lin: float = 0.0
    n: int = 0
    baseline_lin: float | None = None
    last_t: float | None = None
    latest_lin: float | None = None


def _hyst_level(m: float, cur: int, raise_th: float, clear_th: float,
                esc_th: float | None = None, desc_th: float | None = None) -> int:
    """Level of magnitude ``m`` given the current confirmed level (hysteresis)."""
    if not (m > raise_th or (cur >= 1 and m >= clear_th)):
        return 0
    if esc_th is not None and desc_th is not None and (m > esc_th or (cur >= 2 and m >= desc_th)):
        return 2
    return 1


def _wrap(a: np.ndarray | float) -> np.ndarray:
    return (np.asarray(a, dtype=np.float64) + 180.0) % 360.0 - 180.0


def _fmt(v: float | None, nd: int = 1) -> str:
    return "--" if v is None else f"{v:+.{nd}f}"


class AlarmEngine:
    """Evaluates every rule on each tick and keeps each alarm's lifecycle."""

    def __init__(self, config: AlarmConfig | None = None) -> None:
        self.config = config or AlarmConfig()
        self._tracks: dict[str, _Track] = {}
        self._watch: dict[str, _WatchBaseline] = {}
        self._input_hist: deque[tuple[float, int, int]] = deque()
        self._order: list[str] = []
        for rule in RULES:
            if rule in self.config.disabled:
                continue
            if rule == "watch":
                for a in self.config.watch_deg:
                    key = watch_key(a)
                    if key not in self._tracks:
                        self._tracks[key] = _Track(key, "watch", watch_deg=a)
                        self._watch[key] = _WatchBaseline()
                        self._order.append(key)
            else:
                self._tracks[rule] = _Track(rule, rule)
                self._order.append(rule)

    # -- public API --------------------------------------------------------------------
    def evaluate(self, tick: Tick) -> list[Event]:
        """Judge one tick; return the alarm events it caused (transitions only)."""
        events: list[Event] = []
        for key in self._order:
            tr = self._tracks[key]
            reading = self._read(tr, tick)
            ev = self._step(tr, reading, tick.t)
            if ev is not None:
                events.append(ev)
            if tr.rule == "watch":
                self._track_baseline(tr, tick)
        return events

    def active(self, include_pending: bool = False,
               include_quiet: bool = False) -> list[AlarmStatus]:
        """Raised alarms (``raised``/``settling``) for the UI, worst severity first, then
        oldest.  ``include_pending`` appends the ``suspect`` ones (condition seen, hold
        not over; severity ``cleared``), ``include_quiet`` also the quiet ones (implies
        pending)."""
        shown = {"raised", "settling"}
        if include_pending or include_quiet:
            shown.add("suspect")
        if include_quiet:
            shown.add("quiet")
        out = [self._status(tr) for tr in self._tracks.values() if tr.state in shown]
        phase = {"raised": 0, "settling": 0, "suspect": 1, "quiet": 2}

        def order(s: AlarmStatus) -> tuple:
            return (phase[s.state], -SEVERITY_RANK[s.severity],
                    s.since_t if s.since_t is not None else math.inf, self._order.index(s.key))
        return sorted(out, key=order)

    def acknowledge(self, key: str | None = None) -> list[str]:
        """Mark raised alarms as seen (all when ``key`` is None) without clearing them.

        Returns the keys newly acknowledged.  A clear, or an escalation to a worse
        severity, removes the acknowledgement (common practice: a worse condition must
        be seen again)."""
        done = []
        for tr in self._tracks.values():
            if (key is None or tr.key == key) and tr.state in ("raised", "settling") \
                    and not tr.acknowledged:
                tr.acknowledged = True
                done.append(tr.key)
        return done

    def reset(self) -> None:
        """Forget every state, baseline and history (e.g. after seeking backwards)."""
        self.__init__(self.config)  # type: ignore[misc]

    # -- lifecycle ---------------------------------------------------------------------
    def _step(self, tr: _Track, r: _Reading, t: float) -> Event | None:
        tr.determinable = r.level is not None
        tr.threshold = r.threshold
        tr.unit = r.unit
        if r.level is None:
            return None  # undeterminable: hold state and timers
        tr.value = r.value
        tr.detail = r.detail
        want = r.level
        raise_hold, clear_hold = self.config.holds(tr.rule)
        if tr.state == "quiet":
            if want == 0:
                return None
            tr.state, tr.phase_t = "suspect", t
        if tr.state == "suspect":
            if want == 0:
                tr.state, tr.phase_t = "quiet", None
                return None
            if t - tr.phase_t < raise_hold:  # type: ignore[operator]
                return None
            tr.state, tr.level, tr.raised_t, tr.phase_t = "raised", want, t, None
            tr.pending_level = tr.pending_t = None
            tr.acknowledged = False
            return self._event(tr, t, "raise")
        if tr.state == "settling":
            if want >= 1:
                tr.state, tr.phase_t = "raised", None  # never cleared: no event
            elif t - tr.phase_t >= clear_hold:  # type: ignore[operator]
                tr.state, tr.level, tr.phase_t, tr.cleared_t = "quiet", 0, None, t
                tr.pending_level = tr.pending_t = None
                ev = self._event(tr, t, "clear")
                tr.acknowledged = False
                return ev
            else:
                return None
        # raised
        if want == 0:
            tr.state, tr.phase_t = "settling", t
            tr.pending_level = tr.pending_t = None
            return None
        if want == tr.level:
            tr.pending_level = tr.pending_t = None
            return None
        if tr.pending_level != want:
            tr.pending_level, tr.pending_t = want, t
        up = want > tr.level
        if t - tr.pending_t < (raise_hold if up else clear_hold):  # type: ignore[operator]
            return None
        tr.level, tr.pending_level, tr.pending_t = want, None, None
        if up:
            tr.acknowledged = False
        return self._event(tr, t, "escalate" if up else "deescalate")

    def _severity(self, tr: _Track) -> str:
        if tr.state not in ("raised", "settling"):
            return "cleared"
        base, esc = self.config.severities(tr.rule)
        return esc if (tr.level >= 2 and esc is not None) else base

    def _message(self, tr: _Track, transition: str) -> str:
        name = f"watch {tr.watch_deg:g} deg" if tr.rule == "watch" else tr.rule.replace("_", " ")
        if tr.rule == "watch":
            head = {"raise": "changed", "clear": "back to baseline",
                    "escalate": "changed more", "deescalate": "changed less"}[transition]
        else:
            head = {"raise": "raised", "clear": "cleared", "escalate": "worse",
                    "deescalate": "less severe"}[transition]
        return f"{name}: {head}; {tr.detail}" if tr.detail else f"{name}: {head}"

    def _status_line(self, tr: _Track) -> str:
        name = f"watch {tr.watch_deg:g} deg" if tr.rule == "watch" else tr.rule.replace("_", " ")
        word = {"quiet": "ok", "suspect": "suspect (holding before raise)",
                "raised": "changed" if tr.rule == "watch" else "raised",
                "settling": "settling (holding before clear)"}[tr.state]
        if not tr.determinable:
            word += ", not measurable now"
        return f"{name}: {word}; {tr.detail}" if tr.detail else f"{name}: {word}"

    def _event(self, tr: _Track, t: float, transition: str) -> Event:
        data: dict[str, Any] = {
            "rule": tr.rule, "state": tr.state, "severity": self._severity(tr),
            "value": tr.value, "threshold": tr.threshold,
        }
        if tr.rule == "watch":
            data["watch_deg"] = tr.watch_deg
        data.update({"message": self._message(tr, transition), "key": tr.key,
                     "transition": transition, "unit": tr.unit})
        return Event(float(t), "alarm", data)

    def _status(self, tr: _Track) -> AlarmStatus:
        since = {"raised": tr.raised_t, "settling": tr.raised_t, "suspect": tr.phase_t,
                 "quiet": tr.cleared_t}[tr.state]
        return AlarmStatus(
            key=tr.key, rule=tr.rule, state=tr.state, severity=self._severity(tr),
            since_t=since, value=tr.value, threshold=tr.threshold, unit=tr.unit,
            message=self._status_line(tr),
            acknowledged=tr.acknowledged, watch_deg=tr.watch_deg,
            determinable=tr.determinable)

    # -- rules -------------------------------------------------------------------------
    def _read(self, tr: _Track, tick: Tick) -> _Reading:
        return getattr(self, f"_rule_{tr.rule}")(tr, tick)

    def _expected_hpbw(self, tick: Tick) -> tuple[float | None, str]:
        if tick.expected_hpbw_deg is not None:
            return tick.expected_hpbw_deg, "model"
        if tick.reference is not None and tick.reference.metrics.hpbw_deg is not None:
            return tick.reference.metrics.hpbw_deg, "reference"
        return None, ""

    def _rule_drift(self, tr: _Track, tick: Tick) -> _Reading:
        cfg = self.config
        target = tick.target_deg if tick.target_deg is not None else cfg.target_deg
        tol = tick.tolerance_deg if tick.tolerance_deg is not None else cfg.tolerance_deg
        if target is None:
            return _Reading(None, None, None, "deg", "no target set")
        if tol is None and cfg.tolerance_hpbw_frac is not None:
            hpbw, _ = self._expected_hpbw(tick)
            if hpbw is not None:
                tol = cfg.tolerance_hpbw_frac * hpbw
        if tol is None or not tol > 0:
            return _Reading(None, None, None, "deg", "no tolerance")
        peaks = np.asarray(tick.sweep_peaks_deg, dtype=np.float64)
        pt = np.asarray(tick.sweep_peak_t, dtype=np.float64)
        ok = np.isfinite(peaks) & (pt >= tick.t - cfg.drift_max_age_s)
        recent = peaks[ok][-cfg.drift_sweeps:]
        if recent.size < cfg.drift_min_sweeps:
            return _Reading(None, None, tol, "deg", "too few recent sweeps")
        offset = float(np.median(_wrap(recent - target)))
        m = abs(offset)
        margin = tol * cfg.drift_margin_frac
        esc = cfg.drift_critical_factor * tol
        level = _hyst_level(m, self._cur(tr), tol, tol - margin, esc, esc - margin)
        detail = (f"median peak of last {recent.size} sweeps is {_fmt(offset, 2)} deg off "
                  f"target {target:g} deg (tolerance {tol:.2f} deg)")
        return _Reading(offset, level, tol, "deg", detail)

    def _rule_broadening(self, tr: _Track, tick: Tick) -> _Reading:
        """Judged on the fraction HPBW / expected - 1; reported in degrees (the measured
        HPBW against the HPBW that would raise), which reads directly on a screen."""
        cfg = self.config
        expected, source = self._expected_hpbw(tick)
        hpbw = tick.metrics.hpbw_deg
        if expected is None or hpbw is None or not expected > 0:
            limit = None if expected is None else expected * (1 + cfg.broadening_frac)
            return _Reading(None, None, limit, "deg", "")
        frac = hpbw / expected - 1.0
        level = _hyst_level(frac, self._cur(tr), cfg.broadening_frac,
                            cfg.broadening_frac - cfg.broadening_margin_frac,
                            cfg.broadening_major_frac,
                            cfg.broadening_major_frac - cfg.broadening_margin_frac)
        limit = expected * (1 + cfg.broadening_frac)
        detail = (f"HPBW {hpbw:.2f} deg vs {expected:.2f} deg expected from the {source} "
                  f"({frac:+.0%}, limit +{cfg.broadening_frac:.0%} = {limit:.2f} deg)")
        return _Reading(hpbw, level, limit, "deg", detail)

    def _rule_gain_loss(self, tr: _Track, tick: Tick) -> _Reading:
        cfg = self.config
        ref = tick.reference.metrics.peak_power_db if tick.reference is not None else None
        peak = tick.metrics.peak_power_db
        if ref is None or peak is None:
            return _Reading(None, None, cfg.gain_loss_db, "dB", "")
        loss = ref - peak
        level = _hyst_level(loss, self._cur(tr), cfg.gain_loss_db,
                            cfg.gain_loss_db - cfg.gain_loss_margin_db, cfg.gain_loss_major_db,
                            cfg.gain_loss_major_db - cfg.gain_loss_margin_db)
        detail = (f"peak power {peak:.1f} dB is {loss:.1f} dB below the reference "
                  f"{ref:.1f} dB (limit {cfg.gain_loss_db:g} dB)")
        return _Reading(loss, level, cfg.gain_loss_db, "dB", detail)

    def _rule_sidelobe_rise(self, tr: _Track, tick: Tick) -> _Reading:
        cfg = self.config
        sll = tick.metrics.sll_db
        if sll is None:
            return _Reading(None, None, cfg.sll_limit_db, "dB", "")
        level = _hyst_level(sll, self._cur(tr), cfg.sll_limit_db,
                            cfg.sll_limit_db - cfg.sll_margin_db, cfg.sll_minor_db,
                            cfg.sll_minor_db - cfg.sll_margin_db)
        where = (f" at {tick.metrics.sll_angle_deg:.1f} deg"
                 if tick.metrics.sll_angle_deg is not None else "")
        detail = f"side lobe level {sll:.1f} dB{where} (limit {cfg.sll_limit_db:g} dB)"
        return _Reading(sll, level, cfg.sll_limit_db, "dB", detail)

    def _rule_stale(self, tr: _Track, tick: Tick) -> _Reading:
        cfg = self.config
        age = None if tick.last_sample_t is None else max(0.0, tick.t - tick.last_sample_t)
        said_stale = tick.source.state == "stale"
        if said_stale:
            level = 1
        elif age is None:
            level = 0
        else:
            level = _hyst_level(age, self._cur(tr), cfg.stale_s, cfg.stale_s / 2)
        detail = ("no samples yet" if age is None else
                  f"last sample {age:.1f} s ago (limit {cfg.stale_s:g} s)")
        if said_stale:
            detail += "; the source reports stale"
        return _Reading(age, level, cfg.stale_s, "s", detail)

    def _rule_input(self, tr: _Track, tick: Tick) -> _Reading:
        cfg = self.config
        total = tick.source.rejected_total + tick.source.lost
        hist = self._input_hist
        if hist and (total < hist[-1][1] or tick.t < hist[-1][0]):
            hist.clear()  # counters restarted or time went back: start over
        auth = tick.source.rejected.get("auth_failed", 0)
        hist.append((tick.t, total, auth))
        while len(hist) > 2 and hist[1][0] <= tick.t - cfg.input_window_s:
            hist.popleft()
        t0, n0, a0 = hist[0]
        if tick.t <= t0:
            return _Reading(None, None, cfg.input_rate_per_s, "1/s", "")
        rate = (total - n0) / max(tick.t - t0, cfg.input_window_s)
        level = _hyst_level(rate, self._cur(tr), cfg.input_rate_per_s,
                            cfg.input_rate_per_s * (1 - cfg.input_margin_frac))
        if auth - a0 >= cfg.input_auth_failures:  # keyless publishers knocking
            level = max(level, 1)
        rej = ", ".join(f"{k} {v}" for k, v in sorted(tick.source.rejected.items())) or "none"
        detail = (f"{rate:.2f} rejected or lost messages/s over {cfg.input_window_s:g} s "
                  f"(limit {cfg.input_rate_per_s:g}/s; rejected: {rej}; lost "
                  f"{tick.source.lost})")
        if auth > a0:
            detail = (f"{auth - a0} failed security handshakes (a publisher without the "
                      f"right CURVE keys) in {cfg.input_window_s:g} s; " + detail)
        return _Reading(rate, level, cfg.input_rate_per_s, "1/s", detail)

    def _window_power_lin(self, a: float, tick: Tick) -> float | None:
        ang = np.asarray(tick.angle_deg, dtype=np.float64)
        pw = np.asarray(tick.power_db, dtype=np.float64)
        sel = (np.abs(_wrap(ang - a)) <= self.config.watch_window_deg) & np.isfinite(pw)
        if not np.any(sel):
            return None
        return float(np.mean(10.0 ** (pw[sel] / 10.0)))

    def _rule_watch(self, tr: _Track, tick: Tick) -> _Reading:
        cfg = self.config
        wb = self._watch[tr.key]
        a = float(tr.watch_deg)  # type: ignore[arg-type]
        lin = self._window_power_lin(a, tick)
        if lin is None or not lin > 0:
            return _Reading(None, None, cfg.watch_db, "dB", "")
        if wb.baseline_lin is None:
            if tick.sweeps < 1:
                return _Reading(None, None, cfg.watch_db, "dB", "")
            if wb.learn_start is None:
                wb.learn_start = tick.t
            wb.acc_lin += lin
            wb.n += 1
            if tick.t - wb.learn_start < cfg.watch_learn_s:
                return _Reading(None, None, cfg.watch_db, "dB", "learning the baseline")
            wb.baseline_lin = wb.acc_lin / wb.n
            wb.last_t = tick.t
        base_db = 10.0 * math.log10(wb.baseline_lin)
        dev = 10.0 * math.log10(lin) - base_db
        level = _hyst_level(abs(dev), self._cur(tr), cfg.watch_db,
                            cfg.watch_db - cfg.watch_margin_db)
        detail = (f"power within +-{cfg.watch_window_deg:g} deg is {dev:+.1f} dB from its "
                  f"baseline {base_db:.1f} dB (limit {cfg.watch_db:g} dB)")
        wb.latest_lin = lin
        return _Reading(dev, level, cfg.watch_db, "dB", detail)

    def _track_baseline(self, tr: _Track, tick: Tick) -> None:
        """Follow a slow drift of a quiet direction's level (frozen while not quiet)."""
        wb = self._watch[tr.key]
        lin, wb.latest_lin = wb.latest_lin, None
        if lin is None or wb.baseline_lin is None or self.config.watch_track_s is None:
            return
        if tr.state == "quiet" and wb.last_t is not None and tick.t > wb.last_t:
            k = 1.0 - math.exp(-(tick.t - wb.last_t) / self.config.watch_track_s)
            wb.baseline_lin += k * (lin - wb.baseline_lin)
        wb.last_t = tick.t

    @staticmethod
    def _cur(tr: _Track) -> int:
        return tr.level if tr.state in ("raised", "settling") else 0


def watch_key(angle_deg: float) -> str:
    """Alarm key of a watched direction, e.g. ``watch@40``."""
    return f"watch@{float(angle_deg):g}"
