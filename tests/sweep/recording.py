"""Sweeping a model given as text, with every evaluated plant recorded for the test."""
from __future__ import annotations

from loopwise.settings import Settings
from loopwise.sweep.driver import SweepOptions, prepare_sweep, sweep_model
from loopwise.sweep.evaluate import evaluate_points


def sweep_recorded(path, samples: int, seed: int = 0, settings: Settings | None = None):
    """(SweepModelResult, run errors, [(param values, SampleOutcome), ...] of every plant
    evaluated after the nominal one)."""
    settings = settings or Settings()
    parsed, model, nominal = prepare_sweep(str(path), settings)
    plants = []

    def run_batch(parsed, names, values, fixed):
        outcomes = evaluate_points(parsed, names, values, fixed)
        plants.extend((dict(zip(names, map(float, v))), o) for v, o in zip(values, outcomes))
        return outcomes

    result, errors = sweep_model(parsed, model, nominal, dict(settings.overrides), SweepOptions(samples, seed),
                                 run_batch)
    return result, errors, plants
