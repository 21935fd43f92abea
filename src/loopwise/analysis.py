"""The whole check of one model: parse -> graph -> reduce -> wind -> margins -> judge.

`check_text` / `check_file` return a frozen ModelResult or raise ModelErrors
(every error located). `prepare_text` stops before the verdict (for tests and
tools that want the loop transfers themselves). `analyse_loop` checks unity
negative feedback around one loop transfer (used by the reference tests).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .engine.diagram import Diagram, build_diagram
from .errors import Finding, ModelError, Span
from .language.resolve import Model, resolve_file, resolve_text
from .engine.reduce import Reduction, reduce_diagram
from .results import BreakResult, Margins, ModelResult
from .engine.stability import NeutralLoop, count_all, count_model, prepare_contour
from .judge import SEPARATION_WARNING, judge

__all__ = ["Prepared", "prepare_model", "prepare_text", "prepare_file", "check_text", "check_file", "analyse_loop",
           "nyquist_verdict"]


@dataclass(frozen=True, eq=False)
class Prepared:
    model: Model
    diagram: Diagram
    reduction: Reduction

    @property
    def break_names(self) -> tuple[str, ...]:
        return tuple(b.stmt.name for b in self.diagram.breaks)

    def loop_transfer(self, name: str, s) -> np.ndarray:
        return self.reduction.loop_transfer(name, np.atleast_1d(np.asarray(s, complex)))

    def closed_loop_poles(self) -> np.ndarray:
        from .engine.statespace import closed_loop_poles
        return closed_loop_poles(self.reduction)

    def loop_state_space(self, name: str):
        from .engine.statespace import loop_state_space
        ss = loop_state_space(self.reduction, name)
        return ss.A, ss.B, ss.C, ss.D


def _settings_requirements(settings) -> tuple[str, ...]:
    return tuple(getattr(settings, "requirements", ()) or ()) if settings is not None else ()


def _overrides(settings) -> dict[str, float]:
    return dict(getattr(settings, "overrides", ()) or ()) if settings is not None else {}


def prepare_model(model: Model) -> Prepared:
    """The loop graph and the reduction of a resolved model."""
    diagram = build_diagram(model)
    return Prepared(model, diagram, reduce_diagram(diagram))


_prepare = prepare_model


def prepare_text(text: str, file: str = "<text>", settings=None) -> Prepared:
    return _prepare(resolve_text(text, file, _settings_requirements(settings),
                                 getattr(settings, "source", None) or "<settings>", _overrides(settings)))


def prepare_file(path, settings=None) -> Prepared:
    return _prepare(resolve_file(path, _settings_requirements(settings),
                                 getattr(settings, "source", None) or "<settings>", _overrides(settings)))


def check_text(text: str, file: str = "<text>", settings=None, indent: str = "right") -> ModelResult:
    """Check one model given as text; raises ModelErrors when it cannot be read."""
    return check_prepared(prepare_text(text, file, settings), indent)


def check_file(path, settings=None, indent: str = "right") -> ModelResult:
    """Check one model file; raises ModelError(s) when it cannot be read."""
    return check_prepared(prepare_file(path, settings), indent)


def check_prepared(prep: Prepared, indent: str = "right") -> ModelResult:
    model, red = prep.model, prep.reduction
    findings = list(prep.diagram.findings)
    if not model.equations:
        # a library of params and blocks, meant for `use`: nothing to check on its own
        findings.append(Finding("note", "LW491", "no signal equations: a library of params and blocks "
                                "(for `use`), nothing to check on its own", Span(model.file, 1, 1)))
        return ModelResult(model.file, model.name, True, 0, (), tuple(findings))
    try:
        setup = prepare_contour(red, indent)
    except NeutralLoop as exc:
        raise ModelError(
            "LW401", f"the model is of neutral type: its high-frequency loop gain through delays is "
            f"{exc.rho:.3g} (>= 1), so no finite frequency range certifies its stability", Span(model.file, 1, 1),
            "a loop with direct feedthrough and a delay must have a high-frequency gain below 1; "
            "add a filter pole") from None
    roots = np.abs(setup.roots[setup.roots != 0])
    if roots.size and roots.max() / roots.min() > 1e10:
        findings.append(Finding(
            "warning", "LW483", f"poles and zeros span {np.log10(roots.max() / roots.min()):.0f} decades "
            f"({roots.min():.3g} to {roots.max():.3g} rad/s): double precision may not resolve such a model; "
            "treat its margins with care", Span(model.file, 1, 1),
            "rescale time (e.g. work in ms) or drop modes far outside the loop's bandwidth"))
    for term in red.exogenous:
        n_rhp = term.app.transfer.rhp_poles
        if n_rhp:
            findings.append(Finding(
                "warning", "LW484", f"`{term.app.label.split('@')[0]}` is driven by the input `{term.source}` only "
                f"and has {n_rhp} pole(s) in the right half plane: its output grows whatever the loops do "
                "(it counts in Z, the same at every break, though no loop transfer shows it)", term.app.span,
                "an unstable filter on an input path cannot be stabilised by feedback; check the model"))
    if prep.diagram.breaks:
        Z, model_warnings, counts = count_all(red, setup)
    else:
        (Z, model_warnings), counts = count_model(red, setup), {}
    for code, message in model_warnings:
        findings.append(Finding("warning", code, message, Span(model.file, 1, 1)))
    touching = tuple(sorted({c.marginal_freq for c in counts.values() if c.marginal}))
    if touching:
        Z, _ = count_model(red, setup.touching(touching))
    from .engine.margins import loop_margins, stabilising_gains

    margins: dict[str, Margins | None] = {}
    for cut in prep.diagram.breaks:
        name = cut.stmt.name
        c = counts[name]
        stable = c.Z == 0 and not c.marginal
        margins[name] = (loop_margins(lambda s, n=name: red.loop_transfer(n, s), c.response, c.P)
                         if stable else None)
    results = []
    for cut in prep.diagram.breaks:
        name = cut.stmt.name
        c = counts[name]
        warnings = list(c.warnings)
        if c.Z != Z:
            warnings.append(("LW486", f"this break counts Z = {c.Z} closed-loop RHP poles but the whole "
                             f"model counts {Z}; the verdict is not trustworthy"))
        if not red.has_delay:
            warnings.extend(_hidden(red, name))
        stable = c.Z == 0 and not c.marginal
        m = margins[name]
        separation = None
        if cut.enclosed_by and m is not None and margins.get(cut.enclosed_by) is not None:
            outer = margins[cut.enclosed_by].crossover_freq
            if m.crossover_freq is not None and outer:
                separation = m.crossover_freq / outer
                if separation < SEPARATION_WARNING:
                    warnings.append(("LW383", f"crossover only {separation:.2g} times that of the enclosing "
                                     f"break `{cut.enclosed_by}` (common practice: 3 to 5 times or more)"))
        verdict = "marginal" if c.marginal else ("stable" if stable else "unstable")
        reqs = tuple(r for r in model.requirements if r.target in (name, "*"))
        evaluate = (lambda s, n=name: red.loop_transfer(n, s))
        # for a stable break the margins already hold the stretch around k = 1; both margins
        # unbounded is the one case worth checking against the count (it also means "no stretch")
        ambiguous = stable and m is not None and m.gain_margin_up_db is None and m.gain_margin_down_db is None
        gains = stabilising_gains(c.response, c.P, evaluate) if (ambiguous or not stable) else ()
        if ambiguous and not any(lo < 1.0 < hi for lo, hi in gains):
            warnings.append(("LW582", "the gain-margin stretches do not place k = 1 in a stable range "
                             "although the count is stable; treat the gain margins with care"))
        results.append(BreakResult(
            name=name, at=cut.stmt.at, line=cut.stmt.span.line, stable=stable, open_loop_rhp_poles=c.P,
            encirclements=c.N, closed_loop_rhp_poles=c.Z, marginal=c.marginal, marginal_freq=c.marginal_freq,
            margins=m, requirements=judge(reqs, m, separation, verdict),
            warnings=tuple(Finding("warning", code, message, cut.stmt.span) for code, message in warnings),
            stabilising_gains=() if stable else gains, enclosed_by=cut.enclosed_by, separation=separation, response=c.response,
        ))
    marginal = any(r.marginal for r in results)
    return ModelResult(model.file, model.name, Z == 0 and not marginal, Z, tuple(results), tuple(findings))


def _hidden(red: Reduction, name: str) -> list[tuple[str, str]]:
    from .engine.statespace import hidden_modes
    try:
        modes = hidden_modes(red, name)
    except (np.linalg.LinAlgError, ValueError):
        return []
    out = []
    for l, names in modes:
        # the rank test can misfire on badly scaled forms: a mode that L_k shows (|L| grows
        # like 1/d^m next to it) is not hidden
        d = 1e-3 * max(abs(l), 1e-12)
        with np.errstate(all="ignore"):
            near = np.abs(red.loop_transfer(name, np.array([l + d, l + d * 1e-2])))
        if np.all(np.isfinite(near)) and near[1] > 10.0 * near[0]:
            continue
        out.append(("LW487", f"hidden unstable mode at s = {l.real:.4g}{l.imag:+.4g}j inside the loop "
                    f"(cancelled, invisible in L): blocks {', '.join(names)}"))
    return out


def nyquist_verdict(L, indent: str = "right"):
    """P, N, Z (a stability.NyquistCount) of unity negative feedback around L, without margins."""
    prep = _single_loop(L, "loop")
    setup = prepare_contour(prep.reduction, indent, for_margins=False)
    return count_all(prep.reduction, setup)[2]["loop"]


def analyse_loop(L, name: str = "loop", indent: str = "right") -> BreakResult:
    """Unity negative feedback around the loop transfer L (a Transfer)."""
    return check_prepared(_single_loop(L, name), indent).breaks[0]


def _single_loop(L, name: str) -> Prepared:
    from .language import ast
    from .language.resolve import Application, Block, Term

    span = Span("<loop>", 1, 1)
    app = Application("L", L, span)
    model = Model(
        name=name, file="<loop>", params={}, blocks={"L": Block("L", L, span)}, inputs={"r": span},
        signals={"e": span, "y": span}, hidden=frozenset(),
        equations={"e": (Term("r", 1.0, None, span), Term("y", -1.0, None, span)), "y": (Term("e", 1.0, app, span),)},
        breaks=(ast.BreakStmt(span, name, "y", span),), requirements=(), findings=(),
    )
    return _prepare(model)
