"""Shared helpers for the language tests: parse a snippet, render its error."""
from __future__ import annotations

from pathlib import Path

import pytest

from loopwise.errors import ModelError, render
from loopwise.language.parse import parse_text
from loopwise.language.resolve import resolve_text

ROOT = Path(__file__).resolve().parents[2]
MODELS = ROOT / "models"
#: the demo models (files under models/common are includes, not models)
DEMO_MODELS = sorted(MODELS.glob("*.loop"))
#: every .loop file shipped in models/, includes too
ALL_LOOP_FILES = sorted(MODELS.rglob("*.loop"))


def parse(text: str, file: str = "m.loop"):
    """The statements of a snippet."""
    return parse_text(text, file).statements


def one(text: str):
    """The single statement of a one-line snippet."""
    statements = parse(text)
    assert len(statements) == 1, statements
    return statements[0]


def rhs(text: str):
    """The expression on the right of a one-line `x = ...` equation."""
    return one(text).value


def parse_error(text: str, file: str = "m.loop") -> tuple[ModelError, str]:
    """The ModelError a snippet raises, and its rendered text."""
    with pytest.raises(ModelError) as info:
        parse_text(text, file)
    err = info.value
    return err, render(err.as_finding(), text)


def resolve_errors(text: str, file: str = "m.loop") -> list[ModelError]:
    """Every located error that resolving a snippet raises (it must raise one)."""
    with pytest.raises(ModelError) as info:
        resolve_text(text, file)
    return list(info.value.errors)


def assert_rendered(err: ModelError, text: str, *, file: str = "m.loop") -> list[str]:
    """The rendered error has file:line:col, the source line, a caret and a hint.

    Returns the rendered lines: [head, source line, caret line, hint line].
    """
    out = render(err.as_finding(), text).split("\n")
    span = err.span
    assert out[0].startswith(f"{file}:{span.line}:{span.col}: error {err.code} "), out
    assert span.line >= 1 and span.col >= 1, span
    source = text.split("\n")[span.line - 1].rstrip("\r")
    assert out[1] == "    " + source, out
    caret = out[2]
    assert caret.startswith("    ") and caret.strip().startswith("^"), out
    assert caret.index("^") == 4 + span.col - 1, (caret, span)
    assert len(out) == 4 and out[3].startswith("    hint: ") and len(out[3]) > 14, out
    return out


@pytest.fixture(params=DEMO_MODELS, ids=[p.name for p in DEMO_MODELS])
def demo_model(request) -> Path:
    return request.param
