"""The files a model's `use` statements bring in: located (links followed), held
to the include root, read once per model through the bounded reader, parsed
within the model's token budget, and named as errors show them.

A file that is not a `.loop` file (as named, or where links lead), or that is
reached through one, never has its lines shown: its errors become one LW208 at
the `use` that led to it, and its findings point there (`Includes.hide`).

A sweep resolves one parsed model many times: the trees an earlier resolution
read are handed in as `sources` (`use` statement -> (real path, tree)), so that
later resolutions need neither the disk nor the parser; the root, cycle,
once-per-model and statement rules apply again each time.
"""
from __future__ import annotations

import dataclasses
import os
from pathlib import Path, PurePath

from ..errors import Finding, ModelError, Span
from . import ast
from .parse import MAX_TOKENS, parse_text
from .source import SourceError, is_within, read_source

__all__ = ["MODEL_SUFFIX", "Includes"]

#: only files with this suffix (as named and where links lead) have their lines shown
#: under an error; any other included file is read, but its errors are one LW208 at the
#: `use` that brought it in, and its findings point there
MODEL_SUFFIX = ".loop"

#: (real path, shown name) of each file being collected, the model first
Stack = tuple[tuple[Path, str], ...]


class Includes:
    """The included files of one resolution of a model.

    `root`: where every include must resolve (resolved, links followed);
    `sources`: trees an earlier resolution of the same parsed model read;
    `errors`: the resolver's list, which located errors are added to.
    """

    def __init__(self, root: Path, sources, errors: list[ModelError]):
        self.root = root
        #: `use` statement -> (real path, its parsed file): read by an earlier resolution of
        #: the same parsed model (a sweep's plants), or by this one
        self.sources = dict(sources or {})
        self.errors = errors
        self.read: dict[Path, ast.ModelFile] = {}  # real path -> parsed file, read by this resolution
        self.included: set[Path] = set()  # each file is read and collected once per model
        self.tokens_left = MAX_TOKENS
        #: included files whose lines are never shown (not `.loop`), by shown name -> the
        #: `use` in a `.loop` file that led to them (its span and its path)
        self.unshown: dict[str, tuple[Span, str]] = {}
        self.reached_through: set[str] = set()  # unshown files used by another unshown file

    def start(self, tree: ast.ModelFile, path: Path | None) -> None:
        """Begin with the model itself: its tokens count against the budget, and it is
        included (a `use` of the model from one of its libraries is a cycle)."""
        self.tokens_left = MAX_TOKENS - tree.tokens
        if path is not None:
            self.included.add(path)

    def enter(self, stmt: ast.UseStmt, stack: Stack) -> tuple[Path, ast.ModelFile] | None:
        """The file a `use` names, read and parsed, when its statements are to be collected
        now: once per model, inside the root, not a cycle. None otherwise (an error is
        recorded, or the file is already in).

        A `use` that an earlier resolution of the same parsed model has read (`sources`)
        takes its tree from there, without the disk: the reading checks (regular file,
        size, UTF-8, token budget) passed then.
        """
        known = self.sources.get(stmt)
        if known is None:
            real = self.locate(stmt, stack)
            if real is None:
                return None
        else:
            real = known[0]
        if not is_within(real, self.root):
            self.errors.append(ModelError(
                "LW207", f"included file {stmt.path} lies outside the repository", stmt.span,
                f"a `use` must stay inside {self.root} (the repository or checked folder that holds "
                "the model); links are followed before this check"))
            return None
        chain = [p for p, _ in stack]
        if real in chain:
            names = " -> ".join(p.name for p in (*chain[chain.index(real):], real))
            self.errors.append(ModelError("LW205", f"include cycle: {names}", stmt.span,
                                          "a file may not use itself, directly or through others"))
            return None
        if real in self.included:
            if real in self.read:  # kept, so that a later resolution needs no disk for it either
                self.sources.setdefault(stmt, (real, self.read[real]))
            return None  # the same library reached again (a diamond): its names are already in
        self.included.add(real)
        mf = known[1] if known is not None else self.read_file(stmt, stack, real)
        if mf is None:
            return None
        if known is not None:
            self.mark_unshown(stmt, mf.path, real)
            self.tokens_left -= mf.tokens
        self.read[real] = mf
        self.sources[stmt] = (real, mf)
        return real, mf

    def locate(self, stmt: ast.UseStmt, stack: Stack) -> Path | None:
        """The real path (links followed) of the file a `use` names, or None (LW206)."""
        base = stack[-1][0].parent if stack else Path.cwd()
        try:
            return (base / stmt.path).resolve()
        except (OSError, RuntimeError):  # a loop of links (RuntimeError before Python 3.13)
            self.errors.append(ModelError("LW206", f"cannot read included file {stmt.path}: a loop of "
                                          "symbolic links", stmt.span, "point the path at a real file"))
            return None

    def mark_unshown(self, stmt: ast.UseStmt, shown: str, real: Path) -> None:
        """An included file that is not `.loop` (as named, or where links lead), or that is
        reached through one, never has its lines shown (decided from names alone: a
        sweep's plant resolves without the disk)."""
        if stmt.span.file in self.unshown:
            self.unshown[shown] = self.unshown[stmt.span.file]
            self.reached_through.add(shown)
        elif PurePath(stmt.path).suffix != MODEL_SUFFIX or real.suffix != MODEL_SUFFIX:
            self.unshown[shown] = (stmt.span, stmt.path)

    def read_file(self, stmt: ast.UseStmt, stack: Stack, real: Path) -> ast.ModelFile | None:
        """Read (the bounded reader) and parse (within the token budget) an included file."""
        shown_base = os.path.dirname(stack[-1][1]) if stack else ""
        shown = shown_path(shown_base, stmt.path, real)
        self.mark_unshown(stmt, shown, real)
        try:
            text = read_source(real)
        except SourceError as exc:
            if exc.code == "LW104":  # a .loop file inside the repository: its place may be shown
                self.errors.append(ModelError("LW104", exc.reason, Span(shown, exc.line, exc.col),
                                              "a model is plain UTF-8 text"))
            else:
                self.errors.append(ModelError("LW206", f"cannot read included file {stmt.path}: {exc.reason}",
                                              stmt.span, f"the path is relative to the folder of the file "
                                              f"that holds the `use` ({shown_base or '.'})"))
            return None
        try:
            mf = parse_text(text, shown, self.tokens_left)
        except ModelError as exc:
            self.errors.append(exc)
            self.tokens_left = 0 if exc.code == "LW108" else self.tokens_left
            return None
        self.tokens_left -= mf.tokens
        return mf

    def shown_span(self, span: Span) -> Span:
        """Where later stages point for something defined at `span`: the `use` that led to
        an unshown file, else the span itself."""
        return self.unshown.get(span.file, (span,))[0]

    def hide(self, errors: list[ModelError], findings: list[Finding]) -> tuple[list[ModelError], list[Finding]]:
        """Errors in an included file that is not a `.loop` file become one LW208 at the `use`
        that led to it (their messages quote its text); its findings point at that `use`."""
        kept, hidden = [], {}
        for err in errors:
            file = err.span.file
            if file not in self.unshown:
                kept.append(err)
                continue
            if file not in hidden:  # one error in the place of the first
                hidden[file] = len(kept)
                kept.append(None)
        for file, at in hidden.items():
            count = sum(1 for e in errors if e.span.file == file)
            span, path = self.unshown[file]
            whose = f"included file {path} uses {file}, which has" if file in self.reached_through else \
                f"included file {path} has"
            kept[at] = ModelError(
                "LW208", f"{whose} {count} error{'s' if count > 1 else ''}, not shown: only "
                f"`{MODEL_SUFFIX}` files have their lines shown", span,
                f"rename it to end in `{MODEL_SUFFIX}` to see them (or check it on its own)")
        moved = [dataclasses.replace(f, span=self.unshown[f.span.file][0]) if f.span.file in self.unshown
                 else f for f in findings]
        return kept, moved


def shown_path(shown_base: str, relative: str, real: Path) -> str:
    """An included file's name as errors show it: the including file's folder, as that
    file is shown, joined with the `use` path (relative when the model's name was), or
    the real path when links make that name lead elsewhere."""
    shown = os.path.normpath(os.path.join(shown_base, relative))
    try:
        if Path(shown).resolve() == real:
            return shown
    except (OSError, RuntimeError):
        pass
    return str(real)
