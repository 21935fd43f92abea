"""Ideal (improper) controller blocks vs the roots of the closed-loop characteristic polynomial.

Reference: `numpy.roots` of chi(s) = prod den_b(s) * det(I - A(s)), expanded here by
hand with `numpy.polymul` / `numpy.polyadd` for each wiring (re-derived in the
comments). For one loop with controller C = nC/dC and plant G = nG/dG,
chi = dC dG + nC nG; for the nested cascade (inner Ci, Gi; outer Co, Go),
det(I - A) = 1 + Ci Gi + Co Ci Gi Go, so
chi = dCo dCi dGi dGo + nCi nGi dCo dGo + nCo nCi nGi nGo.
Margins of a single loop are compared with python-control 0.10.2's
`stability_margins` of the loop transfer C G (a proper product, built with `control.tf`).
"""
from __future__ import annotations

import control as ct
import numpy as np
import pytest

from loopwise.analysis import check_text
from loopwise.errors import ModelError


def _rhp(chi) -> int:
    r = np.roots(chi)
    assert np.min(np.abs(r.real)) > 1e-6 * max(1.0, np.max(np.abs(r)))  # far from the axis
    return int(np.sum(r.real > 0))


def _pid(kp: float, ki: float, kd: float) -> tuple[np.ndarray, np.ndarray]:
    """Kp + Ki/s + Kd s = (Kd s^2 + Kp s + Ki) / s."""
    return np.array([kd, kp, ki]), np.array([1.0, 0.0])


SINGLE = """input r
block C = {kp} + {ki}/s + {kd}*s
block G = {g}
e = r - y
y = G(C(e))
break b at y
"""


@pytest.mark.parametrize("kp, ki, kd, g_text, g_num, g_den", [
    (2.0, 1.0, 0.5, "1/(s + 1)^2", [1.0], [1, 2, 1]),
    (20.0, 30.0, 0.1, "1/(s + 1)^2", [1.0], [1, 2, 1]),
    (1.0, 4.0, 0.2, "1/((s + 1)*(s + 2)*(s + 3))", [1.0], np.polymul([1, 3, 2], [1, 3])),
    (30.0, 60.0, 0.1, "1/((s + 1)*(s + 2)*(s + 3))", [1.0], np.polymul([1, 3, 2], [1, 3])),
    (1.0, 0.5, 2.0, "2/((s + 1)*(s - 0.5))", [2.0], [1, 0.5, -0.5]),
])
def test_ideal_pid_in_front_of_a_plant(kp, ki, kd, g_text, g_num, g_den):
    nC, dC = _pid(kp, ki, kd)
    chi = np.polyadd(np.polymul(dC, g_den), np.polymul(nC, g_num))  # dC dG + nC nG
    z_ref = _rhp(chi)
    res = check_text(SINGLE.format(kp=kp, ki=ki, kd=kd, g=g_text), "pid.loop")
    b = res.breaks[0]
    assert b.closed_loop_rhp_poles == z_ref and res.closed_loop_rhp_poles == z_ref
    assert b.stable == (z_ref == 0)
    # the block is accepted with a warning that names the need for a derivative filter
    f = next(f for f in res.findings if f.code == "LW283")
    assert f.span.line == 2 and "filter" in f.hint
    if z_ref == 0:
        gm, pm, _, _, wc, _ = ct.stability_margins(ct.tf(nC, dC) * ct.tf(g_num, g_den))
        assert b.margins.phase_margin_deg == pytest.approx(pm, rel=1e-6)
        assert b.margins.crossover_freq == pytest.approx(wc, rel=1e-6)


def test_lead_without_roll_off_in_front_of_a_double_lag():
    # C = 3 (s + 6)^2 / s (two zeros, one pole), G = 1/(s + 1)^2: L strictly proper;
    # chi = s (s + 1)^2 + 3 (s + 6)^2 = s^3 + 5 s^2 + 37 s + 108 (Routh: 5*37 > 108, stable)
    chi = np.polyadd(np.polymul([1, 0], [1, 2, 1]), 3 * np.polymul([1, 6], [1, 6]))
    assert np.allclose(chi, [1, 5, 37, 108])
    assert _rhp(chi) == 0
    res = check_text("input r\nblock C = 3*(s + 6)^2/s\nblock G = 1/(s + 1)^2\ne = r - y\ny = G(C(e))\n"
                     "break b at y\n")
    b = res.breaks[0]
    assert res.stable and b.stable and b.closed_loop_rhp_poles == 0
    _, pm, _, _, wc, _ = ct.stability_margins(ct.tf([3, 36, 108], [1, 0]) * ct.tf([1], [1, 2, 1]))
    assert b.margins.phase_margin_deg == pytest.approx(pm, rel=1e-6)
    assert b.margins.crossover_freq == pytest.approx(wc, rel=1e-6)


@pytest.mark.parametrize("kd_inner, kp_outer", [(0.05, 1.0), (0.05, 40.0), (0.5, 3.0)])
def test_ideal_pid_cascade(kd_inner, kp_outer):
    # inner: ideal PID Ci around Gi = 5/(s + 2)(0.1 s + 1); outer: PI Co around Go = 1/(s (s + 0.5))
    nCi, dCi = _pid(4.0, 8.0, kd_inner)
    nGi, dGi = [5.0], np.polymul([1, 2], [0.1, 1])
    nCo, dCo = np.array([kp_outer, 0.2 * kp_outer]), np.array([1.0, 0.0])
    nGo, dGo = [1.0], [1.0, 0.5, 0.0]
    chi = np.polyadd(np.polyadd(np.polymul(np.polymul(dCo, dCi), np.polymul(dGi, dGo)),
                                np.polymul(np.polymul(nCi, nGi), np.polymul(dCo, dGo))),
                     np.polymul(np.polymul(nCo, nCi), np.polymul(nGi, nGo)))
    z_ref = _rhp(chi)
    text = f"""input r
block Co = {kp_outer}*(1 + 0.2/s)
block Ci = 4 + 8/s + {kd_inner}*s
block Gi = 5/((s + 2)*(0.1*s + 1))
block Go = 1/(s*(s + 0.5))
eo = r - yo
ei = Co(eo) - yi
yi = Gi(Ci(ei))
yo = Go(yi)
break inner at yi -> ei
break outer at yo
"""
    res = check_text(text)
    assert res.closed_loop_rhp_poles == z_ref
    assert [b.closed_loop_rhp_poles for b in res.breaks] == [z_ref, z_ref]
    assert [f.code for f in res.findings].count("LW283") == 1


def test_improper_loop_is_refused_naming_the_blocks():
    # L = s^2/(s + 1): more zeros than poles round the loop, the closed loop is improper
    with pytest.raises(ModelError) as info:
        check_text("input r\nblock G = s^2/(s+1)\ne = r - y\ny = G(e)\nbreak b at y\n", "i.loop")
    assert info.value.code == "LW403" and "`G`" in info.value.message
    assert info.value.span.line == 4


def test_ideal_derivative_through_a_lag_is_accepted_but_twice_is_not():
    # Kd s * 1/(s + 1) is biproper (accepted); Kd s^2 * 1/(s + 1) is not
    ok = check_text("input r\nblock D = 0.5*s\nblock G = 1/(s+1)\ne = r - y\ny = G(D(e))\nbreak b at y\n")
    # chi = (s + 1) + 0.5 s = 1.5 s + 1: stable (numpy.roots: -2/3)
    assert _rhp([1.5, 1.0]) == 0 and ok.stable
    with pytest.raises(ModelError) as info:
        check_text("input r\nblock D = 0.5*s^2\nblock G = 1/(s+1)\ne = r - y\ny = G(D(e))\nbreak b at y\n")
    assert info.value.code == "LW403" and "`D`" in info.value.message


def test_improper_closed_loop_with_positive_feedback_is_refused():
    # L = -s/(s + 1) (positive feedback): 1 + L = 1/(s + 1) -> the closed loop s ... is improper
    with pytest.raises(ModelError) as info:
        check_text("input r\nblock D = s\nblock G = 1/(s+1)\ne = r + y\ny = G(D(e))\nbreak b at y\n")
    assert info.value.code == "LW403"


def test_delay_with_improper_high_frequency_gain_stays_neutral():
    # ideal PD (1 + 2 s) through exp(-0.1 s)/(s + 1): |L(j w)| -> 2 as w -> inf through the
    # delay: a neutral loop, refused (LW401); with Kd = 0.5 the high-frequency gain is 0.5
    with pytest.raises(ModelError) as info:
        check_text("input r\nblock C = 1 + 2*s\nblock G = exp(-0.1*s)/(s+1)\ne = r - y\ny = G(C(e))\nbreak b at y\n")
    assert info.value.code == "LW401"
    res = check_text("input r\nblock C = 1 + 0.5*s\nblock G = exp(-0.1*s)/(s+1)\ne = r - y\ny = G(C(e))\n"
                     "break b at y\n")
    # python-control reference: Pade(0.1, 10) of the delay; closed-loop poles all stable
    pn, pd = ct.pade(0.1, 10)
    L = ct.tf([0.5, 1.0], [1.0]) * ct.tf(pn, pd) * ct.tf([1.0], [1.0, 1.0])
    assert np.all(ct.feedback(L, 1).poles().real < 0)
    assert res.stable


def test_state_space_forms_through_an_ideal_pid():
    # the engine's state-space forms (used by tools and the cascade references) realise the
    # ideal PID together with the plant it feeds: closed-loop eigenvalues = numpy.roots(chi),
    # chi = s (s + 1)^2 + (0.5 s^2 + 2 s + 1); L's state space = L evaluated exactly
    from loopwise.testing import closed_loop_poles, loop_state_space, prepare_text
    prep = prepare_text(SINGLE.format(kp=2.0, ki=1.0, kd=0.5, g="1/(s + 1)^2"))
    chi = np.polyadd(np.polymul([1.0, 0.0], [1, 2, 1]), [0.5, 2.0, 1.0])
    assert np.allclose(np.sort_complex(closed_loop_poles(prep)), np.sort_complex(np.roots(chi)), atol=1e-9)
    A, B, C, D = loop_state_space(prep, "b")
    s = 1j * np.logspace(-2, 3, 11)
    ss = np.array([(C @ np.linalg.solve(si * np.eye(A.shape[0]) - A, B) + D)[0, 0] for si in s])
    assert np.allclose(ss, prep.loop_transfer("b", s), rtol=1e-9, atol=0)
