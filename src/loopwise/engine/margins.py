"""Every margin of the breaks of a model, from their loop transfers and the engine's samples.

Conventions (docs/margins.md states them in full):

- gain crossover: |L(jw)| = 1; phase margin there `min(lag, 360 - lag)`;
- phase crossover: L(jw) real and negative; gain margin there -20 log10 |L|;
- gain margins up / down come from the winding count, not from the phase
  (engine/curve.py);
- delay margin: min over gain crossovers of lag (rad) / frequency;
- balanced disk margin (Seiler, Packard & Gahinet, IEEE Control Systems Magazine 2020)
  and the sensitivity peaks (engine/metrics.py).

`break_margins` does every break of a model at once: each refinement (crossovers,
crossings, peaks, the far tail) is one vectorised pass over all breaks and candidates,
with `evaluate(s, i)` the loop transfer of break i[j] at s[j]. `loop_margins` and
`stabilising_gains` are the one-loop forms. Pure numpy (no scipy import).
"""
from __future__ import annotations

import math
from typing import Callable

import numpy as np

from ..results import LoopResponse, Margins
from .curve import (Curve, add_tail, crossings_many, gain_factors, gain_margins, holds_minus_one, mark_poles,
                    needs_origin, settle, tail_matters, upper_curve)
from .metrics import disk_margin, gain_crossovers, peaks, phase_crossovers

__all__ = ["loop_margins", "stabilising_gains", "break_margins", "break_stabilising_gains"]

Evaluate = Callable[[np.ndarray], np.ndarray]


def _curves(responses: list[LoopResponse], evaluate) -> list[Curve]:
    need = [i for i, r in enumerate(responses) if evaluate is not None and needs_origin(r)]
    L0 = {}
    if need:
        vals = evaluate(np.zeros(len(need), complex), np.array(need))
        L0 = dict(zip(need, vals))
    curves = [upper_curve(i, r, L0.get(i)) for i, r in enumerate(responses)]
    mark_poles(curves, evaluate)
    return curves


def break_margins(evaluate, responses: list[LoopResponse], open_loop_rhp_poles: list[int],
                  tidy: bool = False, tail=tail_matters, listed: bool = True) -> list[Margins]:
    """The margins of many breaks at once. `evaluate(s, i)` gives L of break i[j] at s[j]
    (delays included); `responses` the engine's samples; gain margins are given only where
    the count at -1 says the closed loop is stable (N = -P). With `tidy`, phase crossovers
    far from the gain margins are counted rather than listed (metrics.TIDY_DB). `tail(curve,
    stretches)` says which curves to follow past their last sample (default
    curve.tail_matters; a sweep's short curves: stability.ShortProbe). Without `listed`,
    the phase crossovers are neither refined nor listed (a sweep records none)."""
    if not responses:
        return []
    curves = _curves(responses, evaluate)
    found = crossings_many(curves)
    Ps = list(open_loop_rhp_poles)
    st = settle(found, Ps, evaluate, holds_minus_one)
    # crossings past the engine's last sample matter only where they could bound the
    # stretch that holds -1 (its right end close to the origin): follow those curves on
    late = [c for c, s in zip(curves, st) if tail(c, s)]
    if late:
        add_tail(late, evaluate)
        for c, f in zip(late, crossings_many(late)):
            found[c.index] = f
        again = settle([found[c.index] for c in late], [Ps[c.index] for c in late], evaluate, holds_minus_one)
        for c, s in zip(late, again):
            st[c.index] = s
    bounds = [gain_margins(s) for s in st]
    gains = gain_crossovers(curves, evaluate)
    phases = phase_crossovers(found, evaluate, bounds, tidy) if listed else [([], 0)] * len(found)
    pk = peaks(curves, evaluate)
    out = []
    for g, (ph, omitted), (up, down), p in zip(gains, phases, bounds, pk):
        out.append(Margins(
            gain_crossovers=tuple(g),
            phase_crossovers=tuple(ph),
            phase_margin_deg=min((x.phase_margin_deg for x in g), default=None),
            gain_margin_up_db=up,
            gain_margin_down_db=down,
            delay_margin_s=min((math.radians(x.lag_deg) / x.freq for x in g), default=None),
            disk_margin=disk_margin(p["balanced"]),
            sensitivity_peak=p["sensitivity"],
            complementary_peak=p["complementary"],
            crossover_freq=max((x.freq for x in g), default=None),
            phase_crossovers_omitted=omitted,
        ))
    return out


def break_stabilising_gains(evaluate, responses: list[LoopResponse],
                            open_loop_rhp_poles: list[int]) -> list[tuple[tuple[float, float], ...]]:
    """For each break, the intervals (lo, hi) of factors k > 0 for which k L is closed-loop
    stable (`hi` may be inf, `lo` 0.0). The axis is followed past the engine's last sample."""
    if not responses:
        return []
    curves = _curves(responses, evaluate)
    if evaluate is not None:
        add_tail(curves, evaluate)
    found = crossings_many(curves)
    st = settle(found, list(open_loop_rhp_poles), evaluate, lambda lo, hi, ok: ok)
    return [tuple(gain_factors(lo, hi) for lo, hi, ok in s if ok) for s in st]


def _one(evaluate: Evaluate | None):
    return None if evaluate is None else (lambda s, i: evaluate(np.asarray(s)))


def loop_margins(evaluate: Evaluate, response: LoopResponse, open_loop_rhp_poles: int) -> Margins:
    """Every margin of the loop transfer L (its exact evaluator and contour samples).

    `evaluate(s)` gives L(s) on an array (delays included); `response` holds the
    engine's samples of the upper half of the Nyquist contour; P =
    `open_loop_rhp_poles`. Gain margins are given only when the count at -1
    says the closed loop is stable (N = -P); otherwise they are None.
    """
    return break_margins(_one(evaluate), [response], [open_loop_rhp_poles])[0]


def stabilising_gains(response: LoopResponse, open_loop_rhp_poles: int,
                      evaluate: Evaluate | None = None) -> tuple[tuple[float, float], ...]:
    """The intervals (lo, hi) of factors k > 0 for which k L is closed-loop stable.

    ``hi`` may be ``math.inf`` and ``lo`` may be 0.0. With `evaluate`, the
    crossings are refined to full precision, the axis is followed past the
    engine's last sample and indentations are probed for poles of L; without
    it, positions are interpolated between samples (log |L| and arg L) and
    indentations are judged from the samples.
    """
    return break_stabilising_gains(_one(evaluate), [response], [open_loop_rhp_poles])[0]
