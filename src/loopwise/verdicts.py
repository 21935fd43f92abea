"""What a count means for a model: hidden modes, their findings and the break-level hints.

`counted_modes` is where waivers act on hidden modes; `verdict_adjustment` turns the
counted modes into the change of Z and the marginal verdict; the other functions word
the findings (docs/method.md: hidden modes, hints about the wiring).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from .engine.hidden import applications
from .engine.reduce import Reduction
from .errors import Finding, ModelError, Span
from .language.model import Model, block_words
from .results import HiddenMode

__all__ = ["counted_modes", "verdict_adjustment", "mode_findings", "hidden_from_loop", "positive_feedback",
           "check_not_zero"]


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


def mode_findings(red: Reduction, modes: list[HiddenMode]) -> list[Finding]:
    """Located findings for the hidden modes between blocks and on input paths (the
    resolver names those inside one block, LW281, at the block)."""
    spans = {t.app.label: t.app.span for t in applications(red)}
    out = []
    for h in modes:
        where = _pole_text(h.pole)
        span = spans.get(h.pole_blocks[0], Span(red.diagram.model.file, 1, 1))
        blocks = ", ".join(block_words(b) for b in h.pole_blocks)
        if h.code == "LW488" and not h.zero_blocks:
            out.append(Finding(
                "warning", "LW488", f"closed-loop pole {where}, within 1e-9 (relative) of the pole of {blocks} "
                "on the imaginary axis: on the axis as far as double precision can resolve (marginal)", span,
                "check the model's numbers: a closed-loop pole this close to an open-loop one is not a "
                "robust design", _mode_subject(h)))
        elif h.code == "LW488":
            out.append(Finding(
                "warning", "LW488", f"closed-loop pole {where} on the imaginary axis, hidden by a cancellation: "
                f"pole of {blocks}, zero of " + (", ".join(block_words(b) for b in h.zero_blocks) or "the wiring")
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


def hidden_from_loop(red: Reduction, name: str, modes: list[HiddenMode]) -> list[tuple[str, str]]:
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


def positive_feedback(red: Reduction, cut, count) -> list[tuple[str, str]]:
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


def check_not_zero(cut, count) -> None:
    """LW405: a break whose loop transfer is zero at every sample: its feedback paths cancel."""
    L = count.response.L if count.response is not None else np.zeros(0)
    if L.size and np.all(np.abs(L) < 1e-13):
        raise ModelError(
            "LW405", f"the loop transfer at break `{cut.stmt.name}` is zero at every frequency (|L| < 1e-13): "
            f"the paths that feed `{cut.signal}` back cancel each other exactly", cut.stmt.span,
            "a sign error? e.g. a signal added both directly and through a junction that subtracts it")
