"""loopwise: stability checks for multi-loop feedback-control models.

Library use::

    import loopwise
    result = loopwise.check_file("models/servo_axis.loop")
    for brk in result.breaks:
        print(brk.name, brk.stable, brk.margins.phase_margin_deg if brk.margins else None)

A model that cannot be read, for a mistake in its syntax or its meaning, raises
`loopwise.ModelError`, whose `errors` list every located error.

Helpers that only tests, benchmarks and tools need (one loop transfer checked
without a model file, a model prepared from text, state-space forms) are in
`loopwise.testing`, outside this API.

The heavy modules are imported on first use, so `loopwise --help` starts fast;
type checkers see every name below through the ``TYPE_CHECKING`` imports.
"""
from __future__ import annotations

from typing import TYPE_CHECKING

__version__ = "0.1.0"

#: public name -> the module that defines it (imported when the name is first used)
_EXPORTS = {
    "check_file": "analysis",
    "check_text": "analysis",
    "check_paths": "run",
    "ModelError": "errors",
    "ModelErrors": "errors",
    "LoopwiseError": "errors",
    "Finding": "errors",
    "Span": "errors",
    "RunResult": "results",
    "ModelResult": "results",
    "BreakResult": "results",
    "Margins": "results",
    "GainCrossover": "results",
    "PhaseCrossover": "results",
    "DiskMargin": "results",
    "Peak": "results",
    "RequirementResult": "results",
    "LoopResponse": "results",
    "Settings": "settings",
}

__all__ = ["__version__", *_EXPORTS]

if TYPE_CHECKING:  # pragma: no cover - for type checkers and editors only
    from .analysis import check_file, check_text
    from .errors import Finding, LoopwiseError, ModelError, ModelErrors, Span
    from .results import (BreakResult, DiskMargin, GainCrossover, LoopResponse, Margins, ModelResult,
                          Peak, PhaseCrossover, RequirementResult, RunResult)
    from .run import check_paths
    from .settings import Settings


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'loopwise' has no attribute {name!r}")
    from importlib import import_module

    value = getattr(import_module(f".{module}", __name__), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
