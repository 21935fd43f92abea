"""The two sides of `loopwise diff`: which models each side holds, their results,
and the settings they are judged with.

Sides come from two files, two folders (`from_paths`) or git revisions
(`from_revisions`, the git plumbing in `loopwise.revisions`). Models are found
as `loopwise check` finds them (`loopwise.run.models_in`) and checked by its
runner (`loopwise.run.check_outcomes`: the shared process pool, the same
failure handling), and a model whose text and included texts are identical on
both sides is checked once (`content_key`). The comparison itself is
`loopwise.compare` (no I/O).

Settings: the folder forms use the settings found from the working directory
(or `--config`). With `--rev` the settings come from the base revision (the
first `--rev`): its thresholds gate the diff, its requirements are judged on
both sides and its include/exclude globs pick the models, so a change under
review cannot loosen its own gate. `--config` names a file to use instead.
"""
from __future__ import annotations

import dataclasses
import hashlib
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from .compare import Side, Unreadable
from .errors import Finding, Span, UsageError, render
from .output import Protected, protected_inputs
from .revisions import (WORKING_TREE, commit_of, materialise, repository_root, settings_at,
                        working_tree_models)

__all__ = ["Sides", "ModelChecker", "content_key", "from_paths", "from_revisions"]


@dataclass(frozen=True)
class Sides:
    """Both sides' results keyed by relative path, with what they were judged by."""

    old: dict[str, Side]
    new: dict[str, Side]
    old_label: str
    new_label: str
    settings: object          # loopwise.settings.Settings
    settings_note: str        # which settings, in words, for the report


def content_key(path: Path) -> str:
    """A hash of a model's text and, recursively, the texts of the files it `use`s."""
    from .sources import model_sources

    digest = hashlib.sha256()
    for source in model_sources(path):
        data = b"\0missing\0" if source.data is None else source.data
        digest.update(len(data).to_bytes(8, "big") + data)
    return digest.hexdigest()


def _relabel(span: Span, root: Path) -> Span:
    """A span's file as a path relative to the compared root (repository or folder)."""
    try:
        rel = Path(span.file).resolve().relative_to(root).as_posix()
    except (ValueError, OSError, RuntimeError):
        return span
    return dataclasses.replace(span, file=rel)


def _read_text(file: str) -> str | None:
    from .sources import read_regular

    data = read_regular(Path(file))
    return None if data is None else data.decode("utf-8", errors="replace")


class ModelChecker:
    """Checks model files, reusing the result when the same texts were checked before."""

    def __init__(self, settings, jobs: int = 1):
        self.settings = settings
        self.jobs = jobs
        self.cache: dict[tuple[str, str], Side] = {}
        self.checked = 0  # how many times the analysis actually ran

    def check_many(self, items: list[tuple[Path, str, Path]]) -> list[Side]:
        """(file, label, root) -> results in the same order; each distinct text checked once."""
        from .run import check_outcomes

        keys = [(label, content_key(path)) for path, label, _ in items]
        todo: dict[tuple[str, str], tuple[Path, str, Path]] = {}
        for key, item in zip(keys, items):
            if key not in self.cache:
                todo.setdefault(key, item)
        # each side's includes stay inside that side's tree (a revision's copy has no .git)
        outcomes = check_outcomes([path for path, _, _ in todo.values()], self.settings, self.jobs,
                                  roots=[root for _, _, root in todo.values()])
        for key, (_, label, root), outcome in zip(todo, todo.values(), outcomes):
            self.cache[key] = self._side(outcome, label, root.resolve())
        self.checked += len(todo)
        return [self.cache[k] for k in keys]

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


def _check_sides(checker: ModelChecker, sides: list[tuple[Path, list[str]]]) -> list[dict[str, Side]]:
    """Both sides' models (root, relative paths) checked in one batch (parallel with --jobs)."""
    items = [(root / rel, rel, root) for root, rels in sides for rel in rels]
    results = iter(checker.check_many(items))
    return [{rel: next(results) for rel in rels} for _, rels in sides]


def _settings_words(settings, how: str = "") -> str:
    source = getattr(settings, "source", None)
    return f"{source}{how}" if source else "defaults (no settings file)"


Guard = Callable[[Protected], None]


# --- sides from disk ------------------------------------------------------------------

def _folder_models(root: Path, settings) -> list[str]:
    from .run import models_in  # the same walk and globs as `loopwise check`

    return [f.relative_to(root).as_posix() for f in models_in(root, settings, base=root)]


def from_paths(paths: list[str], settings, jobs: int = 1, guard: Guard | None = None,
               from_config: bool = False) -> Sides:
    """OLD and NEW: two model files, or two folders (models matched by relative path)."""
    if len(paths) != 2:
        raise UsageError("diff needs OLD and NEW (two model files or two folders), "
                         "or --rev REV (see `loopwise diff --help`)")
    old, new = (Path(p) for p in paths)
    for p in (old, new):
        if not p.exists():
            raise UsageError(f"no such file or folder: {p}")
    note = _settings_words(settings, " (--config)" if from_config else "")
    checker = ModelChecker(settings, jobs)
    if old.is_file() and new.is_file():
        if guard:
            guard(protected_inputs([old, new], settings))
        label = new.name if old.name == new.name else new.as_posix()
        before, after = checker.check_many([(old, label, old.parent), (new, label, new.parent)])
        return Sides({label: before}, {label: after}, old.as_posix(), new.as_posix(), settings, note)
    if old.is_dir() and new.is_dir():
        listed = [(root, _folder_models(root, settings)) for root in (old, new)]
        if guard:
            guard(protected_inputs([root / rel for root, rels in listed for rel in rels], settings))
        before, after = _check_sides(checker, listed)
        return Sides(before, after, old.as_posix(), new.as_posix(), settings, note)
    raise UsageError(f"OLD and NEW must both be files or both be folders: {old}, {new}")


# --- sides from git ---------------------------------------------------------------------

def _path_filter(root: Path, paths: list[str]):
    """Keep models at or under the given files or folders (relative to the current folder)."""
    from .run import matches_glob  # the same globs as `loopwise check`

    prefixes = []
    for p in paths:
        try:
            rel = Path(p).resolve().relative_to(root).as_posix()
        except ValueError:
            raise UsageError(f"{p} is outside the repository {root}") from None
        prefixes.append("" if rel == "." else rel)
    explicit = set(prefixes)

    def keep(rel: str, settings) -> bool:
        if rel in explicit:
            return True  # a file named on the command line is a model whatever the globs say
        if prefixes and not any(not p or rel.startswith(p + "/") for p in prefixes):
            return False
        if settings.include and not matches_glob(rel, settings.include):
            return False
        return not (settings.exclude and matches_glob(rel, settings.exclude))
    return keep


def from_revisions(revs: list[str], paths: list[str], settings=None, jobs: int = 1,
                   guard: Guard | None = None) -> Sides:
    """REV against the working tree, or REV against REV2, inside the current repository.

    `settings` (from `--config`) is used for both sides when given; otherwise the
    base revision's own settings are."""
    if len(revs) > 2:
        raise UsageError("give --rev once (REV against the working tree) or twice (REV against REV2)")
    root = repository_root()
    commits = [commit_of(root, rev) for rev in revs]
    keep = _path_filter(root, paths)
    labels = list(revs) + ([WORKING_TREE] if len(revs) == 1 else [])
    if guard:
        # whatever the sides, never write over a model or an included file of the work tree
        guard(protected_inputs([root / rel for rel in working_tree_models(root)], settings))
    with tempfile.TemporaryDirectory(prefix="loopwise-diff-") as tmp:
        folders = [root if label == WORKING_TREE else Path(tmp) / f"side{i}"
                   for i, label in enumerate(labels)]
        for folder in folders[:len(commits)]:
            folder.mkdir()
        if settings is None:
            # read into the base side's copy, so a located settings error names
            # the file relative to the repository, like the models' errors
            settings, where = settings_at(root, commits[0], folders[0], Path.cwd())
            note = (f"{where} at {labels[0]} (the base revision; the other side's settings "
                    "are not used)" if where else
                    f"defaults ({labels[0]}, the base revision, holds no settings file)")
        else:
            note = _settings_words(settings, " (--config)")
        listed = []
        for i, folder in enumerate(folders):
            rels = (working_tree_models(root) if labels[i] == WORKING_TREE
                    else materialise(root, commits[i], folder))
            listed.append((folder, [r for r in rels if keep(r, settings)]))
        before, after = _check_sides(ModelChecker(settings, jobs), listed)
    return Sides(before, after, labels[0], labels[1], settings, note)
