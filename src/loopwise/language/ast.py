"""The model's syntax tree: frozen dataclasses, every node knows its Span."""
from __future__ import annotations

from dataclasses import dataclass

from ..errors import Span

__all__ = [
    "Expr", "Number", "Name", "BinOp", "Neg", "Power", "Call", "Inline",
    "Statement", "ModelStmt", "UseStmt", "ParamStmt", "InputStmt", "BlockStmt",
    "EquationStmt", "BreakStmt", "RequireStmt", "WaiveStmt", "ModelFile",
]


# --- expressions -----------------------------------------------------------

@dataclass(frozen=True)
class Expr:
    span: Span


@dataclass(frozen=True)
class Number(Expr):
    """A literal, already in SI units; `unit` is the suffix as written."""

    value: float
    unit: str | None
    text: str


@dataclass(frozen=True)
class Name(Expr):
    """A param, block, signal or `s` (resolved after parsing)."""

    name: str


@dataclass(frozen=True)
class BinOp(Expr):
    op: str  # + - * /
    left: Expr
    right: Expr


@dataclass(frozen=True)
class Neg(Expr):
    operand: Expr


@dataclass(frozen=True)
class Power(Expr):
    base: Expr
    exponent: Expr


@dataclass(frozen=True)
class Call(Expr):
    """`name(arg)`: `exp(-T*s)` in a transfer, a block application in a wiring."""

    func: str
    func_span: Span
    arg: Expr


@dataclass(frozen=True)
class Inline(Expr):
    """`[transfer](arg)`: an unnamed block applied in a wiring."""

    transfer: Expr
    arg: Expr


# --- statements --------------------------------------------------------------

@dataclass(frozen=True)
class Statement:
    span: Span


@dataclass(frozen=True)
class ModelStmt(Statement):
    name: str


@dataclass(frozen=True)
class UseStmt(Statement):
    path: str


@dataclass(frozen=True)
class ParamStmt(Statement):
    name: str
    value: Expr
    low: Expr | None = None
    high: Expr | None = None


@dataclass(frozen=True)
class InputStmt(Statement):
    names: tuple[tuple[str, Span], ...]


@dataclass(frozen=True)
class BlockStmt(Statement):
    name: str
    transfer: Expr


@dataclass(frozen=True)
class EquationStmt(Statement):
    """`signal = signed sum`: the wiring."""

    signal: str
    value: Expr


@dataclass(frozen=True)
class BreakStmt(Statement):
    name: str
    signal: str
    signal_span: Span
    target: str | None = None
    target_span: Span | None = None

    @property
    def at(self) -> str:
        return self.signal if self.target is None else f"{self.signal} -> {self.target}"


@dataclass(frozen=True)
class RequireStmt(Statement):
    """`require <break|*> <metric> <op> <value>`."""

    target: str  # a break name or "*"
    target_span: Span
    metric: str
    metric_span: Span
    op: str
    value: Expr


@dataclass(frozen=True)
class WaiveStmt(Statement):
    """`waive <code> [at <name>] "<reason>"`: an accepted warning or note."""

    code: str
    code_span: Span
    at: str | None
    at_span: Span | None
    reason: str | None  # None: not written (reported by the resolver)
    reason_span: Span | None


@dataclass(frozen=True)
class ModelFile:
    """One parsed file, before includes are resolved."""

    path: str
    statements: tuple[Statement, ...]
    tokens: int = 0  # what the file spent of the model's token budget
