"""The whole check of one model: parse -> graph -> reduce -> wind -> margins -> judge.

`check_text` / `check_file` return a frozen ModelResult or raise ModelError (every
error located); `check_model` checks a model already resolved (a sweep's plants),
`check_many` many models with the same wiring at once. `prepare_file` stops before
the verdict (the graph command draws the loop graph from it). Helpers that only
tests, benchmarks and tools need (a model prepared from text, single loops checked
without a model file, state-space forms) are in `loopwise.testing`.
"""
from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass, replace

import numpy as np

from . import arguments as arg
from .engine.diagram import Diagram, build_diagram
from .errors import Finding, ModelError, ModelErrors, Span
from .language.resolve import Model, Parsed, parse_file, parse_model, resolve_parsed
from .engine.reduce import Reduction, reduce_diagram
from .results import BreakResult, Margins, ModelResult
from .engine.hidden import cancelled_modes, candidates, circles, structural_modes
from .verdicts import (check_not_zero, counted_modes, hidden_from_loop, mode_findings, positive_feedback,
                       verdict_adjustment)
from .engine.stability import count
from .judge import SEPARATION_WARNING, judge
from .waivers import apply_waivers, settings_waivers_for

__all__ = ["PreparedModel", "parse_for_check", "prepare_model", "prepare_file", "check_model",
           "check_text", "check_file", "check_prepared", "check_many"]


@dataclass(frozen=True, eq=False)
class PreparedModel:
    """A model read, its loop graph built and its wiring reduced: everything but the verdict."""

    model: Model
    diagram: Diagram
    reduction: Reduction

    @property
    def break_names(self) -> tuple[str, ...]:
        """The model's break names, in the order the model declares them."""
        return tuple(b.stmt.name for b in self.diagram.breaks)

    def loop_transfer(self, name: str, s) -> np.ndarray:
        """The loop transfer L = -y/v at break `name` (the signal cut there, v injected),
        evaluated exactly (delays included) at the complex frequencies `s` (rad/s, any
        shape); a 1-D complex array."""
        return self.reduction.loop_transfer(name, np.atleast_1d(np.asarray(s, complex)))


def _settings_requirements(settings) -> tuple[str, ...]:
    return tuple(getattr(settings, "requirements", ()) or ()) if settings is not None else ()


def _overrides(settings) -> dict[str, float]:
    return dict(getattr(settings, "overrides", ()) or ()) if settings is not None else {}


def _with_settings(parsed: Parsed, settings) -> Parsed:
    """The settings' waivers for this file go with the parsed model, so that it resolves
    alike anywhere (a sweep's worker on another machine has neither the settings file
    nor the working directory that the waivers' globs are relative to)."""
    return replace(parsed, waivers=settings_waivers_for(settings, parsed.file))


def parse_for_check(path, settings=None, root=None) -> Parsed:
    """A model file parsed once with what the settings add to it (default requirements,
    waivers for this file); `resolve_parsed(parsed, overrides)` then gives the model at
    any param values, as `check_file` would resolve it. `root`: see `prepare_file`."""
    return _with_settings(parse_file(path, _settings_requirements(settings),
                                     getattr(settings, "source", None) or "<settings>", root), settings)


def prepare_model(model: Model) -> PreparedModel:
    """The loop graph and the reduction of a resolved model."""
    diagram = build_diagram(model)
    return PreparedModel(model, diagram, reduce_diagram(diagram))


def _prepare_text(text: str, file: str = "<text>", settings=None) -> PreparedModel:
    """A model given as text, resolved with the settings' requirements, waivers and
    overrides, its loop graph built and its wiring reduced (`check_text` before the verdict)."""
    text, file, settings = arg.model_text(text), arg.file_label(file), arg.settings_or_none(settings)
    parsed = parse_model(text, file, _settings_requirements(settings),
                         getattr(settings, "source", None) or "<settings>")
    return prepare_model(resolve_parsed(_with_settings(parsed, settings), _overrides(settings)))


def prepare_file(path, settings=None, root=None) -> PreparedModel:
    """A model file read, resolved with the settings' requirements, waivers and overrides,
    its loop graph built and its wiring reduced: `check_file` before the verdict.
    `root`: the checked models' common folder; outside git, includes must stay inside it."""
    path, settings = arg.model_path(path), arg.settings_or_none(settings)
    root = None if root is None else arg.model_path(root, "root")
    return prepare_model(resolve_parsed(parse_for_check(path, settings, root), _overrides(settings)))


def check_model(model: Model, indent: str = "right") -> ModelResult:
    """The verdict of a resolved model, its findings marked by the waivers that accept
    them (the model's own and the settings' it carries). `check_file` and every plant
    of a sweep go through here."""
    return _waived_verdict(prepare_model(model), indent)


def _waived_verdict(prep: PreparedModel, indent: str) -> ModelResult:
    return apply_waivers(check_prepared(prep, indent), prep.model.waivers)


@contextmanager
def _unreadable():
    """Every unreadable model leaves as one ModelError carrying all its located errors
    (a ModelErrors, so that the older `except ModelErrors` still catches it)."""
    try:
        yield
    except ModelErrors:
        raise
    except ModelError as exc:
        raise ModelErrors(exc.errors) from None


def check_text(text: str, file: str = "<text>", settings=None, indent: str = "right") -> ModelResult:
    """Check one model given as text; raises loopwise.ModelError when it cannot be read."""
    indent = arg.check_indent(indent)
    with _unreadable():
        return _waived_verdict(_prepare_text(text, file, settings), indent)


def check_file(path, settings=None, indent: str = "right", root=None) -> ModelResult:
    """Check one model file; raises loopwise.ModelError when it cannot be read. Includes
    must stay in the git work tree holding the model, outside git in `root` (default: the
    model's folder); see docs/language.md, `use`."""
    indent = arg.check_indent(indent)
    with _unreadable():
        return _waived_verdict(prepare_file(path, settings, root), indent)


def check_prepared(prep: PreparedModel, indent: str = "right") -> ModelResult:
    """The whole check of a prepared model: the count, the margins, the judgement."""
    if not prep.model.equations:
        return _library(prep)
    red = prep.reduction
    plan = _plan(prep, count(red, indent))
    margins = _margins(red, plan.counts, plan.stable_names())
    gains = _gain_ranges(red, plan.counts, plan.gain_names(margins))
    return _finish(prep, plan, margins, gains)


def check_many(preps: list[PreparedModel], indent: str = "right", stabilising_gains: bool = True,
               short: bool = False) -> list[ModelResult]:
    """Many models with the same wiring (one model's parameter samples, or many single
    loops): counted and refined together (engine/batch.py), each judged as check_prepared
    would. With `stabilising_gains` False the gain ranges that would stabilise an unstable
    break are not searched (its `stabilising_gains` stay empty; a sweep records none).

    With `short` (a sweep's), the margins' extension stops at each model's settling
    frequency wherever that leaves every margin value as the whole extension gives it
    (stability.settled; docs/method.md, "The sweep's short extension"), and the models
    where it does not get the rest of it (`Batch.lengthen`) and their margins again. Then
    only the margin values, verdicts, requirements and warnings are those of `check`
    (docs/method.md says which warning it may miss): the responses stop at the settling
    frequency, and no phase crossover is listed."""
    from .engine.batch import Batch
    from .engine.margins import break_margins, break_stabilising_gains
    from .engine.stability import ShortProbe

    todo = [i for i, p in enumerate(preps) if p.model.equations]
    out: list[ModelResult | None] = [None] * len(preps)
    for i in set(range(len(preps))) - set(todo):
        out[i] = _library(preps[i])
    if not todo:
        return out
    batch = Batch([preps[i].reduction for i in todo])
    counts = batch.count(indent, short=short)
    spots = [candidates(preps[i].reduction) for i in todo]  # the hidden modes' candidates, once
    known = batch.circle_orders([circles(preps[i].reduction, f) for i, f in zip(todo, spots)])
    plans = [_plan(preps[i], c, k, f) for i, c, k, f in zip(todo, counts, known, spots)]
    margins = [{c.stmt.name: None for c in preps[i].diagram.breaks} for i in todo]
    rows = [(n, name) for n, plan in enumerate(plans) for name in plan.stable_names()]
    probe = ShortProbe([plans[n].counts[name].short is not None for n, name in rows])
    found = break_margins(batch.evaluator(rows), [plans[n].counts[name].response for n, name in rows],
                          [plans[n].counts[name].P for n, name in rows], tidy=True, tail=probe, listed=not short)
    for (n, name), m in zip(rows, found):
        margins[n][name] = m
    # a model with a margin the short extension does not settle, or with a gain range to
    # search on a short response, gets the rest of its extension and its margins again
    again = {n for r, ((n, _), m) in enumerate(zip(rows, found)) if not probe.settled(r, m)}
    again |= {n for n, plan in enumerate(plans) for name in plan.gain_names(margins[n], stabilising_gains)
              if plan.counts[name].short is not None}
    if again:
        again = sorted(again)
        for n, c in zip(again, batch.lengthen([counts[n] for n in again], again)):
            plans[n] = _plan(preps[todo[n]], c, known[n], spots[n])
            margins[n] = {b.stmt.name: None for b in preps[todo[n]].diagram.breaks}
        rows = [(n, name) for n in again for name in plans[n].stable_names()]
        found = break_margins(batch.evaluator(rows), [plans[n].counts[name].response for n, name in rows],
                              [plans[n].counts[name].P for n, name in rows], tidy=True, listed=not short)
        for (n, name), m in zip(rows, found):
            margins[n][name] = m
    rows = [(n, name) for n, plan in enumerate(plans) for name in plan.gain_names(margins[n], stabilising_gains)]
    found = break_stabilising_gains(batch.evaluator(rows), [plans[n].counts[name].response for n, name in rows],
                                    [plans[n].counts[name].P for n, name in rows])
    gains = [dict() for _ in todo]
    for (n, name), g in zip(rows, found):
        gains[n][name] = g
    for n, i in enumerate(todo):
        out[i] = _finish(preps[i], plans[n], margins[n], gains[n])
    return out


def _library(prep: PreparedModel) -> ModelResult:
    # a library of params and blocks, meant for `use`: nothing to check on its own
    model = prep.model
    findings = list(prep.diagram.findings) + [Finding(
        "note", "LW491", "no signal equations: a library of params and blocks (for `use`), nothing to check "
        "on its own", Span(model.file, 1, 1))]
    return ModelResult(model.file, model.name, True, 0, (), tuple(findings))


@dataclass
class _Plan:
    """A model's count read as verdicts, before the margins: per break (cut, count, P, Z,
    marginal, its frequency and cause, stable, warnings)."""

    Z: int
    counts: dict
    findings: list
    modes: list
    hidden_axis: list
    rows: list

    def stable_names(self) -> list[str]:
        return [r[0].stmt.name for r in self.rows if r[7]]

    def gain_names(self, margins: dict, unstable: bool = True) -> list[str]:
        # for a stable break the margins already hold the stretch around k = 1; both margins
        # unbounded is the one case worth checking against the count (it also means "no
        # stretch"); no gain factor moves a mode that a cancellation hides: no range then
        fixable = unstable and not any(h.counted for h in self.modes)
        return [r[0].stmt.name for r in self.rows
                if _ambiguous(margins.get(r[0].stmt.name)) or (not r[7] and fixable)]


def _ambiguous(m: Margins | None) -> bool:
    return m is not None and m.gain_margin_up_db is None and m.gain_margin_down_db is None


def _plan(prep: PreparedModel, result, known: dict | None = None, found: list | None = None) -> _Plan:
    # known: the hidden-mode circles already wound (Batch.circle_orders); found: their
    # candidates (hidden.candidates), when already at hand
    model, red = prep.model, prep.reduction
    findings = list(prep.diagram.findings)
    roots = np.concatenate([red.block_poles(), red.block_zeros()])
    roots = np.abs(roots[roots != 0])
    if roots.size and roots.max() / roots.min() > 1e10:
        findings.append(Finding(
            "warning", "LW483", f"poles and zeros span {np.log10(roots.max() / roots.min()):.0f} decades "
            f"({roots.min():.3g} to {roots.max():.3g} rad/s): double precision may not resolve such a model; "
            "treat its margins with care", Span(model.file, 1, 1),
            "rescale time (e.g. work in ms) or drop modes far outside the loop's bandwidth"))
    Z, counts = result.Z, result.counts
    for code, message in dict.fromkeys(result.warnings):
        findings.append(Finding("warning", code, message, Span(model.file, 1, 1)))
    modes = counted_modes(cancelled_modes(red) + structural_modes(red, known, found), model)
    findings.extend(mode_findings(red, modes))
    extra_rhp, hidden_axis = verdict_adjustment(modes)
    Z += extra_rhp
    rows = []
    for cut in prep.diagram.breaks:
        name = cut.stmt.name
        c = counts[name]
        check_not_zero(cut, c)
        P, Zk = c.P + extra_rhp, c.Z + extra_rhp
        marginal, marginal_freq, cause = c.marginal, c.marginal_freq, ("loop" if c.marginal else None)
        if hidden_axis and not marginal:
            marginal, marginal_freq, cause = True, hidden_axis[0], "hidden"
        stable = Zk == 0 and not marginal
        warnings = list(c.warnings)
        if Zk != Z:
            warnings.append(("LW486", f"this break counts Z = {Zk} closed-loop RHP poles but the whole "
                             f"model counts {Z}; the verdict is not trustworthy"))
        warnings.extend(hidden_from_loop(red, name, modes))
        if not stable and not marginal and P == 0:
            warnings.extend(positive_feedback(red, cut, c))
        rows.append((cut, c, P, Zk, marginal, marginal_freq, cause, stable, warnings))
    return _Plan(Z, counts, findings, modes, hidden_axis, rows)


def _finish(prep: PreparedModel, plan: _Plan, margins: dict, gain_ranges: dict) -> ModelResult:
    model = prep.model
    results = []
    for cut, c, P, Zk, marginal, marginal_freq, cause, stable, warnings in plan.rows:
        name = cut.stmt.name
        m = margins.get(name)
        separation = None
        if cut.enclosed_by and m is not None and margins.get(cut.enclosed_by) is not None:
            outer = margins[cut.enclosed_by].crossover_freq
            if m.crossover_freq is not None and outer:
                separation = m.crossover_freq / outer
                if separation < SEPARATION_WARNING:
                    warnings.append(("LW383", f"crossover only {separation:.2g} times that of the enclosing "
                                     f"break `{cut.enclosed_by}` (common practice: 3 to 5 times or more)"))
        verdict = "marginal" if marginal else ("stable" if stable else "unstable")
        reqs = tuple(r for r in model.requirements if r.target in (name, "*"))
        gains = gain_ranges.get(name, ())
        if _ambiguous(m) and not any(lo < 1.0 < hi for lo, hi in gains):
            warnings.append(("LW582", "the gain-margin stretches do not place k = 1 in a stable range "
                             "although the count is stable; treat the gain margins with care"))
        results.append(BreakResult(
            name=name, at=cut.stmt.at, line=cut.stmt.span.line, stable=stable, open_loop_rhp_poles=P,
            encirclements=c.N, closed_loop_rhp_poles=Zk, marginal=marginal, marginal_freq=marginal_freq,
            margins=m, requirements=judge(reqs, m, separation, verdict),
            # the loop graph's warnings about the cut itself (LW384) come first, with their hints
            warnings=cut.findings() + tuple(Finding("warning", code, message, cut.stmt.span, about=(name,))
                                            for code, message in warnings),
            stabilising_gains=() if stable else gains, enclosed_by=cut.enclosed_by, separation=separation,
            response=c.response, marginal_cause=cause,
        ))
    marginal = any(r.marginal for r in results) or bool(plan.hidden_axis)
    return ModelResult(model.file, model.name, plan.Z == 0 and not marginal, plan.Z, tuple(results),
                       tuple(plan.findings), tuple(plan.modes))


def _evaluator(red: Reduction, names: list[str]):
    """L of break names[i[j]] at s[j], whatever component each break is in: the margins of
    every break of the model in one vectorised pass (a point's value does not depend on
    the points evaluated with it)."""
    from .engine.solve import distinct

    comp_of = np.array([red.component_of[n] for n in names], dtype=int)
    col_of = np.array([red.components[red.component_of[n]].breaks.index(n) for n in names], dtype=int)

    def evaluate(s, i):
        s = np.asarray(s, complex).ravel()
        i = np.broadcast_to(np.asarray(i, dtype=int), s.shape).ravel()
        out = np.empty(s.size, complex)
        for c in distinct(comp_of[i]):
            sel = np.nonzero(comp_of[i] == c)[0]
            out[sel] = red.components[c].loops(s[sel], col_of[i[sel]])
        return out

    return evaluate


def _margins(red: Reduction, counts, names: list[str]) -> dict[str, Margins | None]:
    """Every stable break's margins, one vectorised pass for all of them."""
    from .engine.margins import break_margins

    out: dict[str, Margins | None] = {c.stmt.name: None for c in red.diagram.breaks}
    if names:
        found = break_margins(_evaluator(red, names), [counts[n].response for n in names],
                              [counts[n].P for n in names], tidy=True)
        out.update(zip(names, found))
    return out


def _gain_ranges(red: Reduction, counts, names: list[str]) -> dict[str, tuple]:
    """The stabilising gain ranges of the named breaks, one pass for all of them."""
    from .engine.margins import break_stabilising_gains

    if not names:
        return {}
    found = break_stabilising_gains(_evaluator(red, names), [counts[n].response for n in names],
                                    [counts[n].P for n in names])
    return dict(zip(names, found))
