"""Closed-loop poles that exact pole-zero cancellations hide (part of the wind stage).

A cancellation removes a mode from a transfer function, not from the system: the
states of every block application stay, and the closed loop's characteristic
function is chi(s) = prod_b den_b(s) det(I - A(s)) (docs/method.md). Two places
hide such a mode from the Nyquist count:

* inside one block (`(s - 1)/((s - 1)(s + 2))`): the resolver keeps the block
  minimal and records the cancelled poles (`Transfer.cancelled`); a cancelled
  pole in Re s >= 0 is a closed-loop pole wherever the block is applied;
* between blocks (a PI integrator against a plant zero at s = 0, a notch against
  an undamped plant pair): chi vanishes at a block pole p. On the imaginary axis
  the contour indents round p, so the count cannot see it; in the right half plane
  the count does (Z), but no loop transfer shows it.

The second kind is looked for at every block pole p in Re s >= 0 that a zero of
another block (or of the same block's other application) cancels, or that only a
block on an input path has: on a small circle round p, det(I - A) ~ c (s - p)^k,
so its winding number is k, and chi has a zero of order m + k at p, m being the
number of block poles at p. An exact cancellation puts the closed-loop pole at p
itself, so the circle can be small: 1e-12 of the distance to the nearest other
block root. At an axis pole that nothing cancels the circle is the contour's own
indentation: a closed-loop pole inside it is excluded from the count whichever
side of the axis it lies, so it is reported as on the axis (marginal) rather than
taken for stable. Delays do not matter here: exp(-sT) has neither zeros nor poles.
"""
from __future__ import annotations

import math

import numpy as np

from ..results import HiddenMode
from .reduce import Reduction
from .winding import axis_orders, indentation_radius

__all__ = ["cancelled_modes", "structural_modes", "applications", "candidates", "circles", "circle", "circle_order"]

#: two roots closer than this (relative) are the same root
_SAME = 1e-9
#: radius of the circle round a block pole, relative to the distance to the nearest other root
_RADIUS = 1e-12


def applications(red: Reduction) -> list:
    """Every block application of the model, in the loops or on input paths (its wiring Term)."""
    return [inst.term for inst in red.instances if inst.transfer is not None] + list(red.exogenous)


def _label(term) -> str:
    """The block's name, or `[..]@line:col` for a bracketed transfer (its place)."""
    return term.app.label


def _same(a: complex, b: np.ndarray) -> np.ndarray:
    return np.abs(b - a) <= _SAME * np.maximum(abs(a), np.abs(b))


def _upper(roots: np.ndarray) -> list[complex]:
    """Distinct roots with Re >= 0 and Im >= 0 (one of each conjugate pair)."""
    out: list[complex] = []
    roots = np.asarray(roots)
    for r in roots[(roots.real >= 0) & (roots.imag >= 0)]:  # in their order
        if not any(abs(r - q) <= _SAME * max(abs(r), abs(q)) for q in out):
            out.append(complex(r))
    return out


def cancelled_modes(red: Reduction) -> list[HiddenMode]:
    """Poles in Re s >= 0 that a block cancels with its own zeros (LW281), per block."""
    found: dict[tuple[str, complex], int] = {}
    for term in applications(red):
        cancelled = term.app.transfer.cancelled
        for p in _upper(cancelled):
            key = (_label(term), p)
            found[key] = found.get(key, 0) + int(np.sum(_same(p, cancelled)))
    return [HiddenMode(p, m, "LW281", (label,), (label,)) for (label, p), m in found.items()]


def circle(p: complex, radius: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    """n + 1 angles from 0 to 2 pi and the points p + radius e^(j theta) at them."""
    theta = np.linspace(0.0, 2 * math.pi, n + 1)
    return theta, p + radius * np.exp(1j * theta)


def circle_order(phase: np.ndarray, theta: np.ndarray, m: int) -> tuple[int, float] | None:
    """The winding number of det(I - A) (s - p)^m from arg det(I - A) on `circle(p, r, n)`
    (n = theta.size - 1), and its rounding error; None where n steps do not resolve it and
    more are allowed (up to 4096)."""
    n = theta.size - 1
    steps = np.diff(phase + m * theta)
    steps = (steps + math.pi) % (2 * math.pi) - math.pi
    if np.all(np.isfinite(steps)) and (np.max(np.abs(steps)) < math.pi / 4 or n >= 4096):
        total = float(np.sum(steps)) / (2 * math.pi)
        return int(round(total)), abs(total - round(total))
    return (0, math.inf) if n >= 4096 else None


def _order(red: Reduction, p: complex, m: int, radius: float) -> tuple[int, float]:
    """The order of chi at p: the winding number of det(I - A) (s - p)^m round the circle
    |s - p| = radius (that of det(I - A) plus m; the factor takes det's pole of order up
    to m off, so few samples resolve it), and its rounding error."""
    n = 64
    while True:
        theta, s = circle(p, radius, n)
        found = circle_order(red.characteristic(s)[0], theta, m)
        if found is not None:
            return found
        n *= 4


def circles(red: Reduction, found: list | None = None) -> list[tuple[complex, int, float]]:
    """The circles (pole p, block poles m there, radius) round which `structural_modes`
    winds det(I - A), in its order. `found`: `candidates(red)`, when already at hand."""
    return [(p, m, radius) for p, m, radius, *_ in (candidates(red) if found is None else found)]


def candidates(red: Reduction) -> list[tuple]:
    """The block poles in Re s >= 0 that `structural_modes` looks at, with what it needs of
    each (a batch finds them once for `circles` and `structural_modes`)."""
    terms = applications(red)
    poles = red.block_poles()
    roots = np.concatenate([poles, red.block_zeros()])
    out = []
    for p in _upper(poles):
        pole_terms = [t for t in terms if np.any(_same(p, t.app.transfer.poles))]
        zero_blocks = tuple(dict.fromkeys(
            _label(inst.term) for inst in red.instances
            if inst.transfer is not None and np.any(_same(p, inst.transfer.zeros))))
        exogenous_only = all(any(t is e for e in red.exogenous) for t in pole_terms)
        m = int(np.sum(_same(p, poles)))
        if zero_blocks or exogenous_only:
            others = roots[~_same(p, roots)]
            d = float(np.min(np.abs(others - p))) if others.size else max(1.0, abs(p))
            radius = max(_RADIUS * min(d, max(1.0, abs(p))), 10.0 ** (-250.0 / m) * max(1.0, abs(p)))
        elif p.real == 0:
            # nothing cancels it, but a closed-loop pole inside the contour's indentation is
            # excluded from the count whichever side it lies: say so rather than call it stable
            orders = axis_orders(t.app.transfer for t in terms)
            radius = indentation_radius(abs(p.imag), orders.get(abs(p.imag), 1), roots)
        else:
            continue  # in the right half plane and not cancelled: the count sees it
        out.append((p, m, radius, exogenous_only, pole_terms, zero_blocks))
    return out


def structural_modes(red: Reduction, known: dict | None = None, found: list | None = None) -> list[HiddenMode]:
    """Closed-loop poles at block poles in Re s >= 0 (cancellations between blocks,
    LW487 / LW488; a block on an input path only, LW484). `known` maps circles (as
    `circles` gives them) to their (order, error) when already wound (a batch does all
    its samples' circles at once); `found`: `candidates(red)`, when already at hand."""
    out = []
    for p, m, radius, exogenous_only, pole_terms, zero_blocks in (candidates(red) if found is None else found):
        found = (known or {}).get((p, m, radius))
        order, err = found if found is not None else _order(red, p, m, radius)
        if err > 0.1 or order <= 0:
            continue
        code = "LW484" if exogenous_only else ("LW488" if p.real == 0 else "LW487")
        out.append(HiddenMode(p, order, code, tuple(dict.fromkeys(_label(t) for t in pole_terms)), zero_blocks))
    return out
