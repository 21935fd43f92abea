"""Parsing: every statement form, expressions, positions, layout, reserved words."""
from __future__ import annotations

import dataclasses
import math
import textwrap

import pytest

from loopwise.errors import ModelError, Span
from loopwise.language import ast
from loopwise.language.parse import parse_text

from .conftest import ALL_LOOP_FILES, MODELS, ROOT, one, parse, parse_error, rhs


# --- statement forms -----------------------------------------------------------

def test_model_statement():
    stmt = one("model servo_axis")
    assert stmt == ast.ModelStmt(Span("m.loop", 1, 1, 17), "servo_axis")


def test_use_statement_keeps_the_path_without_quotes():
    stmt = one('use "common/conveyor_drive.loop"')
    assert isinstance(stmt, ast.UseStmt)
    assert stmt.path == "common/conveyor_drive.loop"
    assert (stmt.span.line, stmt.span.col, stmt.span.end_col) == (1, 5, 33)


def test_param_statement():
    stmt = one("param Rw = 0.9")
    assert isinstance(stmt, ast.ParamStmt)
    assert stmt.name == "Rw" and stmt.low is None and stmt.high is None
    assert stmt.value == ast.Number(Span("m.loop", 1, 12, 15), 0.9, None, "0.9")
    assert stmt.span == Span("m.loop", 1, 7, 9)  # the param's name


def test_param_with_uncertainty_range():
    stmt = one("param J = 2.4e-4 in [2e-4, 3.5e-4]")
    assert isinstance(stmt, ast.ParamStmt)
    assert stmt.value.value == pytest.approx(2.4e-4)
    assert stmt.low.value == pytest.approx(2e-4)
    assert stmt.high.value == pytest.approx(3.5e-4)


def test_param_range_bounds_are_expressions():
    stmt = one("param k = 2*a in [a - 1, a*1.5]")
    assert isinstance(stmt.low, ast.BinOp) and stmt.low.op == "-"
    assert isinstance(stmt.high, ast.BinOp) and stmt.high.op == "*"


def test_param_may_use_other_params():
    stmt = one("param p = (2*g/x0)^0.5")
    assert isinstance(stmt.value, ast.Power)
    assert isinstance(stmt.value.base, ast.BinOp) and stmt.value.base.op == "/"


@pytest.mark.parametrize("text, names", [
    ("input load", ["load"]),
    ("input pos_ref, load", ["pos_ref", "load"]),
    ("input a,b , c", ["a", "b", "c"]),
])
def test_input_statement(text, names):
    stmt = one(text)
    assert isinstance(stmt, ast.InputStmt)
    assert [n for n, _ in stmt.names] == names
    for name, span in stmt.names:
        assert text[span.col - 1: span.end_col - 1] == name


def test_block_statement():
    stmt = one("block Cv = 0.4*(1 + 1/(0.012*s))")
    assert isinstance(stmt, ast.BlockStmt)
    assert stmt.name == "Cv" and stmt.span == Span("m.loop", 1, 7, 9)
    assert isinstance(stmt.transfer, ast.BinOp) and stmt.transfer.op == "*"


def test_block_with_delay_call():
    stmt = one("block Pe = exp(-150us*s) / (Lw*s + Rw)")
    num = stmt.transfer.left
    assert isinstance(num, ast.Call) and num.func == "exp"
    assert num.func_span == Span("m.loop", 1, 12, 15)
    delay = num.arg.left
    assert isinstance(delay, ast.Neg)
    assert delay.operand.value == pytest.approx(150e-6) and delay.operand.unit == "us"


def test_equation_signed_sum():
    stmt = one("spd_err = spd_ref - spd")
    assert isinstance(stmt, ast.EquationStmt)
    assert stmt.signal == "spd_err"
    assert stmt.value == ast.BinOp(
        Span("m.loop", 1, 11, 24), "-",
        ast.Name(Span("m.loop", 1, 11, 18), "spd_ref"),
        ast.Name(Span("m.loop", 1, 21, 24), "spd"),
    )


def test_equation_block_application_and_nesting():
    value = rhs("cur = Pe(Ci(cur_err))")
    assert isinstance(value, ast.Call) and value.func == "Pe"
    assert isinstance(value.arg, ast.Call) and value.arg.func == "Ci"
    assert value.arg.arg == ast.Name(Span("m.loop", 1, 13, 20), "cur_err")


def test_equation_inline_transfer_applied_to_a_sum():
    value = rhs("spd = [kt/(J*s)](cur - load/kt)")
    assert isinstance(value, ast.Inline)
    assert isinstance(value.transfer, ast.BinOp) and value.transfer.op == "/"
    arg = value.arg
    assert isinstance(arg, ast.BinOp) and arg.op == "-"
    assert isinstance(arg.right, ast.BinOp) and arg.right.op == "/"  # load/kt: scaled signal
    assert value.span == Span("m.loop", 1, 7, 32)


def test_equation_leading_minus_and_scaled_terms():
    value = rhs("e = -y + 2*r - w/4")
    assert value.op == "-"
    assert value.left.op == "+"
    assert isinstance(value.left.left, ast.Neg)
    assert value.left.right.op == "*"
    assert value.right.op == "/"


@pytest.mark.parametrize("text, signal, target", [
    ("break position at pos", "pos", None),
    ("break current at cur -> cur_err", "cur", "cur_err"),
    ("break current at cur->cur_err", "cur", "cur_err"),
])
def test_break_statement(text, signal, target):
    stmt = one(text)
    assert isinstance(stmt, ast.BreakStmt)
    assert stmt.signal == signal and stmt.target == target
    assert text[stmt.signal_span.col - 1: stmt.signal_span.end_col - 1] == signal
    if target is None:
        assert stmt.target_span is None and stmt.at == signal
    else:
        assert text[stmt.target_span.col - 1: stmt.target_span.end_col - 1] == target
        assert stmt.at == f"{signal} -> {target}"


@pytest.mark.parametrize("op", [">=", "<=", ">", "<"])
def test_require_operators(op):
    stmt = one(f"require current phase_margin {op} 45deg")
    assert isinstance(stmt, ast.RequireStmt)
    assert stmt.op == op and stmt.target == "current" and stmt.metric == "phase_margin"
    assert stmt.value.value == pytest.approx(math.radians(45)) and stmt.value.unit == "deg"


def test_require_for_every_break():
    stmt = one("require * gain_margin >= 6dB")
    assert stmt.target == "*" and stmt.target_span == Span("m.loop", 1, 9, 10)
    assert stmt.metric_span == Span("m.loop", 1, 11, 22)


@pytest.mark.parametrize("metric", [
    "gain_margin", "gain_margin_up", "gain_margin_down", "phase_margin", "delay_margin",
    "disk_margin", "disk_gain", "disk_phase", "sensitivity_peak", "crossover", "separation",
])
def test_require_metric_names_parse(metric):
    # metric names are checked by the resolver, not the grammar
    assert one(f"require speed {metric} >= 1").metric == metric


def test_require_limit_may_be_negative_or_an_expression():
    assert isinstance(one("require a gain_margin_down <= -6dB").value, ast.Neg)
    assert isinstance(one("require a crossover >= 2*wc").value, ast.BinOp)


# --- expressions -----------------------------------------------------------------

def test_power_binds_tighter_than_unary_minus():
    value = rhs("x = -2^2")
    assert isinstance(value, ast.Neg) and isinstance(value.operand, ast.Power)


def test_power_is_right_associative():
    value = rhs("x = 2^3^2")
    assert isinstance(value.exponent, ast.Power)
    assert value.base.value == 2


def test_power_takes_a_signed_exponent():
    value = rhs("x = s^-1")
    assert isinstance(value.exponent, ast.Neg)


@pytest.mark.parametrize("text, outer, inner_side", [
    ("x = a - b - c", "-", "left"),
    ("x = a / b * c", "*", "left"),
    ("x = a + b * c", "+", "right"),
    ("x = (a + b) * c", "*", "left"),
])
def test_precedence_and_left_associativity(text, outer, inner_side):
    value = rhs(text)
    assert value.op == outer
    assert isinstance(getattr(value, inner_side), ast.BinOp)


def test_unary_plus_is_dropped_and_parentheses_leave_no_node():
    assert rhs("x = +y") == ast.Name(Span("m.loop", 1, 6, 7), "y")
    assert rhs("x = ((y))") == ast.Name(Span("m.loop", 1, 7, 8), "y")


def test_transfer_in_the_sketch_form():
    value = one("block F = wn^2 / (s^2 + 2*zeta*wn*s + wn^2)").transfer
    assert value.op == "/" and isinstance(value.left, ast.Power)


def test_nan_and_inf_are_names_not_numbers():
    # NaN cannot be written as a literal: these are ordinary (unknown) names
    assert rhs("x = nan") == ast.Name(Span("m.loop", 1, 5, 8), "nan")
    assert isinstance(rhs("x = inf"), ast.Name)


@pytest.mark.parametrize("text, value", [
    ("12", 12.0), ("0.5", 0.5), (".5", 0.5), ("5.", 5.0), ("1e-3", 1e-3),
    ("1E3", 1000.0), ("2.5e+2", 250.0), ("0", 0.0), ("1e300", 1e300),
])
def test_number_forms(text, value):
    number = rhs(f"x = {text}")
    assert isinstance(number, ast.Number)
    assert number.value == value and number.unit is None and number.text == text


# --- positions ---------------------------------------------------------------------

MULTI = """\
# a comment line
model demo

param  k = 2   # trailing comment
\tblock C = k*(1 + 1/(3ms*s))
y = C(r - y)
break b at y
require b phase_margin >= 45deg
"""


def test_statement_positions_in_a_file():
    statements = parse(MULTI, "demo.loop")
    assert [type(s).__name__ for s in statements] == [
        "ModelStmt", "ParamStmt", "BlockStmt", "EquationStmt", "BreakStmt", "RequireStmt"]
    where = [(s.span.file, s.span.line, s.span.col) for s in statements]
    assert where == [("demo.loop", 2, 1), ("demo.loop", 4, 8), ("demo.loop", 5, 8),
                     ("demo.loop", 6, 1), ("demo.loop", 7, 7), ("demo.loop", 8, 1)]


def test_expression_nodes_know_their_columns():
    block = parse(MULTI)[2]
    lines = MULTI.split("\n")
    def text_of(node):
        sp = node.span
        return lines[sp.line - 1][sp.col - 1: sp.end_col - 1]
    assert text_of(block.transfer) == "k*(1 + 1/(3ms*s))"
    assert text_of(block.transfer.left) == "k"
    inner = block.transfer.right  # parentheses leave no node: the sum itself
    assert text_of(inner) == "1 + 1/(3ms*s)"
    assert text_of(inner.right.right.left) == "3ms"
    eq = parse(MULTI)[3]
    assert text_of(eq.value) == "C(r - y)" and text_of(eq.value.arg) == "r - y"


def test_every_node_of_every_demo_model_has_a_position():
    for path in ALL_LOOP_FILES:
        text = path.read_text("utf-8")
        lines = text.split("\n")
        stack = list(parse_text(text, str(path)).statements)
        assert stack, path
        while stack:
            node = stack.pop()
            span = node.span
            assert span.file == str(path) and 1 <= span.line <= len(lines), (path, node)
            assert 1 <= span.col <= len(lines[span.line - 1]), (path, node)
            if isinstance(node, (ast.Number, ast.Name)):
                token = lines[span.line - 1][span.col - 1: span.end_col - 1]
                assert token == (node.text if isinstance(node, ast.Number) else node.name)
            for field in dataclasses.fields(node):
                value = getattr(node, field.name)
                if isinstance(value, ast.Expr):
                    stack.append(value)


def test_file_name_is_carried_into_spans():
    stmt = parse("param a = 1", "plant/motor.loop")[0]
    assert stmt.span.file == "plant/motor.loop"
    assert stmt.value.span.file == "plant/motor.loop"


# --- layout: comments, blank lines, line ends, continuation ------------------------

def test_comments_and_blank_lines_make_no_statements():
    assert parse("# only a comment") == ()
    assert parse("\n\n   \n\t\n# c\n   # indented comment\n") == ()
    assert parse("") == ()


def test_last_line_without_newline():
    assert one("param a = 1").name == "a"
    assert len(parse("param a = 1\nparam b = 2")) == 2


def test_comment_after_a_statement():
    stmt = one("break b at y   # open the loop here")
    assert stmt.signal == "y"


def test_crlf_line_ends_give_the_same_tree():
    lf = parse_text(MULTI, "m.loop")
    crlf = parse_text(MULTI.replace("\n", "\r\n"), "m.loop")
    assert crlf == lf


def test_backslash_continues_a_line():
    text = "block C = 2*(1 + \\\n    1/(3*s))\nparam a = 1\n"
    block, param = parse(text)
    assert isinstance(block, ast.BlockStmt)
    assert block.transfer.right.right.span.line == 2  # `1/(3*s)` sits on line 2
    assert block.transfer.right.right.span.col == 5
    assert param.span.line == 3  # line numbers count physical lines


def test_backslash_continuation_with_crlf_and_trailing_blanks():
    text = "input a, \\  \r\n  b\r\nparam k = 1\r\n"
    inp, param = parse(text)
    assert [n for n, _ in inp.names] == ["a", "b"]
    assert inp.names[1][1] == Span("m.loop", 2, 3, 4)
    assert param.span.line == 3


def test_tabs_and_form_feeds_are_blanks():
    stmt = one("param\ta\t=\t3")
    assert stmt.name == "a" and stmt.value.value == 3
    assert stmt.span.col == 7  # a tab counts as one column


def test_two_statements_on_one_line_are_refused():
    err, _ = parse_error("param a = 1 param b = 2")
    assert err.span.line == 1 and err.span.col == 13


# --- reserved words ------------------------------------------------------------------
# The grammar never takes a statement word or `at`/`in` for a name; `s` and `exp` are
# refused as declared names by the resolver (LW201, tests in test_errors.py).

STATEMENT_WORDS = ["model", "use", "param", "input", "block", "break", "require", "waive"]


def test_the_reserved_words_are_read_from_the_grammar():
    # one list, in the grammar's NAME rule; the parser reads it from there
    from loopwise.language import parse as parse_module
    from loopwise.language import resolve as resolve_module

    assert parse_module.STATEMENT_WORDS == tuple(STATEMENT_WORDS)
    assert parse_module.RESERVED == frozenset(STATEMENT_WORDS) | {"at", "in"}
    assert not hasattr(resolve_module, "RESERVED")


@pytest.mark.parametrize("word", STATEMENT_WORDS)
def test_statement_word_cannot_start_an_equation(word):
    err, _ = parse_error(f"{word} = 3")
    assert isinstance(err, ModelError) and err.code == "LW101"


@pytest.mark.parametrize("text", [
    "param break = 2",       # a statement word as a param name
    "block model = 1/s",
    "in = 3",                # `in` and `at` as signal names
    "at = 3",
    "input at, in",
    "x = break + 1",         # a statement word used as a value
    "break in at y",
    "require use phase_margin >= 45deg",
])
def test_reserved_word_is_never_a_name(text):
    err, out = parse_error(text)
    assert "reserved" in err.message, out
    assert err.hint


@pytest.mark.parametrize("text", [
    "input_x = in_y + at_z",     # words that only start with a keyword
    "param inner = 1",
    "block blocked = 1/s",
    "x = models + used",
])
def test_names_that_contain_a_reserved_word(text):
    assert len(parse(text)) == 1


# --- whole files -------------------------------------------------------------------

def test_demo_models_parse(demo_model):
    model = parse_text(demo_model.read_text("utf-8"), str(demo_model))
    kinds = {type(s) for s in model.statements}
    assert isinstance(model.statements[0], ast.ModelStmt)
    assert model.statements[0].name == demo_model.stem
    assert {ast.EquationStmt, ast.BreakStmt, ast.RequireStmt, ast.BlockStmt} <= kinds


def test_the_sketch_example_parses():
    text = """\
model servo_axis
param Td = 150us           # converter and sampling delay
input pos_ref, load
block Pe = exp(-Td*s) / (Lw*s + Rw)        # converter + winding
cur     = Pe(Ci(cur_err))                  # nested application is allowed
spd     = [kt/(J*s)](cur - load/kt)
pos     = [1/s](spd)
break current  at cur -> cur_err           # cur also drives the mechanics
require speed    separation   >= 4
require *        gain_margin  >= 6dB
"""
    assert len(parse(text)) == 10


def test_syntax_tree_is_immutable():
    stmt = one("param a = 1")
    with pytest.raises(dataclasses.FrozenInstanceError):
        stmt.name = "b"  # type: ignore[misc]


# --- the reference's examples --------------------------------------------------------

DOCS = ROOT / "docs" / "language.md"


def _doc_examples() -> list[str]:
    import re
    return [textwrap.dedent(m.group(1)) for m in
            re.finditer(r"```loop\n(.*?)```", DOCS.read_text("utf-8"), flags=re.S)]


def test_every_example_in_the_language_reference_parses():
    examples = _doc_examples()
    assert len(examples) >= 10
    for example in examples:
        parse_text(example, "docs/language.md")


def test_the_reference_shows_the_servo_demo_as_it_is():
    example = _doc_examples()[-1]
    demo = (MODELS / "servo_axis.loop").read_text("utf-8")
    body = [line for line in demo.split("\n") if line and not line.startswith("#")]
    assert [line for line in example.split("\n") if line] == body
