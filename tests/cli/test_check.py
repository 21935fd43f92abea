"""`loopwise check` end to end on the real pipeline, on small models written into
tmp_path and on the demo models: every format and exit code once through a
subprocess (`python -m loopwise`, and the `loopwise` script once), the other
cases through `main()` in this process (the engine loads once per session)."""
from __future__ import annotations

import json
import os
import re
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import jsonschema
import pytest

from loopwise.results import CAUTION
from loopwise.run import discover, matches_glob
from loopwise.settings import Settings

from .conftest import BROKEN, GOOD, GOOD_PM_DEG, GOOD_WC, UNMET, UNSTABLE, loopwise, write

ROOT = Path(__file__).parents[2]
SCHEMA = json.loads((ROOT / "docs" / "results.schema.json").read_text())


def one_line_error(proc) -> str:
    """Usage mistakes: exit 2, nothing on stdout, one line on stderr."""
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1, proc.stderr
    return lines[0]


# --- exit codes and the text report --------------------------------------------------------

def test_stable_model_passes_with_its_margins(tmp_path):
    write(tmp_path, "m.loop", GOOD)
    proc = loopwise("check", "m.loop", cwd=tmp_path)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    out = proc.stdout
    assert "PASS  m.loop  model m: STABLE" in out
    row = next(l for l in out.splitlines() if l.lstrip().startswith("b "))
    cells = row.split()
    assert cells[:6] == ["b", "y", "STABLE", "0", "0", "0"]
    assert float(cells[6]) == pytest.approx(GOOD_PM_DEG, abs=0.1)   # PM, derived in conftest
    assert float(cells[-2]) == pytest.approx(GOOD_WC, rel=1e-3)     # crossover rad/s
    assert cells[-1] == "1/1"
    assert CAUTION in out
    assert "\x1b[" not in out   # not a terminal: no colour


def test_unmet_requirement_exits_1_and_names_its_line(tmp_path, cli):
    write(tmp_path, "m.loop", UNMET)
    code, out, _ = cli("check", "m.loop")
    assert code == 1
    assert "FAIL  m.loop" in out
    # the limit as the model wrote it, the value in the metric's unit
    assert re.search(r"m\.loop:7: break b: phase_margin >= 70deg \(value 55\.\d+ deg\)", out)


def test_instability_exits_1(tmp_path, cli):
    write(tmp_path, "tip.loop", UNSTABLE)
    code, out, _ = cli("check", "tip.loop")
    assert code == 1
    assert "model tip: UNSTABLE" in out
    row = next(l for l in out.splitlines() if l.lstrip().startswith("b "))
    assert row.split()[2:6] == ["UNSTABLE", "0", "1", "1"]   # P = 0, N = 1, Z = 1


def test_broken_model_among_good_ones_exits_2_and_the_others_are_checked(tmp_path, cli):
    write(tmp_path, "models/a_good.loop", GOOD)
    write(tmp_path, "models/b_broken.loop", BROKEN)
    write(tmp_path, "models/c_tip.loop", UNSTABLE)
    code, out, _ = cli("check", "models")
    assert code == 2
    assert out.index("a_good.loop") < out.index("c_tip.loop") < out.index("b_broken.loop:3:")
    assert "model tip: UNSTABLE" in out and "model m: STABLE" in out
    lines = out.splitlines()
    i = next(i for i, l in enumerate(lines) if "b_broken.loop:3:" in l and "error" in l)
    assert lines[i + 1].strip() == "block G = 10/((s+1)*(s+2)))"
    assert lines[i + 2].strip() == "^"
    col = int(re.search(r"b_broken\.loop:3:(\d+):", lines[i]).group(1))
    assert lines[i + 2].index("^") - lines[i + 1].index("block") == col - 1
    assert "3 models checked" not in out and "2 models checked, 1 passed, 1 failed, 1 could not be read" in out


def test_a_file_that_is_not_text_is_reported_and_others_still_checked(tmp_path, cli):
    write(tmp_path, "d/good.loop", GOOD)
    (tmp_path / "d" / "junk.loop").write_bytes(b"model junk\n\xff\xfe\x00\x01\n")
    os.symlink(tmp_path / "nowhere.loop", tmp_path / "d" / "dangling.loop")
    code, out, _ = cli("check", "d", "--format", "json")
    assert code == 2
    doc = json.loads(out)
    jsonschema.Draft202012Validator(SCHEMA).validate(doc)
    assert [m["model"] for m in doc["models"]] == ["m"]
    errors = {Path(e["file"]).name: e for e in doc["errors"]}
    assert set(errors) == {"junk.loop", "dangling.loop"}
    assert errors["junk.loop"]["line"] == 2
    assert errors["dangling.loop"]["code"].startswith("LW") and errors["dangling.loop"]["message"]


@pytest.mark.parametrize("args, expect", [
    (["check"], "the following arguments are required: PATH"),
    (["check", "missing.loop"], "missing.loop: no such file or folder"),
    (["check", "empty"], "empty: no *.loop models in this folder"),
    (["check", "m.loop", "--bogus"], "unrecognized arguments: --bogus"),
    (["check", "m.loop", "--format", "yaml"], "invalid choice: 'yaml'"),
    (["check", "m.loop", "--jobs", "-1"], "must be 0 (one per CPU) or more"),
    (["check", "m.loop", "--config", "nope.toml"], "settings file nope.toml does not exist"),
    (["check", "m.loop", "--output", "no/such/dir/r.xml", "--format", "junit"], "cannot write"),
])
def test_usage_mistakes_get_one_line_and_exit_2(tmp_path, cli, args, expect):
    write(tmp_path, "m.loop", GOOD)
    (tmp_path / "empty").mkdir()
    code, out, err = cli(*args)
    assert (code, out) == (2, "")
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("loopwise: ") and expect in lines[0], err


def test_a_usage_mistake_through_the_real_command(tmp_path):
    line = one_line_error(loopwise("check", "missing.loop", "--bogus", cwd=tmp_path))
    assert "unrecognized arguments: --bogus" in line


# --- formats through the command --------------------------------------------------------

def test_json_output_validates_and_carries_the_figures(tmp_path):
    write(tmp_path, "m.loop", GOOD)
    write(tmp_path, "tip.loop", UNSTABLE)
    proc = loopwise("check", "m.loop", "tip.loop", "--format", "json", cwd=tmp_path)
    assert proc.returncode == 1
    doc = json.loads(proc.stdout)
    jsonschema.Draft202012Validator(SCHEMA).validate(doc)
    assert doc["caution"] == CAUTION and doc["schema"] == 2
    good, tip = doc["models"]
    b = good["breaks"][0]
    assert (b["stable"], b["open_loop_rhp_poles"], b["encirclements"]) == (True, 0, 0)
    assert b["phase_margin_deg"] == pytest.approx(GOOD_PM_DEG, abs=0.05)
    assert b["requirements"] == [{"metric": "phase_margin", "op": ">=",
                                  "limit": pytest.approx(30.0, rel=1e-12), "limit_text": "30deg",
                                  "value": pytest.approx(GOOD_PM_DEG, abs=0.05), "met": True,
                                  "line": 7}]
    assert tip["stable"] is False and tip["closed_loop_rhp_poles"] == 1


def test_junit_to_a_file_with_the_text_summary_on_stdout(tmp_path):
    write(tmp_path, "m.loop", GOOD)
    write(tmp_path, "u.loop", UNMET)
    # the echoed source line holds a character an ASCII console cannot print
    write(tmp_path, "x.loop", BROKEN.replace("(s+2)))", "(s+2)))  # gain in \u00b5V"))
    proc = loopwise("check", ".", "--format", "junit", "--output", "report.xml", cwd=tmp_path,
                    env={"PYTHONIOENCODING": "ascii"})
    assert proc.returncode == 2
    assert "# gain in ?V" in proc.stdout
    assert "junit report written to report.xml" in proc.stdout and "PASS  m.loop" in proc.stdout
    root = ET.parse(tmp_path / "report.xml").getroot()
    assert root.tag == "testsuites"
    assert (root.get("tests"), root.get("failures"), root.get("errors")) == ("5", "1", "1")
    failure = root.find(".//testcase/failure")
    assert failure.get("type") == "requirement" and "u.loop:7" in failure.text
    assert root.find(".//testcase/error").get("type").startswith("LW")



def test_quiet_output_file(tmp_path, cli):
    write(tmp_path, "m.loop", GOOD)
    code, out, err = cli("check", "m.loop", "-f", "junit", "-o", "r2.xml", "-q")
    assert (code, out, err) == (0, "", "")
    assert ET.parse(tmp_path / "r2.xml").getroot().get("failures") == "0"


def test_markdown_through_the_installed_script(tmp_path):
    write(tmp_path, "m.loop", GOOD)
    write(tmp_path, "tip.loop", UNSTABLE)
    proc = loopwise("check", "m.loop", "tip.loop", "--format", "markdown", cwd=tmp_path,
                    script=True)
    assert proc.returncode == 1
    assert proc.stdout.startswith("### loopwise check: 1 of 2 models need attention")
    assert "| **FAIL** | `tip.loop` | tip | **UNSTABLE** | 1 | - |" in proc.stdout
    assert f"> **Caution:** {CAUTION}" in proc.stdout


def test_colour_only_when_asked_or_on_a_terminal(tmp_path, cli, monkeypatch):
    write(tmp_path, "m.loop", GOOD)
    _, forced, _ = cli("check", "m.loop", "--color", "always")
    assert "\x1b[32mPASS\x1b[0m" in forced
    assert "STABLE" in re.sub(r"\x1b\[[0-9;]*m", "", forced)
    _, auto, _ = cli("check", "m.loop")     # captured stdout is not a terminal
    assert "\x1b[" not in auto
    monkeypatch.setattr(sys.stdout, "isatty", lambda: True)
    assert "\x1b[" in cli("check", "m.loop")[1]
    monkeypatch.setenv("NO_COLOR", "1")
    assert "\x1b[" not in cli("check", "m.loop")[1]


# --- parallel jobs ---------------------------------------------------------------------------

def test_jobs_give_the_same_report_in_the_same_order(tmp_path, cli):
    for i in range(5):
        write(tmp_path, f"d/{i}_good.loop", GOOD.replace("model m", f"model m{i}"))
    write(tmp_path, "d/7_broken.loop", BROKEN)
    write(tmp_path, "d/9_tip.loop", UNSTABLE)
    code1, serial, err1 = cli("check", "d", "--format", "json", "--jobs", "1")
    code2, parallel, err2 = cli("check", "d", "--format", "json", "--jobs", "2")
    assert code1 == code2 == 2
    assert json.loads(serial) == json.loads(parallel)
    assert [m["model"] for m in json.loads(serial)["models"]] == \
        ["m0", "m1", "m2", "m3", "m4", "tip"]
    assert err1 == err2 == ""   # not a terminal: no progress bar


def test_results_cross_process_boundaries_with_their_responses(tmp_path):
    # what --jobs relies on: a real result (numpy arrays inside) survives pickling
    import pickle

    from loopwise.run import check_one

    result, errors = check_one(str(write(tmp_path, "m.loop", GOOD)))
    assert errors == ()
    back = pickle.loads(pickle.dumps(result))
    assert back.to_dict() == result.to_dict()
    resp = result.breaks[0].response
    assert resp is not None and resp.L.size > 0
    assert (back.breaks[0].response.L == resp.L).all()
    assert (back.breaks[0].response.s == resp.s).all()


# --- settings ---------------------------------------------------------------------------

def test_settings_requirements_apply_to_every_model(tmp_path, cli, monkeypatch):
    project = tmp_path / "project"
    model = write(project, "m.loop", GOOD)
    settings = write(project, "loopwise.toml", 'requirements = ["* phase_margin >= 70deg"]\n')
    monkeypatch.chdir(project)
    code, out, _ = cli("check", "m.loop", "--format", "json")
    assert code == 1, out
    reqs = json.loads(out)["models"][0]["breaks"][0]["requirements"]
    assert sorted((round(r["limit"], 9), r["met"]) for r in reqs) == [(30.0, True), (70.0, False)]
    # from a folder without settings: only the model's own requirement, unless named
    other = tmp_path / "elsewhere"
    other.mkdir()
    monkeypatch.chdir(other)
    assert cli("check", str(model))[0] == 0
    assert cli("check", str(model), "--config", str(settings))[0] == 1


def test_include_and_exclude_filter_folders(tmp_path, cli):
    write(tmp_path, "models/a.loop", GOOD)
    write(tmp_path, "models/scratch/tip.loop", UNSTABLE)
    write(tmp_path, "pyproject.toml",
          '[tool.loopwise]\ninclude = ["models/**/*.loop"]\nexclude = ["models/scratch/**"]\n')
    code, out, _ = cli("check", "models")
    assert code == 0, out
    assert "tip" not in out
    assert cli("check", "models/scratch/tip.loop")[0] == 1  # a named file is always checked
    write(tmp_path, "pyproject.toml", '[tool.loopwise]\nexclude = ["models/**"]\n')
    code, out, err = cli("check", "models")
    assert code == 2 and "no models left after the include/exclude settings" in err


def test_fail_on_warnings_from_file_and_flag(tmp_path, cli):
    write(tmp_path, "w.loop", GOOD.replace("break b at y", "block Unused = 1/(s+3)\nbreak b at y"))
    code, out, _ = cli("check", "w.loop", "--format", "json")
    doc = json.loads(out)
    warned = any(f["severity"] == "warning" for m in doc["models"] for f in m["findings"]) or \
        any(b["warnings"] for m in doc["models"] for b in m["breaks"])
    assert warned, "an unused block should be a warning"
    assert code == 0
    assert cli("check", "w.loop", "--fail-on-warnings")[0] == 1
    write(tmp_path, "loopwise.toml", "fail_on_warnings = true\n")
    assert cli("check", "w.loop")[0] == 1
    assert cli("check", "w.loop", "--no-fail-on-warnings")[0] == 0


# --- discovery (in process: no engine involved) ----------------------------------------------

def test_discovery_is_sorted_recursive_and_skips_hidden_folders(tmp_path):
    for name in ["b/z.loop", "b/a.loop", "a.loop", ".git/x.loop", "notes.txt", "c/d/e.loop"]:
        write(tmp_path, name, "")
    found = [p.relative_to(tmp_path).as_posix() for p in discover([tmp_path], Settings())]
    assert found == ["a.loop", "b/a.loop", "b/z.loop", "c/d/e.loop"]
    again = discover([tmp_path / "b" / "z.loop", tmp_path], Settings())
    assert [p.name for p in again][:2] == ["z.loop", "a.loop"] and len(again) == 4


@pytest.mark.parametrize("path, pattern, hit", [
    ("models/a.loop", "models/**/*.loop", True),
    ("models/x/y/a.loop", "models/**/*.loop", True),
    ("other/a.loop", "models/**/*.loop", False),
    ("models/scratch/a.loop", "models/scratch/**", True),
    ("models/a.loop", "*.loop", False),
    ("a.loop", "?.loop", True),
    ("models/b.loop", "models/[ab].loop", True),
    ("models/c.loop", "models/[!ab].loop", True),
])
def test_glob_matching(path, pattern, hit):
    assert matches_glob(path, (pattern,)) is hit


# --- the demo models --------------------------------------------------------------------------

# the demo models' verdicts and header figures: tests/cli/test_demo_models.py


# --- the progress bar ---------------------------------------------------------------------

class _Stream:
    def __init__(self, tty: bool):
        self.tty = tty

    def isatty(self) -> bool:
        return self.tty


@pytest.mark.parametrize("tty, env, wanted", [
    (True, {}, True),
    (False, {}, False),
    (True, {"CI": "true"}, False),
    (True, {"TERM": "dumb"}, False),
])
def test_progress_only_on_an_interactive_terminal(monkeypatch, tty, env, wanted):
    from loopwise.progress import wants_progress

    monkeypatch.delenv("CI", raising=False)
    monkeypatch.setenv("TERM", "xterm")
    for key, value in env.items():
        monkeypatch.setenv(key, value)
    assert wants_progress(_Stream(tty)) is wanted


def test_a_run_with_the_progress_bar_gives_the_same_result(tmp_path):
    from loopwise.progress import PROGRESS_MIN_ITEMS
    from loopwise.run import check_paths

    for i in range(PROGRESS_MIN_ITEMS):
        write(tmp_path, f"d/m{i}.loop", GOOD)
    with_bar = check_paths([tmp_path / "d"], Settings(), jobs=1, progress=True)
    without = check_paths([tmp_path / "d"], Settings(), jobs=1, progress=False)
    assert with_bar.to_dict() == without.to_dict()
    assert len(with_bar.models) == PROGRESS_MIN_ITEMS


def test_an_error_in_a_shared_file_is_reported_once_and_each_model_it_stops_is_named(tmp_path, cli):
    write(tmp_path, "lib/shared.loop", "param k = 2*\n")
    for name in ("a", "b", "c"):
        write(tmp_path, f"{name}.loop", f'model {name}\n# invented\nuse "lib/shared.loop"\n'
              + GOOD.split("\n", 1)[1])
    code, out, _ = cli("check", "a.loop", "b.loop", "c.loop", "--format", "json")
    assert code == 2
    errors = json.loads(out)["errors"]
    shared = [e for e in errors if e["file"].endswith("shared.loop")]
    assert len(shared) == 1 and shared[0]["code"] == "LW101", errors
    named = [(e["file"], e["line"], e["col"], e["code"]) for e in errors if e not in shared]
    # each model at its own `use` line (line 3, column 1)
    assert named == [(f"{n}.loop", 3, 1, "LW003") for n in "abc"], errors
    code, out, _ = cli("check", "a.loop", "b.loop", "c.loop")
    for n in "abc":
        assert f"{n}.loop:3:1: error LW003" in out
    assert out.count('    use "lib/shared.loop"\n') == 3 and "4 could not be read" in out


def test_a_model_using_a_name_from_a_broken_file_is_named_at_its_use_line_first(tmp_path, cli):
    """The model's own follow-up error (a block the broken file would have defined is
    unknown) used to be all it got: the `use` line that explains it was left out."""
    write(tmp_path, "lib.loop", "param k = 2 +\nblock G = 1/(s + 1)\n")
    write(tmp_path, "m.loop", 'model m\nuse "lib.loop"\ninput r\ne = r - y\ny = G(k*e)\nbreak b at y\n')
    code, out, _ = cli("check", "m.loop", "--format", "json")
    assert code == 2
    mine = [(e["line"], e["code"]) for e in json.loads(out)["errors"] if e["file"] == "m.loop"]
    assert mine[0] == (2, "LW003") and (5, "LW227") in mine, mine


def test_a_default_requirement_error_points_into_the_settings_file(tmp_path, capsys):
    # the located error shows the settings file's own line with a caret under the metric
    from loopwise.cli import main as cli_main

    (tmp_path / "pyproject.toml").write_text(
        '[tool.loopwise]\nrequirements = ["* phase_margin >= 30deg", "* delay_margn >= 1ms"]\n')
    model = tmp_path / "m.loop"
    model.write_text("input r\nblock G = 2/((s+1)*(s+2))\ne = r - y\ny = G(e)\nbreak b at y\n")
    assert cli_main(["check", str(model), "--config", str(tmp_path / "pyproject.toml")]) == 2
    out = capsys.readouterr()
    text = out.out + out.err
    assert "pyproject.toml:2:47: error LW243 unknown metric `delay_margn`" in text
    assert "did you mean `delay_margin`" in text


def test_a_symlink_loop_in_a_folder_is_a_located_problem_and_the_rest_is_checked(tmp_path, cli):
    write(tmp_path, "models/good.loop", GOOD)
    (tmp_path / "models" / "a.loop").symlink_to("b.loop")
    (tmp_path / "models" / "b.loop").symlink_to("a.loop")
    (tmp_path / "models" / "sub").mkdir()
    (tmp_path / "models" / "sub" / "up").symlink_to("..")  # a folder loop: not followed
    code, out, err = cli("check", "models", "--format", "json")
    assert code == 2, err
    data = json.loads(out)
    assert [m["model"] for m in data["models"]] == ["m"]
    assert data["models"][0]["breaks"][0]["stable"] is True
    located = sorted((Path(e["file"]).name, e["code"]) for e in data["errors"])
    assert located == [("a.loop", "LW001"), ("b.loop", "LW001")]
    assert all("symbolic links" in e["message"] for e in data["errors"])
    # a looping link named on the command line is checked like any other file
    code, out, _ = cli("check", "models/a.loop", "models/good.loop")
    assert code == 2 and "PASS  models/good.loop" in out and "models/a.loop" in out
