"""Reporters: one module per output format, each with `render(run, ...) -> str`.

This package module holds what the formats share: the status words, the table
of per-break figures, the number formats, and the pass/fail tally. It imports
only the standard library (the command line loads it at start-up); plots live
in `report/plots.py`, loaded only by the commands that draw.
"""
from __future__ import annotations

import importlib
import math
import re
from dataclasses import dataclass
from typing import Callable

__all__ = [
    "FORMATS", "render", "is_library", "LIBRARY_NOTE", "break_status", "model_status", "model_passes", "Tally", "tally",
    "BREAK_COLUMNS", "break_row", "unmet_requirements", "requirement_place", "finding_text",
    "fmt_time", "count_met", "printable", "waiver_note", "break_warning_text",
]

#: --format name -> module under loopwise.report
FORMATS = {"text": "text", "json": "json_report", "junit": "junit", "markdown": "markdown"}


def render(run, fmt: str, *, colour: bool = False, fail_on_warnings: bool = False) -> str:
    """The run in one format (`FORMATS`); only the text format knows colour."""
    module = importlib.import_module(f"loopwise.report.{FORMATS[fmt]}")
    if fmt == "text":
        return module.render(run, colour=colour, fail_on_warnings=fail_on_warnings)
    if fmt == "json":
        return module.render(run)
    return module.render(run, fail_on_warnings=fail_on_warnings)


# --- verdicts -----------------------------------------------------------------------

#: the analysis's note for a file of params and blocks only (brought in with `use`)
LIBRARY_NOTE = "LW491"


def is_library(m) -> bool:
    return not m.breaks and any(f.code == LIBRARY_NOTE for f in m.findings)


def break_status(b) -> str:
    """STABLE, UNSTABLE or MARGINAL (a closed-loop pole on the imaginary axis)."""
    if b.marginal:
        return "MARGINAL"
    return "STABLE" if b.stable else "UNSTABLE"


def model_status(m) -> str:
    if is_library(m):
        return "LIBRARY"
    if m.stable:
        return "STABLE"
    return "MARGINAL" if any(b.marginal for b in m.breaks) else "UNSTABLE"


def model_passes(m, fail_on_warnings: bool = False) -> bool:
    """The same rule as the exit status (`loopwise.run.exit_status`), per model: a
    waived warning does not count (`ModelResult.open_warnings`)."""
    return m.ok and not (fail_on_warnings and m.open_warnings)


@dataclass(frozen=True)
class Tally:
    models: int      # models checked (library files not counted)
    passed: int
    failed: int
    unreadable: int
    libraries: int = 0
    waived: int = 0          # warnings and notes accepted by a waiver (shown, not counted)
    run_warnings: int = 0    # warnings about the run itself (a settings waiver that matched nothing)

    def sentence(self) -> str:
        parts = [f"{self.models} model{'s' if self.models != 1 else ''} checked",
                 f"{self.passed} passed", f"{self.failed} failed"]
        if self.unreadable:
            parts.append(f"{self.unreadable} could not be read")
        if self.libraries:
            parts.append(f"{self.libraries} librar{'ies' if self.libraries != 1 else 'y'} "
                         f"for `use` not checked on {'their' if self.libraries != 1 else 'its'} own")
        if self.waived:
            parts.append(f"{self.waived} finding{'s' if self.waived != 1 else ''} waived")
        if self.run_warnings:
            parts.append(f"{self.run_warnings} settings warning{'s' if self.run_warnings != 1 else ''}")
        return ", ".join(parts)


def tally(run, fail_on_warnings: bool = False) -> Tally:
    models = [m for m in run.models if not is_library(m)]
    passed = sum(model_passes(m, fail_on_warnings) for m in models)
    unreadable = len({e.span.file for e in run.errors})
    waived = sum(f.waiver is not None for m in run.models for f in m.every_finding)
    return Tally(len(models), passed, len(models) - passed, unreadable,
                 len(run.models) - len(models), waived, sum(f.counts for f in run.findings))


def count_met(b) -> tuple[int, int]:
    return sum(r.met for r in b.requirements), len(b.requirements)


def unmet_requirements(m) -> list:
    """(break, requirement) for every unmet requirement of a model, in break order."""
    return [(b, r) for b in m.breaks for r in b.requirements if not r.met]


def requirement_place(m, r) -> str:
    """`file:line` of a requirement (a settings requirement names its own file)."""
    return f"{r.file or m.file}:{r.line}"


#: control characters (other than tab and newline) that a model file may hold: a
#: source line echoed under an error must not drive the terminal it is printed on
_CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f]")


def printable(text: str) -> str:
    return _CONTROL.sub("\ufffd", text)


def waiver_note(f) -> str | None:
    """`waived: <reason> (<where the waiver is written>)`, or None for a finding that stands."""
    w = f.waiver
    return None if w is None else f"waived: {w.reason} ({w.span.file}:{w.span.line})"


def break_warning_text(b, w) -> str:
    """A break's warning on one line (it is located at the break's line), marked when waived."""
    note = waiver_note(w)
    return f"break {b.name}: {w.code} {w.message}" + (f" [{note}]" if note else "")


def finding_text(f) -> str:
    """A finding with its line and caret, or a single line when it has no location;
    a waived one ends with its waiver's reason and place."""
    from ..errors import render as render_finding

    if f.span.line > 0:
        text = render_finding(f)
    else:
        text = f"{f.span.file}: {f.severity} {f.code} {f.message}" + (f"\n    hint: {f.hint}" if f.hint else "")
    note = waiver_note(f)
    return printable(text + (f"\n    {note}" if note else ""))


# --- the per-break table ---------------------------------------------------------------

def _finite(x) -> bool:
    return x is not None and math.isfinite(x)


def _margin(b, get: Callable, fmt: str, unbounded: str = "inf") -> str:
    """`-` when margins are not claimed (closed loop not stable); `inf` when unbounded."""
    if b.margins is None:
        return "-"
    value = get(b.margins)
    return format(value, fmt) if _finite(value) else unbounded


def fmt_time(seconds) -> str:
    if not _finite(seconds):
        return "inf"
    for scale, unit in ((1.0, "s"), (1e-3, "ms"), (1e-6, "us")):
        if abs(seconds) >= scale:
            return f"{seconds / scale:.3g} {unit}"
    return f"{seconds / 1e-9:.3g} ns"


def _delay(b) -> str:
    if b.margins is None:
        return "-"
    return fmt_time(b.margins.delay_margin_s)


def _disk(b) -> str:
    if b.margins is None or b.margins.disk_margin is None:
        return "-"
    alpha = b.margins.disk_margin.alpha
    return f"{alpha:.3f}" if _finite(alpha) else "inf"


def _peak(b) -> str:
    if b.margins is None or b.margins.sensitivity_peak is None:
        return "-"
    value = b.margins.sensitivity_peak.value
    return f"{value:.3g}" if _finite(value) else "inf"


def _crossover(b) -> str:
    if b.margins is None:
        return "-"
    w = b.margins.crossover_freq
    return f"{w:.4g}" if _finite(w) else "none"


def _requirements(b) -> str:
    met, total = count_met(b)
    return f"{met}/{total}" if total else "-"


#: (header, cell of a BreakResult, right-aligned?) in table order
BREAK_COLUMNS: tuple[tuple[str, Callable, bool], ...] = (
    ("break", lambda b: b.name, False),
    ("at", lambda b: b.at, False),
    ("verdict", break_status, False),
    ("P", lambda b: str(b.open_loop_rhp_poles), True),
    ("N", lambda b: str(b.encirclements), True),
    ("Z", lambda b: str(b.closed_loop_rhp_poles), True),
    ("PM deg", lambda b: _margin(b, lambda m: m.phase_margin_deg, ".1f"), True),
    ("GM up dB", lambda b: _margin(b, lambda m: m.gain_margin_up_db, ".1f"), True),
    ("GM down dB", lambda b: _margin(b, lambda m: m.gain_margin_down_db, ".1f", "-inf"), True),
    ("delay margin", _delay, True),
    ("disk alpha", _disk, True),
    ("Ms", _peak, True),
    ("crossover rad/s", _crossover, True),
    ("req met", _requirements, True),
)


def break_row(b) -> list[str]:
    return [cell(b) for _, cell, _ in BREAK_COLUMNS]
