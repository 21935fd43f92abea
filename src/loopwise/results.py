"""Frozen result objects: what a check finds, what every reporter renders.

`to_dict()` gives the JSON contract (`"schema": 2`, see docs/results.md) with a
stable key order, so diffs of JSON output stay clean. "No crossover" or
"unbounded" is always ``None``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import Finding

__all__ = [
    "SCHEMA_VERSION", "GainCrossover", "PhaseCrossover", "DiskMargin", "Peak",
    "Margins", "RequirementResult", "LoopResponse", "HiddenMode", "BreakResult", "ModelResult",
    "RunResult", "CAUTION", "error_to_dict", "json_number", "LIBRARY_NOTE", "is_library",
]

SCHEMA_VERSION = 2

CAUTION = (
    "Results describe the linear model only: an analysis aid, not a substitute for "
    "the applicable standards and a qualified engineer's review."
)

#: the analysis's note for a file of params and blocks only (brought in with `use`)
LIBRARY_NOTE = "LW491"


def is_library(m) -> bool:
    """Whether a model's result (a check's or a sweep's) is that of a library of params and
    blocks for `use`: no breaks, and the analysis's note that there is nothing to check."""
    return not m.breaks and any(f.code == LIBRARY_NOTE for f in m.findings)


def json_number(x: float | None) -> float | None:
    """A number for JSON, which has no infinity: a non-finite one is written as null."""
    if x is None:
        return None
    x = float(x)
    return x if math.isfinite(x) else None


def error_to_dict(e: Finding) -> dict:
    """An error of a model that could not be read, as the JSON contracts write it."""
    return {"file": e.span.file, "line": e.span.line, "col": e.span.col,
            "code": e.code, "message": e.message, "hint": e.hint}


@dataclass(frozen=True)
class GainCrossover:
    """|L(j w)| = 1: the lag that would put L on -1 and the phase margin there."""

    freq: float
    lag_deg: float
    phase_margin_deg: float

    def to_dict(self) -> dict:
        """The crossover as the results contract writes it."""
        return {"freq": json_number(self.freq), "lag_deg": json_number(self.lag_deg),
                "phase_margin_deg": json_number(self.phase_margin_deg)}


@dataclass(frozen=True)
class PhaseCrossover:
    """L(j w) real and negative: the gain factor 1/|L| that would put L on -1, in dB."""

    freq: float
    gain_margin_db: float

    def to_dict(self) -> dict:
        """The crossover as the results contract writes it."""
        return {"freq": json_number(self.freq), "gain_margin_db": json_number(self.gain_margin_db)}


@dataclass(frozen=True)
class DiskMargin:
    """Balanced disk margin (Seiler, Packard & Gahinet 2020)."""

    alpha: float
    gain_db: tuple[float, float]
    phase_deg: float
    freq: float

    def to_dict(self) -> dict:
        """The disk margin as the results contract writes it."""
        return {"alpha": json_number(self.alpha), "gain_db": [json_number(self.gain_db[0]), json_number(self.gain_db[1])],
                "phase_deg": json_number(self.phase_deg), "freq": json_number(self.freq)}


@dataclass(frozen=True)
class Peak:
    """The peak of a closed-loop magnitude (|S| or |T|) and the frequency where it lies."""

    value: float
    freq: float

    @property
    def db(self) -> float:
        """The peak in dB (20 log10 of the value)."""
        return 20.0 * math.log10(self.value) if self.value > 0 else -math.inf

    def to_dict(self) -> dict:
        """The peak as the results contract writes it (value, dB and frequency)."""
        return {"value": json_number(self.value), "db": json_number(self.db), "freq": json_number(self.freq)}


@dataclass(frozen=True)
class Margins:
    """Every margin of one break (claimed only when the closed loop is stable)."""

    gain_crossovers: tuple[GainCrossover, ...]
    phase_crossovers: tuple[PhaseCrossover, ...]
    phase_margin_deg: float | None
    gain_margin_up_db: float | None
    gain_margin_down_db: float | None
    delay_margin_s: float | None
    disk_margin: DiskMargin | None
    sensitivity_peak: Peak | None
    complementary_peak: Peak | None
    crossover_freq: float | None
    #: phase crossovers found but not listed (farther than docs/margins.md's distance from
    #: the gain margins; a delayed loop has hundreds)
    phase_crossovers_omitted: int = 0

    @property
    def gain_margin_db(self) -> float | None:
        """The smaller of the up and down margins, in dB (None: unbounded both ways)."""
        vals = [v for v in (self.gain_margin_up_db,
                            None if self.gain_margin_down_db is None else -self.gain_margin_down_db)
                if v is not None]
        return min(vals) if vals else None


@dataclass(frozen=True)
class RequirementResult:
    """One requirement judged at one break: the metric, operator and limit as written,
    the value in the metric's own unit (None: it has none, `note` says why), whether it
    is met, and where it is written (`file` empty: in the model itself)."""

    metric: str
    op: str
    limit: float
    value: float | None  # None: the metric does not exist (e.g. no crossover) or unbounded
    met: bool
    line: int
    file: str = ""
    note: str | None = None
    unit: str = ""  # the metric's own unit, for display ("deg", "dB", "s", "rad/s", "")
    limit_text: str = ""  # the limit as written in the model (`6dB`, `0.5Hz`); "" for an expression

    def to_dict(self) -> dict:
        """The requirement as the results contract writes it."""
        return {"metric": self.metric, "op": self.op, "limit": json_number(self.limit),
                "limit_text": self.limit_text, "value": json_number(self.value), "met": bool(self.met),
                "line": self.line}


@dataclass(frozen=True, eq=False)
class LoopResponse:
    """The engine's own samples of L along the contour (the plots use these).

    `s` are the contour points of the upper half in traversal order: the
    imaginary axis from 0 (or the indentation around s = 0) upwards, with the
    indentations around axis poles; the closing arc is not sampled (its phase
    change comes from the certificate, see docs/method.md), and beyond the last
    point |L| stays small. `L` is the loop transfer there; `on_axis` marks the
    points on the imaginary axis itself (used for Bode views).
    """

    s: np.ndarray
    L: np.ndarray
    on_axis: np.ndarray
    axis_poles: tuple[float, ...] = ()  # frequencies of indented poles (rad/s, >= 0)

    @property
    def freq(self) -> np.ndarray:
        """The frequencies (rad/s) of the samples on the imaginary axis."""
        return self.s[self.on_axis].imag

    @property
    def axis_L(self) -> np.ndarray:
        """L at the samples on the imaginary axis (the Bode views' data)."""
        return self.L[self.on_axis]


@dataclass(frozen=True)
class HiddenMode:
    """A closed-loop pole that an exact pole-zero cancellation hides from the loop transfers.

    `code` is the finding that names it: LW281 (inside one block), LW487 (between blocks,
    in the right half plane), LW488 (between blocks, on the imaginary axis), LW484 (a
    block driven by an input only). One entry per pole of the upper half plane (a
    conjugate pair is one entry with multiplicity counted per pole of the pair).
    `counted` is False only where a waiver accepts the mode: then it is left out of Z
    and of the marginal verdict.
    """

    pole: complex
    multiplicity: int
    code: str
    pole_blocks: tuple[str, ...]
    zero_blocks: tuple[str, ...] = ()
    counted: bool = True

    @property
    def on_axis(self) -> bool:
        """Whether the hidden pole lies on the imaginary axis."""
        return self.pole.real == 0.0

    @property
    def rhp_count(self) -> int:
        """Closed-loop poles it adds in the open right half plane (both of a conjugate pair)."""
        if self.pole.real <= 0.0:
            return 0
        return self.multiplicity * (2 if self.pole.imag > 0 else 1)

    def to_dict(self) -> dict:
        """The hidden mode as the results contract writes it."""
        return {"real": json_number(self.pole.real), "imag": json_number(self.pole.imag), "freq": json_number(abs(self.pole.imag)),
                "on_axis": self.on_axis, "multiplicity": int(self.multiplicity), "code": self.code,
                "pole_blocks": list(self.pole_blocks), "zero_blocks": list(self.zero_blocks),
                "counted": bool(self.counted)}


@dataclass(frozen=True, eq=False)
class BreakResult:
    """The verdict and margins at one break: P (open-loop RHP poles), N (clockwise
    encirclements of -1), Z = N + P, whether a closed-loop pole sits on the axis, the
    margins (None: the closed loop is not stable), the requirements judged, the
    warnings at its `break` line, and the samples of L the plots draw."""

    name: str
    at: str
    line: int
    stable: bool
    open_loop_rhp_poles: int
    encirclements: int
    closed_loop_rhp_poles: int
    marginal: bool
    marginal_freq: float | None
    margins: Margins | None  # None when the closed loop is not stable
    requirements: tuple[RequirementResult, ...]
    warnings: tuple[Finding, ...]  # this break's warnings, located at its `break` line
    stabilising_gains: tuple[tuple[float, float], ...] = ()  # factor intervals k with k*L stable
    enclosed_by: str | None = None
    separation: float | None = None
    response: LoopResponse | None = None
    #: why the break is marginal: "loop" (1 + L touches 0 on the axis), "hidden" (a closed-loop
    #: pole on the axis that a cancellation hides, see ModelResult.hidden_modes), or None
    marginal_cause: str | None = None

    @property
    def requirements_met(self) -> bool:
        """Whether every requirement of the break is met."""
        return all(r.met for r in self.requirements)

    @property
    def open_warnings(self) -> tuple[Finding, ...]:
        """This break's warnings that count for fail_on_warnings (not waived)."""
        return tuple(w for w in self.warnings if w.counts)

    def to_dict(self) -> dict:
        """The break as the results contract writes it (docs/results.md, *break*)."""
        m = self.margins
        d = {
            "name": self.name, "at": self.at, "line": self.line, "stable": bool(self.stable),
            "open_loop_rhp_poles": int(self.open_loop_rhp_poles),
            "encirclements": int(self.encirclements),
            "closed_loop_rhp_poles": int(self.closed_loop_rhp_poles),
            "marginal": bool(self.marginal),
            "marginal_freq": json_number(self.marginal_freq),
            "marginal_cause": self.marginal_cause,
            "gain_crossovers": [g.to_dict() for g in m.gain_crossovers] if m else [],
            "phase_crossovers": [p.to_dict() for p in m.phase_crossovers] if m else [],
            "phase_crossovers_omitted": int(m.phase_crossovers_omitted) if m else 0,
            "phase_margin_deg": json_number(m.phase_margin_deg) if m else None,
            "gain_margin_up_db": json_number(m.gain_margin_up_db) if m else None,
            "gain_margin_down_db": json_number(m.gain_margin_down_db) if m else None,
            "delay_margin_s": json_number(m.delay_margin_s) if m else None,
            "disk_margin": m.disk_margin.to_dict() if m and m.disk_margin else None,
            "sensitivity_peak": m.sensitivity_peak.to_dict() if m and m.sensitivity_peak else None,
            "complementary_peak": m.complementary_peak.to_dict() if m and m.complementary_peak else None,
            "crossover_freq": json_number(m.crossover_freq) if m else None,
            "enclosed_by": self.enclosed_by,
            "separation": json_number(self.separation),
            "stabilising_gains": [[json_number(a), json_number(b)] for a, b in self.stabilising_gains],
            "requirements": [r.to_dict() for r in self.requirements],
            "warnings": [w.to_dict() for w in self.warnings],
        }
        return d


@dataclass(frozen=True, eq=False)
class ModelResult:
    """One model checked: whether its closed loop is stable and how many poles lie in the
    right half plane, every break, its findings and the modes cancellations hide."""

    file: str
    model: str
    stable: bool
    closed_loop_rhp_poles: int
    breaks: tuple[BreakResult, ...]
    findings: tuple[Finding, ...] = ()  # warnings and notes (errors make the model unreadable)
    hidden_modes: tuple[HiddenMode, ...] = ()  # closed-loop poles in Re s >= 0 hidden by cancellations

    @property
    def requirements_met(self) -> bool:
        """Whether every requirement of every break is met."""
        return all(b.requirements_met for b in self.breaks)

    @property
    def ok(self) -> bool:
        """Stable with every requirement met: the model passes (warnings aside)."""
        return self.stable and self.requirements_met

    @property
    def every_finding(self) -> tuple[Finding, ...]:
        """The model's findings, then each break's warnings."""
        return self.findings + tuple(w for b in self.breaks for w in b.warnings)

    @property
    def open_warnings(self) -> tuple[Finding, ...]:
        """The warnings that count for fail_on_warnings: every one not waived (`Finding.counts`)."""
        return tuple(f for f in self.every_finding if f.counts)

    def to_dict(self) -> dict:
        """The model as the results contract writes it (docs/results.md, *model*)."""
        return {
            "file": self.file, "model": self.model, "stable": bool(self.stable),
            "closed_loop_rhp_poles": int(self.closed_loop_rhp_poles),
            "breaks": [b.to_dict() for b in self.breaks],
            "hidden_modes": [h.to_dict() for h in self.hidden_modes],
            "findings": [f.to_dict() for f in self.findings],
        }


@dataclass(frozen=True, eq=False)
class RunResult:
    """All models of one run, in a stable order, the errors of those not read, and
    warnings about the run itself (a settings waiver that matched nothing)."""

    models: tuple[ModelResult, ...]
    errors: tuple[Finding, ...]
    version: str = ""
    findings: tuple[Finding, ...] = ()

    @property
    def open_warnings(self) -> tuple[Finding, ...]:
        """Every warning of the run that counts for fail_on_warnings."""
        return tuple(f for m in self.models for f in m.open_warnings) + tuple(
            f for f in self.findings if f.counts)

    @property
    def exit_code(self) -> int:
        """The exit code without fail_on_warnings: 2 a model could not be read, 1 a model
        does not pass, else 0 (`run.exit_status` adds the warnings)."""
        if self.errors:
            return 2
        return 0 if all(m.ok for m in self.models) else 1

    def to_dict(self) -> dict:
        """The run as its JSON contract (`"schema": 2`, docs/results.md)."""
        return {
            "schema": SCHEMA_VERSION, "tool": "loopwise", "version": self.version,
            "caution": CAUTION,
            "models": [m.to_dict() for m in self.models],
            "errors": [error_to_dict(e) for e in self.errors],
            "findings": [f.to_dict() for f in self.findings],
        }
