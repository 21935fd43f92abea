"""`sweep` against closed-form results for L = K exp(-sT)/s (re-derived here).

|L(jw)| = K/w, so the gain crossover is w_c = K; the phase is -90 deg - w T (rad), so
the lag at w_c is 90 deg + K T and the phase margin is PM = 90 deg - K T (in degrees,
K T * 180/pi). The delay margin is PM/w_c = (pi/2 - K T)/K = pi/(2K) - T. The phase is
-180 deg at w = pi/(2T), where |L| = 2 K T / pi: gain margin pi/(2 K T). The closed loop
is stable exactly when K T < pi/2 (the margins above vanish there).
"""
from __future__ import annotations

import math

import pytest

from tests.scenarios import DELAYED
from tests.sweep.recording import sweep_recorded

MODEL = DELAYED  # L = K exp(-sT)/s over a box of K and T (tests/scenarios.py)


def pm_deg(K, T):
    return 90.0 - math.degrees(K * T)


def _swept(tmp_path_factory, name: str, k_hi: float):
    """The sweep of MODEL with K up to `k_hi` (16 samples), recorded: (result, errors, plants)."""
    path = tmp_path_factory.mktemp("analytic") / f"{name}.loop"
    path.write_text(MODEL.format(k_hi=k_hi))
    return sweep_recorded(path, samples=16)


@pytest.fixture(scope="module")
def inside(tmp_path_factory):
    return _swept(tmp_path_factory, "inside", 1.2)


def test_worst_corner_and_values_inside_the_stable_region(inside):
    result, errors, plants = inside
    assert not errors and result.stable_everywhere
    (b,) = result.breaks
    K, T = 1.2, 1.0  # every margin falls as K and T grow: the worst plant is that corner
    worst = dict(b.worst)
    assert dict(worst["phase_margin_deg"].at) == {"K": K, "T": T}
    assert worst["phase_margin_deg"].value == pytest.approx(pm_deg(K, T), rel=1e-6)  # analytic, above
    assert dict(worst["delay_margin_s"].at) == {"K": K, "T": T}
    assert worst["delay_margin_s"].value == pytest.approx(math.pi / (2 * K) - T, rel=1e-6)
    assert dict(worst["gain_margin_up_db"].at) == {"K": K, "T": T}
    assert worst["gain_margin_up_db"].value == pytest.approx(20 * math.log10(math.pi / (2 * K * T)), rel=1e-6)
    # the nominal point K = 1, T = 0.5
    assert worst["phase_margin_deg"].nominal == pytest.approx(pm_deg(1.0, 0.5), rel=1e-6)
    # no plant anywhere had a smaller phase margin than the formula allows
    assert all(o.breaks[0].value("phase_margin") >= pm_deg(K, T) - 1e-6 for _, o in plants)
    (req,) = b.requirements
    assert req.result.met and dict(req.at) == {"K": K, "T": T}


@pytest.fixture(scope="module")
def crossing(tmp_path_factory):
    return _swept(tmp_path_factory, "crossing", 2.0)


def test_every_plant_has_the_analytic_verdict(crossing):
    result, errors, plants = crossing
    assert not errors
    unstable = 0
    for p, o in plants:
        kt = p["K"] * p["T"]
        if abs(kt - math.pi / 2) > 1e-6:
            assert o.breaks[0].stable == (kt < math.pi / 2), p
        unstable += not o.breaks[0].stable
    (b,) = result.breaks
    assert unstable > 0 and b.unstable_samples == unstable  # the nominal plant (K T = 0.5) is stable
    assert b.samples == len(plants) + 1 and not result.stable_everywhere
    assert dict(b.first_unstable_at)["K"] * dict(b.first_unstable_at)["T"] > math.pi / 2


def test_the_stability_boundary_is_found_where_k_t_is_pi_over_2(crossing):
    result, _, _ = crossing
    (b,) = result.breaks
    assert b.boundaries
    for k in b.boundaries:
        stable, unstable = dict(k.stable_at), dict(k.unstable_at)
        assert stable["K"] * stable["T"] < math.pi / 2 < unstable["K"] * unstable["T"]
        assert stable["K"] * stable["T"] == pytest.approx(math.pi / 2, rel=2e-3)
        assert unstable["K"] * unstable["T"] == pytest.approx(math.pi / 2, rel=2e-3)
    # the requirement is judged at an unstable plant: not met, no value
    (req,) = b.requirements
    assert not req.result.met and req.result.value is None
    at = dict(req.at)
    assert at["K"] * at["T"] > math.pi / 2
