"""Units on literals, converted to SI at parse time.

Time is seconds, frequency rad/s, angle rad, `dB` and `%` become plain ratios.
Each unit also has a *kind*, so that a requirement can refuse a limit in a unit
that does not fit its metric (``phase_margin >= 6dB``).
"""
from __future__ import annotations

import math

__all__ = ["UNITS", "to_si", "unit_kind"]

# suffix -> (kind, conversion to SI)
UNITS: dict[str, tuple[str, object]] = {
    "ns": ("time", lambda v: v * 1e-9),
    "us": ("time", lambda v: v * 1e-6),
    "ms": ("time", lambda v: v * 1e-3),
    "min": ("time", lambda v: v * 60.0),
    "h": ("time", lambda v: v * 3600.0),
    "Hz": ("frequency", lambda v: v * 2.0 * math.pi),
    "kHz": ("frequency", lambda v: v * 2.0e3 * math.pi),
    "deg": ("angle", lambda v: math.radians(v)),
    "rad": ("angle", lambda v: v),
    "dB": ("gain", lambda v: 10.0 ** (v / 20.0)),
    "%": ("ratio", lambda v: v / 100.0),
}


def to_si(value: float, unit: str | None) -> float:
    """A number written with a unit suffix (`5ms`, `3dB`, `2Hz`) in SI: seconds, a gain
    ratio, radians, rad/s; a plain number as it is."""
    if unit is None:
        return value
    return UNITS[unit][1](value)  # type: ignore[operator]


def unit_kind(unit: str | None) -> str | None:
    """What a unit measures (`time`, `gain`, `angle`, `frequency`, `ratio`); None for none."""
    return None if unit is None else UNITS[unit][0]
