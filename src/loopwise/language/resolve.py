"""Syntax tree -> a resolved model: includes read, names checked, params and
blocks evaluated, every signal equation turned into a list of wiring terms.

A wiring term is ``gain * application(source)``: one block (or bracketed transfer)
applied to one signal, or a plain scaled signal. Nested applications and
applications to sums get a hidden signal for their argument, so that every
block application is one instance with its own states — which is what makes
the closed-loop characteristic function ``prod(den_b) * det(I - A)`` right.
"""
from __future__ import annotations

import difflib
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import Finding, ModelError, ModelErrors, Span
from ..transfer import Transfer, TransferError
from . import ast
from .parse import parse_text
from .requirements import Requirement, make_requirement

__all__ = ["Quantity", "Block", "Application", "Term", "Model", "resolve_text", "resolve_file"]

RESERVED = {"s", "exp", "model", "use", "param", "input", "block", "break", "require", "at", "in"}


@dataclass(frozen=True)
class Quantity:
    """A constant in SI units; `kind` is the unit kind of its literals, if any."""

    value: float
    kind: str | None = None


@dataclass(frozen=True, eq=False)
class Block:
    name: str
    transfer: Transfer
    span: Span


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


def _close(name: str, options) -> str | None:
    match = difflib.get_close_matches(name, list(options), n=1, cutoff=0.6)
    return f"did you mean `{match[0]}`?" if match else None


class _Resolver:
    def __init__(self, file: str):
        self.file = file
        self.errors: list[ModelError] = []
        self.findings: list[Finding] = []
        self.params: dict[str, Quantity] = {}
        self.param_spans: dict[str, Span] = {}
        self.block_stmts: dict[str, ast.BlockStmt] = {}
        self.blocks: dict[str, Block] = {}
        self.inputs: dict[str, Span] = {}
        self.eq_stmts: dict[str, ast.EquationStmt] = {}
        self.breaks: list[ast.BreakStmt] = []
        self.requires: list[ast.RequireStmt] = []
        self.model_name: str | None = None
        self.names: dict[str, tuple[str, Span]] = {}  # name -> (what, where)
        self.equations: dict[str, tuple[Term, ...]] = {}
        self.hidden: dict[str, Span] = {}
        self.block_uses: dict[str, int] = {}
        self.all_params: set[str] = set()
        self.hidden_owner: dict[str, str] = {}
        self.owner = ""

    # --- collecting statements (includes first, in place) ----------------------
    def declare(self, name: str, what: str, span: Span) -> bool:
        if name in RESERVED:
            self.errors.append(ModelError("E201", f"`{name}` is a reserved word and cannot name {'an' if what[0] in 'aeiou' else 'a'} {what}",
                                          span, "choose another name"))
            return False
        if name in self.names:
            prev_what, prev = self.names[name]
            self.errors.append(ModelError(
                "E202", f"`{name}` is defined twice (first as a {prev_what} at {prev})", span,
                "every name (param, block, signal, input) is defined exactly once"))
            return False
        self.names[name] = (what, span)
        return True

    def collect(self, mf: ast.ModelFile, include_stack: tuple[Path, ...], top: bool) -> None:
        for i, stmt in enumerate(mf.statements):
            if isinstance(stmt, ast.ModelStmt):
                if not top:
                    continue  # an included file's own name does not rename the model
                if i != 0 or self.model_name is not None:
                    self.errors.append(ModelError("E203", "`model` must be the first statement, once",
                                                  stmt.span, "move it to the top of the file"))
                else:
                    self.model_name = stmt.name
            elif isinstance(stmt, ast.UseStmt):
                self.include(stmt, include_stack)
            elif isinstance(stmt, ast.ParamStmt):
                if self.declare(stmt.name, "param", stmt.span):
                    self.param_spans[stmt.name] = stmt.span
                    self.eval_param(stmt)
            elif isinstance(stmt, ast.BlockStmt):
                if self.declare(stmt.name, "block", stmt.span):
                    self.block_stmts[stmt.name] = stmt
            elif not top:
                self.errors.append(ModelError(
                    "E204", "an included file may hold only `param`, `block` and `use` statements",
                    stmt.span, "keep signals, breaks and requirements in the model that uses it"))
            elif isinstance(stmt, ast.InputStmt):
                for name, span in stmt.names:
                    if self.declare(name, "input", span):
                        self.inputs[name] = span
            elif isinstance(stmt, ast.EquationStmt):
                if stmt.signal in self.inputs:
                    self.errors.append(ModelError(
                        "E202", f"`{stmt.signal}` is an input and cannot also have an equation", stmt.span,
                        "an input is driven from outside; remove it from `input` or drop the equation"))
                elif self.declare(stmt.signal, "signal", stmt.span):
                    self.eq_stmts[stmt.signal] = stmt
            elif isinstance(stmt, ast.BreakStmt):
                self.breaks.append(stmt)
            elif isinstance(stmt, ast.RequireStmt):
                self.requires.append(stmt)

    def include(self, stmt: ast.UseStmt, stack: tuple[Path, ...]) -> None:
        base = stack[-1].parent if stack else Path.cwd()
        path = (base / stmt.path).resolve()
        if path in stack:
            chain = " -> ".join(p.name for p in (*stack[stack.index(path):], path))
            self.errors.append(ModelError("E205", f"include cycle: {chain}", stmt.span,
                                          "a file may not use itself, directly or through others"))
            return
        try:
            text = path.read_text(encoding="utf-8", errors="replace")
        except FileNotFoundError:
            self.errors.append(ModelError("E206", f"included file not found: {stmt.path}", stmt.span,
                                          f"the path is relative to this file's folder ({base})"))
            return
        except OSError as exc:
            self.errors.append(ModelError("E206", f"cannot read included file {stmt.path}: {exc.strerror}",
                                          stmt.span, None))
            return
        try:
            mf = parse_text(text, str(path))
        except ModelError as exc:
            self.errors.append(exc)
            return
        self.collect(mf, (*stack, path), top=False)

    # --- expressions --------------------------------------------------------------
    def const(self, expr: ast.Expr, what: str) -> Quantity:
        value = self.evaluate(expr, "const")
        if not isinstance(value, Quantity):
            raise ModelError("E210", f"{what} must be a constant", expr.span,
                             "use numbers and params only here (no `s`, no signals)")
        if not math.isfinite(value.value) or abs(value.value) > 1e300:
            raise ModelError("E106", f"{what} is not a finite number", expr.span,
                             "check for overflow or a division by zero")
        return value

    def evaluate(self, expr: ast.Expr, mode: str):
        """mode: 'const' (numbers, params), 'transfer' (+ s, exp), 'wiring' (+ signals, blocks)."""
        return _Evaluator(self, mode).run(expr)

    def eval_param(self, stmt: ast.ParamStmt) -> None:
        try:
            q = self.const(stmt.value, f"param `{stmt.name}`")
            if stmt.low is not None:
                lo = self.const(stmt.low, "the range's low end").value
                hi = self.const(stmt.high, "the range's high end").value
                if not lo <= q.value <= hi:
                    raise ModelError("E211", f"param `{stmt.name}` = {q.value:g} lies outside its range "
                                     f"[{lo:g}, {hi:g}]", stmt.value.span,
                                     "the nominal value must lie within its uncertainty range")
            self.params[stmt.name] = q
        except ModelError as exc:
            self.errors.append(exc)

    def eval_block(self, stmt: ast.BlockStmt) -> None:
        try:
            value = self.evaluate(stmt.transfer, "transfer")
            tf = value if isinstance(value, Transfer) else Transfer.constant(value.value)
            self.blocks[stmt.name] = Block(stmt.name, self.checked_transfer(tf, f"block `{stmt.name}`",
                                                                            stmt.transfer.span), stmt.span)
        except ModelError as exc:
            self.errors.append(exc)

    def checked_transfer(self, tf: Transfer, what: str, span: Span) -> Transfer:
        tf, cancelled = tf.minimal()
        for p in cancelled:
            if p.real >= 0:
                self.findings.append(Finding(
                    "warning", "W201", f"{what} cancels a pole at {p:.4g} with a zero: the unstable "
                    "mode is dropped from the block", span,
                    "an exact cancellation of an unstable pole hides that mode; model it explicitly"))
        if tf.is_zero:
            return tf
        if not tf.is_proper:
            raise ModelError("E220", f"{what} is improper ({tf.zeros.size} zeros, {tf.poles.size} poles): "
                             "its gain grows without bound at high frequency", span,
                             "add filter poles, e.g. Kd*s/(Tf*s + 1) instead of Kd*s")
        if not (math.isfinite(tf.gain) and np.all(np.isfinite(tf.poles)) and np.all(np.isfinite(tf.zeros))):
            raise ModelError("E106", f"{what} has non-finite coefficients", span,
                             "check for overflow or division by zero in its parameters")
        return tf

    # --- the pass ---------------------------------------------------------------
    def resolve(self, mf: ast.ModelFile, path: Path | None, extra_requirements=()) -> Model:
        self.all_params = {st.name for st in mf.statements if isinstance(st, ast.ParamStmt)}
        self.collect(mf, (path,) if path else (), top=True)
        for stmt in self.block_stmts.values():
            self.eval_block(stmt)
        for name, stmt in self.eq_stmts.items():
            self.owner = name
            try:
                terms = self.evaluate(stmt.value, "wiring")
                self.equations[name] = tuple(self.as_terms(terms, stmt.value.span))
            except ModelError as exc:
                self.errors.append(exc)
        for name in self.block_stmts:
            if self.eq_stmts and name in self.blocks and self.block_uses.get(name, 0) == 0:
                self.findings.append(Finding("warning", "W202", f"block `{name}` is never used",
                                             self.block_stmts[name].span, "apply it in a signal equation or remove it"))
        if not self.eq_stmts and not self.errors and not (self.block_stmts or self.param_spans):
            self.errors.append(ModelError("E230", "the model has no signal equations",
                                          Span(self.file, 1, 1), "wire blocks with lines like `y = G(e)`"))
        if not self.eq_stmts and (self.block_stmts or self.param_spans) and (self.breaks or self.requires):
            self.errors.append(ModelError("E230", "the model has breaks or requirements but no signal equations",
                                          Span(self.file, 1, 1), "wire blocks with lines like `y = G(e)`"))
        requirements = []
        for stmt in (*self.requires, *extra_requirements):
            try:
                requirements.append(make_requirement(stmt, self.const))
            except ModelError as exc:
                self.errors.append(exc)
        if self.errors:
            raise ModelErrors(list(self.errors))  # in the order found: causes before follow-ups
        signals = {n: s.span for n, s in self.eq_stmts.items()}
        signals.update(self.hidden)
        return Model(
            name=self.model_name or Path(self.file).stem, file=self.file, params=dict(self.params),
            blocks=dict(self.blocks), inputs=dict(self.inputs), signals=signals,
            hidden=frozenset(self.hidden), equations=dict(self.equations), breaks=tuple(self.breaks),
            requirements=tuple(requirements), findings=tuple(self.findings),
            block_uses=dict(self.block_uses), hidden_owner=dict(self.hidden_owner),
        )

    def as_terms(self, value, span: Span) -> list[Term]:
        if isinstance(value, list):
            return value
        if isinstance(value, Quantity):
            raise ModelError("E212", "a signal equation needs at least one signal on the right",
                             span, "a constant alone does not take part in a linear model")
        raise ModelError("E213", "a transfer function must be applied to a signal in a wiring",
                         span, "write it in brackets applied to a signal: `[G](x)`, or name it with `block`")

    def hidden_signal(self, terms: list[Term], span: Span, label: str) -> str:
        name = f"{label}@{span.line}:{span.col}"
        while name in self.hidden or name in self.names:
            name += "'"
        self.hidden[name] = span
        self.hidden_owner[name] = self.owner
        self.equations[name] = tuple(terms)
        return name


class _Evaluator:
    """Evaluates one expression; kept separate so each mode's rules stay in one place."""

    def __init__(self, r: _Resolver, mode: str):
        self.r = r
        self.mode = mode

    def run(self, expr):
        return self.ev(expr)

    def ev(self, e):
        method = getattr(self, "ev_" + type(e).__name__)
        return method(e)

    def ev_Number(self, e: ast.Number):
        from .units import unit_kind
        return Quantity(e.value, unit_kind(e.unit))

    def ev_Name(self, e: ast.Name):
        r = self.r
        if e.name == "s":
            if self.mode == "transfer":
                return Transfer.laplace()
            where = "a constant" if self.mode == "const" else "a signal sum"
            raise ModelError("E214", f"the Laplace variable `s` cannot appear in {where}", e.span,
                             "`s` belongs in a block's transfer or in a bracketed transfer `[..](x)`")
        if e.name in r.params:
            return r.params[e.name]
        if e.name in r.eq_stmts or e.name in r.inputs:
            if self.mode == "wiring":
                return [Term(e.name, 1.0, None, e.span)]
            raise ModelError("E215", f"signal `{e.name}` cannot appear in a transfer or constant", e.span,
                             "signals belong in signal equations")
        if e.name in r.block_stmts:
            raise ModelError("E216", f"block `{e.name}` is used as a value", e.span,
                             f"apply it to a signal: `{e.name}(x)`")
        if e.name in r.param_spans:  # declared, but its own definition failed
            raise ModelError("E217", f"param `{e.name}` could not be evaluated (see its error)", e.span,
                             "fix the error reported at its definition first")
        if e.name in r.all_params:
            raise ModelError("E217", f"param `{e.name}` is used before it is defined", e.span,
                             "params may only use params defined above them")
        known = list(r.params) + (list(r.eq_stmts) + list(r.inputs) if self.mode == "wiring" else [])
        what = "signal or param" if self.mode == "wiring" else "param"
        fallback = (f"define it: `{e.name} = ...` for a signal, `input {e.name}` for an input, "
                    f"or `param {e.name} = ...`") if self.mode == "wiring" else \
            f"define it above with `param {e.name} = ...`"
        raise ModelError("E218", f"unknown {what} `{e.name}`", e.span, _close(e.name, known + ["s"]) or fallback)

    def binary(self, op: str, a, b, span: Span):
        if isinstance(a, Quantity) and isinstance(b, Quantity):
            kind = a.kind if a.kind == b.kind or b.kind is None else (b.kind if a.kind is None else None)
            if op == "/" and b.value == 0:
                raise ModelError("E219", "division by zero", span, "check the params in the divisor")
            v = {"+": a.value + b.value, "-": a.value - b.value, "*": a.value * b.value,
                 "/": a.value / b.value if op == "/" else 0.0}[op]
            if op in "*/" and a.kind and b.kind:
                kind = None
            return Quantity(v, kind)
        if isinstance(a, list) or isinstance(b, list):
            return self.wiring_binary(op, a, b, span)
        ta = a if isinstance(a, Transfer) else Transfer.constant(a.value)
        tb = b if isinstance(b, Transfer) else Transfer.constant(b.value)
        try:
            return {"+": ta.__add__, "-": ta.__sub__, "*": ta.__mul__, "/": ta.__truediv__}[op](tb)
        except (TransferError, ZeroDivisionError) as exc:
            raise ModelError("E221", str(exc), span,
                             "give each delayed path its own block and add the signals in a wiring"
                             if "delay" in str(exc) else None) from None

    def wiring_binary(self, op: str, a, b, span: Span):
        if isinstance(a, Transfer) or isinstance(b, Transfer):
            raise ModelError("E213", "a transfer function must be applied to a signal in a wiring", span,
                             "write `[G](x)` (brackets around the transfer) or name it with `block`")
        if op in "+-":
            if isinstance(a, Quantity) or isinstance(b, Quantity):
                const = a if isinstance(a, Quantity) else b
                self.r.findings.append(Finding("note", "N201", f"a constant offset ({const.value:g}) in a "
                                               "signal sum does not affect linear stability and is ignored",
                                               span, None))
                terms = a if isinstance(a, list) else []
                others = b if isinstance(b, list) else []
                sign = -1.0 if op == "-" else 1.0
                return [*terms, *[_scale(t, sign) for t in others]]
            sign = -1.0 if op == "-" else 1.0
            return [*a, *[_scale(t, sign) for t in b]]
        if op == "*":
            if isinstance(a, list) and isinstance(b, list):
                raise ModelError("E222", "a product of two signals is not linear", span,
                                 "scale a signal by a constant or apply a block to it")
            terms, k = (a, b) if isinstance(a, list) else (b, a)
            return [_scale(t, k.value) for t in terms]
        if isinstance(b, list):
            raise ModelError("E222", "dividing by a signal is not linear", span,
                             "divide a signal by a constant, or apply a block")
        if b.value == 0:
            raise ModelError("E219", "division by zero", span, "check the params in the divisor")
        return [_scale(t, 1.0 / b.value) for t in a]

    def ev_BinOp(self, e: ast.BinOp):
        return self.binary(e.op, self.ev(e.left), self.ev(e.right), e.span)

    def ev_Neg(self, e: ast.Neg):
        v = self.ev(e.operand)
        if isinstance(v, Quantity):
            return Quantity(-v.value, v.kind)
        if isinstance(v, list):
            return [_scale(t, -1.0) for t in v]
        return -v

    def ev_Power(self, e: ast.Power):
        base = self.ev(e.base)
        exp_value = self.ev(e.exponent)
        if not isinstance(exp_value, Quantity):
            raise ModelError("E223", "an exponent must be a constant", e.exponent.span, "write s^2 or wn^2")
        if isinstance(base, list):
            raise ModelError("E222", "a power of a signal is not linear", e.span,
                             "apply a block to the signal instead")
        if isinstance(base, Quantity):
            # constants may take any real power (sqrt as ^0.5); transfers only whole ones
            if base.value < 0 and exp_value.value != round(exp_value.value):
                raise ModelError("E223", "a negative number to a fractional power is not real",
                                 e.span, "use a positive base or a whole exponent")
            try:
                v = float(base.value) ** float(exp_value.value)
            except (ZeroDivisionError, OverflowError):
                raise ModelError("E219", "the power has no finite value", e.span,
                                 "check the base and the exponent") from None
            return Quantity(v, base.kind if exp_value.value == 1 else None)
        if exp_value.value != round(exp_value.value) or abs(exp_value.value) > 64:
            raise ModelError("E223", "powers of a transfer must be whole numbers (at most 64)",
                             e.exponent.span, "write s^2, (s+1)^3 or (T*s+1)^-1")
        try:
            return base ** int(exp_value.value)
        except TransferError as exc:
            raise ModelError("E221", str(exc), e.span, "simplify the transfer expression") from None

    def ev_Call(self, e: ast.Call):
        r = self.r
        if e.func == "exp":
            if self.mode != "transfer":
                raise ModelError("E224", "`exp` is only for pure delays inside a transfer", e.func_span,
                                 "write the delay in a block: `block D = exp(-T*s)`")
            arg = self.ev(e.arg)
            return _delay(arg, e)
        if self.mode != "wiring":
            if e.func in r.block_stmts:
                raise ModelError("E225", f"block `{e.func}` cannot be applied inside a transfer", e.func_span,
                                 "apply blocks to signals in signal equations")
            raise ModelError("E226", f"unknown function `{e.func}`", e.func_span,
                             "the only function is exp(-T*s) for a pure delay")
        if e.func not in r.block_stmts:
            raise ModelError("E227", f"unknown block `{e.func}`", e.func_span,
                             _close(e.func, r.block_stmts) or "define it with `block Name = ...`")
        if e.func not in r.blocks:
            raise ModelError("E228", f"block `{e.func}` could not be evaluated (see its error)",
                             e.func_span, "fix the error reported at the block's definition first")
        r.block_uses[e.func] = r.block_uses.get(e.func, 0) + 1
        app = Application(e.func, r.blocks[e.func].transfer, e.span)
        return self.apply(app, self.ev(e.arg), e.arg.span)

    def ev_Inline(self, e: ast.Inline):
        if self.mode != "wiring":
            raise ModelError("E229", "a bracketed transfer `[..](x)` belongs in a signal equation",
                             e.span, "in a block or param, write the transfer without brackets")
        value = _Evaluator(self.r, "transfer").ev(e.transfer)
        tf = value if isinstance(value, Transfer) else Transfer.constant(value.value)
        label = f"[..]@{e.span.line}:{e.span.col}"
        tf = self.r.checked_transfer(tf, f"the bracketed transfer at {e.span}", e.transfer.span)
        return self.apply(Application(label, tf, e.span), self.ev(e.arg), e.arg.span)

    def apply(self, app: Application, arg, span: Span) -> list[Term]:
        if not isinstance(arg, list):
            raise ModelError("E212", "a block must be applied to a signal (or a sum of signals)", span,
                             "the argument holds no signal")
        if len(arg) == 1 and arg[0].app is None:
            t = arg[0]
            return [Term(t.source, t.gain, app, app.span)]
        hidden = self.r.hidden_signal(arg, span, app.label.split("@")[0] + "_in")
        return [Term(hidden, 1.0, app, app.span)]


def _scale(t: Term, k: float) -> Term:
    return Term(t.source, t.gain * k, t.app, t.span)


def _delay(arg, e: ast.Call) -> Transfer:
    if isinstance(arg, Quantity) and arg.value == 0:
        return Transfer.constant(1.0)
    if isinstance(arg, Transfer) and arg.poles.size == 0 and arg.zeros.size == 1 \
            and arg.zeros[0] == 0 and arg.delay == 0:
        T = -arg.gain
        if T < 0:
            raise ModelError("E231", "`exp(+T*s)` is a prediction, not a delay", e.span,
                             "a pure delay is written exp(-T*s) with T >= 0")
        if not math.isfinite(T) or T > 1e12:
            raise ModelError("E106", "the delay is not a finite time", e.span, None)
        return Transfer.pure_delay(T)
    raise ModelError("E232", "`exp` is only allowed as a pure delay `exp(-T*s)`", e.span,
                     "T is a constant time >= 0, e.g. exp(-150us*s) or exp(-Td*s)")


def resolve_text(text: str, file: str = "<text>", extra_requirements: tuple[str, ...] = (),
                 extra_source: str = "<settings>") -> Model:
    mf = parse_text(text, file)
    path = Path(file).resolve() if not file.startswith("<") else None
    extra = []
    for i, line in enumerate(extra_requirements):
        where = _settings_position(extra_source, line, i)
        # pad so that spans point at the requirement's own place in the settings file
        sub = parse_text(where, extra_source)
        for stmt in sub.statements:
            if not isinstance(stmt, ast.RequireStmt):
                raise ModelError("E240", f"a default requirement must look like `* metric >= value`: {line!r}",
                                 Span(extra_source, i + 1, 1), "for example `* phase_margin >= 45deg`")
            extra.append(stmt)
    return _Resolver(file).resolve(mf, path, tuple(extra))


def _settings_position(source: str, requirement: str, index: int) -> str:
    """`require <requirement>` placed at the line and column where the settings file
    holds it (found by its text), or on line index + 1 when it cannot be found."""
    try:
        lines = Path(source).read_text(encoding="utf-8").split("\n")
    except (OSError, ValueError):
        lines = []
    for n, text in enumerate(lines):
        col = text.find(requirement)
        if col >= len("require "):
            return "\n" * n + " " * (col - len("require ")) + "require " + requirement
    return "\n" * index + "require " + requirement


def resolve_file(path: str | Path, extra_requirements: tuple[str, ...] = (),
                 extra_source: str = "<settings>") -> Model:
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise ModelError("E001", "no such file", Span(str(path), 0, 0), None) from None
    except IsADirectoryError:
        raise ModelError("E001", "is a folder, not a model file", Span(str(path), 0, 0), None) from None
    except OSError as exc:
        raise ModelError("E001", f"cannot read the file: {exc.strerror}", Span(str(path), 0, 0), None) from None
    text = data.decode("utf-8", errors="replace")
    return resolve_text(text, str(path), extra_requirements, extra_source)
