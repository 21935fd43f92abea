"""Balanced disk margin, Ms and Mt vs python-control 0.10.2.

Reference: `control.disk_margins(L, omega, skew=0.0, returnall=True)` (signature
checked in the installed 0.10.2: `disk_margins(L, omega, skew=0.0, returnall=False)`,
returning the disk margin alpha, the disk gain margin in dB and the disk phase
margin in deg per frequency), and `control.feedback` for S = 1/(1 + L) and
T = L/(1 + L) evaluated with `control.frequency_response`.

Our values are the refined maxima over the whole axis, so on python-control's
frequency grid: (a) at our critical frequency python-control gives the same
alpha, gain margin and phase (relative 1e-9: the same point of the same
function, computed independently); (b) nowhere on a dense grid is its alpha
smaller than ours, or its |S| and |T| larger than our Ms and Mt (relative
1e-9); (c) its grid minimum lies within 1e-4 of ours (the grid is that fine).

The set: stable delay-free loops (no poles on the axis but integrators) of
tests/reference/loopsets.py `delay_free_loops()` (orders 1-8, every fourth
case, as in test_margins_vs_python_control.py), plus Seiler, Packard &
Gahinet's example L = 25/(s^3 + 10 s^2 + 10 s + 10) (IEEE Control Systems
Magazine, 2020).
"""
from __future__ import annotations

import functools
import warnings

import control
import numpy as np
import pytest

from loopwise.testing import analyse_loop
from loopwise.transfer import Transfer

from .loopsets import LoopCase, closed_loop_rhp, delay_free_loops, near_axis

_SEILER = LoopCase("seiler-2020", "paper", (), tuple(complex(r) for r in np.roots([1, 10, 10, 10])), 25.0)


def _stable_cases() -> list[LoopCase]:
    out = []
    for c in [c for c in delay_free_loops() if len(c.poles) <= 8][::4] + [_SEILER]:
        if any(p.real == 0 and p.imag != 0 for p in c.poles):
            continue
        z, poles = closed_loop_rhp(c)
        if z == 0 and not near_axis(poles, 1e-6):
            out.append(c)
    return out


CASES = _stable_cases()
_BY_NAME = {c.name: c for c in CASES}


@functools.lru_cache(maxsize=None)
def _ours(name: str):
    c = _BY_NAME[name]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = analyse_loop(Transfer.from_zpk(list(c.zeros), list(c.poles), c.gain))
    assert res.stable, name
    return res


def _grid(res, at: float) -> np.ndarray:
    """3000 points over the engine's axis range, 1000 more within 1 % of `at`."""
    w = res.response.freq
    lo, hi = max(w[w > 0].min(), 1e-6), w.max()
    near = at * np.linspace(0.99, 1.01, 1001) if 0 < at < np.inf else np.empty(0)
    return np.sort(np.concatenate([np.geomspace(lo, hi, 3000), near]))


def _point(freq: float, case: LoopCase) -> float:
    """Where to ask python-control: the frequency itself, or near a limit (w -> inf, or
    w -> 0 with an integrator)."""
    if freq == np.inf:
        return 1e9
    if freq == 0.0 and any(p == 0 for p in case.poles):
        return 1e-9
    return freq


def _interior(freq: float) -> bool:
    """The sup is attained at a finite nonzero frequency (not a limit w -> 0 or inf)."""
    return 0 < freq < np.inf


def test_the_set_is_not_empty():
    assert len(CASES) >= 10


@pytest.mark.parametrize("name", [c.name for c in CASES], ids=[f"pc-disk_margins-{c.name}" for c in CASES])
def test_disk_margin_vs_python_control(name):
    res = _ours(name)
    d = res.margins.disk_margin
    sys = _BY_NAME[name].to_control()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        at = _point(d.freq, _BY_NAME[name])
        dm, dgm, dpm = control.disk_margins(sys, np.array([at]), skew=0.0, returnall=True)
        grid_dm, _, _ = control.disk_margins(sys, _grid(res, d.freq), skew=0.0, returnall=True)
    assert d.alpha == pytest.approx(dm[0], rel=1e-9 if at == d.freq else 1e-6)
    if np.isfinite(dgm[0]):
        assert d.gain_db[1] == pytest.approx(dgm[0], rel=1e-9)
        assert d.gain_db[0] == pytest.approx(-dgm[0], rel=1e-9)
    else:
        assert d.gain_db[1] == np.inf
    assert d.phase_deg == pytest.approx(dpm[0], rel=1e-6)
    assert grid_dm.min() >= d.alpha * (1 - 1e-9)
    if _interior(d.freq):
        assert grid_dm.min() == pytest.approx(d.alpha, rel=1e-6)


@pytest.mark.parametrize("name", [c.name for c in CASES], ids=[f"pc-feedback-peaks-{c.name}" for c in CASES])
def test_sensitivity_peaks_vs_python_control(name):
    res = _ours(name)
    m = res.margins
    sys = _BY_NAME[name].to_control()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for peak, sens in ((m.sensitivity_peak, control.feedback(1, sys)),
                           (m.complementary_peak, control.feedback(sys, 1))):
            mag = np.abs(control.frequency_response(sens, _grid(res, peak.freq)).magnitude).ravel()
            assert mag.max() <= peak.value * (1 + 1e-9)
            if _interior(peak.freq):
                assert mag.max() == pytest.approx(peak.value, rel=1e-6)
