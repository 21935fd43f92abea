"""Many block applications evaluated at once (part of the reduce stage).

A `Bank` packs the factored transfers of a set of wiring terms into padded root
arrays, so that all their values at all frequencies come from a few numpy
operations: `values(s)` has shape (len(s), terms). Each transfer is evaluated as
`Transfer.evaluate` does it - every zero paired with a pole, `(s - z)/(s - p)`, so
intermediate values stay near 1 at high order, the unpaired factors after, the
delay as `exp(-T s)` - which keeps the exact factored form next to the poles on the
imaginary axis (no expanded polynomial loses digits there).

A bank of several parameter samples of the same terms (`stack`) evaluates to shape
(samples, len(s), terms); batch.py builds on it.
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

from ..transfer import Transfer

__all__ = ["Bank"]


def _pad(rows: Sequence[np.ndarray], width: int) -> tuple[np.ndarray, np.ndarray]:
    out = np.zeros((len(rows), width), complex)
    mask = np.zeros((len(rows), width), bool)
    for i, r in enumerate(rows):
        out[i, :r.size] = r
        mask[i, :r.size] = True
    return out, mask


class Bank:
    """gain_i * transfer_i(s) for terms i (a transfer of None is a plain gain)."""

    def __init__(self, gains: Sequence[float], transfers: Sequence[Transfer | None]):
        tfs = [t if t is not None else Transfer.constant(1.0) for t in transfers]
        self.size = len(tfs)
        self.k = np.array([g * t.gain for g, t in zip(gains, tfs)], dtype=float)
        common = [min(t.zeros.size, t.poles.size) for t in tfs]
        self.pz, self.pair = _pad([t.zeros[:c] for t, c in zip(tfs, common)], max(common, default=0))
        self.pp, _ = _pad([t.poles[:c] for t, c in zip(tfs, common)], max(common, default=0))
        extra_z = [t.zeros[c:] for t, c in zip(tfs, common)]
        extra_p = [t.poles[c:] for t, c in zip(tfs, common)]
        self.ez, self.ez_mask = _pad(extra_z, max((r.size for r in extra_z), default=0))
        self.ep, self.ep_mask = _pad(extra_p, max((r.size for r in extra_p), default=0))
        self.delay = np.array([t.delay for t in tfs], dtype=float)
        self.has_delay = bool(np.any(self.delay > 0))

    def values(self, s: np.ndarray) -> np.ndarray:
        """All terms at every point: shape (len(s), terms)."""
        s = np.asarray(s, dtype=complex).reshape(-1, 1)
        out = np.broadcast_to(self.k.astype(complex), (s.shape[0], self.size)).copy()
        if self.size == 0:
            return out
        with np.errstate(all="ignore"):
            if self.pz.shape[1]:
                x = s[:, :, None]
                ratio = np.where(self.pair, (x - self.pz) / (x - self.pp), 1.0)
                out *= np.prod(ratio, axis=2)
            if self.ez.shape[1]:
                out *= np.prod(np.where(self.ez_mask, s[:, :, None] - self.ez, 1.0), axis=2)
            if self.ep.shape[1]:
                out /= np.prod(np.where(self.ep_mask, s[:, :, None] - self.ep, 1.0), axis=2)
            if self.has_delay:
                out *= np.exp(-s * self.delay)
        return out
