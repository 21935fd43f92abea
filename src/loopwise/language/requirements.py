"""Requirement metrics: their units, the unit kinds a limit may be written in,
and the conversion of a limit to the metric's own unit.

A limit written without a unit is in the metric's own unit (degrees for phase,
dB for gain margins, seconds for delay, rad/s for frequency, a plain ratio for
the peaks, the disk margin alpha and the separation).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import ModelError, Span
from . import ast
from .hints import did_you_mean

__all__ = ["Metric", "METRICS", "Requirement", "make_requirement"]


@dataclass(frozen=True)
class Metric:
    """A metric a requirement can bound: its name, its own unit, the unit kinds its limit
    may be written in, and what it measures."""

    name: str
    unit: str  # the metric's own unit, for display
    kinds: tuple[str, ...]  # unit kinds a limit may carry besides none
    description: str


METRICS: dict[str, Metric] = {m.name: m for m in [
    Metric("phase_margin", "deg", ("angle",), "smallest phase margin over the gain crossovers"),
    Metric("gain_margin", "dB", ("gain",), "the smaller of the up and down gain margins"),
    Metric("gain_margin_up", "dB", ("gain",), "gain increase that destabilises"),
    Metric("gain_margin_down", "dB", ("gain",), "gain decrease that destabilises (as a positive dB figure)"),
    Metric("delay_margin", "s", ("time",), "smallest extra delay that destabilises"),
    Metric("disk_margin", "", ("ratio",), "balanced disk margin alpha"),
    Metric("disk_gain", "dB", ("gain",), "upper end of the disk-margin gain interval"),
    Metric("disk_phase", "deg", ("angle",), "disk-margin phase margin"),
    Metric("sensitivity_peak", "", ("gain",), "Ms, the peak of |1/(1+L)|"),
    Metric("complementary_peak", "", ("gain",), "Mt, the peak of |L/(1+L)|"),
    Metric("crossover", "rad/s", ("frequency",), "the highest gain crossover frequency"),
    Metric("separation", "", ("ratio",), "this break's crossover over the enclosing break's crossover"),
]}


@dataclass(frozen=True)
class Requirement:
    """A checked requirement: the break it applies to (`*`: every break), the metric, the
    operator, the limit in the metric's own unit, and where and how it is written."""

    target: str  # a break name or "*"
    metric: str
    op: str
    limit: float  # in the metric's own unit
    span: Span
    target_span: Span
    text: str
    limit_text: str = ""  # the limit as the model wrote it (`6dB`, `0.5Hz`); "" for an expression

    def holds(self, value: float | None) -> bool:
        """Whether a value meets the limit; None means unbounded (inf) or absent."""
        if value is None:
            return False
        return {">=": value >= self.limit, "<=": value <= self.limit,
                ">": value > self.limit, "<": value < self.limit}[self.op]


def _to_metric_unit(metric: Metric, value: float, kind: str | None, span: Span) -> float:
    if kind is None:
        return value
    if kind not in metric.kinds:
        unit = metric.unit or "a plain ratio"
        raise ModelError("LW241", f"a {kind} unit does not fit `{metric.name}` (its unit is {unit})", span,
                         f"write the limit in {unit}" + (", or without a unit" if metric.unit else ""))
    if kind == "angle":
        return math.degrees(value)
    if kind == "gain":
        if value <= 0:
            hint = ("a down margin is judged as the size of the decrease, a positive dB figure: "
                    "write e.g. `gain_margin_down >= 6dB`") if metric.name == "gain_margin_down" else \
                "write the limit as a positive dB figure, e.g. `>= 6dB`"
            raise ModelError("LW242", "a dB limit must come from a positive ratio (`-6dB` is read as minus "
                             "the ratio of 6 dB)", span, hint)
        return 20.0 * math.log10(value) if metric.unit == "dB" else value
    return value  # time in s, frequency in rad/s, ratio as is


def make_requirement(stmt: ast.RequireStmt, const) -> Requirement:
    """A `require` statement checked: a known metric, a constant limit in a unit that fits
    it, converted to the metric's own unit (`const` evaluates the limit with the
    model's params); a located error otherwise."""
    metric = METRICS.get(stmt.metric)
    if metric is None:
        hint = did_you_mean(stmt.metric, METRICS) or "metrics: " + ", ".join(METRICS)
        raise ModelError("LW243", f"unknown metric `{stmt.metric}`", stmt.metric_span, hint)
    q = const(stmt.value, f"the limit of `{stmt.metric}`")
    limit = _to_metric_unit(metric, q.value, q.kind, stmt.value.span)
    # 30deg -> rad -> deg must read 30, not 29.999999999999996
    limit = float(f"{limit:.12g}")
    written = stmt.value.text if isinstance(stmt.value, ast.Number) else ""
    return Requirement(stmt.target, stmt.metric, stmt.op, limit, stmt.span, stmt.target_span,
                       f"{stmt.target} {stmt.metric} {stmt.op} {limit:g}{metric.unit}", written)
