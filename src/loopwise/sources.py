"""The files a model reads: the model itself and, recursively, the files it `use`s.

A light scan for the edges (no parse, no numpy): the output guard (never write
a report over a model or an included file), the diff's cache key (a model is
re-checked when any of its texts changed), the revision materialiser (an
included file with any suffix comes out of git too), and naming the models
that a broken included file stops.

The scan reads with the language's bounded reader (`language.source.read_bytes`:
regular files only, never a FIFO or a device, and at most the model size limit
of each, plus one byte); what it cannot read it lists without following.
It follows the statement form of the grammar: `use "<path>"` at the start of
a line, the path relative to the folder of the file that holds the `use`.
Whether an include is allowed is the language's decision (resolve.py); the scan
only says what a model names.
"""
from __future__ import annotations

import os
import re
from dataclasses import dataclass
from pathlib import Path

from .language.source import MAX_MODEL_BYTES, SourceError, read_bytes

__all__ = ["USE", "use_targets", "Source", "model_sources", "read_regular"]

#: a `use` statement: the keyword at the start of a line, then a quoted path
USE = re.compile(r'^[ \t]*use[ \t]*"([^"\n]*)"', re.MULTILINE)


def use_targets(text: str) -> list[tuple[str, int]]:
    """The paths named by `use` statements in `text`, with their 1-based line numbers."""
    return [(m.group(1), text.count("\n", 0, m.start()) + 1) for m in USE.finditer(text)]


def read_regular(path: Path) -> bytes | None:
    """The first bytes (up to the model size limit, plus one) of a regular file;
    None for anything else (missing, a folder, a FIFO, a device, unreadable).
    The one bounded reader (`language.source.read_bytes`) does the reading."""
    try:
        return read_bytes(path, MAX_MODEL_BYTES, refuse_larger=False)
    except SourceError:
        return None


@dataclass(frozen=True)
class Source:
    """One file a model reads: where it is, its bytes (None: not readable as a
    regular file), and the file and line of the `use` that brought it in."""

    path: Path                 # the real path (symlinks followed)
    data: bytes | None
    used_by: Path | None = None
    line: int = 0


def model_sources(model: Path | str) -> list[Source]:
    """The model and every file reached from it by `use`, each once, model first
    (depth first, in the order of the `use` lines)."""
    first = Path(os.path.realpath(model))
    out: list[Source] = []
    seen: set[Path] = set()
    stack: list[tuple[Path, Path | None, int]] = [(first, None, 0)]
    while stack:
        path, used_by, line = stack.pop()
        if path in seen:
            continue
        seen.add(path)
        data = read_regular(path)
        out.append(Source(path, data, used_by, line))
        if data is None:
            continue
        text = data.decode("utf-8", errors="replace")
        found = [(Path(os.path.realpath(path.parent / target)), n)
                 for target, n in use_targets(text) if target and "\0" not in target]
        stack.extend((p, path, n) for p, n in reversed(found))
    return out
