"""`loopwise sweep` as Markdown for a pull-request comment: the verdict first, then per
model what was sampled and per break the worst margins and where, unmet requirements,
boundaries, and the caution. Tables and escaping as in check's Markdown form: user
text in code spans (`md_code`) or escaped (`md_text`), findings in fenced blocks."""
from __future__ import annotations

from ..results import CAUTION, is_library
from .escape import md_cell, md_code, md_fence, md_text
from .markdown import table
from .summary import finding_text
from .sweep_summary import (EVIDENCE, WORST_HEADER, boundary_words, break_state, evidence_words, params_words,
                            requirement_words, shown_findings, tally, unmet, verdict_words, worst_rows)

__all__ = ["render"]


def _worst_table(b) -> list[str]:
    rows = [[md_cell(label), md_cell(nominal), md_cell(worst), md_code(where, cell=True)]
            for label, nominal, worst, where in worst_rows(b)]
    return table(list(WORST_HEADER), rows, [False, True, True, False])


def _findings(m) -> list[str]:
    if not shown_findings(m):
        return []
    return ["Notes and warnings:", "", *md_fence([line for f in shown_findings(m)
                                                  for line in finding_text(f).splitlines()]), ""]


def _model(m, fail_on_warnings: bool) -> list[str]:
    word = "PASS" if m.passes(fail_on_warnings) else "**FAIL**"
    head = f"#### {word} {md_code(m.model)} ({md_code(m.file)}): {verdict_words(m)}"
    if is_library(m):  # nothing to sweep, as check says
        return [head, "", *_findings(m)]
    out = [head, "",
           f"{md_text(params_words(m))}.", "", f"Evidence: {md_text(evidence_words(m))}; {EVIDENCE}.", ""]
    for b in m.breaks:
        state = break_state(b)
        state = state if b.stable_everywhere else f"**{md_text(state)}**"
        out += [f"Break {md_code(b.name)} (at {md_code(b.at)}): {state}", ""]
        out += _worst_table(b) + [""]
        if b.boundaries:
            out += ["Stability is lost between:", ""] + [f"- {md_code(boundary_words(k))}" for k in b.boundaries]
            out.append("")
    if unmet(m):
        out += ["Unmet requirements (judged at the worst plant found):", ""]
        out += [f"- {md_code(requirement_words(m, b, r))}" for b, r in unmet(m)] + [""]
    return out + _findings(m)


def render(run, fail_on_warnings: bool = False) -> str:
    """A sweep's results as Markdown for a pull-request comment: a heading that says what
    the exit code says, the tally, each model's box, evidence and worst margins, the
    settings' warnings and errors, the caution."""
    t = tally(run, fail_on_warnings)
    if t.passes:
        head = "every model passes over its box"
    elif t.failed or t.errors:
        head = "models need attention"
    else:  # with fail_on_warnings, a warning about the run fails it (the exit code says 1)
        head = f"{t.run_warnings} settings warning{'s fail' if t.run_warnings != 1 else ' fails'} the run"
    out = [f"### loopwise sweep: {head}", "", t.sentence() + ".", ""]
    for m in run.models:
        out += _model(m, fail_on_warnings)
    if run.findings:  # about the run itself: a settings waiver that matched nothing
        out += ["#### Settings", ""]
        out += md_fence([line for f in run.findings for line in finding_text(f).splitlines()]) + [""]
    if run.errors:
        out += ["#### Errors", ""]
        out += md_fence([line for e in run.errors for line in finding_text(e).splitlines()]) + [""]
    out.append(f"> **Caution:** {CAUTION}")
    return "\n".join(out) + "\n"
