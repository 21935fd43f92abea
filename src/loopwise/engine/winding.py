"""The winding engine: the Nyquist D-contour, adaptive sampling, certified counts.

The contour runs up the imaginary axis with small semicircular indentations
around every block pole on the axis (to the right by default), to s = jR, and
closes along |s| = R back to the real axis. By conjugate symmetry only the upper
half is traced; the count is -(change of arg f)/pi over it. R comes from a
high-frequency certificate (reduce.certificate_radius) beyond which no zero can
lie, and the arc's phase change is computed from that certificate, not sampled.

Sampling is adaptive: an interval between two samples is accepted only when,
for every traced function f, the chord is short compared with |f| at both ends
(|f_b/f_a - 1| <= 0.35, so the phase step is under 21 degrees) and the midpoint
lies close to the chord. A curve that passes the origin closer than the
sampling can resolve is reported as touching it (a marginal case), never
guessed.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

__all__ = ["Piece", "Trace", "build_contour", "indentation_radius", "trace", "phase_change", "encirclements"]

CHORD = 0.35
MIDPOINT = 0.2
MAX_ROUNDS = 70
#: sample budget of one trace (the models of the test suite need under 10,000)
MAX_SAMPLES = 100_000


@dataclass(frozen=True)
class Piece:
    """One stretch of the contour: an axis segment or an indentation arc.

    Axis pieces are parametrised so that halving the parameter resolves what
    matters: linearly near w = 0, in log w on open stretches, and in the log of
    the distance to an indented pole next to one (``center``, ``sign``).
    """

    kind: str  # "axis" | "indent"
    a: float  # axis: range [a, b] (frequencies, or distances from `center`); indent: centre, radius
    b: float
    theta0: float = 0.0
    theta1: float = 0.0
    log: bool = False
    center: float | None = None
    sign: float = 1.0

    def points(self, u: np.ndarray) -> np.ndarray:
        if self.kind == "axis":
            if self.center is not None:
                w = self.center + self.sign * self.a * (self.b / self.a) ** u
            elif self.log:
                w = self.a * (self.b / self.a) ** u
            else:
                w = self.a + (self.b - self.a) * u
            return 1j * w
        theta = self.theta0 + (self.theta1 - self.theta0) * u
        return 1j * self.a + self.b * np.exp(1j * theta)

    @property
    def w_range(self) -> tuple[float, float]:
        if self.center is not None:
            ends = (self.center + self.sign * self.a, self.center + self.sign * self.b)
            return min(ends), max(ends)
        return self.a, self.b

    def u_of(self, w: np.ndarray) -> np.ndarray:
        """Parameter of axis frequencies inside this piece (for seeding the grid)."""
        w = np.asarray(w, float)
        if self.center is not None:
            return np.log(self.sign * (w - self.center) / self.a) / np.log(self.b / self.a)
        if self.log:
            return np.log(w / self.a) / np.log(self.b / self.a)
        return (w - self.a) / (self.b - self.a)


def _indent_radius(w0: float, roots: np.ndarray) -> float:
    """Small enough that a closed-loop pole off the axis by more than 1e-9 of the
    scale is never inside the indentation, large enough for double precision."""
    others = roots[np.abs(roots - 1j * w0) > 1e-12 * np.maximum(np.abs(roots), w0)]
    d = float(np.min(np.abs(others - 1j * w0))) if others.size else max(1.0, w0)
    return 1e-9 * min(d, max(1.0, w0))


def indentation_radius(w0: float, axis_poles: np.ndarray, roots: np.ndarray) -> float:
    """The radius of the indentation round the axis pole(s) at j w0."""
    # m poles at one point make values of about eps^-m there: keep them below 1e250
    m = int(np.sum(np.abs(axis_poles - 1j * w0) <= 1e-12 * np.maximum(np.abs(axis_poles), w0)))
    return max(_indent_radius(w0, roots), 10.0 ** (-250.0 / max(m, 1)) * max(1.0, w0))


def build_contour(axis_poles: np.ndarray, roots: np.ndarray, R: float, indent: str = "right",
                  touching: tuple[float, ...] = ()) -> list[Piece]:
    """Pieces of the upper half contour from the real axis near 0 up to jR.

    `touching` are frequencies where a closed-loop pole sits on the axis (a
    marginal case): they get an indentation to the right too, so that the count
    is of poles strictly in the right half plane.
    """
    marks: dict[float, tuple[float, bool]] = {}
    for p in axis_poles:
        w0 = float(abs(p.imag))
        marks[w0] = (indentation_radius(w0, axis_poles, roots), indent == "right")
    for w0 in touching:
        w0 = float(abs(w0))
        if any(abs(w0 - m) <= 1e-6 * max(1.0, m) for m in marks):
            continue
        marks[w0] = (1e-5 * max(w0, 1e-3), True)
    feature = np.abs(roots[np.abs(roots) > 0]) if roots.size else np.zeros(0)
    low = 1e-4 * float(np.min(feature)) if feature.size else 1e-4
    freqs = sorted(m for m in marks if m < R)
    pieces: list[Piece] = []
    prev: tuple[float, float] | None = None  # the last indented frequency and its radius
    for w0 in freqs:
        eps, right = marks[w0]
        if w0 == 0.0:
            # start on the real axis at +eps (right) or -eps (left), go to j*eps
            pieces.append(Piece("indent", 0.0, eps, 0.0 if right else math.pi, math.pi / 2))
            prev = (0.0, eps)
            continue
        _axis(pieces, prev, (w0, eps), R, low)
        pieces.append(Piece("indent", w0, eps, -math.pi / 2, math.pi / 2 if right else -1.5 * math.pi))
        prev = (w0, eps)
    _axis(pieces, prev, None, R, low)
    return pieces


def _axis(pieces: list[Piece], below: tuple[float, float] | None, above: tuple[float, float] | None,
          R: float, low: float) -> None:
    """The axis between two indentations (or from 0, or up to R)."""
    lo = 0.0 if below is None else below[0] + below[1]
    hi = R if above is None else above[0] - above[1]
    if hi <= lo:
        return
    mid = hi if above is None else (lo + hi) / 2
    if below is None:
        split = min(low, mid / 10.0)
        pieces.append(Piece("axis", 0.0, split))
        if above is None:
            pieces.append(Piece("axis", split, hi, log=True))
            return
        pieces.append(Piece("axis", split, mid, log=True))
    else:
        w0, eps = below
        pieces.append(Piece("axis", eps, mid - w0, center=w0, sign=1.0))
    if above is not None:
        w1, eps = above
        pieces.append(Piece("axis", w1 - mid, eps, center=w1, sign=-1.0))


@dataclass(frozen=True, eq=False)
class Trace:
    """Samples along the upper half contour, in order."""

    s: np.ndarray
    values: np.ndarray  # (M, K) complex logarithms log|f| + j arg f of the traced functions
    on_axis: np.ndarray
    unresolved: tuple[float, ...]  # frequencies where sampling could not settle
    complete: bool
    #: when the budget ran out: (frequency range still being refined, the traced functions that
    #: were not settled there (column indices), whether the delay step rule held intervals back)
    stuck: tuple[tuple[float, float], tuple[int, ...], bool] | None = None


def _seed(piece: Piece, features: np.ndarray) -> np.ndarray:
    if piece.kind == "indent":
        return np.linspace(0.0, 1.0, 9)
    if piece.log or piece.center is not None:
        decades = abs(math.log10(piece.b / piece.a))
        u = np.linspace(0.0, 1.0, max(9, int(decades * 30) + 1))
    else:
        u = np.linspace(0.0, 1.0, 9)
    lo, hi = piece.w_range
    inside = features[(features > lo) & (features < hi)]
    if inside.size:
        u = np.concatenate([u, piece.u_of(inside)])
    return np.unique(np.clip(u, 0.0, 1.0))


def _accept(la, lb, lm, floors) -> np.ndarray:
    """Whether each interval (rows) is resolved for every function."""
    return np.all(_accept_columns(la, lb, lm, floors), axis=1)


def _accept_columns(la, lb, lm, floors) -> np.ndarray:
    """Whether each interval (rows) is resolved for each function (columns)."""
    with np.errstate(all="ignore"):
        rb = np.exp(lb - la)
        rm = np.exp(lm - la)
        ok = (np.abs(rb - 1.0) <= CHORD) & (np.abs(1.0 / rb - 1.0) <= CHORD)
        dev = np.abs(rm - 0.5 * (1.0 + rb))
        ok &= dev <= MIDPOINT * np.minimum(1.0, np.minimum(np.abs(rb), np.abs(rm)))
        # functions with a floor (the loop transfer itself) only need resolving while large
        for k, floor in enumerate(floors):
            if floor is None:
                continue
            fa, fb, fm = np.exp(la[:, k]), np.exp(lb[:, k]), np.exp(lm[:, k])
            scale = np.maximum(np.minimum(np.abs(fa), np.abs(fb)), floor)
            ok_k = (np.abs(fb - fa) <= CHORD * scale) & (np.abs(fm - 0.5 * (fa + fb)) <= MIDPOINT * scale)
            ok[:, k] = ok_k
        # a value that is NaN (a pole hit) or infinite settles nothing; an exact zero of a
        # function with a floor (the loop transfer, cancelled to 0.0 by rounding far below
        # its floor) is as settled as any other value below the floor
        settled = np.isfinite(lm.real)
        for k, floor in enumerate(floors):
            if floor is not None:
                settled[:, k] |= np.isneginf(lm[:, k].real)
    return (ok | ~np.isfinite(rb)) & settled


def trace(pieces: list[Piece], evaluate: Callable[[np.ndarray], np.ndarray], features: np.ndarray,
          floors: tuple[float | None, ...], max_samples: int = MAX_SAMPLES,
          step_ok: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None) -> Trace:
    """Adaptive sampling of `evaluate` (s -> (M, K) complex logs) along the pieces.

    `step_ok(s_a, s_b)` may refuse intervals that are too long whatever the
    samples say: a delay turns the curve by T*dw between two samples, and
    three samples cannot tell a whole number of turns from none.
    """
    all_u, all_piece = [], []
    for i, p in enumerate(pieces):
        u = _seed(p, features)
        all_u.append(u)
        all_piece.append(np.full(u.size, i))
    u = np.concatenate(all_u)
    pid = np.concatenate(all_piece)
    s = np.concatenate([pieces[i].points(uu) for i, uu in enumerate(all_u)])
    vals = evaluate(s)
    # intervals between consecutive samples of the same piece
    pending = np.nonzero(pid[:-1] == pid[1:])[0]
    ia, ib = pending, pending + 1
    ua, ub = u[ia], u[ib]
    pa = pid[ia]
    la, lb = vals[ia], vals[ib]
    sa, sb = s[ia], s[ib]
    out_s, out_v, out_pid, out_u = [s], [vals], [pid], [u]
    unresolved: list[float] = []
    total = s.size
    complete = True
    stuck = None
    for _ in range(MAX_ROUNDS):
        if ua.size == 0:
            break
        um = 0.5 * (ua + ub)
        sm = np.empty(um.size, complex)
        for i in np.unique(pa):
            sel = pa == i
            sm[sel] = pieces[i].points(um[sel])
        lm = evaluate(sm)
        total += sm.size
        out_s.append(sm)
        out_v.append(lm)
        out_pid.append(pa)
        out_u.append(um)
        ok = _accept(la, lb, lm, floors)
        if step_ok is not None:
            sa = np.empty(um.size, complex)
            sb = np.empty(um.size, complex)
            for i in np.unique(pa):
                sel = pa == i
                sa[sel] = pieces[i].points(ua[sel])
                sb[sel] = pieces[i].points(ub[sel])
            ok &= step_ok(sa, sb)
        tiny = (ub - ua) < 1e-13
        if np.any(tiny & ~ok):
            unresolved.extend(float(x) for x in sm[tiny & ~ok].imag)
        redo = ~ok & ~tiny
        if total > max_samples:
            complete = not np.any(redo)
            if not complete:
                cols = ~_accept_columns(la[redo], lb[redo], lm[redo], floors)
                by_delay = step_ok is not None and not np.all(step_ok(sa[redo], sb[redo])) \
                    if sa.shape == um.shape else False
                w = np.abs(sm[redo].imag)
                stuck = ((float(w.min()), float(w.max())), tuple(int(c) for c in np.nonzero(cols.any(axis=0))[0]),
                         bool(by_delay))
            break
        ua = np.concatenate([ua[redo], um[redo]])
        ub = np.concatenate([um[redo], ub[redo]])
        la2 = np.concatenate([la[redo], lm[redo]])
        lb = np.concatenate([lm[redo], lb[redo]])
        la = la2
        pa = np.concatenate([pa[redo], pa[redo]])
    else:
        complete = ua.size == 0
    s = np.concatenate(out_s)
    vals = np.concatenate(out_v)
    pid = np.concatenate(out_pid)
    u = np.concatenate(out_u)
    order = np.lexsort((u, pid))
    s, vals, pid = s[order], vals[order], pid[order]
    on_axis = np.array([pieces[i].kind == "axis" for i in pid], dtype=bool)
    return Trace(s, vals, on_axis, tuple(sorted(set(unresolved))), complete, stuck)


def phase_change(values: np.ndarray) -> np.ndarray:
    """Sum of the principal phase steps between consecutive samples, per function."""
    with np.errstate(invalid="ignore"):  # -inf - -inf (a loop transfer at exactly 0.0): no step
        steps = np.diff(values, axis=0).imag
    steps = (steps + np.pi) % (2 * np.pi) - np.pi
    steps = np.where(np.isfinite(steps), steps, 0.0)
    return steps.sum(axis=0)


def encirclements(total_phase_upper: float) -> tuple[int, float]:
    """Clockwise encirclements from the upper half's phase change; and the rounding error."""
    n = -total_phase_upper / math.pi
    k = int(round(n))
    return k, abs(n - k)
