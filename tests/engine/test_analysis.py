"""The judge stage: cascade separation and requirements over the breaks."""
from __future__ import annotations

import pytest

from loopwise.analysis import check_text

CASCADE = """input r
param ki = {ki}
block Co = 0.5*(1 + 1/(10*s))
block Ci = ki*(1 + 1/(0.5*s))
block Pi = 1/(0.5*s + 1)
block Po = 1/(5*s + 1)
eo = r - yo
ei = Co(eo) - yi
yi = Pi(Ci(ei))
yo = Po(yi)
break inner at yi -> ei
break outer at yo
require inner separation >= 4
require * phase_margin >= 30deg
"""


def test_separation_is_the_ratio_of_the_crossovers():
    res = check_text(CASCADE.format(ki=8.0))
    inner, outer = res.breaks
    assert inner.enclosed_by == "outer" and outer.enclosed_by is None
    ratio = inner.margins.crossover_freq / outer.margins.crossover_freq
    assert inner.separation == pytest.approx(ratio, rel=1e-12)
    req = next(r for r in inner.requirements if r.metric == "separation")
    assert req.value == pytest.approx(ratio) and req.met == (ratio >= 4)
    # the star requirement applies to both breaks, each with its own line
    assert [r.line for r in inner.requirements if r.metric == "phase_margin"] == [14]
    assert [r.line for r in outer.requirements if r.metric == "phase_margin"] == [14]


def test_a_slow_inner_loop_is_warned_about():
    res = check_text(CASCADE.format(ki=0.04))
    inner = res.breaks[0]
    assert inner.separation is not None and inner.separation < 3
    assert any(w.code == "LW383" and "common practice" in w.message for w in inner.warnings)
    assert not next(r for r in inner.requirements if r.metric == "separation").met


def test_unstable_break_claims_no_margins_and_gives_the_stabilising_range():
    # L = 12/(s+1)^3: by Routh, (s+1)^3 + K is stable for 0 < K < 8 (a pair crosses at w = sqrt(3)),
    # so K = 12 gives Z = 2 (analytic)
    text = "input r\nblock G = 12/(s+1)^3\ne = r - y\ny = G(e)\nbreak b at y\nrequire b phase_margin >= 30deg\n"
    b = check_text(text).breaks[0]
    assert not b.stable and b.margins is None and b.closed_loop_rhp_poles == 2
    assert not b.requirements[0].met and b.requirements[0].value is None
    # stable for 0 < k*12 < 8 (Routh on (s+1)^3 + K: K < 8), i.e. k < 2/3
    (lo, hi), = b.stabilising_gains
    assert lo == 0.0 and hi == pytest.approx(8 / 12, rel=1e-9)
