"""`loopwise sweep` for the terminal: per model the verdict over the box, what was
sampled, and per break the worst margins with the param values where they occur.

The words come from `report.sweep_summary`, shared with every other format; every
string from the user's files (file, model, break and param names, messages) passes
through `escape.one_line`, so the output holds no control character.
"""
from __future__ import annotations

from ..results import CAUTION, is_library
from .escape import one_line
from .summary import finding_text
from .sweep_summary import (EVIDENCE, WORST_HEADER, boundary_words, break_state, evidence_words, params_words,
                            requirement_words, shown_findings, tally, unmet, verdict, verdict_words,
                            worst_rows)

__all__ = ["render"]


def _table(rows: list[tuple[str, ...]], indent: str) -> list[str]:
    rows = [tuple(one_line(c) for c in r) for r in rows]
    widths = [max(len(r[i]) for r in [WORST_HEADER, *rows]) for i in range(len(WORST_HEADER))]
    return [(indent + "  ".join(c.rjust(w) if 0 < i < 3 else c.ljust(w)
                                for i, (c, w) in enumerate(zip(r, widths)))).rstrip()
            for r in [WORST_HEADER, *rows]]


def _break_block(b) -> list[str]:
    out = [f"  break {one_line(b.name)} (at {one_line(b.at)}): {one_line(break_state(b))}"]
    out += _table(worst_rows(b), "    ")
    out += [f"    stability lost between: {one_line(boundary_words(k))}" for k in b.boundaries]
    out += [f"    warning: {code} at {n} of {b.samples} plants" for code, n in b.warnings]
    return out


def _model_block(m, fail_on_warnings: bool) -> list[str]:
    if is_library(m):  # nothing to sweep: the line check prints, and any other finding
        out = [f"{verdict(m, fail_on_warnings)}  {one_line(m.file)}  {verdict_words(m)}"]
        return out + ["  " + line for f in shown_findings(m) for line in finding_text(f).splitlines()]
    met = sum(r.result.met for b in m.breaks for r in b.requirements)
    total = sum(len(b.requirements) for b in m.breaks)
    reqs = f"requirements {met}/{total} met at the worst plants found" if total else "no requirements"
    out = [f"{verdict(m, fail_on_warnings)}  {one_line(m.file)}  model {one_line(m.model)}: {verdict_words(m)}; {reqs}",
           f"  {one_line(params_words(m))}", f"  evidence: {evidence_words(m)}", f"  {EVIDENCE}"]
    for b in m.breaks:
        out += _break_block(b)
    if unmet(m):
        out.append("  unmet requirements (judged at the worst plant found):")
        out += [f"    {one_line(requirement_words(m, b, r))}" for b, r in unmet(m)]
    for f in shown_findings(m):  # already terminal-safe, several lines (source line, caret, hint)
        out += ["  " + line for line in finding_text(f).splitlines()]
    return out


def render(run, fail_on_warnings: bool = False) -> str:
    """A sweep's results as plain text: per model its verdict over the box, what was
    sampled and each break's worst margins and where; the run's warnings and errors,
    the tally, the caution."""
    out: list[str] = []
    for m in run.models:
        out += _model_block(m, fail_on_warnings)
        out.append("")
    for f in run.findings:  # about the run itself: a settings waiver that matched nothing
        out += [*finding_text(f).splitlines(), ""]
    for e in run.errors:
        out += [*finding_text(e).splitlines(), ""]
    out.append(tally(run, fail_on_warnings).sentence() + ".")
    out.append(f"Caution: {CAUTION}")
    return "\n".join(out) + "\n"
