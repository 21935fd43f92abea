"""The batched evaluation of a sweep's plants (sweep/evaluate.py over `analysis.check_many`)
gives every plant what a check of that plant alone gives.

Reference: the per-plant path, `analysis.check_model` on the model resolved at the
plant's param values (what `loopwise check --set NAME=VALUE ...` does), with the
waivers marked as `check` marks them. Counts, verdicts, notes and warnings must be
equal; the margins equal to the engine's tolerance (relative 1e-9, the tolerance of
tests/reference/test_batch_vs_python_control.py).
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import loopwise.analysis as analysis
from loopwise.analysis import check_model, prepare_model
from loopwise.errors import ModelError
from loopwise.language.resolve import parse_model, resolve_parsed
from loopwise.settings import Settings
from loopwise.sweep.design import corners, space_filling, to_values
from loopwise.sweep.driver import prepare_sweep
from loopwise.sweep.evaluate import (BATCH, METRIC_NAMES, MIN_BATCH, SPREAD, SampleOutcome, batches,
                                     evaluate_points, outcome_of, outcomes_of_prepared)

SERVO = Path(__file__).resolve().parents[2] / "models" / "servo_axis.loop"

#: invented: an open-loop unstable plant (a pole at +1) behind a delay. Stable only for
#: K > 1 and a short delay, so most of the box is unstable (P = 1, N = 3 or more); at
#: long delays and high gains L winds round the origin beyond the certified range so often
#: that the margins' extension stops at its budget (LW581 at the break)
UNSTABLE_REGION = """model balance
param K = 4 in [0.5, 8]
param T = 0.05 in [0.01, 0.3]
input r
e = r - y
y = [K*(s + 1)/((s - 1)*(0.1*s + 1))*exp(-T*s)](e)
break loop at y
"""

#: invented: at a = 0 the loop has more zeros than poles (LW403, refused by the engine's
#: count, after the wiring is reduced); at Ti = 0 the block divides by zero (refused
#: when the model is resolved, LW221)
IMPROPER_AT_ZERO = """model improper
param a = 0.5 in [0, 1]
param Ti = 2 in [0, 3]
input r
block G = (s + 1)^3/((a*s + 1)*s*(s + 4))/Ti
e = r - y
y = G(e)
break loop at y
"""

#: invented: another wiring (one more signal), for a batch of mixed wirings
OTHER_WIRING = """model other
param K = 2 in [1, 3]
input r
e = r - y
u = [K/(s + 2)](e)
y = [1/(s*(0.5*s + 1))](u)
break loop at y
"""


def per_plant(parsed, names, rows) -> list[SampleOutcome]:
    """The reference: each plant resolved and checked alone."""
    out = []
    for row in rows:
        try:
            out.append(outcome_of(check_model(resolve_parsed(parsed, dict(zip(names, map(float, row)))))))
        except ModelError as exc:
            first = exc.errors[0]
            out.append(SampleOutcome(error=(first.code, first.message)))
    return out


def assert_same(got: SampleOutcome, ref: SampleOutcome) -> None:
    assert got.error == ref.error and got.warnings == ref.warnings
    assert len(got.breaks) == len(ref.breaks)
    for a, b in zip(got.breaks, ref.breaks):
        assert (a.stable, a.marginal, a.P, a.N, a.Z) == (b.stable, b.marginal, b.P, b.N, b.Z)
        assert a.notes == b.notes and a.warnings == b.warnings
        for name, x, y in zip(METRIC_NAMES, a.values, b.values):
            assert (x is None) == (y is None), name
            if y is not None and math.isfinite(y):
                assert x == pytest.approx(y, rel=1e-9, abs=1e-12), name
            elif y is not None:
                assert x == y, name


def plants(path, samples: int, seed: int = 0):
    parsed, model, _ = prepare_sweep(str(path), Settings())
    names = list(model.ranges)
    lo, hi = [model.ranges[n][0] for n in names], [model.ranges[n][1] for n in names]
    unit = np.vstack([corners(len(names), seed), space_filling(samples, len(names), seed)])
    return parsed, names, to_values(unit, lo, hi)


@pytest.fixture
def batched(monkeypatch):
    """The sizes of the batches `analysis.check_many` was given."""
    sizes: list[int] = []
    real = analysis.check_many

    def spy(preps, *args, **kwargs):
        sizes.append(len(preps))
        return real(preps, *args, **kwargs)

    monkeypatch.setattr(analysis, "check_many", spy)
    return sizes


def test_the_servo_plants_batched_are_the_plants_checked_one_by_one(batched):
    parsed, names, rows = plants(SERVO, 28)
    got = evaluate_points(parsed, names, rows)
    # the plants went through the batched engine, in batches of at most BATCH
    assert sum(batched) == len(rows) == 36 and max(batched) <= BATCH and len(batched) == len(batches(36)) > 1
    ref = per_plant(parsed, names, rows)
    for g, r in zip(got, ref):
        assert_same(g, r)
    assert all(o.stable for o in ref)  # the demo's box is stable everywhere (models/servo_axis.loop)


def test_stable_and_unstable_plants_batched_together_keep_their_verdicts_and_warnings(tmp_path, batched):
    path = tmp_path / "balance.loop"
    path.write_text(UNSTABLE_REGION)
    parsed, names, rows = plants(path, 26)
    got = evaluate_points(parsed, names, rows)
    assert sum(batched) == len(rows)
    ref = per_plant(parsed, names, rows)
    for g, r in zip(got, ref):
        assert_same(g, r)
    stable = sum(o.stable for o in ref)
    assert 3 <= stable <= len(ref) - 3  # both verdicts in the same batches
    assert any(o.breaks[0].P == 1 and o.breaks[0].stable for o in ref)
    # a plant whose extension stops at one model's budget says so, batched or not
    assert any("LW581" in o.breaks[0].warnings for o in ref)


def test_a_plant_the_engine_refuses_gets_its_own_error_and_its_batch_its_own_results(tmp_path, batched):
    path = tmp_path / "improper.loop"
    path.write_text(IMPROPER_AT_ZERO)
    parsed, names, _ = plants(path, 0)
    rows = np.array([[0.5, 2.0], [0.0, 2.0], [0.2, 1.0], [0.7, 0.0], [1.0, 3.0]])
    got = evaluate_points(parsed, names, rows)
    ref = per_plant(parsed, names, rows)
    for g, r in zip(got, ref):
        assert_same(g, r)
    assert got[1].error[0] == "LW403" and got[3].error[0] == "LW221"
    assert [o.error is None for o in got] == [True, False, True, False, True]
    # the batch of the four resolved plants was tried, then each checked alone
    assert batched == [4]


def test_plants_of_different_wirings_are_batched_apart(batched):
    parsed_a = parse_model(OTHER_WIRING, "<other>")
    parsed_b = parse_model(IMPROPER_AT_ZERO, "<improper>")
    preps = [prepare_model(resolve_parsed(parsed_a, {"K": 1.0})),
             prepare_model(resolve_parsed(parsed_b, {"a": 0.5, "Ti": 1.0})),
             SampleOutcome(error=("LW106", "kept as it is")),
             prepare_model(resolve_parsed(parsed_a, {"K": 3.0})),
             prepare_model(resolve_parsed(parsed_b, {"a": 0.9, "Ti": 2.5}))]
    got = outcomes_of_prepared(preps)
    assert got[2] == preps[2] and batched == [2, 2]  # one batch per wiring
    for g, p in zip(got, preps):
        if not isinstance(p, SampleOutcome):
            assert_same(g, outcome_of(check_model(p.model)))
    assert got[0].breaks[0].value("phase_margin") != got[3].breaks[0].value("phase_margin")


def test_the_batches_depend_on_the_number_of_plants_alone():
    for count in (1, 3, MIN_BATCH * 2, 15, BATCH, BATCH + 1, 1000):
        cut = batches(count)
        sizes = [len(c) for c in cut]
        assert np.array_equal(np.concatenate(cut), np.arange(count))  # every plant once, in order
        assert max(sizes) <= BATCH and max(sizes) - min(sizes) <= 1
        # a small round still spreads over workers, in batches of MIN_BATCH or more
        assert len(cut) >= min(SPREAD, count // MIN_BATCH) and (len(cut) == 1 or min(sizes) >= MIN_BATCH)
    assert [len(c) for c in batches(15)] == [5, 5, 5] and len(batches(1000)) == 42
    assert batches(0) == []


def _cascade_plants(n: int):
    """A nested cascade of n loops (tests/reference/loopsets.py) with a ranged gain."""
    from tests.reference.loopsets import nested_cascade

    return parse_model(nested_cascade(n).text().replace("input r", "param g = 1 in [0.9, 1.1]\ninput r", 1)
                       .replace("u = C1(e1)", "u = g*C1(e1)"), "<cascade>")


def test_plants_of_a_long_integrator_chain_are_counted_together_as_one_model_counts_them(batched, monkeypatch):
    """A cascade of 47 loops needs the middle elimination program (docs/method.md); the
    stacked component has it too, so its plants are counted together, none alone, and get
    what a check of each gives."""
    from loopwise.engine import batch

    alone = []
    real = batch.count_one
    monkeypatch.setattr(batch, "count_one", lambda *a, **k: alone.append(1) or real(*a, **k))
    parsed = _cascade_plants(47)
    rows = np.array([[0.9], [1.0], [1.1]])
    got = evaluate_points(parsed, ["g"], rows)
    assert batched and not alone  # through the stacked count, no sample recounted alone
    ref = per_plant(parsed, ["g"], rows)
    for g, r in zip(got, ref):
        assert_same(g, r)
    assert all(o.stable for o in ref) and len(ref[0].breaks) == 47


def test_a_batch_whose_solve_overflows_stops_at_once_and_each_plant_gets_its_own_refusal(monkeypatch):
    """At 53 loops the solve overflows where the outer loops act (LW406 for one model); the
    batched trace stops at the first such point rather than halving intervals until its
    budget runs out (once minutes for a few plants), and every plant gets the refusal a
    check of it alone gives."""
    from loopwise.engine import batch

    points = []
    real = batch._Stacked.terms
    monkeypatch.setattr(batch._Stacked, "terms",
                        lambda self, s, *a, **k: points.append(np.size(s)) or real(self, s, *a, **k))
    parsed = _cascade_plants(53)
    rows = np.array([[0.9], [1.0], [1.1]])
    got = evaluate_points(parsed, ["g"], rows)
    ref = per_plant(parsed, ["g"], rows)
    for g, r in zip(got, ref):
        assert_same(g, r)
    assert all(o.error is not None and o.error[0] == "LW406" for o in got)
    assert sum(points) < 20_000  # a few seed rounds, not the pooled budget of 3 x 100,000 points
