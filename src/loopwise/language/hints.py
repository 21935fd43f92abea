""""Did you mean" hints: one rule for every misspelt name, statement word,
metric, break or signal.

A known name is suggested when it is within a few edits of the name written,
ignoring case: an edit adds, drops or changes one character or swaps two
neighbours (the optimal string alignment distance). Names of one character
match only when they differ in case, names of 2 to 4 characters allow one
edit, longer names two. The nearest name wins; ties go to the one that also
matches in case, then to the one listed (defined) first.

The search is bounded, so that a model with thousands of unknown names is
still read in linear time: names longer than `MAX_NAME` characters get no
hint, one search compares at most `MAX_COMPARED` names of a fitting length,
and one model gets at most `MAX_SEARCHES` searches (`Hints`); the same
unknown name asked again reuses the answer.
"""
from __future__ import annotations

from typing import Callable, Iterable

__all__ = ["MAX_NAME", "MAX_COMPARED", "MAX_SEARCHES", "allowed_edits", "edit_distance",
           "closest", "did_you_mean", "Hints"]

#: longer names get no hint (they are not typed by hand)
MAX_NAME = 40
#: names of a fitting length compared per search
MAX_COMPARED = 500
#: searches per model (`Hints`); later unknown names get the plain hint
MAX_SEARCHES = 20


def allowed_edits(length: int) -> int:
    """Edits allowed between a name of this length and a suggestion."""
    return 0 if length <= 1 else 1 if length <= 4 else 2


def edit_distance(a: str, b: str, limit: int) -> int:
    """The optimal string alignment distance of a and b, or limit + 1 when it exceeds limit.

    Only the band of width 2*limit + 1 around the diagonal is computed: a cell
    further out already costs more than limit.
    """
    la, lb = len(a), len(b)
    if abs(la - lb) > limit:
        return limit + 1
    over = limit + 1
    before = None
    prev = [j if j <= limit else over for j in range(lb + 1)]
    for i in range(1, la + 1):
        cur = [over] * (lb + 1)
        cur[0] = i if i <= limit else over
        lo, hi = max(1, i - limit), min(lb, i + limit)
        ai = a[i - 1]
        for j in range(lo, hi + 1):
            v = min(prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (ai != b[j - 1]))
            if before is not None and j > 1 and ai == b[j - 2] and a[i - 2] == b[j - 1]:
                v = min(v, before[j - 2] + 1)
            cur[j] = min(v, over)
        if min(cur[max(0, lo - 1):hi + 1]) > limit:
            return over
        before, prev = prev, cur
    return prev[lb]


def closest(name: str, options: Iterable[str]) -> str | None:
    """The known name to suggest for `name` (see the module's rule), or None."""
    n = len(name)
    if not 0 < n <= MAX_NAME:
        return None
    limit = allowed_edits(n)
    low = name.lower()
    best: tuple | None = None
    compared = 0
    for index, option in enumerate(options):
        if option == name or abs(len(option) - n) > limit:
            continue
        compared += 1
        if compared > MAX_COMPARED:
            break
        d = edit_distance(low, option.lower(), limit)
        if d > limit:
            continue
        rank = (d, edit_distance(name, option, limit + 2), index, option)
        if best is None or rank < best:
            best = rank
    return None if best is None else best[3]


def did_you_mean(name: str, options: Iterable[str]) -> str | None:
    """`did you mean `x`?` for the closest known name, or None."""
    match = closest(name, options)
    return None if match is None else f"did you mean `{match}`?"


class Hints:
    """The hints of one model: at most `MAX_SEARCHES` searches, answers remembered.

    `options` is a callable so that no list of names is built once the
    searches are used up.
    """

    def __init__(self, searches: int = MAX_SEARCHES):
        self.left = searches
        self.found: dict[tuple[str, str], str | None] = {}

    def did_you_mean(self, name: str, options: Callable[[], Iterable[str]], kind: str = "") -> str | None:
        """`did you mean `<name>`?` for the closest of `options` to `name` (None: none is
        close, or the searches are used up); `kind` keeps answers for different kinds of
        name apart."""
        key = (kind, name)
        if key not in self.found:
            if self.left <= 0:
                return None
            self.left -= 1
            self.found[key] = closest(name, options())
        match = self.found[key]
        return None if match is None else f"did you mean `{match}`?"
