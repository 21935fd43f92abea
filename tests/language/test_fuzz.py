"""Property: mutated demo models never make anything but our own errors escape.

The demo models are mutated at random (characters and tokens deleted, inserted
or replaced; lines duplicated, swapped or deleted). Parsing, reading (resolve and
diagram) and a full check may accept the result or refuse it, but only with a
`loopwise.errors.LoopwiseError`: never a RecursionError, a lark exception, a
numpy error or any other traceback (RULES.md rule 6).
"""
from __future__ import annotations

import re

from hypothesis import HealthCheck, given, settings, strategies as st

from loopwise.errors import LoopwiseError, ModelError, ModelErrors
from loopwise.language.parse import parse_text

from .conftest import DEMO_MODELS, MODELS

TEXTS = {p.name: p.read_text("utf-8") for p in DEMO_MODELS}

CHARS = list("()[]+-*/^=,<>#\"\\ \t\n.%_0123456789eEsx") + ["\r", "\x00", "\ufffd", "\u00e9", "\f"]
TOKENS = [
    "model", "use", "param", "input", "block", "break", "require", "at", "in", "->", "exp",
    "s", "*", "/", "^", "-", "(", ")", "[", "]", ",", "=", ">=", "<", "1e400", "1e-400", "0",
    "0.5s", "3 ms", "2min", "150us", "6dB", "45deg", "1kHz", "10%", "nan", "inf", "\\\n",
    "#", '"', 'use "common/conveyor_drive.loop"', 'use "nowhere.loop"', "exp(+1*s)",
    "exp(-1*s)", "s^99", "1/s", "y", "err", "*", "gain_margin", "phase_margin", "separation",
]
TOKEN = re.compile(r"[A-Za-z_]\w*|\d+(\.\d*)?([eE][+-]?\d+)?\w*|->|>=|<=|\S")


def _mutate(text: str, kind: str, where: float, piece: str) -> str:
    if kind in ("delete_char", "insert_char", "replace_char"):
        i = int(where * len(text))
        if kind == "delete_char":
            return text[:i] + text[i + 1:]
        if kind == "insert_char":
            return text[:i] + piece + text[i:]
        return text[:i] + piece + text[i + 1:]
    if kind in ("delete_token", "insert_token", "replace_token"):
        spans = [m.span() for m in TOKEN.finditer(text)]
        if not spans:
            return text + piece
        a, b = spans[min(int(where * len(spans)), len(spans) - 1)]
        if kind == "delete_token":
            return text[:a] + text[b:]
        if kind == "insert_token":
            return text[:a] + piece + " " + text[a:]
        return text[:a] + piece + text[b:]
    lines = text.split("\n")
    i = min(int(where * len(lines)), len(lines) - 1)
    if kind == "duplicate_line":
        lines.insert(i, lines[i])
    elif kind == "delete_line":
        del lines[i]
    else:  # swap_lines
        j = (i + 1 + int(where * 7)) % len(lines)
        lines[i], lines[j] = lines[j], lines[i]
    return "\n".join(lines)


CHAR_KINDS = ["delete_char", "insert_char", "replace_char"]
TOKEN_KINDS = ["delete_token", "insert_token", "replace_token"]
LINE_KINDS = ["duplicate_line", "delete_line", "swap_lines"]


@st.composite
def mutation(draw):
    kind = draw(st.sampled_from(CHAR_KINDS + TOKEN_KINDS + LINE_KINDS))
    where = draw(st.floats(min_value=0.0, max_value=1.0, exclude_max=True))
    piece = draw(st.sampled_from(CHARS if kind in CHAR_KINDS else TOKENS))
    return kind, where, piece


@st.composite
def mutated_model(draw, names=tuple(sorted(TEXTS))):
    name = draw(st.sampled_from(names))
    text = TEXTS[name]
    for kind, where, piece in draw(st.lists(mutation(), min_size=1, max_size=4)):
        text = _mutate(text, kind, where, piece)
    return name, text


def _only_our_errors(call):
    try:
        return call()
    except (ModelError, ModelErrors) as err:
        errors = err.errors if isinstance(err, ModelErrors) else [err]
        assert errors, "ModelErrors without errors"
        for e in errors:
            assert e.span.line >= 0 and e.code and e.message
        return None
    except LoopwiseError:
        return None


FUZZ = settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FUZZ
@given(mutated_model())
def test_parsing_a_mutated_model_raises_only_model_errors(case):
    name, text = case
    _only_our_errors(lambda: parse_text(text, str(MODELS / name)))


@FUZZ
@given(mutated_model())
def test_reading_a_mutated_model_raises_only_model_errors(case):
    # parse, resolve names and includes, evaluate transfers, build the diagram
    from loopwise.testing import prepare_text
    name, text = case
    _only_our_errors(lambda: prepare_text(text, str(MODELS / name)))


# The full check runs the engine; the two cheapest demo models keep this in seconds.
@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated_model(names=("levitation_rig.loop", "double_integrator.loop")))
def test_checking_a_mutated_model_raises_only_model_errors(case):
    from loopwise.analysis import check_text
    name, text = case
    _only_our_errors(lambda: check_text(text, str(MODELS / name)))


def test_mutations_change_the_text():
    text = TEXTS["servo_axis.loop"]
    for kind in CHAR_KINDS + TOKEN_KINDS + LINE_KINDS:
        assert _mutate(text, kind, 0.37, "@@") != text, kind


# --- layout never changes meaning ------------------------------------------------

def _shape(node):
    """A node as nested tuples without its positions (what the model means)."""
    import dataclasses
    from loopwise.errors import Span
    if isinstance(node, tuple):
        return tuple(_shape(n) for n in node if not isinstance(n, Span))
    if dataclasses.is_dataclass(node) and not isinstance(node, Span):
        return (type(node).__name__,) + tuple(
            _shape(getattr(node, f.name)) for f in dataclasses.fields(node)
            if not isinstance(getattr(node, f.name), Span) and f.name != "path")
    return node


def _relayout(text: str, kind: str, where: float) -> str:
    end = "\r\n" if "\r\n" in text else "\n"
    lines = [line.rstrip("\r") for line in text.split("\n")]
    i = min(int(where * len(lines)), len(lines) - 1)
    if kind == "blank_line":
        lines.insert(i, "   ")
    elif kind == "comment_line":
        lines.insert(i, "# an added comment: ( [ = * -> 3 ms")
    elif kind == "trailing_comment":
        if lines[i].strip() and not lines[i].rstrip().endswith("\\"):
            lines[i] += "   # added"
    elif kind == "indent":
        lines[i] = "\t  " + lines[i]
    elif kind == "crlf":
        end = "\r\n"
    return end.join(lines)


@settings(max_examples=100, deadline=None)
@given(st.sampled_from(sorted(TEXTS)),
       st.lists(st.tuples(st.sampled_from(["blank_line", "comment_line", "trailing_comment",
                                           "indent", "crlf"]),
                          st.floats(min_value=0.0, max_value=1.0, exclude_max=True)),
                min_size=1, max_size=5))
def test_layout_changes_do_not_change_the_model(name, edits):
    text = TEXTS[name]
    changed = text
    for kind, where in edits:
        changed = _relayout(changed, kind, where)
    assert _shape(parse_text(changed, name).statements) == _shape(parse_text(text, name).statements)
