"""`loopwise diff` as Markdown for a pull-request comment.

One table per changed model; unchanged models and breaks are counted, not
listed. Direction is in words so the comment reads the same without colour.
"""
from __future__ import annotations

from ..compare import BreakDiff, DiffResult, ModelDiff
from ..results import CAUTION
from .diff_text import margin_words, policy_words, requirement_words, summary_words, verdict_words
from .escape import md_cell, md_code, md_fence, md_text

__all__ = ["render"]


def _cell(text: str) -> str:
    """Words the report writes (they may quote names): literal in a table cell."""
    return md_text(text)


def _break_rows(d: BreakDiff) -> list[str]:
    name = md_code(d.name, cell=True)
    if d.status == "added":
        state = "stable" if d.stable_after else "**unstable**"
        flag = "**regression**" if d.regressions else ""
        rows = [f"| {name} | break added (at {md_code(d.at_after or '', cell=True)}) | | {state} | | {flag} |"]
    elif d.status == "removed":
        return [f"| {name} | break removed (was at {md_code(d.at_before or '', cell=True)}) | | | | |"]
    else:
        rows = []
    if d.verdict is not None:
        flag = "**regression**" if d.verdict.stable_before and not d.verdict.stable_after else ""
        rows.append(f"| {name} | verdict | | | {_cell(verdict_words(d.verdict))} | {flag} |")
    for c in d.margins:
        label, before, after, delta = margin_words(c)
        flag = f"**regression**: {_cell(c.regression)}" if c.regression else ""
        rows.append(f"| {name} | {md_cell(label)} | {md_cell(before)} | {md_cell(after)} | {_cell(delta)} | {flag} |")
    for r in d.requirements:
        flag = "**regression**" if r.regression else ""
        rows.append(f"| {name} | requirement | | | {_cell(requirement_words(r))} | {flag} |")
    return rows


def _model_section(m: ModelDiff) -> list[str]:
    head = f"#### {md_code(m.file)}: {m.status}"
    if m.status in ("added", "errors disappeared"):
        head += f" ({'stable' if m.stable_after else '**unstable**'}, {m.breaks_after} break(s))"
    out = [head, ""]
    if m.verdict is not None and not any(d.verdict for d in m.breaks):
        out += [f"Model verdict: {verdict_words(m.verdict)}.", ""]
    rows = [row for d in m.breaks for row in _break_rows(d)]
    if rows:
        out += ["| break | quantity | before | after | change | |",
                "| --- | --- | ---: | ---: | --- | --- |", *rows, ""]
    if m.breaks_unchanged:
        n = m.breaks_unchanged
        out += [f"{n} break{'s' if n != 1 else ''} unchanged.", ""]
    if m.unreadable_after:
        body = "\n\n".join(m.rendered_errors) or "\n".join(
            f"{e.span}: {e.message}" for e in m.errors_after)
        out += ["Cannot be read on the new side:", "", *md_fence(body.split("\n")), ""]
    out += [f"- **regression**: {_cell(r)}" for r in m.regressions if r.startswith("model ")]
    return out


def render(result: DiffResult) -> str:
    """A diff as Markdown for a pull-request comment: the verdict first, the regressions,
    then each changed model with its breaks' changes, then the caution."""
    n = len(result.regressions)
    if result.unreadable:
        verdict = f"**{len(result.unreadable)} model(s) cannot be read on the new side**"
    elif n:
        verdict = f"**{n} regression{'s' if n != 1 else ''}**"
    else:
        verdict = "no regressions"
    out = [f"### loopwise diff: {md_code(result.old_label)} -> {md_code(result.new_label)}", "",
           f"{verdict}. {summary_words(result)}.", ""]
    unchanged = 0
    for m in result.models:
        if m.status == "unchanged":
            unchanged += 1
        else:
            out += _model_section(m)
    if unchanged:
        out += [f"{unchanged} model{'s' if unchanged != 1 else ''} unchanged.", ""]
    settings = f" Settings: {_cell(result.settings)}." if result.settings else ""
    out += [f"<sub>Regression: {policy_words(result.policy)}.{settings}</sub>", "", f"> {CAUTION}"]
    return "\n".join(out) + "\n"
