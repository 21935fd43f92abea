"""The trace's cheaper forms of its numbers (engine/winding.py) against the forms they replace,
computed here with numpy: the principal logarithm against numpy's complex np.log, the
phase tests on f/|f| (real cosines of the phase steps) against the tests on the unit
phasors exp(j d) themselves, and the evaluation in blocks against one evaluation."""
from __future__ import annotations

import math

import numpy as np

from loopwise.engine.winding import CHORD, MIDPOINT, _accept_columns, in_chunks, principal_log


def test_principal_log_is_numpys_complex_log_up_to_rounding():
    rng = np.random.default_rng(3)
    z = (rng.normal(size=20_000) + 1j * rng.normal(size=20_000)) * 10.0 ** rng.uniform(-150, 150, 20_000)
    ours, ref = principal_log(z), np.log(z + 0j)  # reference: numpy's complex logarithm
    assert np.allclose(ours.imag, ref.imag, rtol=0, atol=4e-16 * math.pi)
    assert np.allclose(ours.real, ref.real, rtol=1e-15, atol=1e-15)


def test_principal_log_keeps_the_branch_cut_zeros_and_non_finite_values_of_np_log():
    special = [0.0, -0.0, 1.0, -1.0, 2.5, -2.5, 1e-310, -1e-310, 1e300, -1e300, np.inf, -np.inf, np.nan]
    z = np.array([complex(a, b) for a in special for b in special])
    with np.errstate(all="ignore"):
        ours, ref = principal_log(z), np.log(z + 0j)
    # the angles np.log gives, within [-pi, pi] (-pi only as the rounded angle of a tiny
    # negative imaginary part); a negative zero part read as +0 (on the cut: +pi, as np.log(z + 0j))
    finite = np.isfinite(ref.imag)
    assert np.array_equal(ours.imag[finite], ref.imag[finite])
    assert np.all(np.abs(ours.imag[finite]) <= math.pi)
    assert principal_log(np.array([-1.0 - 0.0j]))[0].imag == math.pi
    # log|0| = -inf with angle 0; a non-finite value stays non-finite in both parts' sense
    with np.errstate(all="ignore"):
        assert principal_log(np.array([0j]))[0] == complex(-np.inf, 0.0)
    assert np.array_equal(np.isfinite(ours), np.isfinite(ref))


def _phasor_tests(la, lb, lm, chord=CHORD, midpoint=MIDPOINT):
    """The tests as written on the unit phasors rb = f_b/f_a, rm = f_m/f_a (of f/|f|)."""
    rb = np.exp(1j * (lb - la).imag)
    rm = np.exp(1j * (lm - la).imag)
    ok = (np.abs(rb - 1.0) <= chord) & (np.abs(1.0 / rb - 1.0) <= chord)
    return ok & (np.abs(rm - 0.5 * (1.0 + rb)) <= midpoint * np.minimum(1.0, np.minimum(np.abs(rb), np.abs(rm))))


def test_the_phase_tests_in_cosines_decide_as_the_tests_on_unit_phasors():
    rng = np.random.default_rng(5)
    n = 50_000
    la = rng.normal(size=(n, 2)) + 1j * rng.uniform(-math.pi, math.pi, (n, 2))
    lb = la + rng.normal(size=(n, 2)) + 1j * rng.normal(scale=0.4, size=(n, 2))
    lm = la + rng.normal(size=(n, 2)) + 1j * rng.normal(scale=0.4, size=(n, 2))
    ours = _accept_columns(la, lb, lm, (None, None))
    ref = _phasor_tests(la, lb, lm)
    assert 0.2 < ref.mean() < 0.8  # both outcomes well represented
    # away from the bounds (where rounding could tip either form) the decisions agree
    d, dm = (lb - la).imag, (lm - la).imag
    chord = np.abs(2 * np.sin(d / 2))
    dev = np.abs(np.exp(1j * dm) - 0.5 * (1 + np.exp(1j * d)))
    clear = (np.abs(chord - CHORD) > 1e-9) & (np.abs(dev - MIDPOINT) > 1e-9)
    assert clear.mean() > 0.99
    assert np.array_equal(ours[clear], ref[clear])
    # a NaN phase (a pole hit) settles nothing on its own: the interval is not refused for it
    la[0, 0] = complex(0.0, np.nan)
    assert _accept_columns(la[:1], lb[:1], lm[:1], (None, None))[0, 0]


def test_evaluation_in_blocks_is_one_evaluation():
    rng = np.random.default_rng(11)
    s = 1j * 10.0 ** rng.uniform(-3, 3, 40_001)
    which = rng.integers(0, 5, s.size)

    def evaluate(x, w):
        return np.stack([np.log(np.abs(1.0 + x * w)), np.angle(x - w)], axis=1)

    assert np.array_equal(in_chunks(evaluate, s, which, size=4096), evaluate(s, which))
    assert np.array_equal(in_chunks(evaluate, s[:10], which[:10], size=4096), evaluate(s[:10], which[:10]))
