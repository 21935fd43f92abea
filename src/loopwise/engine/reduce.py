"""The interconnection matrix A(s) and, for each break, the loop transfer L_k.

Signals x obey ``x = A(s) x + B(s) u``. Cutting break k removes its wires from A
(giving A_k) and injects a test signal v in their place through the vector b_k;
the value returned to the cut signal is y = x[sig], and ``L_k = -y / v``. Every
evaluation is batched over whole arrays of s (one linear solve per point, done
by numpy in one call). ``det(I - A) = det(I - A_k) * (1 + L_k)`` holds exactly.

For delay-free models a rational state-space form of each L_k (and of the whole
closed loop) is built from per-application realisations: used to find unstable
modes hidden by cancellations, and by the reference tests.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from .diagram import Diagram
from ..language.resolve import Term
from ..transfer import Transfer
from .solve import nonsingular

__all__ = ["Instance", "Reduction", "reduce_diagram", "LoopEvaluation", "ImproperLoop", "Uncertified"]


@dataclass(frozen=True, eq=False)
class Instance:
    """One wiring term: row i (equation), column j (source), gain, transfer or None."""

    row: int
    col: int
    term: Term

    @property
    def transfer(self):
        return None if self.term.app is None else self.term.app.transfer


class ImproperLoop(Exception):
    """A loop of the wiring whose gain grows without bound at high frequency (the instances on it)."""

    def __init__(self, instances: tuple[Instance, ...]):
        super().__init__(instances)
        self.instances = instances


class Uncertified(Exception):
    """No radius certifies the count: `reason` is "neutral" (high-frequency gain through
    delays >= 1; `rho` holds it), "ill-posed" (I - A(inf) singular) or "range" (the gains
    need a radius beyond double precision)."""

    def __init__(self, reason: str, rho: float = float("nan")):
        super().__init__(reason, rho)
        self.reason = reason
        self.rho = rho


def _relative_degree(inst: Instance) -> int:
    tf = inst.transfer
    return 0 if tf is None or tf.is_zero else tf.relative_degree


@dataclass(frozen=True, eq=False)
class LoopEvaluation:
    """Values at an array of s: phase and log-magnitude of det(I - A_k), and L_k."""

    det_k_phase: np.ndarray
    det_k_log: np.ndarray
    L: np.ndarray


@dataclass(frozen=True, eq=False)
class Reduction:
    diagram: Diagram
    signals: tuple[str, ...]
    instances: tuple[Instance, ...]
    cut_sets: dict[str, frozenset[int]]  # break name -> indices of instances cut
    #: applications driven by an input only: outside A, but their states are part of the
    #: system, so their poles belong in prod(den_b) (and an unstable one in Z)
    exogenous: tuple[Term, ...] = ()

    # --- structural facts ------------------------------------------------------------
    @property
    def n(self) -> int:
        return len(self.signals)

    def block_poles(self) -> np.ndarray:
        """All poles of all applications (each application is its own instance)."""
        poles = [i.transfer.poles for i in self.instances if i.transfer is not None]
        poles += [t.app.transfer.poles for t in self.exogenous]
        return np.concatenate(poles) if poles else np.zeros(0, complex)

    def block_zeros(self) -> np.ndarray:
        zs = [i.transfer.zeros for i in self.instances if i.transfer is not None]
        return np.concatenate(zs) if zs else np.zeros(0, complex)

    @property
    def has_delay(self) -> bool:
        return any(i.transfer is not None and i.transfer.delay > 0 for i in self.instances)

    def open_rhp_poles(self) -> int:
        p = self.block_poles()
        return int(np.sum(p.real > 0))

    # --- evaluation --------------------------------------------------------------------
    def matrix(self, s: np.ndarray, cut: frozenset[int] = frozenset()) -> np.ndarray:
        """A(s) (or A_k with the instances in `cut` removed), shape (len(s), n, n)."""
        s = np.asarray(s, dtype=complex)
        A = np.zeros((s.size, self.n, self.n), dtype=complex)
        for k, inst in enumerate(self.instances):
            if k in cut:
                continue
            A[:, inst.row, inst.col] += self._term_values(inst, s)
        return A

    @staticmethod
    def _term_values(inst: Instance, s: np.ndarray) -> np.ndarray:
        tf = inst.transfer
        if tf is None:
            return np.full(s.shape, inst.term.gain, dtype=complex)
        with np.errstate(all="ignore"):
            return inst.term.gain * tf.evaluate(s)

    def characteristic(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Phase and log|.| of det(I - A(s)) (the whole closed loop)."""
        s = np.asarray(s, dtype=complex).ravel()
        step = _chunk(self.n)
        if s.size > step:
            parts = [self.characteristic(s[i:i + step]) for i in range(0, s.size, step)]
            return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
        M = np.eye(self.n)[None, :, :] - self.matrix(s)
        with np.errstate(all="ignore"):
            sign, logabs = np.linalg.slogdet(M)
        return np.angle(sign), logabs

    def loop(self, name: str, s: np.ndarray) -> LoopEvaluation:
        """det(I - A_k) and L_k at every point of s, in batched solves of bounded memory."""
        s = np.asarray(s, dtype=complex).ravel()
        step = _chunk(self.n)
        if s.size > step:
            parts = [self._loop(name, s[i:i + step]) for i in range(0, s.size, step)]
            return LoopEvaluation(*(np.concatenate([getattr(p, f) for p in parts])
                                    for f in ("det_k_phase", "det_k_log", "L")))
        return self._loop(name, s)

    def _loop(self, name: str, s: np.ndarray) -> LoopEvaluation:
        cut = self.cut_sets[name]
        M = np.eye(self.n)[None, :, :] - self.matrix(s, cut)
        b = np.zeros((s.size, self.n), dtype=complex)
        for k in cut:
            inst = self.instances[k]
            b[:, inst.row] += self._term_values(inst, s)
        with np.errstate(all="ignore"):
            sign, logabs = np.linalg.slogdet(M)
            x = _solve(M, b)
        sig = self.signals.index(self._cut_signal(name))
        return LoopEvaluation(np.angle(sign), logabs, -x[:, sig])

    def all_loops(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """det(I - A) (phase, log|.|) and, for every break k, g_k = e_k^T (I - A)^-1 u_k.

        Cutting break k is a rank-one change, A_k = A - u_k e_k^T, so one
        factorisation of I - A per point serves every break (Sherman-Morrison):
        det(I - A_k) = det(I - A) (1 + g_k) and L_k = -g_k / (1 + g_k).
        """
        s = np.asarray(s, dtype=complex).ravel()
        names = list(self.cut_sets)
        step = _chunk(self.n + len(names))
        if s.size > step:
            parts = [self.all_loops(s[i:i + step]) for i in range(0, s.size, step)]
            return tuple(np.concatenate([p[j] for p in parts]) for j in range(3))
        M = np.eye(self.n)[None, :, :] - self.matrix(s)
        U = np.zeros((s.size, self.n, len(names)), dtype=complex)
        for k, name in enumerate(names):
            for i in self.cut_sets[name]:
                inst = self.instances[i]
                U[:, inst.row, k] += self._term_values(inst, s)
        with np.errstate(all="ignore"):
            sign, logabs = np.linalg.slogdet(M)
            X = _solve_many(M, U)
        rows = [self.signals.index(self._cut_signal(n)) for n in names]
        g = X[:, rows, np.arange(len(names))]
        return np.angle(sign), logabs, g

    def loop_transfer(self, name: str, s) -> np.ndarray:
        return self.loop(name, np.atleast_1d(s)).L

    def _cut_signal(self, name: str) -> str:
        return next(b.signal for b in self.diagram.breaks if b.stmt.name == name)

    def delay_step_ok(self, sa: np.ndarray, sb: np.ndarray, cut: frozenset[int] = frozenset()) -> np.ndarray:
        """Whether each interval [sa, sb] is short enough for the delays that matter there.

        Sum of the delays of the instances that are not negligible at either end
        (|term| > 1e-6) times the interval's length must stay below pi/4.
        """
        rate = np.zeros(sa.shape)
        for k, inst in enumerate(self.instances):
            tf = inst.transfer
            if tf is None or tf.delay == 0.0:
                continue
            with np.errstate(all="ignore"):
                big = np.maximum(np.abs(self._term_values(inst, sa)), np.abs(self._term_values(inst, sb)))
            rate += np.where(~(big < 1e-6), tf.delay, 0.0)
        return np.abs(sb - sa) * rate <= np.pi / 4

    # --- high-frequency certificate ----------------------------------------------------------
    @cached_property
    def scaling(self) -> np.ndarray:
        """Integer exponents d (one per signal) that make every entry of the similar matrix
        D(s)^-1 A(s) D(s), D = diag(s^d), proper; all zero without improper blocks.

        Entry (i, j) becomes A_ij s^(d_j - d_i), proper when d_j - d_i <= r_ij (its
        relative degree): a system of difference constraints, solved by Bellman-Ford.
        It has a solution iff no loop of the wiring has a negative total relative
        degree, i.e. iff no loop gain grows without bound (ImproperLoop otherwise).
        det(I - A) and every L_k are unchanged by the similarity (docs/method.md).
        """
        edges = [(inst.row, inst.col, _relative_degree(inst), k) for k, inst in enumerate(self.instances)]
        d = np.zeros(self.n, dtype=int)
        if all(r >= 0 for _, _, r, _ in edges):
            return d
        pred: dict[int, int] = {}
        for _ in range(self.n + 1):
            changed = None
            for i, j, r, k in edges:
                if d[i] + r < d[j]:
                    d[j] = d[i] + r
                    pred[j] = k
                    changed = j
            if changed is None:
                return d
        # still relaxing after n rounds: walk back to a negative cycle
        node = changed
        for _ in range(self.n):
            node = self.instances[pred[node]].row
        cycle, at = [], node
        while True:
            k = pred[at]
            cycle.append(k)
            at = self.instances[k].row
            if at == node:
                break
        raise ImproperLoop(tuple(self.instances[k] for k in reversed(cycle)))

    def scaled_transfer(self, k: int):
        """Instance k's term in the scaled matrix: gain * transfer * s^(d_col - d_row) (a Transfer)."""
        inst = self.instances[k]
        tf = inst.transfer if inst.transfer is not None else Transfer.constant(1.0)
        e = int(self.scaling[inst.col] - self.scaling[inst.row])
        if e:
            tf = tf * (Transfer.laplace() ** e)
        return tf

    def scaled_matrix(self, s: np.ndarray, cut: frozenset[int] = frozenset()) -> np.ndarray:
        """D^-1 A D (or A_k) at the points s: the same determinant, entries bounded at infinity."""
        A = self.matrix(s, cut)
        d = self.scaling
        if np.any(d):
            s = np.asarray(s, dtype=complex).reshape(-1, 1, 1)
            A = A * s ** (d[None, None, :] - d[None, :, None])
        return A

    def feedthrough_split(self, cut: frozenset[int] = frozenset()):
        """For the scaled matrix: A0 (delay-free limit at infinity), |limit of the delayed
        terms|, per-instance data (row, col, |gain|, scaled transfer) for the remainders, and
        the magnitudes I - A0 is summed from (for `solve.nonsingular`)."""
        A0 = np.zeros((self.n, self.n))
        Dd = np.zeros((self.n, self.n))
        gross = np.eye(self.n)
        rest = []
        for k, inst in enumerate(self.instances):
            if k in cut:
                continue
            tf = self.scaled_transfer(k)
            g = inst.term.gain
            d = g * tf.feedthrough
            if tf.delay > 0:
                Dd[inst.row, inst.col] += abs(d)
            else:
                A0[inst.row, inst.col] += d
                gross[inst.row, inst.col] += abs(d)
            if tf.poles.size or tf.zeros.size:
                rest.append((inst.row, inst.col, abs(g), tf))
        return A0, Dd, rest, gross


def _chunk(n: int) -> int:
    """Points per batch so that a batch of n x n complex matrices stays near 64 MB."""
    return max(256, int(64e6 / (16.0 * max(n, 1) ** 2)))


def _solve(M: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Batched solve; a point where I - A_k is singular (s on a pole) gives NaN, not an exception."""
    try:
        return np.linalg.solve(M, b[:, :, None])[:, :, 0]
    except np.linalg.LinAlgError:
        out = np.full(b.shape, np.nan + 0j)
        for i in range(M.shape[0]):
            try:
                out[i] = np.linalg.solve(M[i], b[i])
            except np.linalg.LinAlgError:
                pass
        return out


def _solve_many(M: np.ndarray, U: np.ndarray) -> np.ndarray:
    """Batched solve with several right-hand sides; NaN where I - A is singular."""
    try:
        return np.linalg.solve(M, U)
    except np.linalg.LinAlgError:
        out = np.full(U.shape, np.nan + 0j)
        for i in range(M.shape[0]):
            try:
                out[i] = np.linalg.solve(M[i], U[i])
            except np.linalg.LinAlgError:
                pass
        return out


def _remainder_bound(gain: float, tf, r: float) -> float:
    """An upper bound of |G(s) - G(inf) e^{-sT}| over |s| >= r, Re s >= 0 (needs r > max|p|).

    G = k prod (s - z_i)/(s - p_i) prod 1/(s - p_j): each paired factor is
    1 + (p_i - z_i)/(s - p_i); the bound decreases with r.
    """
    if tf.is_zero:
        return 0.0
    z, p = tf.zeros, tf.poles
    m = z.size
    prod = abs(tf.gain) * gain
    pm = np.abs(p)
    if np.any(pm >= r):
        return np.inf
    paired = np.prod(1.0 + np.abs(p[:m] - z) / (r - pm[:m]))
    tail = np.prod(1.0 / (r - pm[m:])) if p.size > m else 1.0
    if p.size == m:
        return prod * (paired - 1.0)
    return prod * paired * tail


def certificate_radius(red: Reduction, cut: frozenset[int] = frozenset()) -> tuple[float, float]:
    """The smallest tried radius R beyond which det(I - A(s)) (or A_k) has no zeros in Re s >= 0.

    Sufficient condition (Perron-Frobenius bound on a structured perturbation), on the
    scaled matrix (Reduction.scaling; the same determinant):
    rho(|(I - A0)^-1| (|D_delay| + B(R))) < 1, where B bounds the strictly proper
    remainders entrywise. Returns (R, rho_at_infinity). Raises Uncertified when the
    condition fails even at infinity (neutral type: high-frequency loop gain through
    delays of magnitude >= 1), when I - A0 is singular (ill-posed at high frequency), or
    when the radius it needs lies beyond 1e250 (gains beyond double precision).
    """
    A0, Dd, rest, gross = red.feedthrough_split(cut)
    M = np.eye(red.n) - A0
    if red.n and not nonsingular(M, gross):
        raise Uncertified("ill-posed")
    Minv = np.abs(np.linalg.inv(M)) if red.n else M
    if not np.all(np.isfinite(Minv)):
        raise Uncertified("range")
    rho_inf = float(np.max(np.abs(np.linalg.eigvals(Minv @ Dd)))) if red.n else 0.0
    if rho_inf >= 1.0:
        raise Uncertified("neutral", rho_inf)
    roots = np.concatenate([red.block_poles(), red.block_zeros(), [1.0]])
    r = 2.0 * float(np.max(np.abs(roots)))
    while r < 1e250:
        B = Dd.copy()
        for row, col, g, tf in rest:
            B[row, col] += _remainder_bound(g, tf, r)
        if np.all(np.isfinite(B)):
            rho = float(np.max(np.abs(np.linalg.eigvals(Minv @ B))))
            if rho < 0.9:
                return r, rho_inf
        r *= 1.6 if r < 1e16 else 10.0
    raise Uncertified("range")


def closing_phase(red: Reduction, cut: frozenset[int], R: float) -> float:
    """Continuous change of arg det(I - A_k) from s = jR to s = R along |s| >= R.

    With X(s) = (I - A0)^-1 (A(s) - A0) and rho(X) < 1 there (A the scaled matrix,
    whose determinant is the same), arg det(I - A) = arg det(I - A0) + sum Arg(1 - lambda_i(X))
    is a continuous branch (each term stays within (-pi/2, pi/2)), so no sampling of the
    arc is needed.
    """
    A0 = red.feedthrough_split(cut)[0]
    Minv = np.linalg.inv(np.eye(red.n) - A0)

    def branch(s: complex) -> float:
        A = red.scaled_matrix(np.array([s]), cut)[0]
        lam = np.linalg.eigvals(Minv @ (A - A0))
        return float(np.sum(np.angle(1.0 - lam)))

    return branch(complex(R, 0.0)) - branch(complex(0.0, R))


def reduce_diagram(diagram: Diagram) -> Reduction:
    model = diagram.model
    signals = diagram.signals
    index = {n: i for i, n in enumerate(signals)}
    instances = []
    exogenous = []
    for target, terms in model.equations.items():
        for term in terms:
            if term.source in model.inputs:
                # B(s) u: no part in any loop, but a block here still has states of its own
                if term.app is not None:
                    exogenous.append(term)
                continue
            instances.append(Instance(index[target], index[term.source], term))
    cut_sets = {}
    for cut in diagram.breaks:
        edges = set(cut.edges)
        cut_sets[cut.stmt.name] = frozenset(
            k for k, inst in enumerate(instances)
            if (signals[inst.col], signals[inst.row]) in edges)
    return Reduction(diagram, signals, tuple(instances), cut_sets, tuple(exogenous))
