"""The sampling design of a sweep: which points of the parameter box are evaluated first.

Points live in the unit cube (one axis per ranged param, 0 = its low end, 1 = its
high end) until `to_values` maps them onto the box. The design is, in order:

1. the nominal point (the model as written, with `--set` applied);
2. corners: every corner of the box up to `CORNER_LIMIT` ranged params (at most
   2^8 = 256 corners); beyond that `MAX_CORNERS` corners: the two extreme corners
   (all low, all high), every corner with one param at the other end from the rest
   (2n of them), and the rest drawn without repetition with the seed;
3. a space-filling set of `samples` points: the Halton sequence (Halton 1960,
   Numerische Mathematik 2, 84-90; bases the first primes, points 1..N) shifted
   modulo 1 by one random vector drawn with the seed (a Cranley-Patterson rotation,
   SIAM J. Numer. Anal. 13(6), 1976), so that different seeds give different but
   equally even sets.

Everything is deterministic for a given seed. Pure functions over numpy arrays.
"""
from __future__ import annotations

import numpy as np

__all__ = ["CORNER_LIMIT", "MAX_CORNERS", "corners", "halton", "space_filling", "to_values", "spacing",
           "describe"]

#: up to this many ranged params every corner of the box is evaluated
CORNER_LIMIT = 8
#: beyond CORNER_LIMIT, this many corners (a documented selection, see `corners`)
MAX_CORNERS = 2 ** CORNER_LIMIT


def _primes(count: int) -> list[int]:
    out, n = [], 2
    while len(out) < count:
        if all(n % p for p in out if p * p <= n):
            out.append(n)
        n += 1
    return out


def halton(count: int, dim: int, start: int = 1) -> np.ndarray:
    """Points start .. start+count-1 of the Halton sequence in `dim` dimensions, shape (count, dim)."""
    out = np.zeros((count, dim))
    index = np.arange(start, start + count)
    for j, base in enumerate(_primes(dim)):
        n = index.copy()
        scale = 1.0 / base
        while np.any(n > 0):
            n, digit = np.divmod(n, base)
            out[:, j] += digit * scale
            scale /= base
    return out


def space_filling(count: int, dim: int, seed: int) -> np.ndarray:
    """`count` points spread evenly over the unit cube: a Halton set rotated by the seed."""
    if count <= 0 or dim == 0:
        return np.zeros((0, dim))
    shift = np.random.default_rng([seed, 1]).random(dim)
    return np.mod(halton(count, dim) + shift, 1.0)


def _binary(index: np.ndarray, dim: int) -> np.ndarray:
    return ((index[:, None] >> np.arange(dim)[None, :]) & 1).astype(float)


def corners(dim: int, seed: int) -> np.ndarray:
    """Corners of the unit cube, shape (k, dim): all of them up to CORNER_LIMIT params."""
    if dim == 0:
        return np.zeros((0, 0))
    if dim <= CORNER_LIMIT:
        return _binary(np.arange(2 ** dim), dim)
    eye = np.eye(dim)
    chosen = [np.zeros(dim), np.ones(dim), *eye, *(1.0 - eye)]
    seen = {tuple(c) for c in chosen}
    rng = np.random.default_rng([seed, 2])
    while len(chosen) < MAX_CORNERS:
        c = (rng.random(dim) < 0.5).astype(float)
        if tuple(c) not in seen:
            seen.add(tuple(c))
            chosen.append(c)
    return np.array(chosen)


def to_values(unit: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Unit-cube points onto the box [lo, hi] (clipped, so that rounding never leaves it)."""
    lo, hi = np.asarray(lo, float), np.asarray(hi, float)
    return np.clip(lo + np.asarray(unit, float) * (hi - lo), lo, hi)


def spacing(count: int, dim: int) -> float:
    """The typical distance between neighbours of `count` evenly spread points, as a
    fraction of each range: count^(-1/dim)."""
    if dim == 0 or count <= 0:
        return 1.0
    return float(count ** (-1.0 / dim))


def describe(count: int, dim: int) -> str:
    """The density in words: about one point per this share of each range."""
    return f"about {100.0 * spacing(count, dim):.0f}% of each range between neighbouring points" \
        if dim else "no ranged params"

