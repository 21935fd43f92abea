"""The loop graph: structural checks and cascade nesting."""
from __future__ import annotations

from pathlib import Path

import pytest

from loopwise.engine.diagram import build_diagram
from loopwise.errors import ModelErrors
from loopwise.language.resolve import resolve_file, resolve_text

MODELS = Path(__file__).resolve().parents[2] / "models"

CASCADE = """input r
block Co = 2*(1 + 1/(5*s))
block Ci = 10
block Pi = 1/(0.1*s + 1)
block Po = 1/(s + 1)
eo = r - yo
ri = Co(eo)
ei = ri - yi
yi = Pi(Ci(ei))
yo = Po(yi)
break inner at yi -> ei
break outer at yo
"""


def diagram(text: str):
    return build_diagram(resolve_text(text, "m.loop"))


def codes(text: str) -> list[str]:
    with pytest.raises(ModelErrors) as info:
        diagram(text)
    return [e.code for e in info.value.errors]


def test_cascade_nesting_from_the_graph():
    d = diagram(CASCADE)
    enclosed = {b.stmt.name: b.enclosed_by for b in d.breaks}
    assert enclosed == {"inner": "outer", "outer": None}
    assert len(d.cycles) == 2


def test_servo_demo_nesting():
    d = build_diagram(resolve_file(MODELS / "servo_axis.loop"))
    enclosed = {b.stmt.name: b.enclosed_by for b in d.breaks}
    assert enclosed == {"current": "speed", "speed": "position", "position": None}


def test_break_with_target_cuts_only_that_wire():
    d = diagram(CASCADE)
    inner = next(b for b in d.breaks if b.stmt.name == "inner")
    assert inner.edges == (("yi", "ei"),)
    outer = next(b for b in d.breaks if b.stmt.name == "outer")
    assert outer.edges == (("yo", "eo"),)


def test_loop_that_no_break_opens_is_a_warning():
    d = diagram(CASCADE.replace("break inner at yi -> ei\n", ""))
    w = [f for f in d.findings if f.code == "LW382"]
    assert len(w) == 1 and "yi" in w[0].message and "break" in w[0].hint


def test_break_on_no_loop_is_an_error():
    text = "input r\nblock G = 1/(s+1)\ne = r - y\ny = G(e)\nz = G(y)\nbreak b at y\nbreak c at z\n"
    assert codes(text) == ["LW302"]


def test_target_that_does_not_use_the_signal():
    assert codes(CASCADE + "break x at yo -> ei\n") == ["LW303"]


def test_unknown_break_signal_suggests():
    with pytest.raises(ModelErrors) as info:
        diagram(CASCADE + "break x at yoo\n")
    err = info.value.errors[0]
    assert err.code == "LW306" and "yo" in err.hint


def test_break_on_an_input_and_duplicate_break():
    assert codes(CASCADE + "break x at r\n") == ["LW305"]
    assert codes(CASCADE + "break outer at yi\n") == ["LW304"]


def test_unused_input_warns():
    d = diagram(CASCADE.replace("input r", "input r, d"))
    assert any(f.code == "LW381" and "`d`" in f.message for f in d.findings)


def test_algebraic_loop_well_posed_is_a_note_and_ill_posed_an_error():
    ok = "input r\nblock G = 1/(s+1)\ne = r - 0.5*u\nu = e\ny = G(u)\nw = r - y\nbreak b at y\n"
    d = diagram(ok.replace("e = r - 0.5*u", "e = r - 0.5*u - y"))
    assert any(f.code == "LW391" for f in d.findings)
    bad = "input r\nblock G = 1/(s+1)\ne = r + u - y\nu = e\ny = G(u)\nbreak b at y\n"
    assert codes(bad) == ["LW301"]


def test_requirement_on_an_unknown_break_is_found_before_any_computation():
    with pytest.raises(ModelErrors) as info:
        diagram(CASCADE + "require iner phase_margin >= 45deg\n")
    err = info.value.errors[0]
    assert err.code == "LW307" and "inner" in err.hint and err.span.line == 13


# ----------------------------------------------------------------------------- nesting through sensors

def enclosed(text: str) -> dict[str, str | None]:
    return {b.stmt.name: b.enclosed_by for b in diagram(text).breaks}


def lw384(text: str) -> dict[str, tuple[str, str, str | None]]:
    return {b.stmt.name: w for b in diagram(text).breaks for w in b.warnings if w[0] == "LW384"}


# a flow loop measured through its own sensor block, inside a level loop (invented numbers)
FLOW_LEVEL = """input r
block Cl = 0.5*(1 + 1/(50*s))
block Cf = 2*(1 + 1/(2*s))
block Gf = 1/(0.5*s + 1)
block Gl = 1/(10*s)
block H  = {sensor}
el = r - level
fref = Cl(el)
ef = fref - flow_meas
flow = Gf(Cf(ef))
flow_meas = H(flow){noise}
level = Gl(flow)
"""
SENSORS = {"lag": "1/(0.1*s + 1)", "delay": "exp(-0.05*s)/(0.1*s + 1)", "gain": "1.2"}
INNER_CUTS = ["flow -> flow_meas", "flow_meas", "flow_meas -> ef", "flow"]
OUTER_CUTS = ["level", "level -> el", "el", "fref", "fref -> ef", "flow -> level"]


@pytest.mark.parametrize("sensor", sorted(SENSORS))
@pytest.mark.parametrize("inner", INNER_CUTS)
@pytest.mark.parametrize("outer", OUTER_CUTS)
def test_flow_loop_through_its_sensor_is_inside_the_level_loop(sensor, inner, outer):
    text = FLOW_LEVEL.format(sensor=SENSORS[sensor], noise="") + f"break flow at {inner}\nbreak lvl at {outer}\n"
    assert enclosed(text) == {"flow": "lvl", "lvl": None}


@pytest.mark.parametrize("inner", INNER_CUTS)
def test_inputs_do_not_change_the_nesting(inner):
    # measurement noise on the inner return, a disturbance on the inner plant: the loops are the same
    text = FLOW_LEVEL.format(sensor=SENSORS["lag"], noise=" + n").replace("input r", "input r, n, d") \
        .replace("flow = Gf(Cf(ef))", "flow = Gf(Cf(ef) + d)") + f"break flow at {inner}\nbreak lvl at level\n"
    assert enclosed(text) == {"flow": "lvl", "lvl": None}


def test_measurement_delay_as_a_signal_of_its_own():
    text = FLOW_LEVEL.format(sensor=SENSORS["lag"], noise="").replace(
        "flow_meas = H(flow)", "flow_late = [exp(-0.05*s)](flow)\nflow_meas = H(flow_late)")
    for inner in ("flow -> flow_late", "flow_late", "flow_meas", "flow"):
        assert enclosed(text + f"break flow at {inner}\nbreak lvl at level\n") == {"flow": "lvl", "lvl": None}


def test_outer_break_at_the_inner_plant_input_and_inner_break_on_the_forward_path():
    base = FLOW_LEVEL.format(sensor=SENSORS["lag"], noise="").replace(
        "flow = Gf(Cf(ef))", "uf = Cf(ef)\nflow = Gf(uf)")
    assert enclosed(base + "break flow at flow_meas\nbreak lvl at uf\n") == {"flow": "lvl", "lvl": None}
    assert enclosed(base + "break flow at ef\nbreak lvl at level\n") == {"flow": "lvl", "lvl": None}


def test_junction_written_inside_an_application():
    text = FLOW_LEVEL.format(sensor=SENSORS["lag"], noise="").replace(
        "ef = fref - flow_meas\nflow = Gf(Cf(ef))", "flow = Gf(Cf(fref - flow_meas))")
    assert enclosed(text + "break flow at flow_meas\nbreak lvl at level\n") == {"flow": "lvl", "lvl": None}


SERVO_ENCODER = """input pos_ref, load, noise
block Ci = 4.5*(1 + 1/(1.2e-3*s))
block Cv = 0.35*(1 + 1/(12e-3*s))
block Cp = 40
block Pe = exp(-150e-6*s)/(1.1e-3*s + 0.9)
block Enc = 1/(2e-4*s + 1)
pos_err = pos_ref - pos
spd_ref = Cp(pos_err)
spd_err = spd_ref - spd_m
cur_ref = Cv(spd_err)
cur_err = cur_ref - cur_m
cur     = Pe(Ci(cur_err))
cur_m   = [1/(1e-5*s + 1)](cur) + noise
spd     = [0.12/(2.4e-4*s)](cur - load/0.12)
spd_m   = Enc(spd)
pos     = [1/s](spd)
"""


@pytest.mark.parametrize("cuts", [
    ("cur", "spd", "pos"), ("cur_m", "spd_m", "pos"), ("cur -> cur_m", "spd -> spd_m", "pos"),
    ("cur_m -> cur_err", "spd_m -> spd_err", "pos_err"), ("cur", "spd", "spd_ref -> spd_err"),
    ("cur", "cur_ref", "pos"),
])
def test_servo_with_current_sensor_and_encoder_nests_three_deep(cuts):
    text = SERVO_ENCODER + "".join(f"break {n} at {c}\n" for n, c in zip(("current", "speed", "position"), cuts))
    assert enclosed(text) == {"current": "speed", "speed": "position", "position": None}


def test_wide_speed_cut_is_no_longer_inverted():
    # `break speed at spd` also opens the position loop; before, position came out inside speed
    text = SERVO_ENCODER + "break speed at spd\nbreak position at pos\n"
    assert enclosed(text) == {"speed": "position", "position": None}
    servo = (MODELS / "servo_axis.loop").read_text().replace("at spd -> spd_err", "at spd")
    assert enclosed(servo) == {"current": "speed", "speed": "position", "position": None}


def cascade(depth: int, sensors: bool, form: str) -> str:
    """Loop 1 innermost; breaks L1..Ln at the measurement, its wire, or the plant output (wide)."""
    lines = ["input r"]
    for k in range(1, depth + 1):
        lines += [f"block C{k} = {k}.5*(1 + 1/({k}*s))", f"block G{k} = 1/({k}*s + 1)",
                  f"block H{k} = exp(-0.01*s)/(0.0{k}*s + 1)"]
    for k in range(depth, 0, -1):
        lines.append(f"e{k} = {'r' if k == depth else f'ref{k}'} - {'m' if sensors else 'y'}{k}")
        lines.append(f"ref{k - 1} = C{k}(e{k})" if k > 1 else "u = C1(e1)")
    lines += ["y1 = G1(u)"] + [f"y{k} = G{k}(y{k - 1})" for k in range(2, depth + 1)]
    if sensors:
        lines += [f"m{k} = H{k}(y{k})" for k in range(1, depth + 1)]
    meas = "m" if sensors else "y"
    at = {"wire": "y{k} -> " + ("m{k}" if sensors else "e{k}"), "measurement": meas + "{k}", "plant": "y{k}"}[form]
    lines += [f"break L{k} at " + at.format(k=k) for k in range(1, depth + 1)]
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize("depth", [2, 3, 4])
@pytest.mark.parametrize("sensors", [True, False])
@pytest.mark.parametrize("form", ["wire", "measurement", "plant"])
def test_deep_cascades_nest_in_order(depth, sensors, form):
    expected = {f"L{k}": (f"L{k + 1}" if k < depth else None) for k in range(1, depth + 1)}
    assert enclosed(cascade(depth, sensors, form)) == expected


TANKS = """input r1, r2
param kp = 0.1
block C1 = 0.4*(1 + 1/(25*s))
block C2 = 0.2*(1 + 1/(10*s))
e1 = r1 - h1
u1 = C1(e1)
q12 = kp*h1 - kp*h2
h1 = [1/(2*s)](u1 - q12)
e2 = r2 - h2
u2 = C2(e2)
h2 = [1/(1.5*s)](u2 + q12)
"""
TANKS_INLINE = """input r1, r2
block C1 = 0.4*(1 + 1/(25*s))
block C2 = 0.2*(1 + 1/(10*s))
e1 = r1 - h1
h1 = [1/(2*s)](C1(e1) - 0.1*h1 + 0.1*h2)
e2 = r2 - h2
h2 = [1/(1.5*s)](C2(e2) + 0.1*h1 - 0.1*h2)
"""


@pytest.mark.parametrize("tanks", [TANKS, TANKS_INLINE])
@pytest.mark.parametrize("cuts", [("h1 -> e1", "h2 -> e2"), ("h1", "h2"), ("h1 -> e1", "h2"), ("e1", "e2")])
def test_coupled_tanks_are_side_by_side(tanks, cuts):
    text = tanks + f"break tank1 at {cuts[0]}\nbreak tank2 at {cuts[1]}\n"
    assert enclosed(text) == {"tank1": None, "tank2": None}


@pytest.mark.parametrize("cuts", [("y1", "y2"), ("u1", "u2"), ("u1", "y2")])
def test_two_by_two_plant_under_two_controllers_is_not_nested(cuts):
    text = ("input r1, r2\nblock C1 = 1 + 1/s\nblock C2 = 2 + 1/s\ne1 = r1 - y1\ne2 = r2 - y2\n"
            "u1 = C1(e1)\nu2 = C2(e2)\ny1 = [1/(s + 1)](u1) + [0.3/(s + 2)](u2)\n"
            "y2 = [0.2/(s + 3)](u1) + [1/(2*s + 1)](u2)\n" + f"break a at {cuts[0]}\nbreak b at {cuts[1]}\n")
    assert enclosed(text) == {"a": None, "b": None}


def test_documented_ambiguities():
    base = FLOW_LEVEL.format(sensor=SENSORS["lag"], noise="") + "break flow at flow_meas\nbreak lvl at level\n"
    # the sign written in the sensor: both returns are added at the junction, rule 2 cannot decide
    signed = base.replace("ef = fref - flow_meas", "ef = fref + flow_meas").replace("H(flow)", "-H(flow)")
    assert enclosed(signed) == {"flow": None, "lvl": None}
    # both returns subtracted at the junction: neither is the setpoint, not nested either
    both = base.replace("ef = fref - flow_meas", "ef = -fref - flow_meas").replace("Cl = 0.5", "Cl = -0.5")
    assert enclosed(both) == {"flow": None, "lvl": None}
    # a reverse-acting junction with a plain-wire return: rule 1 still finds the measurement
    reverse = CASCADE.replace("ei = ri - yi", "ei = yi - ri").replace("Ci = 10", "Ci = -10")
    assert enclosed(reverse) == {"inner": "outer", "outer": None}
    # ... but through a sensor block the signs are read as written: documented, inverted
    reverse = base.replace("ef = fref - flow_meas", "ef = flow_meas - fref").replace("Cf = 2", "Cf = -2")
    assert enclosed(reverse) == {"flow": None, "lvl": "flow"}


def test_shared_stretch_and_the_two_rules():
    from loopwise.engine.nesting import cycle_inside, shared_stretch
    d = diagram(FLOW_LEVEL.format(sensor=SENSORS["lag"], noise="") + "break flow at flow_meas\nbreak lvl at level\n")
    inner = next(c for c in d.cycles if "flow_meas" in c)
    outer = next(c for c in d.cycles if "level" in c)
    stretch = shared_stretch(inner, outer)
    assert stretch[0] == "ef" and stretch[-1] == "flow"  # M, the junction; S, where the returns part
    assert cycle_inside(d.graph, inner, outer) and not cycle_inside(d.graph, outer, inner)
    both = diagram(FLOW_LEVEL.format(sensor=SENSORS["lag"], noise="").replace("ef = fref - flow_meas",
                   "ef = -fref - flow_meas") + "break flow at flow_meas\nbreak lvl at level\n")
    inner = next(c for c in both.cycles if "flow_meas" in c)
    outer = next(c for c in both.cycles if "level" in c)
    assert not cycle_inside(both.graph, inner, outer) and not cycle_inside(both.graph, outer, inner)
    assert shared_stretch(("a", "b", "c"), ("c", "d", "a", "e")) is None  # two separate stretches
    assert shared_stretch(("a", "b"), ("a", "c")) is None  # one signal only
    assert shared_stretch((1, 2, 3, 4), (1, 5, 3, 6)) is None  # two stretches in both
    assert shared_stretch(("x", "y", "p"), ("y", "x", "q")) is None  # the same signals, opposite ways
    assert shared_stretch(("x", "y", "p"), ("q", "x", "y", "r")) == ("x", "y")


def test_middle_loop_with_a_long_sensor_chain_is_still_the_enclosing_one():
    # the middle loop's own cycle holds more signals than the outer one's: the innermost of the
    # loops around the inner break is taken, not the smallest
    text = cascade(3, True, "measurement").replace(
        "m2 = H2(y2)", "m2a = [1/(0.01*s + 1)](y2)\nm2b = [1/(0.01*s + 1)](m2a)\nm2c = [1/(0.01*s + 1)](m2b)\n"
        "m2d = [1/(0.01*s + 1)](m2c)\nm2 = H2(m2d)")
    cycles = {b.stmt.name: b.cycles for b in diagram(text).breaks}
    assert len(cycles["L2"][0]) > len(cycles["L3"][0])
    assert enclosed(text) == {"L1": "L2", "L2": "L3", "L3": None}


def test_enclosing_needs_one_direction_and_falls_back_to_the_smallest():
    from types import SimpleNamespace

    import networkx as nx

    from loopwise.engine.nesting import enclosing

    g = nx.MultiDiGraph()
    for u, v, gain in [("M", "S", 1), ("S", "a", 1), ("a", "M", -1), ("S", "b", 1), ("b", "M", 1),
                       ("S", "d", 1), ("d", "b", 1), ("S", "x", 1), ("x", "M", 1)]:
        g.add_edge(u, v, term=SimpleNamespace(gain=gain))
    c1, c2, c3 = ("M", "S", "a"), ("M", "S", "b"), ("b", "M", "S", "d")
    cycles = [c1, c2, c3, ("M", "S", "x")]
    # c1 is inside c2 (subtracted vs added at M) and c2 inside c3 (a plain wire S -> b vs a longer return):
    # X owning c1 and c3 against Y owning c2 is both inside and around Y, so neither encloses the other
    assert enclosing(g, cycles, {"X": (0, 2), "Y": (1,)}) == {"X": None, "Y": None}
    assert enclosing(g, cycles, {"X": (0,), "Y": (1,)}) == {"X": "Y", "Y": None}
    # c1 is inside both c2 and the return through x, which do not nest (both added): the smaller is taken
    assert enclosing(g, cycles, {"X": (0,), "Y": (2,), "W": (3,)})["X"] == "W"


def test_own_cycles_of_wide_cuts():
    from loopwise.engine.nesting import own_cycles
    # a wide inner cut opens 0, 1, 2; the middle break 1, 2; the outer 2: each keeps its own
    assert own_cycles({"i": (0, 1, 2), "m": (1, 2), "o": (2,)}) == {"i": (0,), "m": (1,), "o": (2,)}
    # a cycle opened by two breaks neither of which is more specific belongs to neither
    assert own_cycles({"a": (0, 2), "b": (1, 2)}) == {"a": (0,), "b": (1,)}
    # two breaks on the same wire own nothing and keep all they open
    assert own_cycles({"a": (0,), "b": (0,)}) == {"a": (0,), "b": (0,)}


# ----------------------------------------------------------------------------- LW384: cuts wider than a loop

def test_wide_cut_through_a_balance_pipe_warns_and_names_the_pipe():
    w = lw384(TANKS + "break tank1 at h1 -> e1\nbreak tank2 at h2\n")
    assert set(w) == {"tank2"}
    code, message, hint = w["tank2"]
    assert "into `q12` (h2 -> q12 -> h2)" in message and "into `e2` (h2 -> e2 -> u2 -> h2)" in message
    assert "write `break tank2 at h2 -> e2`" in message and hint
    assert lw384(TANKS + "break tank1 at h1 -> e1\nbreak tank2 at h2 -> e2\n") == {}


def test_wide_cut_inline_pipe_warns_for_both_tanks():
    w = lw384(TANKS_INLINE + "break tank1 at h1\nbreak tank2 at h2\n")
    assert set(w) == {"tank1", "tank2"}
    assert "write `break tank2 at h2 -> e2`" in w["tank2"][1] and "into `h1`" in w["tank2"][1]


def test_wide_cut_that_opens_another_breaks_loop_names_that_break():
    servo = (MODELS / "servo_axis.loop").read_text().replace("at spd -> spd_err", "at spd")
    w = lw384(servo)
    assert set(w) == {"speed"}
    assert "into `pos` (spd -> pos -> pos_err" in w["speed"][1] and "the loop of break `position`" in w["speed"][1]
    assert "write `break speed at spd -> spd_err`" in w["speed"][1]


def test_wide_cut_through_the_back_emf_suggests_the_speed_junction():
    # the motor equation comes first and also subtracts the speed; the junction that takes the
    # position controller's setpoint is still the one suggested, and the position loop is named
    text = ("input pos_ref\nblock Cv = 0.5*(1 + 1/(0.05*s))\nblock Cp = 10\n"
            "i = [1/(0.002*s + 0.5)](v - 0.1*w)\nw = [0.1/(0.001*s)](i)\npos = [1/s](w)\n"
            "pos_err = pos_ref - pos\nspd_ref = Cp(pos_err)\nspd_err = spd_ref - w\nv = Cv(spd_err)\n"
            "break speed at w\nbreak position at pos\n")
    message = lw384(text)["speed"][1]
    assert message.startswith("`w` feeds 3 equations") and "write `break speed at w -> spd_err`" in message
    assert "into `i` (w -> i -> w)" in message and "the loop of break `position`" in message
    assert enclosed(text) == {"speed": "position", "position": None}


def test_wide_cut_suggests_its_own_loop_before_another_breaks():
    # two junctions on the same measurement, alike but for whose loop they carry
    text = ("input r1, r2\nblock G = 1/(s + 1)\ne2 = r2 - y\ne1 = r1 - y\nu = [1 + 1/s](e1) + 0.5*e2\n"
            "y = G(u)\nbreak main at y\nbreak trim at y -> e2\n")
    message = lw384(text)["main"][1]
    assert "write `break main at y -> e1`" in message and "into `e2` (y -> e2 -> u -> y, the loop of break `trim`)" \
        in message


def test_no_lw384_for_a_single_feedback_wire_or_one_equation():
    assert lw384(CASCADE) == {}
    # a signal used twice in one equation (through a hidden argument) is one wire in the user's terms
    one = "input r\nblock G = 1/(s + 1)\nu = 2*(r - y) + [1/s](r - y)\ny = G(u)\nbreak b at y\n"
    assert len(diagram(one).breaks[0].edges) == 2 and lw384(one) == {}
    # a second use that closes no loop (a monitoring signal) is not a second loop
    mon = "input r\nblock G = 1/(s + 1)\ne = r - y\ny = G(e)\nshown = [1/(0.1*s + 1)](y)\nbreak b at y\n"
    assert len(diagram(mon).breaks[0].edges) == 2 and lw384(mon) == {}


def test_demo_models_are_free_of_lw384():
    for path in sorted(MODELS.glob("*.loop")):
        cuts = build_diagram(resolve_file(path)).breaks
        assert [w for b in cuts for w in b.warnings] == [], path.name


def test_two_by_two_plant_broken_at_its_actuators_warns_as_documented():
    text = ("input r1, r2\nblock C1 = 1 + 1/s\nblock C2 = 2 + 1/s\ne1 = r1 - y1\ne2 = r2 - y2\n"
            "u1 = C1(e1)\nu2 = C2(e2)\ny1 = [1/(s + 1)](u1) + [0.3/(s + 2)](u2)\n"
            "y2 = [0.2/(s + 3)](u1) + [1/(2*s + 1)](u2)\nbreak a at u1\nbreak b at u2\n")
    w = lw384(text)
    assert set(w) == {"a", "b"} and "route `u1` through one signal" in w["a"][2]
    fixed = text.replace("](u1)", "](u1_p)").replace("break a at u1", "u1_p = u1\nbreak a at u1 -> u1_p")
    assert set(lw384(fixed)) == {"b"}


def test_derivative_on_the_measurement_warns_and_the_documented_fix_removes_it():
    pid = ("input r\nblock G = 1/((s + 1)*(0.2*s + 1))\ne = r - y\n"
           "u = 2*e + [1/s](e) - [0.3*s/(0.01*s + 1)](y)\ny = G(u)\n")
    assert set(lw384(pid + "break b at y\n")) == {"b"}
    fixed = pid.replace("e = r - y", "e = r - y_m").replace("](y)", "](y_m)") + "y_m = y\nbreak b at y -> y_m\n"
    assert lw384(fixed) == {}


# ----------------------------------------------------------------------------- LW382 prints a loop once

def test_unbroken_loop_is_printed_once():
    text = ("input r1, r2\nblock C1 = 0.4\nblock C2 = 0.2\ne1 = r1 - h1\nh1 = [1/(2*s)](C1(e1) + 0.1*h2)\n"
            "e2 = r2 - h2\nh2 = [1/(1.5*s)](C2(e2) + 0.1*h1)\nbreak tank1 at h1 -> e1\nbreak tank2 at h2 -> e2\n")
    (w,) = [f for f in diagram(text).findings if f.code == "LW382"]
    assert w.message == "loop h1 -> h2 -> h1 is not opened by any break"
