"""The winding engine: the Nyquist D-contour, adaptive sampling, certified counts.

The contour runs up the imaginary axis with small semicircular indentations
around every block pole on the axis (to the right by default), to s = jR, and
closes along |s| = R back to the real axis. By conjugate symmetry only the upper
half is traced; the count is -(change of arg f)/pi over it. R comes from a
high-frequency certificate (certificate.certificate_radius) beyond which no zero can
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

from .solve import distinct

__all__ = ["Piece", "Trace", "build_contour", "axis_orders", "indentation_radius", "trace", "phase_change",
           "encirclements", "carried", "principal_log", "in_chunks"]

CHORD = 0.35
MIDPOINT = 0.2
#: a function with a floor needs no resolving where it exceeds this at both ends of an
#: interval (the loop transfer beyond 1e8: a gain change of more than 160 dB there is no
#: margin; docs/margins.md)
CEILING = 1e8
MAX_ROUNDS = 70
#: sample budget of one trace (the models of the test suite need under 10,000)
MAX_SAMPLES = 100_000
#: ... and of samples times traced functions (a model with many breaks stops sooner)
MAX_WORK = 5_000_000
#: a trace evaluates its points this many at a time: a point's values do not depend on the
#: points evaluated with it, and blocks this size keep the evaluation's temporaries in
#: cache (a seed grid of many samples at once runs about 1.5 times faster so)
CHUNK = 16384


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
        """The contour points s (complex, rad/s) at parameters u in [0, 1] along the piece: j w on
        an axis piece, j w0 + r exp(j theta) on an indentation."""
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
        """The lowest and highest frequency (rad/s) that an axis piece spans."""
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


def axis_orders(transfers) -> dict[float, int]:
    """For each frequency w0 of a pole on the imaginary axis: the most poles at j w0 that
    one transfer has (the engine never multiplies two terms' values where that matters:
    program.py keeps the outputs of such terms)."""
    out: dict[float, int] = {}
    for tf in transfers:
        if tf is None:
            continue
        axis = tf.poles[tf.poles.real == 0]
        for w0 in {float(abs(p.imag)) for p in axis}:
            m = int(np.sum(np.abs(np.abs(axis.imag) - w0) <= 1e-12 * max(w0, 1e-300)))
            out[w0] = max(out.get(w0, 0), m)
    return out


def indentation_radius(w0: float, order: int, roots: np.ndarray) -> float:
    """The radius of the indentation round the axis pole(s) at j w0; `order` is the most
    poles one term has there (their value, about eps^-order, stays below 1e250)."""
    return max(_indent_radius(w0, roots), 10.0 ** (-250.0 / max(order, 1)) * max(1.0, w0))


def build_contour(axis_poles: np.ndarray, roots: np.ndarray, R: float, indent: str = "right",
                  touching: tuple[float, ...] = (), orders: dict[float, int] | None = None) -> list[Piece]:
    """Pieces of the upper half contour from the real axis near 0 up to jR.

    `touching` are frequencies where a closed-loop pole sits on the axis (a
    marginal case): they get an indentation to the right too, so that the count
    is of poles strictly in the right half plane. `orders` (axis_orders) bounds the
    indentations' radii from below; without it every pole at a point counts.
    """
    marks: dict[float, tuple[float, bool]] = {}
    for p in axis_poles:
        w0 = float(abs(p.imag))
        m = (orders or {}).get(w0) or int(np.sum(np.abs(axis_poles - 1j * w0)
                                                <= 1e-12 * np.maximum(np.abs(axis_poles), w0)))
        marks[w0] = (indentation_radius(w0, m, roots), indent == "right")
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
    pid: np.ndarray | None = None  # the piece of each sample
    unresolved_pieces: tuple[int, ...] = ()  # the pieces of the unresolved frequencies


def _seed(piece: Piece, features: np.ndarray, max_step: float | None = None) -> np.ndarray:
    """The first grid of a piece: 30 points a decade and the features; with `max_step`
    (rad/s), also no wider step on the axis than that (what the delay step rule would
    otherwise reach by halving), unless that alone exceeds the sample budget."""
    if piece.kind == "indent":
        return _grid(9)
    if piece.log or piece.center is not None:
        decades = abs(math.log10(piece.b / piece.a))
        u = _grid(max(9, int(decades * 30) + 1))
    else:
        u = _grid(9)
    lo, hi = piece.w_range
    inside = features[(features > lo) & (features < hi)]
    stepped = max_step is not None and 2 < (hi - lo) / max_step < MAX_SAMPLES / 4
    if not inside.size and not stepped:
        return u  # already sorted, distinct and within [0, 1]
    if inside.size:
        u = np.concatenate([u, piece.u_of(inside)])
    if stepped:
        with np.errstate(all="ignore"):
            u = np.concatenate([u, piece.u_of(np.arange(lo, hi, max_step)[1:])])
    return distinct(np.clip(u[np.isfinite(u)], 0.0, 1.0))


_GRIDS: dict[int, np.ndarray] = {}


def _grid(n: int) -> np.ndarray:
    """np.linspace(0, 1, n), made once per n (read-only: the seeds share it)."""
    g = _GRIDS.get(n)
    if g is None:
        g = np.linspace(0.0, 1.0, n)
        g.flags.writeable = False
        _GRIDS[n] = g
    return g


def _accept(la, lb, lm, floors, shift=None, chord=CHORD, midpoint=MIDPOINT, floored=None) -> np.ndarray:
    """Whether each interval (rows) is resolved for every function."""
    return np.all(_accept_columns(la, lb, lm, floors, shift, chord, midpoint, floored), axis=1)


def _floored_values(v: np.ndarray, floors, sh: np.ndarray | None) -> np.ndarray:
    """The values f themselves of the functions with a floor (columns in order), from traced
    logs v (less the logs `sh` of the s^q factors they carry, when given)."""
    cols = [k for k, f in enumerate(floors) if f is not None]
    with np.errstate(all="ignore"):
        return np.exp(v[:, cols] - sh[:, cols]) if sh is not None else np.exp(v[:, cols])


def _accept_columns(la, lb, lm, floors, shift=None, chord=CHORD, midpoint=MIDPOINT,
                    floored=None) -> np.ndarray:
    """Whether each interval (rows) is resolved for each function (columns).

    A function without a floor is tested as f/|f|: it has the phase of f at every point
    of the contour, and only phase counts in a winding number, so a change of |f| alone
    (tens of loop gains multiplied in det(I - A) fall hundreds of dB a decade) asks for
    no samples. `shift`, when given, holds for the interval's ends and midpoint the logs
    of the factors the traced values carry (a traced f s^q stands for f; rows, columns
    each): a floor applies to f, so the tests of a floored function take them off.
    `floored`, when given, holds those functions' values at the ends and midpoint
    (`_floored_values`; a trace carries them from round to round)."""
    free = [k for k, f in enumerate(floors) if f is None]
    ok = np.empty(la.shape, bool)
    finite = np.empty(la.shape, bool)  # where the ratio f_b / f_a (its phase part, without a floor) is finite
    with np.errstate(all="ignore"):
        if free:
            # the free functions come first in every trace: a view then, not a copy
            cols = slice(0, len(free)) if free == list(range(len(free))) else free
            # f_b/f_a and f_m/f_a as unit phasors rb = exp(j d), rm = exp(j dm): the chord test
            # |rb - 1| = |1/rb - 1| <= chord is 2 - 2 cos d <= chord^2, the midpoint test
            # |rm - (1 + rb)/2| <= midpoint is 1 + (1 + cos d)/2 - cos dm - cos(d - dm) <=
            # midpoint^2 (the same tests in real cosines, a fraction of complex exp's cost)
            arg_a = la.imag[:, cols]
            d = lb.imag[:, cols] - arg_a
            dm = lm.imag[:, cols] - arg_a
            cd = np.cos(d)
            ok_free = 2.0 - 2.0 * cd <= chord * chord
            ok_free &= 1.0 + 0.5 * (1.0 + cd) - np.cos(dm) - np.cos(d - dm) <= midpoint * midpoint
            ok[:, cols] = ok_free
            finite[:, cols] = np.isfinite(d)
        # functions with a floor (the loop transfer itself) only need resolving while large
        if floored is None:
            floored = [_floored_values(v, floors, None if shift is None else sh)
                       for v, sh in zip((la, lb, lm), shift or (None,) * 3)]
        j = -1
        for k, floor in enumerate(floors):
            if floor is None:
                continue
            j += 1
            finite[:, k] = np.isfinite(np.exp(lb[:, k] - la[:, k]))
            fa, fb, fm = (f[:, j] for f in floored)
            smaller = np.minimum(np.abs(fa), np.abs(fb))
            scale = np.maximum(smaller, floor)
            ok_k = (np.abs(fb - fa) <= chord * scale) & (np.abs(fm - 0.5 * (fa + fb)) <= midpoint * scale)
            # ... and while not huge (CEILING at both ends)
            ok_k |= smaller >= CEILING
            ok[:, k] = ok_k
        # a value that is NaN (a pole hit) or infinite settles nothing; an exact zero of a
        # function with a floor (the loop transfer, cancelled to 0.0 by rounding far below
        # its floor) is as settled as any other value below the floor
        settled = np.isfinite(lm.real)
        for k, floor in enumerate(floors):
            if floor is not None:
                settled[:, k] |= np.isneginf(lm[:, k].real)
    return (ok | ~finite) & settled


class _Table:
    """The pieces as arrays: the points of many pieces at once (Piece.points, vectorised)."""

    def __init__(self, pieces: list[Piece]):
        self.kind = np.array([0 if p.kind == "indent" else 1 if p.center is not None else 2 if p.log else 3
                              for p in pieces])
        self.a = np.array([p.a for p in pieces], float)
        self.b = np.array([p.b for p in pieces], float)
        self.t0 = np.array([p.theta0 for p in pieces], float)
        self.t1 = np.array([p.theta1 for p in pieces], float)
        self.c = np.array([p.center if p.center is not None else 0.0 for p in pieces], float)
        self.sg = np.array([p.sign for p in pieces], float)

    def points(self, pid: np.ndarray, u: np.ndarray) -> np.ndarray:
        kind = self.kind[pid]
        out = np.empty(u.shape, complex)
        with np.errstate(all="ignore"):
            for k in distinct(kind):
                at = np.flatnonzero(kind == k)
                p, x = pid[at], u[at]
                a, b = self.a[p], self.b[p]
                if k == 0:
                    out[at] = 1j * a + b * np.exp(1j * (self.t0[p] + (self.t1[p] - self.t0[p]) * x))
                elif k == 1:
                    out[at] = 1j * (self.c[p] + self.sg[p] * a * (b / a) ** x)
                elif k == 2:
                    out[at] = 1j * (a * (b / a) ** x)
                else:
                    out[at] = 1j * (a + (b - a) * x)
        return out


def principal_log(z: np.ndarray) -> np.ndarray:
    """The complex logarithm np.log(z + 0j), computed as log|z| + j arctan2(Im z, Re z).

    The same principal branch (the angle arctan2's, in (-pi, pi] but for rounding, a
    negative zero part read as +0 as `z + 0j` reads it, log|0| = -inf with angle 0, NaN and
    infinite parts staying non-finite); the two differ only by rounding (np.log forms both
    parts its own way), and this form costs a fraction of np.log's on complex arrays."""
    z = z + 0j
    out = np.empty(z.shape, complex)
    with np.errstate(all="ignore"):
        out.real = np.log(np.abs(z))
        out.imag = np.arctan2(z.imag, z.real)
    return out


def carried(s: np.ndarray, q: np.ndarray, index: np.ndarray | None = None, out: np.ndarray | None = None,
            take_off: bool = False) -> np.ndarray:
    """log(s) q per point and traced function (0 where q is 0): the log of the factor s^q
    that a traced value f s^q carries. `q` holds rows of orders, point j taking row
    index[j] (row 0 for every point without `index`); the logarithm is taken only at the
    points whose row has some q (the others are all 0). With `out` (traced values, points
    by functions), the logs are added to it in place (subtracted with `take_off`), at those
    points only, and it is returned: adding or taking off the zeros elsewhere would change
    no value."""
    some = np.any(q != 0, axis=1)
    if index is None:
        index = np.zeros(s.size, np.intp)
    rows = np.flatnonzero(some[index])
    if out is None:
        out = np.zeros((s.size, q.shape[1]), complex)
        add = False
    else:
        add = True
    if rows.size:
        qr = q[index[rows]]
        with np.errstate(all="ignore"):
            logs = np.where(qr != 0, np.log(s[rows])[:, None] * qr, 0.0)
            if add and take_off:
                out[rows] -= logs
            elif add:
                out[rows] += logs
            else:
                out[rows] = logs
    return out


def trace(pieces: list[Piece], evaluate: Callable, features,
          floors: tuple[float | None, ...], max_samples: int = MAX_SAMPLES,
          step_ok: Callable | None = None,
          orders: np.ndarray | None = None, max_step=None,
          chord: float = CHORD, midpoint: float = MIDPOINT, by_piece: bool = False,
          max_work: int = MAX_WORK) -> Trace:
    """Adaptive sampling of `evaluate` (s -> (M, K) complex logs) along the pieces.

    `step_ok(s_a, s_b)` may refuse intervals that are too long whatever the
    samples say: a delay turns the curve by T*dw between two samples, and
    three samples cannot tell a whole number of turns from none. `orders` (one per
    column): the traced values are those of f s^q (see stability._origin_orders); a
    column's floor applies to f. `max_step` seeds the axis no coarser than that (a
    delay's step rule: fewer halving rounds). `chord` and `midpoint` loosen the two
    acceptance tests for a trace no count depends on (the margins' extension).

    With `by_piece`, the pieces may belong to many contours (batch.py): `evaluate(s,
    piece)` and `step_ok(s_a, s_b, piece)` get the piece index of every point, and
    `features` and `max_step` may be lists with one entry per piece.
    """
    q = None if orders is None or not np.any(orders) else np.asarray(orders, float)
    per_piece = q is not None and q.ndim == 2  # one row of orders per piece (batch.py)
    each = isinstance(features, list)
    steps = max_step if isinstance(max_step, list) else [max_step] * len(pieces)
    if by_piece:
        call, check = evaluate, step_ok
    else:
        call = lambda x, _: evaluate(x)  # noqa: E731
        check = None if step_ok is None else (lambda a, b, _: step_ok(a, b))
    table = _Table(pieces)
    all_u = [_seed(p, features[i] if each else features, steps[i]) for i, p in enumerate(pieces)]
    u = np.concatenate(all_u)
    pid = np.repeat(np.arange(len(pieces)), [x.size for x in all_u])
    # every piece's seeds at once (the numbers Piece.points gives, from the same operations)
    s = table.points(pid, u)
    vals = in_chunks(call, s, pid)
    # intervals between consecutive samples of the same piece
    pending = np.nonzero(pid[:-1] == pid[1:])[0]
    ia, ib = pending, pending + 1
    ua, ub = u[ia], u[ib]
    pa = pid[ia]
    la, lb = vals[ia], vals[ib]
    # the intervals' end points, carried from round to round like the values
    sa, sb = s[ia], s[ib]
    # ... and the values of the functions with a floor (the acceptance tests need f itself):
    # _floored_values less the logs of the s^q factors, taken off only where some q is not 0
    fcols = [k for k, f in enumerate(floors) if f is not None]
    qf = None if q is None else q[:, fcols] if per_piece else q[None, fcols]

    def floored(v, x, p):
        lv = v[:, fcols]
        if qf is not None:
            carried(x, qf, p if per_piece else None, out=lv, take_off=True)
        with np.errstate(all="ignore"):
            return np.exp(lv)

    def shift_of(x, p):  # the s^q factors' logs of every traced function (the stuck report's)
        return carried(x, q, p) if per_piece else carried(x, q[None, :])

    f_seed = floored(vals, s, pid)  # once per seed (an interval's ends share its piece)
    fa, fb = f_seed[ia], f_seed[ib]
    out_s, out_v, out_pid, out_u = [s], [vals], [pid], [u]
    unresolved: list[float] = []
    unresolved_pieces: list[int] = []
    total = s.size
    complete = True
    stuck = None
    for _ in range(MAX_ROUNDS):
        if ua.size == 0:
            break
        um = 0.5 * (ua + ub)
        sm = table.points(pa, um)
        lm = in_chunks(call, sm, pa)
        total += sm.size
        out_s.append(sm)
        out_v.append(lm)
        out_pid.append(pa)
        out_u.append(um)
        fm = floored(lm, sm, pa)
        ok = in_chunks(lambda *v: _accept(*v[:3], floors, None, chord, midpoint, v[3:]), la, lb, lm, fa, fb, fm)
        if check is not None:
            ok &= check(sa, sb, pa)
        tiny = (ub - ua) < 1e-13
        if np.any(tiny & ~ok):
            unresolved.extend(float(x) for x in sm[tiny & ~ok].imag)
            unresolved_pieces.extend(int(x) for x in pa[tiny & ~ok])
        redo = ~ok & ~tiny
        if total > max_samples or total * lm.shape[1] > max_work:
            complete = not np.any(redo)
            if not complete:
                shift = None if q is None else tuple(shift_of(x[redo], pa[redo]) for x in (sa, sb, sm))
                cols = ~_accept_columns(la[redo], lb[redo], lm[redo], floors, shift, chord, midpoint)
                by_delay = check is not None and not np.all(check(sa[redo], sb[redo], pa[redo])) \
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
        sa, sb = np.concatenate([sa[redo], sm[redo]]), np.concatenate([sm[redo], sb[redo]])
        fa, fb = np.concatenate([fa[redo], fm[redo]]), np.concatenate([fm[redo], fb[redo]])
    else:
        complete = ua.size == 0
    s = np.concatenate(out_s)
    vals = np.concatenate(out_v)
    pid = np.concatenate(out_pid)
    u = np.concatenate(out_u)
    order = _by_piece_then_u(pid, u)
    s, vals, pid = s[order], vals[order], pid[order]
    on_axis = np.array([p.kind == "axis" for p in pieces], dtype=bool)[pid]
    return Trace(s, vals, on_axis, tuple(sorted(set(unresolved))), complete, stuck, pid,
                 tuple(sorted(set(unresolved_pieces))))


def in_chunks(call: Callable, s: np.ndarray, *rest: np.ndarray, size: int = CHUNK) -> np.ndarray:
    """call(s, *rest) for points s (and arrays `rest` along them: rows), `size` rows at a time,
    the results stacked along the first axis: the same values as one call where a point's
    values do not depend on the points evaluated with it (every evaluator of the engine)."""
    n = s.shape[0]
    if n <= size:
        return call(s, *rest)
    return np.concatenate([call(s[a:a + size], *(r[a:a + size] for r in rest)) for a in range(0, n, size)])


def _by_piece_then_u(pid: np.ndarray, u: np.ndarray) -> np.ndarray:
    """np.lexsort((u, pid)), faster: u sorted first, then a stable sort by piece (a radix
    sort for up to 65,536 pieces). Only rows with equal piece and u may come out in another
    order, and those are the same point with the same values."""
    order = np.argsort(u)
    key = pid[order]
    if pid.size and pid.max() < 65536:
        key = key.astype(np.uint16)
    return order[np.argsort(key, kind="stable")]


def phase_change(values: np.ndarray) -> np.ndarray:
    """Sum of the principal phase steps between consecutive samples, per function."""
    with np.errstate(invalid="ignore"):  # -inf - -inf (a loop transfer at exactly 0.0): no step
        steps = np.diff(values.imag, axis=0)  # (the imaginary part of the complex differences)
    steps = (steps + np.pi) % (2 * np.pi) - np.pi
    steps = np.where(np.isfinite(steps), steps, 0.0)
    return steps.sum(axis=0)


def encirclements(total_phase_upper: float) -> tuple[int, float]:
    """Clockwise encirclements from the upper half's phase change; and the rounding error."""
    n = -total_phase_upper / math.pi
    k = int(round(n))
    return k, abs(n - k)
