"""The terminal report: per model a verdict line and an aligned table of breaks.

Plain text that reads the same in a CI log and a terminal; colour is only an
extra on top of words (STABLE, UNSTABLE, MARGINAL, PASS, FAIL), never the only
signal. Columns are padded on the plain text, so colour codes never shift them.
Every string from the user's files (file names, names, messages) passes through
`escape.one_line` (or, with its source line and caret, `errors.render`), so the only escape sequences in the output are the colours.
"""
from __future__ import annotations

from ..results import CAUTION
from .escape import one_line
from .summary import BREAK_COLUMNS, ModelSummary, finding_text, summarise, tally

__all__ = ["render"]

_STYLE = {"STABLE": "32", "PASS": "32", "UNSTABLE": "1;31", "FAIL": "1;31",
          "MARGINAL": "1;33", "ERROR": "1;31", "warning": "33", "dim": "2"}



def _paint(text: str, word: str, colour: bool) -> str:
    code = _STYLE.get(word)
    return f"\x1b[{code}m{text}\x1b[0m" if colour and code else text


def _table(s: ModelSummary, colour: bool, indent: str = "  ") -> list[str]:
    header = [h for h, _, _ in BREAK_COLUMNS]
    rows = [[one_line(c) for c in b.cells] for b in s.breaks]
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    verdict = header.index("verdict")

    def line(cells, paint_verdict: bool) -> str:
        out = []
        for i, (cell, (_, _, right)) in enumerate(zip(cells, BREAK_COLUMNS)):
            padded = cell.rjust(widths[i]) if right else cell.ljust(widths[i])
            if paint_verdict and i == verdict:
                padded = _paint(padded, cell, colour)
            out.append(padded)
        return (indent + "  ".join(out)).rstrip()

    return [line(header, False)] + [line(r, True) for r in rows]


def _verdict_line(s: ModelSummary, colour: bool) -> str:
    if s.is_library:
        return f"{_paint('PASS', 'PASS', colour)}  {one_line(s.file)}  {s.detail}"
    return (f"{_paint(s.verdict, s.verdict, colour)}  {one_line(s.file)}  model {one_line(s.model)}: "
            f"{_paint(s.status, s.status, colour)} ({s.detail}); {s.requirements_words}")


def _model_block(s: ModelSummary, colour: bool) -> list[str]:
    out = [_verdict_line(s, colour)]
    if s.breaks:
        out += _table(s, colour)
    elif not s.is_library:
        out.append("  (no breaks: margins are measured at `break <name> at <signal>` lines)")
    if s.unmet:
        out.append("  unmet requirements:")
        out += [f"    {one_line(r.place)}: break {one_line(r.break_name)}: {one_line(r.text)}" for r in s.unmet]
    out += [f"  break {one_line(name)}: {one_line(words)}" for name, words in s.stabilising]
    for n in s.notes:
        if n.break_name is not None:  # a waived one is dimmed; its note says why
            out.append(f"  {_paint('warning', 'warning' if n.finding.counts else 'dim', colour)}: {one_line(n.line)}")
        else:  # already terminal-safe, several lines (source line, caret, hint)
            out += ["  " + line for line in n.text.splitlines()]
    return out


def render(run, colour: bool = False, fail_on_warnings: bool = False) -> str:
    """A check's results as aligned plain text: per model a verdict line and a table of
    its breaks, unmet requirements, what would stabilise an unstable loop and the
    warnings; the run's warnings, unreadable files, the tally and the caution.
    `colour` adds terminal colours on top of the words."""
    out: list[str] = []
    for m in run.models:
        out += _model_block(summarise(m, fail_on_warnings), colour)
        out.append("")
    for f in run.findings:  # about the run itself: a settings waiver that matched nothing
        out += [*finding_text(f).splitlines(), ""]
    if run.errors:
        files = list(dict.fromkeys(e.span.file for e in run.errors))
        for name in files:
            out.append(f"{_paint('ERROR', 'ERROR', colour)}  {one_line(name)}: errors stop the check")
            for e in run.errors:
                if e.span.file == name:
                    out += ["  " + line for line in finding_text(e).splitlines()]
            out.append("")
    out.append(tally(run, fail_on_warnings).sentence() + ".")
    out.append(_paint(f"Caution: {CAUTION}", "dim", colour))
    return "\n".join(out) + "\n"
