"""Syntax tree -> a resolved model: includes read (`language.includes`), names
checked, params and blocks evaluated, every signal equation turned into a list of
wiring terms.

A wiring term is ``gain * application(source)``: one block (or bracketed transfer)
applied to one signal, or a plain scaled signal. Nested applications and
applications to sums get a hidden signal for their argument, so that every
block application is one instance with its own states — which is what makes
the closed-loop characteristic function ``prod(den_b) * det(I - A)`` right.
"""
from __future__ import annotations

import math
import os
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from ..errors import Finding, ModelError, ModelErrors, Span
from ..transfer import Transfer
from . import ast
from .evaluate import BUILT_IN, Evaluator
from .hints import Hints
from .includes import MODEL_SUFFIX, Includes
from .model import Application, Block, Model, Quantity, Term
from .parse import parse_text
from .requirements import make_requirement
from .source import SourceError, include_root, is_within, read_source
from ..waivers import Waiver, Waivers, make_waiver

__all__ = ["Quantity", "Block", "Application", "Term", "Model", "resolve_text", "resolve_file",
           "MODEL_SUFFIX", "Parsed", "parse_model", "parse_file", "resolve_parsed"]


class _Resolver:
    def __init__(self, file: str, root: Path, overrides: Mapping[str, float] | None = None, sources=None):
        self.file = file
        self.overrides = dict(overrides or {})  # param name -> value (sweeps and --set)
        self.ranges: dict[str, tuple[float, float]] = {}
        self.hints = Hints()
        self.errors: list[ModelError] = []
        #: the included files: every one must resolve inside `root` (resolved, links followed)
        self.includes = Includes(root, sources, self.errors)
        self.findings: list[Finding] = []
        self.params: dict[str, Quantity] = {}
        self.param_spans: dict[str, Span] = {}
        self.block_stmts: dict[str, ast.BlockStmt] = {}
        self.blocks: dict[str, Block] = {}
        self.inputs: dict[str, Span] = {}
        self.eq_stmts: dict[str, ast.EquationStmt] = {}
        self.breaks: list[ast.BreakStmt] = []
        self.requires: list[ast.RequireStmt] = []
        self.waives: list[ast.WaiveStmt] = []
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
        if name in BUILT_IN:
            self.errors.append(ModelError(
                "LW201", f"`{name}` is a reserved word ({BUILT_IN[name]}) and cannot name "
                f"{'an' if what[0] in 'aeiou' else 'a'} {what}", span, "choose another name"))
            return False
        if name in self.names:
            prev_what, prev = self.names[name]
            self.errors.append(ModelError(
                "LW202", f"`{name}` is defined twice (first as a {prev_what} at {prev})", span,
                "every name (param, block, signal, input) is defined exactly once"))
            return False
        self.names[name] = (what, span)
        return True

    def collect(self, mf: ast.ModelFile, include_stack: tuple[tuple[Path, str], ...], top: bool) -> None:
        for i, stmt in enumerate(mf.statements):
            if isinstance(stmt, ast.ModelStmt):
                if not top:
                    continue  # an included file's own name does not rename the model
                if i != 0 or self.model_name is not None:
                    self.errors.append(ModelError("LW203", "`model` must be the first statement, once",
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
                    "LW204", "an included file may hold only `param`, `block` and `use` statements",
                    stmt.span, "keep signals, breaks and requirements in the model that uses it"))
            elif isinstance(stmt, ast.InputStmt):
                for name, span in stmt.names:
                    if self.declare(name, "input", span):
                        self.inputs[name] = span
            elif isinstance(stmt, ast.EquationStmt):
                if stmt.signal in self.inputs:
                    self.errors.append(ModelError(
                        "LW202", f"`{stmt.signal}` is an input and cannot also have an equation", stmt.span,
                        "an input is driven from outside; remove it from `input` or drop the equation"))
                elif self.declare(stmt.signal, "signal", stmt.span):
                    self.eq_stmts[stmt.signal] = stmt
            elif isinstance(stmt, ast.BreakStmt):
                self.breaks.append(stmt)
            elif isinstance(stmt, ast.RequireStmt):
                self.requires.append(stmt)
            elif isinstance(stmt, ast.WaiveStmt):
                self.waives.append(stmt)

    def include(self, stmt: ast.UseStmt, stack: tuple[tuple[Path, str], ...]) -> None:
        """Collect the statements of the file a `use` names, when `Includes.enter` lets it in
        (once per model, inside the root, no cycle, read and parsed). `stack` holds
        (real path, shown name) of the files being collected, the model first."""
        found = self.includes.enter(stmt, stack)
        if found is not None:
            real, mf = found
            self.collect(mf, (*stack, (real, mf.path)), top=False)

    # --- expressions --------------------------------------------------------------
    def const(self, expr: ast.Expr, what: str) -> Quantity:
        value = self.evaluate(expr, "const")
        if not isinstance(value, Quantity):
            raise ModelError("LW210", f"{what} must be a constant", expr.span,
                             "use numbers and params only here (no `s`, no signals)")
        if not math.isfinite(value.value) or abs(value.value) > 1e300:
            raise ModelError("LW106", f"{what} is not a finite number", expr.span,
                             "check for overflow or a division by zero")
        return value

    def evaluate(self, expr: ast.Expr, mode: str):
        """mode: 'const' (numbers, params), 'transfer' (+ s, exp), 'wiring' (+ signals, blocks)."""
        return Evaluator(self, mode).run(expr)

    def eval_param(self, stmt: ast.ParamStmt) -> None:
        try:
            q = self.const(stmt.value, f"param `{stmt.name}`")
            if stmt.low is not None:
                lo = self.const(stmt.low, "the range's low end").value
                hi = self.const(stmt.high, "the range's high end").value
                if not lo <= q.value <= hi:
                    raise ModelError("LW211", f"param `{stmt.name}` = {q.value:g} lies outside its range "
                                     f"[{lo:g}, {hi:g}]", stmt.value.span,
                                     "the nominal value must lie within its uncertainty range")
                self.ranges[stmt.name] = (lo, hi)
            self.params[stmt.name] = self.overridden(stmt, q)
        except ModelError as exc:
            self.errors.append(exc)

    def eval_block(self, stmt: ast.BlockStmt) -> None:
        try:
            value = self.evaluate(stmt.transfer, "transfer")
            tf = value if isinstance(value, Transfer) else Transfer.constant(value.value)
            span = self.includes.shown_span(stmt.span)  # what later stages point at
            self.blocks[stmt.name] = Block(stmt.name, self.checked_transfer(tf, f"block `{stmt.name}`",
                                                                            stmt.transfer.span, (stmt.name,)),
                                           span)
        except ModelError as exc:
            self.errors.append(exc)

    def checked_transfer(self, tf: Transfer, what: str, span: Span, about: tuple[str, ...] = ()) -> Transfer:
        if not (math.isfinite(tf.gain) and np.all(np.isfinite(tf.poles)) and np.all(np.isfinite(tf.zeros))) \
                or (tf.gain == 0.0 and (tf.zeros.size or tf.poles.size)):
            raise ModelError("LW106", f"{what} has coefficients beyond double precision (overflow, "
                             "underflow or a division by zero)", span,
                             "rescale its parameters (e.g. time in ms) or check them")
        tf, cancelled = tf.minimal()
        for p in cancelled:
            if p.real >= 0 and p.imag >= 0:
                where = "on the imaginary axis" if p.real == 0 else "in the right half plane"
                self.findings.append(Finding(
                    "warning", "LW281", f"{what} cancels its pole at {p:.4g} ({where}) with a zero: the "
                    "mode stays in the system, unseen by any loop, and counts against stability", span,
                    "an exact cancellation does not remove a mode; model it explicitly (or waive "
                    "this with a reason if the mode is known not to exist)", about))
        if not tf.is_proper:
            # an ideal derivative is accepted where every loop around it stays proper
            # (the engine refuses the loops that are not, naming the break and the blocks)
            self.findings.append(Finding(
                "warning", "LW283", f"{what} is improper ({tf.zeros.size} zeros, {tf.poles.size} poles): an "
                "ideal derivative, analysed as written", span,
                "a real implementation needs a derivative filter, e.g. Kd*s/(Tf*s + 1) instead of Kd*s", about))
        return tf

    # --- overrides: `--set NAME=VALUE` and a sweep's samples -------------------------
    def overridden(self, stmt: ast.ParamStmt, q: Quantity) -> Quantity:
        """The param's value as set from outside (its declared value and range are still checked)."""
        if stmt.name not in self.overrides:
            return q
        value = float(self.overrides[stmt.name])
        lo, hi = self.ranges.get(stmt.name, (value, value))
        if stmt.name in self.ranges and not lo <= value <= hi:
            self.findings.append(Finding(  # (one in an unshown file is moved to its `use` at the end)
                "note", "LW292", f"param `{stmt.name}` is set to {value:g}, outside its declared range "
                f"[{lo:g}, {hi:g}]", stmt.value.span,
                "the results hold for the value set; the range says where the model is meant to hold"))
        return Quantity(value, q.kind)

    def check_overrides(self) -> None:
        for name in self.overrides:
            if name in self.param_spans:
                continue
            what = self.names.get(name, ("", None))[0]
            message = (f"`{name}` is a {what}, not a param: only params can be set" if what
                       else f"no param `{name}` to set in this model")
            self.errors.append(ModelError("LW254", message, Span(self.file, 0, 0),
                                          self.hints.did_you_mean(name, lambda: self.param_spans, "param")
                                          or f"the model's params: {', '.join(self.param_spans) or 'none'}"))

    # --- the pass ---------------------------------------------------------------
    def resolve(self, mf: ast.ModelFile, path: Path | None, extra_requirements=()) -> Model:
        self.all_params = {st.name for st in mf.statements if isinstance(st, ast.ParamStmt)}
        self.includes.start(mf, path)
        self.collect(mf, ((path, self.file),) if path else (), top=True)
        self.check_overrides()
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
                self.findings.append(Finding("warning", "LW282", f"block `{name}` is never used",
                                             self.block_stmts[name].span, "apply it in a signal equation or remove it",
                                             (name,)))
        if not self.eq_stmts and not self.errors and not (self.block_stmts or self.param_spans):
            self.errors.append(ModelError("LW230", "the model has no signal equations",
                                          Span(self.file, 1, 1), "wire blocks with lines like `y = G(e)`"))
        if not self.eq_stmts and (self.block_stmts or self.param_spans) and (self.breaks or self.requires):
            self.errors.append(ModelError("LW230", "the model has breaks or requirements but no signal equations",
                                          Span(self.file, 1, 1), "wire blocks with lines like `y = G(e)`"))
        requirements = []
        for stmt in (*self.requires, *extra_requirements):
            try:
                requirements.append(make_requirement(stmt, self.const))
            except ModelError as exc:
                self.errors.append(exc)
        waivers = self.waivers()
        self.errors, self.findings = self.includes.hide(self.errors, self.findings)
        if self.errors:
            raise ModelErrors(list(self.errors))  # in the order found: causes before follow-ups
        signals = {n: s.span for n, s in self.eq_stmts.items()}
        signals.update(self.hidden)
        return Model(
            name=self.model_name or Path(self.file).stem, file=self.file, params=dict(self.params),
            blocks=dict(self.blocks), inputs=dict(self.inputs), signals=signals,
            hidden=frozenset(self.hidden), equations=dict(self.equations), breaks=tuple(self.breaks),
            requirements=tuple(requirements), findings=tuple(self.findings),
            block_uses=dict(self.block_uses), hidden_owner=dict(self.hidden_owner), waivers=waivers,
            ranges=dict(self.ranges), sources=dict(self.includes.sources),
        )

    def waivers(self) -> Waivers:
        """The model's `waive` statements, checked against its names (after they are all known)."""
        names = {name: what for name, (what, _) in self.names.items()}
        names.update({stmt.name: "break" for stmt in self.breaks})
        out = []
        for stmt in self.waives:
            try:
                out.append(make_waiver(stmt, names))
            except ModelError as exc:
                self.errors.append(exc)
        return Waivers(tuple(out))

    def as_terms(self, value, span: Span) -> list[Term]:
        if isinstance(value, list):
            return value
        if isinstance(value, Quantity):
            raise ModelError("LW212", "a signal equation needs at least one signal on the right",
                             span, "a constant alone does not take part in a linear model")
        raise ModelError("LW213", "a transfer function must be applied to a signal in a wiring",
                         span, "write it in brackets applied to a signal: `[G](x)`, or name it with `block`")

    def hidden_signal(self, terms: list[Term], span: Span, label: str) -> str:
        name = f"{label}@{span.line}:{span.col}"
        while name in self.hidden or name in self.names:
            name += "'"
        self.hidden[name] = span
        self.hidden_owner[name] = self.owner
        self.equations[name] = tuple(terms)
        return name


def resolve_text(text: str, file: str = "<text>", extra_requirements: tuple[str, ...] = (),
                 extra_source: str = "<settings>", root: str | os.PathLike | None = None,
                 overrides: Mapping[str, float] | None = None) -> Model:
    """Resolve a model given as text. Includes are relative to `file`'s folder (the working
    directory for "<text>") and must stay inside `root`: by default the git work tree
    holding that folder, else the folder itself (see `source.include_root`). `overrides`
    sets params (by name) to other values."""
    return resolve_parsed(parse_model(text, file, extra_requirements, extra_source, root), overrides)


@dataclass(frozen=True, eq=False)
class Parsed:
    """A model's syntax trees, parsed once; `sources` holds the included files' trees once a
    resolution has read them (through the bounded reader, inside `root`), so that later
    resolutions (one per sweep sample, possibly on another machine) need neither the disk
    nor the parser."""

    file: str
    path: Path | None
    tree: ast.ModelFile
    extra: tuple[ast.RequireStmt, ...] = ()
    sources: Mapping = field(default_factory=dict)  # `use` statement -> (real path, tree)
    waivers: tuple[Waiver, ...] = ()  # the settings' waivers for this file (after the model's own)
    root: Path | None = None  # where includes must stay (None: `source.include_root` of the file)

    def with_sources(self, model: Model) -> "Parsed":
        """This parsed model with the included files' trees a resolution read (`model.sources`),
        so that later resolutions need neither the disk nor the parser."""
        return replace(self, sources=dict(model.sources))


def parse_model(text: str, file: str = "<text>", extra_requirements: tuple[str, ...] = (),
                extra_source: str = "<settings>", root: str | os.PathLike | None = None) -> Parsed:
    """Parse a model given as text (see `resolve_text` for `file` and `root`); its includes
    are read by the first resolution."""
    path = Path(file).resolve() if not file.startswith("<") else None
    tree = parse_text(text, file)
    extra = _extra_requirements(extra_requirements, extra_source)
    return Parsed(file, path, tree, extra, root=include_root(None if path is None else file, root))


def resolve_parsed(parsed: Parsed, overrides: Mapping[str, float] | None = None) -> Model:
    """Resolve a parsed model, with params set by `overrides` (param name -> value in SI):
    each is checked against the model's params (LW254) and its declared range (LW292, a note)."""
    root = parsed.root if parsed.root is not None else \
        include_root(None if parsed.path is None else parsed.file)
    resolver = _Resolver(parsed.file, root, overrides, parsed.sources)
    model = resolver.resolve(parsed.tree, parsed.path, parsed.extra)
    return replace(model, waivers=model.waivers.plus(parsed.waivers)) if parsed.waivers else model


def _extra_requirements(extra_requirements: tuple[str, ...], extra_source: str) -> tuple[ast.RequireStmt, ...]:
    extra = []
    for i, line in enumerate(extra_requirements):
        where = _settings_position(extra_source, line, i)
        # pad so that spans point at the requirement's own place in the settings file
        sub = parse_text(where, extra_source)
        for stmt in sub.statements:
            if not isinstance(stmt, ast.RequireStmt):
                raise ModelError("LW240", f"a default requirement must look like `* metric >= value`: {line!r}",
                                 Span(extra_source, i + 1, 1), "for example `* phase_margin >= 45deg`")
            extra.append(stmt)
    return tuple(extra)


def _settings_position(source: str, requirement: str, index: int) -> str:
    """`require <requirement>` placed at the line and column where the settings file
    holds it (found by its text), or on line index + 1 when it cannot be found."""
    try:
        lines = read_source(source).split("\n") if not source.startswith("<") else []
    except SourceError:
        lines = []
    for n, text in enumerate(lines):
        col = text.find(requirement)
        if col >= len("require "):
            return "\n" * n + " " * (col - len("require ")) + "require " + requirement
    return "\n" * index + "require " + requirement


def resolve_file(path: str | os.PathLike, extra_requirements: tuple[str, ...] = (),
                 extra_source: str = "<settings>", root: str | os.PathLike | None = None,
                 overrides: Mapping[str, float] | None = None) -> Model:
    """Read and resolve one model file (see `parse_file`); `overrides` sets params."""
    return resolve_parsed(parse_file(path, extra_requirements, extra_source, root), overrides)


def parse_file(path: str | os.PathLike, extra_requirements: tuple[str, ...] = (),
               extra_source: str = "<settings>", root: str | os.PathLike | None = None) -> Parsed:
    """Read and parse one model file: a regular file, at most 4 MiB, UTF-8 text.

    `root` is the folder tree of the checked paths (the command line passes their
    common folder): used outside git, where includes must stay inside it; inside a
    git work tree they must stay inside the work tree. The model itself, links
    followed, must lie in that root too.
    """
    file = os.fspath(path)
    model_root = include_root(file, root)
    try:
        real = Path(file).resolve()
    except (OSError, RuntimeError):
        raise ModelError("LW001", "cannot read the file: a loop of symbolic links", Span(file, 0, 0), None) from None
    if not is_within(real, model_root):
        raise ModelError("LW001", "the model is a link to a file outside the repository", Span(file, 0, 0),
                         f"check the file where it lies; links that lead out of {model_root} are not followed")
    try:
        text = read_source(file)
    except SourceError as exc:
        if exc.code == "LW104":
            raise ModelError("LW104", exc.reason, Span(file, exc.line, exc.col), "a model is plain UTF-8 text") \
                from None
        raise ModelError(exc.code, exc.reason, Span(file, 0, 0),
                         "split it into files joined with `use`" if exc.code == "LW105" else None) from None
    return parse_model(text, file, extra_requirements, extra_source, model_root)
