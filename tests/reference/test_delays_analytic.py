"""Loops with exact delays vs analytic stability boundaries, and vs Padé approximations.

References:
* the delayed integrator L = K exp(-sT)/s: boundary K T = pi/2 and the count of
  unstable pairs beyond it, re-derived below (analytic);
* first order plus dead time L = K exp(-theta s)/(tau s + 1): ultimate gain from
  the phase-crossover equation, re-derived below and solved with scipy.optimize.brentq;
* python-control 0.10.2 `control.pade(T, n)` with `feedback(...).poles()`: the
  verdict of rational approximations of the delay, which must converge towards
  the exact verdict as n grows (the engine itself never approximates a delay).
"""
from __future__ import annotations

import math

import control
import numpy as np
import pytest
from scipy.optimize import brentq

from loopwise.testing import analyse_loop
from loopwise.transfer import Transfer


def _delayed_integrator(K: float, T: float) -> Transfer:
    return Transfer.from_zpk([], [0.0], K, delay=T)


def _fopdt(K: float, tau: float, theta: float) -> Transfer:
    return Transfer.from_zpk([], [-1.0 / tau], K / tau, delay=theta)


def _integrator_rhp_count(KT: float) -> int:
    """Closed-loop RHP roots of s + K exp(-sT) = 0 (re-derived).

    On the axis s = jw: jw = -K exp(-jwT) gives |w| = K and exp(-jwT) = -j sign(w),
    i.e. wT = pi/2 + 2 pi k. So a pair of roots crosses the axis at the gains
    K_k T = pi/2 + 2 pi k (k = 0, 1, ...). Direction: ds/dK = -exp(-sT)/(1 - K T exp(-sT))
    = (s/K)/(1 + T s) there, with real part T w^2 / (K |1 + jTw|^2) > 0, so every
    crossing is from left to right as K grows; at K = 0 the only finite root is
    s = 0, moving left. Hence Z = 2 * #{k >= 0 : K T > pi/2 + 2 pi k}.
    """
    return 2 * sum(1 for k in range(100) if KT > math.pi / 2 + 2 * math.pi * k)


def _fopdt_crossing(tau: float, theta: float, k: int) -> tuple[float, float]:
    """The k-th crossing of the negative real axis by exp(-theta s)/(tau s + 1) (re-derived).

    Phase: -theta w - atan(tau w) = -(2k + 1) pi. The left side falls monotonically
    from 0 and atan lies in (0, pi/2), so the root lies in
    (((2k+1) pi - pi/2)/theta, (2k+1) pi/theta); solved with scipy.optimize.brentq.
    There |L| = K / sqrt(1 + (tau w)^2), so L = -1 at K_k = sqrt(1 + (tau w_k)^2).
    """
    hi = (2 * k + 1) * math.pi
    w = brentq(lambda w: theta * w + math.atan(tau * w) - hi,
               (hi - math.pi / 2) / theta, hi / theta, xtol=1e-15, rtol=1e-15)
    return math.hypot(1.0, tau * w), w


def _ultimate(tau: float, theta: float) -> tuple[float, float]:
    """Ultimate gain K_u and frequency w_u: the first crossing (k = 0)."""
    return _fopdt_crossing(tau, theta, 0)


def _fopdt_rhp_count(K: float, tau: float, theta: float) -> int:
    """Closed-loop RHP roots of tau s + 1 + K exp(-theta s) = 0 for K > 0 (re-derived).

    Roots reach the axis only at the crossings above (K = K_k, K_k increasing in k).
    Direction: with K exp(-theta s) = -(tau s + 1) there,
    ds/dK = (tau s + 1) / (K (tau + theta + theta tau s)), whose real part at s = jw is
    (tau + theta + theta tau^2 w^2) / (K |tau + theta + j theta tau w|^2) > 0: left to
    right. At K = 0 the one root -1/tau is stable. Hence Z = 2 #{k : K > K_k}.
    """
    z, k = 0, 0
    while K > _fopdt_crossing(tau, theta, k)[0]:
        z, k = z + 2, k + 1
    return z


# ----------------------------------------------------------------------------- delayed integrator

RATIOS = [0.2, 0.9, 0.99, 0.999, 1.001, 1.01, 1.1, 2.0, 3.0, 5.3, 6.0]


@pytest.mark.parametrize("T", [150e-6, 0.05, 1.0, 60.0])
@pytest.mark.parametrize("ratio", RATIOS)
def test_delayed_integrator_boundary(T, ratio):
    """K exp(-sT)/s is stable exactly when K T < pi/2 (ratio = K T / (pi/2))."""
    KT = ratio * math.pi / 2
    res = analyse_loop(_delayed_integrator(KT / T, T), name="delayed_integrator")
    assert res.open_loop_rhp_poles == 0
    assert res.stable is (KT < math.pi / 2)
    assert res.closed_loop_rhp_poles == _integrator_rhp_count(KT)
    assert not res.marginal


@pytest.mark.parametrize("T", [0.05, 1.0])
def test_delayed_integrator_on_the_boundary_is_marginal(T):
    """At K T = pi/2 the pair sits on the axis at w = pi/(2T) = K."""
    res = analyse_loop(_delayed_integrator(math.pi / (2 * T), T), name="boundary")
    assert res.marginal is True
    assert res.marginal_freq == pytest.approx(math.pi / (2 * T), rel=1e-6)
    assert not res.stable


# ----------------------------------------------------------------------------- FOPDT

FOPDT = [(1.0, 0.1), (1.0, 1.0), (10.0, 1.0), (0.01, 1.0), (2e-3, 150e-6), (25 * 60.0, 120.0)]


@pytest.mark.parametrize("tau, theta", FOPDT)
@pytest.mark.parametrize("ratio", [0.3, 0.95, 0.999, 1.001, 1.05, 1.5, 4.0])
def test_fopdt_ultimate_gain(tau, theta, ratio):
    """Stable exactly below the ultimate gain K_u; above it, one unstable pair per crossing
    of the negative real axis outside -1 (Z from `_fopdt_rhp_count`)."""
    K_u, _ = _ultimate(tau, theta)
    K = ratio * K_u
    res = analyse_loop(_fopdt(K, tau, theta), name="fopdt")
    assert res.open_loop_rhp_poles == 0
    assert res.stable is (ratio < 1)
    assert res.closed_loop_rhp_poles == _fopdt_rhp_count(K, tau, theta)


@pytest.mark.parametrize("tau, theta", FOPDT[:3])
def test_fopdt_at_the_ultimate_gain_is_marginal(tau, theta):
    K_u, w_u = _ultimate(tau, theta)
    res = analyse_loop(_fopdt(K_u, tau, theta), name="fopdt_boundary")
    assert res.marginal is True
    assert res.marginal_freq == pytest.approx(w_u, rel=1e-6)


def test_ultimate_gain_equation_is_consistent():
    """The brentq root really puts L(j w_u) on -1 (evaluated with the engine's Transfer)."""
    for tau, theta in FOPDT:
        K_u, w_u = _ultimate(tau, theta)
        assert _fopdt(K_u, tau, theta).evaluate(1j * w_u) == pytest.approx(-1.0, abs=1e-9)


# ----------------------------------------------------------------------------- Padé vs exact

def _pade_rhp(num, den, T: float, n: int) -> int:
    """python-control: RHP closed-loop poles with exp(-sT) replaced by `control.pade(T, n)`."""
    pn, pd = control.pade(T, n)
    L = control.tf(num, den) * control.tf(pn, pd)
    return int(np.sum(control.feedback(L, 1).poles().real > 0))


def _pade_cases():
    cases = []
    for ratio in (0.8, 0.95, 1.05, 1.2, 2.0, 3.5, 5.3):
        K = ratio * math.pi / 2 / 0.5
        cases.append((f"integrator KT/(pi/2)={ratio}", [K], [1.0, 0.0], 0.5,
                      _delayed_integrator(K, 0.5)))
    for tau, theta in ((1.0, 1.0), (10.0, 1.0), (1.0, 0.2)):
        K_u, _ = _ultimate(tau, theta)
        for ratio in (0.9, 1.1):
            K = ratio * K_u
            cases.append((f"fopdt tau={tau} theta={theta} K/Ku={ratio}", [K / tau],
                          [1.0, 1.0 / tau], theta, _fopdt(K, tau, theta)))
    return cases


def test_pade_verdicts_converge_to_the_exact_engine():
    """Padé orders 1..10: the count of cases whose Z differs from the engine's exact Z falls
    to zero and stays there (python-control `pade` + `feedback` poles as the reference)."""
    cases = _pade_cases()
    orders = range(1, 11)
    wrong = {n: [] for n in orders}
    for label, num, den, T, exact_t in cases:
        exact = analyse_loop(exact_t, name="exact").closed_loop_rhp_poles
        for n in orders:
            if _pade_rhp(num, den, T, n) != exact:
                wrong[n].append(label)
    counts = [len(wrong[n]) for n in orders]
    assert counts[0] > 0, "order 1 should miss somewhere on this set"
    assert all(a >= b for a, b in zip(counts, counts[1:])), counts
    assert counts[-1] == 0 and counts[5] == 0, wrong


def test_low_order_pade_gives_the_wrong_verdict_where_the_engine_does_not():
    """Found by a numerical scan of K T for the delayed integrator with pade(T, 1) (fixed here):
    K T = 1.8 (between pi/2 and 2). Re-derived: with exp(-sT) ~ (1 - sT/2)/(1 + sT/2) the
    closed loop is (T/2)s^2 + (1 - KT/2)s + K, stable iff K T < 2, so order 1 calls this
    loop stable; the exact boundary is K T = pi/2 = 1.571, so it is not.
    """
    T = 0.05
    K = 1.8 / T
    assert _pade_rhp([K], [1.0, 0.0], T, 1) == 0          # the approximation says stable
    res = analyse_loop(_delayed_integrator(K, T), name="pade_trap")
    assert not res.stable and res.closed_loop_rhp_poles == 2
    assert _pade_rhp([K], [1.0, 0.0], T, 6) == 2          # a higher order agrees with the engine


def test_low_order_pade_miscounts_unstable_pairs():
    """K T = 5.3 (pi/2) = 8.33 > 5 pi/2: two pairs in the RHP (Z = 4, re-derived above);
    Padé orders 1..4 see only one pair (scan with python-control), the engine both."""
    T, KT = 1.0, 5.3 * math.pi / 2
    res = analyse_loop(_delayed_integrator(KT / T, T), name="two_pairs")
    assert res.closed_loop_rhp_poles == 4 == _integrator_rhp_count(KT)
    assert [_pade_rhp([KT / T], [1.0, 0.0], T, n) for n in range(1, 5)] == [2, 2, 2, 2]
    assert _pade_rhp([KT / T], [1.0, 0.0], T, 8) == 4
