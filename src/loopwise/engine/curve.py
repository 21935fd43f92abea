"""The closed Nyquist curve of L: its crossings of the negative real axis, and the gain
margins and stabilising gains that the winding count around them gives (margins stage).

The closed loop of k L (k > 0) is stable iff the closed Nyquist curve of L encircles
-1/k clockwise exactly -P times. The negative real axis is cut into stretches by the
curve's crossings; the stretch that holds -1 gives the smallest gain increase and
decrease that change the count (docs/margins.md). Every function works on many
curves at once (the breaks of a model): their refinements share batched evaluations
of `evaluate(s, i)`, the loop transfer of curve i[j] at the point s[j].
"""
from __future__ import annotations

import bisect
import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..results import LoopResponse
from .solve import illinois

__all__ = ["Curve", "Crossing", "upper_curve", "add_tail", "crossings", "crossings_many", "stretches", "settle",
           "gain_margins", "gain_factors", "refine", "HORIZON", "Evaluate"]

#: (s, curve indices) -> L of each curve at each point
Evaluate = Callable[[np.ndarray, np.ndarray], np.ndarray]

# Largest phase step of L between samples of the high-frequency tail we add.
_TAIL_STEP = np.pi / 16
#: crossings closer to the origin than this are the limit at the origin (a gain increase
#: beyond 160 dB counts as unbounded)
HORIZON = 1e-8
_TAIL_DECADES = 6
_TAIL_MAX_SAMPLES = 10_000
_XTOL_REL = 1e-14


@dataclass
class Curve:
    """The upper half of the closed Nyquist curve of one break, without the closing arc.

    The axis part may continue past the engine's last axis sample (`add_tail`) so that
    crossings close to the origin are found even when the engine stops the contour
    early; the closing arc is the chord from the last point to its mirror (the arc at
    infinity maps to L(inf)).
    """

    index: int
    s: np.ndarray
    L: np.ndarray
    axis: np.ndarray    # point lies on the imaginary axis
    engine: np.ndarray  # point comes from the engine's samples (not the tail)
    at_pole: np.ndarray  # point lies on an indentation round a pole of L itself
    tail: bool = False

    def axis_runs(self) -> list[np.ndarray]:
        """Index arrays of consecutive axis points (the axis is cut at indented poles)."""
        idx = np.flatnonzero(self.axis)
        breaks = np.flatnonzero(np.diff(idx) != 1) + 1
        return [r for r in np.split(idx, breaks) if r.size]


@dataclass
class Crossing:
    """One crossing of the closed curve with the negative real axis."""

    curve: int        # index of its curve
    x: float          # position; -inf: round a pole of L (limit k -> 0); 0.0: limit k -> inf
    up: int           # +1: the curve goes from Im <= 0 to Im > 0 here, else -1
    bracket: tuple[float, float, complex, complex] | None  # axis frequencies to refine it between,
    #                                                        and L there (samples), if any
    listed: bool = False    # a phase crossover (upper half, engine samples, w > 0)
    freq: float = math.nan  # its frequency (upper half)
    refined: bool = False


# ---------------------------------------------------------------- building the curves

def upper_curve(index: int, response: LoopResponse, L0: complex | None) -> Curve:
    """Engine samples up to the last axis point; `L0` is L(0) when the engine started above
    w = 0 and no pole sits at the origin (the curve then closes on the real axis there)."""
    on_axis = np.asarray(response.on_axis, dtype=bool)
    idx = np.flatnonzero(on_axis)
    if idx.size == 0:
        raise ValueError("the loop response has no samples on the imaginary axis")
    stop = idx[-1] + 1
    s = np.asarray(response.s, dtype=complex)[:stop]
    L = np.asarray(response.L, dtype=complex)[:stop]
    axis = on_axis[:stop]
    if L0 is not None:
        s, L = np.concatenate([[0j], s]), np.concatenate([[L0], L])
        axis = np.concatenate([[True], axis])
    return Curve(index, s, _real_on_real_axis(s, L), axis, np.ones(s.size, bool), np.zeros(s.size, bool))


def needs_origin(response: LoopResponse) -> bool:
    """Whether the curve needs L(0) added (the engine's axis starts above w = 0)."""
    on_axis = np.asarray(response.on_axis, dtype=bool)
    return bool(on_axis[0] and response.s[0].imag > 0 and 0.0 not in response.axis_poles)


def _real_on_real_axis(s: np.ndarray, L: np.ndarray) -> np.ndarray:
    # L of a real-rational loop with real delays is real on the real axis (s = 0, the start
    # of an indentation at the origin): drop the rounding there so the curve closes exactly
    return np.where(s.imag == 0, L.real + 0j, L)


def mark_poles(curves: list[Curve], evaluate: Evaluate | None) -> None:
    """Mark the indentation points whose centre is a pole of L (in place, all curves).

    The engine indents round the axis poles of every block of a component, but a
    break's L (other loops closed) need not keep them. A pole makes |L| grow as the
    centre comes closer, anything else leaves it flat: probed to the right of the
    centre at a tenth and a ten-thousandth of the indentation radius (one batched
    evaluation for every indentation of every curve), or without `evaluate`, compared
    with the first axis sample at least 100 radii away. A pole also puts |L| beyond 1
    on the indentation; where |L| stays below 1 there is no pole to speak of.
    """
    groups = []
    for c in curves:
        idx = np.flatnonzero(~c.axis)
        for group in np.split(idx, np.flatnonzero(np.diff(idx) != 1) + 1) if idx.size else []:
            before = c.s[group[0] - 1].imag if group[0] > 0 else 0.0
            after = c.s[group[-1] + 1].imag
            centre = 1j * (0.0 if group[0] == 0 else 0.5 * (before + after))
            radius = float(np.max(np.abs(c.s[group] - centre)))
            groups.append((c, group, centre, radius))
    if not groups:
        return
    growth = np.full(len(groups), np.nan)
    if evaluate is not None:
        pts = np.array([[g[2] + g[3] * 1e-1, g[2] + g[3] * 1e-4] for g in groups]).ravel()
        cols = np.repeat([g[0].index for g in groups], 2)
        with np.errstate(all="ignore"):
            far, near = np.abs(evaluate(pts, cols)).reshape(-1, 2).T
            growth = np.where(far > 0, near / far, np.where(near > 0, np.inf, 0.0))
    for i, (c, group, centre, radius) in enumerate(groups):
        g = growth[i]
        if evaluate is None:  # at least 100 times closer
            after = np.flatnonzero(c.axis[group[-1]:] & (np.abs(c.s[group[-1]:] - centre) >= 100 * radius))
            if after.size == 0:
                continue
            with np.errstate(all="ignore"):
                g = 10.0 * abs(c.L[group[group.size // 2]]) / abs(c.L[group[-1] + after[0]])
        large = bool(np.max(np.abs(c.L[group])) >= 1.0)
        c.at_pole[group] = large and not (np.isfinite(g) and g < 100.0)


def add_tail(curves: list[Curve], evaluate: Evaluate) -> None:
    """Follow the axis past each curve's last engine sample, decade by decade (in place).

    Stops once a whole decade stays inside the horizon (|L| < 1e-8), after six decades,
    or at the sample budget (loops with delay spiral forever: their far crossings lie
    ever closer to the origin). All curves' decades are evaluated together.
    """
    state = {}
    for c in curves:
        w_end, L_end = float(c.s[-1].imag), c.L[-1]
        if c.tail or w_end <= 0 or not np.isfinite(L_end) or abs(L_end) < HORIZON:
            c.tail = True
            continue
        state[c.index] = [c, w_end, L_end, 0, [], 32]
    grids_of: dict[int, np.ndarray] = {}  # np.logspace(0, 1, n + 1)[1:] by n
    for d in range(_TAIL_DECADES):
        pending = [i for i, st in state.items() if st[3] < _TAIL_MAX_SAMPLES]
        grids = {}
        while pending:
            # every pending curve's decade in one evaluation, its steps in one pass
            sts = [state[i] for i in pending]
            for st in sts:
                if st[5] not in grids_of:
                    grids_of[st[5]] = np.logspace(0, 1, st[5] + 1)[1:]
            ws = [st[1] * 10.0 ** d * grids_of[st[5]] for st in sts]
            sizes = np.array([w.size for w in ws])
            first = np.concatenate([[0], np.cumsum(sizes)[:-1]])
            w_all = np.concatenate(ws)
            Lall = evaluate(1j * w_all, np.repeat(pending, sizes))
            prev = np.concatenate([[0j], Lall[:-1]])
            prev[first] = [st[2] for st in sts]
            with np.errstate(all="ignore"):
                worst = np.maximum.reduceat(np.abs(np.angle(Lall / prev)), first)
            again = []
            for n, (i, st) in enumerate(zip(pending, sts)):
                if worst[n] <= _TAIL_STEP or st[3] + 2 * st[5] > _TAIL_MAX_SAMPLES:
                    grids[i] = (ws[n], Lall[first[n]:first[n] + sizes[n]])
                else:
                    st[5] *= 2
                    again.append(i)
            pending = again
        for i, (w, Lw) in grids.items():
            st = state[i]
            st[4].append((w, Lw))
            st[3] += st[5]
            st[2] = Lw[-1]
            if np.abs(Lw).max() < HORIZON or st[3] >= _TAIL_MAX_SAMPLES:
                st[3] = math.inf  # finished
    for st in state.values():
        c = st[0]
        c.tail = True
        if st[4]:
            w = np.concatenate([g[0] for g in st[4]])
            Lw = np.concatenate([g[1] for g in st[4]])
            c.s = np.concatenate([c.s, 1j * w])
            c.L = np.concatenate([c.L, Lw])
            c.axis = np.concatenate([c.axis, np.ones(w.size, bool)])
            c.engine = np.concatenate([c.engine, np.zeros(w.size, bool)])
            c.at_pole = np.concatenate([c.at_pole, np.zeros(w.size, bool)])


# ---------------------------------------------------- crossings and winding

def crossings(c: Curve) -> list[Crossing]:
    """All crossings of one closed curve (upper half, mirror, closing chords).

    A point counts as above the real axis when Im > 0 (half-open rule), so a sample
    lying exactly on the axis is counted once. Mirror crossings have the same position
    and direction as their upper twins.
    """
    return crossings_many([c])[0]


def crossings_many(curves: list[Curve]) -> list[list[Crossing]]:
    """`crossings` of many curves: the segments of every curve (upper half, mirror, the
    two closing chords) tested in one vectorised pass; each curve's list in the same
    order as `crossings` gives it."""
    a_parts, b_parts, sizes = [], [], []
    for c in curves:
        L = c.L
        a_parts += [L[:-1], np.conj(L[1:]), L[-1:], np.conj(L[:1])]
        b_parts += [L[1:], np.conj(L[:-1]), np.conj(L[-1:]), L[:1]]
        sizes += [L.size - 1, L.size - 1, 1, 1]
    starts = np.concatenate([[0], np.cumsum(sizes)])
    hit, xs, ups, fracs = _segment_arrays(np.concatenate(a_parts), np.concatenate(b_parts))
    # hits in order: curve by curve, part by part (upper, mirror, top, bottom), segment by segment
    part = np.searchsorted(starts, hit, side="right") - 1
    at = np.searchsorted(part, np.arange(len(sizes) + 1))
    out = []
    for n, c in enumerate(curves):
        rows = [range(at[4 * n + j], at[4 * n + j + 1]) for j in range(4)]
        base = [int(starts[4 * n + j]) for j in range(4)]
        out.append(_crossings_of(c, [[(int(hit[r]) - base[j], float(xs[r]), 1 if ups[r] else -1, float(fracs[r]))
                                      for r in rows[j]] for j in range(4)]))
    return out


def _crossings_of(c: Curve, parts) -> list[Crossing]:
    """One curve's Crossing list from its segment crossings (upper, mirror, top, bottom)."""
    L, axis, w = c.L, c.axis, c.s.imag
    upper: dict[int, Crossing] = {}
    out: list[Crossing] = []
    for k, x, up, t in parts[0]:
        seg_axis = bool(axis[k] and axis[k + 1])
        x = _limit(c, k, x)
        cr = Crossing(c.index, x, up, _bracket(c, k) if math.isfinite(x) and x != 0.0 else None,
                      freq=float(w[k] + t * (w[k + 1] - w[k])) if seg_axis else math.nan)
        # the curve passing through a real L(0) is the w = 0 junction, not a crossover
        cr.listed = seg_axis and bool(c.engine[k + 1]) and not (w[k] == 0 and L[k].imag == 0)
        upper[k] = cr
        out.append(cr)
    # the mirror half conj(L) reversed: segment k runs conj(L[k+1]) -> conj(L[k]) and
    # crosses where its upper twin does, the same way (unless a sample lies on the axis)
    for k, x, up, _ in parts[1]:
        twin = upper.get(k)
        if twin is not None and twin.up == up:
            out.append(twin)
        else:
            x = _limit(c, k, x)
            out.append(Crossing(c.index, x, up, _bracket(c, k) if math.isfinite(x) and x != 0.0 else None))
    # closing chord at the top: the arc at infinity maps to L(inf), which is the
    # origin when |L| still rolls off at the last samples (strictly proper L)
    for _, x, up, _ in parts[2]:
        out.append(Crossing(c.index, 0.0 if abs(x) < HORIZON or _rolls_off(c) else x, up, None))
    # closing chord at the bottom: the real axis at s = 0 (or the start of an indentation)
    for _, x, up, _ in parts[3]:
        far = c.at_pole[0] or abs(x) > 1.0 / HORIZON
        out.append(Crossing(c.index, -math.inf if far else (0.0 if abs(x) < HORIZON else x), up, None))
    return out


def _rolls_off(c: Curve) -> bool:
    """|L| falls at least as fast as w^-1/2 over the last two axis samples."""
    (w0, w1), (l0, l1) = c.s[-2:].imag, np.abs(c.L[-2:])
    if not (c.axis[-2] and w1 > w0 > 0 and l0 > 0 and l1 > 0):
        return False
    return math.log(l1 / l0) / math.log(w1 / w0) < -0.5


def _bracket(c: Curve, k: int) -> tuple[float, float, complex, complex] | None:
    """Axis frequencies around upper segment k, and the samples of L there: its ends, or
    the axis samples either side of the indentation it lies on (an indentation round a
    point where L is finite)."""
    w, axis = c.s.imag, c.axis
    lo, hi = k, k + 1
    while lo > 0 and not axis[lo]:
        lo -= 1
    while hi < axis.size - 1 and not axis[hi]:
        hi += 1
    if not axis[lo]:
        return (0.0, float(w[hi]), complex("nan"), complex(c.L[hi]))
    return (float(w[lo]), float(w[hi]), complex(c.L[lo]), complex(c.L[hi]))


def _limit(c: Curve, k: int, x: float) -> float:
    """Position of a crossing on upper segment k, with the limits made explicit."""
    if c.at_pole[k] or c.at_pole[k + 1]:
        return -math.inf  # round a pole: |L| grows without bound as the radius shrinks
    if abs(x) > 1.0 / HORIZON:
        return -math.inf  # a gain decrease beyond 160 dB: the limit k -> 0
    if abs(x) < HORIZON:
        # closer to the origin than a 160 dB gain change: the limit at the origin (far out
        # in the tail, or where |L| is at the level of rounding noise)
        return 0.0
    return x


def _segment_arrays(a: np.ndarray, b: np.ndarray):
    """(segments, positions, upward, fractions along), arrays, for the segments a->b
    crossing the negative real axis; the position interpolates log|L| and arg L between
    the ends (exact for a power law), falling back to the chord."""
    ya, yb = a.imag, b.imag
    hit = np.flatnonzero((ya > 0) != (yb > 0))
    a, b, ya, yb = a[hit], b[hit], ya[hit], yb[hit]
    frac = ya / (ya - yb)
    x_chord = a.real + frac * (b.real - a.real)
    keep = x_chord < 0
    with np.errstate(all="ignore"):
        ha, hb = np.angle(-a), np.angle(-b)
        t = ha / (ha - hb)
        log_r = (1 - t) * np.log(np.abs(a)) + t * np.log(np.abs(b))
        x = np.where((ha != hb) & (np.abs(ha - hb) < np.pi) & np.isfinite(log_r),
                     -np.exp(log_r), x_chord)
    return hit[keep], x[keep], yb[keep] > 0, frac[keep]


def refine(found: list[Crossing], evaluate: Evaluate | None) -> None:
    """Refine many crossings of many curves at once: the Illinois variant of regula falsi
    on arg(-L(jw)), vectorised, so that every iteration is one batched evaluation (a
    delayed loop has hundreds of phase crossovers)."""
    unique = list({id(c): c for c in found}.values())
    todo = [c for c in unique if not c.refined and c.bracket is not None]
    if not todo or evaluate is None:
        return
    cols = np.array([c.curve for c in todo])
    h = lambda w, i: np.angle(-evaluate(1j * w, cols[i]))  # noqa: E731
    a = np.array([c.bracket[0] for c in todo])
    b = np.array([c.bracket[1] for c in todo])
    La = np.array([c.bracket[2] for c in todo])
    Lb = np.array([c.bracket[3] for c in todo])
    unknown = ~np.isfinite(La)
    if unknown.any():
        La[unknown] = evaluate(1j * a[unknown], cols[unknown])
    with np.errstate(all="ignore"):
        ha, hb = np.angle(-La), np.angle(-Lb)
        jump = ~(np.abs(ha - hb) < np.pi)  # a wrap, not a crossing: nothing to refine there
    x, ok = a.copy(), np.zeros(a.size, bool)
    live = np.nonzero(~jump)[0]
    if live.size:
        x[live], ok[live] = illinois(lambda w, i: h(w, live[i]), a[live], b[live], _XTOL_REL,
                                     indexed=True, fa=ha[live], fb=hb[live])
    for c, xi, good in zip(todo, x, ok):
        c.refined = True
        if good:
            c.freq = float(xi)
    good_idx = np.flatnonzero(ok)
    if good_idx.size:
        vals = evaluate(1j * x[good_idx], cols[good_idx])
        for i, v in zip(good_idx, vals):
            x_i = float(v.real)
            todo[i].x = 0.0 if abs(x_i) < HORIZON else (-math.inf if abs(x_i) > 1.0 / HORIZON else x_i)


def stretches(found: list[Crossing], P: int) -> list[tuple[float, float, bool]]:
    """(lo, hi, stable) for each stretch of the negative real axis between crossings.

    Clockwise encirclements of a point x: the signed count of crossings on the
    ray from x to -inf (upward crossings count +1). Plain Python floats (a curve has a
    few crossings; numpy's per-call cost would dominate): a stable sort with NaN last, as
    numpy sorts, and bisection for the count.
    """
    ranked = sorted(found, key=lambda c: (math.isnan(c.x), 0.0 if math.isnan(c.x) else c.x))
    xs = [c.x for c in ranked]
    counts = [0]
    for c in ranked:
        counts.append(counts[-1] + c.up)
    finite = []
    for x in xs:
        if -math.inf < x < 0 and (not finite or x != finite[-1]):
            finite.append(x)
    bounds = [-math.inf, *finite, 0.0]
    out = []
    for lo, hi in zip(bounds[:-1], bounds[1:]):
        if lo == -math.inf:
            test = 2 * hi if hi < 0 else -1.0
        else:
            test = lo / 2 if hi == 0.0 else -math.sqrt(lo * hi)
        out.append((float(lo), float(hi), counts[bisect.bisect_left(xs, test)] == -P))
    return out


def gain_factors(lo: float, hi: float) -> tuple[float, float]:
    """The factors k that put -1/k in the stretch (lo, hi)."""
    return (0.0 if lo == -math.inf else -1.0 / lo, math.inf if hi == 0.0 else -1.0 / hi)


def settle(curves_found: list[list[Crossing]], Ps: list[int], evaluate: Evaluate | None,
           wanted: Callable[[float, float, bool], bool]) -> list[list[tuple[float, float, bool]]]:
    """Every curve's stretches, after refining (all together) the crossings that bound the
    wanted ones."""
    todo = []
    for found, P in zip(curves_found, Ps):
        ends = {x for lo, hi, ok in stretches(found, P) if wanted(lo, hi, ok) for x in (lo, hi)}
        todo += [c for c in found if c.x in ends]
    refine(todo, evaluate)
    return [stretches(found, P) for found, P in zip(curves_found, Ps)]


def holds_minus_one(lo: float, hi: float, ok: bool) -> bool:
    """Whether -1 lies inside the stretch (lo, hi) of the negative real axis (a tuple from
    `stretches`, unpacked; whether it is stable does not matter here)."""
    return lo < -1.0 < hi


def gain_margins(stretch_list: list[tuple[float, float, bool]]) -> tuple[float | None, float | None]:
    """(up, down) in dB from the stretch that holds -1; None when unbounded or unstable."""
    stretch = next((s for s in stretch_list if holds_minus_one(*s)), None)
    if stretch is None or not stretch[2]:
        return None, None
    k_down, k_up = gain_factors(stretch[0], stretch[1])
    up = None if math.isinf(k_up) else 20.0 * math.log10(k_up)
    down = None if k_down == 0.0 else 20.0 * math.log10(k_down)
    return up, down


def tail_matters(c: Curve, stretch_list: list[tuple[float, float, bool]]) -> bool:
    """Whether crossings past the engine's last sample could bound the stretch that holds
    -1: they lie closer to the origin than the curve's last engine values."""
    if c.tail:
        return False
    stretch = next((s for s in stretch_list if holds_minus_one(*s)), None)
    reach = max(1e-2, 10.0 * float(np.max(np.abs(c.L[-3:]))))
    return stretch is not None and stretch[1] > -reach
