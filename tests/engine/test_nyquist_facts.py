"""Textbook facts about the Nyquist criterion, checked on the engine.

Each fact is common knowledge of the trade (stated as such in its docstring);
where a number is involved it is re-derived in a comment and, where a closed
loop is claimed stable or unstable, confirmed with python-control 0.10.2's
`feedback(L, 1).poles()`.
Conventions (docs/method.md): N counts clockwise encirclements of -1, Z = N + P,
P counts open-loop poles in the open RHP, axis poles are indented to the right.
"""
from __future__ import annotations

import math

import control
import numpy as np
import pytest

from loopwise.testing import analyse_loop
from loopwise.transfer import Transfer


def _tf(num, den, delay=0.0) -> Transfer:
    return Transfer.from_coeffs(num, den, delay)


def _cl_rhp(num, den) -> int:
    """python-control reference: RHP poles of the unity negative-feedback closed loop."""
    return int(np.sum(control.feedback(control.tf(num, den), 1).poles().real > 0))


def _arc(R: float, n: int = 181) -> np.ndarray:
    """Upper half of the closing arc of radius R (from +jR clockwise to +R)."""
    return R * np.exp(1j * np.linspace(math.pi / 2, 0.0, n))


def _closing(res) -> tuple[float, complex]:
    """Where the engine's contour leaves the axis for the closing arc: (R, L(jR)).

    The engine computes the arc's phase change from its high-frequency certificate
    instead of sampling it, so its response ends at s = jR on the axis.
    """
    resp = res.response
    return float(resp.freq[-1]), complex(resp.axis_L[-1])


# ----------------------------------------------------------------------------- the arc at infinity

def test_strictly_proper_loop_maps_the_arc_to_the_origin():
    """Common knowledge of the trade: a strictly proper L maps the arc at infinity to 0.

    Here L = 2(s+3)/((s+1)(s^2+s+4)), relative degree 2: |L| ~ 2/R^2 on the arc.
    Closed loop s^3 + 2s^2 + 7s + 10: Routh 2*7 > 10, stable (re-derived).
    """
    num, den = [2.0, 6.0], np.polymul([1, 1], [1, 1, 4])
    t = _tf(num, den)
    for R in (1e3, 1e6, 1e9):
        assert np.max(np.abs(t.evaluate(_arc(R)))) <= 2.2 / R ** 2
    res = analyse_loop(t, name="strictly_proper")
    R, L_R = _closing(res)
    # where the engine closes, L is already inside the unit circle and the arc beyond
    # shrinks like 1/R^2 (bound re-derived: |2(s+3)| <= 2(R+3), |(s+1)(s^2+s+4)| >= (R-1)(R^2-R-4))
    bound = 2 * (R + 3) / ((R - 1) * (R * R - R - 4))
    assert abs(L_R) < 1.0
    assert np.max(np.abs(t.evaluate(_arc(R)))) <= bound
    assert bound < 1.0  # the arc cannot reach -1
    assert (res.open_loop_rhp_poles, res.encirclements, res.closed_loop_rhp_poles) == (0, 0, 0)
    assert _cl_rhp(num, den) == 0


def test_biproper_loop_maps_the_arc_to_a_finite_real_point():
    """Common knowledge of the trade: a proper (biproper) L maps the arc to the real point D = lim L.

    L = 0.4(s-2)(s+5)/((s+1)(s+3)) has D = 0.4; on the arc |L - D| = O(1/R).
    """
    num = 0.4 * np.polymul([1, -2], [1, 5])
    den = np.polymul([1, 1], [1, 3])
    t = _tf(num, den)
    for R in (1e4, 1e8):
        L = t.evaluate(_arc(R))
        assert np.max(np.abs(L - 0.4)) <= 10.0 / R
    res = analyse_loop(t, name="biproper")
    R, L_R = _closing(res)
    # |L - D| on |s| = R: |0.4 (s (3 - 4) - 10 - 3)| / |(s+1)(s+3)| <= 0.4 (R + 13)/((R-1)(R-3))
    bound = 0.4 * (R + 13) / ((R - 1) * (R - 3))
    assert abs(L_R - 0.4) <= bound * 1.01
    assert np.max(np.abs(t.evaluate(_arc(R)) - 0.4)) <= bound
    assert 0.4 + bound < 1.0  # the arc stays well away from -1
    assert res.closed_loop_rhp_poles == _cl_rhp(num, den)


# ----------------------------------------------------------------------------- a plain stable loop

def test_two_lags_curve_start_end_and_verdict():
    """Common knowledge of the trade: L = 1/((s+1)(s+2)) starts at L(0) = 1/2, ends at the
    origin, stays in the lower half plane for w > 0 (phase 0..-180 deg), so it never
    encircles -1: P = 0, N = 0, Z = 0 (confirmed by python-control's closed-loop poles).
    """
    t = _tf([1.0], [1.0, 3.0, 2.0])
    res = analyse_loop(t, name="two_lags")
    freq, L = res.response.freq, res.response.axis_L
    assert freq[0] == pytest.approx(0.0, abs=1e-6)
    assert L[0] == pytest.approx(0.5, rel=1e-6)
    assert np.all(np.diff(freq) >= 0)  # ascending (the engine repeats a piece's end point)
    # the engine stops the axis at R, where |L| < 1 is certified; beyond it
    # |L(jw)| <= 1/w^2 (|jw+1||jw+2| >= w^2) falls to the origin
    R = freq[-1]
    assert abs(L[-1]) < 1.0 and L[-1] == pytest.approx(complex(t.evaluate(1j * R)), rel=1e-12)
    assert R > 1.0 and np.all(np.abs(t.evaluate(1j * np.geomspace(R, 1e12, 50))) <= 1 / R ** 2)
    assert np.all(L[1:].imag < 0)
    assert (res.open_loop_rhp_poles, res.encirclements, res.closed_loop_rhp_poles) == (0, 0, 0)
    assert res.stable and not res.marginal
    assert _cl_rhp([1.0], [1.0, 3.0, 2.0]) == 0


# ----------------------------------------------------------------------------- indentation

def test_integrator_is_indented_around():
    """Common knowledge of the trade: a pole at the origin is excluded by a small indentation
    (to the right: it does not count in P); the image is a large arc, and for
    L = 2/(s(s+1)) the closed loop s^2 + s + 2 is stable: P = 0, N = 0, Z = 0.
    """
    res = analyse_loop(_tf([2.0], [1.0, 1.0, 0.0]), name="type1")
    assert 0.0 in [pytest.approx(w, abs=1e-12) for w in res.response.axis_poles]
    assert (res.open_loop_rhp_poles, res.encirclements, res.closed_loop_rhp_poles) == (0, 0, 0)
    assert res.stable
    near = res.response.s[~res.response.on_axis]
    near = near[np.abs(near) < 1.0]
    assert near.size > 0 and np.all(near.real >= -1e-12 * np.abs(near))  # indented to the right
    assert np.max(np.abs(res.response.L)) > 1e3  # the small indentation maps to a large arc


def test_indenting_left_counts_the_integrator_in_P():
    """Common knowledge of the trade: indenting to the LEFT of the origin pole puts it inside
    the contour, so P = 1; the image arc swings the other way and the curve encircles
    -1 once counter-clockwise (N = -1), hence the same Z = N + P = 0.
    """
    t = _tf([2.0], [1.0, 1.0, 0.0])
    right = analyse_loop(t, name="right")
    left = analyse_loop(t, name="left", indent="left")
    assert (left.open_loop_rhp_poles, left.encirclements, left.closed_loop_rhp_poles) == (1, -1, 0)
    assert left.closed_loop_rhp_poles == right.closed_loop_rhp_poles
    near = left.response.s[~left.response.on_axis]
    near = near[np.abs(near) < 1.0]
    assert near.size > 0 and np.all(near.real <= 1e-12 * np.abs(near))


def test_zeros_on_the_axis_need_no_indentation():
    """Common knowledge of the trade: zeros on the imaginary axis are harmless for the contour
    (L passes through the origin there): only poles are indented.
    L = K(s^2+4)/(s+1)^3: closed loop s^3 + (3+K)s^2 + 3s + (1+4K); Routh (re-derived):
    stable iff 3(3+K) > 1+4K, i.e. K < 8. K = 5 stable; K = 10 two RHP poles.
    """
    for K, z_want in ((5.0, 0), (10.0, 2)):
        num, den = [K, 0.0, 4 * K], [1.0, 3.0, 3.0, 1.0]
        res = analyse_loop(_tf(num, den), name=f"axis_zeros_{K:g}")
        assert tuple(res.response.axis_poles) == ()
        assert np.all(res.response.on_axis | (np.abs(res.response.s) > 10.0))
        assert res.open_loop_rhp_poles == 0
        assert res.closed_loop_rhp_poles == z_want == _cl_rhp(num, den)
        # the curve passes through the origin at w = 2
        assert abs(Transfer.from_coeffs(num, den).evaluate(2j)) < 1e-12


# ----------------------------------------------------------------------------- Z = N + P

def _clockwise_turns(num, den) -> float:
    """Independent count: clockwise turns of 1 + L around 0 along a dense imaginary axis
    (no axis poles here, L strictly proper, so the arc adds nothing)."""
    w = np.concatenate([-np.logspace(4, -4, 200001), [0.0], np.logspace(-4, 4, 200001)])
    f = 1.0 + np.polyval(num, 1j * w) / np.polyval(den, 1j * w)
    return -float(np.sum(np.diff(np.unwrap(np.angle(f))))) / (2 * math.pi)


def test_one_rhp_pole_two_clockwise_encirclements_gives_three_unstable_poles():
    """Common knowledge of the trade: Z = N + P. Constructed (re-derived here) by choosing the
    closed-loop polynomial q(s) = (s-2)(s^2-2s+2) = s^3 - 4s^2 + 6s - 4 (three RHP roots)
    over the open loop den(s) = (s-1)(s+2)(s+3) = s^3 + 4s^2 + s - 6 (one RHP pole):
    num = q - den = -8s^2 + 5s + 2, strictly proper. So P = 1, Z = 3, hence N = 2.
    """
    num = [-8.0, 5.0, 2.0]
    den = np.polymul(np.polymul([1, -1], [1, 2]), [1, 3])
    assert _cl_rhp(num, den) == 3  # python-control
    assert round(_clockwise_turns(num, den)) == 2
    res = analyse_loop(_tf(num, den), name="z3")
    assert (res.open_loop_rhp_poles, res.encirclements, res.closed_loop_rhp_poles) == (1, 2, 3)
    assert not res.stable


# ----------------------------------------------------------------------------- marginal

def test_closed_loop_pair_on_the_axis_is_marginal():
    """Common knowledge of the trade: L passing through -1 means a closed-loop pole on the axis.
    L = K/(s(s+1)^2) at w = 1: phase -90 - 2*45 = -180 deg, |L| = K/(1*2) -> -1 at K = 2.
    Closed loop s^3 + 2s^2 + s + 2 = (s + 2)(s^2 + 1): poles at -2 and +-j (re-derived).
    """
    res = analyse_loop(_tf([2.0], [1.0, 2.0, 1.0, 0.0]), name="marginal")
    assert res.marginal is True
    assert res.marginal_freq == pytest.approx(1.0, rel=1e-6)
    assert not res.stable
    poles = control.feedback(control.tf([2.0], [1.0, 2.0, 1.0, 0.0]), 1).poles()
    assert np.min(np.abs(poles - 1j)) < 1e-9  # python-control agrees: a pole at +j


@pytest.mark.parametrize("K", [0.5, 2.0])
def test_double_integrator_with_gain_only_is_marginal(K):
    """Common knowledge of the trade: L = K/s^2 closes to s^2 + K, an undamped pair at
    w = sqrt(K): marginal, never asymptotically stable."""
    res = analyse_loop(Transfer.from_zpk([], [0.0, 0.0], K), name="k_over_s2")
    assert res.marginal is True
    assert res.marginal_freq == pytest.approx(math.sqrt(K), rel=1e-6)
    assert not res.stable


@pytest.mark.parametrize("K, marginal", [(1.9, False), (2.1, False)])
def test_near_marginal_gains_are_decided(K, marginal):
    """Either side of the marginal gain K = 2 of K/(s(s+1)^2): stable below, Z = 2 above
    (Routh on s^3 + 2s^2 + s + K: stable iff 2 > K, re-derived)."""
    num, den = [K], [1.0, 2.0, 1.0, 0.0]
    res = analyse_loop(_tf(num, den), name="near_marginal")
    assert res.marginal is marginal
    assert res.closed_loop_rhp_poles == _cl_rhp(num, den) == (0 if K < 2 else 2)
