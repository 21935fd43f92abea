"""Requirements judged against a break's margins (met / not met, value, limit, line)."""
from __future__ import annotations

import math

from .language.requirements import METRICS, Requirement
from .results import Margins, RequirementResult

__all__ = ["metric_value", "judge", "SEPARATION_WARNING"]

#: common practice (no source): an inner loop at least 3 to 5 times faster than the loop around it
SEPARATION_WARNING = 3.0


def metric_value(metric: str, m: Margins, separation: float | None) -> tuple[float | None, str | None]:
    """The value of a metric in its own unit; math.inf for unbounded; None when absent."""
    inf = math.inf

    def unbounded(x):
        return inf if x is None else x

    if metric == "phase_margin":
        return unbounded(m.phase_margin_deg), None if m.gain_crossovers else "no gain crossover"
    if metric == "gain_margin":
        return unbounded(m.gain_margin_db), None
    if metric == "gain_margin_up":
        return unbounded(m.gain_margin_up_db), None
    if metric == "gain_margin_down":
        return (inf if m.gain_margin_down_db is None else -m.gain_margin_down_db), None
    if metric == "delay_margin":
        return unbounded(m.delay_margin_s), None if m.gain_crossovers else "no gain crossover"
    if metric in ("disk_margin", "disk_gain", "disk_phase"):
        d = m.disk_margin
        if d is None:
            return inf, "no disk-margin peak"
        if metric == "disk_margin":
            return d.alpha, None
        if metric == "disk_gain":
            return unbounded(d.gain_db[1]), None
        return d.phase_deg, None
    if metric == "sensitivity_peak":
        return (None, "no peak") if m.sensitivity_peak is None else (m.sensitivity_peak.value, None)
    if metric == "complementary_peak":
        return (None, "no peak") if m.complementary_peak is None else (m.complementary_peak.value, None)
    if metric == "crossover":
        return (None, "no gain crossover") if m.crossover_freq is None else (m.crossover_freq, None)
    if metric == "separation":
        return (None, "not enclosed by another break (or no crossover)") if separation is None \
            else (separation, None)
    raise KeyError(metric)


def judge(requirements: tuple[Requirement, ...], margins: Margins | None, separation: float | None,
          verdict: str) -> tuple[RequirementResult, ...]:
    """Each requirement of a break judged against its margins (None: the closed loop is not
    stable, `verdict` says how, and no requirement is met) and its separation from the
    break around it; one `RequirementResult` each, in order, with the value in the
    metric's own unit and a note where there is no value."""
    out = []
    for req in requirements:
        if margins is None:
            out.append(RequirementResult(req.metric, req.op, req.limit, None, False, req.span.line,
                                         req.span.file, f"closed loop {verdict}: no margins",
                                         METRICS[req.metric].unit, req.limit_text))
            continue
        value, note = metric_value(req.metric, margins, separation)
        met = value is not None and req.holds(value)
        out.append(RequirementResult(req.metric, req.op, req.limit, value, met, req.span.line,
                                     req.span.file, note, METRICS[req.metric].unit, req.limit_text))
    return tuple(out)
