"""What counts as a regression in `loopwise diff`: how each margin is read from the
results, which way is better, how close two values must be to count as the same,
and when a loss matters (a requirement it fails or nears, or a level it falls
below). Pure; `loopwise.compare` applies it to whole result sets.

``None`` in a margin means "unbounded / no crossover" (see `loopwise.results`);
here it is ordered as the best possible value of that margin, so a change from
``None`` to a number is a loss (and reported in words, never as a number).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .results import Margins, RequirementResult
from .settings import Regression

__all__ = ["ABS_TOL", "REL_TOL", "MarginSpec", "MARGINS", "MarginChange", "same", "compare_margins",
           "matters", "requirement_words"]

#: two values closer than the reports can show are no change (a `+0.00, better` line
#: says nothing): angles and dB to 0.005 (shown to two decimals), everything else
#: to half a unit of its fourth significant digit (shown to four)
ABS_TOL = {"deg": 0.005, "dB": 0.005}
REL_TOL = 5e-5


@dataclass(frozen=True)
class MarginSpec:
    """How one margin is read: its label, unit, which way is better, what None means,
    and which requirement metrics bound it."""

    metric: str          # the margin's name in the diff (JSON `metric`): a `Margins` field or a derived figure
    label: str
    unit: str
    higher_is_better: bool | None  # None: neither (informational, e.g. crossover frequency)
    none_means: str      # words for a None value
    requirements: tuple[str, ...] = ()  # requirement metrics that bound this margin

    def value(self, margins: Margins) -> float | None:
        """This margin read from a break's `Margins` (None: unbounded, or not available)."""
        if self.metric == "disk_margin_alpha":
            return margins.disk_margin.alpha if margins.disk_margin else None
        if self.metric == "sensitivity_peak_db":
            return margins.sensitivity_peak.db if margins.sensitivity_peak else None
        if self.metric == "complementary_peak_db":
            return margins.complementary_peak.db if margins.complementary_peak else None
        return getattr(margins, self.metric)


MARGINS: tuple[MarginSpec, ...] = (
    MarginSpec("phase_margin_deg", "phase margin", "deg", True, "unbounded (no gain crossover)",
               ("phase_margin",)),
    MarginSpec("gain_margin_up_db", "gain margin up", "dB", True, "unbounded (no phase crossover)",
               ("gain_margin_up", "gain_margin")),
    # a down margin is a negative dB value: more negative is better, so "higher is better"
    # is False and None (any gain reduction keeps the loop stable) is the best value
    MarginSpec("gain_margin_down_db", "gain margin down", "dB", False, "unbounded (no phase crossover)",
               ("gain_margin_down", "gain_margin")),
    MarginSpec("delay_margin_s", "delay margin", "s", True, "unbounded (no gain crossover)",
               ("delay_margin",)),
    MarginSpec("disk_margin_alpha", "disk margin alpha", "", True, "not available"),
    MarginSpec("sensitivity_peak_db", "sensitivity peak Ms", "dB", False, "not available"),
    MarginSpec("complementary_peak_db", "complementary peak Mt", "dB", False, "not available"),
    MarginSpec("crossover_freq", "crossover", "rad/s", None, "none (no gain crossover)"),
)


@dataclass(frozen=True)
class MarginChange:
    """How one margin of one break changed: the values before and after in its unit,
    the signed change, better or worse, words when a side is None, and the regression
    it makes under the policy (None: the change is information)."""

    metric: str               # MarginSpec.metric
    label: str
    unit: str
    before: float | None
    after: float | None
    delta: float | None       # after - before; None when either side is None
    direction: str            # "better" | "worse" | "changed" (no better/worse for this metric)
    words: str | None         # the change in words when a side is None
    regression: str | None    # why this counts as a regression under the policy, else None
                              # (then the change is information)


def same(a: float | None, b: float | None, unit: str = "") -> bool:
    """Whether two values of a margin are the same as far as the reports show them (two
    decimals of deg and dB, four significant digits else); None equals only None."""
    if a is None or b is None:
        return a is None and b is None
    if unit in ABS_TOL:
        return abs(a - b) < ABS_TOL[unit] or a == b
    return math.isclose(a, b, rel_tol=REL_TOL, abs_tol=1e-300)


def _as_number(spec: MarginSpec, x: float | None) -> float:
    """None as the best value of the metric (unbounded), for ordering only."""
    if x is not None:
        return x
    return math.inf if spec.higher_is_better else -math.inf


def _direction(spec: MarginSpec, before: float | None, after: float | None) -> str:
    if spec.higher_is_better is None:
        return "changed"
    b, a = _as_number(spec, before), _as_number(spec, after)
    if spec.none_means == "not available" and (before is None or after is None):
        return "changed"  # a missing value is not a better or worse one
    improved = a > b if spec.higher_is_better else a < b
    return "better" if improved else "worse"


def _words(spec: MarginSpec, before: float | None, after: float | None) -> str | None:
    if before is None and after is None:
        return None
    if before is None:
        return f"was {spec.none_means}, now finite"
    if after is None:
        return f"now {spec.none_means}"
    return None


def _loss(spec: MarginSpec, before: float | None, after: float | None,
          policy: Regression) -> str | None:
    """The policy's loss threshold, when the loss exceeds it; unbounded -> finite is an
    unbounded loss."""
    if spec.metric == "phase_margin_deg":
        if _as_number(spec, before) - _as_number(spec, after) > policy.phase_margin_loss_deg:
            return f"phase margin loss above {policy.phase_margin_loss_deg:g} deg"
    elif spec.metric == "gain_margin_up_db":
        if _as_number(spec, before) - _as_number(spec, after) > policy.gain_margin_loss_db:
            return f"gain margin up loss above {policy.gain_margin_loss_db:g} dB"
    elif spec.metric == "gain_margin_down_db":
        # moving towards 0 dB (less room to reduce the gain) is the loss
        if _as_number(spec, after) - _as_number(spec, before) > policy.gain_margin_loss_db:
            return f"gain margin down loss above {policy.gain_margin_loss_db:g} dB"
    elif spec.metric == "delay_margin_s":
        b, a = _as_number(spec, before), _as_number(spec, after)
        if b > 0 and a < b:
            fraction = 1.0 if math.isinf(b) else (b - a) / b
            if fraction > policy.delay_margin_loss_fraction:
                return f"delay margin loss above {policy.delay_margin_loss_fraction:.0%}"
    return None


def requirement_words(r: RequirementResult) -> str:
    """`phase_margin >= 45deg`: the requirement with its limit as the model wrote it."""
    limit = r.limit_text or (f"{r.limit:.4g} {r.unit}" if r.unit else f"{r.limit:.4g}")
    return f"{r.metric} {r.op} {limit}"


def _near(size: float, r: RequirementResult, policy: Regression) -> str | None:
    """How close a margin (`size`, in the requirement's unit) is to a lower-bound
    requirement it meets, when within the policy's distance."""
    room = size - r.limit
    if r.unit == "deg" and room <= policy.near_requirement_deg:
        return f"within {policy.near_requirement_deg:g} deg"
    if r.unit == "dB" and room <= policy.near_requirement_db:
        return f"within {policy.near_requirement_db:g} dB"
    if r.unit == "s" and r.limit > 0 and room <= policy.near_requirement_fraction * r.limit:
        return f"within {policy.near_requirement_fraction:.0%}"
    return None


def _relevance(spec: MarginSpec, policy: Regression) -> tuple[float, str]:
    """The level below which the margin matters on its own (0: none), in words."""
    if spec.metric == "phase_margin_deg":
        level = policy.relevant_phase_margin_deg
        return level, f"{level:g} deg"
    if spec.metric in ("gain_margin_up_db", "gain_margin_down_db"):
        level = policy.relevant_gain_margin_db
        return level, f"{level:g} dB"
    if spec.metric == "delay_margin_s":
        level = policy.relevant_delay_margin_s
        return level, f"{level:g} s"
    return 0.0, ""


def matters(spec: MarginSpec, after: float | None, requirements: tuple[RequirementResult, ...],
            policy: Regression) -> str | None:
    """Why a margin's new value matters, or None: it fails a requirement on it or
    comes within the policy's distance of one, or it is below its relevance level.

    The margin's own value is judged (a gain margin down as the size of the
    decrease), so `gain_margin >= 6dB`, which bounds both gain margins, counts
    only for the one that is near it."""
    if after is None:
        return None  # unbounded: no limit is near
    size = -after if spec.metric == "gain_margin_down_db" else after
    for r in requirements:
        if r.metric not in spec.requirements or r.op not in (">=", ">"):
            continue
        if not (size > r.limit if r.op == ">" else size >= r.limit):
            return f"it fails `{requirement_words(r)}`"
        near = _near(size, r, policy)
        if near:
            return f"{near} of `{requirement_words(r)}`"
    level, words = _relevance(spec, policy)
    if level > 0 and size < level:
        default, _ = _relevance(spec, Regression())
        return f"below {words} " + ("(common practice)" if level == default else "(the settings' level)")
    return None


def _margin_regression(spec: MarginSpec, before: float | None, after: float | None,
                       policy: Regression, requirements: tuple[RequirementResult, ...] = ()) -> str | None:
    """A loss beyond its threshold where it matters (`matters`); other changes are information."""
    loss = _loss(spec, before, after, policy)
    if loss is None:
        return None
    why = matters(spec, after, requirements, policy)
    return None if why is None else f"{loss}; {why}"


def compare_margins(before: Margins, after: Margins, policy: Regression,
                    requirements: tuple[RequirementResult, ...] = ()) -> tuple[MarginChange, ...]:
    """Every margin that differs (by more than the reports show) between two stable
    versions of one break; `requirements` are the new side's, which say where a loss matters."""
    changes = []
    for spec in MARGINS:
        b, a = spec.value(before), spec.value(after)
        if same(b, a, spec.unit):
            continue
        delta = None if b is None or a is None else a - b
        changes.append(MarginChange(
            spec.metric, spec.label, spec.unit, b, a, delta, _direction(spec, b, a),
            _words(spec, b, a), _margin_regression(spec, b, a, policy, requirements)))
    return tuple(changes)
