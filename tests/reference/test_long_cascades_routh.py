"""Nested cascades of 47 and 50 loops 3 times apart (23 and 24 decades of poles) and of 60
loops 2 times apart against an exact Routh count.

The reference is the closed loop's characteristic polynomial built from the stages'
coefficients as exact rationals (`Cascade.characteristic`) and its Routh array's first
column in 1000- and 2000-digit arithmetic (`routh_rhp`, mpmath): with roots over 23
decades its coefficients span hundreds of decades, so neither python-control's poles
nor numpy's roots are a reference at this size. From 48 loops on, the engine's solve may
leave double precision's range at the low end of the contour: the model is then refused
(LW406) at once, not after a minute of sampling (docs/method.md, numbers beyond double
precision). No timing is asserted here; bench/engine.py times the growth.
"""
from __future__ import annotations

from dataclasses import replace

import pytest

from loopwise.analysis import check_text
from loopwise.errors import ModelError

from .loopsets import Cascade, nested_cascade, routh_rhp


def _with_gain(c: Cascade, k: int, factor: float) -> Cascade:
    """The cascade with loop k's controller gain times `factor`."""
    stages = list(c.stages)
    stages[k - 1] = replace(stages[k - 1], c_num=tuple(x * factor for x in stages[k - 1].c_num))
    return replace(c, stages=tuple(stages))


def test_routh_helper_counts_known_polynomials():
    """(s - 1)(s + 2)(s^2 + s + 1): one RHP root; (s^2 - s + 4)(s + 3): two (factored by hand)."""
    from fractions import Fraction as F

    # (s - 1)(s + 2) = s^2 + s - 2; times (s^2 + s + 1): s^4 + 2 s^3 + 0 s^2 - s - 2
    assert routh_rhp([F(1), F(2), F(0), F(-1), F(-2)], digits=50) == 1
    # (s^2 - s + 4)(s + 3) = s^3 + 2 s^2 + s + 12
    assert routh_rhp([F(1), F(2), F(1), F(12)], digits=50) == 2


@pytest.mark.parametrize("n, loop, factor", [(47, None, 1.0), (47, 20, 10.0), (50, None, 1.0), (50, 45, 10.0)])
def test_47_and_50_nested_loops_match_the_exact_routh_count(n, loop, factor):
    """23 and 24 decades of poles: counted, stable and with one loop's gain raised (Z = 2)."""
    c = nested_cascade(n)
    if loop is not None:
        c = _with_gain(c, loop, factor)
    want = routh_rhp(c.characteristic())
    res = check_text(c.text(), "cascade.loop")
    assert res.closed_loop_rhp_poles == want
    assert res.stable == (want == 0)
    # every break's own count agrees with the whole model's (Z_k = P_k + N_k)
    assert all(b.closed_loop_rhp_poles == want for b in res.breaks)
    if loop is not None:
        assert want > 0  # the test also covers an unstable verdict


@pytest.mark.parametrize("n", [30, 60])
def test_nested_loops_2_times_apart_match_the_exact_routh_count(n):
    """Loops 2 times apart span fewer decades (18 at 60 loops): 60 breaks are counted.
    At this spacing the generated tuning leaves the cascade unstable at 30 loops (Routh: 2)
    and stable at 60 (Routh: 0), so both verdicts are covered."""
    c = nested_cascade(n, separation=2.0)
    want = routh_rhp(c.characteristic())
    res = check_text(c.text(), "cascade.loop")
    assert res.closed_loop_rhp_poles == want
    assert all(b.closed_loop_rhp_poles == want for b in res.breaks)


@pytest.mark.parametrize("n", [48, 53])
def test_cascades_at_the_edge_of_double_precision_are_counted_right_or_refused(n):
    """Whether the solve stays within double precision's range depends on the signals the
    elimination keeps: 48 and 53 loops (this generator's seed) overflow at the low end of
    the contour and are refused at once; a verdict, if one comes, must be Routh's."""
    c = nested_cascade(n)
    want = routh_rhp(c.characteristic())
    try:
        res = check_text(c.text(), "cascade.loop")
    except ModelError as err:
        codes = [e.code for e in err.errors]
        assert codes == ["LW406"], codes
        assert "double precision" in str(err.errors[0])
    else:
        assert res.closed_loop_rhp_poles == want
