"""Frozen results of a sweep and their JSON contract (`"sweep_schema": 1`, docs/results.md).

"Unbounded" (no crossover anywhere in the box) is always ``None`` in JSON, as in
`check`'s results; every worst value carries `at`, the param values where it was found.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import Finding
from ..results import CAUTION, RequirementResult, error_to_dict, json_number

__all__ = ["SWEEP_SCHEMA", "SweepParam", "Worst", "Boundary", "SweepRequirement", "BreakSweep",
           "SampleCounts", "PlantTable", "SweepModelResult", "SweepRun", "WORST_KEYS", "format_at"]

SWEEP_SCHEMA = 1

#: worst-margin keys of the JSON contract, in report order, with the metric each comes from
WORST_KEYS: tuple[tuple[str, str], ...] = (
    ("phase_margin_deg", "phase_margin"), ("gain_margin_up_db", "gain_margin_up"),
    ("gain_margin_down_db", "gain_margin_down"), ("delay_margin_s", "delay_margin"),
    ("disk_margin_alpha", "disk_margin"), ("sensitivity_peak", "sensitivity_peak"),
    ("complementary_peak", "complementary_peak"),
)


def format_at(at) -> str:
    """`J=0.00024, Td=0.00015`: param values in the form `--set` takes, to re-run that plant."""
    if at is None:
        return "-"
    return ", ".join(f"{name}={value:.4g}" for name, value in at) if at else "the nominal point"


def _at(at: tuple[tuple[str, float], ...] | None) -> dict | None:
    return None if at is None else {name: json_number(v) for name, v in at}


@dataclass(frozen=True)
class SweepParam:
    """One swept param: its nominal value and its range [lo, hi]."""

    name: str
    nominal: float
    lo: float
    hi: float

    def to_dict(self) -> dict:
        """The param as the sweep contract writes it."""
        return {"name": self.name, "nominal": json_number(self.nominal), "lo": json_number(self.lo), "hi": json_number(self.hi)}


@dataclass(frozen=True)
class Worst:
    """The worst value of one margin over the evaluated plants and where it was found.

    `value` is in the margin's unit as `check` reports it (a gain margin down is a
    negative dB figure); math.inf / -inf when unbounded at every plant; None when no
    plant had a stable closed loop (no margins)."""

    value: float | None
    at: tuple[tuple[str, float], ...] | None
    nominal: float | None

    def to_dict(self) -> dict:
        """The worst value as the sweep contract writes it (unbounded: null)."""
        return {"value": json_number(self.value), "at": _at(self.at), "nominal": json_number(self.nominal)}


@dataclass(frozen=True)
class Boundary:
    """Where stability is lost along a segment: the last stable and the first unstable
    plant found by bisection (the boundary lies between them)."""

    stable_at: tuple[tuple[str, float], ...]
    unstable_at: tuple[tuple[str, float], ...]

    def to_dict(self) -> dict:
        """The boundary as the sweep contract writes it."""
        return {"stable_at": _at(self.stable_at), "unstable_at": _at(self.unstable_at)}


@dataclass(frozen=True)
class SweepRequirement:
    """A requirement judged at the worst plant found for its metric (`at`)."""

    result: RequirementResult
    at: tuple[tuple[str, float], ...] | None

    def to_dict(self) -> dict:
        """The requirement as check's contract writes it, with the plant it was judged at."""
        return {**self.result.to_dict(), "note": self.result.note, "at": _at(self.at)}


@dataclass(frozen=True, eq=False)
class BreakSweep:
    """One break over the box: how many plants were analysed there and how many were not
    stable, the worst of each margin and where, where stability is lost, each
    requirement at the worst plant for its metric, and the warnings plants gave."""

    name: str
    at: str
    line: int
    samples: int             # plants analysed at this break
    unstable_samples: int    # of those, closed loop not stable (unstable or marginal)
    worst: tuple[tuple[str, Worst], ...]  # WORST_KEYS order
    boundaries: tuple[Boundary, ...]
    requirements: tuple[SweepRequirement, ...]
    first_unstable_at: tuple[tuple[str, float], ...] | None = None
    warnings: tuple[tuple[str, int], ...] = ()  # (code, plants that gave it)

    @property
    def stable_everywhere(self) -> bool:
        """Whether every plant analysed at this break was stable (and there was one)."""
        return self.unstable_samples == 0 and self.samples > 0

    @property
    def requirements_met(self) -> bool:
        """Whether every requirement holds at the worst plant found for its metric."""
        return all(r.result.met for r in self.requirements)

    def worst_of(self, key: str) -> Worst:
        """The `Worst` of one margin (a `WORST_KEYS` key)."""
        return dict(self.worst)[key]

    def to_dict(self) -> dict:
        """The break as the sweep contract writes it."""
        return {
            "name": self.name, "at": self.at, "line": self.line,
            "stable_everywhere": self.stable_everywhere,
            "samples": self.samples, "unstable_samples": self.unstable_samples,
            "first_unstable_at": _at(self.first_unstable_at),
            "worst": {key: w.to_dict() for key, w in self.worst},
            "boundaries": [b.to_dict() for b in self.boundaries],
            "requirements": [r.to_dict() for r in self.requirements],
            "warnings": [{"code": c, "samples": n} for c, n in self.warnings],
        }


@dataclass(frozen=True)
class SampleCounts:
    """Plants evaluated, by how they were chosen."""

    nominal: int = 0
    corners: int = 0
    space_filling: int = 0
    local_search: int = 0
    boundary: int = 0

    @property
    def total(self) -> int:
        """Every plant evaluated."""
        return self.nominal + self.corners + self.space_filling + self.local_search + self.boundary

    def to_dict(self) -> dict:
        """The counts as the sweep contract writes them (`design`)."""
        return {"nominal": self.nominal, "corners": self.corners, "space_filling": self.space_filling,
                "local_search": self.local_search, "boundary": self.boundary}


@dataclass(frozen=True, eq=False)
class PlantTable:
    """Every analysed plant in numbers, for pictures (not part of the JSON contract).

    `values[i]` the swept params' values of plant i; `phases[i]` the step that chose it;
    `stable[i, k]` its verdict at break k (False where it could not be analysed);
    `margins[i, k, j]` the margin WORST_KEYS[j] as reported (NaN where not claimed,
    +-inf where unbounded)."""

    names: tuple[str, ...]
    values: np.ndarray
    phases: tuple[str, ...]
    stable: np.ndarray
    margins: np.ndarray


@dataclass(frozen=True, eq=False)
class SweepModelResult:
    """One model over its box: the swept and the fixed params, what was sampled, each
    break over the box and the model's findings; for pictures and the report, every
    plant in numbers, the nominal point's full result and the parsed model."""

    file: str
    model: str
    params: tuple[SweepParam, ...]          # the swept (ranged) params
    fixed: tuple[tuple[str, float], ...]    # params set with --set
    seed: int
    counts: SampleCounts
    density: str                            # the space-filling spacing in words
    breaks: tuple[BreakSweep, ...]
    findings: tuple[Finding, ...] = ()      # the nominal model's notes and warnings, and the sweep's
    search_stopped: bool = False            # the local search ran out of its budget
    failed_samples: int = 0                 # plants that could not be analysed (see the run's errors)
    plants: PlantTable | None = None        # every plant in numbers (for pictures)
    nominal: object | None = None           # the nominal plant's full ModelResult (not in the JSON contract)
    parsed: object | None = None            # the parsed model with its includes' trees (`language.resolve.Parsed`),
                                            # which resolves any plant without the disk (not in the JSON contract)

    @property
    def samples(self) -> int:
        """Every plant evaluated (the nominal one included)."""
        return self.counts.total

    @property
    def stable_everywhere(self) -> bool:
        """Whether every plant was analysed and stable at every break."""
        return self.failed_samples == 0 and all(b.stable_everywhere for b in self.breaks)

    @property
    def requirements_met(self) -> bool:
        """Whether every requirement holds at the worst plant found for its metric."""
        return all(b.requirements_met for b in self.breaks)

    @property
    def ok(self) -> bool:
        """Stable at every plant, every requirement met: the model passes (warnings aside)."""
        return self.stable_everywhere and self.requirements_met

    @property
    def open_warnings(self) -> bool:
        """Whether a warning counts against the sweep: one of the model's that is not waived
        (`Finding.counts`), or a break warning at some plant (the plants record only those
        that count)."""
        return any(f.counts for f in self.findings) or any(b.warnings for b in self.breaks)

    def passes(self, fail_on_warnings: bool = False) -> bool:
        """The exit rule per model (`SweepRun.exit_status`)."""
        return self.ok and not (fail_on_warnings and self.open_warnings)

    def to_dict(self) -> dict:
        """The model as the sweep contract writes it (docs/results.md, docs/sweep.schema.json)."""
        return {
            "file": self.file, "model": self.model, "stable_everywhere": self.stable_everywhere,
            "params": [p.to_dict() for p in self.params],
            "fixed": _at(self.fixed),
            "seed": self.seed,
            "samples": self.samples,
            "design": self.counts.to_dict(),
            "density": self.density,
            "search_stopped_at_budget": self.search_stopped,
            "failed_samples": self.failed_samples,
            "evidence": "sampled, not a proof",
            "breaks": [b.to_dict() for b in self.breaks],
            "findings": [f.to_dict() for f in self.findings],
        }


@dataclass(frozen=True, eq=False)
class SweepRun:
    """A whole sweep: every model swept, the errors of files and plants that could not be
    read or analysed, and the warnings about the run itself."""

    models: tuple[SweepModelResult, ...]
    errors: tuple[Finding, ...]
    version: str = ""
    findings: tuple[Finding, ...] = ()  # about the run itself: a settings waiver that matched nothing (LW284)

    @property
    def exit_code(self) -> int:
        """The exit code without fail_on_warnings (`exit_status`)."""
        return self.exit_status()

    def exit_status(self, fail_on_warnings: bool = False) -> int:
        """The whole exit policy of `loopwise sweep`: 2 a model or a plant could not be
        read; 1 a plant unstable somewhere, a requirement not met at the worst plant
        found, or (with fail_on_warnings) a warning that counts; 0 otherwise."""
        if self.errors:
            return 2
        run_warned = fail_on_warnings and any(f.counts for f in self.findings)
        return 0 if all(m.passes(fail_on_warnings) for m in self.models) and not run_warned else 1

    def to_dict(self) -> dict:
        """The sweep as its JSON contract (`"sweep_schema": 1`)."""
        return {
            "sweep_schema": SWEEP_SCHEMA, "tool": "loopwise", "command": "sweep", "version": self.version,
            "caution": CAUTION,
            "models": [m.to_dict() for m in self.models],
            "findings": [f.to_dict() for f in self.findings],
            "errors": [error_to_dict(e) for e in self.errors],
        }
