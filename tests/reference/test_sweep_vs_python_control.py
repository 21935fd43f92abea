"""`sweep`'s worst phase margin against a brute-force grid of python-control 0.10.2
`control.stability_margins(L, returnall=True)` over the same box, on a delay-free loop
whose worst phase margin lies inside the box (a crossover landing on a phase dip).

L = K (1 + s)/(s (1 + 3 s)) * (1 + s/z)/(1 + 3 s/z): two lag sections of ratio 3,
one fixed (deepest at w = 1/sqrt(3)), one that moves with z (deepest at
w = z/sqrt(3)). Each lags at most asin((3 - 1)/(3 + 1)) = 30 deg (re-derived: the
phase of (1 + j w a)/(1 + j w b) peaks at sqrt(1/(a b)) with sin = (b - a)/(b + a)).
At z = 1 both dips sit at w = 1/sqrt(3), and |L| = 1 there for K = sqrt(3)
(|1/(j w)| = sqrt(3), each section 1/sqrt(3)): PM = 180 - 90 - 30 - 30 = 30 deg,
the smallest over the box, at (K, z) = (1.732, 1), inside K in [0.5, 6], z in [0.3, 3].
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from tests.sweep.recording import sweep_recorded

control = pytest.importorskip("control")

MODEL = """model two_lags
param K = 1 in [0.5, 6]
param z = 2 in [0.3, 3]
input r
e = r - y
y = [K*(1 + s)/(s*(1 + 3*s))*(1 + s/z)/(1 + 3*s/z)](e)
break loop at y
"""


def python_control_pm(K: float, z: float) -> float:
    s = control.tf("s")
    L = K * (1 + s) / (s * (1 + 3 * s)) * (1 + s / z) / (1 + 3 * s / z)
    _, pm, _, _, _, _ = control.stability_margins(L, returnall=True)
    return float(np.min(np.abs(pm)))


def test_worst_phase_margin_inside_the_box_matches_a_python_control_grid(tmp_path):
    grid_K, grid_z = np.linspace(0.5, 6.0, 41), np.linspace(0.3, 3.0, 40)
    grid = np.array([[python_control_pm(K, z) for z in grid_z] for K in grid_K])
    i, j = np.unravel_index(np.argmin(grid), grid.shape)
    assert 0 < i < len(grid_K) - 1 and 0 < j < len(grid_z) - 1  # the grid's worst is inside the box
    assert grid.min() == pytest.approx(30.0, abs=0.5)  # the analytic minimum, above

    path = tmp_path / "two_lags.loop"
    path.write_text(MODEL)
    result, errors, plants = sweep_recorded(path, samples=40, seed=0)
    assert not errors and result.stable_everywhere
    worst = dict(result.breaks[0].worst)["phase_margin_deg"]
    assert abs(worst.value - grid.min()) <= 0.5
    assert worst.value >= 30.0 - 1e-6  # no plant beats the analytic minimum
    at = dict(worst.at)
    assert 0.5 < at["K"] < 6.0 and 0.3 < at["z"] < 3.0
    # the search did the work: the design alone (corners and space-filling set) was further off
    design = [o.breaks[0].value("phase_margin") for _, o in plants[:4 + 40]]
    assert min(design) > worst.value
    # the sweep's own value at its worst plant is python-control's there
    assert worst.value == pytest.approx(python_control_pm(at["K"], at["z"]), abs=1e-6)
