"""The margins stage on its own (test-only contour samples) and through analyse_loop.

Each expected value is derived in a comment: Routh conditions on the closed-loop
polynomial (re-derived here), numpy.roots of that polynomial, or a formula.
"""
from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from loopwise.testing import analyse_loop
from loopwise.engine.margins import loop_margins, stabilising_gains
from loopwise.results import LoopResponse
from loopwise.transfer import Transfer

from margin_contour import contour_response, rational


def _stable(num, den, k) -> bool:
    """numpy.roots of den + k num: every closed-loop pole in the open left half plane."""
    return bool(np.all(np.roots(np.polyadd(den, k * np.asarray(num, float))).real < 0))


def _analyse(L: Transfer):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse_loop(L)


def test_same_margins_from_two_different_samplings():
    """Refined values do not depend on where the contour was sampled: the engine's adaptive
    samples and the dense test grid give the same numbers (3/(s+1)^3 and a delayed integrator)."""
    for L, poles in ((Transfer.from_zpk([], [-1, -1, -1], 3), ()),
                     (Transfer.from_zpk([-2], [0, -1, -10], 8, delay=0.05), (0.0,))):
        a = _analyse(L).margins
        b = loop_margins(L.evaluate, contour_response(L.evaluate, poles, w_hi=1e3), 0)
        assert [g.freq for g in a.gain_crossovers] == pytest.approx([g.freq for g in b.gain_crossovers],
                                                                    rel=1e-12)
        # (the reported lists end where each sampling ends; the first ones must agree)
        assert a.phase_crossovers[0].freq == pytest.approx(b.phase_crossovers[0].freq, rel=1e-12)
        assert a.gain_margin_up_db == pytest.approx(b.gain_margin_up_db, rel=1e-12)
        assert a.disk_margin.alpha == pytest.approx(b.disk_margin.alpha, rel=1e-12)
        assert a.sensitivity_peak.value == pytest.approx(b.sensitivity_peak.value, rel=1e-12)
        assert a.delay_margin_s == pytest.approx(b.delay_margin_s, rel=1e-12)


def test_unstable_loop_with_comfortable_looking_crossovers_gets_no_margins():
    """L = 3(s + 0.5)/((s - 1)(s + 2)), P = 1. Closed loop of k L: s^2 + (1 + 3k) s + (1.5k - 2),
    stable iff k > 4/3 (Routh): at k = 1 it is unstable (N = 0, Z = 1), yet the two gain crossovers
    show phase margins of 70 and 94 deg and there is no phase crossover at w > 0."""
    L = Transfer.from_zpk([-0.5], [1, -2], 3)
    res = _analyse(L)
    assert (res.open_loop_rhp_poles, res.encirclements, res.closed_loop_rhp_poles) == (1, 0, 1)
    assert not res.stable and res.margins is None
    raw = loop_margins(L.evaluate, res.response, 1)
    assert min(g.phase_margin_deg for g in raw.gain_crossovers) > 60 and raw.phase_crossovers == ()
    assert raw.gain_margin_up_db is None and raw.gain_margin_down_db is None
    (lo, hi), = stabilising_gains(res.response, 1, L.evaluate)
    assert lo == pytest.approx(4 / 3, rel=1e-12) and hi == math.inf
    (lo, hi), = res.stabilising_gains
    assert lo == pytest.approx(4 / 3, rel=1e-9) and hi == math.inf


def test_down_margin_from_the_count_not_from_the_phase():
    """L = 2(s + 1)/(s (s - 1)), P = 1: the phase crossover at w = 1 has L = -2 (-6 dB), which
    is a gain *decrease* margin: k L is stable iff k > 1/2 (Routh on s^2 + (2k - 1) s + 2k)."""
    ev = rational([2, 2], [1, -1, 0])
    resp = contour_response(ev, (0.0,))
    m = loop_margins(ev, resp, 1)
    assert m.gain_margin_down_db == pytest.approx(20 * math.log10(0.5), rel=1e-10)
    assert m.gain_margin_up_db is None
    (lo, hi), = stabilising_gains(resp, 1, ev)
    assert lo == pytest.approx(0.5, rel=1e-10) and hi == math.inf
    assert m.gain_margin_db == pytest.approx(-20 * math.log10(0.5), rel=1e-10)


def test_conditionally_stable_intervals_match_closed_loop_roots():
    """100 (s + 1)^2 / (s^3 (s + 10)(s + 20)): stable only between two factors; the interval's
    ends are checked with numpy.roots just inside and just outside."""
    num, den = 100 * np.poly([-1, -1]), np.poly([0, 0, 0, -10, -20])
    ev = rational(num, den)
    gains = stabilising_gains(contour_response(ev, (0.0,)), 0, ev)
    assert len(gains) == 1
    lo, hi = gains[0]
    assert _stable(num, den, lo * 1.0001) and _stable(num, den, hi / 1.0001)
    assert not _stable(num, den, lo / 1.0001) and not _stable(num, den, hi * 1.0001)


def test_indentation_crossings_are_limits():
    """(s + 1)/(s^2 (s + 10)): the indentation round the double integrator crosses the negative
    real axis far out. Closed loop s^3 + 10 s^2 + k s + k is stable for every k > 0 (Routh:
    10 k > k), so neither margin exists, however small the indentation."""
    ev = rational([1, 1], [1, 10, 0, 0])
    for eps in (1e-4, 1e-7):
        resp = contour_response(ev, (0.0,), eps=eps)
        m = loop_margins(ev, resp, 0)
        assert m.gain_margin_up_db is None and m.gain_margin_down_db is None
        assert stabilising_gains(resp, 0, ev) == ((0.0, math.inf),)


def test_crossover_beyond_the_sampled_axis_is_found():
    """Engine samples stop early when |L| is small; the phase crossover of
    0.05/((s + 1)(s/100 + 1)(s/1000 + 1)) lies near 330 rad/s, far past a response that ends at
    w = 2. Reference: numpy.roots of the closed-loop polynomial at the gain margin."""
    num, den = [0.05], np.polymul(np.polymul([1, 1], [0.01, 1]), [0.001, 1])
    ev = rational(num, den)
    resp = contour_response(ev, (), w_hi=2.0)
    m = loop_margins(ev, resp, 0)
    k = 10 ** (m.gain_margin_up_db / 20)
    assert _stable(num, den, k / 1.0001) and not _stable(num, den, k * 1.0001)
    assert m.phase_crossovers == ()  # reported crossovers are those on the engine's samples


def test_undamped_pair_on_the_axis():
    """(s + 0.2)/((s^2 + 1)(s + 1)), indented at j1: stable factors by numpy.roots at each end."""
    num, den = np.poly([-0.2]), np.polymul([1, 0, 1], [1, 1])
    ev = rational(num, den)
    gains = stabilising_gains(contour_response(ev, (1.0,)), 0, ev)
    for lo, hi in gains:
        mid = math.sqrt(max(lo, 1e-6) * min(hi, 1e6))
        assert _stable(num, den, mid)
        if lo > 0:
            assert not _stable(num, den, lo / 1.001)
        if hi < math.inf:
            assert not _stable(num, den, hi * 1.001)
    assert any(_stable(num, den, k) for k in (0.5, 1, 2, 5))


def test_disk_covering_every_gain():
    """L = 0.5/(s + 1): Re L >= 0, so |(1 - L)/(1 + L)| <= 1 with the sup 1 as w -> inf:
    alpha = 2, the disk holds every gain factor, disk phase 2 atan(1) = 90 deg (Seiler et al. 2020)."""
    ev = rational([0.5], [1, 1])
    m = loop_margins(ev, contour_response(ev), 0)
    d = m.disk_margin
    assert d.alpha == pytest.approx(2.0, rel=1e-9) and d.freq == math.inf
    assert d.gain_db == (-math.inf, math.inf) and d.to_dict()["gain_db"] == [None, None]
    assert d.phase_deg == pytest.approx(90.0, rel=1e-9)
    assert m.gain_crossovers == () and m.phase_margin_deg is None and m.crossover_freq is None


def test_integrator_limits_of_the_peaks():
    """1/s: S = s/(s + 1) has sup 1 as w -> inf, T = 1/(s + 1) has sup 1 as w -> 0."""
    ev = rational([1], [1, 0])
    m = loop_margins(ev, contour_response(ev, (0.0,)), 0)
    assert (m.sensitivity_peak.value, m.sensitivity_peak.freq) == (pytest.approx(1.0), math.inf)
    assert (m.complementary_peak.value, m.complementary_peak.freq) == (1.0, 0.0)
    assert m.phase_margin_deg == pytest.approx(90.0, rel=1e-12)
    assert m.delay_margin_s == pytest.approx(math.pi / 2, rel=1e-12)


def test_lag_above_180_and_the_delay_margin():
    """Open-loop unstable 4/(s - 1) at k = 1: |L| = 1 at w = sqrt 15; arg L = -(180 - atan w),
    so lag = atan(sqrt 15) (deg) and the phase margin is that same angle, the delay margin
    atan(sqrt 15)/sqrt 15 s. Closed loop s + 3: stable; gain down to 1/4 (k > 1/4)."""
    ev = rational([4], [1, -1])
    m = loop_margins(ev, contour_response(ev), 1)
    w = math.sqrt(15)
    assert m.crossover_freq == pytest.approx(w, rel=1e-12)
    assert m.phase_margin_deg == pytest.approx(math.degrees(math.atan(w)), rel=1e-12)
    assert m.delay_margin_s == pytest.approx(math.atan(w) / w, rel=1e-12)
    assert m.gain_margin_down_db == pytest.approx(20 * math.log10(0.25), rel=1e-12)


def test_lag_convention_above_180():
    """A stable loop can cross |L| = 1 in the upper half plane: 2000 (s + 0.1)/((s + 1)(s + 20)^2)
    at its first crossover has lag = (arg L + 180) mod 360 above 180 and phase margin 360 - lag."""
    L = Transfer.from_zpk([-0.1], [-1, -20, -20], 2000)
    g = _analyse(L).margins.gain_crossovers[0]
    arg = math.degrees(np.angle(L.evaluate(np.array([1j * g.freq]))[0]))
    assert g.lag_deg == pytest.approx((arg + 180) % 360, rel=1e-12) and g.lag_deg > 180
    assert g.phase_margin_deg == pytest.approx(360 - g.lag_deg, rel=1e-12)


def test_response_without_axis_samples_is_refused():
    resp = LoopResponse(np.array([1 + 0j, 2 + 1j]), np.array([0.5 + 0j, 0.2 + 0j]),
                        np.array([False, False]))
    with pytest.raises(ValueError, match="no samples on the imaginary axis"):
        loop_margins(rational([1], [1, 1]), resp, 0)


def test_indentation_round_a_pole_that_l_does_not_have():
    """The engine indents round the axis poles of every block of a model; a break's L need not
    keep them. 4/((s - 1)(s + 3)) sampled with an indentation at s = 0: L(0) = -4/3 is a real
    crossing, not a limit. Closed loop s^2 + 2 s + (4k - 3): stable iff k > 3/4 (Routh), so the
    down margin is 20 log10(3/4) with or without the indentation; Mt is not the integrator's 1."""
    ev = rational([4], [1, 2, -3])
    plain = loop_margins(ev, contour_response(ev), 1)
    indented = loop_margins(ev, contour_response(ev, (0.0,)), 1)
    for m in (plain, indented):
        assert m.gain_margin_down_db == pytest.approx(20 * math.log10(0.75), rel=1e-10)
        assert m.gain_margin_up_db is None
    assert indented.complementary_peak.value == pytest.approx(plain.complementary_peak.value, rel=1e-6)
    assert indented.complementary_peak.value > 1.0  # |T(0)| = (4/3)/(1/3) = 4


def test_pole_free_indentation_without_the_evaluator():
    """The same loop as above through stabilising_gains without `evaluate` (as for unstable
    breaks): the indentation is recognised from the samples alone; factors k > 3/4."""
    ev = rational([4], [1, 2, -3])
    (lo, hi), = stabilising_gains(contour_response(ev, (0.0,)), 1)
    assert lo == pytest.approx(0.75, rel=1e-6) and hi == math.inf
    # and a real integrator still counts as one: 2(s + 1)/(s (s - 1)) is stable for k > 1/2
    (lo, hi), = stabilising_gains(contour_response(rational([2, 2], [1, -1, 0]), (0.0,)), 1)
    assert lo == pytest.approx(0.5, rel=1e-6) and hi == math.inf


def _random_loop(seed: int):
    """A delay-free loop from a fixed seed: 1-6 poles (some in the RHP, some integrators),
    fewer zeros (some in the RHP), a gain of either sign's magnitude over four decades."""
    rng = np.random.default_rng([20261201, seed])
    n = int(rng.integers(1, 7))
    q = int(rng.integers(0, 3)) if n > 1 else 0
    poles = [0.0] * min(q, n - 1) + list(rng.uniform(-10, 3, n - min(q, n - 1)))
    zeros = list(rng.uniform(-10, 3, int(rng.integers(0, n))))
    gain = 10 ** rng.uniform(-1, 3)
    return np.atleast_1d(gain * np.poly(zeros)), np.poly(poles), tuple(0.0 for p in poles if p == 0.0)


@pytest.mark.parametrize("seed", range(24), ids=lambda s: f"numpy-roots-random-{s}")
def test_stabilising_gains_agree_with_closed_loop_roots(seed):
    """Every factor k on a grid over 1e-4..1e4 is inside a reported interval exactly when
    numpy.roots puts every pole of den + k num in the open left half plane (factors within
    0.1 % of an interval end are not judged: the roots are too close to the axis there)."""
    num, den, axis = _random_loop(seed)
    ev = rational(num, den)
    P = int(np.sum(np.roots(den).real > 0))
    gains = stabilising_gains(contour_response(ev, axis[:1]), P, ev)
    ends = [x for lo_hi in gains for x in lo_hi if 0 < x < math.inf]
    for k in np.geomspace(1e-4, 1e4, 81):
        if any(abs(k / e - 1) < 1e-3 for e in ends):
            continue
        assert _stable(num, den, k) == any(lo < k < hi for lo, hi in gains), (seed, k, gains)
