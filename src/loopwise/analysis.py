"""The whole check of one model: parse -> graph -> reduce -> wind -> margins -> judge.

`check_text` / `check_file` return a frozen ModelResult or raise ModelErrors
(every error located). `prepare_text` stops before the verdict (for tests and
tools that want the loop transfers themselves). `analyse_loop` checks unity
negative feedback around one loop transfer (used by the reference tests).
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
from .results import BreakResult, HiddenMode, ModelResult
from .engine.hidden import applications, cancelled_modes, structural_modes
from .engine.stability import count_all, count_model, prepare_contour
from .judge import SEPARATION_WARNING, judge
from .waivers import apply_waivers, settings_waivers_for

__all__ = ["Prepared", "parse_for_check", "prepare_model", "prepare_text", "prepare_file", "check_model",
           "check_text", "check_file", "check_prepared", "analyse_loop", "nyquist_verdict"]


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


def prepare_model(model: Model) -> Prepared:
    """The loop graph and the reduction of a resolved model."""
    diagram = build_diagram(model)
    return Prepared(model, diagram, reduce_diagram(diagram))


def prepare_text(text: str, file: str = "<text>", settings=None) -> Prepared:
    text, file, settings = arg.model_text(text), arg.file_label(file), arg.settings_or_none(settings)
    parsed = parse_model(text, file, _settings_requirements(settings),
                         getattr(settings, "source", None) or "<settings>")
    return prepare_model(resolve_parsed(_with_settings(parsed, settings), _overrides(settings)))


def prepare_file(path, settings=None, root=None) -> Prepared:
    """`root`: the checked models' common folder; outside git, includes must stay inside it."""
    path, settings = arg.model_path(path), arg.settings_or_none(settings)
    root = None if root is None else arg.model_path(root, "root")
    return prepare_model(resolve_parsed(parse_for_check(path, settings, root), _overrides(settings)))


def check_model(model: Model, indent: str = "right") -> ModelResult:
    """The verdict of a resolved model, its findings marked by the waivers that accept
    them (the model's own and the settings' it carries). `check_file` and every plant
    of a sweep go through here."""
    return _waived_verdict(prepare_model(model), indent)


def _waived_verdict(prep: Prepared, indent: str) -> ModelResult:
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
        return _waived_verdict(prepare_text(text, file, settings), indent)


def check_file(path, settings=None, indent: str = "right", root=None) -> ModelResult:
    """Check one model file; raises loopwise.ModelError when it cannot be read. Includes
    must stay in the git work tree holding the model, outside git in `root` (default: the
    model's folder); see docs/language.md, `use`."""
    indent = arg.check_indent(indent)
    with _unreadable():
        return _waived_verdict(prepare_file(path, settings, root), indent)


def check_prepared(prep: Prepared, indent: str = "right") -> ModelResult:
    model, red = prep.model, prep.reduction
    findings = list(prep.diagram.findings)
    if not model.equations:
        # a library of params and blocks, meant for `use`: nothing to check on its own
        findings.append(Finding("note", "LW491", "no signal equations: a library of params and blocks "
                                "(for `use`), nothing to check on its own", Span(model.file, 1, 1)))
        return ModelResult(model.file, model.name, True, 0, (), tuple(findings))
    setup = prepare_contour(red, indent)
    roots = np.abs(setup.roots[setup.roots != 0])
    if roots.size and roots.max() / roots.min() > 1e10:
        findings.append(Finding(
            "warning", "LW483", f"poles and zeros span {np.log10(roots.max() / roots.min()):.0f} decades "
            f"({roots.min():.3g} to {roots.max():.3g} rad/s): double precision may not resolve such a model; "
            "treat its margins with care", Span(model.file, 1, 1),
            "rescale time (e.g. work in ms) or drop modes far outside the loop's bandwidth"))
    if prep.diagram.breaks:
        Z, model_warnings, counts = count_all(red, setup)
    else:
        (Z, model_warnings), counts = count_model(red, setup), {}
    for code, message in model_warnings:
        findings.append(Finding("warning", code, message, Span(model.file, 1, 1)))
    touching = tuple(sorted({c.marginal_freq for c in counts.values() if c.marginal}))
    if touching:
        Z, _ = count_model(red, setup.touching(touching))
    modes = counted_modes(cancelled_modes(red) + structural_modes(red), model)
    findings.extend(_mode_findings(red, modes))
    extra_rhp, hidden_axis = verdict_adjustment(modes)
    Z += extra_rhp
    from .engine.margins import loop_margins, stabilising_gains

    rows, margins = [], {}
    for cut in prep.diagram.breaks:
        name = cut.stmt.name
        c = counts[name]
        _check_not_zero(cut, c)
        P, Zk = c.P + extra_rhp, c.Z + extra_rhp
        marginal, marginal_freq, cause = c.marginal, c.marginal_freq, ("loop" if c.marginal else None)
        if hidden_axis and not marginal:
            marginal, marginal_freq, cause = True, hidden_axis[0], "hidden"
        stable = Zk == 0 and not marginal
        evaluate = (lambda s, n=name: red.loop_transfer(n, s))
        margins[name] = loop_margins(evaluate, c.response, c.P) if stable else None
        warnings = list(c.warnings)
        if Zk != Z:
            warnings.append(("LW486", f"this break counts Z = {Zk} closed-loop RHP poles but the whole "
                             f"model counts {Z}; the verdict is not trustworthy"))
        warnings.extend(_hidden_from_loop(red, name, modes))
        if not stable and not marginal and P == 0:
            warnings.extend(_positive_feedback(red, cut, c))
        rows.append((cut, c, P, Zk, marginal, marginal_freq, cause, stable, warnings))
    # no gain factor moves a mode that a cancellation hides: no stabilising range then
    fixable = not any(h.counted for h in modes)
    results = []
    for cut, c, P, Zk, marginal, marginal_freq, cause, stable, warnings in rows:
        name = cut.stmt.name
        m = margins[name]
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
        evaluate = (lambda s, n=name: red.loop_transfer(n, s))
        # for a stable break the margins already hold the stretch around k = 1; both margins
        # unbounded is the one case worth checking against the count (it also means "no stretch")
        ambiguous = stable and m is not None and m.gain_margin_up_db is None and m.gain_margin_down_db is None
        gains = stabilising_gains(c.response, c.P, evaluate) if (ambiguous or (not stable and fixable)) else ()
        if ambiguous and not any(lo < 1.0 < hi for lo, hi in gains):
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
    marginal = any(r.marginal for r in results) or bool(hidden_axis)
    return ModelResult(model.file, model.name, Z == 0 and not marginal, Z, tuple(results), tuple(findings),
                       tuple(modes))


def counted_modes(modes: list[HiddenMode], model: Model) -> list[HiddenMode]:
    """The hidden modes with `counted` set: every one, unless a waiver accepts it.

    A mode whose code is waived (`waive CODE "reason"`, or `waive CODE at NAME` for
    one of the blocks whose pole or zero it is) gets `counted=False` and is then left
    out of Z and of the marginal verdict by `verdict_adjustment`; its finding is still
    reported, marked with the waiver.
    """
    return [replace(h, counted=False) if model.waivers.waiver_for(h.code, _mode_subject(h)) else h
            for h in modes]


def _mode_subject(h: HiddenMode) -> tuple[str, ...]:
    """The named blocks a hidden mode is about (inline `[..]` transfers have no name)."""
    return tuple(dict.fromkeys(b for b in (*h.pole_blocks, *h.zero_blocks) if not b.startswith("[")))


def verdict_adjustment(modes: list[HiddenMode]) -> tuple[int, list[float]]:
    """What the hidden modes change in the count: (closed-loop RHP poles to add to Z and
    to every P_k, frequencies of closed-loop poles on the imaginary axis).

    A mode cancelled inside one block (LW281) is invisible to the winding count: a
    counted one adds its right-half-plane poles. The others (LW484, LW487) are
    already in the count, through P0 or det(I - A): a waived one takes its poles off.
    Axis modes of any kind make the closed loop marginal unless waived.
    """
    extra = 0
    for h in modes:
        if h.code == "LW281" and h.counted:
            extra += h.rhp_count
        elif h.code != "LW281" and not h.counted:
            extra -= h.rhp_count
    axis = sorted({abs(h.pole.imag) for h in modes if h.counted and h.on_axis})
    return extra, axis


def _mode_findings(red: Reduction, modes: list[HiddenMode]) -> list[Finding]:
    """Located findings for the hidden modes between blocks and on input paths (the
    resolver names those inside one block, LW281, at the block)."""
    spans = {t.app.label: t.app.span for t in applications(red)}
    out = []
    for h in modes:
        where = _pole_text(h.pole)
        span = spans.get(h.pole_blocks[0], Span(red.diagram.model.file, 1, 1))
        blocks = ", ".join(f"`{b}`" for b in h.pole_blocks)
        if h.code == "LW488" and not h.zero_blocks:
            out.append(Finding(
                "warning", "LW488", f"closed-loop pole {where}, within 1e-9 (relative) of the pole of {blocks} "
                "on the imaginary axis: on the axis as far as double precision can resolve (marginal)", span,
                "check the model's numbers: a closed-loop pole this close to an open-loop one is not a "
                "robust design", _mode_subject(h)))
        elif h.code == "LW488":
            out.append(Finding(
                "warning", "LW488", f"closed-loop pole {where} on the imaginary axis, hidden by a cancellation: "
                f"pole of {blocks}, zero of " + (", ".join(f"`{b}`" for b in h.zero_blocks) or "the wiring")
                + "; the mode never decays and no loop transfer shows it (marginal)", span,
                "remove the cancellation (e.g. a PI integrator against a plant zero at s = 0) or model the "
                "mode's damping", _mode_subject(h)))
        elif h.code == "LW484":
            n_rhp = h.rhp_count
            grows = (f"has {n_rhp} pole(s) in the right half plane" if n_rhp else
                     f"has a pole {where} on the imaginary axis")
            inputs = ", ".join(dict.fromkeys(f"`{t.source}`" for t in red.exogenous if t.app.label in h.pole_blocks))
            out.append(Finding(
                "warning", "LW484", f"{blocks} is driven by the input {inputs} only and {grows}: its output "
                "does not settle whatever the loops do (it counts in the verdict, the same at every break, "
                "though no loop transfer shows it)", span,
                "a filter on an input path cannot be stabilised by feedback; check the model",
                _mode_subject(h) + tuple(dict.fromkeys(t.source for t in red.exogenous
                                                       if t.app.label in h.pole_blocks))))
    return out


def _pole_text(p: complex) -> str:
    if p.imag == 0:
        return f"at s = {p.real:.4g}"
    re = f"{p.real:.4g} " if p.real else ""
    return f"at s = {re}+-{p.imag:.4g}j ({p.imag:.4g} rad/s)"


def _hidden_from_loop(red: Reduction, name: str, modes: list[HiddenMode]) -> list[tuple[str, str]]:
    """LW487 at a break for each unstable mode hidden by a cancellation that its L does not
    show (next to a pole it shows, |L| grows like 1/d^m as the distance d shrinks)."""
    out = []
    for h in modes:
        if h.code != "LW487" or not h.counted:
            continue
        pole = h.pole
        d = 1e-3 * max(abs(pole), 1e-12)
        with np.errstate(all="ignore"):
            near = np.abs(red.loop_transfer(name, np.array([pole + d, pole + d * 1e-2])))
        if np.all(np.isfinite(near)) and near[1] > 10.0 * near[0]:
            continue
        names = ", ".join(dict.fromkeys(h.pole_blocks + h.zero_blocks))
        out.append(("LW487", f"hidden unstable mode at s = {pole.real:.4g}{pole.imag:+.4g}j inside the loop "
                    f"(cancelled, invisible in L): blocks {names}"))
    return out


def _positive_feedback(red: Reduction, cut, count) -> list[tuple[str, str]]:
    """LW489: an unstable break without open-loop RHP poles whose L is negative at low
    frequency (at s = 0, or just right of an integrator): fed back with the wrong sign?"""
    resp = count.response
    if resp is None or resp.s.size == 0 or resp.s[0].imag != 0.0:
        return []
    L0 = complex(resp.L[0])
    if not (np.isfinite(L0) and L0.real < 0 and abs(L0.imag) <= 1e-9 * abs(L0)):
        return []
    model = red.diagram.model
    junctions = ", ".join(dict.fromkeys(f"`{model.hidden_owner.get(v, v)}`" for _, v in cut.edges))
    return [("LW489", f"L is negative at low frequency (L = {L0.real:.4g} near s = 0) with no open-loop "
             f"unstable poles: the loop looks closed with positive feedback; check the sign where "
             f"`{cut.signal}` enters {junctions}")]


def _check_not_zero(cut, count) -> None:
    """LW405: a break whose loop transfer is zero at every sample: its feedback paths cancel."""
    L = count.response.L if count.response is not None else np.zeros(0)
    if L.size and np.all(np.abs(L) < 1e-13):
        raise ModelError(
            "LW405", f"the loop transfer at break `{cut.stmt.name}` is zero at every frequency (|L| < 1e-13): "
            f"the paths that feed `{cut.signal}` back cancel each other exactly", cut.stmt.span,
            "a sign error? e.g. a signal added both directly and through a junction that subtracts it")


def nyquist_verdict(L, indent: str = "right"):
    """P, N, Z (a stability.NyquistCount) of unity negative feedback around L, without margins."""
    indent = arg.check_indent(indent)
    prep = _single_loop(arg.loop_transfer(L), "loop")
    setup = prepare_contour(prep.reduction, indent, for_margins=False)
    return count_all(prep.reduction, setup)[2]["loop"]


def analyse_loop(L, name: str = "loop", indent: str = "right") -> BreakResult:
    """Unity negative feedback around the loop transfer L (a Transfer)."""
    indent = arg.check_indent(indent)
    return check_prepared(_single_loop(arg.loop_transfer(L), arg.break_name(name)), indent).breaks[0]


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
    return prepare_model(model)
