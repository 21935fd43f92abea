"""A Markdown summary for a pull-request comment: the verdict first, one row per
model, then each model's breaks, unmet requirements, what would stabilise an
unstable loop, warnings and errors, then the caution.

User text goes into code spans (`md_code`) or is escaped (`md_text`), and
located findings into fenced blocks (`md_fence`): a file name cannot make a
heading, a link, an image or raw HTML.
"""
from __future__ import annotations

from ..results import CAUTION
from .escape import md_cell, md_code, md_fence, md_text
from .summary import BREAK_COLUMNS, ModelSummary, finding_text, summarise, tally

__all__ = ["render", "table"]

#: table columns that hold user text (break name, signal): shown as code
_USER_COLUMNS = {"break", "at"}


def table(header: list[str], rows: list[list[str]], right: list[bool]) -> list[str]:
    """A table whose cells are already Markdown (made safe by the caller)."""
    rule = ["---:" if r else "---" for r in right]
    return ["| " + " | ".join(md_cell(h) for h in header) + " |",
            "| " + " | ".join(rule) + " |"] + ["| " + " | ".join(row) + " |" for row in rows]


def _summary_table(summaries: list[ModelSummary], run) -> list[str]:
    rows = []
    for s in summaries:
        verdict = "PASS" if s.passes else "**FAIL**"
        status = s.status if s.status in ("STABLE", "LIBRARY") else f"**{s.status}**"
        rows.append([verdict, md_code(s.file, cell=True), md_text(s.model), status,
                     str(s.result.closed_loop_rhp_poles), f"{s.met}/{s.total}" if s.total else "-"])
    for file in dict.fromkeys(e.span.file for e in run.errors):
        rows.append(["**ERROR**", md_code(file, cell=True), "-", "not read", "-", "-"])
    return table(["result", "file", "model", "verdict", "Z", "requirements met"], rows,
                 [False, False, False, False, True, True])


def _break_cell(header: str, cell: str) -> str:
    if header in _USER_COLUMNS:
        return md_code(cell, cell=True)
    if header == "verdict" and cell != "STABLE":
        return f"**{cell}**"
    return md_cell(cell)


def _details(s: ModelSummary) -> list[str]:
    out = [f"#### {md_text(s.model)} ({md_code(s.file)})", ""]
    if s.breaks:
        rows = [[_break_cell(h, c) for (h, _, _), c in zip(BREAK_COLUMNS, b.cells)] for b in s.breaks]
        out += table([h for h, _, _ in BREAK_COLUMNS], rows, [r for _, _, r in BREAK_COLUMNS])
        out.append("")
    else:
        out += ["No breaks in this model.", ""]
    if s.unmet:
        out.append("Unmet requirements:")
        out += [f"- {md_code(r.place)} break {md_code(r.break_name)}: {md_code(r.text)}" for r in s.unmet]
        out.append("")
    if s.stabilising:
        out += [f"- break {md_code(name)}: {words}" for name, words in s.stabilising]
        out.append("")
    if s.notes:
        out += ["Warnings:", "", *md_fence([line for n in s.notes for line in n.text.splitlines()]), ""]
    return out


def render(run, fail_on_warnings: bool = False) -> str:
    """A check's results as Markdown for a pull-request comment: a heading that says what
    the exit code says, the tally, a row per model, each model's breaks, unmet
    requirements and warnings, the settings' warnings, unreadable files, the caution."""
    t = tally(run, fail_on_warnings)
    summaries = [summarise(m, fail_on_warnings) for m in run.models]
    failing = t.failed + t.unreadable
    parts = [f"{failing} of {t.models + t.unreadable} models need attention"] if failing else []
    if t.run_fails:  # with fail_on_warnings, a warning about the run fails it (the exit code says 1)
        parts.append(f"{t.run_warnings} settings warning{'s fail' if t.run_warnings != 1 else ' fails'} the run")
    head = "; ".join(parts) or "all models pass"
    out = [f"### loopwise check: {head}", "", t.sentence() + ".", ""]
    out += _summary_table(summaries, run)
    out.append("")
    for s in summaries:
        if not s.is_library:
            out += _details(s)
    if run.findings:  # about the run itself: a settings waiver that matched nothing
        out += ["#### Settings", ""]
        out += md_fence([line for f in run.findings for line in finding_text(f).splitlines()])
        out.append("")
    if run.errors:
        out += ["#### Models that could not be read", ""]
        out += md_fence([line for e in run.errors for line in finding_text(e).splitlines()])
        out.append("")
    out.append(f"> **Caution:** {CAUTION}")
    return "\n".join(out) + "\n"
