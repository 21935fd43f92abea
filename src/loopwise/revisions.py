"""Models from git revisions, for `loopwise diff --rev`.

A revision's models are written into a folder of our own (a temporary one), so
that `use "other.loop"` resolves within the same revision. The tree of a commit
is untrusted input (a pull request, a fetched branch): every path is checked
before anything is written, and a tree with a path that is absolute, has an
empty, `.` or `..` part, or would land outside the target folder is refused as
a whole (a usage error naming the path; exit 2); so is a `.git` part. Symbolic links in the tree
are never written.

Written are every `*.loop` file of the revision and every file a model `use`s,
whatever its suffix, if the revision holds it (found with the same light scan
as the rest of the edges, `loopwise.sources`). Settings for a revision are read
from the same revision (`settings_at`).

Only the standard library; git runs as a subprocess (`git` must be on PATH).
"""
from __future__ import annotations

import os
import posixpath
import subprocess
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from .errors import UsageError, display_name, printable

__all__ = ["WORKING_TREE", "TreeEntry", "repository_root", "commit_of", "tree_entries",
           "safe_relative", "materialise", "working_tree_models", "settings_at"]

WORKING_TREE = "working tree"
MODEL_SUFFIX = ".loop"
_SYMLINK = b"120000"


@dataclass(frozen=True)
class TreeEntry:
    """One regular file of a commit's tree: its path and its blob."""

    path: str    # slash-separated, relative to the repository root
    object: str  # the blob's id


def _git(root: Path | None, *argv: str, stdin: bytes | None = None) -> bytes:
    try:
        done = subprocess.run(["git", *argv], cwd=root, input=stdin, capture_output=True,
                              check=False)
    except FileNotFoundError:
        raise UsageError("--rev needs the `git` command, which was not found") from None
    if done.returncode != 0:
        message = done.stderr.decode("utf-8", "replace").strip().splitlines()
        raise UsageError(f"git {argv[0]} failed: {message[-1] if message else done.returncode}")
    return done.stdout


def repository_root() -> Path:
    """The top folder of the git work tree holding the working directory."""
    try:
        out = _git(None, "rev-parse", "--show-toplevel")
    except UsageError:
        raise UsageError("--rev works inside a git repository; this folder is not in one") from None
    return Path(os.fsdecode(out.rstrip(b"\n"))).resolve()


def commit_of(root: Path, rev: str) -> str:
    """The commit a revision names; a one-line usage error when there is none."""
    if not rev or rev.startswith("-"):
        raise UsageError(f"not a revision: {rev!r}")
    done = subprocess.run(["git", "rev-parse", "--verify", "--quiet", f"{rev}^{{commit}}"],
                          cwd=root, capture_output=True, check=False)
    if done.returncode != 0:
        raise UsageError(f"revision {rev!r} does not exist in {root} "
                         "(in a shallow CI clone, fetch it first)")
    return done.stdout.decode().strip()


def safe_relative(path: str) -> bool:
    """A tree path that stays inside the folder it is written into: relative, no
    empty, `.`, `..` or `.git` part (git refuses those in a checkout too), no NUL.
    (A backslash is an ordinary character in a POSIX file name.)"""
    if not path or path.startswith("/") or "\0" in path:
        return False
    return all(part not in ("", ".", "..") and part.lower() != ".git" for part in path.split("/"))


def _shown(path: str) -> str:
    """A tree path safe to quote in a message (the one sanitiser, `errors.printable`)."""
    return printable(display_name(path), keep="")


@lru_cache(maxsize=8)
def tree_entries(root: Path, commit: str) -> tuple[TreeEntry, ...]:
    """Every regular file (blob, not a symbolic link) of a commit's tree.

    Raises UsageError when any path of the tree is unsafe (see `safe_relative`):
    a tree like that was made on purpose, and none of it is read."""
    listing = _git(root, "ls-tree", "-r", "-z", "--full-tree", commit)
    entries = []
    for record in listing.split(b"\0"):
        if not record:
            continue
        meta, _, name = record.partition(b"\t")
        mode, kind, obj = meta.split()
        path = os.fsdecode(name)
        if not safe_relative(path):
            raise UsageError(f"revision {commit[:12]} holds an unsafe path {_shown(path)!r} "
                             "(absolute, or with an empty, '.', '..' or '.git' part); "
                             "refusing to read it")
        if kind == b"blob" and mode != _SYMLINK:
            entries.append(TreeEntry(path, obj.decode()))
    return tuple(entries)


def _target(into: Path, rel: str) -> Path:
    """Where `rel` is written under `into`; refused if it would land anywhere else."""
    if not safe_relative(rel):
        raise UsageError(f"unsafe path {_shown(rel)!r}; refusing to write it")
    target = into / rel
    base = os.path.realpath(into)
    real = os.path.realpath(target)
    if os.path.commonpath([base, real]) != base or real == base:
        raise UsageError(f"path {_shown(rel)!r} would be written outside {into}; refusing")
    return target


def _blobs(root: Path, objects: list[str]) -> list[bytes]:
    """The contents of these blobs, with one `git cat-file --batch` (the same
    bytes `git show REV:path` prints)."""
    if not objects:
        return []
    out = _git(root, "cat-file", "--batch", stdin="".join(o + "\n" for o in objects).encode())
    bodies, pos = [], 0
    for obj in objects:
        header_end = out.index(b"\n", pos)
        header = out[pos:header_end].split()
        if len(header) != 3:
            raise UsageError(f"git object {obj} is not in this clone (fetch the revision first)")
        size = int(header[2])
        bodies.append(out[header_end + 1:header_end + 1 + size])
        pos = header_end + 1 + size + 1
    return bodies


def _included(rel: str, data: bytes) -> list[str]:
    """The tree paths a file's `use` statements name (relative to its folder);
    paths that leave the tree are not followed."""
    from .sources import use_targets

    folder = posixpath.dirname(rel)
    out = []
    for target, _ in use_targets(data.decode("utf-8", errors="replace")):
        if not target or target.startswith("/"):
            continue
        joined = posixpath.normpath(posixpath.join(folder, target))
        if safe_relative(joined):
            out.append(joined)
    return out


def materialise(root: Path, commit: str, into: Path) -> list[str]:
    """Write a commit's models, and the files they `use`, under `into`; return the
    models' relative paths (sorted)."""
    by_path = {e.path: e for e in tree_entries(root, commit)}
    models = sorted(p for p in by_path if p.endswith(MODEL_SUFFIX))
    written: set[str] = set()
    todo = list(models)
    while todo:
        batch = [p for p in dict.fromkeys(todo) if p not in written and p in by_path]
        todo = []
        for rel, body in zip(batch, _blobs(root, [by_path[p].object for p in batch])):
            target = _target(into, rel)
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(body)
            written.add(rel)
            todo += _included(rel, body)
    return models


def working_tree_models(root: Path) -> list[str]:
    """Tracked and untracked-but-not-ignored model files present on disk."""
    out = _git(root, "ls-files", "-z", "--cached", "--others", "--exclude-standard")
    names = {os.fsdecode(n) for n in out.split(b"\0") if n}
    return sorted(n for n in names if n.endswith(MODEL_SUFFIX) and (root / n).is_file())


def settings_at(root: Path, commit: str, side: Path, start: Path):
    """The settings a revision holds for work started in `start` (a folder of the
    work tree): the nearest loopwise.toml or pyproject.toml with [tool.loopwise]
    from that folder up to the repository root, read from the revision itself.
    Returns (Settings, the file's path relative to the repository root or None)."""
    from .settings import Settings, find_config, load_settings_file

    try:
        rel = start.resolve().relative_to(root)
    except ValueError:
        rel = Path()
    folders = [rel, *rel.parents]
    by_path = {e.path: e for e in tree_entries(root, commit)}
    names = [(f / n).as_posix() for f in folders for n in ("loopwise.toml", "pyproject.toml")]
    present = [n for n in names if n in by_path]
    for name, body in zip(present, _blobs(root, [by_path[n].object for n in present])):
        target = _target(side, name)
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_bytes(body)
    # find_config stops at the first folder that holds `.git`: mark the copy's root
    # so the search never climbs out of it into the temporary folder's parents
    (side / ".git").touch()
    found = find_config(side / rel)
    if found is None:
        return Settings(), None
    path = found[0]
    return load_settings_file(path), path.relative_to(side).as_posix()
