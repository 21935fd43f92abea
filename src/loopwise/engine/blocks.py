"""Many block applications evaluated at once (part of the reduce stage).

A `Bank` groups the factored transfers of a set of wiring terms by shape (no padding,
no masks), so that all their values at all frequencies come from a few numpy
operations: `values(s)` has shape (len(s), terms). Each transfer is evaluated as
`Transfer.evaluate` does it - every zero paired with a pole, `(s - z)/(s - p)`, so
intermediate values stay near 1 at high order, the unpaired factors after, the
delay as `exp(-T s)` - which keeps the exact factored form next to the poles on the
imaginary axis (no expanded polynomial loses digits there).

Many parameter samples of one wiring each keep their own Bank; batch.StackedBank sends
each sample's points to its bank.
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

from ..transfer import Transfer

__all__ = ["Bank"]


class Bank:
    """gain_i * transfer_i(s) for terms i (a transfer of None is a plain gain).

    Terms are grouped by shape (paired factors, unpaired zeros, unpaired poles, delay or
    not), so each group evaluates with plain broadcasting: no padding, no masks.
    """

    def __init__(self, gains: Sequence[float], transfers: Sequence[Transfer | None]):
        tfs = [t if t is not None else Transfer.constant(1.0) for t in transfers]
        self.size = len(tfs)
        self.delay = np.array([t.delay for t in tfs], dtype=float)
        self.has_delay = bool(np.any(self.delay > 0))
        shapes: dict[tuple[int, int, int, bool], list[int]] = {}
        for i, t in enumerate(tfs):
            c = min(t.zeros.size, t.poles.size)
            shapes.setdefault((c, t.zeros.size - c, t.poles.size - c, t.delay > 0), []).append(i)
        self.groups = []
        for (c, nz, npl, delayed), idx in shapes.items():
            members = [tfs[i] for i in idx]
            k = np.array([gains[i] * tfs[i].gain for i in idx], dtype=float)
            pz = np.array([t.zeros[:c] for t in members], complex).reshape(len(idx), c)
            pp = np.array([t.poles[:c] for t in members], complex).reshape(len(idx), c)
            ez = np.array([t.zeros[c:] for t in members], complex).reshape(len(idx), nz)
            ep = np.array([t.poles[c:] for t in members], complex).reshape(len(idx), npl)
            T = np.array([t.delay for t in members]) if delayed else None
            self.groups.append((np.array(idx), k, pz, pp, ez, ep, T))

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
