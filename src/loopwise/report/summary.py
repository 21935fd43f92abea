"""The per-model summary every format renders: one object per model with its
verdict in words, the per-break table, the requirements, what would stabilise an
unstable loop, and the warnings and notes to show.

Text, Markdown, JUnit, HTML and SARIF are written from a `ModelSummary`, so they
cannot drift apart: a sentence said in one (the stabilising gain range, "closed
loop unstable: no margins") is said in all. JSON is the data contract itself
(`RunResult.to_dict`). Strings here are raw; each format makes them safe with
its own helper (`loopwise.report.escape`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from ..language.units import to_si
from ..results import LIBRARY_NOTE, is_library
from .numbers import finite, fmt_quantity, fmt_time

__all__ = [
    "LIBRARY_NOTE", "LIBRARY_WORDS", "is_library", "break_status", "model_status", "model_passes", "run_warnings_fail",
    "run_warnings_words", "Tally", "tally",
    "count_met", "requirement_place", "requirement_text", "finding_text", "waiver_note",
    "BREAK_COLUMNS", "break_row", "Note", "RequirementLine", "BreakSummary", "ModelSummary",
    "summarise", "stabilising_text", "GM_DOWN_HEAD",
]

# --- verdicts ---------------------------------------------------------------------------

#: what every format says of a library (`results.is_library`), for check and sweep alike
LIBRARY_WORDS = "library of params and blocks for `use`: nothing to check on its own"


def break_status(b) -> str:
    """STABLE, UNSTABLE or MARGINAL (a closed-loop pole on the imaginary axis)."""
    if b.marginal:
        return "MARGINAL"
    return "STABLE" if b.stable else "UNSTABLE"


def model_status(m) -> str:
    """A model's verdict word: LIBRARY, STABLE, MARGINAL (a closed-loop pole on the
    imaginary axis) or UNSTABLE."""
    if is_library(m):
        return "LIBRARY"
    if m.stable:
        return "STABLE"
    return "MARGINAL" if any(b.marginal for b in m.breaks) else "UNSTABLE"


def model_passes(m, fail_on_warnings: bool = False) -> bool:
    """The same rule as the exit status (`loopwise.run.exit_status`), per model: a
    waived warning does not count (`ModelResult.open_warnings`, `Finding.counts`)."""
    return m.ok and not (fail_on_warnings and m.open_warnings)


def run_warnings_fail(run, fail_on_warnings: bool = False) -> bool:
    """Whether the run's own warnings (a settings waiver that matched nothing) fail it:
    with fail_on_warnings, one that counts (`Finding.counts`). The exit rules of check
    and sweep apply the same test, so every format's overall verdict says it too."""
    return fail_on_warnings and any(f.counts for f in run.findings)


def run_warnings_words(count: int, fail: bool) -> str:
    """`1 settings warning`, and when they fail the run (`run_warnings_fail`), that too."""
    words = f"{count} settings warning{'s' if count != 1 else ''}"
    return words + (" (fail_on_warnings: the run fails)" if fail else "")


@dataclass(frozen=True)
class Tally:
    """A check run in numbers, and whether it passes as its exit code says."""

    models: int      # models checked (library files not counted)
    passed: int
    failed: int
    unreadable: int
    libraries: int = 0
    waived: int = 0          # warnings and notes accepted by a waiver (shown, not counted)
    run_warnings: int = 0    # warnings about the run itself (a settings waiver that matched nothing)
    run_fails: bool = False  # those warnings fail the run (`run_warnings_fail`)

    @property
    def passes(self) -> bool:
        """The run passes (exit code 0): every model passes, all were read, and no
        warning about the run itself fails it."""
        return not (self.failed or self.unreadable or self.run_fails)

    def sentence(self) -> str:
        """`7 models checked, 6 passed, 1 failed, ...`: the run in one sentence."""
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
            parts.append(run_warnings_words(self.run_warnings, self.run_fails))
        return ", ".join(parts)


def tally(run, fail_on_warnings: bool = False) -> Tally:
    """The `Tally` of a check's `RunResult` under the same rules as its exit code."""
    models = [m for m in run.models if not is_library(m)]
    passed = sum(model_passes(m, fail_on_warnings) for m in models)
    unreadable = len({e.span.file for e in run.errors})
    waived = sum(f.waiver is not None for m in run.models for f in m.every_finding)
    return Tally(len(models), passed, len(models) - passed, unreadable,
                 len(run.models) - len(models), waived, sum(f.counts for f in run.findings),
                 run_warnings_fail(run, fail_on_warnings))


def count_met(b) -> tuple[int, int]:
    """(requirements met, requirements) of a break."""
    return sum(r.met for r in b.requirements), len(b.requirements)


# --- requirements and findings in words ----------------------------------------------------

def requirement_place(m, r) -> str:
    """`file:line` of a requirement (a settings requirement names its own file)."""
    return f"{r.file or m.file}:{r.line}"


def requirement_text(r) -> str:
    """`phase_margin >= 45deg (value 38.2 deg)`: the limit as the model wrote it, the
    value in the metric's unit (times in natural units), a frequency in the unit of a
    limit written in Hz or kHz (`crossover >= 0.5Hz (value 0.0459 Hz)`)."""
    limit = getattr(r, "limit_text", "") or fmt_quantity(r.limit, r.unit)
    value = fmt_quantity(r.value, r.unit)
    if r.unit == "rad/s" and r.value is not None and math.isfinite(r.value):
        for suffix in ("kHz", "Hz"):  # the language's own frequency units (language/units.py)
            if limit.endswith(suffix):
                value = fmt_quantity(r.value / to_si(1.0, suffix), suffix)
                break
    return f"{r.metric} {r.op} {limit} (value {value})"


def waiver_note(f) -> str | None:
    """`waived: <reason> (<where the waiver is written>)` for a finding a waiver
    accepted, None for one that stands. The one place the reporters learn of
    waivers: every format shows this note beside the finding."""
    w = getattr(f, "waiver", None)
    return None if w is None else f"waived: {w.reason} ({w.span.file}:{w.span.line})"


def finding_text(f) -> str:
    """A finding with its line and caret (lines made terminal-safe by
    `loopwise.errors.render`), or a single line when it has no location."""
    from ..errors import printable, render as render_finding

    if f.span.line > 0:
        text = render_finding(f)
    else:
        text = printable(f"{f.span.file}: {f.severity} {f.code} {f.message}")
        if f.hint:
            text += "\n" + printable(f"    hint: {f.hint}")
    note = waiver_note(f)
    return text + ("\n" + printable(f"    {note}") if note else "")


def stabilising_text(b) -> str | None:
    """For an unstable break: the factors k for which k L would be stable, in words."""
    if b.stable or not b.stabilising_gains:
        return None
    ranges = ", ".join(f"[{lo:.3g}, {hi if hi is not None else math.inf:.3g}]"
                       for lo, hi in b.stabilising_gains)
    return f"the closed loop would be stable with L scaled by a factor in {ranges}"


# --- the per-break table ---------------------------------------------------------------

def _margin(b, get: Callable, fmt: str, unbounded: str = "inf") -> str:
    """`-` when margins are not claimed (closed loop not stable); `inf` when unbounded."""
    if b.margins is None:
        return "-"
    value = get(b.margins)
    return format(value, fmt) if finite(value) else unbounded


def _delay(b) -> str:
    # no gain crossover: no added delay brings L to -1, unbounded like the phase margin
    # (it read "none", as if there were no margin at all)
    if b.margins is None:
        return "-"
    value = b.margins.delay_margin_s
    return "inf" if value is None else fmt_time(value)


def _disk(b) -> str:
    if b.margins is None or b.margins.disk_margin is None:
        return "-"
    alpha = b.margins.disk_margin.alpha
    return f"{alpha:.3f}" if finite(alpha) else "inf"


def _peak(b) -> str:
    if b.margins is None or b.margins.sensitivity_peak is None:
        return "-"
    value = b.margins.sensitivity_peak.value
    return f"{value:.3g}" if finite(value) else "inf"


def _crossover(b) -> str:
    if b.margins is None:
        return "-"
    w = b.margins.crossover_freq
    return f"{w:.4g}" if finite(w) else "none"


def _requirements(b) -> str:
    met, total = count_met(b)
    return f"{met}/{total}" if total else "-"


#: the gain margin down is a negative dB figure (a factor below 1), while its
#: requirement `gain_margin_down >= 6dB` takes the size of the decrease; the head says so
GM_DOWN_HEAD = "GM down dB (<0)"

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
    (GM_DOWN_HEAD, lambda b: _margin(b, lambda m: m.gain_margin_down_db, ".1f", "-inf"), True),
    ("delay margin", _delay, True),
    ("disk alpha", _disk, True),
    ("Ms", _peak, True),
    ("crossover rad/s", _crossover, True),
    ("req met", _requirements, True),
)


def break_row(b) -> list[str]:
    """A break's cells of the table, in `BREAK_COLUMNS` order, as every format shows them."""
    return [cell(b) for _, cell, _ in BREAK_COLUMNS]


# --- the summary ------------------------------------------------------------------------

@dataclass(frozen=True)
class Note:
    """A warning or note to show: a break's (located at its `break` line) or the model's."""

    finding: object              # loopwise.errors.Finding
    break_name: str | None       # the break it is about, None for a model finding
    waived: str | None = None    # `waiver_note`: set when a waiver accepted the finding

    @property
    def line(self) -> str:
        """The note on one line: `break b: LW481 message`, `LW281 message`."""
        f = self.finding
        head = f"break {self.break_name}: " if self.break_name is not None else ""
        return f"{head}{f.code} {f.message}" + (f" [{self.waived}]" if self.waived else "")

    @property
    def text(self) -> str:
        """With its location, source line and caret where it has one (model findings)."""
        if self.break_name is not None:
            return self.line
        return finding_text(self.finding)

    @property
    def logged(self) -> str:
        """As a log shows it, its severity always said: a break's on one line after its
        severity (`warning: break b: LW383 ...`), a model's as `text` (`file:line:col:
        warning LW281 ...`, the source line, a caret)."""
        if self.break_name is not None:
            return f"{self.finding.severity}: {self.line}"
        return self.text


@dataclass(frozen=True)
class RequirementLine:
    """One requirement of a model as the formats list it: its break, where it is written,
    the requirement with its value in words, and whether it is met."""

    break_name: str
    place: str          # file:line of the `require` statement (or the settings file)
    text: str           # `requirement_text`, with the reason when it has no value
    met: bool
    result: object      # loopwise.results.RequirementResult


@dataclass(frozen=True)
class BreakSummary:
    """One break as the formats show it: its verdict word, its table cells, how many of its
    requirements are met, and what would stabilise it when it is unstable."""

    name: str
    at: str
    line: int
    status: str                 # STABLE | UNSTABLE | MARGINAL
    cells: tuple[str, ...]      # BREAK_COLUMNS order
    met: int
    total: int
    stabilising: str | None     # `stabilising_text`
    result: object              # loopwise.results.BreakResult


@dataclass(frozen=True)
class ModelSummary:
    """One model as every format shows it (`summarise`): its verdict in words, whether it
    passes, its breaks, requirements and the warnings and notes to show."""

    file: str
    model: str
    status: str                 # STABLE | UNSTABLE | MARGINAL | LIBRARY
    passes: bool
    detail: str                 # the verdict in words
    met: int
    total: int
    breaks: tuple[BreakSummary, ...]
    requirements: tuple[RequirementLine, ...]
    notes: tuple[Note, ...]     # break warnings, then the model's findings (library note left out)
    result: object              # loopwise.results.ModelResult

    @property
    def verdict(self) -> str:
        """PASS or FAIL, by the exit rule (`model_passes`)."""
        return "PASS" if self.passes else "FAIL"

    @property
    def is_library(self) -> bool:
        """Whether the model is a library of params and blocks (nothing to check on its own)."""
        return self.status == "LIBRARY"

    @property
    def unmet(self) -> tuple[RequirementLine, ...]:
        """The requirements that are not met."""
        return tuple(r for r in self.requirements if not r.met)

    @property
    def requirements_words(self) -> str:
        """`requirements 4/5 met`, or `no requirements`."""
        return f"requirements {self.met}/{self.total} met" if self.total else "no requirements"

    @property
    def stabilising(self) -> tuple[tuple[str, str], ...]:
        """(break, sentence) for every unstable break with a stabilising range."""
        return tuple((b.name, b.stabilising) for b in self.breaks if b.stabilising)


def _detail(m, status: str) -> str:
    if status == "LIBRARY":
        return LIBRARY_WORDS
    if status == "STABLE":
        return "no closed-loop poles in the right half plane"
    if status == "MARGINAL":
        freqs = sorted({b.marginal_freq for b in m.breaks if b.marginal and b.marginal_freq is not None})
        where = f" at {freqs[0]:.4g} rad/s" if freqs else ""
        return f"a closed-loop pole on the imaginary axis{where}"
    return f"{m.closed_loop_rhp_poles} closed-loop pole(s) in the right half plane"


def _requirement_line(m, b, r) -> RequirementLine:
    note = f" - {r.note}" if r.note else ""
    return RequirementLine(b.name, requirement_place(m, r), requirement_text(r) + note, bool(r.met), r)


def summarise(m, fail_on_warnings: bool = False) -> ModelSummary:
    """The summary of one `ModelResult`, as every format shows it."""
    status = model_status(m)
    breaks = tuple(BreakSummary(b.name, b.at, b.line, break_status(b), tuple(break_row(b)),
                                *count_met(b), stabilising_text(b), b) for b in m.breaks)
    requirements = tuple(_requirement_line(m, b, r) for b in m.breaks for r in b.requirements)
    notes = [Note(w, b.name, waiver_note(w)) for b in m.breaks for w in b.warnings]
    notes += [Note(f, None, waiver_note(f)) for f in m.findings if f.code != LIBRARY_NOTE]
    return ModelSummary(m.file, m.model, status, model_passes(m, fail_on_warnings), _detail(m, status),
                        sum(b.met for b in breaks), sum(b.total for b in breaks), breaks,
                        requirements, tuple(notes), m)
