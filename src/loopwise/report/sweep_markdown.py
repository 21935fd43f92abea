"""`loopwise sweep` as Markdown for a pull-request comment: the verdict first, then per
model what was sampled and per break the worst margins and where, unmet requirements,
boundaries, and the caution. Tables are built like `check`'s Markdown form."""
from __future__ import annotations

from ..results import CAUTION
from .escape import md_code as _code, md_fence as _fenced
from .markdown import table as _table
from .summary import finding_text
from .sweep_text import (EVIDENCE, boundary_words, evidence_words, params_words, requirement_words,
                         sweep_passes, sweep_tally, verdict_words, worst_rows)

__all__ = ["render"]


def _model(m, fail_on_warnings: bool) -> list[str]:
    word = "PASS" if sweep_passes(m, fail_on_warnings) else "**FAIL**"
    out = [f"#### {word} {_code(m.model)} ({_code(m.file)}): {verdict_words(m)}", "",
           f"{params_words(m)}.", "", f"Evidence: {evidence_words(m)}; {EVIDENCE}.", ""]
    for b in m.breaks:
        state = "stable at every plant" if b.stable_everywhere else \
            f"**unstable** at {b.unstable_samples} of {b.samples} plants"
        out += [f"Break {_code(b.name)} (at {_code(b.at)}): {state}", ""]
        out += _table(["margin", "nominal", "worst", "where (param values)"],
                      [list(r) for r in worst_rows(b)], [False, True, True, False])
        out.append("")
        if b.boundaries:
            out += ["Stability is lost between:", ""] + [f"- {boundary_words(k)}" for k in b.boundaries] + [""]
    unmet = [(b, r) for b in m.breaks for r in b.requirements if not r.result.met]
    if unmet:
        out += ["Unmet requirements (judged at the worst plant found):", ""]
        out += [f"- {_code(requirement_words(m, b, r))}" for b, r in unmet] + [""]
    if m.findings:
        out += ["Notes and warnings:", "", *_fenced([finding_text(f) for f in m.findings]), ""]
    return out


def render(run, fail_on_warnings: bool = False) -> str:
    failing = sum(not sweep_passes(m, fail_on_warnings) for m in run.models) + len(run.errors)
    head = "every model passes over its box" if not failing else "models need attention"
    out = [f"### loopwise sweep: {head}", "", sweep_tally(run, fail_on_warnings) + ".", ""]
    for m in run.models:
        out += _model(m, fail_on_warnings)
    if run.errors:
        out += ["#### Errors", ""]
        out += _fenced([line for e in run.errors for line in finding_text(e).splitlines()])
        out.append("")
    out.append(f"> **Caution:** {CAUTION}")
    return "\n".join(out) + "\n"
