"""The engine's Nyquist verdict on a generated delay-free set vs python-control.

Reference (python-control 0.10.2):
* Z: the number of poles with positive real part of `control.feedback(L, 1).poles()`
  (unity negative feedback; the roots of den + num). Where a closed-loop pole
  lies within 1e-9 (relative to its magnitude) of the imaginary axis, computed
  roots cannot say on which side it is: there the engine's Z must lie between
  the count of poles clearly to the right and the count including those near
  the axis, and the case is listed in the terminal summary.
* P: open-loop poles strictly in the RHP, counted independently from
  python-control's `tf(num, den).poles()` (the roots of the expanded
  denominator), poles within 1e-6 of the axis counted as axis poles.
* `control.nyquist_response(L).count` is compared with Z - P but never asserted
  on: where it disagrees the case goes to the findings printed in the terminal
  summary (tests/reference/findings.py): python-control's miscounts.

The set (tests/reference/loopsets.py, fixed seeds): orders 1-10, RHP poles,
integrators up to order 3, undamped pairs on the axis, lightly damped pairs
down to zeta = 1e-4, RHP zeros, near cancellations, biproper loops, gain sweeps.
"""
from __future__ import annotations

import functools
import warnings

import control
import numpy as np
import pytest

from loopwise.testing import analyse_loop
from loopwise.transfer import Transfer

from .findings import record
from .loopsets import closed_loop_rhp, delay_free_loops, near_axis


CASES = delay_free_loops()


@functools.lru_cache(maxsize=None)
def _reference(name: str) -> tuple[int, bool, int]:
    """(Z from python-control's closed-loop poles, too close to the axis to call, nyquist count)."""
    case = _BY_NAME[name]
    z, poles = closed_loop_rhp(case)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        count = int(control.nyquist_response(case.to_control()).count)
    return z, near_axis(poles), count


_BY_NAME = {c.name: c for c in CASES}


@functools.lru_cache(maxsize=None)
def _engine(name: str):
    case = _BY_NAME[name]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return analyse_loop(Transfer.from_zpk(list(case.zeros), list(case.poles), case.gain),
                            name=name)


def test_generated_set_covers_the_brief():
    """Size and coverage of the set (at least 300 loops, orders 1..10, every family)."""
    assert len(CASES) >= 300
    assert {len(c.poles) for c in CASES} == set(range(1, 11))
    integrator_orders = {sum(1 for p in c.poles if p == 0) for c in CASES}
    assert {1, 2, 3} <= integrator_orders
    assert any(c.axis_poles > 0 and any(p.imag != 0 for p in c.poles if p.real == 0) for c in CASES)
    zetas = [-p.real / abs(p) for c in CASES for p in c.poles if p.imag > 0 and p.real < 0]
    assert min(zetas) < 2e-4
    assert any(z.real > 0 for c in CASES for z in c.zeros)
    assert any(c.rhp_poles > 0 for c in CASES)
    assert len({c.name for c in CASES}) == len(CASES)


def _side_counts(poles: np.ndarray, rel: float) -> tuple[int, int]:
    """(poles clearly right of the axis, poles right of or within rel of it; rel relative to
    the pole's magnitude, at least 1)."""
    poles = np.asarray(poles, complex)
    tol = rel * np.maximum(np.abs(poles), 1.0)
    return int(np.sum(poles.real > tol)), int(np.sum(poles.real >= -tol))


@pytest.mark.parametrize("name", [c.name for c in CASES])
def test_verdict_matches_closed_loop_poles(name):
    case = _BY_NAME[name]
    res = _engine(name)
    # P against python-control's own roots of the denominator (not the zpk we were given)
    p_right, _ = _side_counts(case.to_control().poles(), 1e-6)
    assert res.open_loop_rhp_poles == p_right, (name, "P", p_right, res.open_loop_rhp_poles)
    assert res.closed_loop_rhp_poles == res.encirclements + res.open_loop_rhp_poles
    z_ref, too_close, count = _reference(name)
    if count != z_ref - p_right and not too_close:
        record("nyquist vs python-control", f"{name}: nyquist_response.count={count}, "
               f"Z-P={z_ref - p_right} (Z={z_ref}, P={p_right}) from its own closed-loop poles")
    if too_close:
        # a closed-loop pole within 1e-9 of the axis: only bounds can be asserted
        z_lo, z_hi = _side_counts(closed_loop_rhp(case)[1], 1e-9)
        record("nyquist vs python-control", f"{name}: closed-loop pole within 1e-9 of the axis; "
               f"engine Z={res.closed_loop_rhp_poles} marginal={res.marginal}, reference {z_lo}..{z_hi}")
        assert z_lo <= res.closed_loop_rhp_poles <= z_hi, (name, z_lo, z_hi, res.closed_loop_rhp_poles)
        assert res.stable == (z_hi == 0 and not res.marginal), name
        return
    assert res.closed_loop_rhp_poles == z_ref, (name, "Z", z_ref, res.closed_loop_rhp_poles,
                                                res.warnings)
    assert res.stable == (z_ref == 0), (name, "stable", z_ref == 0, res.stable)
    assert not res.marginal, (name, "marginal without an axis pole", res.marginal_freq)


def test_near_axis_cases_stay_rare():
    """The bounds-only rule above must stay a rare exception, not a way round hard cases."""
    close = [c.name for c in CASES if _reference(c.name)[1]]
    assert len(close) <= len(CASES) // 50, close


@pytest.mark.parametrize("delta", [1e-4, 1e-6, 1e-8, -1e-4, -1e-6, -1e-8])
def test_zero_next_to_an_axis_pole_never_gives_a_wrong_count(delta):
    """L = 3 (s^2 + (1+delta)^2) / ((s^2 + 1)(s + 1)(s + 2)): a zero pair within delta of the
    undamped pole pair leaves a closed-loop pair next to it. Re-derived: near s = j,
    L = r/(s - j) + L_rest with r = 3*2 delta/(2j (1+j)(2+j)) = -delta (0.9 + 0.3j) and
    L_rest(j) = 3/((1+j)(2+j)) = 0.3 - 0.9j, so 1 + L = 0 at
    s - j = -r/(1 + L_rest(j)) = delta (0.36 + 0.48j): right of the axis for delta > 0.
    The engine must either count it right (python-control `feedback(L, 1).poles()` as the
    reference) or refuse with a located model error; a silent wrong Z is the one thing
    not allowed."""
    from loopwise.errors import ModelError
    zeros = [1j * (1 + delta), -1j * (1 + delta)]
    poles = [1j, -1j, -1.0, -2.0]
    num = 3.0 * np.real(np.poly(zeros))
    den = np.real(np.poly(poles))
    cl = control.feedback(control.tf(num, den), 1).poles()
    assert not near_axis(cl)
    z_ref = int(np.sum(cl.real > 0))
    assert z_ref == (2 if delta > 0 else 0)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = analyse_loop(Transfer.from_zpk(zeros, poles, 3.0), name="near_axis_cancel")
    except ModelError as exc:  # an explicit refusal is acceptable
        assert exc.span is not None and "certif" in exc.message
        return
    assert res.closed_loop_rhp_poles == z_ref
