"""Small vectorised solvers over numpy arrays (the engine's own, so that a check
needs no scipy import: one batched evaluation per iteration for many roots)."""
from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["illinois", "zoom_max", "zoom_max_many", "nonsingular", "distinct"]


def illinois(h: Callable, a, b, xtol_rel: float = 1e-14, max_iter: int = 100,
             indexed: bool = False, fa=None, fb=None) -> tuple[np.ndarray, np.ndarray]:
    """Roots of h in the brackets [a_i, b_i] at once (regula falsi, Anderson-Bjorck variant
    of the Illinois rule: Anderson & Bjorck, BIT 13, 1973).

    Returns (x, ok): ok is False where the bracket holds no sign change.
    Superlinear like the secant method, but never leaves its bracket. With `indexed`,
    h is called as h(x, i): the points and the indices of their brackets (so one call
    can serve brackets of different functions, e.g. the loop transfers of many breaks).
    `fa`, `fb`: h at the bracket ends, when already known (saves an evaluation).
    """
    a = np.asarray(a, float).copy()
    b = np.asarray(b, float).copy()
    idx = np.arange(a.size)
    f = (lambda x, i: h(x, i)) if indexed else (lambda x, i: h(x))
    with np.errstate(all="ignore"):
        fa = f(a, idx) if fa is None else np.asarray(fa, float).copy()
        fb = f(b, idx) if fb is None else np.asarray(fb, float).copy()
    ok = (fa * fb <= 0) & np.isfinite(fa) & np.isfinite(fb)
    x = np.where(fa == 0, a, b)
    tol = xtol_rel * np.maximum(np.abs(a), np.abs(b))
    # a value this small is at the level of rounding: the root is found
    ftol = 1e-14 * np.maximum(np.abs(fa), np.abs(fb))
    live = ok & (fa != 0) & (fb != 0)
    for _ in range(max_iter):
        if not live.any():
            break
        with np.errstate(all="ignore"):
            xs = b - fb * (b - a) / (fb - fa)
        bad = ~np.isfinite(xs) | (xs <= np.minimum(a, b)) | (xs >= np.maximum(a, b))
        xs = np.where(bad, 0.5 * (a + b), xs)
        fx = np.zeros_like(xs)
        with np.errstate(all="ignore"):
            fx[live] = f(xs[live], idx[live])
        flip = live & (fx * fb < 0)
        keep = live & ~flip
        # Anderson-Bjorck: the end kept a second time has its value scaled by 1 - f(x)/f(b)
        # (by 1/2 when that is not positive), which restores superlinear convergence
        with np.errstate(all="ignore"):
            m = 1.0 - fx / fb
        m = np.where((m > 0) & np.isfinite(m), m, 0.5)
        a = np.where(flip, b, a)
        fa = np.where(flip, fb, np.where(keep, fa * m, fa))
        b = np.where(live, xs, b)
        fb = np.where(live, fx, fb)
        moved = np.abs(xs - x)
        x = np.where(live, xs, x)
        # done when the bracket or the last step is within the tolerance (a secant step
        # that small means the root is found to it; the bracket need not shrink as fast)
        live &= (np.abs(fx) > ftol) & (np.abs(b - a) > tol) & (moved > 0.5 * tol)
    return x, ok


def zoom_max(f: Callable[[np.ndarray], np.ndarray], lo: float, hi: float, log: bool = True,
             points: int = 33, rounds: int = 11) -> tuple[float, float]:
    """Maximise a smooth f on [lo, hi] by zooming grids: each round one batched
    evaluation of `points` values and a window 16 times narrower around the best."""
    x, v = zoom_max_many(lambda x, i: f(x[0]).reshape(1, -1), [lo], [hi], [log], points, rounds)
    return float(x[0]), float(v[0])


def zoom_max_many(f: Callable[[np.ndarray, np.ndarray], np.ndarray], lo, hi, log,
                  points: int = 33, rounds: int = 11, xtol=1e-13,
                  polish: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """zoom_max for many windows at once: f(x, i) takes points x of shape (windows, points)
    and the window indices i, and returns values of the same shape.

    A window stops zooming once narrower than `xtol` (one value, or one per window) times
    max(|upper end|, 1), in log x for a log window. With `polish`, each window whose last
    grid peaks inside it then takes the vertex of the parabola through that best sample
    and the two beside it (one more batched evaluation), kept where f is higher: near a
    smooth maximum the value's error is quadratic in the grid step, so a window of 1e-6
    already gives the value to rounding, and the vertex puts the place well inside the
    last step.
    """
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    uselog = np.asarray(log, bool) & (lo > 0)
    with np.errstate(all="ignore"):
        u_lo = np.where(uselog, np.log(np.where(uselog, lo, 1.0)), lo)
        u_hi = np.where(uselog, np.log(np.where(uselog, hi, 1.0)), hi)
    n = lo.size
    xtol = np.broadcast_to(np.asarray(xtol, float), (n,))
    best_x, best_v = np.full(n, np.nan), np.full(n, -np.inf)
    # each window's last grid: step, place of its best sample (u), its value, the values beside
    last = np.full((n, 5), np.nan)
    live = np.ones(n, bool)
    grid = np.linspace(0.0, 1.0, points)
    for _ in range(rounds):
        idx = np.nonzero(live)[0]
        if idx.size == 0:
            break
        u = u_lo[idx, None] + (u_hi - u_lo)[idx, None] * grid[None, :]
        x = np.where(uselog[idx, None], np.exp(u), u)
        with np.errstate(all="ignore"):
            v = np.nan_to_num(np.asarray(f(x, idx), float), nan=-np.inf)
        j = np.argmax(v, axis=1)
        rows = np.arange(idx.size)
        better = v[rows, j] > best_v[idx]
        best_x[idx[better]], best_v[idx[better]] = x[rows, j][better], v[rows, j][better]
        step = (u_hi - u_lo)[idx] / (points - 1)
        centre = u[rows, j]
        if polish:
            last[idx] = np.stack([step, centre, v[rows, j], v[rows, np.maximum(j - 1, 0)],
                                  v[rows, np.minimum(j + 1, points - 1)]], axis=1)
            last[idx[(j == 0) | (j == points - 1)]] = np.nan
        u_lo[idx] = np.maximum(u_lo[idx], centre - step)
        u_hi[idx] = np.minimum(u_hi[idx], centre + step)
        live[idx] = (u_hi[idx] - u_lo[idx]) > xtol[idx] * np.maximum(np.abs(u_hi[idx]), 1.0)
    if polish:
        _polish(f, uselog, last, best_x, best_v)
    return best_x, best_v


def _polish(f, uselog, last, best_x, best_v) -> None:
    """The vertex of the parabola through each window's last best sample and the samples
    beside it (in place: kept where f is higher there than the best so far)."""
    h, c, vc, vm, vp = last.T
    with np.errstate(all="ignore"):
        curv = vm + vp - 2.0 * vc
        shift = 0.5 * h * (vm - vp) / curv
        # the last grid's best is the best found, the three values are finite, f is
        # concave there and the vertex lies within a step of the best sample
        ok = (vc == best_v) & np.isfinite(vm + vp + vc) & (curv < 0) & (np.abs(shift) < h)
    idx = np.nonzero(ok)[0]
    if idx.size == 0:
        return
    u = (c + shift)[idx]
    x = np.where(uselog[idx], np.exp(u), u)[:, None]
    with np.errstate(all="ignore"):
        v = np.nan_to_num(np.asarray(f(x, idx), float), nan=-np.inf)[:, 0]
    better = v > best_v[idx]
    best_x[idx[better]], best_v[idx[better]] = x[better, 0], v[better]


def nonsingular(M: np.ndarray, gross: np.ndarray, rel: float = 1e-12) -> bool:
    """Whether the real matrix M is invertible, telling an exact cancellation from a small value.

    `gross` holds, entry by entry, the sum of the magnitudes M was added up from (|I| plus
    |each wiring term|). Gaussian elimination with partial pivoting carries the same sums
    through every update; a pivot below `rel` times its own sum is what is left of a
    cancellation (rounding noise), so M is singular. Scale-free: a loop gain of 1e16 is
    invertible, a direct gain of exactly 1 round a loop is not.
    """
    A = np.array(M, dtype=float)
    G = np.array(gross, dtype=float)
    n = A.shape[0]
    with np.errstate(all="ignore"):
        sign, logdet = np.linalg.slogdet(A)
        hadamard = float(np.sum(np.log(np.linalg.norm(G, axis=1))))
    if sign != 0 and np.isfinite(logdet) and logdet > hadamard + np.log(1e-6):
        return True  # far from singular: no cancellation leaves that much
    with np.errstate(all="ignore"):
        for k in range(n):
            p = k + int(np.argmax(np.abs(A[k:, k])))
            if not abs(A[p, k]) > rel * G[p, k]:
                return False
            if p != k:
                A[[k, p]], G[[k, p]] = A[[p, k]], G[[p, k]]
            f = A[k + 1:, k] / A[k, k]
            A[k + 1:, k:] -= f[:, None] * A[k, k:]
            G[k + 1:, k:] += np.abs(f)[:, None] * G[k, k:]
    return bool(np.all(np.isfinite(A)))


def distinct(x) -> np.ndarray:
    """The sorted distinct values of x (flattened), as np.unique gives them. np.unique
    itself imports numpy.ma on its first call (about 20 ms of every CLI start-up)."""
    x = np.sort(np.asarray(x).ravel())
    return x[np.concatenate(([True], x[1:] != x[:-1]))] if x.size else x
