"""Plants for the report's Nyquist band: a few analysed plants checked again in full,
with their responses, so that their curves can be drawn around the nominal one. They
resolve from the parsed model the sweep kept (`SweepModelResult.parsed`): nothing is
read or parsed again, and the nominal point is the sweep's own (`.nominal`).

Only the report needs this (in the parent process, after the sweep): the sweep itself
never moves response arrays (see evaluate.py).
"""
from __future__ import annotations

import numpy as np

from .results import SweepModelResult

__all__ = ["BAND_PLANTS", "band_points", "band_results"]

#: at most this many plants in a band (each is one full check)
BAND_PLANTS = 16


def band_points(result: SweepModelResult, limit: int = BAND_PLANTS) -> np.ndarray:
    """Param values of the band's plants: the worst plant of every margin of every break
    first, then the corners, then the space-filling set in order; no repeats."""
    table = result.plants
    if table is None or not table.names:
        return np.zeros((0, 0))
    chosen: list[int] = []
    index = {tuple(row): i for i, row in enumerate(table.values)}
    for b in result.breaks:
        for _, w in b.worst:
            if w.at is not None:
                i = index.get(tuple(v for _, v in w.at))
                if i is not None and i not in chosen:
                    chosen.append(i)
    for phase in ("corners", "space_filling"):
        chosen += [i for i, p in enumerate(table.phases) if p == phase and i not in chosen]
    return table.values[chosen[:limit]]


def band_results(result: SweepModelResult, limit: int = BAND_PLANTS) -> list:
    """Full `ModelResult`s (with responses) of the band's plants; plants that cannot be
    analysed are left out. The plants resolve from the parsed model the sweep kept
    (`result.parsed`, its includes' trees with it), with the sweep's `--set` values: the
    model is neither read nor parsed again, and its nominal point (`result.nominal`) is
    not checked again."""
    from ..analysis import check_model
    from ..errors import LoopwiseError
    from ..language.resolve import resolve_parsed

    fixed = dict(result.fixed)
    out = []
    for row in band_points(result, limit):
        overrides = {**fixed, **dict(zip(result.plants.names, map(float, row)))}
        try:
            out.append(check_model(resolve_parsed(result.parsed, overrides)))
        except LoopwiseError:
            continue
    return out
