"""`loopwise sweep` for the terminal: per model the verdict over the box, what was
sampled, and per break the worst margins with the param values where they occur.

The words here (`worst_rows`, `evidence_words`, ...) are shared with the Markdown
and JUnit forms. Every report says that sampled plants are evidence, not a proof.
"""
from __future__ import annotations

import math

from ..results import CAUTION
from ..sweep.results import format_at
from ..errors import printable
from .numbers import fmt_time
from .summary import finding_text, requirement_text

__all__ = ["render", "worst_rows", "evidence_words", "verdict_words", "sweep_status", "format_at",
           "requirement_words", "boundary_words", "sweep_passes", "sweep_tally", "EVIDENCE"]

EVIDENCE = "sampled evidence, not a proof: a plant between the samples may be worse"

#: (JSON key, label, format of a finite value)
_LABELS = {
    "phase_margin_deg": ("phase margin", lambda v: f"{v:.1f} deg"),
    "gain_margin_up_db": ("gain margin up", lambda v: f"{v:.1f} dB"),
    "gain_margin_down_db": ("gain margin down", lambda v: f"{v:.1f} dB"),
    "delay_margin_s": ("delay margin", fmt_time),
    "disk_margin_alpha": ("disk margin alpha", lambda v: f"{v:.3f}"),
    "sensitivity_peak": ("Ms", lambda v: f"{v:.3g}"),
    "complementary_peak": ("Mt", lambda v: f"{v:.3g}"),
}


def _value(key: str, value) -> str:
    if value is None:
        return "-"
    if not math.isfinite(value):
        return ("-inf" if value < 0 else "inf") if key != "gain_margin_down_db" else "-inf"
    return _LABELS[key][1](value)


def worst_rows(b) -> list[tuple[str, str, str, str]]:
    """(margin, nominal, worst, where) for each worst margin of a break."""
    return [(_LABELS[key][0], _value(key, w.nominal), _value(key, w.value), format_at(w.at) if w.at else
             ("unbounded everywhere" if w.value is not None else "no stable plant"))
            for key, w in b.worst]


def sweep_passes(m, fail_on_warnings: bool = False) -> bool:
    """The sweep's exit rule per model; a waived warning does not count (`Finding.counts`;
    the break counts hold only the warnings that count at each plant)."""
    warned = any(f.counts for f in m.findings) or any(b.warnings for b in m.breaks)
    return m.ok and not (fail_on_warnings and warned)


def sweep_status(m) -> str:
    return "STABLE" if m.stable_everywhere else ("UNSTABLE" if any(b.unstable_samples for b in m.breaks)
                                                 else "INCOMPLETE")


def verdict_words(m) -> str:
    n = m.samples
    if m.stable_everywhere:
        return f"STABLE at every sampled plant ({n})"
    unstable = max((b.unstable_samples for b in m.breaks), default=0)
    words = f"UNSTABLE at {unstable} of {n} sampled plants" if unstable else "not decided everywhere"
    if m.failed_samples:
        words += f"; {m.failed_samples} plant(s) could not be analysed"
    return words


def evidence_words(m) -> str:
    c = m.counts
    parts = [f"{c.nominal} nominal", f"{c.corners} corners", f"{c.space_filling} space-filling",
             f"{c.local_search} local-search", f"{c.boundary} boundary"]
    return f"{' + '.join(parts)} = {m.samples} plants (seed {m.seed}; {m.density})"


def params_words(m) -> str:
    swept = "; ".join(f"{p.name} in [{p.lo:.4g}, {p.hi:.4g}] (nominal {p.nominal:.4g})" for p in m.params)
    fixed = ", ".join(f"{n}={v:.4g}" for n, v in m.fixed)
    return (f"swept: {swept or 'nothing (no ranged params)'}" + (f"; set: {fixed}" if fixed else ""))


def requirement_words(m, b, r) -> str:
    res = r.result
    note = f" - {res.note}" if res.note else ""
    return f"{res.file or m.file}:{res.line}: break {b.name}: {requirement_text(res)} at {format_at(r.at)}{note}"


def boundary_words(k) -> str:
    return f"stable at {format_at(k.stable_at)}; unstable at {format_at(k.unstable_at)}"


def sweep_tally(run, fail_on_warnings: bool = False) -> str:
    passed = sum(sweep_passes(m, fail_on_warnings) for m in run.models)
    unread = len({e.span.file for e in run.errors if e.code != "LW601"})
    words = f"{len(run.models)} model(s) swept, {passed} passed, {len(run.models) - passed} failed"
    return words + (f", {unread} could not be read" if unread else "")


def _table(rows: list[tuple[str, ...]], header: tuple[str, ...], indent: str) -> list[str]:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    return [(indent + "  ".join(c.rjust(w) if 0 < i < 3 else c.ljust(w)
                                for i, (c, w) in enumerate(zip(r, widths)))).rstrip() for r in [header, *rows]]


def _break_block(m, b) -> list[str]:
    state = (f"stable at all {b.samples} plants" if b.stable_everywhere
             else f"UNSTABLE at {b.unstable_samples} of {b.samples} plants, first at {format_at(b.first_unstable_at)}")
    out = [f"  break {b.name} (at {b.at}): {state}"]
    out += _table(worst_rows(b), ("margin", "nominal", "worst", "where (param values)"), "    ")
    for k in b.boundaries:
        out.append(f"    stability lost between: {boundary_words(k)}")
    for code, n in b.warnings:
        out.append(f"    warning: {code} at {n} of {b.samples} plants")
    return out


def _model_block(m, fail_on_warnings: bool) -> list[str]:
    verdict = "PASS" if sweep_passes(m, fail_on_warnings) else "FAIL"
    met = sum(r.result.met for b in m.breaks for r in b.requirements)
    total = sum(len(b.requirements) for b in m.breaks)
    reqs = f"requirements {met}/{total} met at the worst plants found" if total else "no requirements"
    out = [f"{verdict}  {m.file}  model {m.model}: {verdict_words(m)}; {reqs}",
           f"  {params_words(m)}", f"  evidence: {evidence_words(m)}", f"  {EVIDENCE}"]
    for b in m.breaks:
        out += _break_block(m, b)
    unmet = [(b, r) for b in m.breaks for r in b.requirements if not r.result.met]
    if unmet:
        out.append("  unmet requirements (judged at the worst plant found):")
        out += [f"    {requirement_words(m, b, r)}" for b, r in unmet]
    for f in m.findings:
        out += ["  " + line for line in finding_text(f).splitlines()]
    return out


def render(run, fail_on_warnings: bool = False) -> str:
    out: list[str] = []
    for m in run.models:
        out += _model_block(m, fail_on_warnings)
        out.append("")
    for e in run.errors:
        out += [line for line in finding_text(e).splitlines()]
        out.append("")
    out.append(sweep_tally(run, fail_on_warnings) + ".")
    out.append(f"Caution: {CAUTION}")
    return printable("\n".join(out), keep="\t\n") + "\n"
