"""`loopwise.compare` on hand-built results: directions, deltas, the regression policy.

The margin values below are invented inputs, not claims about any loop; what is
checked is the comparison (after - before, better/worse, thresholds).
"""
from __future__ import annotations

import dataclasses

import pytest

from loopwise.compare import Unreadable, compare
from loopwise.errors import Finding, Span
from loopwise.language.requirements import METRICS
from loopwise.report import diff_text
from loopwise.results import (CAUTION, BreakResult, DiskMargin, GainCrossover, Margins, ModelResult,
                              Peak, PhaseCrossover, RequirementResult)
from loopwise.settings import Regression


def margins(pm=52.1, up=12.0, down=None, delay=0.10, alpha=0.8, ms=1.5, wc=2.0) -> Margins:
    return Margins(
        gain_crossovers=(GainCrossover(wc, pm, pm),) if wc else (),
        phase_crossovers=(PhaseCrossover(5.0, up),) if up else (),
        phase_margin_deg=pm, gain_margin_up_db=up, gain_margin_down_db=down,
        delay_margin_s=delay,
        disk_margin=DiskMargin(alpha, (-5.0, 7.0), 40.0, 2.0) if alpha else None,
        sensitivity_peak=Peak(ms, 3.0), complementary_peak=Peak(1.2, 1.0), crossover_freq=wc)


def brk(name="loop", stable=True, z=0, m=None, reqs=(), at="y") -> BreakResult:
    if m is None and stable:
        m = margins()
    return BreakResult(name=name, at=at, line=3, stable=stable, open_loop_rhp_poles=0,
                       encirclements=z, closed_loop_rhp_poles=z, marginal=False, marginal_freq=None,
                       margins=m if stable else None, requirements=tuple(reqs), warnings=())


def model(*breaks, file="m.loop", name="m") -> ModelResult:
    z = max((b.closed_loop_rhp_poles for b in breaks), default=0)
    return ModelResult(file=file, model=name, stable=z == 0, closed_loop_rhp_poles=z, breaks=breaks)


def req(met, value=9.5, limit=6.0, metric="gain_margin", text="") -> RequirementResult:
    return RequirementResult(metric, ">=", limit, value, met, 9, unit=METRICS[metric].unit, limit_text=text)


def one(before: BreakResult, after: BreakResult, policy=None):
    result = compare({"m.loop": model(before)}, {"m.loop": model(after)}, policy)
    return result, result.models[0]


def change(result, key):
    (d,) = result.models[0].breaks
    (c,) = [m for m in d.margins if m.metric == key]
    return c


def test_identical_results_are_unchanged_and_exit_0():
    a = model(brk("inner"), brk("outer"))
    b = model(brk("inner"), brk("outer"))
    result = compare({"m.loop": a}, {"m.loop": b})
    assert result.models[0].status == "unchanged"
    assert result.models[0].breaks_unchanged == 2
    assert result.exit_code == 0
    text = diff_text.render(result)
    assert "1 model unchanged" in text and CAUTION in text


def test_phase_margin_loss_beyond_5_deg_is_a_regression_with_signed_delta():
    result, m = one(brk(m=margins(pm=52.1)), brk(m=margins(pm=38.4)))
    c = change(result, "phase_margin_deg")
    assert c.delta == pytest.approx(38.4 - 52.1)
    assert c.direction == "worse" and c.regression
    assert result.exit_code == 1
    assert "phase margin  52.10 deg -> 38.40 deg  (-13.70, worse)  REGRESSION" in diff_text.render(result)


def test_small_phase_margin_loss_is_worse_but_not_a_regression():
    result, _ = one(brk(m=margins(pm=52.0)), brk(m=margins(pm=48.0)))
    c = change(result, "phase_margin_deg")
    assert c.direction == "worse" and c.regression is None
    assert result.exit_code == 0


def test_policy_thresholds_are_honoured():
    loose = Regression(phase_margin_loss_deg=20.0)
    result, _ = one(brk(m=margins(pm=52.1)), brk(m=margins(pm=38.4)), loose)
    assert result.exit_code == 0
    strict = Regression(phase_margin_loss_deg=1.0)
    result, _ = one(brk(m=margins(pm=52.0)), brk(m=margins(pm=50.0)), strict)
    assert result.exit_code == 1


def test_gain_margin_up_from_unbounded_to_finite_is_reported_in_words():
    # unbounded -> 20 dB: a loss of unbounded size, but 20 dB is above the 12 dB relevance
    # level and nothing requires it, so it is information
    result, _ = one(brk(m=margins(up=None)), brk(m=margins(up=20.0)))
    c = change(result, "gain_margin_up_db")
    assert c.delta is None and c.before is None and c.after == 20.0
    assert "unbounded" in c.words and c.direction == "worse" and c.regression is None
    result, _ = one(brk(m=margins(up=None)), brk(m=margins(up=8.0)))
    assert "below 12 dB (common practice)" in change(result, "gain_margin_up_db").regression
    result, _ = one(brk(m=margins(up=20.0)), brk(m=margins(up=None)))
    c = change(result, "gain_margin_up_db")
    assert c.direction == "better" and c.regression is None and "now unbounded" in c.words


def test_gain_margin_down_towards_0_db_is_a_loss():
    # down margins are negative dB; -12 -> -8 dB leaves less room to reduce the gain
    result, _ = one(brk(m=margins(down=-12.0)), brk(m=margins(down=-8.0)))
    c = change(result, "gain_margin_down_db")
    assert c.delta == pytest.approx(4.0)
    assert c.direction == "worse" and c.regression
    result, _ = one(brk(m=margins(down=-8.0)), brk(m=margins(down=-12.0)))
    c = change(result, "gain_margin_down_db")
    assert c.direction == "better" and c.regression is None
    result, _ = one(brk(m=margins(down=-8.0)), brk(m=margins(down=-7.0)))
    assert change(result, "gain_margin_down_db").regression is None  # 1 dB <= 2 dB


def test_delay_margin_fraction():
    # -30 % where a requirement of 60 ms is within 20 % (70 ms <= 1.2 * 60 ms): a regression
    near = [req(True, 0.07, 0.06, "delay_margin")]
    result, _ = one(brk(m=margins(delay=0.10)), brk(m=margins(delay=0.07), reqs=near))
    c = change(result, "delay_margin_s")
    assert c.regression and c.delta == pytest.approx(-0.03)
    assert "within 20% of `delay_margin >= 0.06 s`" in c.regression
    assert "(-30 ms, -30%, worse)" in diff_text.render(result)
    result, _ = one(brk(m=margins(delay=0.10)), brk(m=margins(delay=0.09), reqs=near))
    assert change(result, "delay_margin_s").regression is None  # -10 %: below the threshold
    # the same loss far from any requirement, with no relevance level for delay: information
    result, _ = one(brk(m=margins(delay=0.10)), brk(m=margins(delay=0.07)))
    assert change(result, "delay_margin_s").regression is None


def test_informational_metrics_change_without_regression():
    result, _ = one(brk(m=margins(wc=2.0, ms=1.5, alpha=0.8)), brk(m=margins(wc=3.0, ms=2.5, alpha=0.5)))
    assert change(result, "crossover_freq").direction == "changed"
    assert change(result, "sensitivity_peak_db").direction == "worse"
    assert change(result, "disk_margin_alpha").direction == "worse"
    assert result.exit_code == 0


def test_becoming_unstable_is_a_regression_and_margins_are_not_compared():
    result, m = one(brk(), brk(stable=False, z=2))
    (d,) = m.breaks
    assert d.verdict.stable_before and not d.verdict.stable_after
    assert (d.verdict.z_before, d.verdict.z_after) == (0, 2)
    assert d.margins == ()
    assert result.exit_code == 1
    assert len(result.regressions) == 1  # the model's own verdict is not counted twice
    assert "verdict stable -> UNSTABLE (Z 0 -> 2, worse)" in diff_text.render(result)


def test_becoming_stable_is_better():
    result, m = one(brk(stable=False, z=1), brk())
    assert m.breaks[0].verdict.direction == "better"
    assert result.exit_code == 0


def test_requirement_that_stops_being_met():
    result, m = one(brk(reqs=[req(True, 9.54)]), brk(reqs=[req(False, 3.52)]))
    (r,) = m.breaks[0].requirements
    assert r.status == "stopped being met" and r.regression
    assert result.exit_code == 1
    off = Regression(requirement_stops_being_met=False, gain_margin_loss_db=100.0)
    result, _ = one(brk(reqs=[req(True, 9.54)]), brk(reqs=[req(False, 3.52)]), off)
    assert result.exit_code == 0


def test_renamed_break_is_one_removed_and_one_added():
    result = compare({"m.loop": model(brk("speed"), brk("pos"))},
                     {"m.loop": model(brk("velocity"), brk("pos"))})
    m = result.models[0]
    assert {(d.name, d.status) for d in m.breaks} == {("speed", "removed"), ("velocity", "added")}
    assert m.breaks_unchanged == 1
    assert result.exit_code == 0
    text = diff_text.render(result)
    assert "- break speed (at y): removed" in text and "+ break velocity (at y): added, stable" in text
    assert "1 break unchanged" in text


def test_added_unstable_model_and_removed_model():
    result = compare({"old.loop": model(brk())}, {"new.loop": model(brk(stable=False, z=1))})
    status = {m.file: m.status for m in result.models}
    assert status == {"new.loop": "added", "old.loop": "removed"}
    assert result.exit_code == 1  # new and unstable


def test_errors_appeared_on_the_new_side_is_unreadable_input():
    err = Finding("error", "LW100", "unexpected token", Span("m.loop", 4, 7))
    result = compare({"m.loop": model(brk())}, {"m.loop": Unreadable("m.loop", (err,), ("m.loop:4:7: boom",))})
    assert result.models[0].status == "errors appeared"
    assert result.exit_code == 2
    assert "m.loop:4:7: boom" in diff_text.render(result)


def test_errors_disappeared_on_the_new_side():
    err = Finding("error", "LW100", "unexpected token", Span("m.loop", 4, 7))
    result = compare({"m.loop": Unreadable("m.loop", (err,))}, {"m.loop": model(brk())})
    assert result.models[0].status == "errors disappeared"
    assert result.exit_code == 0


def test_results_are_frozen():
    result, _ = one(brk(), brk(m=margins(pm=10.0)))
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.models[0].breaks[0].margins[0].delta = 0.0


def test_marginal_only_change_is_worse():
    before = brk(stable=False, z=0)
    after = dataclasses.replace(brk(stable=False, z=0), marginal=True, marginal_freq=2.0)
    result, m = one(before, after)
    assert m.breaks[0].verdict.direction == "worse"


def test_json_of_unbounded_changes_follows_the_schema():
    import json
    from pathlib import Path

    import jsonschema

    from loopwise.report import diff_json, diff_markdown
    schema = json.loads((Path(__file__).resolve().parents[2] / "docs" / "diff.schema.json").read_text())
    err = Finding("error", "LW100", "unexpected token", Span("x.loop", 4, 7))
    result = compare(
        {"m.loop": model(brk(m=margins(up=None, wc=2.0), reqs=[req(True)])), "x.loop": model(brk())},
        {"m.loop": model(brk(m=margins(up=20.0, wc=None), reqs=[req(True), req(False, metric="phase_margin")])),
         "x.loop": Unreadable("x.loop", (err,))})
    data = json.loads(diff_json.render(result))
    jsonschema.validate(data, schema)
    changes = {c["metric"]: c for c in data["models"][0]["breaks"][0]["margins"]}
    assert changes["gain_margin_up_db"]["before"] is None and changes["gain_margin_up_db"]["delta"] is None
    assert "unbounded" in changes["gain_margin_up_db"]["words"]
    assert changes["crossover_freq"]["words"] == "now none (no gain crossover)"
    assert data["summary"]["exit_code"] == 2 and data["caution"] == CAUTION
    md = diff_markdown.render(result)
    assert CAUTION in md and "x.loop:4:7" in md
