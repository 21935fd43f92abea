"""Expression evaluation for the resolver: constants, transfers and wirings.

One evaluator, three modes: `const` (numbers and params), `transfer` (plus the
Laplace variable and exp(-T s) delays) and `wiring` (plus signals and block
applications). It reads the resolver's tables and records its findings there.
"""
from __future__ import annotations

import itertools
import math

import numpy as np

from ..errors import Finding, ModelError, Span
from ..transfer import Transfer, TransferError
from . import ast
from .model import Application, Quantity, Term

__all__ = ["Evaluator", "BUILT_IN", "MAX_ORDER"]

#: names the language gives a meaning (never declared): name -> what it is
BUILT_IN = {"s": "the Laplace variable", "exp": "the delay function"}

#: a constant beyond this is taken for an overflow (as for literals, LW106)
_LARGEST = 1e300

#: a transfer may have at most this many poles, and as many zeros (as many as the largest
#: power of a transfer): its polynomial arithmetic costs up to order^3 per sum, and beyond
#: a few dozen the coefficients carry no digits worth the name
MAX_ORDER = 32


def _finite(value: float, span: Span) -> float:
    """A constant result, refused when the arithmetic overflowed (inf or nan)."""
    if not math.isfinite(value) or abs(value) > _LARGEST:
        raise ModelError("LW106", "the value overflows: it is not a finite number", span,
                         "numbers must be finite and within about 1e-300 to 1e300; check the params and units")
    return value


class Evaluator:
    """Evaluates one expression; kept separate so each mode's rules stay in one place."""

    def __init__(self, r, mode: str):  # r: the resolver whose tables it reads
        self.r = r
        self.mode = mode

    def run(self, expr):
        """The value of `expr` in this mode: a Quantity (a constant), a Transfer, or a list of
        wiring Terms; a located ModelError when the expression has no meaning here."""
        return self.ev(expr)

    def ev(self, e):
        """The value of one node, by its kind (`ev_Number`, `ev_Name`, ...)."""
        method = getattr(self, "ev_" + type(e).__name__)
        return method(e)

    def ev_Number(self, e: ast.Number):
        """A literal: its SI value, and the kind its unit suffix gives it."""
        from .units import unit_kind
        return Quantity(e.value, unit_kind(e.unit))

    def ev_Name(self, e: ast.Name):
        """A name: `s` (a transfer), a param's value, or a signal (a wiring term); any other
        use is a located error with a hint (LW214 to LW218)."""
        r = self.r
        if e.name == "s":
            if self.mode == "transfer":
                return Transfer.laplace()
            where = "a constant" if self.mode == "const" else "a signal sum"
            raise ModelError("LW214", f"the Laplace variable `s` cannot appear in {where}", e.span,
                             "`s` belongs in a block's transfer or in a bracketed transfer `[..](x)`")
        if e.name in r.params:
            return r.params[e.name]
        if e.name in r.eq_stmts or e.name in r.inputs:
            if self.mode == "wiring":
                return [Term(e.name, 1.0, None, e.span)]
            raise ModelError("LW215", f"signal `{e.name}` cannot appear in a transfer or constant", e.span,
                             "signals belong in signal equations")
        if e.name in r.block_stmts:
            raise ModelError("LW216", f"block `{e.name}` is used as a value", e.span,
                             f"apply it to a signal: `{e.name}(x)`")
        if e.name in r.param_spans:  # declared, but its own definition failed
            raise ModelError("LW217", f"param `{e.name}` could not be evaluated (see its error)", e.span,
                             "fix the error reported at its definition first")
        if e.name in r.all_params:
            raise ModelError("LW217", f"param `{e.name}` is used before it is defined", e.span,
                             "params may only use params defined above them")
        wiring = self.mode == "wiring"
        what = "signal or param" if wiring else "param"
        fallback = (f"define it: `{e.name} = ...` for a signal, `input {e.name}` for an input, "
                    f"or `param {e.name} = ...`") if wiring else \
            f"define it above with `param {e.name} = ...`"
        known = (lambda: itertools.chain(r.params, r.eq_stmts, r.inputs, ["s"])) if wiring else \
            (lambda: itertools.chain(r.params, ["s"]))
        raise ModelError("LW218", f"unknown {what} `{e.name}`", e.span,
                         r.hints.did_you_mean(e.name, known, self.mode) or fallback)

    def known(self, name: str) -> bool:
        """Whether a name means something here (so that `e` can be a user's param)."""
        r = self.r
        return name in r.params or name in r.all_params or name in r.param_spans or \
            name in r.block_stmts or name in r.eq_stmts or name in r.inputs

    def binary(self, op: str, a, b, span: Span):
        """`a op b` for constants (unit kinds kept where they agree), transfers, or wirings
        (`wiring_binary`); a division by zero, a delay in a sum or an overflow is located at `span`."""
        if isinstance(a, Quantity) and isinstance(b, Quantity):
            kind = a.kind if a.kind == b.kind or b.kind is None else (b.kind if a.kind is None else None)
            if op == "/" and b.value == 0:
                raise ModelError("LW219", "division by zero", span, "check the params in the divisor")
            v = {"+": a.value + b.value, "-": a.value - b.value, "*": a.value * b.value,
                 "/": a.value / b.value if op == "/" else 0.0}[op]
            if op in "*/" and a.kind and b.kind:
                kind = None
            return Quantity(_finite(v, span), kind)
        if isinstance(a, list) or isinstance(b, list):
            return self.wiring_binary(op, a, b, span)
        ta = a if isinstance(a, Transfer) else Transfer.constant(a.value)
        tb = b if isinstance(b, Transfer) else Transfer.constant(b.value)
        try:
            with np.errstate(all="ignore"):
                result = {"+": ta.__add__, "-": ta.__sub__, "*": ta.__mul__, "/": ta.__truediv__}[op](tb)
        except (TransferError, ZeroDivisionError) as exc:
            raise ModelError("LW221", str(exc), span,
                             "give each delayed path its own block and add the signals in a wiring"
                             if "delay" in str(exc) else None) from None
        except (np.linalg.LinAlgError, ValueError, FloatingPointError, OverflowError):
            raise _overflow(span) from None
        return _within_order(result, span)

    def wiring_binary(self, op: str, a, b, span: Span):
        """`a op b` where a side is a signal sum: sums and differences of signal sums, and
        sums scaled or divided by constants. A constant offset in a sum is dropped with a
        note (LW291); a transfer, a product of signals or a division by one is a located
        error."""
        if isinstance(a, Transfer) or isinstance(b, Transfer):
            raise ModelError("LW213", "a transfer function must be applied to a signal in a wiring", span,
                             "write `[G](x)` (brackets around the transfer) or name it with `block`")
        if op in "+-":
            if isinstance(a, Quantity) or isinstance(b, Quantity):
                const = a if isinstance(a, Quantity) else b
                self.r.findings.append(Finding("note", "LW291", f"a constant offset ({const.value:g}) in a "
                                               "signal sum does not affect linear stability and is ignored",
                                               span, None, about=(self.r.owner,)))
                terms = a if isinstance(a, list) else []
                others = b if isinstance(b, list) else []
                sign = -1.0 if op == "-" else 1.0
                return [*terms, *[_scale(t, sign) for t in others]]
            sign = -1.0 if op == "-" else 1.0
            return [*a, *[_scale(t, sign) for t in b]]
        if op == "*":
            if isinstance(a, list) and isinstance(b, list):
                raise ModelError("LW222", "a product of two signals is not linear", span,
                                 "scale a signal by a constant or apply a block to it")
            terms, k = (a, b) if isinstance(a, list) else (b, a)
            return [_scale(t, k.value, span) for t in terms]
        if isinstance(b, list):
            raise ModelError("LW222", "dividing by a signal is not linear", span,
                             "divide a signal by a constant, or apply a block")
        if b.value == 0:
            raise ModelError("LW219", "division by zero", span, "check the params in the divisor")
        return [_scale(t, 1.0 / b.value, span) for t in a]

    def ev_BinOp(self, e: ast.BinOp):
        """`left op right` (`binary`)."""
        return self.binary(e.op, self.ev(e.left), self.ev(e.right), e.span)

    def ev_Neg(self, e: ast.Neg):
        """`-x` for a constant, a signal sum or a transfer."""
        v = self.ev(e.operand)
        if isinstance(v, Quantity):
            return Quantity(-v.value, v.kind)
        if isinstance(v, list):
            return [_scale(t, -1.0) for t in v]
        return -v

    def ev_Power(self, e: ast.Power):
        """`base ^ n` with a constant exponent: a constant to any real power, a transfer to a
        whole power (negative for its inverse) within `MAX_ORDER`; a power of a signal is
        a located error (not linear)."""
        if isinstance(e.base, ast.Name) and e.base.name == "e" and not self.known("e"):
            raise _euler_power(e, self.mode)
        base = self.ev(e.base)
        exp_value = self.ev(e.exponent)
        if not isinstance(exp_value, Quantity):
            raise ModelError("LW223", "an exponent must be a constant", e.exponent.span, "write s^2 or wn^2")
        if isinstance(base, list):
            raise ModelError("LW222", "a power of a signal is not linear", e.span,
                             "apply a block to the signal instead")
        if isinstance(base, Quantity):
            # constants may take any real power (sqrt as ^0.5); transfers only whole ones
            if base.value < 0 and exp_value.value != round(exp_value.value):
                raise ModelError("LW223", "a negative number to a fractional power is not real",
                                 e.span, "use a positive base or a whole exponent")
            try:
                v = float(base.value) ** float(exp_value.value)
            except (ZeroDivisionError, OverflowError):
                raise ModelError("LW219", "the power has no finite value", e.span,
                                 "check the base and the exponent") from None
            return Quantity(_finite(v, e.span), base.kind if exp_value.value == 1 else None)
        if exp_value.value != round(exp_value.value) or abs(exp_value.value) > MAX_ORDER:
            raise ModelError("LW223", f"powers of a transfer must be whole numbers (at most {MAX_ORDER})",
                             e.exponent.span, "write s^2, (s+1)^3 or (T*s+1)^-1")
        n = int(exp_value.value)
        if max(base.poles.size, base.zeros.size) * abs(n) > MAX_ORDER:
            raise _too_high(max(base.poles.size, base.zeros.size) * abs(n), e.span)
        try:
            with np.errstate(all="ignore"):
                result = base ** n
        except TransferError as exc:
            raise ModelError("LW221", str(exc), e.span, "simplify the transfer expression") from None
        except (np.linalg.LinAlgError, ValueError, FloatingPointError, OverflowError):
            raise _overflow(e.span) from None
        return _within_order(result, e.span)

    def ev_Call(self, e: ast.Call):
        """`exp(-T*s)` (a pure delay, in a transfer) or `Block(x)` (a block applied to a signal
        sum, in a wiring); anything else is a located error with a hint."""
        r = self.r
        if e.func == "exp":
            if self.mode != "transfer":
                raise ModelError("LW224", "`exp` is only for pure delays inside a transfer", e.func_span,
                                 "write the delay in a block: `block D = exp(-T*s)`")
            arg = self.ev(e.arg)
            return _delay(arg, e)
        if self.mode != "wiring":
            if e.func in r.block_stmts:
                raise ModelError("LW225", f"block `{e.func}` cannot be applied inside a transfer", e.func_span,
                                 "apply blocks to signals in signal equations")
            raise ModelError("LW226", f"unknown function `{e.func}`", e.func_span,
                             "the only function is exp(-T*s) for a pure delay")
        if e.func not in r.block_stmts:
            raise ModelError("LW227", f"unknown block `{e.func}`", e.func_span,
                             r.hints.did_you_mean(e.func, lambda: r.block_stmts, "block")
                             or "define it with `block Name = ...`")
        if e.func not in r.blocks:
            raise ModelError("LW228", f"block `{e.func}` could not be evaluated (see its error)",
                             e.func_span, "fix the error reported at the block's definition first")
        r.block_uses[e.func] = r.block_uses.get(e.func, 0) + 1
        app = Application(e.func, r.blocks[e.func].transfer, e.span)
        return self.apply(app, self.ev(e.arg), e.arg.span)

    def ev_Inline(self, e: ast.Inline):
        """`[transfer](x)`: an unnamed block applied in a wiring, its transfer checked like a
        block's."""
        if self.mode != "wiring":
            raise ModelError("LW229", "a bracketed transfer `[..](x)` belongs in a signal equation",
                             e.span, "in a block or param, write the transfer without brackets")
        value = Evaluator(self.r, "transfer").ev(e.transfer)
        tf = value if isinstance(value, Transfer) else Transfer.constant(value.value)
        label = f"[..]@{e.span.line}:{e.span.col}"
        tf = self.r.checked_transfer(tf, f"the bracketed transfer at {e.span}", e.transfer.span, (self.r.owner,))
        return self.apply(Application(label, tf, e.span), self.ev(e.arg), e.arg.span)

    def apply(self, app: Application, arg, span: Span) -> list[Term]:
        """One application of a block to `arg`: a single wiring term when `arg` is one plain
        signal, else a term on a hidden signal that stands for the sum."""
        if not isinstance(arg, list):
            raise ModelError("LW212", "a block must be applied to a signal (or a sum of signals)", span,
                             "the argument holds no signal")
        if len(arg) == 1 and arg[0].app is None:
            t = arg[0]
            return [Term(t.source, t.gain, app, app.span)]
        hidden = self.r.hidden_signal(arg, span, app.label.split("@")[0] + "_in")
        return [Term(hidden, 1.0, app, app.span)]


def _within_order(tf: Transfer, span: Span) -> Transfer:
    """A transfer result, refused when its order is past MAX_ORDER or its numbers overflowed."""
    order = max(tf.poles.size, tf.zeros.size)
    if order > MAX_ORDER:
        raise _too_high(order, span)
    if not (math.isfinite(tf.gain) and np.all(np.isfinite(tf.poles)) and np.all(np.isfinite(tf.zeros))):
        raise _overflow(span)
    return tf


def _too_high(order: int, span: Span) -> ModelError:
    return ModelError("LW233", f"the transfer would have {order} poles or zeros (the limit is {MAX_ORDER})",
                      span, "split it into blocks applied one after another, or reduce the model's order")


def _overflow(span: Span) -> ModelError:
    return ModelError("LW106", "the transfer's coefficients overflow: they are not finite numbers", span,
                      "check the params and units: poles, zeros and gains must stay within about 1e-300 to 1e300")


def _scale(t: Term, k: float, span: Span | None = None) -> Term:
    gain = t.gain * k
    if span is not None:
        _finite(gain, span)
    return Term(t.source, gain, t.app, t.span)


def _euler_power(e: ast.Power, mode: str) -> ModelError:
    """`e^(-Td*s)`: there is no constant `e`; a delay is written exp(-T*s)."""
    shown = _delay_time(e.exponent)
    if mode == "transfer" or shown is not None:
        example = f"exp(-{shown}*s)" if shown else "exp(-T*s)"
        return ModelError("LW218", "unknown param `e`: a delay is not written as a power of `e`", e.base.span,
                          f"write a pure delay as `{example}` (T >= 0 in seconds)")
    return ModelError("LW218", "unknown param `e`: the language has no constant `e`", e.base.span,
                      "write the number (2.718281828459045) or define `param e = ...`; "
                      "a pure delay is written `exp(-T*s)`")


def _delay_time(x: ast.Expr) -> str | None:
    """`Td` or `150us` when x reads -Td*s (that is (-Td)*s) or -(Td*s), else None."""
    if isinstance(x, ast.BinOp) and x.op == "*" and isinstance(x.left, ast.Neg):
        time, laplace = x.left.operand, x.right
    elif isinstance(x, ast.Neg) and isinstance(x.operand, ast.BinOp) and x.operand.op == "*":
        time, laplace = x.operand.left, x.operand.right
    else:
        return None
    if not (isinstance(laplace, ast.Name) and laplace.name == "s"):
        return None
    if isinstance(time, ast.Name):
        return time.name
    return time.text if isinstance(time, ast.Number) else None


def _delay(arg, e: ast.Call) -> Transfer:
    if isinstance(arg, Quantity) and arg.value == 0:
        return Transfer.constant(1.0)
    if isinstance(arg, Transfer) and arg.is_zero:  # exp(-Td*s) with Td = 0: no delay at all
        return Transfer.constant(1.0)
    if isinstance(arg, Transfer) and arg.poles.size == 0 and arg.zeros.size == 1 \
            and arg.zeros[0] == 0 and arg.delay == 0:
        T = -arg.gain
        if T < 0:
            raise ModelError("LW231", "`exp(+T*s)` is a prediction, not a delay", e.span,
                             "a pure delay is written exp(-T*s) with T >= 0")
        if not math.isfinite(T) or T > 1e12:
            raise ModelError("LW106", "the delay is not a finite time", e.span, None)
        return Transfer.pure_delay(T)
    raise ModelError("LW232", "`exp` is only allowed as a pure delay `exp(-T*s)`", e.span,
                     "T is a constant time >= 0, e.g. exp(-150us*s) or exp(-Td*s)")
