"""Many block applications evaluated at once (part of the reduce stage).

A `Bank` holds the factored transfers of a set of wiring terms, so that all their
values at all frequencies come from a few numpy operations: `values(s)` has shape
(len(s), terms). Each transfer is evaluated as `Transfer.evaluate` does it - every
zero paired with a pole, `(s - z)/(s - p)`, so intermediate values stay near 1 at
high order, the unpaired factors after, the delay as `exp(-T s)` - which keeps the
exact factored form next to the poles on the imaginary axis (no expanded polynomial
loses digits there).

A `FactorTable` holds the same factors for the terms of many parameter samples of one
wiring (batch.StackedBank): the factors of every (sample, term) lie in flat arrays, so
that the values at points of any mix of samples come from one gather and one
product per kind of factor, whatever the samples' orders, with no Python call per
sample; each product multiplies a term's factors in the same order as `Bank`, so a
sample's values are bit for bit those of its own Bank.
"""
from __future__ import annotations

from functools import cached_property
from typing import Sequence

import numpy as np

from ..transfer import Transfer

__all__ = ["Bank", "FactorTable"]


class Bank:
    """gain_i * transfer_i(s) for terms i (a transfer of None is a plain gain).

    Terms are grouped by shape (paired factors, unpaired zeros, unpaired poles, delay or
    not), so each group evaluates with plain broadcasting: no padding, no masks.
    """

    def __init__(self, gains: Sequence[float], transfers: Sequence[Transfer | None]):
        tfs = [t if t is not None else Transfer.constant(1.0) for t in transfers]
        self.gains, self.transfers = tuple(float(g) for g in gains), tuple(tfs)
        self.size = len(tfs)
        self.delay = np.array([t.delay for t in tfs], dtype=float)
        self.has_delay = bool(np.any(self.delay > 0))

    @cached_property
    def groups(self) -> list:
        """The terms grouped by shape, packed for `values` (made on first use: a batch of
        samples evaluates from its FactorTable instead)."""
        tfs, gains = self.transfers, self.gains
        shapes: dict[tuple[int, int, int, bool], list[int]] = {}
        for i, t in enumerate(tfs):
            c = min(t.zeros.size, t.poles.size)
            shapes.setdefault((c, t.zeros.size - c, t.poles.size - c, t.delay > 0), []).append(i)
        groups = []
        for (c, nz, npl, delayed), idx in shapes.items():
            members = [tfs[i] for i in idx]
            k = np.array([gains[i] * tfs[i].gain for i in idx], dtype=float)
            pz = np.array([t.zeros[:c] for t in members], complex).reshape(len(idx), c)
            pp = np.array([t.poles[:c] for t in members], complex).reshape(len(idx), c)
            ez = np.array([t.zeros[c:] for t in members], complex).reshape(len(idx), nz)
            ep = np.array([t.poles[c:] for t in members], complex).reshape(len(idx), npl)
            T = np.array([t.delay for t in members]) if delayed else None
            groups.append((np.array(idx), k, pz, pp, ez, ep, T))
        return groups

    def values(self, s: np.ndarray) -> np.ndarray:
        """All terms at every point: shape (len(s), terms)."""
        s = np.asarray(s, dtype=complex).ravel()
        out = np.empty((s.size, self.size), complex)
        x = s[:, None, None]
        with np.errstate(all="ignore"):
            for idx, k, pz, pp, ez, ep, T in self.groups:
                v = np.broadcast_to(k.astype(complex), (s.size, k.size))
                if pz.shape[1]:
                    v = v * np.prod((x - pz) / (x - pp), axis=2)
                if ez.shape[1]:
                    v = v * np.prod(x - ez, axis=2)
                if ep.shape[1]:
                    v = v / np.prod(x - ep, axis=2)
                if T is not None:
                    v = v * np.exp(-s[:, None] * T)
                out[:, idx] = v
        return out


class _Factors:
    """One kind of factor (paired, unpaired zeros or unpaired poles) of every (sample, term):
    member m's factors are roots[start[m]:start[m] + count[m]] (and poles[...] for pairs)."""

    def __init__(self, lists: list[tuple[np.ndarray, np.ndarray | None]]):
        self.count = np.array([a.size for a, _ in lists], dtype=np.intp)
        self.start = np.concatenate([[0], np.cumsum(self.count)[:-1]]).astype(np.intp)
        self.roots = np.concatenate([a for a, _ in lists] + [np.zeros(0, complex)]).astype(complex)
        paired = lists and lists[0][1] is not None
        self.poles = np.concatenate([b for _, b in lists] + [np.zeros(0, complex)]).astype(complex) if paired else None
        self.any = bool(self.count.any())

    def product(self, s: np.ndarray, members: np.ndarray, point: np.ndarray):
        """(rows, prod) for the members that have factors of this kind: prod over each one's
        factors (x - z)/(x - p) or (x - r) at x = s[point], multiplied in the stored order."""
        n = self.count[members]
        rows = np.flatnonzero(n)
        if not rows.size:
            return rows, None
        n = n[rows]
        ends = np.cumsum(n)
        seg = ends - n
        pos = np.repeat(self.start[members[rows]] - seg, n)
        pos += np.arange(ends[-1])
        x = np.repeat(s[point[rows]], n)
        # in place: the same operations, without a fresh array for each
        f = np.subtract(x, self.roots[pos])
        if self.poles is not None:
            d = self.poles[pos]
            np.subtract(x, d, out=d)
            np.divide(f, d, out=f)
        return rows, np.multiply.reduceat(f, seg)


class FactorTable:
    """The terms of one wiring in many samples (sample i, term t: the Bank of sample i at
    position t): `values(s, which)` gives every term of sample which[j] at s[j]."""

    def __init__(self, banks: Sequence[Bank]):
        self.samples, self.size = len(banks), banks[0].size
        pairs, zeros, poles, k, T = [], [], [], [], []
        for b in banks:
            for g, t in zip(b.gains, b.transfers):
                c = min(t.zeros.size, t.poles.size)
                pairs.append((t.zeros[:c], t.poles[:c]))
                zeros.append((t.zeros[c:], None))
                poles.append((t.poles[c:], None))
                k.append(g * t.gain)
                T.append(t.delay)
        self.k = np.array(k, dtype=float).astype(complex)
        self.T = np.array(T, dtype=float)
        self.kinds = [(f, op) for f, op in ((_Factors(pairs), np.multiply), (_Factors(zeros), np.multiply),
                                            (_Factors(poles), np.divide)) if f.any]

    def values(self, s: np.ndarray, which: np.ndarray) -> np.ndarray:
        """gain * transfer(s[j]) of every term of sample which[j], complex, shape (len(s), terms);
        delays exact, a point on a pole gives inf or nan there."""
        s = np.asarray(s, dtype=complex).ravel()
        which = np.asarray(which, dtype=np.intp).ravel()
        members = (which[:, None] * self.size + np.arange(self.size)).ravel()
        point = np.repeat(np.arange(s.size), self.size)
        v = self.k[members]
        with np.errstate(all="ignore"):
            for factors, op in self.kinds:
                rows, p = factors.product(s, members, point)
                if p is not None:
                    v[rows] = op(v[rows], p)
            T = self.T[members]
            rows = np.flatnonzero(T > 0)
            if rows.size:
                v[rows] = v[rows] * np.exp(-s[point[rows]] * T[rows])
        return v.reshape(s.size, self.size)
