"""`loopwise diff` flags a margin loss only where it matters (issue 13).

A loss beyond its threshold is a regression when the margin fails or comes
within a set distance of a requirement on it, or ends below a relevance level
(phase margin 60 deg, gain margins 12 dB: common practice); every other change
is information. The margin values are invented inputs, not claims about a loop.
"""
from __future__ import annotations

import json
from pathlib import Path

import jsonschema
import pytest

from loopwise.analysis import check_text
from loopwise.compare import compare
from loopwise.report import diff_json, diff_markdown, diff_text
from loopwise.settings import Regression, load_settings_file

from test_diff_logic import brk, change, margins, model, one, req

SCHEMA = json.loads((Path(__file__).resolve().parents[2] / "docs" / "diff.schema.json").read_text())


def test_a_loss_far_from_any_limit_is_information():
    # the case: 31.4 dB -> 27.9 dB, nothing requires it
    result, _ = one(brk(m=margins(up=31.4)), brk(m=margins(up=27.9)))
    c = change(result, "gain_margin_up_db")
    assert c.direction == "worse" and c.regression is None
    assert result.exit_code == 0
    text = diff_text.render(result)
    assert "31.40 dB -> 27.90 dB  (-3.50, worse)" in text and "REGRESSION" not in text


def test_a_loss_below_the_relevance_level_is_a_regression():
    result, _ = one(brk(m=margins(pm=70.0)), brk(m=margins(pm=52.0)))
    assert change(result, "phase_margin_deg").regression == \
        "phase margin loss above 5 deg; below 60 deg (common practice)"
    result, _ = one(brk(m=margins(pm=80.0)), brk(m=margins(pm=70.0)))
    assert change(result, "phase_margin_deg").regression is None  # 70 deg: above 60
    off = Regression(relevant_phase_margin_deg=0.0)
    result, _ = one(brk(m=margins(pm=70.0)), brk(m=margins(pm=52.0)), off)
    assert change(result, "phase_margin_deg").regression is None


def test_a_loss_near_a_requirement_is_a_regression_with_the_limit_as_written():
    pm45 = [req(True, 70.0, 45.0, "phase_margin", "45deg")]
    # 80 -> 70 deg: 25 deg above the limit (more than 5): information
    result, _ = one(brk(m=margins(pm=80.0)), brk(m=margins(pm=70.0), reqs=pm45))
    assert change(result, "phase_margin_deg").regression is None
    pm68 = [req(True, 70.0, 68.0, "phase_margin", "68deg")]
    result, _ = one(brk(m=margins(pm=80.0)), brk(m=margins(pm=70.0), reqs=pm68))
    assert change(result, "phase_margin_deg").regression == \
        "phase margin loss above 5 deg; within 5 deg of `phase_margin >= 68deg`"
    near = Regression(near_requirement_deg=1.0)
    result, _ = one(brk(m=margins(pm=80.0)), brk(m=margins(pm=70.0), reqs=pm68), near)
    assert change(result, "phase_margin_deg").regression is None


def test_a_requirement_on_both_gain_margins_counts_for_the_one_near_it():
    gm6 = [req(True, 7.0, 6.0, "gain_margin", "6dB")]
    # the down margin -12 -> -7 dB is 1 dB from 6dB; the up margin 30 -> 26 dB is far
    result, _ = one(brk(m=margins(up=30.0, down=-12.0)), brk(m=margins(up=26.0, down=-7.0), reqs=gm6))
    assert change(result, "gain_margin_up_db").regression is None
    assert change(result, "gain_margin_down_db").regression == \
        "gain margin down loss above 2 dB; within 2 dB of `gain_margin >= 6dB`"


def test_a_margin_that_now_fails_its_requirement_says_so():
    pm45 = [req(False, 40.0, 45.0, "phase_margin", "45deg")]
    result, _ = one(brk(m=margins(pm=80.0), reqs=[req(True, 80.0, 45.0, "phase_margin", "45deg")]),
                    brk(m=margins(pm=40.0), reqs=pm45))
    assert change(result, "phase_margin_deg").regression.endswith("it fails `phase_margin >= 45deg`")


def test_no_zero_change_lines():
    # 52.100 -> 52.103 deg reads `52.10 -> 52.10 (+0.00, better)`: no change at all
    result, m = one(brk(m=margins(pm=52.100, wc=2.0)), brk(m=margins(pm=52.103, wc=2.00004)))
    assert m.status == "unchanged" and m.breaks_unchanged == 1
    assert "+0.00" not in diff_text.render(result)


def test_requirement_limits_are_echoed_as_written_and_json_keeps_si():
    before = [req(True, 4.0, 3.1416, "crossover", "0.5Hz"), req(True, 1.4, 1.9953, "sensitivity_peak", "6dB")]
    after = [req(False, 3.0, 3.1416, "crossover", "0.5Hz"), req(True, 1.5, 1.9953, "sensitivity_peak", "6dB")]
    before = [dataclass_op(before[0], ">="), dataclass_op(before[1], "<=")]
    after = [dataclass_op(after[0], ">="), dataclass_op(after[1], "<=")]
    result, _ = one(brk(reqs=before), brk(reqs=after))
    text = diff_text.render(result)
    assert "requirement crossover >= 0.5Hz: met -> NOT MET" in text
    assert "requirement sensitivity_peak <= 6dB: met -> met" in text
    assert "3.142" not in text and "1.995" not in text
    data = json.loads(diff_json.render(result))
    jsonschema.validate(data, SCHEMA)
    r = data["models"][0]["breaks"][0]["requirements"][0]
    assert (r["limit_after"], r["limit_text_after"], r["unit"]) == (3.1416, "0.5Hz", "rad/s")
    assert "0.5Hz" in diff_markdown.render(result)


def dataclass_op(r, op):
    import dataclasses
    return dataclasses.replace(r, op=op)


def test_requirement_results_carry_the_limit_as_the_model_wrote_it():
    text = """model m
input r
param Td = 2ms
e = r - y
y = [10/((s+1)*(s+2))](e)
break b at y
require b phase_margin >= 30deg
require b crossover >= 0.25Hz
require b delay_margin >= 2*Td
"""
    (b,) = check_text(text, "m.loop").breaks
    assert [r.limit_text for r in b.requirements] == ["30deg", "0.25Hz", ""]
    assert b.requirements[1].to_dict()["limit"] == pytest.approx(0.25 * 2 * 3.141592653589793)
    assert b.requirements[1].to_dict()["limit_text"] == "0.25Hz"


def test_settings_keys_for_where_a_loss_matters(tmp_path):
    cfg = tmp_path / "loopwise.toml"
    cfg.write_text("[regression]\nnear_requirement_deg = 2.5\nrelevant_gain_margin_db = 0\n"
                   "relevant_delay_margin_s = 0.5\n")
    p = load_settings_file(cfg).regression
    assert (p.near_requirement_deg, p.relevant_gain_margin_db, p.relevant_delay_margin_s) == (2.5, 0.0, 0.5)
    # the delay margin now has a level: 0.4 s after a 60 % loss matters
    result = compare({"m.loop": model(brk(m=margins(delay=1.0)))},
                     {"m.loop": model(brk(m=margins(delay=0.4)))}, p)
    (delay,) = [c for c in result.models[0].breaks[0].margins if c.metric == "delay_margin_s"]
    assert delay.regression == "delay margin loss above 20%; below 0.5 s (the settings' level)"
    data = json.loads(diff_json.render(result))
    jsonschema.validate(data, SCHEMA)
    assert data["policy"]["relevant_delay_margin_s"] == 0.5
