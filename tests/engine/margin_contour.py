"""Test-only contour sampler: a stand-in for the engine's adaptive samples.

Samples the upper half of the Nyquist D-contour on a dense log grid, with
quarter/half circles of radius `eps` around poles on the imaginary axis and
the closing arc of radius `w_hi`, then bisects axis steps until the phase of L
and of 1 + L changes by less than pi/16 from one sample to the next.
"""
from __future__ import annotations

import numpy as np

from loopwise.results import LoopResponse


def _refine_axis(evaluate, w: np.ndarray, max_phase: float = np.pi / 16) -> np.ndarray:
    for _ in range(30):
        L = evaluate(1j * w)
        step = np.maximum(np.abs(np.angle(L[1:] / L[:-1])),
                          np.abs(np.angle((1 + L[1:]) / (1 + L[:-1]))))
        bad = np.flatnonzero(step > max_phase)
        if bad.size == 0:
            return w
        w = np.sort(np.concatenate([w, 0.5 * (w[bad] + w[bad + 1])]))
    return w


def contour_response(evaluate, axis_poles=(), w_lo=1e-5, w_hi=1e7, eps=1e-7, per_decade=60,
                     arc_points=64) -> LoopResponse:
    """A LoopResponse for L = `evaluate`, poles at j*w for w in `axis_poles` indented."""
    poles = sorted(float(p) for p in axis_poles)
    pieces_s, pieces_axis = [], []
    if poles and poles[0] == 0.0:
        th = np.linspace(0.0, np.pi / 2, 40)[:-1]
        pieces_s.append(eps * np.exp(1j * th))
        pieces_axis.append(np.zeros(th.size, bool))
        start = eps
    else:
        start = 0.0
        pieces_s.append(np.array([0j]))
        pieces_axis.append(np.array([True]))
        start = w_lo
    grid = np.logspace(np.log10(max(start, w_lo)), np.log10(w_hi),
                       int(per_decade * np.log10(w_hi / max(start, w_lo))) + 1)
    if start == eps:
        grid = np.concatenate([[eps], grid[grid > eps]])
    edges = [start] + sum(([p - eps, p + eps] for p in poles if p > 0), []) + [w_hi]
    for (a, b), p in zip(zip(edges[0::2], edges[1::2]), [p for p in poles if p > 0] + [None]):
        w = np.unique(np.concatenate([[a], grid[(grid > a) & (grid < b)], [b]]))
        w = _refine_axis(evaluate, w)
        pieces_s.append(1j * w)
        pieces_axis.append(np.ones(w.size, bool))
        if p is not None:
            th = np.linspace(-np.pi / 2, np.pi / 2, 41)[1:-1]
            pieces_s.append(1j * p + eps * np.exp(1j * th))
            pieces_axis.append(np.zeros(th.size, bool))
    th = np.linspace(np.pi / 2, 0.0, arc_points)[1:]
    pieces_s.append(w_hi * np.exp(1j * th))
    pieces_axis.append(np.zeros(th.size, bool))
    s = np.concatenate(pieces_s)
    return LoopResponse(s=s, L=evaluate(s), on_axis=np.concatenate(pieces_axis),
                        axis_poles=tuple(poles))


def rational(num, den, delay=0.0):
    """Evaluator of num(s)/den(s) * exp(-s delay) (coefficients highest power first)."""
    num, den = np.asarray(num, float), np.asarray(den, float)

    def evaluate(s):
        s = np.asarray(s, complex)
        return np.polyval(num, s) / np.polyval(den, s) * np.exp(-s * delay)

    return evaluate
