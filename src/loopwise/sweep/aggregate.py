"""From the evaluated plants to the sweep's results: worst margins and where, unstable
counts, boundaries, and requirements judged at the worst plant found for their metric.
Pure functions; no I/O.
"""
from __future__ import annotations

import math
from collections import Counter
from collections.abc import Sequence

import numpy as np

from ..errors import Finding, Span
from ..language.requirements import METRICS
from ..results import RequirementResult
from .design import to_values
from .evaluate import SampleOutcome
from .results import WORST_KEYS, Boundary, BreakSweep, PlantTable, SweepRequirement, Worst, format_at
from .search import WORST, Evidence, Target, worst_index

__all__ = ["Box", "break_results", "sample_errors", "sample_warnings", "plant_table"]

_SENSE = dict(WORST)


class Box:
    """The swept params and their ranges: unit-cube points to named param values."""

    def __init__(self, names: Sequence[str], lo: Sequence[float], hi: Sequence[float]):
        self.names = tuple(names)
        self.lo = np.asarray(lo, float)
        self.hi = np.asarray(hi, float)

    def values(self, unit) -> np.ndarray:
        """Param values (one row per point) of points of the unit cube (one row each)."""
        return to_values(np.atleast_2d(unit), self.lo, self.hi)

    def at(self, unit) -> tuple[tuple[str, float], ...]:
        """(name, value) of each swept param at one point of the unit cube."""
        return tuple(zip(self.names, (float(v) for v in self.values(unit)[0])))


def _reported(metric: str, value: float | None) -> float | None:
    """A metric value as `check` reports the margin (gain margin down as a negative dB figure)."""
    if value is None:
        return None
    return -value if metric == "gain_margin_down" else value


def _worst(evidence: Evidence, box: Box, brk: int) -> tuple[tuple[str, Worst], ...]:
    out = []
    nominal = evidence.outcomes[0]
    for key, metric in WORST_KEYS:
        i = worst_index(evidence, Target(brk, metric, _SENSE[metric]))
        nominal_value = None
        if nominal.error is None and brk < len(nominal.breaks):
            nominal_value = _reported(metric, nominal.breaks[brk].value(metric))
        if i is None:
            out.append((key, Worst(None, None, nominal_value)))
        else:
            value = evidence.outcomes[i].breaks[brk].value(metric)
            at = box.at(evidence.points[i]) if math.isfinite(value) else None  # unbounded everywhere
            out.append((key, Worst(_reported(metric, value), at, nominal_value)))
    return tuple(out)


def _judged(req, brk: int, evidence: Evidence, box: Box) -> SweepRequirement:
    unit = METRICS[req.metric].unit

    def result(value, met, note):
        return RequirementResult(req.metric, req.op, req.limit, value, met, req.span.line, req.span.file,
                                 note, unit, req.limit_text)

    seen = [(i, o.breaks[brk]) for i, o in enumerate(evidence.outcomes)
            if o.error is None and brk < len(o.breaks)]
    if not seen:
        return SweepRequirement(result(None, False, "no plant could be analysed"), None)
    for i, b in seen:
        if not b.stable:
            verdict = "marginal" if b.marginal else "unstable"
            return SweepRequirement(result(None, False, f"closed loop {verdict} at this plant: no margins"),
                                    box.at(evidence.points[i]))
    for i, b in seen:
        if b.value(req.metric) is None:
            return SweepRequirement(result(None, False, b.note(req.metric)), box.at(evidence.points[i]))
    # the plant that threatens the limit most: the smallest value for >= and >, the largest otherwise
    sign = -1.0 if req.op in (">=", ">") else 1.0
    i, b = max(seen, key=lambda ib: sign * ib[1].value(req.metric))
    value = b.value(req.metric)
    return SweepRequirement(result(value, req.holds(value), None), box.at(evidence.points[i]))


def break_results(nominal, model, evidence: Evidence, box: Box, brackets) -> tuple[BreakSweep, ...]:
    """Per break of the nominal result (a ModelResult): the sweep's figures over every plant."""
    out = []
    for brk, b in enumerate(nominal.breaks):
        seen = [(i, o.breaks[brk]) for i, o in enumerate(evidence.outcomes)
                if o.error is None and brk < len(o.breaks)]
        unstable = [i for i, s in seen if not s.stable]
        warnings = Counter(code for _, s in seen for code in dict.fromkeys(s.warnings))
        reqs = tuple(_judged(r, brk, evidence, box) for r in model.requirements if r.target in (b.name, "*"))
        out.append(BreakSweep(
            name=b.name, at=b.at, line=b.line, samples=len(seen), unstable_samples=len(unstable),
            worst=_worst(evidence, box, brk),
            boundaries=tuple(Boundary(box.at(k.stable), box.at(k.unstable)) for k in brackets[brk]),
            requirements=reqs,
            first_unstable_at=box.at(evidence.points[unstable[0]]) if unstable else None,
            warnings=tuple(sorted(warnings.items())),
        ))
    return tuple(out)


def sample_errors(file: str, evidence: Evidence, box: Box) -> tuple[int, tuple[Finding, ...]]:
    """How many plants could not be analysed, and one located error that says where."""
    failed: list[tuple[int, SampleOutcome]] = [(i, o) for i, o in enumerate(evidence.outcomes)
                                               if o.error is not None]
    if not failed:
        return 0, ()
    i, first = failed[0]
    code, message = first.error
    at = box.at(evidence.points[i])
    sets = " ".join(f"--set {name}={value:.6g}" for name, value in at)
    return len(failed), (Finding(
        "error", "LW601", f"the model could not be analysed at {len(failed)} of {len(evidence)} sampled "
        f"plant(s); the first at {format_at(at)}: {code} {message}", Span(file, 0, 0),
        f"`loopwise check {file} {sets}` shows the located error at that plant"),)


def sample_warnings(file: str, evidence: Evidence) -> tuple[Finding, ...]:
    """Model-level warnings that some plants gave, each once with how many plants."""
    from ..diagnostics import CODES

    counts = Counter(code for o in evidence.outcomes if o.error is None for code in dict.fromkeys(o.warnings))
    return tuple(Finding("warning", code, f"at {n} of {len(evidence)} sampled plants: "
                         f"{CODES[code].summary if code in CODES else code}", Span(file, 0, 0))
                 for code, n in sorted(counts.items()))


def plant_table(evidence: Evidence, box: Box, n_breaks: int) -> PlantTable:
    """Every plant in numbers: param values, verdicts and margins per break."""
    n = len(evidence)
    stable = np.zeros((n, n_breaks), bool)
    margins = np.full((n, n_breaks, len(WORST_KEYS)), np.nan)
    for i, o in enumerate(evidence.outcomes):
        if o.error is not None:
            continue
        for k, b in enumerate(o.breaks[:n_breaks]):
            stable[i, k] = b.stable
            if b.stable:
                for j, (_, metric) in enumerate(WORST_KEYS):
                    v = _reported(metric, b.value(metric))
                    margins[i, k, j] = np.nan if v is None else v
    values = box.values(np.array(evidence.points)) if box.names else np.zeros((n, 0))
    return PlantTable(box.names, values, tuple(evidence.phases), stable, margins)
