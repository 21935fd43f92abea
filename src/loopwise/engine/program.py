"""One component's elimination program: the kept signals, the order of the rest (reduce stage).

Local node numbers put the kept signals K first (0 .. |K| - 1) and the eliminated
ones H after, in topological order (H carries no loop). `feeds[node]` lists the terms
(bank position, local source) of that node's equation; `inject[node]` the cut terms
(bank position, break column) whose head it is. Propagating through H in that order
gives the Schur complement S = A_KK + A_KH (I - A_HH)^-1 A_HK and every break's
injection U at once (I - A_HH is unit triangular: det(I - A_c) = det(I - S)).

Eliminating H needs no pivoting, but a term that is huge at s (next to its own pole)
would then be multiplied into every path through it. So the outputs of the terms with
a pole on or right of the imaginary axis are kept as well: next to such a pole the
huge values sit in S, where the pivoted solve handles them, and no path multiplies
two of them (tens of integrators in series would overflow near s = 0).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Program", "build_program", "solve", "scaled"]


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


def _exponents(x: np.ndarray, axis: int) -> np.ndarray:
    """The binary exponent of the largest |x| along `axis` (0 where all are 0 or not finite)."""
    with np.errstate(all="ignore"):
        top = np.max(np.abs(x), axis=axis)
    return np.frexp(np.where(np.isfinite(top), top, 0.0))[1]


def _ldexp(x: np.ndarray, e: np.ndarray | None) -> np.ndarray:
    """x 2^e for complex x, exactly (no intermediate 2^e that could overflow); x for e None."""
    return x if e is None else np.ldexp(x.real, e) + 1j * np.ldexp(x.imag, e)


def _at(e: np.ndarray | None, *index):
    """e[index], or None (no exponents: a 1 x 1 system, solved by a division)."""
    return None if e is None else e[index]


def scaled(M: np.ndarray, B: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """M 2^-c, B 2^-b and the exponents E = b - c with M^-1 B = (M 2^-c)^-1 (B 2^-b) 2^E
    entry by entry (batched; E has the shape of B).

    Along a cascade of integrators the kept signals' responses span more than double
    precision (1e-400 to 1e300 at one frequency with 47 nested loops) while every g_k
    itself is of moderate size. Column j of M is scaled by 2^-c_j (c_j the exponent of its
    largest entry), column k of B by its own 2^-b_k, so the scaled solution stays in range.
    Scaling by powers of two is exact and leaves partial pivoting's choices and every
    rounding of the factorisation and the substitutions as they were (the LU of M D is
    L (U D)): where M^-1 B is representable, the scaled solution times 2^E is the unscaled
    solve's result bit for bit.
    """
    c = np.clip(_exponents(M, 1), -1000, 1000)  # (points, kept)
    b = np.clip(_exponents(B, 1), -1000, 1000)  # (points, columns)
    return M * np.ldexp(1.0, -c)[:, None, :], B * np.ldexp(1.0, -b)[:, None, :], b[:, None, :] - c[:, :, None]


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
    measured: tuple[int, ...]  # per break: local node of its signal (kept or eliminated)
    cuts: tuple[frozenset[int], ...]  # per break: bank positions of its cut terms
    head: dict  # bank position -> local node it feeds
    #: _rows' sparsity patterns by row width (filled on first use; see _pattern)
    _patterns: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_kept(self) -> int:
        """|K|, how many signals the program keeps: the size of the matrix solved at each point."""
        return len(self.kept)

    # --- every break at once (Sherman-Morrison) -------------------------------------
    def values(self, V: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Phase and log|.| of det(I - A_c), and g_k = e_sig^T (I - A_c)^-1 u_k for every break."""
        S, U, Xm = self._reduced(V)
        M = np.eye(self.n_kept)[None] - S
        phase, logabs = _logdet(M)
        if not U.shape[2]:
            return phase, logabs, np.zeros((V.shape[0], 0), complex)
        if self.n_kept == 1:
            X, E = U / M[:, :1, :1], None
        else:
            Ms, Us, E = scaled(M, U)
            X = solve(Ms, Us)
        g = self._measure(X, E, Xm)
        if self.n_kept > 1:
            # one step of iterative refinement where some g_k is small: where the loops'
            # gains are huge (integrators at low frequency) the solve alone leaves noise
            # far above a tiny g_k
            idx = np.nonzero(np.any(np.abs(g) < 1e-6, axis=1))[0]
            if idx.size:
                if idx.size == g.shape[0]:
                    idx = slice(None)  # every point (a long cascade): no copies of the arrays
                X = X[idx] + solve(Ms[idx], Us[idx] - Ms[idx] @ X[idx])
                g[idx] = self._measure(X, E[idx], [None if x is None else (x[0], x[1][idx]) for x in Xm])
        return phase, logabs, g

    def _measure(self, X: np.ndarray, E: np.ndarray, Xm) -> np.ndarray:
        """g_k from the kept values of every break's solution, X 2^E (points, kept, breaks; E None:
        unscaled)."""
        g = np.empty((X.shape[0], X.shape[2]), complex)
        for b, node in enumerate(self.measured):
            g[:, b] = _ldexp(X[:, node, b], _at(E, slice(None), node, b)) if Xm[b] is None else \
                self._row_value(Xm[b], X[:, :, b], _at(E, slice(None), slice(None), b), self.n_kept + b)
        return g

    def selected(self, V: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """g_k of break cols[j] at point j: one injection column, chosen point by point."""
        m = V.shape[0]
        nk = self.n_kept
        pick = [cols == b for b in range(len(self.measured))]
        rows, X = self._rows(V, nk + 1, lambda p, b: (nk, np.where(pick[b], V[:, p], 0.0)))
        M = np.eye(nk)[None] - rows[:, :, :nk]
        x, e = self._solve_refined(M, rows[:, :, nk:])
        x, e = x[:, :, 0], _at(e, slice(None), slice(None), 0)
        g = np.empty(m, complex)
        for b, node in enumerate(self.measured):
            sel = pick[b]
            if not sel.any():
                continue
            if node < nk:
                g[sel] = _ldexp(x[sel, node], _at(e, sel, node))
            else:
                g[sel] = self._row_value((X[node][0], X[node][1][sel]), x[sel], _at(e, sel), nk)
        return g

    def _rows(self, V: np.ndarray, width: int, injection):
        """Through the eliminated nodes in topological order, then into the kept ones: each
        node's row [coefficients of x_K | injection columns], width `width`.
        `injection(p, b)` gives (column, values) of break b's cut term at bank position p.
        Returns the kept nodes' rows (points, |K|, width) and, for every eliminated node,
        its row's structurally nonzero columns and their values, (columns, (points, k)).

        An eliminated node's row is nonzero only in the columns its sources reach: a few
        kept signals and the breaks cut upstream along its chain (in a nested cascade a
        handful of the |K| + breaks). Carrying those alone performs, column by column,
        the same additions in the same order as the full rows, so the values are the same;
        only the additions of exact zeros are left out."""
        m, nk = V.shape[0], self.n_kept
        X: list[tuple[np.ndarray, np.ndarray] | None] = [None] * len(self.feeds)
        rows = np.zeros((m, nk, width), complex)
        pattern = self._pattern(width, lambda p, b: injection(p, b)[0])
        for node in list(range(nk, len(self.feeds))) + list(range(nk)):
            cols, at_feed, at_inject = pattern[node]
            acc = rows[:, node] if node < nk else np.zeros((m, cols.size), complex)
            for (p, src), at in zip(self.feeds[node], at_feed):
                if src < nk:
                    acc[:, at] += V[:, p]
                elif at is None:
                    acc += V[:, p, None] * X[src][1]
                else:
                    acc[:, at] += V[:, p, None] * X[src][1]
            for (p, b), at in zip(self.inject[node], at_inject):
                acc[:, at] += injection(p, b)[1]
            if node >= nk:
                X[node] = (cols, acc)
        return rows, X

    def _pattern(self, width: int, column) -> list:
        """Per node: its row's structurally nonzero columns (all `width` for a kept node),
        where each feed adds into them (an index, an index array, or None for all of
        them in order) and where each injection goes; built once per row width (the
        injection's column depends only on it) and kept."""
        cache = self._patterns
        if width in cache:
            return cache[width]
        nk = self.n_kept
        out: list = [None] * len(self.feeds)
        for node in list(range(nk, len(self.feeds))) + list(range(nk)):
            targets = [column(p, b) for p, b in self.inject[node]]
            if node < nk:
                cols = np.arange(width)
            else:
                reach = set(targets)
                for _, src in self.feeds[node]:
                    reach.update((src,) if src < nk else out[src][0].tolist())
                cols = np.array(sorted(reach), dtype=int)
            where = {c: i for i, c in enumerate(cols.tolist())}
            at_feed = []
            for _, src in self.feeds[node]:
                if src < nk:
                    at_feed.append(where[src])
                else:
                    c = out[src][0]
                    at = np.array([where[j] for j in c.tolist()], dtype=int)
                    same = at.size == cols.size and bool(np.all(at == np.arange(cols.size)))
                    at_feed.append(None if same else at)
            out[node] = (cols, tuple(at_feed), tuple(where[t] for t in targets))
        cache[width] = out
        return out

    def _row_value(self, row: tuple[np.ndarray, np.ndarray], x: np.ndarray, e: np.ndarray, col: int) -> np.ndarray:
        """An eliminated signal's value from its sparse row (columns, values): sum of its
        kept coefficients times x 2^e (points, |K|) plus its injection column `col`."""
        cols, vals = row
        kept = cols < self.n_kept
        out = np.sum(_ldexp(vals[:, kept] * x[:, cols[kept]], _at(e, slice(None), cols[kept])), axis=1)
        hit = np.nonzero(cols == col)[0]
        return out + vals[:, hit[0]] if hit.size else out

    def _solve_refined(self, M: np.ndarray, B: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """X and exponents E with M^-1 B = X 2^E (see `scaled`)."""
        if self.n_kept == 1:
            return B / M[:, :1, :1], None
        # one step of iterative refinement: where the loops' gains are huge (integrators at
        # low frequency) the solve alone leaves noise far above a tiny g_k
        Ms, Bs, E = scaled(M, B)
        X = solve(Ms, Bs)
        return X + solve(Ms, Bs - Ms @ X), E

    def _reduced(self, V: np.ndarray):
        """S (m, |K|, |K|), U (m, |K|, breaks) and, for each break whose signal is eliminated,
        that signal's row [coefficients of x_K | injections] as (columns, values) (None
        where it is kept)."""
        nk = self.n_kept
        rows, X = self._rows(V, nk + len(self.measured), lambda p, b: (nk + b, V[:, p]))
        Xm = [None if node < nk else X[node] for node in self.measured]
        return rows[:, :, :nk], rows[:, :, nk:], Xm

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
        if nk == 1:
            xk = c / M[:, 0, :1]
        else:
            Ms, cs, E = scaled(M, c[:, :, None])
            xk = _ldexp(solve(Ms, cs)[:, :, 0], E[:, :, 0])
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


def _feedback_set(members: list[int], ends, keep: list[int]) -> list[int]:
    """`keep` first, then a small set of signals whose removal leaves no loop.

    The reductions of Levy and Low ("A contraction algorithm for finding small cycle
    cutsets", J. Algorithms 9, 1988): a signal with a loop onto itself must be kept; one
    with no predecessor or no successor lies on no loop; one with a single predecessor
    (or successor) can be bypassed, its loops all pass that neighbour. When none applies,
    the signal with the most loop edges is kept. A nested cascade reduces to one signal.
    """
    kept = list(dict.fromkeys(keep))
    succ: dict[int, set[int]] = {m: set() for m in members if m not in kept}
    pred: dict[int, set[int]] = {m: set() for m in succ}
    for row, col in ends:
        if col in succ and row in succ:
            succ[col].add(row)
            pred[row].add(col)

    def remove(v: int) -> None:
        for w in succ.pop(v):
            pred[w].discard(v)
        for u in pred.pop(v):
            succ[u].discard(v)

    while succ:
        changed = False
        for v in sorted(succ):
            if v not in succ:
                continue
            if v in succ[v]:
                kept.append(v)
                remove(v)
            elif not pred[v] or not succ[v]:
                remove(v)
            elif len(pred[v]) == 1 or len(succ[v]) == 1:
                ins, outs = set(pred[v]), set(succ[v])
                remove(v)
                for u in ins:
                    for w in outs:
                        succ[u].add(w)
                        pred[w].add(u)
            else:
                continue
            changed = True
        if not changed:
            v = max(sorted(succ), key=lambda x: len(pred[x]) * len(succ[x]))
            kept.append(v)
            remove(v)
    return kept


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


def _bound_paths(kept: list[int], order: list[int], ends, big: set[int], most: int) -> list[int]:
    """Keep, in topological order, each eliminated signal that more than `most` big terms
    reach along a path through the eliminated ones (so no product of more than `most`
    huge values forms: tens of integrators in series would overflow near s = 0)."""
    kept = list(kept)
    depth: dict[int, int] = {}
    into: dict[int, list[tuple[int, int]]] = {}
    for p, (row, col) in enumerate(ends):
        into.setdefault(row, []).append((p, col))
    for v in order:
        d = max((int(p in big) + (0 if col in kept else depth.get(col, 0)) for p, col in into.get(v, ())),
                default=0)
        if d > most:
            kept.append(v)
        else:
            depth[v] = d
    return kept


#: at most this many terms with a pole on or right of the axis multiply along one path
#: (points where one of them exceeds reduce.SAFE_LEVEL use a program that keeps them all)
BIG_PER_PATH = 12


def build_program(members: list[int], ends: list[tuple[int, int]], measured: list[int],
                  cuts: list[frozenset[int]], big: set[int], keep_also: list[int] = (),
                  most: int = BIG_PER_PATH) -> Program:
    """The program for a component: `ends` (row, col) per bank position, `measured` the
    global signals of its breaks, `cuts` their cut bank positions, `big` the positions of
    the terms with a pole in Re s >= 0, `keep_also` signals to keep whatever, `most` the
    big terms allowed on one path through the eliminated signals."""
    kept = _feedback_set(members, ends, [k for k in keep_also if k in members])
    order = _topological([m for m in members if m not in kept], ends)
    kept = _bound_paths(kept, order, ends, big, most)
    eliminated = [v for v in order if v not in kept]
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
