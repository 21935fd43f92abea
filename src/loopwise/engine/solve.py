"""Small vectorised solvers over numpy arrays (the engine's own, so that a check
needs no scipy import: one batched evaluation per iteration for many roots)."""
from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["illinois", "zoom_max", "nonsingular"]


def illinois(h: Callable[[np.ndarray], np.ndarray], a, b, xtol_rel: float = 1e-14,
             max_iter: int = 100) -> tuple[np.ndarray, np.ndarray]:
    """Roots of h in the brackets [a_i, b_i] at once (regula falsi, Illinois variant).

    Returns (x, ok): ok is False where the bracket holds no sign change.
    Superlinear like the secant method, but never leaves its bracket.
    """
    a = np.asarray(a, float).copy()
    b = np.asarray(b, float).copy()
    with np.errstate(all="ignore"):
        fa, fb = h(a), h(b)
    ok = (fa * fb <= 0) & np.isfinite(fa) & np.isfinite(fb)
    x = np.where(fa == 0, a, b)
    tol = xtol_rel * np.maximum(np.abs(a), np.abs(b))
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
            fx[live] = h(xs[live])
        flip = live & (fx * fb < 0)
        keep = live & ~flip
        a = np.where(flip, b, a)
        fa = np.where(flip, fb, np.where(keep, fa / 2.0, fa))
        b = np.where(live, xs, b)
        fb = np.where(live, fx, fb)
        x = np.where(live, xs, x)
        live &= (fx != 0) & (np.abs(b - a) > tol)
    return x, ok


def zoom_max(f: Callable[[np.ndarray], np.ndarray], lo: float, hi: float, log: bool = True,
             points: int = 33, rounds: int = 11) -> tuple[float, float]:
    """Maximise a smooth f on [lo, hi] by zooming grids: each round one batched
    evaluation of `points` values and a window 16 times narrower around the best."""
    if log and lo > 0:
        u_lo, u_hi, to_x = np.log(lo), np.log(hi), np.exp
    else:
        u_lo, u_hi, to_x = lo, hi, (lambda u: u)
    best_x, best_v = None, -np.inf
    for _ in range(rounds):
        u = np.linspace(u_lo, u_hi, points)
        x = to_x(u)
        with np.errstate(all="ignore"):
            v = np.nan_to_num(np.asarray(f(x), float), nan=-np.inf)
        i = int(np.argmax(v))
        if v[i] > best_v:
            best_x, best_v = float(x[i]), float(v[i])
        step = u[1] - u[0]
        u_lo, u_hi = max(u_lo, u[i] - step), min(u_hi, u[i] + step)
        if u_hi - u_lo <= 1e-13 * max(abs(u_hi), 1.0):
            break
    return best_x, best_v


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
