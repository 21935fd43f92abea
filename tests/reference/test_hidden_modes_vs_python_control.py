"""Closed-loop poles that exact pole-zero cancellations hide, vs python-control's state space.

Reference: python-control 0.10.2. Every block application is converted to its own
state-space system (`control.tf2ss` of the transfer as written, so a cancelled
factor keeps its state) and wired with `control.interconnect`; the closed loop's
eigenvalues (`.poles()`) then hold every mode, hidden or not. Delays are replaced
by a Pade approximant (`control.pade`, order 6): a cancellation between rational
parts is exact whatever the delay, so the hidden eigenvalue is the same.
"""
from __future__ import annotations

import dataclasses

import control as ct
import numpy as np
import pytest

from loopwise.analysis import check_text, verdict_adjustment
from loopwise.cli import main


def _closed_loop_eigs(blocks: dict, wiring: list, inputs: list[str], output: str) -> np.ndarray:
    """blocks: name -> (num, den); wiring: (block, input signal or sum-junction, output signal)."""
    systems = []
    for name, (num, den) in blocks.items():
        sys_ = ct.tf2ss(ct.tf(num, den))  # as written: a common factor keeps its state
        systems.append(ct.ss(sys_.A, sys_.B, sys_.C, sys_.D, inputs=f"{name}_in", outputs=f"{name}_out",
                             name=name))
    for sig, terms in wiring:
        systems.append(ct.summing_junction(inputs=[t for t in terms], output=sig, name=f"sum_{sig}"))
    cl = ct.interconnect(systems, inplist=inputs, outlist=[output], check_unused=False)
    return np.linalg.eigvals(cl.A)


PI_ZERO = """model pi_zero
input r
block C = 2*(1 + 1/(5*s))
block G = s/((s+1)*(0.2*s+1)){delay}
e = r - y
y = G(C(e))
break b at y
"""

NOTCH = """model notch
input r
block C = 2*(s^2 + 4)/(s+2)^2
block G = 1/((s^2 + 4)*(s+1)){delay}
e = r - y
y = G(C(e))
break b at y
"""


def _pi_zero_eigs(delay: float) -> np.ndarray:
    num_g, den_g = [1.0, 0.0], np.polymul([1, 1], [0.2, 1])
    if delay:
        pn, pd = ct.pade(delay, 6)
        num_g, den_g = np.polymul(num_g, pn), np.polymul(den_g, pd)
    return _closed_loop_eigs({"C": ([10.0, 2.0], [5.0, 0.0]), "G": (num_g, den_g)},
                             [("C_in", ["r", "-G_out"]), ("G_in", ["C_out"])], ["r"], "G_out")


def _notch_eigs(delay: float) -> np.ndarray:
    num_g, den_g = [1.0], np.polymul([1, 0, 4], [1, 1])
    if delay:
        pn, pd = ct.pade(delay, 6)
        num_g, den_g = np.polymul(num_g, pn), np.polymul(den_g, pd)
    return _closed_loop_eigs({"C": (2 * np.array([1.0, 0, 4]), np.polymul([1, 2], [1, 2])), "G": (num_g, den_g)},
                             [("C_in", ["r", "-G_out"]), ("G_in", ["C_out"])], ["r"], "G_out")


@pytest.mark.parametrize("delay", [0.0, 0.05])
def test_pi_integrator_against_a_plant_zero_at_the_origin_is_marginal(delay):
    eigs = _pi_zero_eigs(delay)
    # python-control: an eigenvalue at s = 0 (to rounding), all others in the left half plane
    assert np.min(np.abs(eigs)) < 1e-9 and np.all(eigs.real < 1e-9)
    text = PI_ZERO.format(delay=f"*exp(-{delay}*s)" if delay else "")
    res = check_text(text, "pi.loop")
    b = res.breaks[0]
    assert not res.stable and b.marginal and b.marginal_cause == "hidden" and b.marginal_freq == 0.0
    assert b.closed_loop_rhp_poles == 0 and b.margins is None and b.stabilising_gains == ()
    (mode,) = res.hidden_modes
    assert (mode.pole, mode.multiplicity, mode.code) == (0j, 1, "LW488")
    assert mode.pole_blocks == ("C",) and mode.zero_blocks == ("G",)
    f = next(f for f in res.findings if f.code == "LW488")
    assert f.span.line == 6 and "`C`" in f.message and "`G`" in f.message
    d = res.to_dict()
    assert d["breaks"][0]["marginal_cause"] == "hidden"
    assert d["hidden_modes"][0]["on_axis"] and d["hidden_modes"][0]["freq"] == 0.0


@pytest.mark.parametrize("delay", [0.0, 0.05])
def test_notch_zeros_against_undamped_plant_poles_are_marginal(delay):
    eigs = _notch_eigs(delay)
    # python-control: a pair at +-2j (to rounding)
    assert np.min(np.abs(eigs - 2j)) < 1e-7 and np.min(np.abs(eigs + 2j)) < 1e-7
    res = check_text(NOTCH.format(delay=f"*exp(-{delay}*s)" if delay else ""), "n.loop")
    b = res.breaks[0]
    assert not res.stable and b.marginal and b.marginal_freq == pytest.approx(2.0, rel=1e-12)
    (mode,) = res.hidden_modes
    assert mode.pole == pytest.approx(2j) and mode.code == "LW488"
    assert mode.pole_blocks == ("G",) and mode.zero_blocks == ("C",)


def test_a_plant_zero_near_but_not_at_the_origin_stays_stable():
    # G's zero at -1e-3 (not at 0): python-control's eigenvalues all strictly inside the LHP
    eigs = _closed_loop_eigs({"C": ([10.0, 2.0], [5.0, 0.0]), "G": ([1.0, 1e-3], np.polymul([1, 1], [0.2, 1]))},
                             [("C_in", ["r", "-G_out"]), ("G_in", ["C_out"])], ["r"], "G_out")
    assert np.all(eigs.real < -1e-5)
    res = check_text(PI_ZERO.format(delay="").replace("s/((s+1)", "(s + 1e-3)/((s+1)"))
    assert res.stable and not res.hidden_modes and not res.breaks[0].marginal


def test_cancellation_inside_an_inner_loop_is_seen_from_the_outer_break():
    # the PI integrator of the inner loop against an inner plant zero at s = 0; only the
    # outer loop is broken. python-control: an eigenvalue at 0 in the whole closed loop
    text = """input r
block Co = 0.5*(1 + 1/(4*s))
block Ci = 2*(1 + 1/(5*s))
block Gi = s/((s+1)*(0.2*s+1))
block Go = 1/(2*s + 1)
eo = r - yo
ei = Co(eo) - yi
yi = Gi(Ci(ei))
yo = Go(yi)
break outer at yo
"""
    eigs = _closed_loop_eigs(
        {"Co": ([2.0, 0.5], [4.0, 0.0]), "Ci": ([10.0, 2.0], [5.0, 0.0]),
         "Gi": ([1.0, 0.0], np.polymul([1, 1], [0.2, 1])), "Go": ([1.0], [2.0, 1.0])},
        [("Co_in", ["r", "-Go_out"]), ("Ci_in", ["Co_out", "-Gi_out"]), ("Gi_in", ["Ci_out"]),
         ("Go_in", ["Gi_out"])], ["r"], "Go_out")
    assert np.min(np.abs(eigs)) < 1e-9
    res = check_text(text)
    assert not res.stable and res.breaks[0].marginal_cause == "hidden"
    # both PI blocks have a pole at 0; one of the two states is hidden (the outer one is seen)
    assert [(h.code, h.multiplicity, h.pole_blocks, h.zero_blocks) for h in res.hidden_modes] == \
        [("LW488", 1, ("Co", "Ci"), ("Gi",))]


def test_unstable_cancellation_between_blocks_in_a_delayed_loop_is_named():
    # C's zero at s = 1 cancels P's pole at 1; a delay in P. python-control (Pade 6): an
    # eigenvalue at +1, so Z = 1 at the break although L shows no unstable pole
    text = ("input r\nblock C = (s-1)/(s+2)\nblock P = exp(-0.05*s)/((s-1)*(s+3))\ne = r - y\n"
            "y = P(C(e))\nbreak b at y\n")
    pn, pd = ct.pade(0.05, 6)
    eigs = _closed_loop_eigs({"C": ([1.0, -1.0], [1.0, 2.0]), "P": (pn, np.polymul(pd, np.polymul([1, -1], [1, 3])))},
                             [("C_in", ["r", "-P_out"]), ("P_in", ["C_out"])], ["r"], "P_out")
    assert int(np.sum(eigs.real > 1e-9)) == 1 and np.min(np.abs(eigs - 1.0)) < 1e-7
    res = check_text(text)
    b = res.breaks[0]
    assert res.closed_loop_rhp_poles == 1 and b.closed_loop_rhp_poles == 1 and not b.stable
    assert [(h.code, h.pole) for h in res.hidden_modes] == [("LW487", 1 + 0j)]
    assert any(w.code == "LW487" and "P" in w.message and "C" in w.message for w in b.warnings)


def test_an_integrator_on_an_input_path_is_marginal():
    # [1/s](d) is outside every loop: its state never settles (python-control: eigenvalue 0)
    eigs = _closed_loop_eigs({"G": ([2.0], [1.0, 3.0, 2.0]), "D": ([1.0], [1.0, 0.0])},
                             [("G_in", ["r", "-y"]), ("y", ["G_out", "D_out"]), ("D_in", ["d"])], ["r", "d"], "y")
    assert np.min(np.abs(eigs)) < 1e-12
    res = check_text("input r, d\nblock G = 2/((s+1)*(s+2))\ne = r - y\ny = G(e) + [1/s](d)\nbreak b at y\n")
    assert not res.stable and res.breaks[0].marginal_cause == "hidden"
    (mode,) = res.hidden_modes
    assert mode.code == "LW484" and mode.pole == 0j
    assert any(f.code == "LW484" and "`d`" in f.message and "imaginary axis" in f.message for f in res.findings)


# ----------------------------------------------------------------------------- inside one block

def test_unstable_cancellation_inside_one_block_counts():
    # G as written, (s - 1)/((s - 1)(s + 2)): python-control's tf2ss keeps the state of the
    # common factor, so the closed loop has an eigenvalue at +1 (and one at -3)
    eigs = _closed_loop_eigs({"G": ([1.0, -1.0], np.polymul([1, -1], [1, 2]))},
                             [("G_in", ["r", "-G_out"])], ["r"], "G_out")
    assert np.sum(eigs.real > 1e-9) == 1 and np.min(np.abs(eigs - 1.0)) < 1e-9
    res = check_text("input r\nblock G = (s-1)/((s-1)*(s+2))\ne = r - y\ny = G(e)\nbreak b at y\n", "w.loop")
    b = res.breaks[0]
    assert not res.stable and res.closed_loop_rhp_poles == 1
    assert (b.open_loop_rhp_poles, b.encirclements, b.closed_loop_rhp_poles) == (1, 0, 1)
    (mode,) = res.hidden_modes
    assert (mode.code, mode.pole, mode.pole_blocks, mode.counted) == ("LW281", 1 + 0j, ("G",), True)
    assert any(f.code == "LW281" and f.span.line == 2 for f in res.findings)


def test_unstable_cancellation_inside_one_block_exits_1(tmp_path):
    path = tmp_path / "w.loop"
    path.write_text("input r\nblock G = (s-1)/((s-1)*(s+2))\ne = r - y\ny = G(e)\nbreak b at y\n")
    assert main(["check", str(path)]) == 1


def test_axis_cancellation_inside_one_block_is_marginal():
    # s/s inside one block: the integrator's state stays (python-control's tf2ss of s/(s(s+1))
    # keeps an eigenvalue at 0)
    eigs = _closed_loop_eigs({"G": ([1.0, 0.0], [1.0, 1.0, 0.0])}, [("G_in", ["r", "-G_out"])], ["r"], "G_out")
    assert np.min(np.abs(eigs)) < 1e-12
    res = check_text("input r\nblock G = s/(s*(s+1))\ne = r - y\ny = G(e)\nbreak b at y\n")
    assert not res.stable and res.breaks[0].marginal_cause == "hidden"
    assert [h.code for h in res.hidden_modes] == ["LW281"]


def test_a_waived_mode_is_not_counted():
    # the hook a waiver sets: counted=False takes the mode out of the verdict, whichever kind
    res = check_text("input r\nblock G = (s-1)/((s-1)*(s+2))\ne = r - y\ny = G(e)\nbreak b at y\n")
    (mode,) = res.hidden_modes
    assert verdict_adjustment([mode]) == (1, [])
    assert verdict_adjustment([dataclasses.replace(mode, counted=False)]) == (0, [])
    axis = check_text(PI_ZERO.format(delay="")).hidden_modes[0]
    assert verdict_adjustment([axis]) == (0, [0.0])
    assert verdict_adjustment([dataclasses.replace(axis, counted=False)]) == (0, [])
    rhp = dataclasses.replace(mode, code="LW487")  # already in the count: a waiver takes it off
    assert verdict_adjustment([dataclasses.replace(rhp, counted=False)]) == (-1, [])


# --- waivers: a team that knows a hidden mode is not there accepts it with a reason ---------

@pytest.mark.parametrize("waiver, counted", [
    ('waive LW488 at C "the drift is reset by the sequence controller"', False),
    ('waive LW488 at G "the drift is reset by the sequence controller"', False),
    ('waive LW488 "accepted for every block"', False),
    ('waive LW487 at C "a different code accepts nothing here"', True),
])
def test_a_waived_axis_mode_leaves_the_verdict_to_the_other_poles(waiver, counted):
    """Waiving the hidden mode takes it out of the verdict and nothing else: python-control's
    eigenvalues other than the one at s = 0 are in the left half plane, so the model is then
    stable; a waiver of another code changes nothing."""
    eigs = _pi_zero_eigs(0.0)
    others = np.delete(eigs, np.argmin(np.abs(eigs)))
    assert np.all(others.real < -1e-3)
    res = check_text(PI_ZERO.format(delay="") + waiver + "\n", "pi.loop")
    assert res.stable is not counted
    mode = next(h for h in res.hidden_modes if h.code == "LW488")
    assert mode.counted is counted
    finding = next(f for f in res.findings if f.code == "LW488")
    assert (finding.waiver is None) is counted


def test_a_waived_unstable_cancellation_inside_a_block_no_longer_counts():
    """`C = (s - 1)/((s - 1)(s + 2))` hides s = 1 inside one block: it counts (Z = 1) until
    waived. Reference: numpy.roots of the closed loop with the factor kept."""
    base = """model inblock
input r
block C = (s - 1)/((s - 1)*(s + 2))
block G = 3/(s + 1)
e = r - y
y = G(C(e))
break b at y
"""
    # closed loop of the factors as written: (s-1) [(s+2)(s+1) + 3] -> roots 1 and those of s^2+3s+5
    roots = np.roots(np.polymul([1, -1], np.polyadd(np.polymul([1, 2], [1, 1]), [3])))
    assert np.sum(roots.real > 0) == 1
    counted = check_text(base, "c.loop")
    assert not counted.stable and counted.closed_loop_rhp_poles == 1
    waived = check_text(base + 'waive LW281 at C "the factor is an artefact of the identification"\n', "c.loop")
    assert waived.stable and waived.closed_loop_rhp_poles == 0
    assert next(f for f in waived.findings if f.code == "LW281").waiver is not None
