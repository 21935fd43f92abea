"""Local search and bisection on synthetic plants (known formulas stand in for the
engine, so these tests check the search logic alone, exactly and fast)."""
from __future__ import annotations

import math

import numpy as np
import pytest

from loopwise.sweep.design import corners, space_filling
from loopwise.sweep.evaluate import METRIC_NAMES, BreakSample, SampleOutcome
from loopwise.sweep.search import (BISECTION_STEPS, ROUNDS, Evidence, Target, badness, boundaries, local_search,
                                   search_budget, worst_index)


def plant(pm: float | None, stable: bool = True, ms: float = 1.5) -> SampleOutcome:
    values = {name: None for name in METRIC_NAMES}
    if stable:
        values.update(phase_margin=pm, sensitivity_peak=ms, gain_margin=math.inf)
    return SampleOutcome((BreakSample(stable, False, 0, 0, 0 if stable else 2,
                                      tuple(values[n] for n in METRIC_NAMES), (None,) * len(METRIC_NAMES)),))


def evidence_of(fn, dim: int, calls: list | None = None) -> Evidence:
    def evaluate(points):
        if calls is not None:
            calls.append(len(points))
        return [fn(p) for p in points]
    return Evidence(evaluate, dim)


# a phase margin with its minimum inside the box, at (0.37, 0.61): 20 deg there
CENTRE = np.array([0.37, 0.61])


def bowl(p) -> SampleOutcome:
    return plant(20.0 + 300.0 * float(np.sum((np.asarray(p) - CENTRE) ** 2)))


def test_evidence_evaluates_each_point_once_in_one_batch_per_call():
    calls = []
    ev = evidence_of(bowl, 2, calls)
    idx = ev.run(np.array([[0.1, 0.2], [0.3, 0.4], [0.1, 0.2]]), "space_filling")
    assert idx[0] == idx[2] and len(ev) == 2 and calls == [2]
    assert ev.run(np.array([[0.3, 0.4]]), "local_search") == [idx[1]] and calls == [2]
    assert ev.count("space_filling") == 2 and ev.count("local_search") == 0


def test_local_search_reaches_an_interior_minimum_the_samples_missed():
    ev = evidence_of(bowl, 2)
    ev.run(corners(2, 0), "corners")
    ev.run(space_filling(20, 2, seed=3), "space_filling")
    target = Target(0, "phase_margin", -1)
    sampled = ev.outcomes[worst_index(ev, target)].breaks[0].value("phase_margin")
    assert sampled > 20.3  # the design alone is off by more than the 0.5 deg the sweep promises
    stopped = local_search(ev, [target], start_step=0.2, budget=search_budget(20, 2))
    best = ev.outcomes[worst_index(ev, target)].breaks[0].value("phase_margin")
    assert not stopped
    assert best == pytest.approx(20.0, abs=0.05)
    np.testing.assert_allclose(ev.points[worst_index(ev, target)], CENTRE, atol=0.015)
    assert 0 < ev.count("local_search") <= ROUNDS * 4


def test_largest_is_worst_for_peaks_and_unstable_plants_have_no_badness():
    assert badness(plant(40.0, ms=2.0), Target(0, "sensitivity_peak", +1)) == 2.0
    assert badness(plant(40.0), Target(0, "phase_margin", -1)) == -40.0
    assert badness(plant(None, stable=False), Target(0, "phase_margin", -1)) is None
    assert badness(SampleOutcome(error=("LW219", "division by zero")), Target(0, "phase_margin", -1)) is None


def test_the_budget_stops_the_search_and_says_so():
    ev = evidence_of(bowl, 2)
    ev.run(space_filling(10, 2, seed=1), "space_filling")
    assert local_search(ev, [Target(0, "phase_margin", -1)], start_step=0.2, budget=3) is True
    assert ev.count("local_search") == 0  # the first round (4 probes) did not fit


def disk(p) -> SampleOutcome:
    """Stable outside the circle of radius 0.3 around (0.5, 0.5), unstable inside."""
    inside = float(np.linalg.norm(np.asarray(p) - 0.5)) < 0.3
    return plant(None if inside else 45.0, stable=not inside)


def test_bisection_brackets_the_boundary_between_a_stable_and_an_unstable_plant():
    ev = evidence_of(disk, 2)
    ev.run(corners(2, 0), "corners")
    ev.run(space_filling(40, 2, seed=0), "space_filling")
    (brackets,) = boundaries(ev, 1)
    assert 1 <= len(brackets) <= 4
    for k in brackets:
        r_stable = np.linalg.norm(k.stable - 0.5)
        r_unstable = np.linalg.norm(k.unstable - 0.5)
        assert r_stable >= 0.3 > r_unstable
        # BISECTION_STEPS halvings of a segment no longer than the box's diagonal
        assert np.linalg.norm(k.stable - k.unstable) <= math.sqrt(2) / 2 ** BISECTION_STEPS + 1e-12
    assert ev.count("boundary") > 0


def test_no_boundary_without_both_verdicts():
    ev = evidence_of(bowl, 2)
    ev.run(space_filling(10, 2, seed=0), "space_filling")
    assert boundaries(ev, 1) == [[]]
