"""How the reporters write quantities: one formatter per kind of number.

Times are shown in natural units (ns, us, ms, s, min, h: `34.2 min`, not
`2.05e+03 s`), spelled as the model language spells them; JSON keeps SI seconds.
Angles in degrees, gains in dB, frequencies in rad/s, ratios as plain numbers.
"""
from __future__ import annotations

import math

__all__ = ["finite", "fmt_time", "fmt_quantity", "fmt_delta"]

#: (seconds per unit, unit) from the largest down; the unit suffixes of the language
_TIME_UNITS = ((3600.0, "h"), (60.0, "min"), (1.0, "s"), (1e-3, "ms"), (1e-6, "us"), (1e-9, "ns"))


def finite(x) -> bool:
    """Whether `x` is a number that is neither None, infinite nor NaN."""
    return x is not None and math.isfinite(x)


def fmt_time(seconds, digits: int = 3) -> str:
    """A duration in the largest unit it reaches: `216 us`, `4.94 ms`, `2.25 min`, `1.5 h`;
    `inf` (or `-inf`) when unbounded."""
    if seconds is None or math.isnan(seconds):
        return "none"
    if math.isinf(seconds):
        return "inf" if seconds > 0 else "-inf"
    size = abs(seconds)
    for scale, unit in _TIME_UNITS:
        if size >= scale:
            break
    if size == 0.0:
        scale, unit = 1.0, "s"
    if 0.0 < size < _TIME_UNITS[-1][0]:  # below a nanosecond: seconds with an exponent, never "0 ns"
        return f"{seconds:.{digits}g} s"
    text = f"{seconds / scale:.{digits}g}"
    if "e" in text:  # beyond the largest unit: no exponent in hours
        text = f"{seconds / scale:.{digits}f}".rstrip("0").rstrip(".")
    return f"{text} {unit}"


def fmt_quantity(x, unit: str, digits: int = 4, none: str = "none") -> str:
    """A value in its metric's own unit (`deg`, `dB`, `s`, `rad/s` or a plain ratio `""`),
    times in natural units; `none` for a missing value, `inf` for an unbounded one."""
    if x is None:
        return none
    if unit == "s":
        return fmt_time(x, digits)
    if not math.isfinite(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.{digits}g}" + (f" {unit}" if unit else "")


def fmt_delta(delta: float, unit: str) -> str:
    """A signed change in the value's own unit: `-13.7 deg`, `+0.52 dB`, `-30 ms`."""
    if unit == "s":
        body = fmt_time(abs(delta), 4)
        return ("-" if delta < 0 else "+") + body
    return f"{delta:+.4g}" + (f" {unit}" if unit else "")
