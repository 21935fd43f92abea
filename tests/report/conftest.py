"""Shared loops for the report tests.

Each loop is a small model in the .loop language, checked by the real pipeline
(`loopwise.analysis.check_text`); beside it the same loop as zeros, poles, gain
and delay, for tests that compare the drawing with a formula.
"""
from __future__ import annotations

import numpy as np
import pytest

from loopwise.analysis import check_text
from loopwise.results import BreakResult

#: name -> (model text, (zeros, poles, gain, delay), has axis poles)
LOOPS = {
    # invented: an integrating plant behind a delay, P control; stable (K = 3 < 6 without delay)
    "integrator_delay": ("""model integrator_delay
input r
block C = 3
e = r - y
y = [exp(-50ms*s)/(s*(s+1)*(s+2))](C(e))
break loop at y
""", ([], [0, -1, -2], 3.0, 0.05), True),
    # invented: open-loop unstable first-order plant; P = 1, N = -1, Z = 0
    "unstable_plant": ("""model unstable_plant
input r
e = r - y
y = [2/(s-1)](e)
break loop at y
""", ([], [1], 2.0, 0.0), False),
    # invented: three lags, modest gain: the whole curve stays near the unit circle
    "three_lags": ("""model three_lags
input r
e = r - y
y = [2/(s+1)^3](e)
break loop at y
""", ([], [-1, -1, -1], 2.0, 0.0), False),
    # invented: three lags with too much gain: N = 2, Z = 2
    "three_lags_high": ("""model three_lags_high
input r
e = r - y
y = [10/(s+1)^3](e)
break loop at y
""", ([], [-1, -1, -1], 10.0, 0.0), False),
    # invented: double integrator with a lead: axis poles, stable
    "double_integrator": ("""model double_integrator
input r
e = r - y
y = [2*(s+0.5)/(s^2*(0.05*s+1))](e)
break loop at y
""", ([-0.5], [0, 0, -20], 40.0, 0.0), True),
    # invented: a lightly supported mass on a spring with no damping: an undamped
    # pole pair on the axis at 2 rad/s, indented; stable with two gain crossovers
    "undamped_pair": ("""model undamped_pair
input r
e = r - y
y = [0.5*(s+1)/((s^2+4)*(s+2))](e)
break loop at y
""", ([-1], [2j, -2j, -2], 0.5, 0.0), True),
    # invented: a triple integrator with a double lead, stable only for a range of gains
    # (Routh on 0.1 s^4 + s^3 + 4 s^2 + 3.2 s + 0.64: first column 0.1, 1, 3.68, 3.03, 0.64)
    "type_three": ("""model type_three
input r
e = r - y
y = [4*(s+0.4)^2/(s^3*(0.1*s+1))](e)
break loop at y
""", ([-0.4, -0.4], [0, 0, 0, -10], 40.0, 0.0), True),
    # invented: a negative loop gain, L(0) = -0.5; closed-loop pole s = -0.5
    "negative_gain": ("""model negative_gain
input r
e = r - y
y = [-0.5/(s+1)](e)
break loop at y
""", ([], [-1], -0.5, 0.0), False),
    # invented: a lag and a lightly damped pair; stable with a small margin
    # (s^3 + 1.8 s^2 + 1.8 s + 3: 1.8 * 1.8 = 3.24 > 3), min |1 + L| about 0.068
    "small_margin": ("""model small_margin
input r
e = r - y
y = [2/((s+1)*(s^2+0.8*s+1))](e)
break loop at y
""", ([], [-1, -0.4 + 0.9165j, -0.4 - 0.9165j], 2.0, 0.0), False),
    # invented: the same loop with a little more gain barely encircles -1 (1.8 * 1.8 < 3.5)
    "barely_unstable": ("""model barely_unstable
input r
e = r - y
y = [2.5/((s+1)*(s^2+0.8*s+1))](e)
break loop at y
""", ([], [-1, -0.4 + 0.9165j, -0.4 - 0.9165j], 2.5, 0.0), False),
}


def loop_result(name: str) -> BreakResult:
    text, _, _ = LOOPS[name]
    return check_text(text, file=f"{name}.loop").breaks[0]


@pytest.fixture(scope="session")
def loops() -> dict[str, BreakResult]:
    return {name: loop_result(name) for name in LOOPS}


def write_models(folder):
    folder.mkdir()
    for name, (text, _, _) in LOOPS.items():
        (folder / f"{name}.loop").write_text(text, encoding="utf-8")
    return folder


@pytest.fixture
def model_files(tmp_path):
    """The loops written as model files in a temporary folder."""
    return write_models(tmp_path / "models")


def drawn_line(fig, gid: str) -> np.ndarray:
    """The drawn points of the one line with this gid, as complex numbers; NaN gaps
    (lines broken at axis poles) dropped."""
    found = [l for ax in fig.axes for l in ax.get_lines() if l.get_gid() == gid]
    assert len(found) == 1, gid
    x, y = found[0].get_data()
    z = np.asarray(x, float) + 1j * np.asarray(y, float)
    return z[np.isfinite(z)]
