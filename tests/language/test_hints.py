"""The one "did you mean" rule (language/hints.py) and the hints for common slips:
misspelt statement words, `e^(-T*s)` for a delay, `5e-3 s` for a time.

Each slip is checked by its exact code, place and hint text.
"""
from __future__ import annotations

import pytest

from loopwise.errors import ModelError, ModelErrors, render
from loopwise.language import hints
from loopwise.language.hints import MAX_COMPARED, MAX_SEARCHES, closest, did_you_mean, edit_distance
from loopwise.language.parse import STATEMENT_WORDS, parse_text
from loopwise.language.resolve import resolve_text

from .conftest import assert_rendered, parse_error, resolve_errors


# --- the rule -------------------------------------------------------------------------------

@pytest.mark.parametrize("a, b, distance", [
    ("block", "block", 0), ("blok", "block", 1), ("brake", "break", 2), ("requires", "require", 1),
    ("ab", "ba", 1),                      # neighbours swapped: one edit
    ("kitten", "sitting", 3),             # 3 > limit 2: reported as limit + 1
    ("", "ab", 2), ("spd_err", "spd_err_x", 2),
])
def test_edit_distance(a, b, distance):
    # optimal string alignment distance, worked by hand for each pair
    assert edit_distance(a, b, 2) == min(distance, 3)


@pytest.mark.parametrize("name, options, expected", [
    ("ee", ["e", "r", "y"], "e"),               # 2 characters: one edit
    ("er", ["err", "e"], "err"),                # both one edit away: the one listed first
    ("er", ["e", "err"], "e"),
    ("q", ["e", "y", "x0"], None),              # 1 character: only a case difference counts
    ("E", ["e", "y"], "e"),
    ("Kp", ["Kd", "kp"], "kp"),                 # case only beats a changed letter
    ("brake", ["model", "use", "param", "input", "block", "break", "require"], "break"),
    ("delay_margn", ["phase_margin", "delay_margin"], "delay_margin"),
    ("spd", ["spd_err"], None),                 # four edits: too far
    ("x" * 41, ["x" * 40], None),               # names over 40 characters get no hint
])
def test_closest(name, options, expected):
    assert closest(name, options) == expected


def test_did_you_mean_text():
    assert did_you_mean("blok", STATEMENT_WORDS) == "did you mean `block`?"
    assert did_you_mean("zzz", STATEMENT_WORDS) is None


def test_a_search_compares_a_bounded_number_of_names(monkeypatch):
    calls = []
    real = hints.edit_distance
    monkeypatch.setattr(hints, "edit_distance", lambda a, b, k: calls.append(1) or real(a, b, k))
    assert closest("q12", [f"x{i}" for i in range(20000)]) == "x12"
    assert len(calls) <= 2 * MAX_COMPARED


def test_hints_for_thousands_of_unknown_names_are_bounded(monkeypatch):
    # regression: 5,000 lines of `x = q` took 44 s (difflib against every known name,
    # once per line); the searches per model are now bounded
    calls = []
    real = hints.edit_distance
    monkeypatch.setattr(hints, "edit_distance", lambda a, b, k: calls.append(1) or real(a, b, k))
    text = "".join(f"x{i} = q{i}\n" for i in range(5000))
    with pytest.raises(ModelErrors) as info:
        resolve_text(text, "m.loop")
    errs = info.value.errors
    assert len(errs) == 5000 and {e.code for e in errs} == {"LW218"}
    assert errs[0].hint == "did you mean `x0`?"  # the first ones still get the search
    assert errs[-1].hint.startswith("define it: `q4999 = ...`")
    assert len(calls) <= MAX_SEARCHES * 2 * MAX_COMPARED


# --- misspelt statement words --------------------------------------------------------------

@pytest.mark.parametrize("text, word, meant", [
    ("blok B = 1/(s+1)", "blok", "block"),
    ("brake b at y", "brake", "break"),
    ("requires * gain_margin >= 6dB", "requires", "require"),
    ("  modle m", "modle", "model"),
    ('usee "common/a.loop"', "usee", "use"),
    ("imput r, d", "imput", "input"),
])
def test_misspelt_statement_word(text, word, meant):
    # regression: "unexpected name; expected `=`" with no "did you mean"
    err, out = parse_error(text)
    col = text.index(word) + 1
    assert (err.code, err.span.line, err.span.col, err.span.end_col) == ("LW101", 1, col, col + len(word))
    assert err.message == f"unknown statement `{word}`"
    assert err.hint == f"did you mean `{meant}`?"
    assert_rendered(err, text)


def test_a_name_far_from_every_statement_word_keeps_the_grammar_hint():
    err, _ = parse_error("x y = 3")
    assert (err.code, err.message, err.hint) == ("LW101", "unexpected name `y`", "expected `=`")


# --- `e^(-T*s)` for a delay ------------------------------------------------------------------

def test_power_of_e_points_to_the_delay_form():
    # regression: "unknown param `e`" with no word about exp(-T*s)
    text = "param Td = 5ms\ninput r\nblock D = e^(-Td*s)/(s+1)\ny = D(r)\n"
    err = resolve_errors(text)[0]  # then LW228 for the block that could not be evaluated
    assert (err.code, err.span.line, err.span.col) == ("LW218", 3, 11)
    assert err.message == "unknown param `e`: a delay is not written as a power of `e`"
    assert err.hint == "write a pure delay as `exp(-Td*s)` (T >= 0 in seconds)"
    assert_rendered(err, text)


def test_power_of_e_with_a_literal_time():
    err = resolve_errors("input r\nblock D = e^(-150us*s)\ny = D(r)\n")[0]
    assert err.hint == "write a pure delay as `exp(-150us*s)` (T >= 0 in seconds)"


def test_power_of_e_in_a_constant():
    (err,) = resolve_errors("param k = e^2\n")
    assert err.code == "LW218" and err.message == "unknown param `e`: the language has no constant `e`"
    assert "exp(-T*s)" in err.hint


def test_a_declared_e_is_an_ordinary_param():
    m = resolve_text("param e = 2\nparam k = e^3\n", "m.loop")
    assert m.params["k"].value == 8.0


# --- `5e-3 s` for a time ------------------------------------------------------------------------

@pytest.mark.parametrize("text, col, width, hint", [
    ("param Td = 5e-3 s", 17, 1, "plain numbers are seconds: write `5e-3` or `5ms`"),
    ("param Td = 5e-3s", 12, 5, "plain numbers are seconds: write `5e-3` or `5ms`"),
    ("param T = 2 s", 13, 1, "plain numbers are seconds: write `2`"),
    ("require b delay_margin >= 0.5 s", 31, 1, "plain numbers are seconds: write `0.5` or `500ms`"),
    ("param Tf = 20e-6s", 12, 6, "plain numbers are seconds: write `20e-6` or `20us`"),
])
def test_seconds_written_with_an_s(text, col, width, hint):
    # regression: `param Td = 5e-3 s` suggested `3*s`
    err, out = parse_error(text)
    assert (err.code, err.span.col, err.message, err.hint) == ("LW103", col, "there is no unit `s`", hint), out
    assert out.split("\n")[2].count("^") == width


def test_in_a_transfer_the_s_is_a_missing_product():
    err, _ = parse_error("block B = 5e-3 s")
    assert (err.code, err.message) == ("LW102", "missing operator before `s`")
    assert err.hint == "multiplication is always written with `*`: `5e-3*s`"  # the whole number


# --- one helper everywhere ------------------------------------------------------------------------

def test_break_and_requirement_hints_use_the_same_rule():
    from loopwise.testing import prepare_text

    text = "input r\nblock G = 1/(s+1)\ne = r - y\ny = G(e)\nbreak b at yy\nrequire b delay_margn >= 1ms\n"
    with pytest.raises((ModelError, ModelErrors)) as info:
        prepare_text(text, "m.loop")
    errs = info.value.errors if isinstance(info.value, ModelErrors) else [info.value]
    assert [(e.code, e.hint) for e in errs] == [("LW243", "did you mean `delay_margin`?")]
    text = text.replace("delay_margn", "delay_margin")
    with pytest.raises((ModelError, ModelErrors)) as info:
        prepare_text(text, "m.loop")
    errs = info.value.errors if isinstance(info.value, ModelErrors) else [info.value]
    assert [(e.code, e.hint) for e in errs] == [("LW306", "did you mean `y`?")]


def test_no_close_name_helper_is_left_elsewhere():
    from pathlib import Path

    src = Path(__file__).resolve().parents[2] / "src" / "loopwise"
    users = [p.relative_to(src).as_posix() for p in src.rglob("*.py") if "difflib" in p.read_text("utf-8")]
    assert users == [], users
