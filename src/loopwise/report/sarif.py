"""SARIF 2.1.0 (the OASIS Static Analysis Results Interchange Format) for
code-review tools: each finding is a result at the line it concerns.

- `check`: an unstable or marginal break (LW501, LW502) at its `break` line, an
  unmet requirement (LW503) at its `require` line, warnings and notes at their
  own lines with their own codes, warnings about the run itself (a settings
  waiver that matches nothing, LW284) at their settings line, errors of
  unreadable models at theirs;
- `diff`: each regression on the new side (LW701 verdict, LW702 requirement,
  LW703 margin) at its `break` or `require` line, other changes as notes
  (LW791), errors of models that cannot be read on the new side at their lines;
- `sweep`: a break with sampled plants that are not stable (LW602) at its `break`
  line, a requirement not met at the worst plant found (LW603) at its `require`
  line, each with the param values of the plant in the message; warnings that
  plants gave at the break line with how many; the model's notes (LW691, LW692,
  LW292) and the run's errors (LW601 among them) at their own places.

Rules come from the diagnostics registry (`loopwise.diagnostics`); only the
rules a log uses are listed. File locations are relative to the repository
root (`uriBaseId` "SRCROOT", given in `originalUriBaseIds`) when the file lies
inside one, else absolute `file:` URIs. A waived finding carries a SARIF
`suppression` with the waiver's reason. The text comes from the per-model
summary, so it says what the other formats say; `escape.json_dumps` writes
every control and bidirectional character as a `\\uXXXX` escape.
"""
from __future__ import annotations

import os
from pathlib import Path
from urllib.parse import quote

from .. import __version__
from ..diagnostics import CODES
from ..language.source import repository_root as work_tree
from ..results import CAUTION, is_library
from ..run import exit_status
from .escape import json_dumps
from .summary import ModelSummary, summarise, waiver_note

__all__ = ["SARIF_SCHEMA", "SarifLog", "render_check", "render_diff", "render_sweep", "check_log", "diff_log",
           "sweep_log", "repository_root"]

#: the OASIS schema of SARIF 2.1.0 (errata 01), named in every log
SARIF_SCHEMA = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
_BASE = "SRCROOT"
_LEVEL = {"error": "error", "warning": "warning", "note": "note"}


def repository_root(start: Path | None = None) -> Path | None:
    """The git work tree holding `start` (default: the working directory), links followed
    first: the one walk up to a `.git` entry (`language.source.repository_root`)."""
    return work_tree((start or Path.cwd()).resolve())


class SarifLog:
    """Collects results and the rules they use for one SARIF run. Other kinds of
    result (a sweep's) build their log with it: `add` a result per code and place,
    `finding` a located Finding, then `log(exit_code, properties)`."""

    def __init__(self, root: Path | None, base: Path | None = None):
        self.root = root
        self.base = base or Path.cwd()  # what relative file names in the results are relative to
        self.rules: dict[str, int] = {}
        self.results: list[dict] = []

    def _location(self, file: str, line: int = 0, col: int = 0, end_col: int | None = None) -> dict:
        path = Path(file)
        full = path if path.is_absolute() else self.base / path
        try:
            full = Path(os.path.normpath(full.resolve()))
        except (OSError, RuntimeError):
            full = Path(os.path.normpath(full))
        artifact: dict = {"uri": full.as_uri()} if full.is_absolute() else {"uri": quote(file)}
        if self.root is not None:
            try:
                artifact = {"uri": quote(full.relative_to(self.root).as_posix()), "uriBaseId": _BASE}
            except ValueError:
                pass
        physical: dict = {"artifactLocation": artifact}
        if line > 0:
            region: dict = {"startLine": line}
            if col > 0:
                region["startColumn"] = col
                if end_col and end_col > col:
                    region["endColumn"] = end_col
            physical["region"] = region
        return {"physicalLocation": physical}

    def add(self, code: str, message: str, file: str, line: int = 0, col: int = 0,
            end_col: int | None = None, level: str | None = None, kind: str = "fail",
            waived: str | None = None, properties: dict | None = None) -> None:
        """One result: rule `code` (registered, so its rule is listed), the message, where (file,
        line, columns; none given: the file itself), its level (default: the code's
        severity) and kind; `waived` makes it a suppressed result with that justification."""
        index = self.rules.setdefault(code, len(self.rules))
        result: dict = {"ruleId": code, "ruleIndex": index, "kind": kind,
                        "level": level or _LEVEL[CODES[code].severity],
                        "message": {"text": message},
                        "locations": [self._location(file, line, col, end_col)]}
        if waived:
            result["suppressions"] = [{"kind": "inSource", "status": "accepted", "justification": waived}]
        if properties:
            result["properties"] = properties
        self.results.append(result)

    def finding(self, f, waived: str | None = None, prefix: str = "") -> None:
        """A located `Finding` as a result at its own place, its hint in the message after
        `prefix`; `waived` as for `add`."""
        message = prefix + f.message + (f" (hint: {f.hint})" if f.hint else "")
        self.add(f.code, message, f.span.file, f.span.line, f.span.col, f.span.end_col,
                 level=_LEVEL.get(f.severity, "error"), waived=waived)

    def log(self, exit_code: int, properties: dict) -> dict:
        """The whole log (a dict): the tool with the rules the results use, the repository
        root, the invocation's `exit_code`, the results, and `properties` with the caution."""
        rules = []
        for code in self.rules:
            entry = CODES[code]
            rules.append({"id": code, "name": code,
                          "shortDescription": {"text": entry.summary},
                          "defaultConfiguration": {"enabled": True, "level": _LEVEL[entry.severity]},
                          "properties": {"documentation": f"docs/language.md ({entry.section})"}})
        run: dict = {"tool": {"driver": {"name": "loopwise", "version": __version__,
                                         "semanticVersion": __version__, "rules": rules}}}
        if self.root is not None:
            run["originalUriBaseIds"] = {_BASE: {"uri": self.root.as_uri() + "/"}}
        run["invocations"] = [{"executionSuccessful": exit_code in (0, 1), "exitCode": exit_code}]
        run["results"] = self.results
        run["properties"] = {"caution": CAUTION, **properties}
        return {"$schema": SARIF_SCHEMA, "version": "2.1.0", "runs": [run]}


# --- check --------------------------------------------------------------------------------

def _model_results(log: SarifLog, s: ModelSummary) -> None:
    for b in s.breaks:
        if b.status != "STABLE":
            res = b.result
            code = "LW502" if b.status == "MARGINAL" else "LW501"
            text = (f"break {b.name} at {b.at}: {b.status} (P = {res.open_loop_rhp_poles}, "
                    f"N = {res.encirclements}, Z = {res.closed_loop_rhp_poles}); model {s.model}: {s.detail}")
            if b.stabilising:
                text += f"; {b.stabilising}"
            log.add(code, text, s.file, b.line)
    for r in s.unmet:
        log.add("LW503", f"break {r.break_name}: requirement not met: {r.text}",
                r.result.file or s.file, r.result.line)
    for n in s.notes:
        prefix = f"break {n.break_name}: " if n.break_name is not None else ""
        log.finding(n.finding, n.waived, prefix)


def check_log(run, fail_on_warnings: bool = False, root: Path | None = None) -> dict:
    """The SARIF log (a dict) of a check run."""
    log = SarifLog(root if root is not None else repository_root())
    summaries = [summarise(m, fail_on_warnings) for m in run.models]
    for s in summaries:
        if not s.is_library:
            _model_results(log, s)
    for f in run.findings:  # about the run itself: a settings waiver that matched nothing
        log.finding(f, waiver_note(f))
    for e in run.errors:
        log.finding(e)
    exit_code = exit_status(run, fail_on_warnings)  # the command's own exit rule
    return log.log(exit_code, {"models": len(summaries), "unreadable": len({e.span.file for e in run.errors})})


def render_check(run, fail_on_warnings: bool = False) -> str:
    """A check's results as a SARIF 2.1.0 log (`check_log`), as JSON text."""
    return json_dumps(check_log(run, fail_on_warnings))


# --- diff ---------------------------------------------------------------------------------

def _diff_base(result, root: Path | None) -> Path:
    """What the diff's model paths are relative to: the NEW folder for two folders, the
    NEW file's folder for two files, else (git revisions) the repository root."""
    new = Path(result.new_label)
    if new.is_dir():
        return new.resolve()
    if new.is_file():
        return new.resolve().parent
    return root or Path.cwd()


def _diff_file(result, m) -> str:
    new = Path(result.new_label)
    return new.name if new.is_file() else m.file


def _break_results(log: SarifLog, file: str, d) -> None:
    for reason in d.regressions:
        if "became unstable" in reason or "added and unstable" in reason:
            log.add("LW701", reason, file, d.line)
    for c in d.margins:
        if c.regression:
            log.add("LW703", f"break {d.name}: {c.label}: {c.regression}", file, d.line)
        else:
            log.add("LW791", f"break {d.name}: {c.label} {c.direction}", file, d.line,
                    kind="informational")
    for r in d.requirements:
        # a requirement of the model is placed in the model as the diff names it (a
        # revision's copy lies in a temporary folder); one from the settings in its file
        where = file if not r.file or Path(r.file).name == Path(file).name else r.file
        if r.regression:
            log.add("LW702", f"break {d.name}: {r.regression}", where, r.line or d.line)
        else:
            log.add("LW791", f"break {d.name}: requirement {r.metric} {r.op}: {r.status}", where,
                    r.line or d.line, kind="informational")
    if d.verdict is not None and not any("unstable" in x for x in d.regressions):
        log.add("LW791", f"break {d.name}: verdict {d.verdict.direction}", file, d.line, kind="informational")


def diff_log(result, root: Path | None = None) -> dict:
    """The SARIF log (a dict) of a diff: regressions and information on the new side."""
    root = root if root is not None else repository_root()
    log = SarifLog(root, _diff_base(result, root))
    for m in result.models:
        file = _diff_file(result, m)
        for d in m.breaks:
            if d.status != "removed":
                _break_results(log, file, d)
        for reason in m.regressions:
            if reason.startswith("model "):
                log.add("LW701", reason, file)
        for e in m.errors_after:
            log.finding(e)
    return log.log(result.exit_code, {"old": result.old_label, "new": result.new_label,
                                      "regressions": len(result.regressions)})


def render_diff(result) -> str:
    """A diff as a SARIF 2.1.0 log (`diff_log`), as JSON text."""
    return json_dumps(diff_log(result))


# --- sweep --------------------------------------------------------------------------------

def _sweep_results(log: SarifLog, m) -> None:
    from .sweep_summary import boundary_words, requirement_words, unstable_where

    for b in m.breaks:
        if b.samples and not b.stable_everywhere:
            text = f"break {b.name} at {b.at}: not stable {unstable_where(b)}; model {m.model}"
            text += "".join(f"; stability lost between: {boundary_words(k)}" for k in b.boundaries)
            log.add("LW602", text, m.file, b.line)
        for r in b.requirements:
            if not r.result.met:
                log.add("LW603", "requirement not met at the worst plant found: " + requirement_words(m, b, r),
                        r.result.file or m.file, r.result.line)
        for code, n in b.warnings:
            summary = CODES[code].summary if code in CODES else code
            log.add(code, f"break {b.name}: {summary}, at {n} of {b.samples} sampled plants", m.file, b.line,
                    level="warning")
    for f in m.findings:
        log.finding(f, waiver_note(f))


def sweep_log(run, fail_on_warnings: bool = False, root: Path | None = None) -> dict:
    """The SARIF log (a dict) of a sweep run."""
    from .sweep_summary import EVIDENCE

    log = SarifLog(root if root is not None else repository_root())
    for m in run.models:
        if not is_library(m):  # nothing to sweep, as check gives it no result
            _sweep_results(log, m)
    for f in run.findings:  # about the run itself: a settings waiver that matched nothing
        log.finding(f, waiver_note(f))
    for e in run.errors:
        log.finding(e)
    return log.log(run.exit_status(fail_on_warnings),
                   {"models": len(run.models), "evidence": EVIDENCE,
                    "unreadable": len({e.span.file for e in run.errors if e.code != "LW601"})})


def render_sweep(run, fail_on_warnings: bool = False) -> str:
    """A sweep's results as a SARIF 2.1.0 log (`sweep_log`), as JSON text."""
    return json_dumps(sweep_log(run, fail_on_warnings))
