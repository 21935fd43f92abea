"""Helpers for tests, benchmarks and tools, not for checking models.

The product's entry points are `loopwise.check_file` / `check_text` / `check_paths`
and `loopwise.analysis`. What is here opens the pipeline at places the checks do not
need, so that tests can compare the engine's pieces with independent references
(python-control, numpy, analytic formulas):

* `prepare_text`: a model given as text, read and reduced, before the verdict;
* `closed_loop_poles`, `loop_state_space`: delay-free state-space forms of a prepared
  model (engine/statespace.py), to compare with a reference's poles and realisations;
* `analyse_loop`, `analyse_loops`, `nyquist_verdict`: unity negative feedback around a
  loop transfer given directly (a `loopwise.transfer.Transfer`), with no model file.

Nothing under src/loopwise imports this module.
"""
from __future__ import annotations

import numpy as np

from . import arguments as arg
from .analysis import PreparedModel, _prepare_text, check_many, check_prepared, prepare_model
from .errors import Span
from .results import BreakResult

__all__ = ["prepare_text", "closed_loop_poles", "loop_state_space", "nyquist_verdict", "analyse_loop",
           "analyse_loops"]


def prepare_text(text: str, file: str = "<text>", settings=None) -> PreparedModel:
    """A model given as text, read as `check_text` reads it (the settings' requirements,
    waivers and overrides applied), its loop graph built and its wiring reduced: everything
    but the verdict. `file` labels the locations of its errors. Raises ModelError."""
    return _prepare_text(text, file, settings)


def closed_loop_poles(prep: PreparedModel) -> np.ndarray:
    """The closed-loop poles (rad/s, complex, unordered) of a delay-free model: the
    eigenvalues of its whole state matrix, every block application realised on its own, so
    that poles an exact pole-zero cancellation hides are among them; blocks on input paths
    (outside every loop) are left out. ValueError for a model with a delay."""
    from .engine.statespace import closed_loop_poles as poles

    return poles(prep.reduction)


def loop_state_space(prep: PreparedModel, name: str) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(A, B, C, D), a real state-space realisation of the loop transfer L = -y/v at break
    `name` of a delay-free model (one input v, one output y; the states are the blocks'
    own). ValueError with a delay."""
    from .engine.statespace import loop_state_space as realise

    ss = realise(prep.reduction, name)
    return ss.A, ss.B, ss.C, ss.D


def nyquist_verdict(L, indent: str = "right"):
    """The Nyquist count of unity negative feedback around the loop transfer L (a
    `Transfer`), without margins: an `engine.stability.NyquistCount` holding P (open-loop
    RHP poles), N (clockwise encirclements of -1), Z = N + P and the loop's response.
    `indent`: the side ("right" or "left") the contour passes poles on the imaginary axis."""
    from .engine.stability import nyquist_counts

    indent = arg.check_indent(indent)
    prep = _single_loop(arg.loop_transfer(L), "loop")
    return nyquist_counts(prep.reduction, indent).counts["loop"]


def analyse_loop(L, name: str = "loop", indent: str = "right") -> BreakResult:
    """The whole check of unity negative feedback around the loop transfer L (a
    `Transfer`): the break's verdict and, when the closed loop is stable, its margins,
    as `check_text` would report a model holding that one loop, reported under `name`."""
    indent = arg.check_indent(indent)
    return check_prepared(_single_loop(arg.loop_transfer(L), arg.break_name(name)), indent).breaks[0]


def analyse_loops(Ls, indent: str = "right") -> list[BreakResult]:
    """`analyse_loop` for many loop transfers at once, in their order: one batched count
    and one batched refinement of every margin (engine/batch.py)."""
    return [r.breaks[0] for r in check_many([_single_loop(L, "loop") for L in Ls], indent)]


def _single_loop(L, name: str) -> PreparedModel:
    from .language import ast
    from .language.resolve import Application, Block, Model, Term

    span = Span("<loop>", 1, 1)
    app = Application("L", L, span)
    model = Model(
        name=name, file="<loop>", params={}, blocks={"L": Block("L", L, span)}, inputs={"r": span},
        signals={"e": span, "y": span}, hidden=frozenset(),
        equations={"e": (Term("r", 1.0, None, span), Term("y", -1.0, None, span)), "y": (Term("e", 1.0, app, span),)},
        breaks=(ast.BreakStmt(span, name, "y", span),), requirements=(), findings=(),
    )
    return prepare_model(model)
