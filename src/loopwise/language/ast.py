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
    """An expression; every node knows where it stands in the file."""

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
    """`left op right` for `+`, `-`, `*` and `/`."""

    op: str  # + - * /
    left: Expr
    right: Expr


@dataclass(frozen=True)
class Neg(Expr):
    """`-operand`."""

    operand: Expr


@dataclass(frozen=True)
class Power(Expr):
    """`base ^ exponent` (the exponent a constant whole number, checked later)."""

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
    """A statement of a `.loop` file; `span` is where it starts."""

    span: Span


@dataclass(frozen=True)
class ModelStmt(Statement):
    """`model <name>`: the model's name (first statement, once)."""

    name: str


@dataclass(frozen=True)
class UseStmt(Statement):
    """`use "<path>"`: bring in the params and blocks of another file."""

    path: str


@dataclass(frozen=True)
class ParamStmt(Statement):
    """`param <name> = <value>`, optionally `in [<low>, <high>]` (the range a sweep samples)."""

    name: str
    value: Expr
    low: Expr | None = None
    high: Expr | None = None


@dataclass(frozen=True)
class InputStmt(Statement):
    """`input a, b`: signals driven from outside, each with its place."""

    names: tuple[tuple[str, Span], ...]


@dataclass(frozen=True)
class BlockStmt(Statement):
    """`block <name> = <transfer>`: a named transfer function."""

    name: str
    transfer: Expr


@dataclass(frozen=True)
class EquationStmt(Statement):
    """`signal = signed sum`: the wiring."""

    signal: str
    value: Expr


@dataclass(frozen=True)
class BreakStmt(Statement):
    """`break <name> at <signal>` (every use of the signal cut) or `at <signal> -> <target>`
    (only the wire into the target's equation)."""

    name: str
    signal: str
    signal_span: Span
    target: str | None = None
    target_span: Span | None = None

    @property
    def at(self) -> str:
        """Where the break cuts, as written: `y` or `y -> e`."""
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
