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
