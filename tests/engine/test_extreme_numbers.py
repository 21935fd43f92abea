"""Models with extreme coefficients: a located error or a right verdict, never an internal error.

Generated one-loop models (fixed seeds) whose gains, poles and zeros range over up to
600 decades. The reference for the verdict is the closed-loop characteristic
polynomial num + den, expanded and rooted in 120-digit arithmetic (`mpmath.polyroots`,
mpmath from the test extras).
"""
from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest

from loopwise.analysis import check_text
from loopwise.errors import ModelError, ModelErrors


def _model(rng, decades: int):
    """(text, numerator, denominator) of a random loop transfer, coefficients in mpmath."""
    def num():
        m, e = float(rng.uniform(1, 9.9)), int(rng.integers(-decades, decades + 1))
        return f"{m:.3g}e{e}", mpmath.mpf(f"{m:.3g}e{e}")

    def factor():
        kind = int(rng.integers(4))
        if kind == 0:
            (ta, a), (tb, b) = num(), num()
            sign = "+" if rng.random() < 0.7 else "-"
            return f"({ta}*s{sign}{tb})", [a, b if sign == "+" else -b]
        if kind == 1:
            (ta, a), (tb, b) = num(), num()
            return f"(s^2+{ta}*s+{tb})", [mpmath.mpf(1), a, b]
        if kind == 2:
            return "s", [mpmath.mpf(1), mpmath.mpf(0)]
        tb, b = num()
        return f"(s+{tb})", [mpmath.mpf(1), b]

    def mul(a, b):
        out = [mpmath.mpf(0)] * (len(a) + len(b) - 1)
        for i, x in enumerate(a):
            for j, y in enumerate(b):
                out[i + j] += x * y
        return out

    tk, k = num()
    nf = [factor() for _ in range(int(rng.integers(0, 2)))]
    df = [factor() for _ in range(int(rng.integers(1, 4)))]
    n, d = [k], [mpmath.mpf(1)]
    for _, c in nf:
        n = mul(n, c)
    for _, c in df:
        d = mul(d, c)
    body = "*".join([tk] + [f for f, _ in nf]) + "/(" + "*".join(f for f, _ in df) + ")"
    return f"model x\ninput r\ne = r - y\ny = [{body}](e)\nbreak b at y\n", n, d


def _check(text):
    """The result, or None for a located model error (anything else fails the test)."""
    try:
        return check_text(text, "x.loop")
    except (ModelError, ModelErrors) as exc:
        errors = exc.errors if isinstance(exc, ModelErrors) else [exc]
        assert all(e.span.file == "x.loop" and e.code.startswith("LW") and e.code != "LW900" for e in errors)
        return None


def test_no_internal_error_over_600_decades():
    rng = np.random.default_rng(20261202)
    outcomes = {"verdict": 0, "error": 0}
    for _ in range(80):
        text, _, _ = _model(rng, 300)
        outcomes["verdict" if _check(text) is not None else "error"] += 1
    assert outcomes["verdict"] > 5 and outcomes["error"] > 5  # both kinds were exercised


@pytest.mark.parametrize("seed", range(4))
def test_verdicts_over_16_decades_match_the_characteristic_roots(seed):
    rng = np.random.default_rng([20261202, seed])
    checked = 0
    for _ in range(20):
        text, n, d = _model(rng, 8)
        if len(n) > len(d):
            continue
        res = _check(text)
        if res is None:
            continue
        chi = [mpmath.mpf(0)] * (len(d) - len(n)) + n
        chi = [a + b for a, b in zip(d, chi)]
        while len(chi) > 1 and chi[0] == 0:
            chi = chi[1:]
        with mpmath.workdps(120):
            roots = mpmath.polyroots(chi[::-1], maxsteps=500, extraprec=500, asc=True) if len(chi) > 1 else []
        roots = [complex(r) for r in (roots if isinstance(roots, (list, tuple)) else [roots])]
        b = res.breaks[0]
        unstable = [r for r in roots if r.real > 0]
        # the engine's resolution (docs/method.md): damping below 1e-8, or a closed-loop pole
        # inside the indentation round an axis pole (1e-9 of the distance to the nearest other
        # root and of 1 rad/s), counts as on the axis (marginal)
        scale = min([abs(complex(p)) for p in roots if abs(complex(p)) > 0] + [1.0])
        near = [r for r in roots if abs(r.real) <= 1e-8 * abs(r) or abs(r) <= 1e-9 * max(scale, 1e-300) * 1e3]
        if unstable:
            assert not b.stable, (text, roots)  # never stable when a root is in the RHP
            if not near:
                assert b.closed_loop_rhp_poles == len(unstable) and not b.marginal, (text, roots)
        elif not near:
            assert b.stable, (text, roots)
        checked += 1
    assert checked >= 5


def test_a_sum_whose_common_numerator_overflows_is_refused_at_the_sum(tmp_path):
    """1/(s + 1e20)^16 + 1/(s + 1): over the common denominator the numerator holds
    (s + 1e20)^16, whose coefficients reach 1e320 (beyond double precision, numpy.poly
    gives inf). It was silently read as 1/((s + 1e20)^16 (s + 1)), whose loop is ~0 at
    every frequency; it must be a located LW106 at the sum instead."""
    from loopwise.analysis import check_text
    from loopwise.errors import ModelError

    text = "input r\nblock G = 1/(s+1e20)^16 + 1/(s+1)\ne = r - y\ny = G(e)\nbreak b at y\n"
    with pytest.raises(ModelError) as info:
        check_text(text, "m.loop")
    err = info.value.errors[0]  # (followed by LW228 where the block is applied)
    assert err.code == "LW106" and err.span.line == 2
