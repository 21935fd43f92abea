"""The JSON report: exactly `RunResult.to_dict()` (the contract in docs/results.md,
the schema in docs/results.schema.json), with keys in the contract's order."""
from __future__ import annotations

from .escape import json_dumps

__all__ = ["render"]


def render(run) -> str:
    """A check's results as indented JSON: exactly `RunResult.to_dict()` (docs/results.md)."""
    # json_dumps refuses nan: to_dict already maps inf/nan to null, and a slip must
    # fail loudly here rather than write JSON that strict parsers reject
    return json_dumps(run.to_dict())
