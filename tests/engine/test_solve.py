"""The engine's own vectorised solvers, against analytic roots and maxima."""
from __future__ import annotations

import numpy as np

from loopwise.engine.solve import illinois, zoom_max, zoom_max_many


def test_illinois_finds_many_roots_at_once():
    # roots of cos(x) in brackets around (2k+1) pi / 2 (analytic)
    k = np.arange(50)
    a, b = k * np.pi + 0.1, k * np.pi + np.pi - 0.1
    x, ok = illinois(np.cos, a, b, 1e-15)
    assert ok.all()
    np.testing.assert_allclose(x, (2 * k + 1) * np.pi / 2, rtol=1e-14)


def test_illinois_marks_brackets_without_a_sign_change():
    x, ok = illinois(lambda t: t**2 + 1.0, [0.0, -1.0], [1.0, 2.0])
    assert not ok.any()


def test_zoom_max_refines_a_peak_in_log_frequency():
    # |1/(s^2 + 2 zeta s + 1)| at s = jw peaks at w = sqrt(1 - 2 zeta^2) (analytic)
    zeta = 0.05
    f = lambda w: 1.0 / np.abs(1.0 - w**2 + 2j * zeta * w)  # noqa: E731
    w, v = zoom_max(f, 0.5, 2.0)
    assert abs(w - np.sqrt(1 - 2 * zeta**2)) < 1e-9
    assert abs(v - 1.0 / (2 * zeta * np.sqrt(1 - zeta**2))) < 1e-9


def test_zoom_max_many_polish_takes_the_parabola_vertex_after_a_coarse_zoom():
    # the same resonance (analytic peak): stopping the zoom at a window of 1e-6 leaves the
    # best sample up to half a step off; the parabola's vertex through it and its
    # neighbours is far closer, and the value is exact to rounding either way
    zeta = 0.05
    f = lambda x, i: 1.0 / np.abs(1.0 - x**2 + 2j * zeta * x)  # noqa: E731
    peak, top = np.sqrt(1 - 2 * zeta**2), 1.0 / (2 * zeta * np.sqrt(1 - zeta**2))
    coarse = zoom_max_many(f, [0.5, 0.9], [2.0, 1.1], [True, True], points=13, rounds=20, xtol=1e-6)
    w, v = zoom_max_many(f, [0.5, 0.9], [2.0, 1.1], [True, True], points=13, rounds=20, xtol=1e-6,
                         polish=True)
    assert np.max(np.abs(coarse[0] - peak)) > 1e-9  # the coarse zoom alone is not there
    np.testing.assert_allclose(w, peak, rtol=1e-10)
    np.testing.assert_allclose(v, top, rtol=1e-14)
