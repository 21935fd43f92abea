"""Nyquist, Bode and sensitivity views of one break, drawn from the engine's samples.

This package is the only part of loopwise that imports matplotlib, and only
inside functions (the CLI starts without it). Figures are built with
`matplotlib.figure.Figure` directly, never through the global pyplot state, so
nothing opens a window and the same code serves files (svg, png, pdf) and the
inline SVG of the HTML report. Every function returns the Figure, its lines
already thinned to what a page shows, so tests can read the drawn data back.

Look (our own, see docs/plots.md): ink-blue curve for positive frequencies, the
same hue lighter and dashed for the mirror half, orange-brown circles for gain
crossovers, violet diamonds for phase crossovers, a black filled plus for -1.
Hues differ in lightness as well, and every item also differs in line style or
marker shape, so the views read in grey print and for colour-blind readers.
"""
from __future__ import annotations

import io
import re
from pathlib import Path

from ...results import BreakResult
from .bode import bode_figure, sensitivity_figure
from .common import INK, style
from .nyquist import nyquist_figure

__all__ = ["KINDS", "SUFFIXES", "INK", "nyquist_figure", "bode_figure", "sensitivity_figure",
           "make_figure", "save_figure", "svg_text"]

KINDS = ("nyquist", "bode", "sensitivity")
SUFFIXES = (".svg", ".png", ".pdf")

_MAKERS = {"nyquist": nyquist_figure, "bode": bode_figure, "sensitivity": sensitivity_figure}


def make_figure(result: BreakResult, kind: str, *, model: str | None = None, hz: bool = False):
    """One view of a break (`kind`: nyquist, bode or sensitivity) as a matplotlib figure,
    drawn from the samples the check recorded; `model` names it in the title, `hz`
    puts frequency axes in Hz."""
    return _MAKERS[kind](result, model=model, hz=hz)


def save_figure(fig, path: str | Path, salt: str = "loopwise") -> None:
    """Write svg, png or pdf by suffix; no dates in the file, so reruns give the same bytes."""
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    if fmt == "svg":
        path.write_text(_svg(fig, salt), encoding="utf-8")
        return
    meta = {"pdf": {"CreationDate": None}, "png": {}}[fmt]
    with style(salt):
        fig.savefig(path, format=fmt, metadata=meta, dpi=150)


def svg_text(fig, salt: str = "loopwise") -> str:
    """The figure as an <svg> element to inline in HTML (no XML prolog or doctype)."""
    text = _svg(fig, salt)
    return text[text.index("<svg"):]


_LONG_NUMBER = re.compile(r"-?\d+\.\d{3,}")
_GEOMETRY = re.compile(r'( (?:d|x|y|x1|x2|y1|y2|width|height|transform|points)=")([^"]*)"')


def _short(match) -> str:
    return f"{float(match.group()):.2f}".rstrip("0").rstrip(".")


def _svg(fig, salt: str) -> str:
    """The whole SVG file; coordinates to 0.01 pt (matplotlib writes 6 decimals,
    a third of the bytes; text and colours are left as they are)."""
    buf = io.StringIO()
    with style(salt):
        fig.savefig(buf, format="svg", metadata={"Date": None})
    return _GEOMETRY.sub(lambda m: m.group(1) + _LONG_NUMBER.sub(_short, m.group(2)) + '"',
                         buf.getvalue())
