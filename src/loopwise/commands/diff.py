"""`loopwise diff`: stability changes between two files, two folders or two git revisions.

The edge of the diff: reads models (from disk or from git), checks each side
with `loopwise.analysis.check_file`, hands both result sets to the pure
comparison in `loopwise.diff` and prints one of the `report.diff_*` formats.

A model whose text and included texts are identical on both sides is checked
once (cache keyed by a hash of those texts). A revision's models are written to
a temporary folder first, so `use "other.loop"` resolves inside that revision.
"""
from __future__ import annotations

import argparse
import dataclasses
import hashlib
import os
import re
import subprocess
import sys
import tempfile
from pathlib import Path

from ..diff import DiffResult, Side, Unreadable, compare
from ..errors import Finding, Span, UsageError, render
from ..settings import Settings, load_settings, regression_problem
from .check import _jobs  # one parser of --jobs for every command

__all__ = ["add_parser", "run", "ModelChecker", "content_key"]

MODEL_SUFFIX = ".loop"
WORKING_TREE = "working tree"
_USE = re.compile(r'^[ \t]*use[ \t]+"([^"\n]*)"', re.MULTILINE)


# --------------------------------------------------------------------------- arguments

def _non_negative(unit: str, key: str):
    def convert(text: str) -> float:
        try:
            value = float(text[:-1]) / 100.0 if unit == "fraction" and text.endswith("%") else float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a number ({unit}), got {text!r}") from None
        problem = regression_problem(key, value)  # the same rule as the settings file's
        if problem:
            raise argparse.ArgumentTypeError(f"{problem} (got {text!r})")
        return value
    return convert


def add_parser(subparsers, help_text: str) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "diff", help=help_text, description=help_text + " OLD and NEW are two model files or two "
        "folders (models matched by relative path, breaks by name); with --rev the models come "
        "from git (default: REV against the working tree; two --rev: REV against REV2).",
        epilog="Exit codes: 0 no regression; 1 a regression; 2 input that could not be read "
               "(including a model that cannot be read on the new side) or a usage mistake.")
    p.add_argument("paths", nargs="*", metavar="PATH",
                   help="OLD NEW (files or folders); with --rev: files or folders to limit the diff to")
    p.add_argument("--rev", action="append", default=[], metavar="REV",
                   help="a git revision (branch, tag, commit, HEAD~1); give twice for REV vs REV2")
    p.add_argument("--format", choices=("text", "markdown", "json"), default="text",
                   help="output format (default: text)")
    p.add_argument("--output", "-o", metavar="FILE", help="write the report to FILE instead of stdout")
    p.add_argument("--jobs", "-j", type=_jobs, default=1, metavar="N",
                   help="check models in N processes (0: one per CPU; default 1)")
    p.add_argument("--max-phase-loss", type=_non_negative("deg", "phase_margin_loss_deg"), metavar="DEG",
                   help="phase margin loss that counts as a regression (default 5, common practice)")
    p.add_argument("--max-gain-loss", type=_non_negative("dB", "gain_margin_loss_db"), metavar="DB",
                   help="gain margin loss, up or down, that counts as a regression (default 2)")
    p.add_argument("--max-delay-loss", type=_non_negative("fraction", "delay_margin_loss_fraction"),
                   metavar="FRACTION",
                   help="delay margin loss as a fraction (0.2 or 20%%) that counts as a regression "
                        "(default 0.2)")
    return p


def _policy(args, settings: Settings):
    """The settings file's thresholds, with the command-line options winning."""
    overrides = {k: v for k, v in (("phase_margin_loss_deg", args.max_phase_loss),
                                   ("gain_margin_loss_db", args.max_gain_loss),
                                   ("delay_margin_loss_fraction", args.max_delay_loss))
                 if v is not None}
    return dataclasses.replace(settings.regression, **overrides)


# --------------------------------------------------------------------------- checking

def content_key(path: Path) -> str:
    """A hash of a model's text and, recursively, the texts of the files it `use`s."""
    digest = hashlib.sha256()
    seen: set[Path] = set()
    stack = [path.resolve()]
    while stack:
        current = stack.pop()
        if current in seen:
            continue
        seen.add(current)
        try:
            data = current.read_bytes()
        except OSError:
            data = b"\0missing\0"
        digest.update(len(data).to_bytes(8, "big") + data)
        text = data.decode("utf-8", errors="replace")
        stack.extend(sorted((current.parent / m).resolve() for m in _USE.findall(text)))
    return digest.hexdigest()


def _relabel(span: Span, root: Path) -> Span:
    """A span's file as a path relative to the compared root (repository or folder)."""
    try:
        rel = Path(span.file).resolve().relative_to(root).as_posix()
    except (ValueError, OSError):
        return span
    return dataclasses.replace(span, file=rel)


def _read_text(file: str) -> str | None:
    try:
        return Path(file).read_text(encoding="utf-8", errors="replace")
    except OSError:
        return None


class ModelChecker:
    """Checks model files, reusing the result when the same texts were checked before."""

    def __init__(self, settings: Settings | None, jobs: int = 1):
        self.settings = settings
        self.jobs = jobs
        self.cache: dict[tuple[str, str], Side] = {}
        self.checked = 0  # how many times the analysis actually ran

    def check(self, path: Path, label: str, root: Path) -> Side:
        return self.check_many([(path, label, root)])[0]

    def check_many(self, items: list[tuple[Path, str, Path]]) -> list[Side]:
        """(file, label, root) -> results in the same order; each distinct text checked once."""
        keys = [(label, content_key(path)) for path, label, _ in items]
        todo: dict[tuple[str, str], tuple[Path, str, Path]] = {}
        for key, item in zip(keys, items):
            if key not in self.cache:
                todo.setdefault(key, item)
        outcomes = self._outcomes([str(path) for path, _, _ in todo.values()])
        for key, (_, label, root), outcome in zip(todo, todo.values(), outcomes):
            self.cache[key] = self._side(outcome, label, root.resolve())
        self.checked += len(todo)
        return [self.cache[k] for k in keys]

    def _outcomes(self, files: list[str]) -> list[tuple]:
        # the same failure handling as `loopwise check`: located errors, never a traceback
        from ..run import check_one
        jobs = (os.cpu_count() or 1) if self.jobs == 0 else self.jobs
        if jobs <= 1 or len(files) <= 1:
            return [check_one(f, settings=self.settings) for f in files]
        from concurrent.futures import ProcessPoolExecutor
        from concurrent.futures.process import BrokenProcessPool
        with ProcessPoolExecutor(max_workers=min(jobs, len(files))) as pool:
            futures = [pool.submit(check_one, f, self.settings) for f in files]
            out = []
            for f, fut in zip(files, futures):
                try:
                    out.append(fut.result())
                except BrokenProcessPool:
                    out.append((None, (Finding("error", "LW900", "the worker process checking this "
                                               "model stopped", Span(f, 0, 0), "try --jobs 1"),)))
            return out

    def _side(self, outcome: tuple, label: str, root: Path) -> Side:
        result, errors = outcome
        if result is None:
            return self._unreadable(label, list(errors), root)
        findings = tuple(dataclasses.replace(f, span=_relabel(f.span, root)) for f in result.findings)
        return dataclasses.replace(result, file=label, findings=findings)

    @staticmethod
    def _unreadable(label: str, errors: list[Finding], root: Path) -> Unreadable:
        located = tuple(dataclasses.replace(e, span=_relabel(e.span, root)) for e in errors)
        # the source lines are read now: a revision's temporary copy is gone later
        rendered = tuple(render(e, _read_text(orig.span.file)) for e, orig in zip(located, errors))
        return Unreadable(label, located, rendered)


def _walk(folder: Path) -> list[str]:
    """Every model under a folder as a slash path relative to it (hidden folders skipped)."""
    found = []
    for here, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        found += [(Path(here) / f).relative_to(folder).as_posix()
                  for f in files if f.endswith(MODEL_SUFFIX)]
    return sorted(found)


def _selected(rel: str, settings: Settings) -> bool:
    """The settings' include / exclude globs (if any) decide which files are models."""
    if not (settings.include or settings.exclude):
        return True
    from ..run import matches_glob  # the same globs as `loopwise check`
    if settings.include and not matches_glob(rel, settings.include):
        return False
    return not (settings.exclude and matches_glob(rel, settings.exclude))


def _check_sides(checker: ModelChecker, sides: list[tuple[Path, list[str]]]) -> list[dict[str, Side]]:
    """Both sides' models (root, relative paths) checked in one batch (parallel with --jobs)."""
    items = [(root / rel, rel, root) for root, rels in sides for rel in rels]
    results = iter(checker.check_many(items))
    return [{rel: next(results) for rel in rels} for _, rels in sides]


# --------------------------------------------------------------------------- sides from disk

def _diff_paths(args, settings: Settings, checker: ModelChecker) -> DiffResult:
    if len(args.paths) != 2:
        raise UsageError("diff needs OLD and NEW (two model files or two folders), "
                         "or --rev REV (see `loopwise diff --help`)")
    old, new = (Path(p) for p in args.paths)
    for p in (old, new):
        if not p.exists():
            raise UsageError(f"no such file or folder: {p}")
    policy = _policy(args, settings)
    if old.is_file() and new.is_file():
        label = new.name if old.name == new.name else new.as_posix()
        before, after = checker.check_many([(old, label, old.parent), (new, label, new.parent)])
        return compare({label: before}, {label: after}, policy, old.as_posix(), new.as_posix())
    if old.is_dir() and new.is_dir():
        sides = _check_sides(checker, [(root, [r for r in _walk(root) if _selected(r, settings)])
                                       for root in (old, new)])
        return compare(sides[0], sides[1], policy, old.as_posix(), new.as_posix())
    raise UsageError(f"OLD and NEW must both be files or both be folders: {old}, {new}")


# --------------------------------------------------------------------------- sides from git

def _git(root: Path | None, *argv: str, stdin: bytes | None = None) -> bytes:
    try:
        done = subprocess.run(["git", *argv], cwd=root, input=stdin, capture_output=True, check=False)
    except FileNotFoundError:
        raise UsageError("--rev needs the `git` command, which was not found") from None
    if done.returncode != 0:
        message = done.stderr.decode("utf-8", "replace").strip().splitlines()
        raise UsageError(f"git {argv[0]} failed: {message[-1] if message else done.returncode}")
    return done.stdout


def _repository_root() -> Path:
    try:
        out = _git(None, "rev-parse", "--show-toplevel")
    except UsageError:
        raise UsageError("--rev works inside a git repository; this folder is not in one") from None
    return Path(out.decode().strip()).resolve()


def _commit(root: Path, rev: str) -> str:
    """The commit a revision names; a one-line usage error when there is none."""
    if not rev or rev.startswith("-"):
        raise UsageError(f"not a revision: {rev!r}")
    done = subprocess.run(["git", "rev-parse", "--verify", "--quiet", f"{rev}^{{commit}}"],
                          cwd=root, capture_output=True, check=False)
    if done.returncode != 0:
        raise UsageError(f"revision {rev!r} does not exist in {root} "
                         "(in a shallow CI clone, fetch it first)")
    return done.stdout.decode().strip()


def _materialise(root: Path, commit: str, into: Path) -> list[str]:
    """Write every model file of a commit into a folder; return their relative paths."""
    listing = _git(root, "ls-tree", "-r", "-z", "--full-tree", commit)
    entries = []
    for record in listing.split(b"\0"):
        if not record:
            continue
        meta, _, name = record.partition(b"\t")
        mode, kind, obj = meta.split()
        rel = name.decode("utf-8", "surrogateescape")
        if kind == b"blob" and mode != b"120000" and rel.endswith(MODEL_SUFFIX):
            entries.append((rel, obj.decode()))
    if not entries:
        return []
    # one `git cat-file --batch` for all blobs (same content as `git show REV:path`)
    out = _git(root, "cat-file", "--batch", stdin="".join(o + "\n" for _, o in entries).encode())
    pos = 0
    for rel, obj in entries:
        header_end = out.index(b"\n", pos)
        size = int(out[pos:header_end].split()[2])
        body = out[header_end + 1:header_end + 1 + size]
        pos = header_end + 1 + size + 1
        target = into / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(body)
    return sorted(rel for rel, _ in entries)


def _working_tree_models(root: Path) -> list[str]:
    """Tracked and untracked-but-not-ignored model files present on disk."""
    out = _git(root, "ls-files", "-z", "--cached", "--others", "--exclude-standard")
    names = {n.decode("utf-8", "surrogateescape") for n in out.split(b"\0") if n}
    return sorted(n for n in names if n.endswith(MODEL_SUFFIX) and (root / n).is_file())


def _path_filter(root: Path, paths: list[str]):
    """Keep models at or under the given files or folders (relative to the current folder)."""
    prefixes = []
    for p in paths:
        try:
            rel = Path(p).resolve().relative_to(root).as_posix()
        except ValueError:
            raise UsageError(f"{p} is outside the repository {root}") from None
        prefixes.append("" if rel == "." else rel)
    explicit = set(prefixes)

    def keep(rel: str, settings: Settings) -> bool:
        if rel in explicit:
            return True  # a file named on the command line is a model whatever the globs say
        if prefixes and not any(not p or rel.startswith(p + "/") for p in prefixes):
            return False
        return _selected(rel, settings)
    return keep


def _diff_revisions(args, settings: Settings, checker: ModelChecker) -> DiffResult:
    if len(args.rev) > 2:
        raise UsageError("give --rev once (REV against the working tree) or twice (REV against REV2)")
    root = _repository_root()
    commits = [_commit(root, rev) for rev in args.rev]
    keep = _path_filter(root, args.paths)
    labels = list(args.rev) + ([WORKING_TREE] if len(args.rev) == 1 else [])
    listed = []
    with tempfile.TemporaryDirectory(prefix="loopwise-diff-") as tmp:
        for i, label in enumerate(labels):
            if label == WORKING_TREE and i == 1:
                base, rels = root, _working_tree_models(root)
            else:
                base = Path(tmp) / f"side{i}"
                base.mkdir()
                rels = _materialise(root, commits[i], base)
            listed.append((base, [r for r in rels if keep(r, settings)]))
        sides = _check_sides(checker, listed)
    return compare(sides[0], sides[1], _policy(args, settings), labels[0], labels[1])


# --------------------------------------------------------------------------- output

def _render(result: DiffResult, fmt: str) -> str:
    if fmt == "json":
        from ..report import diff_json as reporter
    elif fmt == "markdown":
        from ..report import diff_markdown as reporter
    else:
        from ..report import diff_text as reporter
    return reporter.render(result)


def _write(text: str, output: str | None) -> None:
    if output is None:
        sys.stdout.write(text)
        return
    try:
        Path(output).write_text(text, encoding="utf-8")
    except OSError as exc:
        raise UsageError(f"cannot write {output}: {exc.strerror or exc}") from None


def run(args) -> int:
    settings = load_settings(Path.cwd())
    checker = ModelChecker(settings, args.jobs)
    result = (_diff_revisions if args.rev else _diff_paths)(args, settings, checker)
    _write(_render(result, args.format), args.output)
    if result.unreadable:
        files = ", ".join(m.file for m in result.unreadable)
        print(f"loopwise: cannot read on the new side: {files}", file=sys.stderr)
    return result.exit_code
