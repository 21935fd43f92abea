"""The engine seam of a sweep: many parameter vectors in, one light record per plant out.

`evaluate_points` is the only function through which the sweep reaches the engine.
Everything above it (sampling design, local search, bisection, aggregation,
reporting) sees nothing but `SampleOutcome` records: the verdict counts and the
margin figures of every break, never the heavy response arrays, so that records
cross process and machine boundaries cheaply.

Today each point is resolved from the parsed syntax tree with the sample's param
values (`language.resolve.resolve_parsed`) and checked (`analysis.check_model`, with
the waivers the parsed model carries, exactly as `check` judges it).
A batched engine that computes L_k and the count's inputs for many parameter
vectors at once replaces the body of `evaluate_points` only; its signature and
records stay.
"""
from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["BreakSample", "SampleOutcome", "METRIC_NAMES", "evaluate_points", "outcome_of"]

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


def evaluate_points(model, names: Sequence[str], points, fixed: Mapping[str, float] | None = None
                    ) -> list[SampleOutcome]:
    """Analyse the plant at each row of `points` (values of the params `names`, in SI).

    `model` is a `language.resolve.Parsed` whose `sources` hold its includes (it needs
    no file); `fixed` are further param values (`--set`). Returns one `SampleOutcome`
    per row, in order. Never raises for a model error at one point: that point's
    outcome carries the error instead.
    """
    from ..analysis import check_model
    from ..errors import ModelError, ModelErrors
    from ..language.resolve import resolve_parsed

    fixed = dict(fixed or {})
    out = []
    for row in np.atleast_2d(np.asarray(points, float)):
        overrides = {**fixed, **{n: float(v) for n, v in zip(names, row)}}
        try:
            out.append(outcome_of(check_model(resolve_parsed(model, overrides))))
        except ModelErrors as exc:
            first = exc.errors[0]
            out.append(SampleOutcome(error=(first.code, first.message)))
        except ModelError as exc:
            out.append(SampleOutcome(error=(exc.code, exc.message)))
        except (ArithmeticError, ValueError, np.linalg.LinAlgError, RecursionError) as exc:
            if os.environ.get("LOOPWISE_DEBUG"):
                raise
            out.append(SampleOutcome(error=("LW900", f"internal error: {type(exc).__name__}: {exc}")))
    return out
