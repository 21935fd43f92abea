"""A Markdown summary for a pull-request comment: the verdict first, one row per
model, then each model's breaks, unmet requirements and errors, then the caution."""
from __future__ import annotations

import re

from ..results import CAUTION
from . import (BREAK_COLUMNS, is_library, break_row, break_warning_text, count_met, finding_text, model_passes,
               model_status, requirement_place, tally, unmet_requirements)

__all__ = ["render"]

_BACKTICKS = re.compile("`+")


def _cell(text: str) -> str:
    # a pipe or newline would end the table cell early
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def _code(text: str) -> str:
    return f"`{text}`" if "`" not in text else f"`` {text} ``"


def _fenced(lines: list[str]) -> list[str]:
    """A code block whose fence is longer than any backtick run inside it."""
    ticks = max(3, max((len(m) for line in lines for m in _BACKTICKS.findall(line)), default=0) + 1)
    fence = "`" * ticks
    return [fence + "text", *lines, fence]


def _table(header: list[str], rows: list[list[str]], right: list[bool]) -> list[str]:
    rule = ["---:" if r else "---" for r in right]
    return ["| " + " | ".join(_cell(h) for h in header) + " |",
            "| " + " | ".join(rule) + " |"] + [
        "| " + " | ".join(_cell(c) for c in row) + " |" for row in rows]


def _summary(run, fail_on_warnings: bool) -> list[str]:
    rows = []
    for m in run.models:
        met = sum(count_met(b)[0] for b in m.breaks)
        total = sum(count_met(b)[1] for b in m.breaks)
        verdict = "PASS" if model_passes(m, fail_on_warnings) else "**FAIL**"
        status = model_status(m)
        rows.append([verdict, _code(m.file), m.model,
                     status if status in ("STABLE", "LIBRARY") else f"**{status}**",
                     str(m.closed_loop_rhp_poles), f"{met}/{total}" if total else "-"])
    for file in dict.fromkeys(e.span.file for e in run.errors):
        rows.append(["**ERROR**", _code(file), "-", "not read", "-", "-"])
    return _table(["result", "file", "model", "verdict", "Z", "requirements met"], rows,
                  [False, False, False, False, True, True])


def _details(m, fail_on_warnings: bool) -> list[str]:
    out = [f"#### {_cell(m.model)} ({_code(m.file)})", ""]
    if m.breaks:
        rows = [break_row(b) for b in m.breaks]
        for row in rows:
            row[2] = row[2] if row[2] == "STABLE" else f"**{row[2]}**"
        out += _table([h for h, _, _ in BREAK_COLUMNS], rows, [r for _, _, r in BREAK_COLUMNS])
        out.append("")
    else:
        out += ["No breaks in this model.", ""]
    unmet = unmet_requirements(m)
    if unmet:
        out.append("Unmet requirements:")
        out += [f"- {_code(requirement_place(m, r))} break {_code(b.name)}: {_code(r.describe())}"
                for b, r in unmet]
        out.append("")
    notes = [break_warning_text(b, w) for b in m.breaks for w in b.warnings]
    notes += [finding_text(f) for f in m.findings]
    if notes:
        out += ["Warnings:", "", *_fenced(notes), ""]
    return out


def render(run, fail_on_warnings: bool = False) -> str:
    t = tally(run, fail_on_warnings)
    failing = t.failed + t.unreadable
    head = "all models pass" if not failing else f"{failing} of {t.models + t.unreadable} models need attention"
    out = [f"### loopwise check: {head}", "", t.sentence() + ".", ""]
    out += _summary(run, fail_on_warnings)
    out.append("")
    for m in run.models:
        if not is_library(m):
            out += _details(m, fail_on_warnings)
    if run.findings:
        out += ["#### Settings", ""]
        out += _fenced([line for f in run.findings for line in finding_text(f).splitlines()])
        out.append("")
    if run.errors:
        out += ["#### Models that could not be read", ""]
        out += _fenced([line for e in run.errors for line in finding_text(e).splitlines()])
        out.append("")
    out.append(f"> **Caution:** {CAUTION}")
    return "\n".join(out) + "\n"
