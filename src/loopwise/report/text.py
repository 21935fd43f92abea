"""The terminal report: per model a verdict line and an aligned table of breaks.

Plain text that reads the same in a CI log and a terminal; colour is only an
extra on top of words (STABLE, UNSTABLE, MARGINAL, PASS, FAIL), never the only
signal. Columns are padded on the plain text, so colour codes never shift them.
"""
from __future__ import annotations

from ..results import CAUTION
from . import (BREAK_COLUMNS, LIBRARY_NOTE, is_library, break_row, break_warning_text, count_met, finding_text,
               model_passes, model_status, requirement_place, tally, unmet_requirements)

__all__ = ["render"]

_STYLE = {"STABLE": "32", "PASS": "32", "UNSTABLE": "1;31", "FAIL": "1;31",
          "MARGINAL": "1;33", "ERROR": "1;31", "warning": "33", "dim": "2"}


def _paint(text: str, word: str, colour: bool) -> str:
    code = _STYLE.get(word)
    return f"\x1b[{code}m{text}\x1b[0m" if colour and code else text


def _table(breaks, colour: bool, indent: str = "  ") -> list[str]:
    header = [h for h, _, _ in BREAK_COLUMNS]
    rows = [break_row(b) for b in breaks]
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    verdict = [h for h, _, _ in BREAK_COLUMNS].index("verdict")

    def line(cells, paint_verdict: bool) -> str:
        out = []
        for i, (cell, (_, _, right)) in enumerate(zip(cells, BREAK_COLUMNS)):
            padded = cell.rjust(widths[i]) if right else cell.ljust(widths[i])
            if paint_verdict and i == verdict:
                padded = _paint(padded, cell, colour)
            out.append(padded)
        return (indent + "  ".join(out)).rstrip()

    return [line(header, False)] + [line(r, True) for r in rows]


def _verdict_line(m, colour: bool, fail_on_warnings: bool) -> str:
    status = model_status(m)
    if status == "LIBRARY":
        return (f"{_paint('PASS', 'PASS', colour)}  {m.file}  library of params and blocks "
                "for `use`: nothing to check on its own")
    if status == "STABLE":
        detail = "no closed-loop poles in the right half plane"
    elif status == "MARGINAL":
        freqs = sorted({b.marginal_freq for b in m.breaks if b.marginal and b.marginal_freq is not None})
        where = f" at {freqs[0]:.4g} rad/s" if freqs else ""
        detail = f"a closed-loop pole on the imaginary axis{where}"
    else:
        detail = f"{m.closed_loop_rhp_poles} closed-loop pole(s) in the right half plane"
    met = sum(count_met(b)[0] for b in m.breaks)
    total = sum(count_met(b)[1] for b in m.breaks)
    verdict = "PASS" if model_passes(m, fail_on_warnings) else "FAIL"
    reqs = f"requirements {met}/{total} met" if total else "no requirements"
    return (f"{_paint(verdict, verdict, colour)}  {m.file}  model {m.model}: "
            f"{_paint(status, status, colour)} ({detail}); {reqs}")


def _model_block(m, colour: bool, fail_on_warnings: bool) -> list[str]:
    out = [_verdict_line(m, colour, fail_on_warnings)]
    if m.breaks:
        out += _table(m.breaks, colour)
    elif not is_library(m):
        out.append("  (no breaks: margins are measured at `break <name> at <signal>` lines)")
    unmet = unmet_requirements(m)
    if unmet:
        out.append("  unmet requirements:")
        for b, r in unmet:
            note = f" - {r.note}" if r.note else ""
            out.append(f"    {requirement_place(m, r)}: break {b.name}: {r.describe()}{note}")
    for b in m.breaks:
        if not b.stable and b.stabilising_gains:
            ranges = ", ".join(f"[{lo:.3g}, {hi:.3g}]" for lo, hi in b.stabilising_gains)
            out.append(f"  break {b.name}: the closed loop would be stable with L scaled by a "
                       f"factor in {ranges}")
    for b in m.breaks:
        out += [f"  {_paint('warning', 'warning' if w.counts else 'dim', colour)}: {break_warning_text(b, w)}"
                for w in b.warnings]
    for f in m.findings:
        if f.code != LIBRARY_NOTE:   # already said on the verdict line
            out += ["  " + line for line in finding_text(f).splitlines()]
    return out


def render(run, colour: bool = False, fail_on_warnings: bool = False) -> str:
    out: list[str] = []
    for m in run.models:
        out += _model_block(m, colour, fail_on_warnings)
        out.append("")
    for f in run.findings:  # about the run itself: a settings waiver that matched nothing
        out += [*finding_text(f).splitlines(), ""]
    if run.errors:
        files = sorted({e.span.file for e in run.errors}, key=[e.span.file for e in run.errors].index)
        for name in files:
            out.append(f"{_paint('ERROR', 'ERROR', colour)}  {name}: errors stop the check")
            for e in run.errors:
                if e.span.file == name:
                    out += ["  " + line for line in finding_text(e).splitlines()]
            out.append("")
    out.append(tally(run, fail_on_warnings).sentence() + ".")
    out.append(_paint(f"Caution: {CAUTION}", "dim", colour))
    return "\n".join(out) + "\n"
