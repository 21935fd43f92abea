"""One component's elimination program: the kept signals, the order of the rest (reduce stage).

Local node numbers put the kept signals K first (0 .. |K| - 1) and the eliminated
ones H after, in topological order (H carries no loop). `feeds[node]` lists the terms
(bank position, local source) of that node's equation; `inject[node]` the cut terms
(bank position, break column) whose head it is. Propagating through H in that order
gives the Schur complement S = A_KK + A_KH (I - A_HH)^-1 A_HK and every break's
injection U at once (I - A_HH is unit triangular: det(I - A_c) = det(I - S)).

Eliminating H needs no pivoting, but a term that is huge at s (next to its own pole)
is then multiplied into every path through it. A component therefore keeps a second
program per pole p on or right of the imaginary axis, with the outputs of the terms
that have that pole kept too: points within a small radius of p use it, so the huge
values sit in S where the pivoted solve handles them (docs/method.md).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Program", "build_program", "solve"]


def solve(M: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Batched solve; a point where the matrix is singular (s on a pole) gives NaN there."""
    try:
        return np.linalg.solve(M, b)
    except np.linalg.LinAlgError:
        out = np.full(b.shape, np.nan + 0j)
        for i in range(M.shape[0]):
            try:
                out[i] = np.linalg.solve(M[i], b[i])
            except np.linalg.LinAlgError:
                pass
        return out


def _logdet(M: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    if M.shape[1] == 1:
        d = M[:, 0, 0]
        return np.angle(d), np.log(np.abs(d))
    sign, logabs = np.linalg.slogdet(M)
    return np.angle(sign), logabs


@dataclass(frozen=True, eq=False)
class Program:
    """Elimination order and propagation tables of one component (see the module text)."""

    kept: tuple[int, ...]  # global signal indices, first in the local order
    feeds: tuple[tuple[tuple[int, int], ...], ...]
    inject: tuple[tuple[tuple[int, int], ...], ...]
    measured: tuple[int, ...]  # per break: local node of its signal (kept)
    cuts: tuple[frozenset[int], ...]  # per break: bank positions of its cut terms
    head: dict  # bank position -> local node it feeds

    @property
    def n_kept(self) -> int:
        return len(self.kept)

    # --- every break at once (Sherman-Morrison) -------------------------------------
    def values(self, V: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Phase and log|.| of det(I - A_c), and g_k = e_sig^T (I - S)^-1 U_k for every break."""
        m = V.shape[0]
        S, U = self._reduced(V, m)
        M = np.eye(self.n_kept)[None] - S
        phase, logabs = _logdet(M)
        if not U.shape[2]:
            return phase, logabs, np.zeros((m, 0), complex)
        if self.n_kept == 1:
            X = U / M[:, :1, :1]
        else:
            # one step of iterative refinement: where the loops' gains are huge (integrators
            # at low frequency) the solve alone leaves noise far above a tiny g_k
            X = solve(M, U)
            X = X + solve(M, U - M @ X)
        rows = np.array(self.measured, dtype=int)
        return phase, logabs, X[:, rows, np.arange(rows.size)]

    def _reduced(self, V: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray]:
        nk = self.n_kept
        width = nk + len(self.measured)
        X: list[np.ndarray | None] = [None] * len(self.feeds)
        rows = np.zeros((m, nk, width), complex)
        for node in list(range(nk, len(self.feeds))) + list(range(nk)):
            acc = rows[:, node] if node < nk else np.zeros((m, width), complex)
            for p, src in self.feeds[node]:
                if src < nk:
                    acc[:, src] += V[:, p]
                else:
                    acc += V[:, p, None] * X[src]
            for p, b in self.inject[node]:
                acc[:, nk + b] += V[:, p]
            if node >= nk:
                X[node] = acc
        return rows[:, :, :nk], rows[:, :, nk:]

    # --- one break with its wires cut -------------------------------------------------
    def direct(self, V: np.ndarray, b: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Phase and log|.| of det(I - A_k), and L_k, with break b's wires cut.

        The cut terms only inject (no subtraction forms S_k), and one step of iterative
        refinement with the residual of the whole, unreduced system (I - A_k) x = u_k
        recovers what the reduction loses where L_k is many decades below its peak.
        """
        m = V.shape[0]
        skip = self.cuts[b]
        rhs = np.zeros((m, len(self.feeds)), complex)
        for p in skip:
            rhs[:, self.head[p]] += V[:, p]
        X, S, c, const = self._propagate(V, m, skip, rhs)
        M = np.eye(self.n_kept)[None] - S
        phase, logabs = _logdet(M)
        x = self._finish(X, M, c, const)
        r = rhs - self._apply(V, skip, x)
        _, _, dc, dconst = self._propagate(V, m, skip, r, X)
        x = x + self._finish(X, M, dc, dconst)
        return phase, logabs, -x[:, self.measured[b]]

    def _propagate(self, V, m: int, skip, rhs, X=None):
        """Each eliminated node as [coefficients of x_K | constant from `rhs`]; returns the
        coefficient arrays X (reused when given), S_k, the reduced right-hand side c and
        the constants."""
        nk, nodes = self.n_kept, len(self.feeds)
        fresh = X is None
        if fresh:
            X = [None] * nodes
        const: list[np.ndarray | None] = [None] * nodes
        S = np.zeros((m, nk, nk), complex)
        c = rhs[:, :nk].copy()
        for node in list(range(nk, nodes)) + list(range(nk)):
            kept = node < nk
            coef = S[:, node] if kept else (np.zeros((m, nk), complex) if fresh else None)
            acc = c[:, node] if kept else rhs[:, node].copy()
            for p, src in self.feeds[node]:
                if p in skip:
                    continue
                if src < nk:
                    if fresh or kept:
                        coef[:, src] += V[:, p]
                else:
                    if fresh or kept:
                        coef += V[:, p, None] * X[src]
                    acc += V[:, p] * const[src]
            if not kept:
                if fresh:
                    X[node] = coef
                const[node] = acc
        return X, S, c, const

    def _finish(self, X, M, c, const) -> np.ndarray:
        """Every node's value: x_K = M^-1 c, x_H = X x_K + constants."""
        nk = self.n_kept
        xk = c / M[:, 0, :1] if nk == 1 else solve(M, c[:, :, None])[:, :, 0]
        out = np.zeros((c.shape[0], len(self.feeds)), complex)
        out[:, :nk] = xk
        for node in range(nk, len(self.feeds)):
            out[:, node] = np.sum(X[node] * xk, axis=1) + const[node]
        return out

    def _apply(self, V, skip, x) -> np.ndarray:
        """(I - A_k) x, node by node (the whole, unreduced system)."""
        out = x.copy()
        for node, fs in enumerate(self.feeds):
            for p, src in fs:
                if p not in skip:
                    out[:, node] -= V[:, p] * x[:, src]
        return out


def _loops_left(rest: list[int], ends) -> tuple[list[list[int]], dict[int, list[int]]]:
    from .graph import strongly_connected_components
    succ = {m: [] for m in rest}
    for row, col in ends:
        if col in succ and row in succ:
            succ[col].append(row)
    return [c for c in strongly_connected_components(rest, succ) if len(c) > 1 or c[0] in succ[c[0]]], succ


def _feedback_set(members: list[int], ends, keep: list[int]) -> list[int]:
    """`keep` first, then greedily the signal with the most loop edges until the rest
    carries no loop."""
    kept = list(dict.fromkeys(keep))
    while True:
        loops, succ = _loops_left([m for m in members if m not in kept], ends)
        if not loops:
            return kept
        comp = set(max(loops, key=len))
        indeg = {m: 0 for m in comp}
        for v in comp:
            for w in succ[v]:
                if w in comp:
                    indeg[w] += 1
        kept.append(max(comp, key=lambda v: (indeg[v] * sum(w in comp for w in succ[v]), -v)))


def _topological(nodes: list[int], ends) -> list[int]:
    node_set = set(nodes)
    deps = {v: set() for v in nodes}
    for row, col in ends:
        if row in node_set and col in node_set:
            deps[row].add(col)
    out, done = [], set()
    pending = sorted(nodes)
    while pending:
        ready = [v for v in pending if deps[v] <= done]
        out.extend(ready)
        done.update(ready)
        pending = [v for v in pending if v not in done]
    return out


def build_program(members: list[int], ends: list[tuple[int, int]], measured: list[int],
                  cuts: list[frozenset[int]], keep_also: list[int] = ()) -> Program:
    """The program for a component: `ends` (row, col) per bank position, `measured` the
    global signals of its breaks, `cuts` their cut bank positions."""
    kept = _feedback_set(members, ends, list(measured) + [k for k in keep_also if k in members])
    eliminated = _topological([m for m in members if m not in kept], ends)
    local = {g: i for i, g in enumerate(kept + eliminated)}
    feeds: list[list[tuple[int, int]]] = [[] for _ in local]
    inject: list[list[tuple[int, int]]] = [[] for _ in local]
    for p, (row, col) in enumerate(ends):
        feeds[local[row]].append((p, local[col]))
    for b, cut in enumerate(cuts):
        for p in sorted(cut):
            inject[local[ends[p][0]]].append((p, b))
    head = {p: local[row] for p, (row, _) in enumerate(ends)}
    return Program(tuple(kept), tuple(map(tuple, feeds)), tuple(map(tuple, inject)),
                   tuple(local[g] for g in measured), tuple(cuts), head)
