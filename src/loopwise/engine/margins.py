"""Every margin of one loop break, from L(s) and the engine's contour samples.

Conventions (docs/margins.md states them in full):

- gain crossover: |L(jw)| = 1; ``lag`` in [0, 360) deg is the extra phase lag
  that would put L on -1; the phase margin there is ``min(lag, 360 - lag)``.
- phase crossover: L(jw) real and negative; gain margin there -20 log10 |L|.
- gain margins up / down come from the winding count, not from the phase:
  the closed loop of k L (k > 0) is stable iff the closed Nyquist curve of L
  encircles -1/k clockwise exactly -P times. The negative real axis is cut
  into stretches by the curve's crossings; the stretch that holds -1 gives
  the smallest gain increase and decrease that change the count.
- delay margin: min over gain crossovers of lag (rad) / frequency.
- balanced disk margin (Seiler, Packard & Gahinet, IEEE Control Systems
  Magazine 2020): ``alpha = 2 / max |(1 - L)/(1 + L)|``.

Pure numpy: roots and peaks are refined by loopwise.engine.solve (batched, no scipy import).
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .solve import illinois, zoom_max
from ..results import DiskMargin, GainCrossover, LoopResponse, Margins, Peak, PhaseCrossover

__all__ = ["loop_margins", "stabilising_gains"]

Evaluate = Callable[[np.ndarray], np.ndarray]

# Largest phase step of L between samples of the high-frequency tail we add.
_TAIL_STEP = np.pi / 16
# Tail crossings of the negative real axis closer to the origin than this are
# the limit at the origin (a gain increase beyond 160 dB counts as unbounded).
_HORIZON = 1e-8
_TAIL_DECADES = 6
_TAIL_MAX_SAMPLES = 10_000
# brentq tolerances: relative 1e-14 in frequency.
_RTOL = 4 * np.finfo(float).eps
_XTOL_REL = 1e-14


@dataclass(frozen=True)
class _Curve:
    """The upper half of the closed Nyquist curve, without the closing arc.

    The axis part continues past the engine's last axis sample (``tail``) so
    that crossings close to the origin are found even when the engine stops
    the contour early; the closing arc is the chord from the last point to its
    mirror (the arc at infinity maps to L(inf)).
    """

    s: np.ndarray
    L: np.ndarray
    axis: np.ndarray   # point lies on the imaginary axis
    engine: np.ndarray  # point comes from the engine's samples (not the tail)
    at_pole: np.ndarray  # point lies on an indentation round a pole of L itself


@dataclass
class _Crossing:
    """One crossing of the closed curve with the negative real axis."""

    x: float          # position; -inf: round a pole of L (limit k -> 0); 0.0: limit k -> inf
    up: int           # +1: the curve goes from Im <= 0 to Im > 0 here, else -1
    bracket: tuple[float, float] | None  # axis frequencies to refine it between, if any
    listed: bool = False    # a phase crossover (upper half, engine samples, w > 0)
    freq: float = math.nan  # its frequency (upper half)
    refined: bool = False


# ---------------------------------------------------------------- the curve

def _upper_curve(response: LoopResponse, evaluate: Evaluate | None) -> _Curve:
    """Engine samples up to the last axis point, plus a tail when `evaluate` is given."""
    on_axis = np.asarray(response.on_axis, dtype=bool)
    idx = np.flatnonzero(on_axis)
    if idx.size == 0:
        raise ValueError("the loop response has no samples on the imaginary axis")
    stop = idx[-1] + 1
    s = np.asarray(response.s, dtype=complex)[:stop]
    L = np.asarray(response.L, dtype=complex)[:stop]
    axis = on_axis[:stop]
    engine = np.ones(stop, dtype=bool)
    if evaluate is not None and axis[0] and s[0].imag > 0 and 0.0 not in response.axis_poles:
        # the engine started above w = 0: add L(0) so the curve closes on the real axis
        s, L = np.concatenate([[0j], s]), np.concatenate([evaluate(np.array([0j])), L])
        axis, engine = np.concatenate([[True], axis]), np.concatenate([[True], engine])
    if evaluate is not None:
        ws = _tail(evaluate, float(s[-1].imag), L[-1])
        if ws.size:
            s_t = 1j * ws
            L_t = evaluate(s_t)
            s, L = np.concatenate([s, s_t]), np.concatenate([L, L_t])
            axis = np.concatenate([axis, np.ones(ws.size, dtype=bool)])
            engine = np.concatenate([engine, np.zeros(ws.size, dtype=bool)])
    # L of a real-rational loop with real delays is real on the real axis (s = 0, the start
    # of an indentation at the origin): drop the rounding there so the curve closes exactly
    L = np.where(s.imag == 0, L.real + 0j, L)
    return _Curve(s, L, axis, engine, _at_pole(s, L, axis, evaluate))


def _at_pole(s: np.ndarray, L: np.ndarray, axis: np.ndarray,
             evaluate: Evaluate | None) -> np.ndarray:
    """Mask of indentation points whose centre is a pole of L.

    The engine indents round the axis poles of every block of the model, but a
    break's L (other loops closed) need not keep them. A pole makes |L| grow
    as the centre comes closer, anything else leaves it flat: probed to the
    right of the centre at a tenth and a ten-thousandth of the indentation
    radius, or without `evaluate`, compared with the first axis sample at least
    100 radii away.
    """
    mask = ~axis
    idx = np.flatnonzero(mask)
    for group in np.split(idx, np.flatnonzero(np.diff(idx) != 1) + 1) if idx.size else []:
        before = s[group[0] - 1].imag if group[0] > 0 else 0.0
        after = s[group[-1] + 1].imag
        centre = 1j * (0.0 if group[0] == 0 else 0.5 * (before + after))
        radius = float(np.max(np.abs(s[group] - centre)))
        with np.errstate(all="ignore"):
            if evaluate is not None:  # 1000 times closer: a simple pole grows |L| 1000-fold
                far, near = np.abs(evaluate(centre + radius * np.array([1e-1, 1e-4])))
                growth = near / far
            else:  # at least 100 times closer
                after = np.flatnonzero(axis[group[-1]:] & (np.abs(s[group[-1]:] - centre) >= 100 * radius))
                if after.size == 0:
                    continue
                growth = 10.0 * abs(L[group[group.size // 2]]) / abs(L[group[-1] + after[0]])
        mask[group] = not (np.isfinite(growth) and growth < 100.0)
    return mask


def _tail(evaluate: Evaluate, w_end: float, L_end: complex) -> np.ndarray:
    """Frequencies past the engine's last axis sample, decade by decade.

    Stops once a whole decade stays inside the horizon (|L| < 1e-8), after six
    decades, or at the sample budget (loops with delay spiral forever: their
    far crossings lie ever closer to the origin).
    """
    if w_end <= 0 or not np.isfinite(L_end) or abs(L_end) < _HORIZON:
        return np.empty(0)
    out, total, prev = [], 0, L_end
    for d in range(_TAIL_DECADES):
        w0 = w_end * 10.0 ** d
        n = 32
        while True:
            w = w0 * np.logspace(0, 1, n + 1)[1:]
            Lw = evaluate(1j * w)
            steps = np.abs(np.angle(Lw / np.concatenate([[prev], Lw[:-1]])))
            if steps.max() <= _TAIL_STEP or total + 2 * n > _TAIL_MAX_SAMPLES:
                break
            n *= 2
        out.append(w)
        total += n
        prev = Lw[-1]
        if np.abs(Lw).max() < _HORIZON or total >= _TAIL_MAX_SAMPLES:
            break
    return np.concatenate(out)


def _axis_runs(curve: _Curve) -> list[np.ndarray]:
    """Index arrays of consecutive axis points (the axis is cut at indented poles)."""
    idx = np.flatnonzero(curve.axis)
    breaks = np.flatnonzero(np.diff(idx) != 1) + 1
    return [r for r in np.split(idx, breaks) if r.size]


# ---------------------------------------------------- crossings and winding

def _negative_axis_crossings(curve: _Curve) -> list[_Crossing]:
    """All crossings of the closed curve (upper half, mirror, closing chords).

    A point counts as above the real axis when Im > 0 (half-open rule), so a
    sample lying exactly on the axis is counted once. Mirror crossings have
    the same position and direction as their upper twins.
    """
    L, axis, w = curve.L, curve.axis, curve.s.imag
    upper: dict[int, _Crossing] = {}
    out: list[_Crossing] = []
    for k, x, up, t in _segment_crossings(L[:-1], L[1:]):
        seg_axis = bool(axis[k] and axis[k + 1])
        x = _limit(curve, k, x)
        c = _Crossing(x, up, _bracket(curve, k) if math.isfinite(x) and x != 0.0 else None,
                      freq=float(w[k] + t * (w[k + 1] - w[k])) if seg_axis else math.nan)
        # the curve passing through a real L(0) is the w = 0 junction, not a crossover
        c.listed = seg_axis and bool(curve.engine[k + 1]) and not (w[k] == 0 and L[k].imag == 0)
        upper[k] = c
        out.append(c)
    # the mirror half conj(L) reversed: segment k runs conj(L[k+1]) -> conj(L[k]) and
    # crosses where its upper twin does, the same way (unless a sample lies on the axis)
    for k, x, up, _ in _segment_crossings(np.conj(L[1:]), np.conj(L[:-1])):
        twin = upper.get(k)
        if twin is not None and twin.up == up:
            out.append(twin)
        else:
            x = _limit(curve, k, x)
            out.append(_Crossing(x, up, _bracket(curve, k) if math.isfinite(x) and x != 0.0 else None))
    # closing chord at the top: the arc at infinity maps to L(inf), which is the
    # origin when |L| still rolls off at the last samples (strictly proper L)
    for _, x, up, _ in _segment_crossings(L[-1:], np.conj(L[-1:])):
        out.append(_Crossing(0.0 if abs(x) < _HORIZON or _rolls_off(curve) else x, up, None))
    # closing chord at the bottom: the real axis at s = 0 (or the start of an indentation)
    for _, x, up, _ in _segment_crossings(np.conj(L[:1]), L[:1]):
        out.append(_Crossing(-math.inf if curve.at_pole[0] else (0.0 if abs(x) < _HORIZON else x), up, None))
    return out


def _rolls_off(curve: _Curve) -> bool:
    """|L| falls at least as fast as w^-1/2 over the last two axis samples."""
    (w0, w1), (l0, l1) = curve.s[-2:].imag, np.abs(curve.L[-2:])
    if not (curve.axis[-2] and w1 > w0 > 0 and l0 > 0 and l1 > 0):
        return False
    return math.log(l1 / l0) / math.log(w1 / w0) < -0.5


def _bracket(curve: _Curve, k: int) -> tuple[float, float]:
    """Axis frequencies around upper segment k: its ends, or the axis samples either side
    of the indentation it lies on (an indentation round a point where L is finite)."""
    w, axis = curve.s.imag, curve.axis
    lo, hi = k, k + 1
    while lo > 0 and not axis[lo]:
        lo -= 1
    while hi < axis.size - 1 and not axis[hi]:
        hi += 1
    return (float(w[lo]) if axis[lo] else 0.0, float(w[hi]))


def _limit(curve: _Curve, k: int, x: float) -> float:
    """Position of a crossing on upper segment k, with the limits made explicit."""
    if curve.at_pole[k] or curve.at_pole[k + 1]:
        return -math.inf  # round a pole: |L| grows without bound as the radius shrinks
    if abs(x) < _HORIZON:
        # closer to the origin than a 160 dB gain change: the limit at the origin (far out
        # in the tail, or where |L| is at the level of rounding noise)
        return 0.0
    return x


def _segment_crossings(a: np.ndarray, b: np.ndarray) -> list[tuple[int, float, int, float]]:
    """(segment, position, direction, fraction along) for segments a->b crossing
    the negative real axis; the position interpolates log|L| and arg L between
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
    return [(int(k), float(xk), 1 if y1 > 0 else -1, float(f))
            for k, xk, y1, f in zip(hit[keep], x[keep], yb[keep], frac[keep])]


def _refine_all(crossings: list[_Crossing], evaluate: Evaluate | None) -> None:
    """Refine many crossings at once: the Illinois variant of regula falsi on
    arg(-L(jw)), vectorised, so that every iteration is one batched evaluation
    (a delayed loop has hundreds of phase crossovers)."""
    unique = list({id(c): c for c in crossings}.values())
    todo = [c for c in unique if not c.refined and c.bracket is not None]
    if not todo or evaluate is None:
        return
    h = lambda w: np.angle(-evaluate(1j * w))  # noqa: E731
    a = np.array([c.bracket[0] for c in todo])
    b = np.array([c.bracket[1] for c in todo])
    with np.errstate(all="ignore"):
        jump = np.abs(h(a) - h(b)) >= np.pi  # a wrap of the angle, not a crossing
    x, ok = illinois(h, a, b, _XTOL_REL)
    ok &= ~jump
    for c, xi, good in zip(todo, x, ok):
        c.refined = True
        if good:
            c.freq = float(xi)
    good_idx = [i for i, g in enumerate(ok) if g]
    if good_idx:
        vals = evaluate(1j * x[good_idx])
        for i, v in zip(good_idx, vals):
            todo[i].x = float(v.real) if abs(v.real) >= _HORIZON else 0.0


def _refine(c: _Crossing, evaluate: Evaluate | None) -> None:
    """Solve arg(-L(jw)) = 0 on the crossing's axis bracket to full precision."""
    _refine_all([c], evaluate)


def _stretches(crossings: list[_Crossing], P: int) -> list[tuple[float, float, bool]]:
    """(lo, hi, stable) for each stretch of the negative real axis between crossings.

    Clockwise encirclements of a point x: the signed count of crossings on the
    ray from x to -inf (upward crossings count +1).
    """
    xs = np.array([c.x for c in crossings], dtype=float)
    ups = np.array([c.up for c in crossings], dtype=int)
    order = np.argsort(xs, kind="stable")
    xs, counts = xs[order], np.concatenate([[0], np.cumsum(ups[order])])
    finite = np.unique(xs[np.isfinite(xs) & (xs < 0)])
    bounds = np.concatenate([[-math.inf], finite, [0.0]])
    lo, hi = bounds[:-1], bounds[1:]
    with np.errstate(all="ignore"):
        test = np.where(np.isinf(lo), np.where(hi < 0, 2 * hi, -1.0),
                        np.where(hi == 0.0, lo / 2, -np.sqrt(lo * hi)))
    N = counts[np.searchsorted(xs, test, side="left")]
    return [(float(a), float(b), bool(n == -P)) for a, b, n in zip(lo, hi, N)]


def _gain_factors(lo: float, hi: float) -> tuple[float, float]:
    """The factors k that put -1/k in the stretch (lo, hi)."""
    return (0.0 if lo == -math.inf else -1.0 / lo, math.inf if hi == 0.0 else -1.0 / hi)


def _settled(crossings: list[_Crossing], evaluate: Evaluate | None, P: int,
             wanted: Callable[[float, float, bool], bool]) -> list[tuple[float, float, bool]]:
    """Stretches, after refining the crossings that bound the wanted ones."""
    ends = {x for lo, hi, ok in _stretches(crossings, P) if wanted(lo, hi, ok) for x in (lo, hi)}
    for c in crossings:
        if c.x in ends:
            _refine(c, evaluate)
    return _stretches(crossings, P)


def stabilising_gains(response: LoopResponse, open_loop_rhp_poles: int,
                      evaluate: Evaluate | None = None) -> tuple[tuple[float, float], ...]:
    """The intervals (lo, hi) of factors k > 0 for which k L is closed-loop stable.

    ``hi`` may be ``math.inf`` and ``lo`` may be 0.0. With `evaluate`, the
    crossings are refined to full precision, the axis is followed past the
    engine's last sample and indentations are probed for poles of L; without
    it, positions are interpolated between samples (log |L| and arg L) and
    indentations are judged from the samples.
    """
    curve = _upper_curve(response, evaluate)
    crossings = _negative_axis_crossings(curve)
    stretches = _settled(crossings, evaluate, open_loop_rhp_poles, lambda lo, hi, ok: ok)
    return tuple(_gain_factors(lo, hi) for lo, hi, ok in stretches if ok)


def _gain_margins(crossings: list[_Crossing], evaluate: Evaluate,
                  P: int) -> tuple[float | None, float | None]:
    """(up, down) in dB from the stretch that holds -1; None when unbounded or unstable."""
    holds = lambda lo, hi, ok: lo < -1.0 < hi  # noqa: E731
    stretch = next((s for s in _settled(crossings, evaluate, P, holds) if holds(*s)), None)
    if stretch is None or not stretch[2]:
        return None, None
    k_down, k_up = _gain_factors(stretch[0], stretch[1])
    up = None if math.isinf(k_up) else 20.0 * math.log10(k_up)
    down = None if k_down == 0.0 else 20.0 * math.log10(k_down)
    return up, down


# ------------------------------------------------------------- crossovers

def _scalar(evaluate: Evaluate) -> Callable[[float], complex]:
    return lambda w: complex(evaluate(np.array([1j * w]))[0])


def _gain_crossovers(curve: _Curve, evaluate: Evaluate) -> list[GainCrossover]:
    """Every |L(jw)| = 1 for w > 0, bracketed on the samples and solved all at once."""
    roots, lo, hi = [], [], []
    for run in _axis_runs(curve):
        w = curve.s[run].imag
        with np.errstate(divide="ignore"):
            mag = np.log(np.abs(curve.L[run]))
        roots += [float(w[i]) for i in np.flatnonzero((mag == 0.0) & (w > 0))]
        brackets = np.flatnonzero((mag[:-1] * mag[1:] < 0) & (w[:-1] > 0)
                                  & np.isfinite(mag[:-1]) & np.isfinite(mag[1:]))
        lo += list(w[brackets])
        hi += list(w[brackets + 1])
    if lo:
        x, ok = illinois(lambda w: np.log(np.abs(evaluate(1j * w))), lo, hi, _XTOL_REL)
        roots += [float(v) for v in x[ok]]
    if not roots:
        return []
    wc = np.array(roots)
    lag = (np.degrees(np.angle(evaluate(1j * wc))) + 180.0) % 360.0
    out = [GainCrossover(float(w), float(g), float(min(g, 360.0 - g))) for w, g in zip(wc, lag)]
    return sorted(out, key=lambda c: c.freq)


def _phase_crossovers(crossings: list[_Crossing], evaluate: Evaluate) -> list[PhaseCrossover]:
    """Crossings on the engine's own axis samples (w > 0), refined."""
    seen, out = set(), []
    _refine_all([c for c in crossings if c.listed], evaluate)
    for c in crossings:
        if not c.listed or id(c) in seen:
            continue
        seen.add(id(c))
        _refine(c, evaluate)
        if c.freq > 0 and c.x < 0:
            out.append(PhaseCrossover(float(c.freq), -20.0 * math.log10(-c.x)))
    return sorted(out, key=lambda p: p.freq)


# ------------------------------------------------------------------ peaks

def _peak(curve: _Curve, evaluate: Evaluate, fn: Callable[[np.ndarray], np.ndarray],
          low_limit: float | None) -> Peak:
    """sup over the axis of fn(L(jw)): the best sample refined by a bounded scalar search,
    unless a limit is as large (then the frequency is 0.0 or inf).

    `low_limit` is the value as w -> 0 when an integrator sits at s = 0; the far
    end of the curve stands for w -> inf (L there is L(inf), or as good as).
    """
    best = Peak(-math.inf, math.nan)
    for run in _axis_runs(curve):
        w = curve.s[run].imag
        with np.errstate(all="ignore"):
            v = np.nan_to_num(fn(curve.L[run]), nan=-math.inf)
        i = int(np.argmax(v))
        if v[i] > best.value:
            best = _refine_peak(evaluate, fn, w, i, Peak(float(v[i]), float(w[i])))
    with np.errstate(all="ignore"):
        high = float(fn(curve.L[-1:])[0])
    limits = [Peak(high, math.inf)] + ([Peak(low_limit, 0.0)] if low_limit is not None else [])
    top = max(limits, key=lambda p: p.value)
    return best if best.value > top.value * (1 + 1e-9) else top


def _refine_peak(evaluate: Evaluate, fn, w: np.ndarray, i: int, sample: Peak) -> Peak:
    """Zooming grid search between the neighbours of the best sample (in log w)."""
    if not 0 < i < w.size - 1:
        return sample
    lo, hi = float(w[i - 1]), float(w[i + 1])
    x, v = zoom_max(lambda x: fn(evaluate(1j * x)), lo, hi, log=lo > 0)
    return Peak(v, x) if v > sample.value else sample


def _sensitivity(L: np.ndarray) -> np.ndarray:
    return 1.0 / np.abs(1.0 + L)


def _complementary(L: np.ndarray) -> np.ndarray:
    return np.abs(L) / np.abs(1.0 + L)


def _balanced(L: np.ndarray) -> np.ndarray:
    """|S - T| = |(1 - L)/(1 + L)|: the balanced (skew 0) disk-margin function."""
    return np.abs(1.0 - L) / np.abs(1.0 + L)


def _disk_margin(peak: Peak) -> DiskMargin:
    """Seiler, Packard & Gahinet (2020): the disk of skew 0 with alpha = 2 / peak."""
    alpha = 2.0 / peak.value if peak.value > 0 else math.inf  # L = 1 at every frequency: no peak
    if alpha >= 2.0:
        gain = (-math.inf, math.inf)  # the disk holds every gain in (0, inf)
    else:
        hi = 20.0 * math.log10((2.0 + alpha) / (2.0 - alpha))
        gain = (-hi, hi)
    return DiskMargin(alpha, gain, math.degrees(2.0 * math.atan(alpha / 2.0)), peak.freq)


# ------------------------------------------------------------------- entry

def loop_margins(evaluate: Evaluate, response: LoopResponse, open_loop_rhp_poles: int) -> Margins:
    """Every margin of the loop transfer L (its exact evaluator and contour samples).

    `evaluate(s)` gives L(s) on an array (delays included); `response` holds the
    engine's samples of the upper half of the Nyquist contour; P =
    `open_loop_rhp_poles`. Gain margins are given only when the count at -1
    says the closed loop is stable (N = -P); otherwise they are None.
    """
    curve = _upper_curve(response, evaluate)
    crossings = _negative_axis_crossings(curve)
    gains = _gain_crossovers(curve, evaluate)
    phases = _phase_crossovers(crossings, evaluate)
    up, down = _gain_margins(crossings, evaluate, open_loop_rhp_poles)
    integrator = bool(curve.at_pole[0])
    balanced = _peak(curve, evaluate, _balanced, 1.0 if integrator else None)
    return Margins(
        gain_crossovers=tuple(gains),
        phase_crossovers=tuple(phases),
        phase_margin_deg=min((g.phase_margin_deg for g in gains), default=None),
        gain_margin_up_db=up,
        gain_margin_down_db=down,
        delay_margin_s=min((math.radians(g.lag_deg) / g.freq for g in gains), default=None),
        disk_margin=_disk_margin(balanced),
        sensitivity_peak=_peak(curve, evaluate, _sensitivity, 0.0 if integrator else None),
        complementary_peak=_peak(curve, evaluate, _complementary, 1.0 if integrator else None),
        crossover_freq=max((g.freq for g in gains), default=None),
    )
