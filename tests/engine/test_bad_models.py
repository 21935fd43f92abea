"""Models the engine must refuse or flag: never a silent wrong verdict."""
from __future__ import annotations

import pytest

from loopwise.analysis import check_text
from loopwise.errors import ModelError, ModelErrors


def loop(block: str, extra: str = "") -> str:
    return f"input r\nblock G = {block}\ne = r - y\ny = G(e)\nbreak b at y\n{extra}"


def test_neutral_loop_is_refused_with_a_located_error():
    # high-frequency gain through the delay: 2*(s+3)/(s+1) -> 2 at infinity
    with pytest.raises(ModelError) as info:
        check_text(loop("2*exp(-0.1*s)*(s+3)/(s+1)"), "n.loop")
    assert info.value.code == "LW401" and "neutral" in info.value.message
    assert info.value.span.file == "n.loop" and info.value.hint


def test_proper_delayed_loop_below_one_is_fine():
    # 0.5 exp(-s) (s+3)/(s+1): |L(inf)| = 0.5 < 1, |L(0)| = 1.5 (stable: a small-gain
    # argument fails at low frequency, so this is the count's job; python-control's
    # feedback poles of a high-order Pade version agree, checked in test_delays_analytic)
    res = check_text(loop("0.5*exp(-s)*(s+3)/(s+1)"))
    assert res.breaks[0].open_loop_rhp_poles == 0


def test_ill_posed_algebraic_loop_is_an_error():
    text = "input r\nblock G = 1/(s+1)\ne = r + u - y\nu = e\ny = G(u)\nbreak b at y\n"
    with pytest.raises(ModelErrors) as info:
        check_text(text)
    assert info.value.errors[0].code == "LW301"


def test_ill_posed_through_a_biproper_block_is_an_error():
    # e = r - y + 2*H(e) with H(inf) = 0.5: I - A(inf) is singular for the signal e
    text = "input r\nblock H = 0.5*(s+2)/(s+1)\nblock G = 1/(s+1)\ne = r - y + H(2*e)\ny = G(e)\nbreak b at y\n"
    with pytest.raises(ModelErrors) as info:
        check_text(text)
    assert info.value.errors[0].code == "LW301"


def test_improper_block_is_an_error():
    with pytest.raises(ModelErrors) as info:
        check_text(loop("s^2/(s+1)"))
    assert info.value.errors[0].code == "LW220"


def test_poles_spread_over_24_decades_are_flagged():
    res = check_text(loop("1e12/((s+1e-12)*(s+1e12))*(s+1)"), "h.loop")
    assert any(f.code == "LW483" for f in res.findings)


def test_hidden_unstable_mode_is_named():
    # C's zero at s = 1 cancels P's pole at s = 1: L = 1/((s+2)(s+3)) looks harmless,
    # but the closed loop keeps the mode at s = 1 (Z = 1; closed-loop characteristic
    # (s-1)((s+2)(s+3) + 1) by hand)
    text = ("input r\nblock C = (s-1)/(s+2)\nblock P = 1/((s-1)*(s+3))\ne = r - y\n"
            "y = P(C(e))\nbreak b at y\n")
    res = check_text(text)
    b = res.breaks[0]
    assert not b.stable and b.closed_loop_rhp_poles == 1 and b.open_loop_rhp_poles == 1
    assert any(w.code == "LW487" and "hidden unstable mode" in w.message and "P" in w.message and "C" in w.message
               for w in b.warnings)


def test_marginal_loop_reports_its_frequency_and_strict_count():
    # K/(s(s+1)^2) with K = 2: closed loop s^3 + 2s^2 + s + 2 = (s + 2)(s^2 + 1): poles +-j
    res = check_text(loop("2/(s*(s+1)^2)"))
    b = res.breaks[0]
    assert b.marginal and not b.stable and b.margins is None
    assert b.marginal_freq == pytest.approx(1.0, rel=1e-6)
    assert b.closed_loop_rhp_poles == 0


def test_breaks_agree_on_the_whole_model_count():
    text = ("input r\nblock Co = 2*(1 + 1/(5*s))\nblock Pi = 10/(0.1*s + 1)\nblock Po = 1/(s + 1)\n"
            "eo = r - yo\nei = Co(eo) - yi\nyi = Pi(ei)\nyo = Po(yi)\n"
            "break inner at yi -> ei\nbreak outer at yo\n")
    res = check_text(text)
    assert {b.closed_loop_rhp_poles for b in res.breaks} == {res.closed_loop_rhp_poles}
    assert not any("numerical" in w for b in res.breaks for w in b.warnings)


def test_unstable_block_on_an_input_path_is_counted_and_named():
    # [1/(s-1)](d): its state grows whatever the loop does; chi = prod(den_b) det(I - A)
    # includes its denominator, so Z = 1 (python-control's interconnect of the same
    # wiring has the pole at +1 among its closed-loop poles: (s-1) is a factor by hand)
    text = "input r, d\nblock G = 2/((s+1)*(s+2))\ne = r - y\ny = G(e) + [1/(s-1)](d)\nbreak b at y\n"
    res = check_text(text, "x.loop")
    assert res.closed_loop_rhp_poles == 1 and not res.stable
    w = [f for f in res.findings if f.code == "LW484"]
    assert len(w) == 1 and "`d`" in w[0].message and w[0].span.line == 4
