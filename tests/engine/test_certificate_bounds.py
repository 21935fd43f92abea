"""The certificate's cheap tests against the exact ones they stand in for (numpy).

`_perron_below` may only say yes where numpy's eigenvalues put the spectral radius below
the level (Collatz-Wielandt: rho(P) <= max (P x)_i / x_i for x > 0); `_acyclic` may only
say yes where I - A0 has determinant 1.
"""
from __future__ import annotations

import numpy as np

from loopwise.engine.certificate import _acyclic, _perron_below


def test_perron_bound_never_claims_a_radius_it_cannot_show():
    rng = np.random.default_rng(20261202)
    shown = 0
    for _ in range(400):
        n = int(rng.integers(1, 30))
        Minv = np.abs(rng.standard_normal((n, n))) * (rng.random((n, n)) < 0.3)
        B = np.abs(rng.standard_normal((n, n))) * (rng.random((n, n)) < 0.3) * 10.0 ** rng.uniform(-3, 1)
        rho = float(np.max(np.abs(np.linalg.eigvals(Minv @ B))))
        if _perron_below(Minv, B, 0.9):
            assert rho < 0.9
            shown += 1
    assert shown > 50  # the bound does the work it is there for


def test_perron_bound_shows_a_radius_just_below_the_level():
    # P = 0.89 times a cyclic permutation: every ratio is 0.89 from x = 1 on
    P = 0.89 * np.roll(np.eye(5), 1, axis=1)
    assert _perron_below(np.eye(5), P, 0.9)
    assert not _perron_below(np.eye(5), P / 0.89 * 0.91, 0.9)


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
