"""The reporter registry and the one per-model summary every format renders.

Hand-built results (tests/cli/conftest.py): every figure is chosen here, so the
same sentence can be looked for in every format.
"""
from __future__ import annotations

import json
import sys
import types
import xml.etree.ElementTree as ET

import pytest

from loopwise.report import REPORTERS, formats, register, render
from loopwise.report.numbers import fmt_quantity, fmt_time
from loopwise.report.summary import GM_DOWN_HEAD, summarise

from cli.conftest import model, requirement, run_of, stable_break, unstable_break

STABILISING = "the closed loop would be stable with L scaled by a factor in [0.2, 0.8]"
NO_MARGINS = "closed loop UNSTABLE: no margins"


def unstable_run():
    req = requirement(value=None, met=False)
    from dataclasses import replace
    req = replace(req, note=NO_MARGINS)
    return run_of(model("tip.loop", "tip", [unstable_break("b", reqs=[req])]))


@pytest.mark.parametrize("fmt", ["text", "markdown", "junit", "sarif"])
def test_every_format_says_the_stabilising_range_and_why_a_requirement_has_no_value(fmt):
    # Markdown and JUnit used to leave out both (issue 14): they now come from one summary
    out = render(unstable_run(), fmt)
    if fmt == "junit":
        out = " ".join(ET.fromstring(out).itertext()) + out
    if fmt == "sarif":
        out = json.dumps(json.loads(out))
    assert STABILISING in out, fmt
    assert NO_MARGINS in out, fmt


def test_html_says_them_too():
    from loopwise.report.html import render_html

    page = render_html(unstable_run())
    text = " ".join(ET.fromstring(page[page.index("<html"):]).itertext())
    assert STABILISING in text and NO_MARGINS in text


def test_summary_of_a_model():
    s = summarise(unstable_run().models[0])
    assert (s.status, s.verdict, s.met, s.total) == ("UNSTABLE", "FAIL", 0, 1)
    assert s.stabilising == (("b", STABILISING),)
    assert [r.text for r in s.unmet] == [f"phase_margin >= 30 (value none) - {NO_MARGINS}"]
    assert s.breaks[0].cells[2] == "UNSTABLE" and s.breaks[0].cells[6] == "-"


def test_format_choices_come_from_the_registry():
    from loopwise.cli import _build_parser

    for command, kind in (("check", "check"), ("diff", "diff")):
        parser = _build_parser(command)
        sub = next(a for a in parser._actions if a.dest == "command").choices[command]
        choices = next(a for a in sub._actions if a.dest == "format").choices
        assert tuple(choices) == formats(kind)
    assert {"text", "json", "junit", "markdown", "sarif"} <= set(formats("check"))
    assert {"text", "json", "markdown", "sarif"} <= set(formats("diff"))


def test_another_kind_of_result_can_register_its_formats(monkeypatch):
    # a sweep (or any later command) registers a module path of its own
    module = types.ModuleType("loopwise_test.reporter")
    module.render = lambda result, fail_on_warnings=False: f"{result}:{fail_on_warnings}"
    monkeypatch.setitem(sys.modules, "loopwise_test.reporter", module)
    monkeypatch.setattr("loopwise.report.REPORTERS", dict(REPORTERS))
    from loopwise import report

    report.register("trial", "plain", "loopwise_test.reporter")
    assert report.formats("trial") == ("plain",)
    # options the reporter does not take (colour) are not passed
    assert report.render("R", "plain", kind="trial", colour=True, fail_on_warnings=True) == "R:True"
    with pytest.raises(ValueError, match="no 'pdf' format for trial results"):
        report.render("R", "pdf", kind="trial")


def test_register_replaces_an_entry(monkeypatch):
    monkeypatch.setattr("loopwise.report.REPORTERS", dict(REPORTERS))
    from loopwise import report

    report.register("check", "text", "markdown")
    assert report.reporter("check", "text").module == "markdown"
    assert report.formats("check").count("text") == 1


@pytest.mark.parametrize("seconds, text", [
    (2.05e3, "34.2 min"), (135.0, "2.25 min"), (919.0, "15.3 min"), (5400.0, "1.5 h"),
    (1.04, "1.04 s"), (4.94e-3, "4.94 ms"), (2.16e-4, "216 us"), (2.5e-6, "2.5 us"),
    (3e-9, "3 ns"), (0.0, "0 s"), (float("inf"), "inf"), (3.6e7, "10000 h"),
    (1.57e-16, "1.57e-16 s"),  # a tiny delay margin (a 1e16 loop gain) is not "0 ns"
])
def test_times_in_natural_units(seconds, text):
    assert fmt_time(seconds) == text


def test_quantities_keep_their_unit_and_time_goes_natural():
    assert fmt_quantity(45.0, "deg") == "45 deg"
    assert fmt_quantity(2050.0, "s") == "34.17 min"
    assert fmt_quantity(None, "dB") == "none"
    assert fmt_quantity(1.25, "") == "1.25"


def test_text_report_head_says_the_down_margin_is_negative():
    out = render(run_of(model(breaks=[stable_break(gm_down=-7.5)])), "text")
    assert GM_DOWN_HEAD in out and "(<0)" in GM_DOWN_HEAD


def test_a_frequency_limit_written_in_hz_shows_its_value_in_hz():
    """`crossover >= 0.5Hz (value 0.2882 rad/s)` made the reader convert; the value
    now comes in the unit the limit was written in (0.2882 / (2 pi) = 0.04587 Hz)."""
    from loopwise import check_text
    from loopwise.report.summary import requirement_text

    text = ("model hz\ninput r\nblock G = 0.3/(s*(s + 1))\ne = r - y\ny = G(e)\nbreak b at y\n"
            "require b crossover >= 0.5Hz\nrequire b crossover <= 2\n")
    reqs = check_text(text).breaks[0].requirements
    words = [requirement_text(r) for r in reqs]
    value = reqs[0].value
    assert words[0] == f"crossover >= 0.5Hz (value {value / (2 * 3.141592653589793):.4g} Hz)"
    assert words[1] == f"crossover <= 2 (value {value:.4g} rad/s)"


def test_a_loop_without_gain_crossover_shows_an_unbounded_delay_margin():
    """|L| < 1 everywhere: no delay brings L to -1. The table showed `inf` for the phase
    margin but `none` for the delay margin, which reads as no margin at all."""
    from loopwise import check_text
    from loopwise.report.summary import BREAK_COLUMNS, break_row

    b = check_text("model lo\ninput r\ne = r - y\ny = [0.5/(s+1)](e)\nbreak b at y\n").breaks[0]
    assert b.margins.delay_margin_s is None  # JSON: null, unbounded (docs/results.md)
    cells = dict(zip([h for h, _, _ in BREAK_COLUMNS], break_row(b)))
    assert cells["PM deg"] == "inf" and cells["delay margin"] == "inf"
