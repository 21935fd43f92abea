"""After the design: a bounded local search for each worst margin, and stability
boundaries by bisection. Pure logic over an `Evidence` store; the plants are
evaluated in batches by the callable it was given, so every round of every search
is one batch (what a process pool, a cluster or a batched engine wants).

Local search (a compass search: Torczon, "On the convergence of pattern search
algorithms", SIAM J. Optim. 7(1), 1997): from the worst plant found for each
(break, margin), probe one step up and down along every ranged param (in the unit
cube, clipped to the box); move to the worst probe when it is worse than the centre,
otherwise halve the step. A search ends after `ROUNDS` rounds or when its step falls
below 1/64 of where it began; all searches together evaluate at most `budget` new
plants (the first round that does not fit stops them all, and the result says so).

Boundaries: for an unstable plant, the nearest stable plant found (Euclidean
distance in the unit cube); up to `MAX_BOUNDARIES` such pairs per break, the closest
first, their midpoints at least `BOUNDARY_SEPARATION` apart; each segment is
bisected `BISECTION_STEPS` times, keeping one stable and one unstable end (brackets
that end within half that separation of one reported before are reported once).
"""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from .evaluate import SampleOutcome

__all__ = ["Evidence", "WORST", "Target", "badness", "local_search", "boundaries", "ROUNDS",
           "MAX_BOUNDARIES", "BISECTION_STEPS", "BOUNDARY_SEPARATION", "search_budget"]

#: (metric, sense): sense -1 means the smallest value is the worst, +1 the largest
WORST: tuple[tuple[str, int], ...] = (
    ("phase_margin", -1), ("gain_margin_up", -1), ("gain_margin_down", -1), ("delay_margin", -1),
    ("disk_margin", -1), ("sensitivity_peak", +1), ("complementary_peak", +1),
)
ROUNDS = 12
MAX_BOUNDARIES = 4
BISECTION_STEPS = 12
BOUNDARY_SEPARATION = 0.1


def search_budget(samples: int, dim: int) -> int:
    """New plants the local search may evaluate: half the space-filling set, and at least
    one full search (ROUNDS rounds of 2 probes per ranged param)."""
    return max(samples // 2, 2 * dim * ROUNDS) if dim else 0


class Evidence:
    """Every plant evaluated so far, in order: unit-cube point, outcome, phase.

    `run` evaluates only points not seen before (exact repeats are looked up), so a
    probe shared by several searches costs one plant.
    """

    def __init__(self, evaluate: Callable[[np.ndarray], list[SampleOutcome]], dim: int):
        self._evaluate = evaluate
        self.dim = dim
        self.points: list[np.ndarray] = []
        self.outcomes: list[SampleOutcome] = []
        self.phases: list[str] = []
        self._index: dict[bytes, int] = {}

    def __len__(self) -> int:
        return len(self.outcomes)

    def _key(self, p: np.ndarray) -> bytes:
        return np.asarray(p, float).round(15).tobytes()

    def new_points(self, unit: np.ndarray) -> list[np.ndarray]:
        """The points of `unit` not evaluated before, each once, in order."""
        fresh, keys = [], set()
        for p in np.asarray(unit, float).reshape(-1, self.dim):
            k = self._key(p)
            if k not in self._index and k not in keys:
                keys.add(k)
                fresh.append(p)
        return fresh

    def run(self, unit, phase: str) -> list[int]:
        """Evaluate the points not seen before (one batch); the evidence index of every point."""
        unit = np.asarray(unit, float).reshape(-1, self.dim)
        fresh = self.new_points(unit)
        if fresh:
            outcomes = self._evaluate(np.array(fresh))
            for p, o in zip(fresh, outcomes):
                self._index[self._key(p)] = len(self.outcomes)
                self.points.append(p)
                self.outcomes.append(o)
                self.phases.append(phase)
        return [self._index[self._key(p)] for p in unit]

    def add(self, point, outcome: SampleOutcome, phase: str) -> None:
        """Record a plant evaluated elsewhere (the nominal point, checked in full)."""
        point = np.asarray(point, float).reshape(self.dim)
        self._index.setdefault(self._key(point), len(self.outcomes))
        self.points.append(point)
        self.outcomes.append(outcome)
        self.phases.append(phase)

    def count(self, phase: str) -> int:
        """How many plants the step `phase` chose (`nominal`, `corners`, ...)."""
        return self.phases.count(phase)


@dataclass(frozen=True)
class Target:
    """What the local search drives towards its worst: one metric at one break, and which
    way is worse."""

    brk: int     # break index in model order
    metric: str
    sense: int   # -1: smallest is worst; +1: largest is worst


def badness(outcome: SampleOutcome, target: Target) -> float | None:
    """How bad a plant is for one target (larger is worse); None when the break is not
    stable there (no margins) or the plant could not be analysed."""
    if outcome.error is not None or target.brk >= len(outcome.breaks):
        return None
    b = outcome.breaks[target.brk]
    value = b.value(target.metric) if b.stable else None
    if value is None or math.isnan(value):
        return None
    return target.sense * value


def worst_index(evidence: Evidence, target: Target) -> int | None:
    """The first plant with the largest badness (evaluation order breaks ties)."""
    best, where = -math.inf, None
    for i, o in enumerate(evidence.outcomes):
        v = badness(o, target)
        if v is not None and (where is None or v > best):
            best, where = v, i
    return where


@dataclass
class _Search:
    target: Target
    centre: np.ndarray
    score: float
    step: float
    min_step: float
    rounds: int = 0
    done: bool = False

    def probes(self) -> np.ndarray:
        dim = self.centre.size
        steps = np.vstack([np.eye(dim), -np.eye(dim)]) * self.step
        probes = np.clip(self.centre + steps, 0.0, 1.0)
        return probes[np.any(probes != self.centre, axis=1)]


def local_search(evidence: Evidence, targets: Sequence[Target], start_step: float, budget: int) -> bool:
    """Run the compass searches of `targets` (those with a finite worst); True when the
    budget stopped them before they finished."""
    searches = []
    for t in targets:
        i = worst_index(evidence, t)
        if i is None or not math.isfinite(badness(evidence.outcomes[i], t)):
            continue
        searches.append(_Search(t, evidence.points[i].copy(), badness(evidence.outcomes[i], t),
                                start_step, start_step / 64.0))
    used = 0
    while True:
        active = [s for s in searches if not s.done]
        if not active:
            return False
        probes = [s.probes() for s in active]
        fresh = evidence.new_points(np.vstack(probes)) if any(p.size for p in probes) else []
        if used + len(fresh) > budget:
            return True
        used += len(fresh)
        sizes = [len(p) for p in probes]
        indices = evidence.run(np.vstack(probes), "local_search") if sum(sizes) else []
        start = 0
        for s, p, n in zip(active, probes, sizes):  # one batch per round, for every search
            _advance(s, p, indices[start:start + n], evidence)
            start += n


def _advance(s: _Search, probes: np.ndarray, indices: list[int], evidence: Evidence) -> None:
    scores = [badness(evidence.outcomes[i], s.target) for i in indices]
    best = max((v for v in scores if v is not None), default=None)
    if best is not None and best > s.score + 1e-12 * max(1.0, abs(s.score)):
        k = scores.index(best)
        s.centre, s.score = probes[k].copy(), best
    else:
        s.step /= 2.0
    s.rounds += 1
    s.done = s.rounds >= ROUNDS or s.step < s.min_step


@dataclass(frozen=True)
class Bracket:
    """A stretch of a segment where a break's stability is lost: stable and unstable ends
    (unit-cube points); the boundary lies between them."""

    stable: np.ndarray
    unstable: np.ndarray


def _stable_at(o: SampleOutcome, brk: int) -> bool | None:
    if o.error is not None or brk >= len(o.breaks):
        return None
    return o.breaks[brk].stable


def _pairs(evidence: Evidence, brk: int) -> list[tuple[int, int]]:
    states = [_stable_at(o, brk) for o in evidence.outcomes]
    stable = [i for i, s in enumerate(states) if s is True]
    unstable = [i for i, s in enumerate(states) if s is False]
    if not stable or not unstable:
        return []
    S = np.array([evidence.points[i] for i in stable])
    pairs = []
    for u in unstable:
        d = np.linalg.norm(S - evidence.points[u], axis=1)
        k = int(np.argmin(d))
        pairs.append((float(d[k]), u, stable[k]))
    pairs.sort()
    chosen, mids = [], []
    for _, u, s in pairs:
        mid = (evidence.points[u] + evidence.points[s]) / 2.0
        if all(np.linalg.norm(mid - m) >= BOUNDARY_SEPARATION for m in mids):
            chosen.append((s, u))
            mids.append(mid)
            if len(chosen) == MAX_BOUNDARIES:
                break
    return chosen


def boundaries(evidence: Evidence, n_breaks: int) -> list[list[Bracket]]:
    """Per break, the brackets around where stability is lost (bisected in lockstep)."""
    state = []  # (break, stable end, unstable end, live)
    for brk in range(n_breaks):
        for s, u in _pairs(evidence, brk):
            state.append([brk, evidence.points[s].copy(), evidence.points[u].copy(), True])
    for _ in range(BISECTION_STEPS):
        live = [st for st in state if st[3]]
        if not live:
            break
        mids = np.array([(st[1] + st[2]) / 2.0 for st in live])
        for st, i in zip(live, evidence.run(mids, "boundary")):
            verdict = _stable_at(evidence.outcomes[i], st[0])
            mid = evidence.points[i]
            if verdict is None:
                st[3] = False  # not analysable there: keep the bracket found so far
            elif verdict:
                st[1] = mid.copy()
            else:
                st[2] = mid.copy()
    out: list[list[Bracket]] = [[] for _ in range(n_breaks)]
    for brk, s, u, _ in state:
        # pairs that started apart may end at the same stretch of the boundary: report it once
        if all(np.linalg.norm((s + u) / 2.0 - (k.stable + k.unstable) / 2.0) >= BOUNDARY_SEPARATION / 2.0
               for k in out[brk]):
            out[brk].append(Bracket(s, u))
    return out
