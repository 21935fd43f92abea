"""Errors and findings that carry a source location.

Finding problems and printing them are separate: the stages raise or collect
these objects, and the reporters (or :func:`render`) turn them into text.
"""
from __future__ import annotations

import functools
import os
import re
from dataclasses import dataclass

__all__ = [
    "Span",
    "LoopwiseError",
    "ModelError",
    "ModelErrors",
    "Finding",
    "render",
    "printable",
    "display_name",
]


#: lone surrogates: the bytes of a file name that were not UTF-8 (PEP 383), or any other
_UNPRINTABLE_NAME = re.compile("[\ud800-\udfff]")


def display_name(file: str) -> str:
    """A file name that can always be printed and written as UTF-8: bytes of the name
    that were not UTF-8 (kept as lone surrogates) shown as U+FFFD. The output
    writer (`loopwise.output`) passes everything it writes through it."""
    return _UNPRINTABLE_NAME.sub("\ufffd", file)


@dataclass(frozen=True)
class Span:
    """Where something stands in a model file (1-based line and column)."""

    file: str
    line: int
    col: int
    end_col: int | None = None

    def __str__(self) -> str:
        return f"{display_name(self.file)}:{self.line}:{self.col}"


NOWHERE = Span("<unknown>", 0, 0)


class LoopwiseError(Exception):
    """Root of every error this package raises on purpose."""


class ModelError(LoopwiseError):
    """A model that cannot be read: the one type `check_text` / `check_file` raise
    for every unreadable model, whether the mistake is in its syntax or its meaning.

    `errors` lists every located error found (each a ModelError with `code`,
    `message`, `span` and `hint`); a single mistake is its own one-item list.
    `code`, `message`, `span` and `hint` are those of the first error.
    """

    def __init__(self, code: str, message: str, span: Span, hint: str | None = None):
        super().__init__(message)
        self.code = code
        self.message = message
        self.span = span
        self.hint = hint

    def __str__(self) -> str:
        return f"{self.span}: {self.code} {self.message}"

    def __reduce__(self):  # pickles across process boundaries with all its fields
        return (type(self), (self.code, self.message, self.span, self.hint))

    @property
    def errors(self) -> list["ModelError"]:
        """Every located error this one stands for: itself alone."""
        return [self]

    @property
    def findings(self) -> tuple["Finding", ...]:
        """Every error as a located Finding (what the reporters render)."""
        return tuple(e.as_finding() for e in self.errors)

    def as_finding(self) -> "Finding":
        """This error as a located `Finding` (severity `error`), for the reporters."""
        return Finding("error", self.code, self.message, self.span, self.hint)


class ModelErrors(ModelError):
    """Several model errors found in one pass (reported together).

    A ModelError like any other (`except ModelError` catches it); the name is
    kept for one release because earlier versions documented `except ModelErrors`.
    """

    def __init__(self, errors: list[ModelError]):
        flat = [leaf for e in errors for leaf in e.errors]
        if not flat:
            raise ValueError("ModelErrors needs at least one error")
        first = flat[0]
        super().__init__(first.code, first.message, first.span, first.hint)
        self._errors = flat

    @property
    def errors(self) -> list[ModelError]:
        """Every located error found, in the order found (causes before follow-ups)."""
        return list(self._errors)

    def __str__(self) -> str:
        more = len(self._errors) - 1
        return super().__str__() + (f" (and {more} more error{'s' if more > 1 else ''})" if more else "")

    def __reduce__(self):
        return (ModelErrors, (self._errors,))


class UsageError(LoopwiseError):
    """A command-line or configuration mistake: reported in one line, exit 2."""


@dataclass(frozen=True)
class Finding:
    """A located error, warning or note.

    `about` names what the finding is about (breaks, signals, blocks), so that
    `waive CODE at NAME` can accept it; `waiver` is the waiver that accepted it
    (a `loopwise.waivers.Waiver`), None while it stands.
    """

    severity: str  # "error" | "warning" | "note"
    code: str
    message: str
    span: Span = NOWHERE
    hint: str | None = None
    about: tuple[str, ...] = ()
    waiver: object | None = None

    @property
    def counts(self) -> bool:
        """Whether this finding counts as a warning for `fail_on_warnings`: the one rule."""
        return self.severity == "warning" and self.waiver is None

    def to_dict(self) -> dict:
        """The finding as the JSON contracts write it (docs/results.md, *finding*)."""
        return {
            "severity": self.severity,
            "code": self.code,
            "file": display_name(self.span.file),
            "line": self.span.line,
            "col": self.span.col,
            "message": self.message,
            "hint": self.hint,
            "about": list(self.about),
            "waived": None if self.waiver is None else self.waiver.to_dict(),
        }


def source_line(span: Span, text: str | None = None) -> str | None:
    """The source line a span points into, read from `text` or the file.

    Lines are split on "\n" only, as the parser counts them (str.splitlines
    would also split on form feeds and other separators). A file is read with
    the language's bounded reader (regular files only, the size limit, UTF-8),
    once for all the findings that point into it.
    """
    if span.line <= 0:
        return None
    if text is None:
        lines = _file_lines(span.file)
    else:
        lines = text.split("\n")
    if lines is None or span.line > len(lines):
        return None
    return lines[span.line - 1].rstrip("\r")


def _file_lines(file: str) -> tuple[str, ...] | None:
    try:
        info = os.stat(file)
    except (OSError, ValueError):
        return None
    return _read_lines(file, info.st_mtime_ns, info.st_size)


@functools.lru_cache(maxsize=8)
def _read_lines(file: str, mtime_ns: int, size: int) -> tuple[str, ...] | None:
    from .language.source import SourceError, read_source  # the one bounded reader

    try:
        return tuple(read_source(file).split("\n"))
    except SourceError:
        return None


#: long lines are shown as a window around the column
_WINDOW = 120

#: what must not reach a terminal or a log as it is: C0 and C1 control characters
#: and DEL (escape sequences clear screens and set window titles), line and
#: paragraph separators, and the bidirectional embedding, override and isolate
#: controls (they reorder what a reader sees)
_UNSAFE = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def printable(text: str, keep: str = "\t") -> str:
    """`text` safe for a terminal: every character of `_UNSAFE` becomes `?`, except
    those in `keep` (a tab by default; pass "\t\n" for text of several lines).
    One character for one, so columns under a caret stay where they were."""
    return _UNSAFE.sub(lambda m: m.group() if m.group() in keep else "?", text)


def render(finding: Finding, text: str | None = None) -> str:
    """`file:line:col: severity CODE message`, the line, a caret, a hint."""
    head = f"{finding.span}: {finding.severity} {finding.code} {finding.message}"
    out = [printable(head)]
    line = source_line(finding.span, text)
    if finding.code == "LW104":
        line = None  # not text: echoing it would only print garbage
    if line is not None:
        # a model's bytes must not drive the terminal
        line = printable(line)
        col = max(finding.span.col, 1)
        width = 1
        if finding.span.end_col and finding.span.end_col > finding.span.col:
            width = finding.span.end_col - finding.span.col
        start = 0
        shown = line
        if len(line) > _WINDOW:
            start = max(0, col - 1 - _WINDOW // 2)
            shown = ("..." if start else "") + line[start:start + _WINDOW] + \
                ("..." if start + _WINDOW < len(line) else "")
        lead_src = line[start:col - 1]
        # keep the source's own tabs before the caret so that it lines up
        lead = ("   " if start else "") + "".join(c if c == "\t" else " " for c in lead_src)
        width = min(width, max(1, _WINDOW - (col - 1 - start)))
        out.append("    " + shown)
        out.append("    " + lead + "^" * width)
    if finding.hint:
        out.append(printable(f"    hint: {finding.hint}"))
    return "\n".join(out)
