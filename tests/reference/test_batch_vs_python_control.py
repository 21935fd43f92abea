"""The batch API (engine/batch.py): many parameter samples of one wiring at once.

References: python-control 0.10.2's `control.tf` evaluated at the same points (each
sample's loop transfer, built by hand), the closed-loop poles of `control.feedback`
(each sample's Z), and the one-model engine (`check_text`) for every count and margin.
"""
from __future__ import annotations

import control as ct
import numpy as np
import pytest

from loopwise.analysis import check_many, check_text
from loopwise.testing import analyse_loop, analyse_loops, prepare_text
from loopwise.engine.batch import Batch
from loopwise.transfer import Transfer

MODEL = """input r, d
block C = {kp}*(1 + 1/({ti}*s))
block P = {a}/(s*({tau}*s + 1)){delay}
e = r - m
u = C(e)
y = P(u + d)
m = [1/(0.01*s + 1)](y)
break loop at m
"""

SAMPLES = [dict(kp=kp, ti=ti, a=a, tau=tau) for kp in (0.5, 2.0, 8.0) for ti in (1.0, 4.0)
           for a, tau in ((1.0, 0.2), (3.0, 0.05))]


def _text(p, delay=""):
    return MODEL.format(delay=delay, **p)


def _tf(p):
    """python-control's L = C P H of one sample (unity negative feedback at m)."""
    C = ct.tf([p["kp"] * p["ti"], p["kp"]], [p["ti"], 0.0])
    P = ct.tf([p["a"]], [p["tau"], 1.0, 0.0])
    return C * P * ct.tf([1.0], [0.01, 1.0])


def _batch(delay=""):
    return Batch([prepare_text(_text(p, delay)).reduction for p in SAMPLES])


def test_loop_transfers_of_every_sample_at_once():
    s = 1j * np.logspace(-2, 3, 41)
    L = _batch().loop_transfer("loop", s)
    assert L.shape == (len(SAMPLES), s.size)
    ref = np.array([_tf(p)(s) for p in SAMPLES])
    np.testing.assert_allclose(L, ref, rtol=1e-10)


def test_the_counts_inputs_satisfy_the_factorisation():
    # det(I - A) = det(I - A_k) (1 + L_k), sample by sample (docs/method.md)
    b = _batch(delay="*exp(-0.02*s)")
    s = 1j * np.logspace(-1, 2, 17)
    ph, lg = b.characteristic(s)
    phk, lgk, L = b.break_terms("loop", s)
    lhs = lg + 1j * ph
    rhs = lgk + 1j * phk + np.log(1.0 + L)
    np.testing.assert_allclose(np.exp(lhs - rhs), 1.0, rtol=1e-9)
    P0, axis = b.open_loop()
    assert P0.tolist() == [0] * len(SAMPLES)  # integrators sit on the axis, indented round
    assert all(0.0 in a for a in axis)
    R = b.radius()
    assert R.shape == (len(SAMPLES),) and np.all(R > 0)


def test_every_sample_is_counted_as_one_model_would_be():
    b = _batch()
    for p, c in zip(SAMPLES, b.count()):
        one = check_text(_text(p))
        poles = ct.feedback(_tf(p), 1).poles()
        assert c.Z == one.closed_loop_rhp_poles == int(np.sum(poles.real > 0))
        got, ref = c.counts["loop"], one.breaks[0]
        assert (got.P, got.N) == (ref.open_loop_rhp_poles, ref.encirclements)


def test_check_many_gives_what_check_text_gives():
    preps = [prepare_text(_text(p, "*exp(-0.02*s)")) for p in SAMPLES]
    many = check_many(preps)
    for p, got in zip(SAMPLES, many):
        ref = check_text(_text(p, "*exp(-0.02*s)"))
        assert got.stable == ref.stable and got.closed_loop_rhp_poles == ref.closed_loop_rhp_poles
        a, b = got.breaks[0], ref.breaks[0]
        assert (a.margins is None) == (b.margins is None)
        if a.margins is not None:
            assert a.margins.phase_margin_deg == pytest.approx(b.margins.phase_margin_deg, rel=1e-9)
            assert a.margins.crossover_freq == pytest.approx(b.margins.crossover_freq, rel=1e-9)
            for x, y in ((a.margins.gain_margin_up_db, b.margins.gain_margin_up_db),
                         (a.margins.gain_margin_down_db, b.margins.gain_margin_down_db)):
                assert (x is None) == (y is None) and (x is None or x == pytest.approx(y, rel=1e-9))
            assert a.margins.disk_margin.alpha == pytest.approx(b.margins.disk_margin.alpha, rel=1e-6)
        else:
            assert a.stabilising_gains == pytest.approx(b.stabilising_gains, rel=1e-9)


def test_analyse_loops_matches_analyse_loop():
    Ls = [Transfer.from_coeffs([k], np.polymul([1, 1], [1, 2, 4])) for k in (1.0, 5.0, 20.0, 40.0)]
    for L, got in zip(Ls, analyse_loops(Ls)):
        ref = analyse_loop(L)
        # Routh on (s + 1)(s^2 + 2s + 4) + K = s^3 + 3s^2 + 6s + 4 + K: stable iff K < 14
        assert got.stable == ref.stable == (L.gain < 14)
        assert got.closed_loop_rhp_poles == ref.closed_loop_rhp_poles


def test_a_batch_refuses_different_wirings():
    a = prepare_text(_text(SAMPLES[0])).reduction
    b = prepare_text("input r\nblock G = 1/(s+1)\ne = r - y\ny = G(e)\nbreak loop at y\n").reduction
    with pytest.raises(ValueError):
        Batch([a, b])


def test_check_many_can_leave_out_the_stabilising_gains_and_nothing_else():
    # what a sweep asks for: its records hold no gain ranges (sweep/evaluate.py); a longer
    # delay than above makes half of the samples unstable, each with a stabilising range
    preps = [prepare_text(_text(p, "*exp(-0.3*s)")) for p in SAMPLES]
    full, lean = check_many(preps), check_many(preps, stabilising_gains=False)
    assert any(r.breaks[0].stabilising_gains for r in full)  # some sample has a range to leave out
    for a, b in zip(lean, full):
        x, y = a.breaks[0], b.breaks[0]
        assert x.stabilising_gains == () and (a.stable, a.closed_loop_rhp_poles) == (b.stable, b.closed_loop_rhp_poles)
        assert (x.open_loop_rhp_poles, x.encirclements, x.margins) == (y.open_loop_rhp_poles, y.encirclements, y.margins)
        assert [w.code for w in x.warnings] == [w.code for w in y.warnings]
