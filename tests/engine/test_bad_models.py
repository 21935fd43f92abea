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


def test_improper_loop_is_an_error():
    # L = s^2/(s+1): the loop gain grows without bound (an ideal derivative that no lag tames)
    with pytest.raises(ModelError) as info:
        check_text(loop("s^2/(s+1)"))
    assert info.value.code == "LW403" and info.value.span.line == 4


def test_improper_loop_transfer_at_one_break_is_named_there():
    # blocks all biproper; the closed loop is well-posed (det(I - A(inf)) = 1 + 1 - 1), but with
    # the wire y -> e cut the loop e -> y -> w -> e has gain 1 at infinity: L at that break is
    # s(s + 1)/(2s + 1) by hand, improper
    text = ("input r\nblock D = s/(s+1)\nblock W = s/(s+1)\ne = r - y + w\ny = D(e)\nw = W(y)\n"
            "break b at y -> e\n")
    with pytest.raises(ModelError) as info:
        check_text(text, "i.loop")
    assert info.value.code == "LW404" and info.value.span.line == 7 and "`b`" in info.value.message


def test_large_delay_free_gain_is_not_called_neutral():
    # L = 1e16/(s + 1): closed loop s + 1 + 1e16, stable (analytic); no delay anywhere
    res = check_text(loop("1e16/(s+1)"))
    assert res.stable and res.breaks[0].closed_loop_rhp_poles == 0
    # a constant loop gain of 1e16 is a well-posed algebraic loop (1 + 1e16 != 0)
    res = check_text("input r\ne = r - y\ny = 1e16*e\nbreak b at y\n")
    assert res.stable and any(f.code == "LW391" for f in res.findings)


@pytest.mark.parametrize("body, code, line", [
    ("[1/(s+1e-308)](e)", "LW406", 4),           # a pole far below the engine's range
    ("[1/(1e200*s+1)^2](e)", "LW106", 4),        # the coefficients overflow
    ("1e300*1e300*e", "LW106", 4),               # a wiring gain that overflows
    ("[1e299/(s+1e-140)](e)", "LW406", 1),       # L(0) = 1e439: values beyond double precision
])
def test_numbers_beyond_double_precision_get_a_located_error(body, code, line):
    with pytest.raises((ModelError, ModelErrors)) as info:
        check_text(f"input r\ne = r - y\ny = {body}\nbreak b at y\n".replace("input r", "model x\ninput r"),
                   "x.loop")
    err = info.value.errors[0] if isinstance(info.value, ModelErrors) else info.value
    assert err.code == code and err.span.line == line and err.span.file == "x.loop"


def test_feedback_paths_that_cancel_are_named():
    # y = G(e + y) with e = r - y: the argument of G is r, so L at `y` is 0 at every frequency
    with pytest.raises(ModelError) as info:
        check_text("input r\nblock G = 2/(s+1)\ne = r - y\ny = G(e + y)\nbreak b at y\n", "z.loop")
    assert info.value.code == "LW405" and info.value.span.line == 5 and "sign" in info.value.hint


def test_positive_feedback_gets_a_hint_to_check_the_sign():
    # e = r + y around G = 2/(s+1): L = -2/(s+1), closed loop s + 1 - 2 = s - 1: Z = 1 (analytic)
    res = check_text("input r\nblock G = 2/(s+1)\ne = r + y\ny = G(e)\nbreak b at y\n")
    b = res.breaks[0]
    assert (b.open_loop_rhp_poles, b.closed_loop_rhp_poles) == (0, 1)
    w = next(w for w in b.warnings if w.code == "LW489")
    assert "`e`" in w.message and "-2" in w.message
    # with an integrator: L = -2/(s(s+1)), closed loop s^2 + s - 2 = (s + 2)(s - 1): Z = 1
    b = check_text("input r\nblock G = 2/(s*(s+1))\ne = r + y\ny = G(e)\nbreak b at y\n").breaks[0]
    assert b.closed_loop_rhp_poles == 1 and any(w.code == "LW489" for w in b.warnings)
    # an open-loop unstable plant is not flagged: L = -2/(s-1)... P = 1 there
    b = check_text("input r\nblock G = 2/(s-1)\ne = r + y\ny = G(e)\nbreak b at y\n").breaks[0]
    assert not any(w.code == "LW489" for w in b.warnings)


def test_poles_spread_over_24_decades_are_flagged():
    res = check_text(loop("1e12/((s+1e-12)*(s+1e12))*(s+1)"), "h.loop")
    assert any(f.code == "LW483" for f in res.findings)


def test_loops_spanning_more_than_26_decades_are_refused_before_sampling():
    """docs/method.md, numbers beyond double precision: 1e-13 to 1e14 rad/s is 27 decades."""
    with pytest.raises(ModelError) as err:
        check_text(loop("1e14/((s+1e-13)*(s+1e14))*(s+1)"), "h.loop")
    assert [e.code for e in err.value.errors] == ["LW406"]
    assert "span 27 decades" in str(err.value.errors[0])


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


def test_a_refusal_says_what_could_not_be_sampled_and_why():
    # a delay of 1e6 s against 1 s dynamics: the delay step rule (docs/method.md) needs some
    # 2.5 million samples up to the certified radius, beyond the budget: refused, naming the
    # break, the frequencies and the delay
    with pytest.raises(ModelError) as info:
        check_text(loop("0.5*exp(-1e6*s)/(s+1)"), "d.loop")
    err = info.value
    assert err.code == "LW402" and "break `b`" in err.message and "rad/s" in err.message
    assert "delay" in err.hint


def test_an_inline_transfer_is_named_by_its_place_in_messages():
    """Its internal label `[..]@4:5` used to be printed as if it were a block name."""
    text = "model il\ninput r\ne = r - y\ny = [1/((s+1e-160)*(s+1))](e)\nbreak b at y\n"
    with pytest.raises(ModelError) as err:
        check_text(text, "il.loop")
    message = str(err.value.errors[0])
    assert "the inline transfer at 4:5 has a pole at 1e-160 rad/s" in message and "[..]" not in message
