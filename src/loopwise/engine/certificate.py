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

import numpy as np

from ..transfer import Transfer
from .reduce import Component
from .solve import nonsingular

__all__ = ["ImproperLoop", "Uncertified", "scaling", "certificate_radius", "closing_phase"]


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


def _split(comp: Component, d: np.ndarray, cut):
    """A0, |delayed limits|, remainder data (row, col, |gain|, transfer) and the
    magnitudes I - A0 is summed from, for the scaled block with the positions in `cut` removed."""
    n = len(comp.signals)
    A0, Dd, gross = np.zeros((n, n)), np.zeros((n, n)), np.eye(n)
    rest = []
    for p, (i, j, g, tf) in enumerate(_scaled(comp, d)):
        if p in cut:
            continue
        lim = g * tf.feedthrough
        if tf.delay > 0:
            Dd[i, j] += abs(lim)
        else:
            A0[i, j] += lim
            gross[i, j] += abs(lim)
        if tf.poles.size or tf.zeros.size:
            rest.append((i, j, abs(g), tf))
    return A0, Dd, rest, gross


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


def certificate_radius(comp: Component, d: np.ndarray, cut=frozenset()) -> tuple[float, float]:
    """The smallest tried radius R beyond which det(I - A_c(s)) (or with the bank positions
    in `cut` removed) has no zeros in Re s >= 0, and the spectral radius at infinity.

    Raises Uncertified when the condition fails even at infinity (neutral type), when
    I - A0 is singular (ill-posed at high frequency), or when the radius it needs lies
    beyond 1e250 (gains beyond double precision).
    """
    A0, Dd, rest, gross = _split(comp, d, cut)
    n = len(comp.signals)
    M = np.eye(n) - A0
    if not nonsingular(M, gross):
        raise Uncertified("ill-posed")
    with np.errstate(all="ignore"):
        Minv = np.abs(np.linalg.inv(M))
    if not np.all(np.isfinite(Minv)):
        raise Uncertified("range")
    rho_inf = float(np.max(np.abs(np.linalg.eigvals(Minv @ Dd))))
    if rho_inf >= 1.0:
        raise Uncertified("neutral", rho_inf)
    poles, zeros = comp.roots()
    r = 2.0 * float(np.max(np.abs(np.concatenate([poles, zeros, [1.0]]))))
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


def closing_phase(comp: Component, d: np.ndarray, cut, R: float) -> float:
    """Continuous change of arg det(I - A_c) (or A_k) from s = jR to s = R along |s| >= R.

    With X(s) = (I - A0)^-1 (A(s) - A0) and rho(X) < 1 there (A the scaled block, whose
    determinant is the same), arg det(I - A) = arg det(I - A0) + sum Arg(1 - lambda_i(X))
    is a continuous branch (each term stays within (-pi/2, pi/2)), so no sampling of
    the arc is needed.
    """
    A0 = _split(comp, d, cut)[0]
    Minv = np.linalg.inv(np.eye(len(comp.signals)) - A0)
    s = np.array([complex(R, 0.0), complex(0.0, R)])
    A = comp.dense(s, frozenset(cut))
    if np.any(d):
        A = A * s.reshape(-1, 1, 1) ** (d[None, None, :] - d[None, :, None])
    lam = np.linalg.eigvals(Minv[None] @ (A - A0[None]))
    branch = np.sum(np.angle(1.0 - lam), axis=1)
    return float(branch[0] - branch[1])
