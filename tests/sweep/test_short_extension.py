"""A sweep's short extension (engine/stability.py: `reach_rule`, `settled`, `ShortProbe`;
docs/method.md, "The sweep's short extension"): the margins' extension of each plant stops
at the settling frequency only where that leaves every margin value the sweep records as
`check` gives it, and the plants where it does not get the rest of their extension
(`Batch.lengthen`) and their margins again.

References: `check` of the plant alone (`check_text` with the params set, what
`loopwise check --set NAME=VALUE ...` runs), exact to the last digit; the closed-form
gain margin pi/(2 K T) of L = K exp(-sT)/s (re-derived in tests/reference/test_sweep_analytic.py);
the bounds on the disk |L| < l checked on numpy samples of the disk.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

import loopwise.engine.stability as stability
from loopwise import check_text
from loopwise.analysis import check_many, prepare_model
from loopwise.engine.stability import REACH_GRID, REACH_CAP, SETTLE_LEVEL, reach_rule, settled
from loopwise.language.resolve import parse_model, resolve_parsed
from loopwise.settings import Settings
from loopwise.sweep.evaluate import evaluate_points, outcome_of
from loopwise.sweep.results import WORST_KEYS
from tests.scenarios import DELAYED
from tests.sweep.recording import sweep_recorded

SERVO = Path(__file__).resolve().parents[2] / "models" / "servo_axis.loop"


@pytest.fixture
def verdicts(monkeypatch):
    """Every answer of `stability.settled` (True: the short extension settled the curve)."""
    seen: list[bool] = []
    real = stability.settled

    def spy(*args, **kwargs):
        seen.append(real(*args, **kwargs))
        return seen[-1]

    monkeypatch.setattr(stability, "settled", spy)
    return seen


def _check(text: str, file: str, at) -> object:
    """The record of `check --set` at the plant `at` ((name, value) pairs)."""
    return outcome_of(_checked(text, file, at))


def _checked(text: str, file: str, at):
    return check_text(text, file, settings=Settings(overrides=tuple(at)))


#: each worst value of a sweep as `check` reports it in its margins
AS_CHECKED = {
    "phase_margin_deg": lambda m: m.phase_margin_deg, "gain_margin_up_db": lambda m: m.gain_margin_up_db,
    "gain_margin_down_db": lambda m: m.gain_margin_down_db, "delay_margin_s": lambda m: m.delay_margin_s,
    "disk_margin_alpha": lambda m: m.disk_margin.alpha, "sensitivity_peak": lambda m: m.sensitivity_peak.value,
    "complementary_peak": lambda m: m.complementary_peak.value,
}


def test_the_servo_sweep_stops_short_and_its_worst_values_are_those_of_check_there(verdicts):
    result, errors, plants = sweep_recorded(SERVO, samples=12)
    assert not errors and result.stable_everywhere
    # every curve of every plant was settled by the short extension: no plant lengthened
    assert verdicts and all(verdicts)
    text = SERVO.read_text()
    compared = 0
    for b, br in enumerate(result.breaks):
        for key, _ in WORST_KEYS:
            worst = br.worst_of(key)
            if worst.at is None or worst.value is None or not math.isfinite(worst.value):
                continue
            ref = AS_CHECKED[key](_checked(text, str(SERVO), worst.at).breaks[b].margins)
            assert worst.value == ref, (br.name, key)  # to the last digit
            compared += 1
    # all but the position loop's gain margin down (unbounded: no gain reduction destabilises it)
    assert compared == 3 * len(WORST_KEYS) - 1


def test_short_and_whole_extensions_give_identical_records():
    parsed = parse_model(SERVO.read_text(), str(SERVO))
    rows = [{"kt": 0.114 + 0.012 * a, "J": 2.2e-4 + 0.7e-4 * b, "Td": 140e-6 + 20e-6 * c}
            for a, b, c in [(0, 0, 0), (1, 1, 1), (0.3, 0.8, 0.5), (0.9, 0.1, 0.7), (0.5, 0.5, 0.0)]]
    preps = [prepare_model(resolve_parsed(parsed, r)) for r in rows]
    short = check_many(preps, stabilising_gains=False, short=True)
    whole = check_many(preps, stabilising_gains=False)
    assert [outcome_of(r) for r in short] == [outcome_of(r) for r in whole]
    # ... and the short responses do stop below the whole ones
    for s, w in zip(short, whole):
        for bs, bw in zip(s.breaks, w.breaks):
            assert bs.response.freq[-1] < bw.response.freq[-1] / 5


#: L = K exp(-sT)/s with K T from 0.002 to 0.5: the gain margin pi/(2 K T) ranges from
#: 10 dB to 58 dB, so the plants with K T < pi/200 (gain margin over 40 dB: the phase
#: crossover inside |L| < SETTLE_LEVEL) cannot be settled short and are lengthened
SMALL_LOOP = DELAYED.replace("param K = 1 in [0.5, {k_hi}]", "param K = 0.1 in [0.01, 1]").replace(
    "param T = 0.5 in [0.2, 1]", "param T = 0.2 in [0.2, 0.5]")


@pytest.mark.parametrize("text", ["servo", "small"])
def test_a_short_response_lengthened_is_the_whole_response(text):
    from loopwise.engine.batch import Batch

    if text == "servo":
        parsed = parse_model(SERVO.read_text(), str(SERVO))
        rows = [{"kt": 0.114, "J": 2.9e-4, "Td": 160e-6}, {"kt": 0.126, "J": 2.2e-4, "Td": 140e-6},
                {"kt": 0.12, "J": 2.5e-4, "Td": 150e-6}]
    else:
        parsed = parse_model(SMALL_LOOP, "<small>")
        rows = [{"K": K, "T": T} for K, T in [(0.01, 0.2), (0.05, 0.5), (0.3, 0.3), (1.0, 0.5)]]
    reductions = [prepare_model(resolve_parsed(parsed, r)).reduction for r in rows]
    batch = Batch(reductions)
    short = batch.count(short=True)
    assert all(c.short is not None for m in short for c in m.counts.values())  # every response cut
    longer = batch.lengthen(short, list(range(len(rows))))
    whole = Batch(reductions).count()
    for a, b in zip(longer, whole):
        for name, c in b.counts.items():
            got = a.counts[name]
            assert got.short is None and (got.P, got.N, got.Z) == (c.P, c.N, c.Z)
            assert np.array_equal(got.response.s, c.response.s) and np.array_equal(got.response.L, c.response.L)
            assert np.array_equal(got.response.on_axis, c.response.on_axis)


def test_plants_the_short_extension_cannot_settle_get_the_whole_one(tmp_path, verdicts):
    path = tmp_path / "small.loop"
    path.write_text(SMALL_LOOP)
    _, errors, plants = sweep_recorded(path, samples=16)
    assert not errors
    # both kinds in the same batches: settled short, and lengthened to the reach
    assert True in verdicts and False in verdicts
    for values, o in plants:
        K, T = values["K"], values["T"]
        assert o == _check(SMALL_LOOP, str(path), values.items())  # check of the plant, to the last digit
        gm = o.breaks[0].value("gain_margin_up")
        assert gm == pytest.approx(20 * math.log10(math.pi / (2 * K * T)), rel=1e-6)  # analytic
    assert any(20 * math.log10(math.pi / (2 * v["K"] * v["T"])) > 40 for v, _ in plants)


def test_settled_needs_every_value_beyond_the_bounds_of_the_disk():
    l = SETTLE_LEVEL
    tops = {"sensitivity": 1.5, "complementary": 1.1, "balanced": 2.5}
    assert settled(-0.5, tops, 0.5 * l, 6.0)
    assert not settled(-0.5, tops, 0.5 * l, None)                        # gain margin unbounded
    assert not settled(-0.5, tops, 0.5 * l, -20 * math.log10(l) + 1e-9)  # refined end inside the disk
    assert not settled(-0.9 * l, tops, 0.5 * l, 6.0)                     # sampled end inside the disk
    assert not settled(-0.5, tops, 1.01 * l, 6.0)                        # the cut itself outside the disk
    for name, bound in (("sensitivity", 1 / (1 - l)), ("complementary", l / (1 - l)),
                        ("balanced", (1 + l) / (1 - l))):
        assert not settled(-0.5, {**tops, name: bound}, 0.5 * l, 6.0), name
        assert not settled(-0.5, {**tops, name: bound * (1 + 1e-9)}, 0.5 * l, 6.0), name  # peaks' own tie
        assert settled(-0.5, {**tops, name: bound * (1 + 1e-5)}, 0.5 * l, 6.0), name


def test_the_bounds_hold_on_the_disk():
    # numpy samples of |L| < l, up to its edge: the suprema `settled` uses are not exceeded
    l = SETTLE_LEVEL
    r = l * np.sqrt(np.linspace(0.0, 1.0, 401))[:, None]
    L = (r * np.exp(1j * np.linspace(-np.pi, np.pi, 721))[None, :]).ravel()
    for value, bound in ((np.abs(1 / (1 + L)), 1 / (1 - l)), (np.abs(L / (1 + L)), l / (1 - l)),
                         (np.abs((1 - L) / (1 + L)), (1 + l) / (1 - l))):
        assert np.max(value) <= bound * (1 + 1e-12)
        # ... and reached at the disk's edge (L = -l): the bounds are the suprema, not looser
        assert np.max(value) == pytest.approx(bound, rel=1e-12)
    assert np.all(np.abs(L) < 1)  # no gain crossover


def test_the_settling_frequency_is_read_on_the_reach_grid():
    R = 10.0
    w = R * REACH_GRID
    mag = (30.0 / w)[:, None] * np.ones((1, 2))  # |L| = 30/w: below 0.01 from w = 3000
    mag[:, 1] *= 0.5
    reach, settle = reach_rule(w, mag, R)
    above = w[mag.max(axis=1) >= SETTLE_LEVEL]
    assert settle == w[np.searchsorted(w, above[-1]) + 1]  # the next grid frequency
    assert np.all(mag[w >= settle] < SETTLE_LEVEL) and R < settle < reach
    # a loop that never falls below the level, or a capped reach: no settling frequency
    assert reach_rule(w, np.full((w.size, 1), 0.5), R)[1] is None
    flat = np.where(w < 1e4, 0.1, 2e-3)[:, None]  # over REACH_LEVEL to the grid's end: capped
    reach, settle = reach_rule(w, flat, R)
    assert reach == REACH_CAP * R and settle is None
    # below the level from R on: the settling frequency is R itself
    assert reach_rule(w, np.where(w < R, 1.0, 1e-4)[:, None], R)[1] == R


def test_evaluate_points_takes_the_short_path_for_the_servo(verdicts):
    parsed = parse_model(SERVO.read_text(), str(SERVO))
    out = evaluate_points(parsed, ["kt", "J", "Td"], np.array([[0.114, 2.9e-4, 160e-6], [0.126, 2.2e-4, 140e-6]]))
    assert len(verdicts) == 6 and all(verdicts) and all(o.stable for o in out)


def test_a_far_extension_that_could_run_out_of_its_budget_is_traced_whole():
    from types import SimpleNamespace

    from loopwise.engine.stability import EXTENSION_SAMPLES, SHORT_BUDGET, extension_pieces, stops_short

    R, reach, settle = 100.0, 1e5, 3e3
    ct = SimpleNamespace(R=R, reach=reach, settle=settle)
    # the step rule's count (reach - R) T / (pi/4) against a tenth of the budget
    T_edge = SHORT_BUDGET * EXTENSION_SAMPLES * (math.pi / 4) / (reach - R)
    assert stops_short(ct, 0.0) and stops_short(ct, 0.99 * T_edge)
    assert not stops_short(ct, 1.01 * T_edge)
    assert not stops_short(SimpleNamespace(R=R, reach=reach, settle=None), 0.0)
    # the short pieces are the whole pieces' first: the same samples up to the settling frequency
    whole, short = extension_pieces(R, reach, settle), extension_pieces(R, reach, settle, short=True)
    assert short == whole[:1] and (whole[0].a, whole[0].b, whole[1].a, whole[1].b) == (R, settle, settle, reach)
    assert extension_pieces(R, reach, R, short=True) == [] and extension_pieces(R, reach, R) == \
        extension_pieces(R, reach, None)
