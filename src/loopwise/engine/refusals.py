"""Located errors for models the engine cannot certify (part of the wind stage).

Each function turns a reason found while preparing a contour into a ModelError that
says what, where and what to do: numbers beyond double precision (LW406), an
improper loop or closed loop (LW403), an improper loop transfer at a break (LW404),
a neutral loop (LW401), a curve the sample budget could not resolve (LW402).
"""
from __future__ import annotations

import numpy as np

from ..errors import ModelError, Span
from ..language.model import block_words
from .certificate import ImproperLoop, Uncertified
from .reduce import Component, Reduction

__all__ = ["check_range", "check_span", "check_values", "value_grids", "improper_loop", "uncertified_radius",
           "unresolved", "out_of_range", "ROOT_RANGE", "VALUE_LIMIT"]

#: poles and zeros (rad/s, nonzero) must lie in this range (LW406 otherwise)
ROOT_RANGE = (1e-150, 1e150)
#: a wiring term larger than this on the axis overflows the engine's solves (LW406)
VALUE_LIMIT = 1e200
#: one loop component's nonzero poles and zeros may span at most this many decades (LW406):
#: beyond, its loops' gains multiplied together exceed what double precision resolves
MAX_DECADES = 26


def check_range(red: Reduction) -> None:
    """LW406 for a pole or zero outside ROOT_RANGE: the contour would span more decades
    than double precision can sample and evaluate."""
    lo, hi = ROOT_RANGE
    terms = [i.term for i in red.instances if i.transfer is not None] + list(red.exogenous)
    for term in terms:
        tf = term.app.transfer
        for roots, what in ((tf.poles, "pole"), (tf.zeros, "zero")):
            mags = np.abs(roots[roots != 0])
            bad = mags[(mags < lo) | (mags > hi)]
            if bad.size:
                raise ModelError("LW406", f"{block_words(term.app.label)} has a {what} at {bad[0]:.3g} rad/s, beyond the "
                                 f"engine's range ({lo:g} to {hi:g} rad/s)", term.app.span,
                                 "rescale the model's time unit or drop modes far outside the loops' bandwidth")


def check_span(red: Reduction, comp: Component) -> None:
    """LW406 for a component whose poles and zeros span more than MAX_DECADES."""
    poles, zeros = comp.roots()
    mags = np.abs(np.concatenate([poles, zeros]))
    mags = mags[mags > 0]
    if mags.size and np.log10(mags.max() / mags.min()) > MAX_DECADES:
        span = np.log10(mags.max() / mags.min())
        raise ModelError("LW406", f"the poles and zeros of one set of connected loops span {span:.0f} decades "
                         f"({mags.min():.3g} to {mags.max():.3g} rad/s): beyond {MAX_DECADES} decades their "
                         "gains multiplied together exceed what double precision resolves",
                         Span(red.diagram.model.file, 1, 1),
                         "split the model, or leave out loops and modes far outside the bandwidth of interest")


def check_values(red: Reduction, comp: Component, R: float) -> None:
    """LW406 where a component's terms overflow double precision on the axis below R."""
    w = value_grids([comp], [R])[0]
    with np.errstate(all="ignore"):
        big = ~(np.abs(comp.bank.values(1j * w)) < VALUE_LIMIT)
    if np.any(big):
        i = int(np.nonzero(big.any(axis=1))[0][0])
        raise ModelError("LW406", f"the model's transfer values overflow double precision near {w[i]:.3g} rad/s "
                         f"(beyond {VALUE_LIMIT:g})", Span(red.diagram.model.file, 1, 1),
                         "rescale the model's gains or time unit")


def out_of_range(red: Reduction, comp: Component, w: float) -> ModelError:
    """LW406 where the solve of a component's loops overflows double precision at a point
    of the contour (near `w` rad/s) although its determinant there is finite: the loops'
    signals respond over more than double precision's range (a long cascade of
    integrators at a frequency far below its inner loops)."""
    poles, zeros = comp.roots()
    mags = np.abs(np.concatenate([poles, zeros]))
    mags = mags[mags > 0]
    span = f" (its poles and zeros span {np.log10(mags.max() / mags.min()):.0f} decades)" if mags.size else ""
    return ModelError("LW406", f"the loops' signals near {w:.3g} rad/s differ by more than double precision "
                      f"can hold{span}: the loop transfers cannot be evaluated there",
                      Span(red.diagram.model.file, 1, 1),
                      "split the model, or leave out loops and modes far outside the bandwidth of interest")


def value_grids(comps: list[Component], Rs: list[float]) -> list[np.ndarray]:
    """The frequencies (rad/s) where `check_values` looks at each component's terms below its
    radius: 301 log-spaced from 1e-3 of its smallest nonzero root (or R/10) up to R, less
    those within 1e-6 of a root on the axis. All components' grids from one geomspace."""
    lows, axes = [], []
    for comp, R in zip(comps, Rs):
        poles, zeros = comp.roots()
        roots = np.concatenate([poles, zeros])
        mags = np.abs(roots[roots != 0])
        low = float(np.min(mags)) * 1e-3 if mags.size else 1e-3
        lows.append(min(low, R / 10))
        axes.append(np.abs(roots[roots.real == 0].imag))
    grids = np.geomspace(np.array(lows, float), np.array(Rs, float), 301).T
    out = []
    for w, axis in zip(grids, axes):
        if axis.size:
            w = w[np.min(np.abs(w[:, None] - axis[None, :]), axis=1) > 1e-6 * w]
        out.append(w)
    return out


def _improper_blocks(entries) -> list[str]:
    return list(dict.fromkeys(tf_label for tf_label, tf in entries if tf is not None and not tf.is_proper))


def _labels(red: Reduction, comp: Component, positions) -> list[tuple[str, object]]:
    insts = [red.instances[comp.instances[p]] for p in positions]
    return [(i.term.app.label if i.term.app is not None else "", i.transfer) for i in insts]


def improper_loop(red: Reduction, comp: Component, exc: ImproperLoop) -> ModelError:
    """LW403 for a loop of the wiring whose gain grows without bound at high frequency (an
    ideal derivative with nothing to roll it off): names the loop's signals and its
    improper blocks, located at the first improper block."""
    model = red.diagram.model
    insts = [red.instances[comp.instances[p]] for p in exc.positions]
    names = list(dict.fromkeys(model.hidden_owner.get(red.signals[i.row], red.signals[i.row]) for i in insts))
    blocks = _improper_blocks(_labels(red, comp, exc.positions))
    first = next(i for i in insts if i.transfer is not None and not i.transfer.is_proper)
    return ModelError(
        "LW403", "the closed loop is improper: the loop through " + ", ".join(f"`{n}`" for n in names)
        + " has more zeros than poles all the way round (ideal derivative in "
        + ", ".join(block_words(b) for b in blocks) + "), so its gain grows without bound at high frequency",
        first.term.app.span, "give the derivative a filter pole, e.g. Kd*s/(Tf*s + 1), or add a lag on the loop")


def uncertified_radius(red: Reduction, comp: Component, brk, exc: Uncertified) -> ModelError:
    """The error for a component (brk None) or a break whose certificate failed."""
    model = red.diagram.model
    span = brk.stmt.span if brk is not None else Span(model.file, 1, 1)
    where = f"at break `{brk.stmt.name}`" if brk is not None else "of the model"
    if exc.reason == "neutral":
        return ModelError(
            "LW401", f"the model is of neutral type: the high-frequency loop gain {where} through delays is "
            f"{exc.rho:.3g} (>= 1), so no finite frequency range certifies its stability", span,
            "a loop with direct feedthrough and a delay must have a high-frequency gain below 1; "
            "add a filter pole")
    if exc.reason == "ill-posed":
        blocks = _improper_blocks(_labels(red, comp, range(len(comp.entries))))
        with_blocks = (" (ideal derivative in " + ", ".join(block_words(b) for b in blocks) + ")") if blocks else ""
        if brk is None:
            return ModelError("LW403", "the closed loop is improper: at high frequency its loops cancel the "
                              f"direct path exactly{with_blocks}, so the signals are not determined", span,
                              "give the derivative a filter pole, e.g. Kd*s/(Tf*s + 1)")
        return ModelError("LW404", f"the loop transfer {where} is improper{with_blocks}: with the other "
                          "loops closed, the wiring is singular at high frequency", span,
                          "give the derivative a filter pole, e.g. Kd*s/(Tf*s + 1), or break the loop elsewhere")
    return ModelError("LW406", f"the gains {where} need a frequency range beyond double precision "
                      "(above 1e250 rad/s) to certify the count", span,
                      "rescale the model's gains or time unit (e.g. work in ms)")


def unresolved(red: Reduction, tr, columns: list[str]) -> ModelError:
    """LW402, saying which curve could not be resolved where, and why that may be."""
    stuck = tr.stuck
    if stuck is None:
        what, where, why = ["the contour"], "", "check the model's numbers"
    else:
        (lo, hi), cols, by_delay = stuck
        what = list(dict.fromkeys(columns[c] for c in cols if c < len(columns))) or ["the contour"]
        where = f" near {lo:.4g} rad/s" if hi <= lo * 1.01 else f" between {lo:.4g} and {hi:.4g} rad/s"
        if by_delay:
            why = ("the delays turn the curve faster than the sample budget can follow there; a delay that "
                   "long at that frequency is beyond the certificate: check the delay's value and unit")
        else:
            why = ("a resonance too lightly damped, or values that differ by rounding only; check the "
                   "damping and the numbers of the blocks that act there")
    return ModelError("LW402", f"the Nyquist count could not be certified within {tr.s.size} samples: "
                      f"{', '.join(what)} still {'changes' if len(what) == 1 else 'change'} too fast to "
                      f"sample{where}", Span(red.diagram.model.file, 1, 1), why)
