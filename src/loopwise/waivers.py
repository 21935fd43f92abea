"""Waivers: warnings (and notes) a team has accepted, each with its reason.

Written in a model (`waive CODE "reason"` for every finding of that code,
`waive CODE at NAME "reason"` for those about one break, signal or block) or in
the settings for the models a glob covers (`[[tool.loopwise.waive]]`).

The rules (docs/language.md, "waive"):

- Warnings and notes can be waived; errors never (LW251), nor LW284 itself.
- A waived finding still shows, marked with its waiver and reason, in every
  format; it no longer counts for `fail_on_warnings` (`Finding.counts`).
- A finding is about the names in `Finding.about`; `at NAME` matches when NAME
  is one of them. A finding about the model as a whole (about nothing) is
  matched only by a waiver without `at`.
- When several waivers match, the finding records the model's own before the
  settings', and one naming its subject before one for the whole code.
- A waiver that matches no finding is itself a warning (LW284): a model's own at
  its `waive` line; a settings waiver once per run, at its settings entry, when
  none of the checked models its glob covers has a finding it matches.
"""
from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

from .diagnostics import CODES
from .errors import Finding, ModelError, Span
from .language.hints import closest, did_you_mean

__all__ = ["Waiver", "Waivers", "UNMATCHED", "check_code", "check_reason", "make_waiver",
           "apply_waivers", "settings_waivers_for", "unmatched_settings_waivers"]

#: a waiver that matches nothing (never waivable itself: it would match nothing in turn)
UNMATCHED = "LW284"

#: what `waive CODE at NAME` may name, as the resolver calls it
SUBJECT_KINDS = ("break", "signal", "input", "block")


@dataclass(frozen=True)
class Waiver:
    """One accepted finding kind: a code, optionally one subject, and the reason."""

    code: str
    reason: str
    span: Span  # the `waive` statement, or the settings entry
    at: str | None = None
    files: tuple[str, ...] | None = None  # settings: the globs it covers; None: the model's own

    def covers(self, finding: Finding) -> bool:
        """Whether this waiver accepts `finding`: its code, not an error, and (with `at`)
        about that name."""
        return (finding.code == self.code and finding.severity != "error"
                and (self.at is None or self.at in finding.about))

    def describe(self) -> str:
        """`LW382 at balance`: the code and the subject, as messages name the waiver."""
        return self.code + (f" at {self.at}" if self.at else "")

    def to_dict(self) -> dict:
        """Where the waiver is written and why, as the JSON contract records it on a finding."""
        return {"reason": self.reason, "at": self.at, "file": self.span.file,
                "line": self.span.line, "col": self.span.col}


@dataclass(frozen=True)
class Waivers:
    """The waivers that apply to one model: its own first, then the settings'."""

    items: tuple[Waiver, ...] = ()

    def waiver_for(self, code: str, subject=None) -> Waiver | None:
        """The waiver that accepts a finding of `code` about `subject` (a name, several
        names, or None for the model as a whole), or None when the finding stands.

        Stages that decide something from a finding (an engine verdict that a waiver
        may lift) ask here before they decide; the finding is still reported, and
        `apply_waivers` marks it with the same waiver.
        """
        names = (subject,) if isinstance(subject, str) else tuple(subject or ())
        matches = [w for w in self.items if w.code == code and (w.at is None or w.at in names)]
        if not matches:
            return None
        # min() keeps the first of equals: the model's own before the settings', in written order
        return min(matches, key=lambda w: (w.files is not None, w.at is None))

    def plus(self, more) -> "Waivers":
        """These waivers followed by `more` (a model's own first, then the settings')."""
        return Waivers(self.items + tuple(more))


# --- checking a waiver as written ------------------------------------------------------

def _code_hint(code: str) -> str:
    upper = code.upper()
    if upper in CODES:
        return f"codes are written in capitals: `{upper}`"
    old = {c.old: c.code for c in CODES.values() if c.old}
    if upper in old:
        return f"`{code}` is the old spelling of `{old[upper]}`"
    match = closest(upper, CODES)
    if match:
        return f"did you mean `{match}` ({CODES[match].summary})?"
    return "codes are `LW` and three digits; see the table in docs/language.md#diagnostics"


def check_code(code: str, span: Span) -> None:
    """A located error unless `code` is a registered warning or note other than LW284."""
    entry = CODES.get(code)
    if entry is None:
        raise ModelError("LW250", f"unknown diagnostic code `{code}` in a waiver", span, _code_hint(code))
    if entry.severity == "error":
        raise ModelError("LW251", f"`{code}` is an error ({entry.summary}): errors cannot be waived", span,
                         "fix the model; only warnings and notes can be accepted with a reason")
    if code == UNMATCHED:
        raise ModelError("LW251", f"`{code}` (a waiver that matches nothing) cannot be waived", span,
                         "remove the waiver that matches nothing")


def check_reason(reason: str | None, span: Span, hint: str | None = None) -> str:
    """The reason, stripped; a located error when it is missing or blank."""
    if reason is None or not reason.strip():
        raise ModelError("LW252", "a waiver needs a reason", span,
                         hint or 'say why the finding is accepted, e.g. `waive LW382 at balance '
                         '"balance pipe between the tanks, not a control loop"`')
    return reason.strip()


def make_waiver(stmt, names: dict[str, str]) -> Waiver:
    """A `waive` statement (language.ast.WaiveStmt) checked against the model's names
    (name -> "break", "signal", "input", "block" or "param")."""
    check_code(stmt.code, stmt.code_span)
    if stmt.at is not None:
        kind = names.get(stmt.at)
        if kind not in SUBJECT_KINDS:
            subjects = [n for n, k in names.items() if k in SUBJECT_KINDS]
            what = "a param, not" if kind else "not"
            hint = (did_you_mean(stmt.at, subjects) or
                    "a finding is about a break, a signal or a block: name one of them, or drop `at`")
            raise ModelError("LW253", f"`{stmt.at}` is {what} a break, signal or block of this model",
                             stmt.at_span, hint)
    reason = check_reason(stmt.reason, stmt.reason_span or stmt.span)
    return Waiver(stmt.code, reason, stmt.span, stmt.at)


# --- applying waivers to a model's result ----------------------------------------------

def _unmatched(w: Waiver, where: str) -> Finding:
    return Finding("warning", UNMATCHED, f"the waiver of {w.describe()} matches no finding {where}", w.span,
                   "the finding it accepted is gone (or the code or name is not the one reported): "
                   "remove the waiver or correct it", about=(w.at,) if w.at else ())


def apply_waivers(result, waivers: Waivers):
    """The ModelResult with each waivable finding marked by the waiver that accepts it,
    and an LW284 warning for each of the model's own waivers that matches nothing."""
    def mark(f: Finding) -> Finding:
        if f.severity == "error" or f.waiver is not None:
            return f
        w = waivers.waiver_for(f.code, f.about)
        return f if w is None else replace(f, waiver=w)

    breaks = tuple(replace(b, warnings=tuple(mark(w) for w in b.warnings)) for b in result.breaks)
    findings = [mark(f) for f in result.findings]
    every = [*findings, *(w for b in breaks for w in b.warnings)]
    for w in waivers.items:
        if w.files is None and not any(w.covers(f) for f in every):
            findings.append(_unmatched(w, "in this model"))
    return replace(result, breaks=breaks, findings=tuple(findings))


# --- settings waivers: per file glob -----------------------------------------------------

def _covers_file(w: Waiver, file: str, base: Path) -> bool:
    from .run import _relative, matches_glob  # the same globs as include / exclude

    return not file.startswith("<") and matches_glob(_relative(Path(file), base), w.files or ())


def _base(settings) -> Path:
    return Path(settings.source).parent if getattr(settings, "source", None) else Path.cwd()


def settings_waivers_for(settings, file: str) -> tuple[Waiver, ...]:
    """The settings' waivers whose globs cover `file` (relative to the settings file's folder)."""
    waivers = tuple(getattr(settings, "waivers", ()) or ()) if settings is not None else ()
    if not waivers:
        return ()
    base = _base(settings)
    return tuple(w for w in waivers if _covers_file(w, file, base))


def unmatched_settings_waivers(settings, models) -> tuple[Finding, ...]:
    """LW284 for each settings waiver that covers checked models but matches no finding in
    any of them (one that covers none of this run's models cannot be judged, and is not)."""
    waivers = tuple(getattr(settings, "waivers", ()) or ()) if settings is not None else ()
    out = []
    for w in waivers:
        covered = [m for m in models if _covers_file(w, m.file, _base(settings))]
        if covered and not any(w.covers(f) for m in covered for f in m.every_finding):
            n = len(covered)
            out.append(_unmatched(w, f"in the {n} checked model{'s' if n != 1 else ''} its files cover"))
    return tuple(out)
