"""The certificate's cheap tests against the exact ones they stand in for (numpy).

`_perron_side` may only say "below" where numpy's eigenvalues put the spectral radius
below the level, and "not below" where they do not (Collatz-Wielandt bounds from above
and below); `_acyclic` may only say yes where I - A0 has determinant 1.
"""
from __future__ import annotations

import numpy as np

from loopwise.engine.certificate import _acyclic, _perron_side


def test_perron_bounds_never_contradict_the_eigenvalues():
    rng = np.random.default_rng(20261202)
    decided = {True: 0, False: 0}
    for _ in range(600):
        n = int(rng.integers(1, 30))
        Minv = np.abs(rng.standard_normal((n, n))) * (rng.random((n, n)) < 0.3)
        B = np.abs(rng.standard_normal((n, n))) * (rng.random((n, n)) < 0.3) * 10.0 ** rng.uniform(-3, 1)
        rho = float(np.max(np.abs(np.linalg.eigvals(Minv @ B))))
        side = _perron_side(Minv, B, 0.9)
        if side is not None:
            assert side == (rho < 0.9), (side, rho)
            decided[side] += 1
    assert min(decided.values()) > 50  # the bounds do the work they are there for


def test_perron_bounds_decide_just_either_side_of_the_level():
    # P = c times a cyclic permutation (every loop of length 5: power iterations with P
    # alone would cycle); rho = c
    cycle = np.roll(np.eye(5), 1, axis=1)
    assert _perron_side(np.eye(5), 0.89 * cycle, 0.9) is True
    assert _perron_side(np.eye(5), 0.91 * cycle, 0.9) is False
    # reducible: a strong 2-cycle fed by a weak chain; the weak rows must not hide rho = 2
    P = np.zeros((6, 6))
    P[0, 1] = P[1, 0] = 2.0
    P[2, 3], P[3, 4], P[4, 5], P[1, 2] = 1e-6, 1e-6, 1e-6, 1e-6
    assert _perron_side(np.eye(6), P, 0.9) is False
    assert _perron_side(np.eye(6), np.zeros((6, 6)), 0.9) is True


def test_acyclic_limits_give_determinant_one():
    chain = np.zeros((4, 4))
    chain[1, 0], chain[2, 1], chain[3, 2] = 3.0, -1.0, 2.5  # 0 -> 1 -> 2 -> 3
    assert _acyclic(chain)
    assert abs(np.linalg.det(np.eye(4) - chain) - 1.0) < 1e-12  # numpy (rounding aside)
    loop = chain.copy()
    loop[0, 3] = 0.5  # closes 0 -> 1 -> 2 -> 3 -> 0
    assert not _acyclic(loop)
    self_loop = np.zeros((2, 2))
    self_loop[1, 1] = 1.0  # I - A0 singular: must not pass as acyclic
    assert not _acyclic(self_loop)
