"""Frequency metrics of the loop transfers: gain and phase crossovers, sensitivity peaks and
the balanced disk margin (margins stage), for many breaks at once.

- gain crossover: |L(jw)| = 1; `lag` in [0, 360) deg is the extra phase lag that would
  put L on -1; the phase margin there is `min(lag, 360 - lag)`.
- phase crossover: L(jw) real and negative; gain margin there -20 log10 |L|.
- balanced disk margin (Seiler, Packard & Gahinet, IEEE Control Systems Magazine 2020):
  `alpha = 2 / max |(1 - L)/(1 + L)|`; Ms = max |1/(1 + L)|, Mt = max |L/(1 + L)|.

Every refinement is one vectorised pass over the candidates of all breaks: the roots by
the Illinois variant of regula falsi, the peaks by zooming grids (engine/solve.py).
"""
from __future__ import annotations

import math

import numpy as np

from ..results import DiskMargin, GainCrossover, Peak, PhaseCrossover
from .curve import Crossing, Curve, Evaluate, refine
from .solve import illinois, zoom_max_many

__all__ = ["gain_crossovers", "phase_crossovers", "peaks", "disk_margin", "METRICS", "TIDY_DB"]

_XTOL_REL = 1e-14
#: phase crossovers listed: those whose gain change lies within this many dB of the
#: nearest one (the gain margins lie among them); the rest are only counted
TIDY_DB = 20.0


def gain_crossovers(curves: list[Curve], evaluate: Evaluate) -> list[list[GainCrossover]]:
    """Every |L(jw)| = 1 for w > 0 of every curve, bracketed on the samples and solved at once."""
    roots: list[list[float]] = [[] for _ in curves]
    lo, hi, owner, flo, fhi = [], [], [], [], []
    # every axis run of every curve in one array (brackets never span two runs)
    runs = [(n, run) for n, c in enumerate(curves) for run in c.axis_runs()]
    if runs:
        w = np.concatenate([curves[n].s[run].imag for n, run in runs])
        curve_of = np.concatenate([np.full(run.size, n) for n, run in runs])
        run_of = np.repeat(np.arange(len(runs)), [run.size for _, run in runs])
        with np.errstate(divide="ignore"):
            mag = np.log(np.abs(np.concatenate([curves[n].L[run] for n, run in runs])))
        for j in np.flatnonzero((mag == 0.0) & (w > 0)):
            roots[curve_of[j]].append(float(w[j]))
        b = np.flatnonzero((run_of[:-1] == run_of[1:]) & (mag[:-1] * mag[1:] < 0) & (w[:-1] > 0)
                           & np.isfinite(mag[:-1]) & np.isfinite(mag[1:]))
        lo, hi, flo, fhi = list(w[b]), list(w[b + 1]), list(mag[b]), list(mag[b + 1])
        owner = [int(n) for n in curve_of[b]]
    if lo:
        owner_a = np.array(owner)
        cols = np.array([curves[n].index for n in owner])
        x, ok = illinois(lambda w, i: np.log(np.abs(evaluate(1j * w, cols[i]))), lo, hi, _XTOL_REL,
                         indexed=True, fa=flo, fb=fhi)
        for n, v, good in zip(owner_a, x, ok):
            if good:
                roots[n].append(float(v))
    out = []
    all_w = [np.array(r) for r in roots]
    flat = np.concatenate(all_w) if any(r.size for r in all_w) else np.zeros(0)
    if flat.size:
        cols = np.concatenate([np.full(r.size, c.index) for r, c in zip(all_w, curves)])
        lag_all = (np.degrees(np.angle(evaluate(1j * flat, cols))) + 180.0) % 360.0
    offset = 0
    for r in all_w:
        lag = lag_all[offset:offset + r.size] if r.size else np.zeros(0)
        offset += r.size
        found = [GainCrossover(float(w), float(g), float(min(g, 360.0 - g))) for w, g in zip(r, lag)]
        out.append(sorted(found, key=lambda g: g.freq))
    return out


def phase_crossovers(found: list[list[Crossing]], evaluate: Evaluate,
                     bounds: list[tuple[float | None, float | None]],
                     tidy: bool = True) -> list[tuple[list[PhaseCrossover], int]]:
    """Each curve's phase crossovers (on the engine's own axis samples, w > 0, refined).

    With `tidy`, those whose gain change lies within TIDY_DB of the nearest one, and
    those that bound the gain margins `bounds` (up, down dB), are listed; the others are
    only counted. The choice is made on the interpolated positions, so only the listed
    ones are refined (a delayed loop has hundreds of far-off crossovers).
    """
    per_curve = []
    for f in found:
        seen, mine = set(), []
        for c in f:
            if c.listed and id(c) not in seen and -math.inf < c.x < 0 and (c.freq > 0 or c.bracket is not None):
                seen.add(id(c))
                mine.append(c)
        per_curve.append(mine)
    chosen = []
    for mine in per_curve:
        if tidy and mine:
            gm = np.array([-20.0 * math.log10(-c.x) for c in mine])
            near = np.abs(gm) <= np.min(np.abs(gm)) + TIDY_DB + 1.0  # + 1 dB: interpolation
            chosen.append([c for c, k in zip(mine, near) if k or c.refined])
        else:
            chosen.append(mine)
    refine([c for ch in chosen for c in ch], evaluate)
    out = []
    for mine, ch, (up, down) in zip(per_curve, chosen, bounds):
        every = [PhaseCrossover(float(c.freq), -20.0 * math.log10(-c.x)) for c in ch
                 if c.freq > 0 and -math.inf < c.x < 0]
        if not tidy or not every:
            out.append((sorted(every, key=lambda p: p.freq), 0))
            continue
        nearest = min(abs(p.gain_margin_db) for p in every)
        keep = [p for p in every if abs(p.gain_margin_db) <= nearest + TIDY_DB
                or any(m is not None and abs(p.gain_margin_db - m) <= 1e-9 * max(1.0, abs(m))
                       for m in (up, down))]
        out.append((sorted(keep, key=lambda p: p.freq), len(mine) - len(keep)))
    return out


# ------------------------------------------------------------------ peaks

def _sensitivity(L: np.ndarray) -> np.ndarray:
    return 1.0 / np.abs(1.0 + L)


def _complementary(L: np.ndarray) -> np.ndarray:
    return np.abs(L) / np.abs(1.0 + L)


def _balanced(L: np.ndarray) -> np.ndarray:
    """|S - T| = |(1 - L)/(1 + L)|: the balanced (skew 0) disk-margin function."""
    return np.abs(1.0 - L) / np.abs(1.0 + L)


#: the peaked metrics and their limits as w -> 0 next to an integrator
METRICS = (("balanced", _balanced, 1.0), ("sensitivity", _sensitivity, 0.0), ("complementary", _complementary, 1.0))


def peaks(curves: list[Curve], evaluate: Evaluate) -> list[dict[str, Peak]]:
    """sup over the axis of each metric of every curve: each best sample refined by a
    bounded zooming search (all curves and metrics in one pass), unless a limit is as
    large (then the frequency is 0.0 or inf).

    Next to an integrator at s = 0 the limit as w -> 0 counts; the far end of the curve
    stands for w -> inf (L there is L(inf), or as good as).
    """
    windows = []  # (curve position, metric position, lo, hi, sample peak)
    best = [[Peak(-math.inf, math.nan) for _ in METRICS] for _ in curves]
    # every axis run of every curve in one array: each metric in one pass, each run's
    # best sample (its first largest value, as argmax) by a reduction
    runs = [(n, run) for n, c in enumerate(curves) for run in c.axis_runs()]
    if runs:
        w_all = np.concatenate([curves[n].s[run].imag for n, run in runs])
        L_all = np.concatenate([curves[n].L[run] for n, run in runs])
        sizes = np.array([run.size for _, run in runs])
        first = np.concatenate([[0], np.cumsum(sizes)[:-1]])
        run_of = np.repeat(np.arange(len(runs)), sizes)
    for m, (_, fn, _) in enumerate(METRICS):
        if not runs:
            break
        with np.errstate(all="ignore"):
            v = np.nan_to_num(fn(L_all), nan=-math.inf)
        top = np.maximum.reduceat(v, first)
        hits = np.flatnonzero(v == top[run_of])
        at = hits[np.searchsorted(run_of[hits], np.arange(len(runs)))] - first
        cand: dict[int, tuple[float, int, int]] = {}
        for r, (n, run) in enumerate(runs):
            if n not in cand or top[r] > cand[n][0]:
                cand[n] = (float(top[r]), r, int(at[r]))
        for n, (value, r, i) in cand.items():
            w = w_all[first[r]:first[r] + sizes[r]]
            best[n][m] = Peak(value, float(w[i]))
            if 0 < i < w.size - 1:
                windows.append((n, m, float(w[i - 1]), float(w[i + 1])))
    windows.sort(key=lambda x: (x[0], x[1]))
    if windows:
        cols = np.array([curves[n].index for n, _, _, _ in windows])
        lo = np.array([w[2] for w in windows])
        hi = np.array([w[3] for w in windows])

        metric = np.array([m for _, m, _, _ in windows])

        def f(x, idx):
            L = evaluate(1j * x.ravel(), np.repeat(cols[idx], x.shape[1])).reshape(x.shape)
            out = np.empty(x.shape)
            for m, (_, fn, _) in enumerate(METRICS):  # each metric on all its windows at once
                rows = metric[idx] == m
                if rows.any():
                    out[rows] = fn(L[rows])
            return out

        # log windows stop at 1e-6 and take the parabola's vertex (solve.zoom_max_many: the
        # value is then exact to rounding); a window from w = 0 zooms on as before
        x, v = zoom_max_many(f, lo, hi, lo > 0, points=13, rounds=20, xtol=np.where(lo > 0, 1e-6, 1e-13),
                             polish=True)
        for (n, m, _, _), xi, vi in zip(windows, x, v):
            if vi > best[n][m].value:
                best[n][m] = Peak(float(vi), float(xi))
    out = []
    with np.errstate(all="ignore"):
        L_end = np.array([c.L[-1] for c in curves], complex)
        highs = [fn(L_end) for _, fn, _ in METRICS]
    for n, c in enumerate(curves):
        integrator = bool(c.at_pole[0])
        res = {}
        for m, (name, fn, low) in enumerate(METRICS):
            high = float(highs[m][n])
            limits = [Peak(high, math.inf)] + ([Peak(low, 0.0)] if integrator else [])
            top = max(limits, key=lambda p: p.value)
            b = best[n][m]
            res[name] = b if b.value > top.value * (1 + 1e-9) else top
        out.append(res)
    return out


def disk_margin(peak: Peak) -> DiskMargin:
    """Seiler, Packard & Gahinet (2020): the disk of skew 0 with alpha = 2 / peak."""
    alpha = 2.0 / peak.value if peak.value > 0 else math.inf  # L = 1 at every frequency: no peak
    if alpha >= 2.0:
        gain = (-math.inf, math.inf)  # the disk holds every gain in (0, inf)
    else:
        hi = 20.0 * math.log10((2.0 + alpha) / (2.0 - alpha))
        gain = (-hi, hi)
    return DiskMargin(alpha, gain, math.degrees(2.0 * math.atan(alpha / 2.0)), peak.freq)
