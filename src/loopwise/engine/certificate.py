"""Where a component's contour may stop: the high-frequency certificate and the arc's phase.

Write the component's block as I - A(s) = (I - A0) - D(s) - E(s): A0 the delay-free
limit at infinity, D the limits of delayed terms (|exp(-sT)| <= 1 in the right half
plane), E the strictly proper remainders. For |s| >= r, Re s >= 0, each remainder is
bounded entrywise (`_remainder_bound`); if rho(|(I - A0)^-1| (|D| + B(r))) < 1 (a
Perron-Frobenius bound on a structured perturbation), I - A(s) is invertible there:
no closed-loop pole beyond r. An improper block (an ideal derivative) first gets its
entries made proper by a diagonal similarity D(s)^-1 A D(s), D = diag(s^d), which
changes neither the determinant nor any loop transfer (docs/method.md).
"""
from __future__ import annotations

import math

import numpy as np

from ..transfer import Transfer
from .diagram import acyclic
from .reduce import CANCEL, Component
from .solve import nonsingular

__all__ = ["ImproperLoop", "Uncertified", "ScaledTerms", "scaling", "certificate_radius", "closing_phase",
           "closing_phases"]


class ImproperLoop(Exception):
    """A loop of the wiring whose gain grows without bound at high frequency (the bank
    positions of the terms on it, in the component)."""

    def __init__(self, positions: tuple[int, ...]):
        super().__init__(positions)
        self.positions = positions


class Uncertified(Exception):
    """No radius certifies the count: `reason` is "neutral" (high-frequency gain through
    delays >= 1; `rho` holds it), "ill-posed" (I - A(inf) singular) or "range" (the gains
    need a radius beyond double precision)."""

    def __init__(self, reason: str, rho: float = float("nan")):
        super().__init__(reason, rho)
        self.reason = reason
        self.rho = rho


def _relative_degree(tf) -> int:
    return 0 if tf is None or tf.is_zero else tf.relative_degree


def scaling(comp: Component) -> np.ndarray:
    """Integer exponents d (one per signal of the component, in the order of `signals`)
    that make every entry of D(s)^-1 A(s) D(s) proper; all zero without improper terms.

    Entry (i, j) becomes A_ij s^(d_j - d_i), proper when d_j - d_i <= r_ij (its relative
    degree): a system of difference constraints, solved by Bellman-Ford. It has a
    solution iff no loop has a negative total relative degree (ImproperLoop otherwise).
    """
    order = {g: i for i, g in enumerate(comp.signals)}
    edges = [(order[row], order[col], _relative_degree(tf), p)
             for p, (row, col, _, tf) in enumerate(comp.entries)]
    d = np.zeros(len(comp.signals), dtype=int)
    if all(r >= 0 for _, _, r, _ in edges):
        return d
    pred: dict[int, int] = {}
    changed = None
    for _ in range(len(d) + 1):
        changed = None
        for i, j, r, p in edges:
            if d[i] + r < d[j]:
                d[j] = d[i] + r
                pred[j] = p
                changed = j
        if changed is None:
            return d
    node = changed  # still relaxing after n rounds: walk back onto a negative cycle
    for _ in range(len(d)):
        node = order[comp.entries[pred[node]][0]]
    cycle, at = [], node
    while True:
        p = pred[at]
        cycle.append(p)
        at = order[comp.entries[p][0]]
        if at == node:
            break
    raise ImproperLoop(tuple(reversed(cycle)))


def _scaled(comp: Component, d: np.ndarray) -> list[tuple[int, int, float, Transfer]]:
    order = {g: i for i, g in enumerate(comp.signals)}
    out = []
    for row, col, gain, tf in comp.entries:
        i, j = order[row], order[col]
        tf = tf if tf is not None else Transfer.constant(1.0)
        e = int(d[j] - d[i])
        if e:
            tf = tf * (Transfer.laplace() ** e)
        out.append((i, j, gain, tf))
    return out


class ScaledTerms:
    """The scaled terms of a component, packed for the certificate's bounds."""

    def __init__(self, comp: Component, d: np.ndarray):
        scaled = _scaled(comp, d)
        n = len(comp.signals)
        self.n = n
        self.rows = np.array([i for i, _, _, _ in scaled], dtype=int)
        self.cols = np.array([j for _, j, _, _ in scaled], dtype=int)
        self.limit = np.array([g * tf.feedthrough for _, _, g, tf in scaled], dtype=float)
        self.delayed = np.array([tf.delay > 0 for _, _, _, tf in scaled], dtype=bool)
        self.gain = np.array([abs(g) * abs(tf.gain) for _, _, g, tf in scaled], dtype=float)
        self.has_rest = np.array([bool(tf.poles.size or tf.zeros.size) and not tf.is_zero
                                  for _, _, _, tf in scaled])
        m = [tf.zeros.size for _, _, _, tf in scaled]
        self.biproper = np.array([tf.poles.size == k for (_, _, _, tf), k in zip(scaled, m)])
        width = max([tf.poles.size for _, _, _, tf in scaled] + [0])
        self.pair_num = np.zeros((len(scaled), width))   # |p_i - z_i| for paired factors
        self.pole_mag = np.zeros((len(scaled), width))   # |p_i|
        self.paired = np.zeros((len(scaled), width), bool)
        self.extra = np.zeros((len(scaled), width), bool)
        for t, ((_, _, _, tf), k) in enumerate(zip(scaled, m)):
            self.pair_num[t, :k] = np.abs(tf.poles[:k] - tf.zeros)
            self.pole_mag[t, :tf.poles.size] = np.abs(tf.poles)
            self.paired[t, :k] = True
            self.extra[t, k:tf.poles.size] = True

    def bounds(self, r: float) -> np.ndarray:
        """Per term: an upper bound of |G(s) - G(inf) e^{-sT}| over |s| >= r, Re s >= 0.

        G = k prod (s - z_i)/(s - p_i) prod 1/(s - p_j): each paired factor is
        1 + (p_i - z_i)/(s - p_i); the bound decreases with r (inf while r <= max |p|).
        """
        with np.errstate(all="ignore"):
            gap = r - self.pole_mag
            paired = np.prod(np.where(self.paired, 1.0 + self.pair_num / gap, 1.0), axis=1)
            tail = np.prod(np.where(self.extra, 1.0 / gap, 1.0), axis=1)
            b = np.where(self.biproper, self.gain * (paired - 1.0), self.gain * paired * tail)
        reach = np.all(~(self.paired | self.extra) | (gap > 0), axis=1)
        return np.where(self.has_rest, np.where(reach, b, np.inf), 0.0)

    def matrices(self, cut) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """A0, |delayed limits|, the magnitudes I - A0 is summed from, and a mask of the
        terms that remain, with the bank positions in `cut` removed."""
        keep = np.ones(self.rows.size, bool)
        keep[list(cut)] = False
        A0, Dd, gross = np.zeros((self.n, self.n)), np.zeros((self.n, self.n)), np.eye(self.n)
        live = keep & ~self.delayed
        np.add.at(A0, (self.rows[live], self.cols[live]), self.limit[live])
        np.add.at(gross, (self.rows[live], self.cols[live]), np.abs(self.limit[live]))
        dl = keep & self.delayed
        np.add.at(Dd, (self.rows[dl], self.cols[dl]), np.abs(self.limit[dl]))
        return A0, Dd, gross, keep


def certificate_radius(comp: Component, terms: "ScaledTerms", cuts: list) -> tuple[float, list[float]]:
    """The smallest tried radius R beyond which det(I - A_c(s)), and det(I - A_k(s)) for every
    cut in `cuts` (bank positions removed), has no zeros in Re s >= 0.

    Returns R and the spectral radius at infinity of each cut. Raises Uncertified(reason,
    rho) with `.cut` the index in `cuts` that failed: neutral type (the condition fails
    even at infinity), ill-posed at high frequency (I - A0 singular), or a radius beyond
    1e250 (gains beyond double precision). Cheap bounds come first: the row-sum norm
    of |(I - A0)^-1| (|D| + B(r)) bounds its spectral radius from above, then the
    Collatz-Wielandt bounds of a few power iterations, from above and from below
    (`_perron_side`); the eigenvalues are computed only where these do not decide.
    """
    parts = []
    for i, cut in enumerate(cuts):
        A0, Dd, gross, keep = terms.matrices(cut)
        M = np.eye(terms.n) - A0
        if not (_acyclic(A0) or nonsingular(M, gross)):
            raise _failed("ill-posed", i)
        with np.errstate(all="ignore"):
            Minv = np.abs(np.linalg.inv(M))
        if not np.all(np.isfinite(Minv)):
            raise _failed("range", i)
        rho_inf = float(np.max(np.abs(np.linalg.eigvals(Minv @ Dd)))) if np.any(Dd) else 0.0
        if rho_inf >= 1.0:
            raise _failed("neutral", i, rho_inf)
        parts.append((Minv, Dd, keep, rho_inf))
    poles, zeros = comp.roots()
    r = 2.0 * float(np.max(np.abs(np.concatenate([poles, zeros, [1.0]]))))
    pending = list(range(len(cuts)))
    while r < 1e250 and pending:
        b = terms.bounds(r)
        still = []
        for i in pending:
            Minv, Dd, keep, _ = parts[i]
            if not np.all(np.isfinite(b[keep])):
                still.append(i)
                continue
            # every entry is >= 0: the row sums of Minv B are Minv (B 1), no matrix product
            row = Dd.sum(axis=1)
            np.add.at(row, terms.rows[keep], b[keep])
            if np.max(Minv @ row) < 0.9:
                continue
            B = Dd.copy()
            np.add.at(B, (terms.rows[keep], terms.cols[keep]), b[keep])
            # below EIGEN_SIZE the eigenvalues cost less than the iterations that may not decide
            side = _perron_side(Minv, B, 0.9) if terms.n > EIGEN_SIZE else None
            if side is None:
                side = bool(np.max(np.abs(np.linalg.eigvals(Minv @ B))) < 0.9)
            if side:
                continue
            still.append(i)
        pending = still
        if pending:
            r *= 1.6 if r < 1e16 else 10.0
    if pending:
        raise _failed("range", pending[0])
    return r, [p[3] for p in parts]


#: matrices up to this size go straight to their eigenvalues (about 0.1 ms at 32; the
#: power iterations of `_perron_side` take up to 24 steps of a few numpy calls each)
EIGEN_SIZE = 32


def _acyclic(A0: np.ndarray) -> bool:
    """Whether the graph of A0's nonzero entries (a self-loop included) has no cycle: then
    I - A0 is a unit triangular matrix with its rows and columns permuted, det(I - A0) = 1
    exactly, and no test of its pivots is needed (a nested cascade's limits at infinity
    run down one chain of junctions and controllers)."""
    rows, cols = np.nonzero(A0)  # entry (i, j): an edge j -> i
    return acyclic(A0.shape[0], zip(cols.tolist(), rows.tolist()))


def _perron_side(Minv: np.ndarray, B: np.ndarray, level: float, steps: int = 24) -> bool | None:
    """Whether rho(Minv B) < level (True) or >= level (False), as far as cheap bounds show
    it (both matrices >= 0); None when they do not decide (the caller then asks for the
    eigenvalues).

    For P >= 0: rho(P) <= max_i (P x)_i / x_i for any x > 0 (Collatz-Wielandt);
    rho(P) + 1 = rho(P + I) <= max((P + I)^k 1)^(1/k) (the row-sum norm of (P + I)^k); and
    rho(P) >= min over x_i > 0 of (P x)_i / x_i for any x >= 0, x != 0 (P x >= mu x implies
    rho(P) >= mu). The vectors come from power iterations with P + I, which has the same
    Perron vector as P but, unlike a P whose loops all have lengths with a common factor,
    no other eigenvalue of the same modulus, so the ratios settle; two matrix-vector
    products a step: one sequence kept positive for the upper bounds (its k-th vector,
    unscaled, is >= (P + I)^k 1 entry by entry), one left as it is, of which the entries
    above 1e-3 of the largest make the lower bound's x (three products a step)."""
    n = B.shape[0]
    up, low = np.ones(n), np.ones(n)
    log_scale = 0.0
    with np.errstate(all="ignore"):
        for k in range(1, steps + 1):
            y = Minv @ (B @ up)
            top = float(np.max(y))
            if not np.isfinite(top):
                return None
            if top == 0.0 or float(np.max(y / up)) < level:
                return True  # P up = 0 with up > 0 means P = 0
            w = y + up
            top = float(np.max(w))
            log_scale += math.log(top)
            if math.exp((log_scale + 1e-9) / k) - 1.0 < level:
                return True
            up = w / top + 1e-9  # positive, so that the next ratio is defined
            # the lower bound from the iterate's large entries alone (x >= 0 with zeros
            # elsewhere is as valid a test vector): entries outside the dominant class of
            # a reducible P would otherwise pull the minimum down to nothing
            x = np.where(low >= 1e-3, low, 0.0)
            z = Minv @ (B @ x)
            if not np.all(np.isfinite(z)):
                return None
            seen = x > 0
            if float(np.min(z[seen] / x[seen])) >= level:
                return False
            low = Minv @ (B @ low) + low
            low = low / float(np.max(low))
    return None


def _failed(reason: str, index: int, rho: float = float("nan")) -> Uncertified:
    exc = Uncertified(reason, rho)
    exc.cut = index
    return exc


def closing_phase(comp: Component, terms: "ScaledTerms", d: np.ndarray, b: int | None, R: float) -> float:
    """Continuous change of arg det(I - A_c) (or A_k) from s = jR to s = R along |s| >= R.

    With X(s) = (I - A0)^-1 (A(s) - A0) and rho(X) < 1 there (A the scaled block, whose
    determinant is the same), arg det(I - A) = arg det(I - A0) + sum Arg(1 - lambda_i(X))
    is a continuous branch (each term stays within (-pi/2, pi/2)), so no sampling of the
    arc is needed. The sum is the change of arg det(I - A0 - t (A(s) - A0)) = det(I - A0)
    prod (1 - t lambda_i) as t runs from 0 to 1 (no factor reaches the negative real
    axis): sampled in t on the component's own reduced form (the same program as the
    count, at the t-interpolated term values), not by an eigenvalue problem of the
    whole block.
    """
    s = np.array([complex(R, 0.0), complex(0.0, R)])
    with np.errstate(all="ignore"):
        V = comp.bank.values(s)
        # each term's delay-free limit at infinity in the scaled frame, back in the unscaled one
        expo = (d[terms.rows] - d[terms.cols])[None, :]
        V0 = np.where(terms.delayed, 0.0, terms.limit)[None, :] * s[:, None] ** expo
    # Enough t-samples that no step can alias: the radius certifies rho(X) < 0.9 (see
    # certificate_radius), so each factor arg(1 - t lambda) moves at most
    # |lambda| / (1 - |lambda|) < 9 rad per unit t, all N of them < 9N; with 3N steps or
    # more every true step is below 3 rad < pi, and the wrapped steps are the true ones.
    exact = max(16, 3 * len(comp.signals))
    branch = []
    for k in range(2):
        n = 16
        while True:
            t = np.linspace(0.0, 1.0, n + 1)
            Vt = V0[k][None, :] + t[:, None] * (V[k] - V0[k])[None, :]
            phase = comp.phase_at(Vt, b)
            steps = (np.diff(phase) + np.pi) % (2 * np.pi) - np.pi
            if np.max(np.abs(steps)) < np.pi / 8 or n >= exact:
                break
            n = min(4 * n, exact)
        branch.append(float(np.sum(steps)))
    return branch[0] - branch[1]


def closing_phases(comp: Component, terms: "ScaledTerms", d: np.ndarray, R: float) -> list[float]:
    """closing_phase of det(I - A_c) and of every break's det(I - A_k) (in the order of
    `comp.breaks`), from one evaluation at the t-samples of both ends.

    det(I - A_k) = det(I - A_c)(1 + g_k) (Sherman-Morrison, as in the count), so at each
    t-sample arg det(I - A_k) = arg det(I - A_c) + arg(1 + g_k): one propagation serves
    every break instead of one per break. A cut whose 1 + g_k cancels at some sample
    (reduce.CANCEL) or whose steps are not all below pi/8 is done alone (closing_phase).
    """
    n = 16
    s = np.array([complex(R, 0.0), complex(0.0, R)])
    t = np.linspace(0.0, 1.0, n + 1)
    with np.errstate(all="ignore"):
        V = comp.bank.values(s)
        expo = (d[terms.rows] - d[terms.cols])[None, :]
        V0 = np.where(terms.delayed, 0.0, terms.limit)[None, :] * s[:, None] ** expo
        Vt = np.concatenate([V0[k][None, :] + t[:, None] * (V[k] - V0[k])[None, :] for k in range(2)])
        phase, _, g = comp.program.values(Vt)
        one_g = 1.0 + g
        clean = np.all(np.abs(one_g) > CANCEL * np.maximum(1.0, np.abs(g)), axis=0)
        cols = np.concatenate([phase[:, None], phase[:, None] + np.angle(one_g)], axis=1)
        steps = (np.diff(cols.reshape(2, n + 1, -1), axis=1) + np.pi) % (2 * np.pi) - np.pi
        fine = np.max(np.abs(steps), axis=(0, 1)) < np.pi / 8
    out = []
    for col, b in enumerate([None, *range(len(comp.breaks))]):
        if fine[col] and (b is None or clean[b]):
            out.append(float(np.sum(steps[0, :, col])) - float(np.sum(steps[1, :, col])))
        else:
            out.append(closing_phase(comp, terms, d, b, R))
    return out
