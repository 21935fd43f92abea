"""loopwise: stability checks for multi-loop feedback-control models.

Library use::

    import loopwise
    result = loopwise.check_file("models/servo_axis.loop")
    for brk in result.breaks:
        print(brk.name, brk.stable, brk.margins.phase_margin_deg if brk.margins else None)

A model that cannot be read, for a mistake in its syntax or its meaning, raises
`loopwise.ModelError`, whose `errors` list every located error.

The heavy modules are imported on first use, so `loopwise --help` starts fast.
"""
from __future__ import annotations

from .errors import ModelError, ModelErrors  # light: the standard library only

__version__ = "0.1.0"
__all__ = ["check_file", "check_text", "ModelError", "ModelErrors", "__version__"]


def __getattr__(name: str):
    if name in ("check_file", "check_text"):
        from . import analysis

        return getattr(analysis, name)
    raise AttributeError(f"module 'loopwise' has no attribute {name!r}")
