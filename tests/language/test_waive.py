"""The `waive` statement: its syntax, the rules a waiver is checked against, and
which findings it accepts (`Waivers.waiver_for`, `apply_waivers`).

Every refused waiver is a located error rendered with its line, a caret and a hint.
"""
from __future__ import annotations

import pytest

from loopwise.analysis import check_text
from loopwise.errors import Finding, ModelError, Span
from loopwise.language import ast
from loopwise.waivers import Waiver, Waivers
from tests.scenarios import CASCADE

from .conftest import assert_rendered, one

#: two unused blocks (LW282 about `A` and about `B`) and an unused input (LW381 about `d`)
BASE = """\
model m
input r, d
block G = 10/((s+1)*(s+2))
block A = 1/(s+3)
block B = 1/(s+4)
e = r - y
y = G(e)
break b at y
"""


def findings(text: str) -> dict[tuple[str, tuple[str, ...]], Finding]:
    return {(f.code, f.about): f for f in check_text(text, "m.loop").every_finding}


def refused(line: str) -> ModelError:
    text = BASE + line + "\n"
    with pytest.raises(ModelError) as info:
        check_text(text, "m.loop")
    err = info.value.errors[0]
    assert_rendered(err, text)
    assert err.span.line == BASE.count("\n") + 1
    return err


# --- syntax ---------------------------------------------------------------------------------

def test_the_statement_parses_with_and_without_a_subject():
    general = one('waive LW282 "shared library of blocks"')
    assert isinstance(general, ast.WaiveStmt)
    assert (general.code, general.at, general.reason) == ("LW282", None, "shared library of blocks")
    assert (general.code_span.line, general.code_span.col) == (1, 7)
    narrow = one('waive LW382 at h1 "balance pipe, not a control loop"')
    assert (narrow.code, narrow.at, narrow.reason) == ("LW382", "h1", "balance pipe, not a control loop")
    assert (narrow.at_span.col, narrow.reason_span.col) == (16, 19)


def test_waive_is_a_reserved_word():
    from .conftest import parse_error

    err, _ = parse_error("x = waive + 1")
    assert err.code == "LW101" and "reserved" in err.message


# --- what the resolver refuses -----------------------------------------------------------------

@pytest.mark.parametrize("line, code, col, hint", [
    ('waive LW999 "x"', "LW250", 7, "did you mean"),
    ('waive W202 "x"', "LW250", 7, "old spelling of `LW282`"),
    ('waive lw282 "x"', "LW250", 7, "capitals: `LW282`"),
    ('waive banana "x"', "LW250", 7, "three digits"),
    ('waive LW301 "x"', "LW251", 7, "only warnings and notes"),
    ('waive LW101 "x"', "LW251", 7, "only warnings and notes"),
    ('waive LW284 "x"', "LW251", 7, "remove the waiver"),
    ('waive LW282', "LW252", 1, "say why"),
    ('waive LW282 at A', "LW252", 1, "say why"),
    ('waive LW282 "   "', "LW252", 13, "say why"),
    ('waive LW282 at Q "x"', "LW253", 16, "name one of them"),
    ('waive LW282 at AA "x"', "LW253", 16, "did you mean `A`"),
])
def test_a_bad_waiver_is_a_located_error(line, code, col, hint):
    err = refused(line)
    assert (err.code, err.span.col) == (code, col), err
    assert hint in err.hint, err.hint


def test_a_waiver_cannot_name_a_param():
    text = BASE + 'param k = 2\nwaive LW282 at k "x"\n'
    with pytest.raises(ModelError) as info:
        check_text(text, "m.loop")
    (err,) = info.value.errors
    assert_rendered(err, text)
    assert err.code == "LW253" and "is a param" in err.message and err.span.col == 16


def test_an_included_file_cannot_waive(tmp_path):
    (tmp_path / "lib.loop").write_text('block A = 1/(s+3)\nwaive LW282 "unused here"\n')
    model = tmp_path / "m.loop"
    model.write_text('use "lib.loop"\n' + BASE.split("\n", 1)[1].replace("block A = 1/(s+3)\n", ""))
    from loopwise.analysis import check_file

    with pytest.raises(ModelError) as info:
        check_file(model)
    assert [e.code for e in info.value.errors] == ["LW204"]


def test_every_error_of_a_model_is_reported_together():
    text = BASE + 'waive LW999 "x"\nwaive LW282 at Q "y"\nwaive LW382\n'
    with pytest.raises(ModelError) as info:
        check_text(text, "m.loop")
    assert [e.code for e in info.value.errors] == ["LW250", "LW253", "LW252"]


# --- what a waiver accepts ------------------------------------------------------------------

def test_without_at_a_waiver_accepts_every_finding_of_its_code():
    got = findings(BASE + 'waive LW282 "library blocks"\n')
    assert got[("LW282", ("A",))].waiver.reason == "library blocks"
    assert got[("LW282", ("B",))].waiver.reason == "library blocks"
    assert got[("LW381", ("d",))].waiver is None          # another code stands
    assert not got[("LW282", ("A",))].counts and got[("LW381", ("d",))].counts


def test_with_at_a_waiver_accepts_only_findings_about_that_name():
    got = findings(BASE + 'waive LW282 at A "kept for the next revision"\n')
    assert got[("LW282", ("A",))].waiver.reason == "kept for the next revision"
    assert got[("LW282", ("B",))].waiver is None
    assert ("LW284", ("A",)) not in got


def test_a_waiver_that_matches_nothing_is_a_warning_at_its_line():
    text = BASE + 'waive LW282 at G "G is used"\nwaive LW487 "no hidden modes here"\n'
    result = check_text(text, "m.loop")
    unmatched = [f for f in result.findings if f.code == "LW284"]
    assert [(f.span.line, f.severity, f.about) for f in unmatched] == [(9, "warning", ("G",)), (10, "warning", ())]
    assert all(f.counts for f in unmatched)  # they count for fail_on_warnings


def test_the_waiver_naming_its_subject_wins_over_the_general_one():
    got = findings(BASE + 'waive LW282 "general"\nwaive LW282 at B "about B"\n')
    assert got[("LW282", ("A",))].waiver.reason == "general"
    assert got[("LW282", ("B",))].waiver.reason == "about B"
    # both match something, so neither is reported as matching nothing
    assert not any(code == "LW284" for code, _ in got)


def test_a_loop_warning_is_about_every_signal_on_the_loop():
    text = """\
input r
block G = 1/(s+1)
e = r - h1
h1 = G(e) + [0.5/(s+1)](h2)
h2 = [0.5/(s+1)](h1)
break level at h1 -> e
waive LW382 at h2 "balance pipe between the tanks, not a control loop"
"""
    (loop,) = [f for f in check_text(text, "tanks.loop").findings if f.code == "LW382"]
    assert set(loop.about) == {"h1", "h2"}
    assert loop.waiver.reason.startswith("balance pipe")


def test_a_break_warning_is_about_its_break():
    # tests/scenarios.py re-derives the separation: 2.3 < 3 (common practice)
    plain = check_text(CASCADE, "c.loop")
    inner = {b.name: b for b in plain.breaks}["inner"]
    assert [(w.code, w.about) for w in inner.warnings] == [("LW383", ("inner",))]
    wrong = check_text(CASCADE + 'waive LW383 at outer "slow on purpose"\n', "c.loop")
    assert {b.name: b for b in wrong.breaks}["inner"].open_warnings
    assert [f.code for f in wrong.findings] == ["LW284"]
    right = check_text(CASCADE + 'waive LW383 at inner "slow on purpose"\n', "c.loop")
    assert not right.open_warnings and [f.code for f in right.findings] == []


# --- the function later stages ask ------------------------------------------------------------

def _w(code, at=None, files=None, reason="r") -> Waiver:
    return Waiver(code, reason, Span("m.loop", 1, 1), at, files)


def test_waiver_for_prefers_the_models_own_and_the_named_subject():
    own_general, own_named = _w("LW281", reason="own general"), _w("LW281", "Gp", reason="own named")
    settings_named = _w("LW281", "Gp", ("**/*.loop",), reason="settings named")
    waivers = Waivers((settings_named, own_general, own_named))
    assert waivers.waiver_for("LW281", "Gp") is own_named
    assert waivers.waiver_for("LW281", ("Gc", "Gp")) is own_named
    assert waivers.waiver_for("LW281", "Gc") is own_general
    assert waivers.waiver_for("LW281") is own_general  # about the model as a whole
    assert waivers.waiver_for("LW282", "Gp") is None
    assert Waivers((settings_named,)).waiver_for("LW281", "Gp") is settings_named
    assert Waivers((settings_named,)).waiver_for("LW281") is None


def test_a_waiver_never_covers_an_error():
    w = _w("LW281")
    assert w.covers(Finding("warning", "LW281", "m", about=("G",)))
    assert not w.covers(Finding("error", "LW281", "m", about=("G",)))
    assert not _w("LW281", "G").covers(Finding("warning", "LW281", "m", about=("H",)))
