"""One progress bar for every command that works through many items (check, report,
plot, sweep).

    with progress_bar("checking", len(files), enabled=wants_progress()) as tick:
        for f in files:
            ...
            tick()

The bar is transient (it disappears when done), goes to stderr, and is drawn
only when asked, on an interactive terminal (`wants_progress`), and for at
least `PROGRESS_MIN_ITEMS` items; otherwise `tick` does nothing. Work whose
size is found as it goes (a sweep's local search) passes `total=None`: the bar
then counts without an end, and `tick(n)` adds n finished items at once. rich is
imported only when a bar is really drawn.
"""
from __future__ import annotations

import os
import sys
from contextlib import contextmanager
from typing import Callable, Iterator

__all__ = ["PROGRESS_MIN_ITEMS", "progress_bar", "wants_progress", "is_terminal"]

#: below this many items a progress bar is more flicker than help
PROGRESS_MIN_ITEMS = 6


def is_terminal(stream) -> bool:
    """Whether `stream` is an interactive terminal (not a file, a pipe or a closed stream)."""
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False


def wants_progress(stream=None) -> bool:
    """A progress bar only on an interactive terminal, never in a CI log."""
    stream = stream or sys.stderr
    if os.environ.get("CI") or os.environ.get("TERM") == "dumb":
        return False
    return is_terminal(stream)


@contextmanager
def progress_bar(label: str, total: int | None, enabled: bool = True,
                 min_items: int = PROGRESS_MIN_ITEMS) -> Iterator[Callable[..., None]]:
    """A context giving `tick(n=1)`, to call as items finish.

    `label` is the word shown before the bar ("checking", "drawing"); `total` the
    number of items, or None when it is not known beforehand; `enabled` is the
    caller's decision (usually `not args.no_progress and wants_progress()`).
    """
    if not enabled or (total is not None and total < min_items):
        yield lambda n=1: None
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, \
        TimeElapsedColumn

    bar = Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(), TimeElapsedColumn(),
                   console=Console(stderr=True), transient=True)
    task = bar.add_task(label, total=total)
    bar.start()
    try:
        yield lambda n=1: bar.advance(task, n)
    finally:
        bar.stop()
