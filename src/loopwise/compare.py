"""Compare two sets of check results: what got better, what got worse.

Pure: takes the results of both sides (already checked, keyed by the model's
path relative to its root), matches models by path and breaks by name, and
returns frozen records. How one margin is compared and when its loss counts as a
regression is `loopwise.regression`; reading files, git and printing live in
`loopwise.sides` (the two sides: files, folders, git revisions),
`loopwise.commands.diff` and the `report.diff_*` modules.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Union

from .errors import Finding
# the margin rules, re-exported: `loopwise.compare` is where a diff's records are found
from .regression import MARGINS, MarginChange, MarginSpec, compare_margins, matters, requirement_words, same
from .results import BreakResult, ModelResult, RequirementResult
from .settings import Regression

__all__ = [
    "Unreadable", "MarginSpec", "MARGINS", "MarginChange", "VerdictChange",
    "RequirementChange", "BreakDiff", "ModelDiff", "DiffResult", "compare",
    "compare_models", "compare_breaks", "compare_margins", "compare_requirements", "Side",
    "matters", "requirement_words",
]


@dataclass(frozen=True)
class Unreadable:
    """A model that could not be read on one side, with its located errors."""

    file: str
    errors: tuple[Finding, ...]
    rendered: tuple[str, ...] = ()  # file:line:col, source line, caret, hint (made at the edge)


Side = Union[ModelResult, Unreadable, None]


@dataclass(frozen=True)
class VerdictChange:
    """How a verdict changed: stable or not, the closed-loop RHP pole count Z, and
    whether a closed-loop pole sits on the imaginary axis (marginal), before and after."""

    stable_before: bool
    stable_after: bool
    z_before: int
    z_after: int
    marginal_before: bool = False
    marginal_after: bool = False

    @property
    def direction(self) -> str:
        """`better` or `worse`: stability first, then fewer RHP poles, then leaving the axis."""
        if self.stable_before != self.stable_after:
            return "better" if self.stable_after else "worse"
        if self.z_before != self.z_after:
            return "better" if self.z_after < self.z_before else "worse"
        return "better" if self.marginal_before and not self.marginal_after else "worse"


@dataclass(frozen=True)
class RequirementChange:
    """How one requirement changed: its limit, value and whether it was met, before and
    after (None where it did not exist), in words (`status`) and, when it counts as
    one, the regression it makes."""

    metric: str
    op: str
    limit_before: float | None  # None: the requirement did not exist before
    limit_after: float | None   # None: it no longer exists
    value_before: float | None
    value_after: float | None
    met_before: bool | None
    met_after: bool | None
    status: str                 # "stopped being met" | "now met" | "added" | "removed" | "changed"
    regression: str | None
    unit: str = ""              # the metric's own unit (limits and values are in it)
    limit_text_before: str = ""  # the limit as the model wrote it ("" for an expression)
    limit_text_after: str = ""
    file: str = ""              # where the requirement is written (new side, else old); "" = the model
    line: int = 0


@dataclass(frozen=True)
class BreakDiff:
    """What changed at one break (matched by name): its place, verdict, margins and
    requirements, and the regressions among them; or that it was added or removed."""

    name: str
    status: str                 # "changed" | "added" | "removed"
    at_before: str | None
    at_after: str | None
    verdict: VerdictChange | None
    margins: tuple[MarginChange, ...]
    requirements: tuple[RequirementChange, ...]
    regressions: tuple[str, ...]
    stable_after: bool | None = None   # for added/removed breaks: their verdict on their side
    stable_before: bool | None = None
    line: int = 0                      # the `break` line (new side, else old)


@dataclass(frozen=True)
class ModelDiff:
    """What changed in one model (matched by its path relative to its side's root):
    its verdict, its breaks (the unchanged ones only counted), its errors on either
    side, and the regressions among all of it."""

    file: str
    status: str   # "changed" | "unchanged" | "added" | "removed" | "errors appeared"
                  # | "errors disappeared" | "still unreadable"
    model_before: str | None
    model_after: str | None
    verdict: VerdictChange | None
    breaks: tuple[BreakDiff, ...]
    breaks_unchanged: int
    errors_before: tuple[Finding, ...] = ()
    errors_after: tuple[Finding, ...] = ()
    rendered_errors: tuple[str, ...] = ()  # the NEW side's errors, rendered at the edge
    regressions: tuple[str, ...] = ()
    stable_after: bool | None = None
    breaks_after: int = 0

    @property
    def unreadable_after(self) -> bool:
        """Whether the model cannot be read on the new side (the diff then exits 2)."""
        return self.status in ("errors appeared", "still unreadable")


@dataclass(frozen=True)
class DiffResult:
    """A whole diff: every model of both sides, the policy that judged it, and where the
    settings came from."""

    old_label: str
    new_label: str
    models: tuple[ModelDiff, ...]
    policy: Regression
    settings: str = ""  # which settings judged both sides and set the policy, in words

    @property
    def regressions(self) -> tuple[str, ...]:
        """Every regression of every model, each prefixed with the model's path."""
        return tuple(f"{m.file}: {r}" for m in self.models for r in m.regressions)

    @property
    def unreadable(self) -> tuple[ModelDiff, ...]:
        """The models that cannot be read on the new side."""
        return tuple(m for m in self.models if m.unreadable_after)

    @property
    def exit_code(self) -> int:
        """2 when a model cannot be read on the NEW side, 1 on a regression, else 0."""
        if self.unreadable:
            return 2
        return 1 if self.regressions else 0

    def count(self, status: str) -> int:
        """How many models have this `status` (`changed`, `added`, ...)."""
        return sum(1 for m in self.models if m.status == status)


# --------------------------------------------------------------------------- requirements

def _req_key(reqs: tuple[RequirementResult, ...]) -> dict[tuple[str, str, int], RequirementResult]:
    """Requirements keyed by metric, operator and their order among equals (limits may change)."""
    seen: dict[tuple[str, str], int] = {}
    out = {}
    for r in reqs:
        n = seen.get((r.metric, r.op), 0)
        seen[(r.metric, r.op)] = n + 1
        out[(r.metric, r.op, n)] = r
    return out


def _requirement_change(b: RequirementResult | None, a: RequirementResult | None,
                        policy: Regression) -> RequirementChange | None:
    if b is not None and a is not None:
        if b.met == a.met and same(b.limit, a.limit) and same(b.value, a.value, a.unit):
            return None
        status = ("stopped being met" if b.met and not a.met else
                  "now met" if a.met and not b.met else "changed")
    else:
        status = "added" if b is None else "removed"
    regression = None
    if policy.requirement_stops_being_met and a is not None and not a.met and (b is None or b.met):
        regression = ("requirement stopped being met" if b is not None
                      else "requirement added and not met")
    r = a or b
    return RequirementChange(
        r.metric, r.op, b.limit if b else None, a.limit if a else None,
        b.value if b else None, a.value if a else None,
        b.met if b else None, a.met if a else None, status,
        None if regression is None else f"{regression}: {requirement_words(r)}",
        r.unit, b.limit_text if b else "", a.limit_text if a else "", r.file, r.line)


def compare_requirements(before: tuple[RequirementResult, ...], after: tuple[RequirementResult, ...],
                         policy: Regression) -> tuple[RequirementChange, ...]:
    """The requirements that changed between two versions of a break (matched by metric,
    operator and their order among equals), with the regression each makes under `policy`."""
    kb, ka = _req_key(before), _req_key(after)
    keys = list(kb) + [k for k in ka if k not in kb]
    changes = (_requirement_change(kb.get(k), ka.get(k), policy) for k in keys)
    return tuple(c for c in changes if c is not None)


# --------------------------------------------------------------------------- breaks

def _verdict(before_stable: bool, before_z: int, after_stable: bool, after_z: int,
             before_marginal: bool = False, after_marginal: bool = False) -> VerdictChange | None:
    if (before_stable, before_z, before_marginal) == (after_stable, after_z, after_marginal):
        return None
    return VerdictChange(before_stable, after_stable, before_z, after_z, before_marginal, after_marginal)


def _verdict_regression(v: VerdictChange | None, policy: Regression, what: str) -> str | None:
    if v is None or not policy.verdict_to_unstable:
        return None
    if v.stable_before and not v.stable_after:
        return f"{what} became unstable (Z {v.z_before} -> {v.z_after})"
    return None


def compare_breaks(before: BreakResult, after: BreakResult, policy: Regression) -> BreakDiff | None:
    """The changes of one break (matched by name); None when nothing changed."""
    verdict = _verdict(before.stable, before.closed_loop_rhp_poles, after.stable,
                       after.closed_loop_rhp_poles, before.marginal, after.marginal)
    margins: tuple[MarginChange, ...] = ()
    if before.margins is not None and after.margins is not None:
        margins = compare_margins(before.margins, after.margins, policy, after.requirements)
    reqs = compare_requirements(before.requirements, after.requirements, policy)
    if verdict is None and not margins and not reqs and before.at == after.at:
        return None
    regressions = [r for r in (_verdict_regression(verdict, policy, f"break {after.name}"),) if r]
    regressions += [f"break {after.name}: {m.regression}" for m in margins if m.regression]
    regressions += [f"break {after.name}: {r.regression}" for r in reqs if r.regression]
    return BreakDiff(after.name, "changed", before.at, after.at, verdict, margins, reqs,
                     tuple(regressions), stable_after=after.stable, stable_before=before.stable,
                     line=after.line)


def _added_break(after: BreakResult, policy: Regression) -> BreakDiff:
    """A new break: a regression if it is unstable or misses a requirement (new and not met)."""
    reqs = compare_requirements((), after.requirements, policy)
    regressions = []
    if policy.verdict_to_unstable and not after.stable:
        regressions.append(f"break {after.name} added and unstable "
                           f"(Z {after.closed_loop_rhp_poles})")
    regressions += [f"break {after.name}: {r.regression}" for r in reqs if r.regression]
    return BreakDiff(after.name, "added", None, after.at, None, (), reqs, tuple(regressions),
                     stable_after=after.stable, line=after.line)


def _removed_break(before: BreakResult) -> BreakDiff:
    return BreakDiff(before.name, "removed", before.at, None, None, (), (), (),
                     stable_before=before.stable, line=before.line)


# --------------------------------------------------------------------------- models

def _readable_pair(file: str, before: ModelResult, after: ModelResult, policy: Regression) -> ModelDiff:
    verdict = _verdict(before.stable, before.closed_loop_rhp_poles,
                       after.stable, after.closed_loop_rhp_poles)
    old = {b.name: b for b in before.breaks}
    new = {b.name: b for b in after.breaks}
    diffs: list[BreakDiff] = []
    unchanged = 0
    for name in [b.name for b in after.breaks] + [n for n in old if n not in new]:
        if name not in old:
            diffs.append(_added_break(new[name], policy))
        elif name not in new:
            diffs.append(_removed_break(old[name]))
        else:
            d = compare_breaks(old[name], new[name], policy)
            if d is None:
                unchanged += 1
            else:
                diffs.append(d)
    regressions = [r for d in diffs for r in d.regressions]
    model_regression = _verdict_regression(verdict, policy, "model")
    if model_regression and not any(d.verdict and d.verdict.stable_before and not d.verdict.stable_after
                                    for d in diffs):
        regressions.insert(0, model_regression)  # said once: a break's own line says it already
    changed = verdict is not None or diffs or before.model != after.model
    return ModelDiff(file, "changed" if changed else "unchanged", before.model, after.model,
                     verdict, tuple(diffs), unchanged, regressions=tuple(regressions),
                     stable_after=after.stable, breaks_after=len(after.breaks))


def _new_model(file: str, after: ModelResult, policy: Regression, status: str,
               errors_before: tuple[Finding, ...] = ()) -> ModelDiff:
    """A model with nothing to compare against: every break counts as added."""
    diffs = tuple(_added_break(b, policy) for b in after.breaks)
    regressions = []
    if policy.verdict_to_unstable and not after.stable and not any(d.regressions for d in diffs):
        regressions.append(f"model {status} and unstable (Z {after.closed_loop_rhp_poles})")
    regressions += [r for d in diffs for r in d.regressions]
    return ModelDiff(file, status, None, after.model, None, diffs, 0,
                     errors_before=errors_before, regressions=tuple(regressions),
                     stable_after=after.stable, breaks_after=len(after.breaks))


def compare_models(file: str, before: Side, after: Side, policy: Regression) -> ModelDiff:
    """One model path on both sides (None: absent on that side)."""
    if before is None and after is None:
        raise ValueError(f"{file}: absent on both sides")
    if isinstance(after, Unreadable):
        status = "still unreadable" if isinstance(before, Unreadable) else "errors appeared"
        return ModelDiff(
            file, status, getattr(before, "model", None), None, None, (), 0,
            errors_before=before.errors if isinstance(before, Unreadable) else (),
            errors_after=after.errors, rendered_errors=after.rendered)
    if after is None:
        return ModelDiff(file, "removed", getattr(before, "model", None), None, None, (), 0,
                         errors_before=before.errors if isinstance(before, Unreadable) else ())
    if before is None:
        return _new_model(file, after, policy, "added")
    if isinstance(before, Unreadable):
        return _new_model(file, after, policy, "errors disappeared", before.errors)
    return _readable_pair(file, before, after, policy)


def compare(old: Mapping[str, Side], new: Mapping[str, Side], policy: Regression | None = None,
            old_label: str = "old", new_label: str = "new", settings: str = "") -> DiffResult:
    """Compare two sets of results keyed by the model's relative path (sorted output).

    `settings` says in words where the settings (and so the policy) came from."""
    policy = policy or Regression()
    files = sorted(set(old) | set(new))
    models = tuple(compare_models(f, old.get(f), new.get(f), policy) for f in files)
    return DiffResult(old_label, new_label, models, policy, settings)
