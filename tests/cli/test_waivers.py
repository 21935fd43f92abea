"""Waivers end to end through `loopwise check` (and `loopwise report`): a waived
warning still shows with its reason in every format, it no longer counts for
fail_on_warnings, and a waiver that matches nothing is itself a warning.
"""
from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import pytest

from tests.scenarios import CASCADE

from .conftest import write
from .test_formats import validate

#: two blocks that are never used: LW282 about `A` and about `B`
MODEL = """\
model lib_user
input r
block G = 10/((s+1)*(s+2))
block A = 1/(s+3)
block B = 1/(s+4)
e = r - y
y = G(e)
break b at y
"""
WAIVE_A = 'waive LW282 at A "kept for the next tuning round"\n'
WAIVE_B = 'waive LW282 at B "shared library: not every model uses every block"\n'


def _findings(doc, model=0):
    return {tuple(f["about"]): f for f in doc["models"][model]["findings"]}


def test_a_waived_warning_shows_with_its_reason_and_no_longer_counts(cli, tmp_path):
    write(tmp_path, "m.loop", MODEL + WAIVE_A)
    code, out, _ = cli("check", "m.loop", "--fail-on-warnings", "--format", "json")
    doc = json.loads(out)
    validate(doc)
    found = _findings(doc)
    assert found[("A",)]["waived"] == {"reason": "kept for the next tuning round", "at": "A",
                                       "file": "m.loop", "line": 9, "col": 1}
    assert found[("B",)]["waived"] is None
    assert code == 1, "B's warning still counts"
    write(tmp_path, "m.loop", MODEL + WAIVE_A + WAIVE_B)
    assert cli("check", "m.loop", "--fail-on-warnings")[0] == 0
    assert cli("check", "m.loop")[0] == 0


@pytest.fixture
def waived(cli, tmp_path):
    """A model whose warnings are all waived, checked with fail_on_warnings from the settings."""
    write(tmp_path, "m.loop", MODEL + WAIVE_A + WAIVE_B)
    write(tmp_path, "loopwise.toml", "fail_on_warnings = true\n")
    return cli


def test_text_marks_each_waived_warning_with_its_reason(waived):
    code, out, _ = waived("check", "m.loop")
    assert code == 0, out
    assert out.startswith("PASS  m.loop")
    assert "m.loop:4:7: warning LW282 block `A` is never used" in out
    assert "waived: kept for the next tuning round (m.loop:9)" in out
    assert "waived: shared library: not every model uses every block (m.loop:10)" in out
    assert "2 findings waived" in out


def test_junit_passes_and_keeps_the_waived_warnings_in_its_output(waived):
    code, out, _ = waived("check", "m.loop", "--format", "junit")
    assert code == 0
    root = ET.fromstring(out)
    assert root.get("failures") == "0"
    system_out = root.find("testsuite/system-out").text
    assert "LW282 block `A` is never used" in system_out
    assert "waived: kept for the next tuning round (m.loop:9)" in system_out


def test_markdown_passes_and_shows_the_reasons(waived):
    code, out, _ = waived("check", "m.loop", "--format", "markdown")
    assert code == 0
    assert "### loopwise check: all models pass" in out
    assert "waived: shared library: not every model uses every block (m.loop:10)" in out


def test_a_break_warning_waived_in_every_format(cli, tmp_path):
    cascade = "model casc\n" + CASCADE + 'waive LW383 at inner "the inner loop is slowed on purpose (actuator wear)"\n'
    write(tmp_path, "c.loop", cascade)
    code, out, _ = cli("check", "c.loop", "--fail-on-warnings")
    assert code == 0, out
    assert "warning: break inner: LW383" in out and "[waived: the inner loop is slowed on purpose" in out
    doc = json.loads(cli("check", "c.loop", "--format", "json")[1])
    validate(doc)
    (w,) = doc["models"][0]["breaks"][0]["warnings"]
    assert w["code"] == "LW383" and w["about"] == ["inner"] and w["waived"]["line"] == 9
    junit = ET.fromstring(cli("check", "c.loop", "--format", "junit", "--fail-on-warnings")[1])
    assert junit.get("failures") == "0"
    assert "[waived: the inner loop" in junit.find("testsuite/system-out").text
    markdown = cli("check", "c.loop", "--format", "markdown")[1]
    assert "break inner: LW383" in markdown and "[waived: the inner loop" in markdown


def test_a_model_waiver_that_matches_nothing_fails_with_fail_on_warnings(cli, tmp_path):
    write(tmp_path, "m.loop", MODEL + WAIVE_A + WAIVE_B + 'waive LW381 "no unused inputs left"\n')
    code, out, _ = cli("check", "m.loop", "--fail-on-warnings")
    assert code == 1
    assert out.startswith("FAIL  m.loop")
    assert "m.loop:11:1: warning LW284 the waiver of LW381 matches no finding in this model" in out
    assert cli("check", "m.loop")[0] == 0


def test_the_html_report_shows_waived_warnings(cli, tmp_path):
    write(tmp_path, "m.loop", MODEL + WAIVE_A)
    code, _, err = cli("report", "m.loop", "--output", "r.html")
    assert code == 0, err
    page = (tmp_path / "r.html").read_text()
    assert "waived: kept for the next tuning round (m.loop:9)" in page
    ET.fromstring(page.split("\n", 1)[1])  # still well-formed


# --- waivers in the settings ------------------------------------------------------------------

SETTINGS = """\
fail_on_warnings = true

[[waive]]
files = "tanks/*.loop"
code = "LW282"
reason = "tank models share one library of blocks"

[[waive]]
files = ["tanks/*.loop", "pumps/*.loop"]
code = "LW381"
at = "d"
reason = "the disturbance input is wired in the next revision"
"""


def test_settings_waivers_apply_to_the_files_their_globs_cover(cli, tmp_path):
    write(tmp_path, "tanks/t1.loop", MODEL.replace("input r", "input r, d"))
    write(tmp_path, "other/o1.loop", MODEL)
    write(tmp_path, "loopwise.toml", SETTINGS)
    code, out, _ = cli("check", "tanks", "other", "--format", "json")
    doc = json.loads(out)
    validate(doc)
    tank = doc["models"][0]["findings"]
    assert {f["code"]: f["waived"]["line"] for f in tank} == {"LW381": 10, "LW282": 5}
    assert all(f["waived"]["file"].endswith("loopwise.toml") for f in tank)
    assert all(f["waived"] is None for f in doc["models"][1]["findings"])  # other/ is not covered
    assert doc["findings"] == [] and code == 1  # other/o1.loop's warnings still count
    assert cli("check", "tanks")[0] == 0


def test_a_settings_waiver_that_matches_nothing_is_reported_once_in_every_format(cli, tmp_path):
    write(tmp_path, "tanks/t1.loop", MODEL)   # LW282 is waived; no unused input `d` in either model
    write(tmp_path, "tanks/t2.loop", MODEL)
    write(tmp_path, "loopwise.toml", SETTINGS)
    code, out, _ = cli("check", "tanks")
    assert code == 1, out
    assert out.count("warning LW284") == 1
    assert "loopwise.toml:10:1: warning LW284 the waiver of LW381 at d matches no finding in the 2 checked " \
           "models its files cover" in out
    assert 'code = "LW381"' in out  # the settings line, with a caret under it
    assert "1 settings warning" in out
    doc = json.loads(cli("check", "tanks", "--format", "json")[1])
    validate(doc)
    assert [(f["code"], f["line"], f["about"]) for f in doc["findings"]] == [("LW284", 10, ["d"])]
    junit = ET.fromstring(cli("check", "tanks", "--format", "junit")[1])
    settings_suite = [s for s in junit.findall("testsuite") if s.get("name").endswith("loopwise.toml")]
    assert len(settings_suite) == 1 and settings_suite[0].get("failures") == "1"
    markdown = cli("check", "tanks", "--format", "markdown")[1]
    assert "#### Settings" in markdown and "LW284 the waiver of LW381 at d" in markdown
    assert cli("check", "tanks", "--no-fail-on-warnings")[0] == 0


def test_every_format_agrees_with_the_exit_code_when_only_a_settings_warning_fails(cli, tmp_path):
    # regression: with fail_on_warnings and only LW284 (about the run, not a model) the
    # exit code was 1 while Markdown said "all models pass", the HTML summary PASS and the
    # text tally "2 passed, 0 failed" with nothing saying why the run failed
    write(tmp_path, "tanks/t1.loop", MODEL)
    write(tmp_path, "tanks/t2.loop", MODEL)
    write(tmp_path, "loopwise.toml", SETTINGS)
    code, text, _ = cli("check", "tanks")
    assert code == 1
    assert text.splitlines()[-2] == ("2 models checked, 2 passed, 0 failed, 4 findings waived, "
                                     "1 settings warning (fail_on_warnings: the run fails).")
    markdown = cli("check", "tanks", "--format", "markdown")[1]
    assert markdown.splitlines()[0] == "### loopwise check: 1 settings warning fails the run"
    junit = ET.fromstring(cli("check", "tanks", "--format", "junit")[1])
    assert junit.get("failures") == "1"
    sarif = json.loads(cli("check", "tanks", "--format", "sarif")[1])
    assert sarif["runs"][0]["invocations"][0]["exitCode"] == 1
    code, _, _ = cli("report", "tanks", "--output", "r.html")
    summary = (tmp_path / "r.html").read_text().split('<div class="summary">')[1].split("</div></div>")[0]
    assert code == 1 and '<span class="word bad">FAIL</span>' in summary
    code, swept, _ = cli("sweep", "tanks", "--samples", "2", "--jobs", "1")
    assert code == 1 and swept.splitlines()[-2].endswith(", 1 settings warning (fail_on_warnings: the run fails).")
    code, swept, _ = cli("sweep", "tanks", "--samples", "2", "--jobs", "1", "--format", "markdown")
    assert code == 1 and swept.splitlines()[0] == "### loopwise sweep: 1 settings warning fails the run"
    # without fail_on_warnings the same run passes, and every format says so
    off = ("--no-fail-on-warnings",)
    code, text, _ = cli("check", "tanks", *off)
    assert code == 0 and text.splitlines()[-2].endswith(", 1 settings warning.")
    assert cli("check", "tanks", "--format", "markdown", *off)[1].startswith("### loopwise check: all models pass\n")
    assert ET.fromstring(cli("check", "tanks", "--format", "junit", *off)[1]).get("failures") == "0"
    code, swept, _ = cli("sweep", "tanks", "--samples", "2", "--jobs", "1", "--format", "markdown", *off)
    assert code == 0 and swept.startswith("### loopwise sweep: every model passes over its box\n")


def test_a_settings_waiver_is_named_relative_to_the_working_directory(cli, tmp_path, monkeypatch):
    # regression: found from the working directory up, the settings file was named by its
    # absolute path in every waiver note and LW284, while a model's own waiver is relative
    write(tmp_path, "tanks/t1.loop", MODEL.replace("input r", "input r, d"))
    write(tmp_path, "tanks/t2.loop", MODEL)
    write(tmp_path, "loopwise.toml", SETTINGS.replace('at = "d"\n', ""))
    code, out, _ = cli("check", "tanks", "--no-fail-on-warnings")
    assert code == 0, out
    assert "    waived: tank models share one library of blocks (loopwise.toml:5)" in out
    assert "    waived: the disturbance input is wired in the next revision (loopwise.toml:10)" in out
    doc = json.loads(cli("check", "tanks", "--format", "json")[1])
    assert {f["waived"]["file"] for m in doc["models"] for f in m["findings"]} == {"loopwise.toml"}
    sarif = json.loads(cli("check", "tanks", "--format", "sarif")[1])
    justifications = {s["justification"] for r in sarif["runs"][0]["results"] for s in r.get("suppressions", [])}
    assert justifications == {"waived: tank models share one library of blocks (loopwise.toml:5)",
                              "waived: the disturbance input is wired in the next revision (loopwise.toml:10)"}
    # an LW284 names it the same way (t2 alone has no LW381 for the second waiver to accept)
    code, out, _ = cli("check", "tanks/t2.loop")
    assert code == 1 and "\nloopwise.toml:10:1: warning LW284 the waiver of LW381 matches no finding" in out
    # from a folder below the settings file's, the file lies outside: its full path
    monkeypatch.chdir(tmp_path / "tanks")
    out = cli("check", "t1.loop", "--no-fail-on-warnings")[1]
    assert f"    waived: tank models share one library of blocks ({tmp_path.resolve() / 'loopwise.toml'}:5)" in out


def test_a_settings_waiver_is_not_judged_when_no_checked_model_is_covered(cli, tmp_path):
    write(tmp_path, "elsewhere/m.loop", MODEL + WAIVE_A + WAIVE_B)
    write(tmp_path, "loopwise.toml", SETTINGS)
    code, out, _ = cli("check", "elsewhere")
    assert code == 0 and "LW284" not in out, out


def test_the_html_report_shows_a_settings_waiver_that_matches_nothing(cli, tmp_path):
    write(tmp_path, "tanks/t1.loop", MODEL)
    write(tmp_path, "loopwise.toml", SETTINGS.replace("fail_on_warnings = true\n", ""))
    code, _, err = cli("report", "tanks", "--output", "r.html")
    assert code == 0, err
    page = (tmp_path / "r.html").read_text()
    section = page.split('<section id="settings">')[1].split("</section>")[0]
    assert "warning LW284 the waiver of LW381 at d matches no finding" in section
    assert "waived: tank models share one library of blocks" in page  # the other one matched
