"""Bad input: every mistake is a located ModelError with the line, a caret and a hint.

Each case renders the error with `loopwise.errors.render` and checks the text:
`file:line:col: error CODE message`, the source line, a caret under the spot,
and a `hint:` line (LW104, binary input, is not echoed: location and hint only).
Errors found after parsing go through `loopwise.analysis.check_text`/`check_file`.
Comments marked "regression" name the fault a case once exposed.
"""
from __future__ import annotations

import random

import pytest

import numpy as np

from loopwise.errors import LoopwiseError, ModelError, ModelErrors
from loopwise.language.parse import MAX_MODEL_BYTES, parse_text

from .conftest import MODELS, assert_rendered, parse_error


def check(text: str, code: str, line: int, col: int, *, hint: str | None = None,
          message: str | None = None, width: int | None = None) -> ModelError:
    err, _ = parse_error(text)
    out = assert_rendered(err, text)
    assert (err.code, err.span.line, err.span.col) == (code, line, col), "\n".join(out)
    if hint is not None:
        assert hint in err.hint, "\n".join(out)
    if message is not None:
        assert message in err.message, "\n".join(out)
    if width is not None:
        assert out[2].count("^") == width, "\n".join(out)
    return err


# --- syntax errors -----------------------------------------------------------

@pytest.mark.parametrize("text, line, col, hint", [
    ("param = 3", 1, 7, "a name"),
    ("x = (y", 1, 7, "`)`"),
    ("x = y)", 1, 6, "end of line"),
    ("block B 1/s", 1, 9, "`=`"),
    ("require a phase_margin 45deg", 1, 24, "comparison"),
    ("input", 1, 6, "a name"),
    ("model", 1, 6, "a name"),
    ("use common.loop", 1, 5, "quoted path"),
    ("x = y +* z", 1, 8, "a number"),
    ("x == y", 1, 4, "a name"),
    ("break a at b ->", 1, 16, "a name"),
    ("param k = 1 in [1, 2", 1, 21, "`]`"),
    ("model a\n\nparam k = 2\nblock C = k*(1 + 1/(3*s)\ny = C(r)", 4, 25, "`)`"),
])
def test_syntax_error_is_located_with_a_hint(text, line, col, hint):
    check(text, "LW101", line, col, hint=hint)


@pytest.mark.parametrize("text, line, col, code", [
    ("x = y @ 3", 1, 7, "LW101"),
    ("x = y ; z", 1, 7, "LW101"),
    ("use \"common/a.loop", 1, 5, "LW101"),
    ("x = y + ä", 1, 9, "LW101"),
    ("break a at b c", 1, 14, "LW101"),
    ("param k = 2 in [1 3]", 1, 19, "LW102"),
    ("x = (s + 1)(s + 2)", 1, 12, "LW102"),
])
def test_every_syntax_error_has_a_hint(text, line, col, code):
    # regression: these had no hint (lark expected many tokens; unexpected characters)
    err, out = parse_error(text)
    assert (err.code, err.span.line, err.span.col) == (code, line, col), out
    assert_rendered(err, text)


def test_keyword_in_the_expected_list_is_quoted():
    err, out = parse_error("break a x")
    assert "`at`" in err.hint, out  # regression: was "expected at"


def test_error_on_a_later_line_of_a_file_shows_that_line():
    text = "# header\nmodel m\n\tparam a = 1\n\tparam b = = 2\n"
    err = check(text, "LW101", 4, 12)
    rendered = assert_rendered(err, text)
    assert rendered[1] == "    \tparam b = = 2"
    assert rendered[2] == "    \t" + " " * 10 + "^"  # the tab is kept so the caret lines up


def test_crlf_file_reports_the_same_place():
    text = "model m\r\nparam a = 1\r\nparam b = = 2\r\n"
    err, _ = parse_error(text)
    assert (err.span.line, err.span.col) == (3, 11)
    assert_rendered(err, text)


def test_continued_line_reports_the_physical_line():
    text = "block C = 2*(1 + \\\n   1/(3*s)) )\n"
    err, _ = parse_error(text)
    assert (err.span.line, err.span.col) == (2, 13)
    assert_rendered(err, text)


# --- a missing `*` -------------------------------------------------------------

@pytest.mark.parametrize("text, col, width, hint", [
    ("block B = 0.5 s", 15, 1, "`0.5*s`"),
    ("block B = 0.5s", 11, 4, "`0.5*s`"),
    ("y = 2 x", 7, 1, "`2*x`"),
    ("block B = 1/(0.2s + 1)", 14, 4, "`0.2*s`"),
    ("block B = k/(J s)", 16, 1, "`J*s`"),
    ("x = [1/s](y) z", 14, 1, "*z"),
])
def test_missing_multiplication(text, col, width, hint):
    check(text, "LW102", 1, col, hint=hint, width=width)


@pytest.mark.parametrize("text, hint", [
    ("x = 2(y)", "`2*(...)`"),
    ("x = (s + 1)(s + 2)", "*(...)"),
    ("x = 2 3", "`2*3`"),
])
def test_missing_multiplication_before_a_bracket_or_number(text, hint):
    err, out = parse_error(text)
    assert err.code == "LW102" and err.hint and hint in err.hint, out


def test_space_before_unit_suggests_writing_it_attached():
    # regression: suggested `45*deg`
    err, out = parse_error("require a phase_margin >= 45 deg")
    assert err.code == "LW102" and "`45deg`" in err.hint, out


# --- units and numbers -----------------------------------------------------------

@pytest.mark.parametrize("text, width", [
    ("x = 3kg", 3), ("x = 10mHz", 5), ("x = 2Ohm", 4), ("param Td = 150usec", 7),
])
def test_unknown_unit(text, width):
    col = text.index("=") + 3
    err = check(text, "LW103", 1, col, width=width)
    assert "ms" in err.hint and "kHz" in err.hint and "dB" in err.hint


def test_unit_starting_with_s_is_a_missing_star():
    check("x = 5sec", "LW102", 1, 5, hint="Laplace variable")


@pytest.mark.parametrize("text", ["x = 1.2.3", "x = 1..2", "x = 3.5.e2"])
def test_malformed_number(text):
    check(text, "LW103", 1, 5, hint="numbers look like")


@pytest.mark.parametrize("text", ["x = 1e", "x = 1e+", "x = 1_000", "x = 0x10", "x = 2E-"])
def test_malformed_number_is_not_taken_for_a_unit(text):
    # regression: was "unknown unit" with hints `1*e`, `1*_000`, `0*x10`
    err, out = parse_error(text)
    assert err.code == "LW103" and "malformed number" in err.message, out
    assert "*" not in err.hint, out
    assert_rendered(err, text)


@pytest.mark.parametrize("text, col, width", [
    ("param a = 1e400", 11, 5),
    ("param a = -1e400", 12, 5),
    ("param a = 1e306h", 11, 6),       # finite as written, infinite in seconds
    ("block B = 1/(1e999*s + 1)", 14, 5),
])
def test_non_finite_number(text, col, width):
    check(text, "LW106", 1, col, width=width, hint="finite")


def test_decibels_beyond_the_float_range():
    # regression: OverflowError from units.to_si escaped wrapped in lark's VisitError
    err, out = parse_error("require a gain_margin >= 7000dB")
    assert err.code == "LW106", out


def test_number_that_underflows_to_zero():
    # regression: `1e-400` silently became 0.0
    err, out = parse_error("param a = 1e-400")
    assert err.code == "LW106", out


def test_zero_written_with_an_exponent_is_fine():
    assert parse_text("param a = 0.0e-400").statements[0].value.value == 0.0


# --- empty, binary, huge, deep ---------------------------------------------------------

@pytest.mark.parametrize("text", ["", "\n", "   \n\t\n", "# nothing but a comment\n"])
def test_empty_file_parses_to_no_statements(text):
    # the resolver reports "no signals" later, with the file's name
    assert parse_text(text, "empty.loop").statements == ()


def _not_text(text: str, line: int, col: int) -> ModelError:
    """LW104 is rendered without echoing the bytes: the location and a hint."""
    err, out = parse_error(text)
    assert (err.code, err.span.line, err.span.col) == ("LW104", line, col), out
    assert out.split("\n") == [f"m.loop:{line}:{col}: error LW104 {err.message}",
                               f"    hint: {err.hint}"]
    assert "UTF-8" in err.hint
    return err


def test_nul_bytes_are_refused_as_binary():
    text = b"model a\nparam b = 1\x00\x01\x02\n".decode("utf-8", errors="replace")
    assert "binary" in _not_text(text, 2, 1).message


def test_invalid_utf8_is_refused_where_it_stands():
    text = b"model a\nparam b = \xff\xfe 2\n".decode("utf-8", errors="replace")
    _not_text(text, 2, 11)


def test_random_bytes_give_only_model_errors():
    rng = random.Random(20261201)
    for _ in range(200):
        raw = bytes(rng.randrange(256) for _ in range(rng.randrange(1, 300)))
        text = raw.decode("utf-8", errors="replace")
        try:
            parse_text(text, "garbage.loop")
        except ModelError as err:
            assert err.span.line >= 1 and err.hint, (raw, err)


def test_lone_carriage_return_is_named():
    # regression: was "unexpected character ``" (invisible) with no hint
    text = "param a = 1\rparam b = 2\n"
    err, out = parse_error(text)
    assert err.code == "LW104" and err.hint and "line end" in err.hint, out


def test_byte_order_mark_is_accepted():
    # regression: was refused as LW104 at 1:1
    assert len(parse_text("\ufeffmodel m\nparam a = 1\n").statements) == 2


def test_huge_file_is_refused_before_parsing():
    line = "param a = 1   # padding padding padding padding padding padding\n"
    text = line * (10 * 1024 * 1024 // len(line) + 1)
    assert len(text) > MAX_MODEL_BYTES
    err = check(text, "LW105", 1, 1, hint="use")
    assert "too large" in err.message


NESTED = {
    "500 parentheses": "x = " + "(" * 500 + "y" + ")" * 500,
    "500 unary minus": "x = " + "-" * 500 + "y",
    "500 nested block applications": "x = " + "A(" * 500 + "y" + ")" * 500,
    "500 nested inline transfers": "x = " + "[1/s](" * 500 + "y" + ")" * 500,
    "500 chained powers": "x = " + "y^" * 500 + "2",
    "2000-term sum": "x = " + " + ".join(["y"] * 2000),
    "5000 parentheses in a transfer": "block B = " + "(" * 5000 + "1/s" + ")" * 5000,
}


@pytest.mark.parametrize("text", NESTED.values(), ids=NESTED.keys())
def test_deep_nesting_never_escapes(text):
    # regression: RecursionError or lark's VisitError escaped (all but parentheses)
    try:
        parse_text(text, "deep.loop")
    except ModelError as err:
        assert err.span.line == 1 and err.hint
    except LoopwiseError:
        raise AssertionError("a model error must be a ModelError with a location")


def test_error_on_a_long_line_still_has_a_caret():
    # regression: errors.render left out lines longer than 400 characters
    text = "x = " + " + ".join(f"y{i}" for i in range(150)) + " )"
    err, out = parse_error(text)
    assert "^" in out, out


# --- errors found after parsing (the resolver, the diagram) ------------------------------
# These run through loopwise.analysis.check_text / check_file.

def _check_text(text: str, file: str = "m.loop"):
    from loopwise.analysis import check_text
    return check_text(text, file)


def _prepare_text(text: str, file: str = "m.loop"):
    """Parse, resolve and build the diagram: every model error, without the engine."""
    from loopwise.testing import prepare_text
    return prepare_text(text, file)


def _errors(exc_info) -> list[ModelError]:
    exc = exc_info.value
    return list(exc.errors) if isinstance(exc, ModelErrors) else [exc]


BASE = """\
model m
input r
block C = 2*(1 + 1/(0.5*s))
e = r - y
y = [1/(s + 1)](C(e))
break b at y
"""


def _model_error(text: str, *, line: int, file: str = "m.loop") -> ModelError:
    with pytest.raises((ModelError, ModelErrors)) as info:
        _check_text(text, file)  # the errors come before the engine runs
    errors = _errors(info)
    hit = [e for e in errors if e.span.line == line]
    assert hit, [str(e) for e in errors]
    err = hit[0]
    assert err.span.file == file and err.span.col >= 1 and err.hint, str(err)
    assert_rendered(err, text, file=file)
    return err


@pytest.mark.parametrize("extra, code", [
    ("param break = 2", "LW101"),
    ("block model = 1/s", "LW101"),
    ("in = r", "LW101"),
    ("input at", "LW101"),
    ("param s = 2", "LW201"),
    ("block exp = 1/s", "LW201"),
    ("break in at y", "LW101"),
])
def test_reserved_word_cannot_be_declared(extra, code):
    err = _model_error(BASE + extra + "\n", line=7)
    # the grammar refuses the statement words (LW101), the resolver `s` and `exp` (LW201)
    assert err.code == code and "reserved" in err.message


def test_reserved_word_used_as_a_value_says_so():
    err = _model_error(BASE + "x = break + 1\n", line=7)
    assert (err.code, err.message) == ("LW101", "`break` is a reserved word")


def test_base_model_is_accepted():
    # L = 2*(1 + 2/s)/(s + 1): no RHP poles, |L| < 1 only above 1 rad/s with phase
    # above -180 deg everywhere, so the closed loop is stable (Nyquist, by hand)
    assert _check_text(BASE).stable is True


def test_positive_delay_is_refused():
    text = BASE.replace("block C = 2*(1 + 1/(0.5*s))", "block C = 2*exp(+0.1*s)")
    err = _model_error(text, line=3)
    assert (err.code, err.message) == ("LW231", "`exp(+T*s)` is a prediction, not a delay")


def test_exp_of_something_else_is_refused():
    text = BASE.replace("block C = 2*(1 + 1/(0.5*s))", "block C = exp(2)")
    err = _model_error(text, line=3)
    assert (err.code, err.message) == ("LW232", "`exp` is only allowed as a pure delay `exp(-T*s)`")


@pytest.mark.parametrize("delay", ["param Td = 0", "param Td = 0ms", "param Td = 2 - 2"])
def test_zero_delay_is_no_delay(delay):
    # regression: `param Td = 0` with `exp(-Td*s)` was refused (LW232) although the
    # docs allow T >= 0; T = 0 is the constant 1
    text = BASE.replace("model m\n", f"model m\n{delay}\n").replace(
        "block C = 2*(1 + 1/(0.5*s))", "block C = 2*(1 + 1/(0.5*s))*exp(-Td*s)")
    prep = _prepare_text(text)
    tf = prep.model.blocks["C"].transfer
    assert tf.delay == 0.0
    s = np.array([0.3j, 2j, 40j])
    np.testing.assert_allclose(tf.evaluate(s), 2 * (1 + 1 / (0.5 * s)), rtol=1e-13)


def test_unknown_signal_suggests_a_close_name():
    text = BASE.replace("e = r - y", "e = r - yy")
    err = _model_error(text, line=4)
    assert (err.code, err.message, err.hint) == ("LW218", "unknown signal or param `yy`", "did you mean `y`?")


def test_unknown_block():
    text = BASE.replace("C(e)", "Cx(e)")
    err = _model_error(text, line=5)
    assert (err.code, err.message, err.hint) == ("LW227", "unknown block `Cx`", "did you mean `C`?")


def test_signal_defined_twice():
    text = BASE + "e = r\n"
    err = _model_error(text, line=7)
    assert (err.code, err.message) == ("LW202", "`e` is defined twice (first as a signal at m.loop:4:1)")


def test_param_defined_twice():
    text = BASE + "param k = 1\nparam k = 2\n"
    err = _model_error(text, line=8)
    assert (err.code, err.message) == ("LW202", "`k` is defined twice (first as a param at m.loop:7:7)")


def test_block_named_like_a_signal():
    text = BASE + "block e = 1/s\n"
    err = _model_error(text, line=7)
    assert (err.code, err.message) == ("LW202", "`e` is defined twice (first as a signal at m.loop:4:1)")


def test_nan_written_as_a_name_is_unknown():
    text = BASE + "param k = nan\n"
    err = _model_error(text, line=7)
    assert (err.code, err.message) == ("LW218", "unknown param `nan`")


def test_break_at_unknown_signal():
    text = BASE.replace("break b at y", "break b at yy")
    err = _model_error(text, line=6)
    assert (err.code, err.hint) == ("LW306", "did you mean `y`?")


def test_requirement_with_a_unit_that_does_not_fit():
    text = BASE + "require b phase_margin >= 6dB\n"
    err = _model_error(text, line=7)
    assert (err.code, err.message) == ("LW241", "a gain unit does not fit `phase_margin` (its unit is deg)")


def test_negative_decibel_limit_has_a_hint():
    # gain_margin_down is judged as a positive figure; the JSON reports it negative,
    # so `-6dB` is an easy slip
    err = _model_error(BASE + "require b gain_margin_down >= -6dB\n", line=7)
    assert err.code == "LW242" and "gain_margin_down >= 6dB" in err.hint


def test_error_in_a_block_and_its_follow_up_have_hints():
    with pytest.raises((ModelError, ModelErrors)) as info:
        _prepare_text(BASE + "block B = s^65\nz = B(e)\n")
    errs = _errors(info)
    assert [e.code for e in errs] == ["LW223", "LW228"]
    for err in errs:
        assert err.hint, str(err)


def test_ill_posed_algebraic_loop():
    err = _model_error(BASE + "y2 = y2 + r\n", line=7)
    assert err.code == "LW301"


def test_empty_file_reports_no_signals():
    with pytest.raises((ModelError, ModelErrors)) as info:
        _check_text("# nothing here\n", "empty.loop")
    errors = _errors(info)
    assert errors[0].span.file == "empty.loop"
    assert any("signal" in e.message for e in errors)


def _prepare_file(path):
    from loopwise.analysis import prepare_file
    return prepare_file(path)


def _check_file(path):
    from loopwise.analysis import check_file
    return check_file(path)


def test_missing_include(tmp_path):
    main = tmp_path / "main.loop"
    text = BASE.replace("model m\n", 'model m\nuse "common/nowhere.loop"\n')
    main.write_text(text)
    with pytest.raises((ModelError, ModelErrors)) as info:
        _check_file(main)
    err = _errors(info)[0]
    assert (err.code, err.span.line) == ("LW206", 2)
    assert err.message == "cannot read included file common/nowhere.loop: no such file" and err.hint
    assert_rendered(err, text, file=err.span.file)


def test_include_cycle(tmp_path):
    (tmp_path / "a.loop").write_text('use "b.loop"\nparam ka = 1\n')
    (tmp_path / "b.loop").write_text('use "a.loop"\nparam kb = 1\n')
    main = tmp_path / "main.loop"
    main.write_text(BASE.replace("model m\n", 'model m\nuse "a.loop"\n'))
    with pytest.raises((ModelError, ModelErrors)) as info:
        _check_file(main)
    err = _errors(info)[0]
    assert err.code == "LW205" and err.span.file.endswith("b.loop") and err.span.line == 1 and err.hint
    assert err.message == "include cycle: a.loop -> b.loop -> a.loop"


def test_error_inside_an_include_points_into_that_file(tmp_path):
    (tmp_path / "common").mkdir()
    lib = tmp_path / "common" / "ctl.loop"
    lib_text = "param k = 2\nblock C = k*(1 + 1/(0.5 s))\n"
    lib.write_text(lib_text)
    main = tmp_path / "main.loop"
    main.write_text(BASE.replace("model m\n", 'model m\nuse "common/ctl.loop"\n')
                    .replace("block C = 2*(1 + 1/(0.5*s))\n", ""))
    with pytest.raises((ModelError, ModelErrors)) as info:
        _check_file(main)
    errors = _errors(info)
    inside = [e for e in errors if e.span.file.endswith("ctl.loop")]
    assert inside, [str(e) for e in errors]
    err = inside[0]
    assert err.code == "LW102" and err.span.line == 2
    assert_rendered(err, lib_text, file=err.span.file)


def test_include_brings_params_and_blocks(tmp_path):
    (tmp_path / "common").mkdir()
    (tmp_path / "common" / "ctl.loop").write_text("param k = 2\nblock C = k*(1 + 1/(0.5*s))\n")
    main = tmp_path / "main.loop"
    main.write_text(BASE.replace("model m\n", 'model m\nuse "common/ctl.loop"\n')
                    .replace("block C = 2*(1 + 1/(0.5*s))\n", ""))
    model = _prepare_file(main).model
    assert model.params["k"].value == 2.0
    s = np.array([0.5j, 3j])
    np.testing.assert_allclose(model.blocks["C"].transfer.evaluate(s), 2 * (1 + 1 / (0.5 * s)), rtol=1e-13)
    assert model.blocks["C"].span.file == str(tmp_path / "common" / "ctl.loop")


def test_shared_params_demo_resolves_its_include():
    model = _prepare_file(MODELS / "shared_params.loop").model
    # the values written in models/common/conveyor_drive.loop, in SI units
    assert (model.params["kt"].value, model.params["J"].value) == (0.12, 2.4e-4)
    assert model.params["Tcl"].value == pytest.approx(0.3e-3, rel=1e-15)
    assert model.blocks["Encoder"].transfer.delay == pytest.approx(0.5e-3, rel=1e-15)
    assert model.blocks["Current"].span.file.endswith("common/conveyor_drive.loop")


def test_include_file_alone_is_a_library_not_a_model():
    from loopwise.analysis import check_file
    result = check_file(MODELS / "common" / "conveyor_drive.loop")
    assert result.breaks == ()
    assert [f.code for f in result.findings] == ["LW491"]


def test_latin1_byte_in_a_comment_is_refused_where_it_stands(tmp_path):
    # regression: the file was decoded with errors="replace", so a Latin-1 byte in a
    # comment passed although the docs say bytes that are not UTF-8 are refused
    path = tmp_path / "m.loop"
    path.write_bytes(BASE.replace("model m\n", "model m\n# r\xe9glage du gain\n").encode("latin-1"))
    with pytest.raises(ModelError) as info:
        _check_file(path)
    err = info.value
    assert (err.code, err.span.line, err.span.col) == ("LW104", 2, 4)
    from loopwise.errors import render
    assert render(err.as_finding()).split("\n") == [
        f"{path}:2:4: error LW104 the file is not UTF-8 text here", "    hint: a model is plain UTF-8 text"]


def test_a_file_name_that_is_not_utf8_renders(tmp_path):
    # regression: the name's undecodable byte (a surrogate) broke every rendering of the error
    import json
    import os

    from loopwise.errors import render
    path = tmp_path / os.fsdecode(b"gain\xff.loop")
    path.write_text("input r\ny = q\n")
    with pytest.raises(ModelErrors) as info:
        _check_file(path)
    finding = info.value.errors[0].as_finding()
    text = render(finding)
    text.encode("utf-8")  # printable and writable as UTF-8
    assert text.split("\n")[:3] == [f"{tmp_path}/gain\ufffd.loop:2:5: error LW218 unknown signal or param `q`",
                                    "    y = q", "        ^"]
    data = finding.to_dict()
    assert data["file"] == f"{tmp_path}/gain\ufffd.loop"
    json.dumps(data, ensure_ascii=False).encode("utf-8")
