"""`loopwise diff` as aligned plain text that reads without colour.

Every change says its direction in words ("better", "worse") next to the
signed delta, and a regression under the policy says so at the end of its line.
"""
from __future__ import annotations

from ..compare import BreakDiff, DiffResult, MarginChange, ModelDiff, RequirementChange, VerdictChange
from ..results import CAUTION
from ..errors import printable
from ..settings import Regression
from .escape import one_line
from .numbers import fmt_time

__all__ = ["render", "fmt_value", "fmt_delta", "verdict_words", "requirement_words",
           "policy_words", "summary_words", "margin_words"]


def fmt_value(x: float | None, unit: str, none_words: str = "none") -> str:
    """A value with its unit; times in natural units (`fmt_time`)."""
    if x is None:
        return none_words
    if unit == "s":
        return fmt_time(x, 4)
    if unit in ("deg", "dB"):
        return f"{x:.2f} {unit}"
    if unit == "":
        return f"{x:.4g}"
    return f"{x:.4g} {unit}"


def fmt_delta(change: MarginChange) -> str:
    """The signed change and its direction: "-13.70, worse" or "now unbounded, better"."""
    if change.delta is None:
        return f"{change.words}, {change.direction}"
    if change.unit == "s":
        body = fmt_value(change.delta, "s")
        if change.before:
            body += f", {change.delta / change.before:+.0%}"
        body = body if body.startswith("-") else "+" + body
    elif change.unit in ("deg", "dB"):
        body = f"{change.delta:+.2f}"
    else:
        body = f"{change.delta:+.4g}"
    return f"{body}, {change.direction}"


def margin_words(change: MarginChange) -> tuple[str, str, str, str]:
    """(label, before, after, change) columns of one margin row."""
    none = "unbounded" if change.words and "unbounded" in (change.words or "") else "none"
    return (change.label, fmt_value(change.before, change.unit, none),
            fmt_value(change.after, change.unit, none), fmt_delta(change))


def _state(stable: bool, marginal: bool) -> str:
    return "marginal" if marginal else "stable" if stable else "UNSTABLE"


def verdict_words(v: VerdictChange) -> str:
    """`stable -> UNSTABLE (Z 0 -> 2, worse)`: a verdict change in words."""
    return (f"{_state(v.stable_before, v.marginal_before)} -> "
            f"{_state(v.stable_after, v.marginal_after)} "
            f"(Z {v.z_before} -> {v.z_after}, {v.direction})")


def _limit(r: RequirementChange, side: str) -> str:
    """A requirement's limit as the model wrote it (in the metric's unit for an expression)."""
    text = r.limit_text_after if side == "after" else r.limit_text_before
    value = r.limit_after if side == "after" else r.limit_before
    return text or fmt_value(value, r.unit)


def requirement_words(r: RequirementChange) -> str:
    """`phase_margin >= 45deg: met -> NOT MET (stopped being met; value 52.24 deg -> 37.01 deg)`:
    one requirement's change, its limit as the model wrote it (and the old one when it
    changed)."""
    side = "after" if r.limit_after is not None else "before"
    head = f"{r.metric} {r.op} {_limit(r, side)}"
    if r.limit_before is not None and r.limit_after is not None and (
            r.limit_before != r.limit_after or r.limit_text_before != r.limit_text_after):
        head += f" (limit was {_limit(r, 'before')})"
    met = {True: "met", False: "NOT MET", None: "absent"}
    value = f"value {fmt_value(r.value_before, r.unit)} -> {fmt_value(r.value_after, r.unit)}"
    if r.status == "added":
        value = f"value {fmt_value(r.value_after, r.unit)}"
    elif r.status == "removed":
        value = f"value {fmt_value(r.value_before, r.unit)}"
    return f"{head}: {met[r.met_before]} -> {met[r.met_after]} ({r.status}; {value})"


def policy_words(p: Regression) -> str:
    """The regression policy in one sentence: the loss thresholds, where a loss matters, and
    the verdict and requirement rules that are on."""
    parts = [f"phase margin loss > {p.phase_margin_loss_deg:g} deg",
             f"gain margin loss > {p.gain_margin_loss_db:g} dB (up or down)",
             f"delay margin loss > {p.delay_margin_loss_fraction:.0%}"]
    levels = [f"{name} {value:g} {unit}" for name, value, unit in (
        ("PM", p.relevant_phase_margin_deg, "deg"), ("GM", p.relevant_gain_margin_db, "dB"),
        ("delay margin", p.relevant_delay_margin_s, "s")) if value > 0]
    where = (f"where the margin fails or comes within {p.near_requirement_deg:g} deg, "
             f"{p.near_requirement_db:g} dB or {p.near_requirement_fraction:.0%} of a requirement"
             + (f", or ends below {', '.join(levels)}" if levels else ""))
    text = ", ".join(parts) + f" ({where})"
    if p.verdict_to_unstable:
        text += "; a loop that becomes unstable"
    if p.requirement_stops_being_met:
        text += "; a requirement that stops being met"
    return text


def summary_words(result: DiffResult) -> str:
    """`2 model(s): 1 changed, 1 unchanged; 1 regression`: the whole diff in numbers."""
    order = ("changed", "added", "removed", "errors appeared", "errors disappeared",
             "still unreadable", "unchanged")
    counts = [f"{result.count(s)} {s}" for s in order if result.count(s)]
    n = len(result.regressions)
    tail = f"{n} regression{'s' if n != 1 else ''}"
    if result.unreadable:
        tail += f", {len(result.unreadable)} model(s) unreadable on the new side"
    return f"{len(result.models)} model(s): {', '.join(counts) or 'none'}; {tail}"


def _margin_table(changes: tuple[MarginChange, ...], indent: str) -> list[str]:
    """label, before (right-aligned), ->, after (right-aligned), change, flag."""
    rows = [margin_words(c) for c in changes]
    if not rows:
        return []
    w = [max(len(r[i]) for r in rows) for i in range(3)]
    out = []
    for (label, before, after, delta), c in zip(rows, changes):
        line = f"{indent}{label.ljust(w[0])}  {before.rjust(w[1])} -> {after.rjust(w[2])}  ({delta})"
        if c.regression:
            line += f"  REGRESSION: {c.regression}"
        out.append(line)
    return out


def _break_lines(d: BreakDiff) -> list[str]:
    at = d.at_after or d.at_before
    if d.status == "added":
        state = "stable" if d.stable_after else "UNSTABLE"
        lines = [f"  + break {one_line(d.name)} (at {one_line(at)}): added, {state}"]
    elif d.status == "removed":
        return [f"  - break {one_line(d.name)} (at {one_line(at)}): removed"]
    else:
        lines = [f"  break {one_line(d.name)} (at {one_line(at)})"]
        if d.at_before != d.at_after:
            lines.append(f"    opened at {one_line(d.at_before)} -> {one_line(d.at_after)}")
    if d.verdict is not None:
        lines.append(f"    verdict {verdict_words(d.verdict)}")
        if not (d.stable_before and d.stable_after):
            lines.append("    margins not compared (claimed only for a stable closed loop)")
    lines += _margin_table(d.margins, "    ")
    for r in d.requirements:
        lines.append(f"    requirement {requirement_words(r)}" + ("  REGRESSION" if r.regression else ""))
    return lines


def _model_lines(m: ModelDiff) -> list[str]:
    head = f"{one_line(m.file)}: {m.status}"
    if m.status in ("added", "errors disappeared"):
        head += f" ({'stable' if m.stable_after else 'UNSTABLE'}, {m.breaks_after} break(s))"
    lines = [head]
    if m.model_before and m.model_after and m.model_before != m.model_after:
        lines.append(f"  model renamed {one_line(m.model_before)} -> {one_line(m.model_after)}")
    if m.verdict is not None and not any(d.verdict for d in m.breaks):
        lines.append(f"  model verdict {verdict_words(m.verdict)}")
    for d in m.breaks:
        lines += _break_lines(d)
    if m.breaks_unchanged:
        lines.append(f"  {m.breaks_unchanged} break{'s' if m.breaks_unchanged != 1 else ''} unchanged")
    if m.status == "errors disappeared":
        lines.append(f"  ({len(m.errors_before)} error(s) on the old side are gone)")
    if m.unreadable_after:
        for block in m.rendered_errors or tuple(str(e.span) + ": " + e.message for e in m.errors_after):
            lines += ["  " + ln for ln in block.splitlines()]
    for r in m.regressions:
        if r.startswith("model "):  # the break rows carry their own flags
            lines.append(f"  REGRESSION: {one_line(r)}")
    return lines


def render(result: DiffResult) -> str:
    """A diff as aligned plain text: the sides, the policy and the settings, each changed
    model with its breaks' changes, the totals and every regression, then the caution."""
    out = [f"loopwise diff: {one_line(result.old_label)} -> {one_line(result.new_label)}",
           f"regression: {policy_words(result.policy)}"]
    if result.settings:
        out.append(f"settings: {result.settings}")
    out.append("")
    unchanged = 0
    for m in result.models:
        if m.status == "unchanged":
            unchanged += 1
            continue
        out += _model_lines(m)
        out.append("")
    if unchanged:
        out += [f"{unchanged} model{'s' if unchanged != 1 else ''} unchanged", ""]
    out.append(summary_words(result))
    for r in result.regressions:
        out.append(f"  regression: {one_line(r)}")
    out += ["", CAUTION]
    # rendered errors and regressions quote names: nothing in them may drive a terminal
    return printable("\n".join(out), keep="\n") + "\n"
