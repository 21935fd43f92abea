"""The sampling design: corners, the space-filling set, the mapping onto the box."""
from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import qmc

from loopwise.sweep.design import CORNER_LIMIT, MAX_CORNERS, corners, halton, space_filling, spacing, to_values


@pytest.mark.parametrize("dim", [1, 2, 3, 5])
def test_halton_points_are_scipys_unscrambled_halton_sequence(dim):
    # reference: scipy.stats.qmc.Halton(scramble=False), whose point 0 is the origin;
    # ours starts at point 1
    reference = qmc.Halton(d=dim, scramble=False).random(65)[1:]
    np.testing.assert_allclose(halton(64, dim), reference, rtol=0, atol=1e-15)


def test_space_filling_set_is_deterministic_per_seed_and_spreads_evenly():
    a, b, c = space_filling(200, 3, seed=4), space_filling(200, 3, seed=4), space_filling(200, 3, seed=5)
    np.testing.assert_array_equal(a, b)
    assert not np.allclose(a, c)
    assert a.shape == (200, 3) and a.min() >= 0.0 and a.max() < 1.0
    # even spread: every one of the 8 octants holds 25 +- 6 points (a rotated low-discrepancy
    # set; an independent uniform draw would often miss this by more); the centred L2
    # discrepancy from scipy.stats.qmc.discrepancy stays below that of a uniform draw
    octants = np.bincount((a >= 0.5) @ np.array([1, 2, 4]), minlength=8)
    assert np.all(np.abs(octants - 25) <= 6), octants
    uniform = np.random.default_rng(0).random((200, 3))
    assert qmc.discrepancy(a) < qmc.discrepancy(uniform)


def test_every_corner_up_to_the_limit():
    for dim in (1, 2, 3, CORNER_LIMIT):
        c = corners(dim, seed=0)
        assert c.shape == (2 ** dim, dim)
        assert len({tuple(row) for row in c}) == 2 ** dim
        assert set(np.unique(c)) <= {0.0, 1.0}


def test_beyond_the_limit_a_documented_selection_of_corners():
    dim = CORNER_LIMIT + 3
    c = corners(dim, seed=7)
    rows = {tuple(row) for row in c}
    assert c.shape == (MAX_CORNERS, dim) and len(rows) == MAX_CORNERS
    assert set(np.unique(c)) <= {0.0, 1.0}
    assert tuple(np.zeros(dim)) in rows and tuple(np.ones(dim)) in rows
    for i in range(dim):  # each param alone at the other end, from either extreme
        assert tuple(np.eye(dim)[i]) in rows and tuple(1.0 - np.eye(dim)[i]) in rows
    np.testing.assert_array_equal(c, corners(dim, seed=7))


def test_unit_points_map_onto_the_box_and_never_leave_it():
    lo, hi = np.array([2.0e-4, 0.1]), np.array([3.5e-4, 0.3])
    v = to_values(np.array([[0.0, 1.0], [0.5, 0.25], [1.0, 0.0]]), lo, hi)
    np.testing.assert_allclose(v, [[2.0e-4, 0.3], [2.75e-4, 0.15], [3.5e-4, 0.1]], rtol=1e-15)
    assert np.all(v >= lo) and np.all(v <= hi)


def test_spacing_is_the_typical_neighbour_distance():
    assert spacing(100, 2) == pytest.approx(0.1)
    assert spacing(1000, 3) == pytest.approx(0.1)
