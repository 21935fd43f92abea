"""What every format of `loopwise sweep` says, in words: the verdict over the box, what
was sampled (and that it is evidence, not a proof), per break the worst margins and
where, unmet requirements and where stability is lost.

The sweep's counterpart of `report.summary` (whose helpers it uses for requirements
and findings): text, Markdown, JUnit, HTML and SARIF are written from these words, so
they cannot drift apart. Strings here are raw; each format makes them safe with its
own helper (`loopwise.report.escape`).
"""
from __future__ import annotations

import math

from ..sweep.results import format_at
from .numbers import fmt_time
from ..results import LIBRARY_NOTE, is_library
from .summary import (LIBRARY_WORDS, requirement_place, requirement_text, run_warnings_fail,
                      run_warnings_words)

__all__ = ["EVIDENCE", "WORST_HEADER", "format_at", "worst_value", "worst_rows", "verdict_words",
           "evidence_words", "params_words", "requirement_words", "boundary_words", "break_state",
           "unstable_where", "unstable_words", "shown_findings", "unmet", "Tally", "tally", "verdict"]

EVIDENCE = "sampled evidence, not a proof: a plant between the samples may be worse"

#: the columns of the worst-margin table of a break
WORST_HEADER = ("margin", "nominal", "worst", "where (param values)")

#: (JSON key) -> (label, format of a finite value); the gain margin down is a negative dB
#: figure, marked (<0) as in check's table (`summary.GM_DOWN_HEAD`), while its requirement
#: `gain_margin_down >= 6dB` takes the size of the decrease
_LABELS = {
    "phase_margin_deg": ("phase margin", lambda v: f"{v:.1f} deg"),
    "gain_margin_up_db": ("gain margin up", lambda v: f"{v:.1f} dB"),
    "gain_margin_down_db": ("gain margin down (<0)", lambda v: f"{v:.1f} dB"),
    "delay_margin_s": ("delay margin", fmt_time),
    "disk_margin_alpha": ("disk margin alpha", lambda v: f"{v:.3f}"),
    "sensitivity_peak": ("Ms", lambda v: f"{v:.3g}"),
    "complementary_peak": ("Mt", lambda v: f"{v:.3g}"),
}


def worst_value(key: str, value) -> str:
    """A worst (or nominal) margin as the tables show it: `-` not claimed, `inf` unbounded."""
    if value is None:
        return "-"
    if not math.isfinite(value):
        return "-inf" if key == "gain_margin_down_db" or value < 0 else "inf"
    return _LABELS[key][1](value)


def worst_rows(b) -> list[tuple[str, str, str, str]]:
    """(margin, nominal, worst, where) for each worst margin of a break (a BreakSweep)."""
    return [(_LABELS[key][0], worst_value(key, w.nominal), worst_value(key, w.value), format_at(w.at) if w.at else
             ("unbounded everywhere" if w.value is not None else "no stable plant"))
            for key, w in b.worst]


def verdict(m, fail_on_warnings: bool = False) -> str:
    """PASS or FAIL for a model over its box, by the sweep's exit rule (`SweepModelResult.passes`)."""
    return "PASS" if m.passes(fail_on_warnings) else "FAIL"


def verdict_words(m) -> str:
    """The verdict over the box in words: `STABLE at every sampled plant (42)`, where it is
    not, or (a library of params and blocks) what check says of it."""
    if is_library(m):
        return LIBRARY_WORDS
    n = m.samples
    if m.stable_everywhere:
        return f"STABLE at every sampled plant ({n})"
    unstable = max((b.unstable_samples for b in m.breaks), default=0)
    words = f"UNSTABLE at {unstable} of {n} sampled plants" if unstable else "not decided everywhere"
    if m.failed_samples:
        words += f"; {m.failed_samples} plant(s) could not be analysed"
    return words


def evidence_words(m) -> str:
    """What was sampled: `1 nominal + 16 corners + 300 space-filling + ... = N plants`, with
    the seed and the design's spacing."""
    c = m.counts
    parts = [f"{c.nominal} nominal", f"{c.corners} corners", f"{c.space_filling} space-filling",
             f"{c.local_search} local-search", f"{c.boundary} boundary"]
    return f"{' + '.join(parts)} = {m.samples} plants (seed {m.seed}; {m.density})"


def params_words(m) -> str:
    """The box in words: each swept param's range and nominal value, and the params set
    with `--set`."""
    swept = "; ".join(f"{p.name} in [{p.lo:.4g}, {p.hi:.4g}] (nominal {p.nominal:.4g})" for p in m.params)
    fixed = ", ".join(f"{n}={v:.4g}" for n, v in m.fixed)
    return f"swept: {swept or 'nothing (no ranged params)'}" + (f"; set: {fixed}" if fixed else "")


def requirement_words(m, b, r) -> str:
    """`file:line: break b: phase_margin >= 45deg (value 38.2 deg) at J=0.00029 - note`."""
    res = r.result
    note = f" - {res.note}" if res.note else ""
    return f"{requirement_place(m, res)}: break {b.name}: {requirement_text(res)} at {format_at(r.at)}{note}"


def boundary_words(k) -> str:
    """Where stability is lost along one segment: the last stable and the first unstable plant."""
    return f"stable at {format_at(k.stable_at)}; unstable at {format_at(k.unstable_at)}"


def unstable_where(b) -> str:
    """How many plants are not stable at a break, and the first of them found."""
    return f"at {b.unstable_samples} of {b.samples} plants, first at {format_at(b.first_unstable_at)}"


def unstable_words(b) -> str:
    """`UNSTABLE at 12 of 300 plants, first at K=1.7, T=1`."""
    return f"UNSTABLE {unstable_where(b)}"


def break_state(b) -> str:
    """A break over the box in words: stable at every plant, or where it is not."""
    return f"stable at all {b.samples} plants" if b.stable_everywhere else unstable_words(b)


def shown_findings(m) -> tuple:
    """The model's findings every format shows: all but the library note (a library is
    said in its verdict words, as check says it)."""
    return tuple(f for f in m.findings if f.code != LIBRARY_NOTE)


def unmet(m) -> list[tuple[object, object]]:
    """(BreakSweep, SweepRequirement) of every requirement not met at the worst plant found."""
    return [(b, r) for b in m.breaks for r in b.requirements if not r.result.met]


class Tally:
    """The run in numbers: models swept, passed, failed, files that could not be read,
    libraries (not swept), warnings about the run itself; and whether it passes as its
    exit code says."""

    def __init__(self, run, fail_on_warnings: bool = False):
        swept = [m for m in run.models if not is_library(m)]
        self.models = len(swept)
        self.passed = sum(m.passes(fail_on_warnings) for m in swept)
        self.failed = self.models - self.passed
        self.libraries = len(run.models) - len(swept)
        # LW601 (a plant that could not be analysed) belongs to a swept model, not an unread file
        self.unreadable = len({e.span.file for e in run.errors if e.code != "LW601"})
        self.errors = len(run.errors)
        self.run_warnings = sum(f.counts for f in run.findings)
        self.run_fails = run_warnings_fail(run, fail_on_warnings)

    @property
    def passes(self) -> bool:
        """The run passes (exit code 0): every model passes over its box, nothing failed
        to be read or analysed, and no warning about the run itself fails it."""
        return not (self.failed or self.errors or self.run_fails)

    def sentence(self) -> str:
        """`2 model(s) swept, 1 passed, 1 failed, ...`: the run in one sentence."""
        words = f"{self.models} model(s) swept, {self.passed} passed, {self.failed} failed"
        words += f", {self.unreadable} could not be read" if self.unreadable else ""
        if self.libraries:  # as check says it
            words += (f", {self.libraries} librar{'ies' if self.libraries != 1 else 'y'} for `use` not checked "
                      f"on {'their' if self.libraries != 1 else 'its'} own")
        return words + (f", {run_warnings_words(self.run_warnings, self.run_fails)}" if self.run_warnings else "")


def tally(run, fail_on_warnings: bool = False) -> Tally:
    """The `Tally` of a sweep's run under the same rules as its exit code."""
    return Tally(run, fail_on_warnings)
