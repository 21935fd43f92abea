"""The resolved model: params, blocks, wiring terms (frozen dataclasses)."""
from __future__ import annotations

from dataclasses import dataclass, field

from ..errors import Finding, Span
from ..transfer import Transfer
from . import ast
from ..waivers import Waivers
from .requirements import Requirement

__all__ = ["Quantity", "Block", "Application", "Term", "Model", "block_words"]


@dataclass(frozen=True)
class Quantity:
    """A constant in SI units; `kind` is the unit kind of its literals, if any."""

    value: float
    kind: str | None = None


@dataclass(frozen=True, eq=False)
class Block:
    """A named block: its transfer function (exact, delays kept) and where it is defined."""

    name: str
    transfer: Transfer
    span: Span


def block_words(label: str) -> str:
    """A block application's label as messages write it: `` `C` `` for a named block, "the
    inline transfer at 4:5" for a bracketed one (its label is `[..]@4:5`)."""
    if label.startswith("[..]@"):
        return f"the inline transfer at {label[5:]}"
    return f"`{label}`"


@dataclass(frozen=True, eq=False)
class Application:
    """One use of a block (or of a bracketed transfer) in the wiring: one instance."""

    label: str  # block name, or "[..]@line:col" for an inline transfer
    transfer: Transfer
    span: Span


@dataclass(frozen=True, eq=False)
class Term:
    """``gain * app(source)``; `app` None means the plain scaled signal."""

    source: str
    gain: float
    app: Application | None
    span: Span


@dataclass(frozen=True, eq=False)
class Model:
    """A resolved model: its params, blocks, inputs and signals (hidden ones for nested
    applications included), every signal's equation as wiring terms, its breaks,
    requirements, findings and waivers, the params' ranges, and the trees of the files
    it `use`s."""

    name: str
    file: str
    params: dict[str, Quantity]
    blocks: dict[str, Block]
    inputs: dict[str, Span]
    signals: dict[str, Span]  # defined by an equation (hidden ones included)
    hidden: frozenset[str]
    equations: dict[str, tuple[Term, ...]]
    breaks: tuple[ast.BreakStmt, ...]
    requirements: tuple[Requirement, ...]
    findings: tuple[Finding, ...]
    block_uses: dict[str, int] = field(default_factory=dict)
    hidden_owner: dict[str, str] = field(default_factory=dict)  # hidden signal -> its equation
    waivers: Waivers = field(default_factory=Waivers)  # `waive` statements, then the settings'
    ranges: dict[str, tuple[float, float]] = field(default_factory=dict)  # param -> [lo, hi]
    sources: dict = field(default_factory=dict)  # `use` statement -> (path, parsed file)
