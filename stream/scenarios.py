"""Scripted situations for the simulated array (all invented for this project).

A :class:`Scenario` says how the truth changes with the time elapsed since the
simulator started: the direction of the far-end source relative to the array's
broadside (a drifting mast moves the measured main lobe), which element columns have
failed, and a reflector that raises or lowers the received power around one direction
for a while.  Every number here is made up to exercise the monitor and its alarms; none
describes a real installation.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np


@dataclass(frozen=True, slots=True)
class Scenario:
    """Time-scripted truth; times are seconds since the simulator's start.

    Drift: the peak direction leaves 0 deg at ``drift_start_s``, moves at
    ``drift_rate_deg_per_min`` to ``drift_max_deg``, holds for ``drift_hold_s`` and comes
    back at the same rate.  Failure: element ``fail_element`` (0 = one end column) stops
    at ``fail_at_s`` (``None``: never) and ``recover_at_s`` (``None``: stays dead).
    Reflector: between ``reflector_on_s`` and ``reflector_off_s`` the power within about
    ``reflector_width_deg`` of ``reflector_deg`` changes by ``reflector_db``.
    """

    name: str
    description: str
    mode: str = "sweep"
    drift_start_s: float | None = None
    drift_rate_deg_per_min: float = 1.0
    drift_max_deg: float = 5.0
    drift_hold_s: float = 300.0
    fail_at_s: float | None = None
    fail_element: int = 0
    recover_at_s: float | None = None
    reflector_deg: float | None = None
    reflector_db: float = 8.0
    reflector_width_deg: float = 4.0
    reflector_on_s: float = 120.0
    reflector_off_s: float = 300.0
    timeline: tuple[str, ...] = field(default_factory=tuple)

    def offset_deg(self, elapsed_s: np.ndarray | float) -> np.ndarray:
        """True peak direction (degrees from broadside) at each elapsed time."""
        e = np.asarray(elapsed_s, dtype=np.float64)
        if self.drift_start_s is None or self.drift_rate_deg_per_min == 0:
            return np.zeros_like(e)
        rate = abs(self.drift_rate_deg_per_min) / 60.0
        ramp_s = abs(self.drift_max_deg) / rate
        x = e - self.drift_start_s
        up = np.clip(x / ramp_s, 0.0, 1.0)
        down = np.clip((x - ramp_s - self.drift_hold_s) / ramp_s, 0.0, 1.0)
        return self.drift_max_deg * (up - down)

    def failed(self, elapsed_s: np.ndarray | float) -> np.ndarray:
        """True where the scripted element failure is in effect."""
        e = np.asarray(elapsed_s, dtype=np.float64)
        if self.fail_at_s is None:
            return np.zeros(e.shape, dtype=bool)
        on = e >= self.fail_at_s
        if self.recover_at_s is not None:
            on &= e < self.recover_at_s
        return on

    def reflector_gain_db(self, elapsed_s: np.ndarray | float,
                          angle_deg: np.ndarray | float) -> np.ndarray:
        """Power change in dB caused by the reflector (Gaussian window in angle)."""
        e = np.asarray(elapsed_s, dtype=np.float64)
        a = np.asarray(angle_deg, dtype=np.float64)
        if self.reflector_deg is None:
            return np.zeros(np.broadcast(e, a).shape)
        active = (e >= self.reflector_on_s) & (e < self.reflector_off_s)
        d = (a - self.reflector_deg + 180.0) % 360.0 - 180.0
        sigma = self.reflector_width_deg / 2.0
        return np.where(active, self.reflector_db * np.exp(-0.5 * (d / sigma) ** 2), 0.0)

    def to_dict(self) -> dict[str, Any]:
        d = asdict(self)
        d["timeline"] = list(self.timeline)
        return d


def _make() -> dict[str, Scenario]:
    steady = Scenario(
        "steady", "Aligned beam, receiver noise and slow fading only: no alarm should fire.",
        timeline=("whole run: peak at 0 deg, nothing changes",))
    sway = Scenario(
        "mast-sway",
        "Wind loading slowly turns the mast: the main lobe drifts 5 deg at 1 deg/min, "
        "stays there 5 min, then comes back.",
        drift_start_s=60.0, drift_rate_deg_per_min=1.0, drift_max_deg=5.0,
        drift_hold_s=300.0,
        timeline=("60 s: drift starts at 1 deg/min",
                  "180 s: true peak passes 2 deg",
                  "360 s: peak at 5 deg, held for 300 s",
                  "660 s: drift back starts",
                  "840 s: true peak back under 2 deg",
                  "960 s: back at 0 deg"))
    dead = Scenario(
        "dead-column",
        "One end column of the array stops at 120 s: the main lobe widens and the peak "
        "drops (about 2.5 dB for 4 elements).",
        fail_at_s=120.0, fail_element=0,
        timeline=("120 s: element 0 fails and stays dead",))
    refl = Scenario(
        "reflector",
        "Something reflective appears near 35 deg at 120 s and leaves at 300 s: the "
        "power around 35 deg rises by about 8 dB meanwhile.",
        reflector_deg=35.0, reflector_db=8.0, reflector_width_deg=6.0,
        reflector_on_s=120.0, reflector_off_s=300.0,
        timeline=("120 s: +8 dB around 35 deg", "300 s: back to baseline"))
    turn = Scenario(
        "turntable",
        "The array sits on a mount turning full circles, so the whole pattern "
        "including the back lobe is seen (front-to-back about 25 dB).",
        mode="mount", timeline=("whole run: mount turns 360 deg continuously",))
    return {s.name: s for s in (steady, sway, dead, refl, turn)}


#: Scenario name -> scenario (description, parameters, timeline).
SCENARIOS: dict[str, Scenario] = _make()


def get_scenario(name: str) -> Scenario:
    """The named scenario, or ``ValueError`` listing the names."""
    try:
        return SCENARIOS[name]
    except KeyError:
        raise ValueError(f"unknown scenario {name!r}; choose from "
                         f"{', '.join(SCENARIOS)}") from None
