"""Multi-loop models: the engine's reduction vs the same wiring built in python-control.

For each demo model (delay-free version: every `exp(-T*s)` replaced by 1, also in
the files it `use`s) and for generated nested cascades, the wiring is rebuilt by
hand with python-control 0.10.2 (`control.tf` per block application,
`control.summing_junction`, `control.interconnect`), independently of our parser
and reducer. Compared:
* every break's loop transfer L_k(jw) (other loops closed) with
  `PreparedModel.loop_transfer`, and with the engine's own `loopwise.testing.loop_state_space`;
* the whole closed loop's poles: eigenvalues of python-control's interconnected
  state matrix vs `loopwise.testing.closed_loop_poles` (paired one to one), leaving out
  blocks driven only by exogenous inputs (their poles are the input's, not a loop's).

Parameters below are copied from the model files; a change there must be
mirrored here (the failure names the model).
"""
from __future__ import annotations

import math
from pathlib import Path

import control as ct
import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment

from loopwise.analysis import check_file, prepare_file
from loopwise.testing import closed_loop_poles, loop_state_space, prepare_text

from .loopsets import Wiring, nested_cascade, strip_delays

MODELS = Path(__file__).resolve().parents[2] / "models"


def tf(num, den):
    return ct.tf(num, den)


S = tf([1, 0], [1])


# ----------------------------------------------------------------------------- the demo wirings

def servo_axis() -> Wiring:
    Rw, Lw, kt, J = 0.9, 1.1e-3, 0.12, 2.4e-4
    Ci = 4.5 * (1 + 1 / (Lw / Rw * S))
    Cv = 0.35 * (1 + 1 / (12e-3 * S))
    Pe = tf([1], [Lw, Rw])
    eqs = {
        "pos_err": [(1, "pos_ref"), (-1, "pos")],
        "spd_ref": [(40.0, "pos_err")],
        "spd_err": [(1, "spd_ref"), (-1, "spd")],
        "cur_ref": [(Cv, "spd_err")],
        "cur_err": [(1, "cur_ref"), (-1, "cur")],
        "ci_out": [(Ci, "cur_err")],
        "cur": [(Pe, "ci_out")],
        "torque_in": [(1, "cur"), (-1 / kt, "load")],
        "spd": [(tf([kt], [J, 0]), "torque_in")],
        "pos": [(tf([1], [1, 0]), "spd")],
    }
    cuts = {"current": ("cur", "cur_err"), "speed": ("spd", "spd_err"), "position": ("pos", None)}
    return Wiring(eqs, ("pos_ref", "load"), cuts)


def greenhouse_heating() -> Wiring:
    Kw, Tw, Ka, Tpipe, Tair, Kout = 45.0, 240.0, 0.6, 180.0, 1500.0, 0.4
    eqs = {
        "air_err": [(1, "air_sp"), (-1, "air")],
        "water_sp": [(3 * (1 + 1 / (Tair * S)), "air_err")],
        "water_err": [(1, "water_sp"), (-1, "water")],
        "valve_cmd": [(0.044 * (1 + 1 / (Tw * S)), "water_err")],
        "water": [(tf([Kw], [Tw, 1]), "valve_cmd")],
        "air": [(tf([Ka], np.polymul([Tair, 1], [Tpipe, 1])), "water"),
                (tf([Kout], [Tair, 1]), "outside")],
    }
    return Wiring(eqs, ("air_sp", "outside"), {"water": ("water", "water_err"), "air": ("air", None)})


def levitation_rig() -> Wiring:
    g, x0, i0, Ta = 9.81, 8e-3, 0.8, 0.5e-3
    p, b = math.sqrt(2 * g / x0), 2 * g / i0
    eqs = {
        "err": [(1, "height_ref"), (-1, "measured")],
        "lead_out": [(250 * (S / 30 + 1) / (S / 400 + 1), "err")],
        "coil": [(tf([1], [Ta, 1]), "lead_out")],
        "ball_in": [(1, "coil"), (1 / b, "push")],
        "height": [(tf([b], [1, 0, -p * p]), "ball_in")],
        "measured": [(tf([1], [1 / (2 * math.pi * 2000.0), 1]), "height")],
    }
    return Wiring(eqs, ("height_ref", "push"), {"sensor": ("measured", None)})


def double_integrator() -> Wiring:
    J, Kp, Td, Tf, Tw = 12.0, 2.0, 4.5, 0.5, 0.1
    eqs = {
        "att_err": [(1, "att_ref"), (-1, "att_meas")],
        "ctrl_out": [(Kp * (1 + Td * S / (Tf * S + 1)), "att_err")],
        "torque": [(tf([1], [Tw, 1]), "ctrl_out")],
        "body_in": [(1, "torque"), (1, "torque_dist")],
        "att": [(tf([1], [J, 0, 0]), "body_in")],
        "att_meas": [(1, "att")],
    }
    return Wiring(eqs, ("att_ref", "torque_dist"), {"attitude": ("att_meas", None)})


def conditionally_stable() -> Wiring:
    J, kt, Ti, Ta = 40.0, 1.0, 2.0, 20e-3
    eqs = {
        "el_err": [(1, "el_ref"), (-1, "el")],
        "ctrl_out": [(200 * (1 + 1 / (Ti * S)) * (S / 1 + 1) / (S / 20 + 1), "el_err")],
        "drive_out": [(tf([kt], [Ta, 1]), "ctrl_out")],
        "mount_in": [(1, "drive_out"), (1, "wind")],
        "el": [(tf([1], [J, 0, 0]), "mount_in")],
    }
    return Wiring(eqs, ("el_ref", "wind"), {"elevation": ("el", None)})


def shared_params() -> Wiring:
    kt, J, Tcl = 0.12, 2.4e-4, 0.3e-3
    eqs = {}
    for side, Jx, C in (("in", J, 0.35 * (1 + 1 / (12e-3 * S))), ("out", 3 * J, 0.8 * (1 + 1 / (20e-3 * S)))):
        eqs.update({
            f"{side}_err": [(1, f"{side}_ref"), (-1, f"{side}_meas")],
            f"{side}_c": [(C, f"{side}_err")],
            f"{side}_cur": [(tf([1], [Tcl, 1]), f"{side}_c")],
            f"{side}_torque": [(1, f"{side}_cur"), (-1 / kt, f"{side}_load")],
            f"{side}_spd": [(tf([kt], [Jx, 0]), f"{side}_torque")],
            f"{side}_meas": [(1, f"{side}_spd")],  # Encoder = exp(-Tenc s) -> 1
        })
    return Wiring(eqs, ("in_ref", "out_ref", "in_load", "out_load"),
                  {"infeed": ("in_meas", None), "outfeed": ("out_meas", None)})


DEMOS = {
    "servo_axis": servo_axis,
    "greenhouse_heating": greenhouse_heating,
    "levitation_rig": levitation_rig,
    "double_integrator": double_integrator,
    "conditionally_stable": conditionally_stable,
    "shared_params": shared_params,
}


def _delay_free_copy(name: str, tmp_path: Path) -> Path:
    """The model and every file it `use`s, with each exp(-T*s) replaced by 1."""
    src = MODELS / f"{name}.loop"
    for path in [src, *sorted((MODELS / "common").glob("*.loop"))]:
        dest = tmp_path / path.relative_to(MODELS)
        dest.parent.mkdir(parents=True, exist_ok=True)
        dest.write_text(strip_delays(path.read_text("utf-8")), "utf-8")
    return tmp_path / f"{name}.loop"


# ----------------------------------------------------------------------------- comparisons

GRID = 1j * np.logspace(-5, 6, 166)


def _assert_same_response(ours, ref, label, floor=1e-20, s=GRID):
    """Relative error below 1e-9 at every grid point down to 1e-20 of the peak (the reference
    is refined in 30 digits where L is tiny, see Wiring.loop_response; below 1e-20 of the
    peak - 1e-45 absolute on the 6-loop cascade's inner loop at 1e-5 rad/s - even that
    cannot resolve the cancellation). A larger `floor` (a fraction of the peak) is for a
    float state-space evaluation, which loses digits where |L| is far below its peak
    (measured: 6e-9 relative at |L| = 6e-14 of the peak on a cascade's inner loop)."""
    err = np.abs(ours - ref)
    tol = 1e-9 * np.abs(ref) + floor * np.max(np.abs(ref))
    bad = np.nonzero(err > tol)[0]
    assert bad.size == 0, (f"{label}: L differs at w = {np.abs(s[bad[0]]):.4g} rad/s: "
                           f"expected {ref[bad[0]]:.12g}, got {ours[bad[0]]:.12g} "
                           f"({bad.size} of {len(ref)} grid points)")


def _ss_response(A, B, C, D, s):
    n = A.shape[0]
    return np.array([(C @ np.linalg.solve(si * np.eye(n) - A, B) + D)[0, 0] if n else D[0, 0]
                     for si in s])


def _assert_same_poles(ours, ref, label):
    ours, ref = np.asarray(ours, complex), np.asarray(ref, complex)
    assert ours.size == ref.size, f"{label}: {ours.size} closed-loop poles, expected {ref.size}"
    if ours.size == 0:
        return
    cost = np.abs(ours[:, None] - ref[None, :])
    rows, cols = linear_sum_assignment(cost)
    rel = cost[rows, cols] / np.maximum(np.abs(ref[cols]), 1e-3)
    worst = int(np.argmax(rel))
    assert rel[worst] < 1e-6, (f"{label}: closed-loop pole {ref[cols[worst]]:.10g} "
                               f"vs ours {ours[rows[worst]]:.10g}")


def _compare(prep, wiring: Wiring, label: str):
    assert set(prep.break_names) == set(wiring.cuts), (label, prep.break_names)
    for name in prep.break_names:
        ref = wiring.loop_response(name, GRID)
        _assert_same_response(prep.loop_transfer(name, GRID), ref, f"{label}/{name}")
        A, B, C, D = loop_state_space(prep, name)
        _assert_same_response(_ss_response(*(np.atleast_2d(m) for m in (A, B, C, D)), GRID), ref,
                              f"{label}/{name} (engine state space)", floor=1e-14)
    # blocks driven only by an exogenous input (greenhouse: the outside-temperature
    # filter) are outside every loop; the state-space form leaves their poles out (they
    # count in Z separately, docs/method.md "Blocks on input paths"), so the reference does too
    _assert_same_poles(closed_loop_poles(prep), wiring.closed_loop(input_filters=False).poles(),
                       label)


@pytest.mark.parametrize("name", sorted(DEMOS))
def test_demo_model_vs_python_control(name, tmp_path):
    path = _delay_free_copy(name, tmp_path)
    _compare(prepare_file(path), DEMOS[name](), name)


def test_every_demo_model_has_a_reference_wiring():
    on_disk = {p.stem for p in MODELS.glob("*.loop")}
    assert on_disk <= set(DEMOS), f"no python-control wiring for {sorted(on_disk - set(DEMOS))}"


@pytest.mark.parametrize("name", sorted(DEMOS))
def test_demo_verdict_matches_python_control_poles(name, tmp_path):
    """Delay-free demo: Z at every break = RHP eigenvalues of python-control's closed loop."""
    path = _delay_free_copy(name, tmp_path)
    poles = DEMOS[name]().closed_loop().poles()
    assert np.min(np.abs(poles.real) / np.maximum(np.abs(poles), 1e-300)) > 1e-9
    z_ref = int(np.sum(poles.real > 0))
    res = check_file(path)
    assert res.closed_loop_rhp_poles == z_ref
    for b in res.breaks:
        assert b.closed_loop_rhp_poles == z_ref, (name, b.name, z_ref, b.closed_loop_rhp_poles)
        assert b.open_loop_rhp_poles + b.encirclements == z_ref


@pytest.mark.parametrize("n, separation", [(2, 4.0), (3, 3.0), (4, 2.0), (6, 1.5)])
def test_generated_cascade_vs_python_control(n, separation):
    cascade = nested_cascade(n, seed=31, separation=separation)
    prep = prepare_text(cascade.text(), file=f"<cascade {n}>")
    _compare(prep, cascade.wiring(), f"cascade_{n}")


@pytest.mark.parametrize("n, separation", [(3, 3.0), (6, 1.5)])
def test_generated_cascade_verdict_at_every_break(n, separation):
    """The same Z from every break (docs/method.md: det(I - A) = det(I - A_k)(1 + L_k)), equal
    to python-control's closed-loop RHP count; P_k = RHP eigenvalues of the loop's state space."""
    cascade = nested_cascade(n, seed=31, separation=separation)
    text = cascade.text()
    poles = cascade.wiring().closed_loop().poles()
    z_ref = int(np.sum(poles.real > 0))
    from loopwise.analysis import check_text
    res = check_text(text, file=f"<cascade {n}>")
    prep = prepare_text(text)
    for b in res.breaks:
        assert b.closed_loop_rhp_poles == z_ref, (b.name, z_ref, b.closed_loop_rhp_poles)
        A_k = cascade.wiring().loop(b.name).A
        p_ref = int(np.sum(np.linalg.eigvals(A_k).real > 0))
        assert b.open_loop_rhp_poles == p_ref, (b.name, p_ref, b.open_loop_rhp_poles)
    assert len(prep.break_names) == n


def test_generated_loops_written_as_models_vs_python_control():
    """Every 12th loop of the generated set written as a one-block model (factored text,
    tests/reference/loopsets.zpk_text): the engine's L at the break vs python-control
    `tf(num, den)` evaluated on the grid (orders up to 10)."""
    from .loopsets import delay_free_loops, zpk_text
    grid = 1j * np.logspace(-2, 3, 61)
    for case in delay_free_loops()[::12]:
        text = ("model generated\ninput r\ne = r - y\n"
                f"y = [{zpk_text(case.zeros, case.poles, case.gain)}](e)\nbreak b at y\n")
        prep = prepare_text(text, file=f"<{case.name}>")
        num, den = case.num_den()
        s = grid[np.min(np.abs(grid[:, None] - np.asarray(case.poles)[None, :]), axis=1) > 1e-3]
        _assert_same_response(prep.loop_transfer("b", s), ct.tf(num, den)(s), case.name,
                              floor=0.0, s=s)
