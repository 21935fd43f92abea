"""The term values of many parameter samples from one flat table (engine/blocks.py,
FactorTable) against each sample's own Bank, and both against numpy's polynomial
evaluation (numpy.polyval of the expanded numerator and denominator, times exp(-sT))."""
from __future__ import annotations

import numpy as np

from loopwise.engine.blocks import Bank, FactorTable
from loopwise.transfer import Transfer


def _samples(rng, count: int, terms: int) -> list[tuple[list[float], list]]:
    out = []
    for _ in range(count):
        gains, tfs = [], []
        for _ in range(terms):
            nz, npl = rng.integers(0, 7), rng.integers(0, 7)
            z = rng.normal(size=nz) + 1j * rng.normal(size=nz) * (rng.random(nz) < 0.5)
            p = rng.normal(size=npl) + 1j * rng.normal(size=npl) * (rng.random(npl) < 0.5)
            delay = float(rng.random()) if rng.random() < 0.3 else 0.0
            tfs.append(None if rng.random() < 0.2 else Transfer(float(rng.normal()), z, p, delay))
            gains.append(float(rng.normal()))
        out.append((gains, tfs))
    return out


def test_every_sample_gets_its_own_banks_values_bit_for_bit_whatever_its_orders():
    rng = np.random.default_rng(7)
    samples = _samples(rng, 60, 4)
    banks = [Bank(g, t) for g, t in samples]
    table = FactorTable(banks)
    s = 3.0 * (rng.normal(size=3000) + 1j * rng.normal(size=3000))
    s[:5] = 0.0
    which = rng.integers(0, len(banks), size=s.size)
    got = table.values(s, which)
    for i, bank in enumerate(banks):
        rows = np.flatnonzero(which == i)
        want = bank.values(s[rows])
        same = (got[rows] == want) | (np.isnan(got[rows]) & np.isnan(want))
        assert same.all(), i


def test_the_values_are_those_of_the_expanded_polynomials():
    rng = np.random.default_rng(8)
    samples = _samples(rng, 20, 3)
    table = FactorTable([Bank(g, t) for g, t in samples])
    s = 1j * np.logspace(-1, 1, 50) + 0.3
    for i, (gains, tfs) in enumerate(samples):
        got = table.values(s, np.full(s.size, i))
        for t, (g, tf) in enumerate(zip(gains, tfs)):
            tf = tf or Transfer.constant(1.0)
            num, den = (np.polyval(np.atleast_1d(np.poly(r)), s) for r in (tf.zeros, tf.poles))
            want = g * tf.gain * num / den * np.exp(-tf.delay * s)
            np.testing.assert_allclose(got[:, t], want, rtol=1e-9)
