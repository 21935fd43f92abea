"""The engine seam of a sweep: many parameter vectors in, one light record per plant out.

`evaluate_points` is the only function through which the sweep reaches the engine.
Everything above it (sampling design, local search, bisection, aggregation,
reporting) sees nothing but `SampleOutcome` records: the verdict counts and the
margin figures of every break, never the heavy response arrays, so that records
cross process and machine boundaries cheaply.

A sweep is not a loop of whole checks. The points are cut into batches of at most
`BATCH` plants (`batches`; the cut depends on the number of points only, so a plant
shares its batch with the same plants on one process, many or a cluster, and its
figures do not depend on where it was computed). In a batch each plant is resolved
from the parsed syntax tree with its param values (`language.resolve.resolve_parsed`,
no parser, no disk) and its wiring reduced; the plants of one wiring are then counted
and their margins refined together by the batched engine (`analysis.check_many`,
engine/batch.py), each judged as `check` judges it, with the waivers the parsed model
carries. A plant whose wiring no other plant of its batch shares, or a batch in which
some plant cannot be analysed, is checked plant by plant (`analysis.check_prepared`),
so that every plant gets exactly the verdict or the located error that `check` gives it.
"""
from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["BreakSample", "SampleOutcome", "METRIC_NAMES", "BATCH", "SPREAD", "MIN_BATCH", "batches", "evaluate_points",
           "outcomes_of_prepared", "outcome_of"]

#: requirement metrics recorded per break (the names of `language.requirements.METRICS`)
METRIC_NAMES = ("phase_margin", "gain_margin", "gain_margin_up", "gain_margin_down", "delay_margin",
                "disk_margin", "disk_gain", "disk_phase", "sensitivity_peak", "complementary_peak",
                "crossover", "separation")


@dataclass(frozen=True)
class BreakSample:
    """One break of one plant: the Nyquist count and every requirement metric's value.

    `values[i]` is `judge.metric_value(METRIC_NAMES[i], ...)`: the metric in its own
    unit (math.inf for unbounded; None when absent, with `notes[i]` saying why);
    all None when the closed loop is not stable (margins are not claimed then).
    """

    stable: bool
    marginal: bool
    P: int
    N: int
    Z: int
    values: tuple[float | None, ...]
    notes: tuple[str | None, ...]
    warnings: tuple[str, ...] = ()  # codes of the break's warnings that count (not waived) at this plant

    def value(self, metric: str) -> float | None:
        """The metric's value at this plant (`judge.metric_value`'s unit; None: absent)."""
        return self.values[METRIC_NAMES.index(metric)]

    def note(self, metric: str) -> str | None:
        """Why the metric has no value at this plant (None when it has one)."""
        return self.notes[METRIC_NAMES.index(metric)]


@dataclass(frozen=True)
class SampleOutcome:
    """One plant: its breaks in model order, or the error that stopped its analysis."""

    breaks: tuple[BreakSample, ...] = ()
    error: tuple[str, str] | None = None  # (code, message)
    warnings: tuple[str, ...] = ()        # codes of model-level warnings that count at this plant

    @property
    def stable(self) -> bool:
        """Whether the plant was analysed and every break's closed loop is stable."""
        return self.error is None and all(b.stable for b in self.breaks)


def outcome_of(result) -> SampleOutcome:
    """The light record of a `results.ModelResult`."""
    from ..judge import metric_value

    breaks = []
    for b in result.breaks:
        if b.margins is None:
            values, notes = (None,) * len(METRIC_NAMES), (None,) * len(METRIC_NAMES)
        else:
            pairs = [metric_value(name, b.margins, b.separation) for name in METRIC_NAMES]
            values = tuple(None if v is None else float(v) for v, _ in pairs)
            notes = tuple(n for _, n in pairs)
        breaks.append(BreakSample(bool(b.stable), bool(b.marginal), int(b.open_loop_rhp_poles),
                                  int(b.encirclements), int(b.closed_loop_rhp_poles), values, notes,
                                  tuple(w.code for w in b.open_warnings)))
    # a waived warning does not count, as in `check` (`Finding.counts`)
    return SampleOutcome(tuple(breaks), None, tuple(f.code for f in result.findings if f.counts))


#: plants counted and refined together by the batched engine at most: about where the
#: saving per plant stops growing (bench/sweep.py: the servo demo, 8 to 96 a batch)
BATCH = 24
#: a small round (the corners, a round of the local search or of the bisection) is still
#: cut into up to SPREAD batches of at least MIN_BATCH plants, so that it keeps several
#: workers busy
SPREAD, MIN_BATCH = 4, 4


def batches(count: int) -> list[np.ndarray]:
    """The indices of `count` points cut into batches of at most BATCH, as even as can be
    (see SPREAD). The cut depends on `count` alone, never on the number of workers:
    `execute.py` hands each batch to a worker whole."""
    if count <= 0:
        return []
    return np.array_split(np.arange(count), max(-(-count // BATCH), min(SPREAD, count // MIN_BATCH), 1))


def evaluate_points(model, names: Sequence[str], points, fixed: Mapping[str, float] | None = None
                    ) -> list[SampleOutcome]:
    """Analyse the plant at each row of `points` (values of the params `names`, in SI).

    `model` is a `language.resolve.Parsed` whose `sources` hold its includes (it needs
    no file); `fixed` are further param values (`--set`). Returns one `SampleOutcome`
    per row, in order. Never raises for a model error at one point: that point's
    outcome carries the error instead.
    """
    from ..analysis import prepare_model
    from ..language.resolve import resolve_parsed

    fixed = dict(fixed or {})
    rows = np.atleast_2d(np.asarray(points, float))
    out: list[SampleOutcome] = []
    for idx in batches(len(rows)):
        preps: list = []
        for row in rows[idx]:
            overrides = {**fixed, **{n: float(v) for n, v in zip(names, row)}}
            preps.append(_guarded(lambda: prepare_model(resolve_parsed(model, overrides))))
        out.extend(outcomes_of_prepared(preps))
    return out


def outcomes_of_prepared(preps: Sequence) -> list[SampleOutcome]:
    """The records of prepared models (`analysis.PreparedModel`; a `SampleOutcome` in the
    list, the error of a plant that could not be prepared, passes through): those of one
    wiring checked together (`analysis.check_many`), the others one by one."""
    from ..analysis import PreparedModel
    from ..engine.batch import wiring

    out: list[SampleOutcome | None] = [p if isinstance(p, SampleOutcome) else None for p in preps]
    groups: dict[tuple, list[int]] = {}
    for i, p in enumerate(preps):
        if isinstance(p, PreparedModel):
            groups.setdefault(wiring(p.reduction), []).append(i)
    for members in groups.values():
        together = None
        if len(members) > 1:
            together = _guarded(lambda: _checked_together([preps[i] for i in members]), debug=False)
        if isinstance(together, list):
            for i, o in zip(members, together):
                out[i] = o
            continue
        # alone, or a plant of the batch could not be analysed: each plant as `check` does it,
        # so that each gets its own verdict or its own located error
        for i in members:
            out[i] = _guarded(lambda: _checked_together([preps[i]], alone=True)[0])
    return out


def _checked_together(preps: list, alone: bool = False) -> list[SampleOutcome]:
    from ..analysis import check_many, check_prepared
    from ..waivers import apply_waivers

    # a record holds no stabilising gain ranges: the batch does not search them
    # the records hold margin values, never responses or crossover lists: the margins' extension
    # may stop short where that settles every value (check_many's `short`)
    results = [check_prepared(preps[0])] if alone else check_many(preps, stabilising_gains=False, short=True)
    # the waivers mark the findings as `check` marks them (`analysis.check_model`)
    return [outcome_of(apply_waivers(r, p.model.waivers)) for r, p in zip(results, preps)]


def _guarded(work, debug: bool = True):
    """work(), or the SampleOutcome of the model error (or the internal error) it raised;
    with LOOPWISE_DEBUG set an internal error is raised instead (unless not `debug`)."""
    from ..errors import ModelError, ModelErrors

    try:
        return work()
    except ModelErrors as exc:
        first = exc.errors[0]
        return SampleOutcome(error=(first.code, first.message))
    except ModelError as exc:
        return SampleOutcome(error=(exc.code, exc.message))
    except (ArithmeticError, ValueError, np.linalg.LinAlgError, RecursionError) as exc:
        if debug and os.environ.get("LOOPWISE_DEBUG"):
            raise
        return SampleOutcome(error=("LW900", f"internal error: {type(exc).__name__}: {exc}"))
