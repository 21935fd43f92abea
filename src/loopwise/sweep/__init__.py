"""Sweeps over uncertain params (`param x = v in [lo, hi]`): is every loop stable, with its
margins, for every plant in the box, and where is it worst?

One module per step: `design` (which points first), `evaluate` (the engine seam: many
parameter vectors in, light per-break records out), `search` (local search for the worst
margins, bisection for stability boundaries), `aggregate` (worst values and requirements),
`results` (frozen results, the JSON contract), `execute` (local processes or a Dask
cluster), `driver` (one model, many models) and `band` (the plants the HTML report
draws around the nominal curve). The submodules load on first use, so that
`loopwise sweep --help` stays light.
"""
from __future__ import annotations

import importlib

__all__ = ["DEFAULT_SAMPLES", "SweepOptions", "sweep_file", "sweep_files", "sweep_model", "sweep_paths", "BreakSample",
           "SampleOutcome", "evaluate_points", "SweepModelResult", "SweepRun"]

#: the space-filling set's default size (`--samples`)
DEFAULT_SAMPLES = 300

_WHERE = {"SweepOptions": "driver", "sweep_file": "driver", "sweep_model": "driver", "sweep_paths": "driver", "sweep_files": "driver",
          "BreakSample": "evaluate", "SampleOutcome": "evaluate", "evaluate_points": "evaluate",
          "SweepModelResult": "results", "SweepRun": "results"}


def __getattr__(name: str):
    if name in _WHERE:
        return getattr(importlib.import_module(f"{__name__}.{_WHERE[name]}"), name)
    raise AttributeError(name)
