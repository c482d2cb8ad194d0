"""Brute-force array patterns for the commissioning tests: a plain complex sum over the
elements (the array factor's definition, Balanis, *Antenna Theory*, 3rd ed., ch. 6, from
memory) times cos^q, written independently of stream.array_model and stream.fit."""

from __future__ import annotations

import numpy as np

FLOOR_REL = 1e-5  # noise floor of the brute-force patterns, linear re the N^2 peak


def brute_db(angle_deg, n, spacing_wl=0.5, steer_deg=0.0, q=0.0, amps=None, floor=FLOOR_REL):
    """10 log10(cos^q(theta) |sum_k a_k exp(j 2 pi d k (sin theta - sin theta0))|^2 + floor),
    one term per element (no closed form, no shared code)."""
    th = np.deg2rad(np.asarray(angle_deg, dtype=float))
    amps = np.ones(n) if amps is None else np.asarray(amps, dtype=float)
    field = np.zeros(th.shape, dtype=complex)
    for k in range(n):
        field += amps[k] * np.exp(1j * 2 * np.pi * spacing_wl * k
                                  * (np.sin(th) - np.sin(np.deg2rad(steer_deg))))
    elem = np.where(np.cos(th) > 0, np.cos(th), 0.0) ** q if q else np.ones_like(th)
    return 10 * np.log10(elem * np.abs(field) ** 2 + floor * n * n)
