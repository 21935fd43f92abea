"""The four report formats and the exit policy, on hand-built results (no engine).

Each result object here is written by the test, so every figure a report shows
can be checked against the value that went in.
"""
from __future__ import annotations

import json
import pickle
import re
import xml.etree.ElementTree as ET
from dataclasses import replace
from pathlib import Path

import jsonschema
import numpy as np
import pytest

from loopwise.errors import Finding, Span
from loopwise.report import render
from loopwise.results import CAUTION
from loopwise.run import exit_status

from .conftest import (margins, marginal_break, model, requirement, run_of, stable_break,
                       syntax_error, unstable_break)

SCHEMA = json.loads((Path(__file__).parents[2] / "docs" / "results.schema.json").read_text())
ANSI = re.compile(r"\x1b\[[0-9;]*m")


def validate(doc: dict) -> None:
    jsonschema.Draft202012Validator(SCHEMA).validate(doc)


# --- JSON ----------------------------------------------------------------------------------

def test_json_is_the_contract_and_matches_the_schema(mixed_run):
    text = render(mixed_run, "json")
    doc = json.loads(text)
    assert doc == json.loads(json.dumps(mixed_run.to_dict()))
    assert doc["schema"] == 2 and doc["caution"] == CAUTION
    validate(doc)
    b = doc["models"][0]["breaks"][1]
    assert b["gain_margin_down_db"] == -7.5 and b["delay_margin_s"] == 2.5e-6
    assert doc["models"][2]["breaks"][0]["phase_margin_deg"] is None  # not claimed: unstable
    assert [e["code"] for e in doc["errors"]] == ["LW101", "LW001"]


def test_json_maps_non_finite_numbers_to_null():
    run = run_of(model(breaks=[stable_break(gm_up=float("inf"), pm=float("nan"))]))
    doc = json.loads(render(run, "json"))
    validate(doc)
    assert doc["models"][0]["breaks"][0]["gain_margin_up_db"] is None
    assert doc["models"][0]["breaks"][0]["phase_margin_deg"] is None


@pytest.mark.parametrize("path, bad", [
    ((), {"extra": 1}),                                          # unknown top-level key
    (("models", 0), {"stable": "yes"}),                          # wrong type
    (("models", 0, "breaks", 0), {"phase_margin_deg": "52"}),    # a number as text
    (("models", 0, "breaks", 0, "requirements", 0), {"op": "=="}),
])
def test_schema_is_strict(mixed_run, path, bad):
    doc = json.loads(render(mixed_run, "json"))
    node = doc
    for key in path:
        node = node[key]
    node.update(bad)
    with pytest.raises(jsonschema.ValidationError):
        validate(doc)


def test_schema_requires_every_key_to_dict_writes(mixed_run):
    doc = json.loads(render(mixed_run, "json"))
    del doc["models"][0]["breaks"][0]["delay_margin_s"]
    with pytest.raises(jsonschema.ValidationError):
        validate(doc)


# --- pickling (results cross process boundaries with --jobs) --------------------------------

def test_results_pickle_with_their_arrays(mixed_run):
    back = pickle.loads(pickle.dumps(mixed_run))
    assert back.to_dict() == mixed_run.to_dict()
    r0, r1 = mixed_run.models[0].breaks[0].response, back.models[0].breaks[0].response
    np.testing.assert_array_equal(r0.L, r1.L)
    np.testing.assert_array_equal(r0.on_axis, r1.on_axis)


# --- text ---------------------------------------------------------------------------------

def test_text_table_shows_every_figure_in_aligned_columns(mixed_run):
    out = render(mixed_run, "text")
    lines = out.splitlines()
    header = next(l for l in lines if l.lstrip().startswith("break") and "PM deg" in l)
    row = next(l for l in lines if l.lstrip().startswith("outer "))
    # numeric columns are right-aligned: each value ends where its header ends
    for head, value in [("PM deg", "52.5"), ("GM up dB", "14.0"), ("GM down dB (<0)", "-7.5"),
                        ("delay margin", "2.5 us"), ("disk alpha", "0.710"), ("Ms", "1.62"),
                        ("crossover rad/s", "3.25")]:
        assert row.index(value) + len(value) == header.index(head) + len(head), head
    assert "STABLE" in row and "0/0" not in row
    inner = next(l for l in lines if l.lstrip().startswith("inner "))
    assert "-inf" in inner.split()   # an unbounded gain margin down
    assert "12.3 ms" in inner and "1/1" in inner


def test_text_verdicts_are_words_and_unmet_requirements_have_their_line(mixed_run):
    out = render(mixed_run, "text")
    assert "PASS  good.loop  model good: STABLE" in out
    assert "FAIL  weak.loop  model weak: STABLE" in out
    assert "weak.loop:9: break b: phase_margin >= 60 (value 52.5)" in out
    assert "model tipping: UNSTABLE (2 closed-loop pole(s) in the right half plane)" in out
    assert "factor in [0.2, 0.8]" in out
    assert "model ring: MARGINAL (a closed-loop pole on the imaginary axis at 1.414 rad/s)" in out
    assert "warning: break b: LW481 the loop gain is neutral" in out
    assert "warn.loop:3:7: warning LW281 block `K` is never used" in out
    assert "5 models checked, 2 passed, 3 failed, 2 could not be read." in out
    assert out.rstrip().endswith(CAUTION)
    assert not ANSI.search(out)


def test_text_renders_located_errors_with_line_and_caret(mixed_run):
    out = render(mixed_run, "text")
    lines = out.splitlines()
    head = next(i for i, l in enumerate(lines) if "error LW101" in l)
    assert lines[head].strip().endswith("bad.loop:2:18: error LW101 unexpected `)`")
    assert lines[head + 1].strip() == "block G = 1/(s+1))"
    assert lines[head + 2].index("^") - lines[head + 1].index("b") == 17
    assert "hint: expected a name" in lines[head + 3]
    assert "locked.loop: error LW001 cannot read the model: Permission denied" in out


def test_text_colour_is_only_on_top_of_words(mixed_run):
    plain = render(mixed_run, "text")
    coloured = render(mixed_run, "text", colour=True)
    assert ANSI.search(coloured)
    assert ANSI.sub("", coloured) == plain


def test_fail_on_warnings_turns_a_warned_model_into_a_failure(mixed_run):
    out = render(mixed_run, "text", fail_on_warnings=True)
    assert "FAIL  warn.loop" in out


# --- JUnit XML ---------------------------------------------------------------------------

def test_junit_has_a_case_per_model_and_break_and_an_error_per_unreadable(mixed_run):
    root = ET.fromstring(render(mixed_run, "junit"))
    assert root.tag == "testsuites"
    suites = root.findall("testsuite")
    assert [s.get("name") for s in suites] == [
        "good.loop", "weak.loop", "unstable.loop", "ring.loop", "warn.loop",
        mixed_run.errors[0].span.file, "locked.loop"]
    cases = root.iter("testcase")
    names = [(c.get("classname"), c.get("name")) for c in cases]
    assert names[:3] == [("good", "closed loop"), ("good", "break inner at y"),
                         ("good", "break outer at y")]
    assert root.get("tests") == str(len(names)) == "13"
    failures = {(c.get("classname"), c.get("name")): c.find("failure")
                for c in root.iter("testcase") if c.find("failure") is not None}
    assert set(failures) == {("weak", "break b at y"), ("tipping", "closed loop"),
                             ("tipping", "break b at y"), ("ring", "closed loop"),
                             ("ring", "break b at y")}
    assert failures[("weak", "break b at y")].get("type") == "requirement"
    assert "weak.loop:9" in failures[("weak", "break b at y")].text
    assert failures[("tipping", "break b at y")].get("type") == "instability"
    assert root.get("failures") == "5" and root.get("errors") == "2"
    errors = [c.find("error") for c in root.iter("testcase") if c.find("error") is not None]
    assert errors[0].get("type") == "LW101" and "^" in errors[0].text
    caution = suites[0].find("properties/property[@name='caution']")
    assert caution.get("value") == CAUTION


def test_junit_counts_warnings_only_when_asked(mixed_run):
    root = ET.fromstring(render(mixed_run, "junit", fail_on_warnings=True))
    assert root.get("failures") == "7"   # the warned model's case and its break
    warn = next(s for s in root.findall("testsuite") if s.get("name") == "warn.loop")
    assert "never used" in warn.find("system-out").text


def test_junit_system_out_says_the_severity_of_every_note(mixed_run):
    # regression: a break's warning came out as `break b: LW481 ...`, without the
    # `warning:` that the model's findings and the text report carry
    root = ET.fromstring(render(mixed_run, "junit"))
    warn = next(s for s in root.findall("testsuite") if s.get("name") == "warn.loop")
    lines = warn.find("system-out").text.splitlines()
    assert "warning: break b: LW481 the loop gain is neutral" in lines
    assert "warn.loop:3:7: warning LW281 block `K` is never used" in lines


def test_junit_survives_control_characters_in_messages():
    run = run_of(errors=[replace(syntax_error("x.loop"), message="bad \x01 byte")])
    root = ET.fromstring(render(run, "junit"))
    # one sanitiser for every format (loopwise.errors.printable): a control character is "?"
    assert root.find("testsuite/testcase/error").get("message") == "LW101 bad ? byte"


# --- Markdown -----------------------------------------------------------------------------

def test_markdown_summary_for_a_pull_request(mixed_run):
    out = render(mixed_run, "markdown")
    assert out.startswith("### loopwise check: 5 of 7 models need attention")
    assert "| PASS | `good.loop` | good | STABLE | 0 | 1/1 |" in out
    assert "| **FAIL** | `unstable.loop` | tipping | **UNSTABLE** | 2 | 0/1 |" in out
    assert "| **ERROR** | `locked.loop` | - | not read | - | - |" in out
    assert "- `weak.loop:9` break `b`: `phase_margin >= 60 (value 52.5)`" in out
    assert "```text\n" in out and "block G = 1/(s+1))" in out
    assert out.rstrip().endswith(f"> **Caution:** {CAUTION}")
    # every table row has as many cells as its header
    for block in re.findall(r"((?:^\|.*\|\n)+)", out, re.M):
        rows = block.splitlines()
        widths = {len(re.split(r"(?<!\\)\|", r)) for r in rows}
        assert len(widths) == 1, rows


def test_markdown_escapes_pipes_in_names():
    run = run_of(model("a|b.loop", "m|x", [stable_break("p|q")]))
    out = render(run, "markdown")
    assert "m\\|x" in out and "p\\|q" in out


def test_markdown_all_pass_headline():
    out = render(run_of(model(breaks=[stable_break()])), "markdown")
    assert out.startswith("### loopwise check: all models pass")


# --- the exit policy ----------------------------------------------------------------------

@pytest.mark.parametrize("models, errors, fail_on_warnings, code", [
    ([model(breaks=[stable_break(reqs=[requirement()])])], [], False, 0),
    ([model(breaks=[stable_break(reqs=[requirement(limit=60.0)])])], [], False, 1),
    ([model(breaks=[unstable_break()])], [], False, 1),
    ([model(breaks=[marginal_break()])], [], False, 1),
    ([model(breaks=[stable_break(warnings=["w"])])], [], False, 0),
    ([model(breaks=[stable_break(warnings=["w"])])], [], True, 1),
    ([model(breaks=[unstable_break()])], [syntax_error()], False, 2),
    ([], [syntax_error()], False, 2),
])
def test_exit_policy(models, errors, fail_on_warnings, code):
    assert exit_status(run_of(*models, errors=errors), fail_on_warnings) == code


def test_margins_helper_is_consistent():
    # guards the fixtures themselves: the smaller of the up/down margins
    assert margins(gm_up=14.0, gm_down=-7.5).gain_margin_db == 7.5


# --- a library file (params and blocks only, for `use`) ----------------------------------

def library_run():
    note = Finding("note", "LW491", "no signal equations: a library of params and blocks",
                   Span("common/drive.loop", 1, 1))
    return run_of(model("common/drive.loop", "drive", [], findings=[note]),
                  model(breaks=[stable_break()]))


def test_a_library_file_is_neither_a_pass_nor_a_verdict():
    run = library_run()
    text = render(run, "text")
    assert "PASS  common/drive.loop  library of params and blocks for `use`" in text
    assert "LW491" not in text and "STABLE (" not in text.split("\n")[0]
    root = ET.fromstring(render(run, "junit"))
    suite = root.find("testsuite")
    assert suite.find("testcase/skipped") is not None and suite.get("skipped") == "1"
    assert root.get("skipped") == "1" and root.get("failures") == "0"
    md = render(run, "markdown")
    assert "| PASS | `common/drive.loop` | drive | LIBRARY | 0 | - |" in md
    assert "#### drive" not in md
    assert exit_status(run) == 0
    assert "1 model checked, 1 passed, 0 failed, 1 library for `use` not checked on its own." in text


def test_control_characters_from_a_model_never_reach_the_terminal(tmp_path):
    bad = tmp_path / "esc.loop"
    bad.write_text("model x\nblock G = \x1b]0;pwned\x07 1/s\n")
    err = Finding("error", "LW101", "unexpected character", Span(str(bad), 2, 11, 12))
    out = render(run_of(errors=[err]), "text")
    assert "\x1b" not in out and "\x07" not in out
    assert "?]0;pwned? 1/s" in out  # errors.render replaces control characters
