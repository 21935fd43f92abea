"""`loopwise sweep` end to end, and `--set` on `check`: exit codes, every format parsed
with a real parser, the JSON against docs/sweep.schema.json, the honest wording."""
from __future__ import annotations

import json
import math
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import jsonschema
import pytest

# L = K exp(-sT)/s: INSIDE stable everywhere (worst K T = 1.2, PM >= 21.2 deg), CROSSING
# unstable in a corner (K T up to 1.7 > pi/2)
from tests.scenarios import DELAYED_CROSSING as CROSSING, DELAYED_INSIDE as INSIDE, NO_RANGES

from .conftest import loopwise, write

SCHEMA = json.loads((Path(__file__).parents[2] / "docs" / "sweep.schema.json").read_text())

#: at the corner a = 0 the block's gain divides by zero: that plant cannot be analysed
DIVIDES = "model divides\nparam a = 1 in [0, 2]\ninput r\ne = r - y\ny = [1/(s + 1)/a](e)\nbreak loop at y\n"

FAST = ("--samples", "6", "--jobs", "1")


def validate(text: str) -> dict:
    doc = json.loads(text)
    jsonschema.Draft202012Validator(SCHEMA).validate(doc)
    return doc


def test_stable_box_exits_0_with_the_worst_corner_and_honest_words(cli, tmp_path):
    write(tmp_path, "inside.loop", INSIDE)
    code, out, _ = cli("sweep", "inside.loop", *FAST)
    assert code == 0, out
    assert "PASS  inside.loop  model delayed: STABLE at every sampled plant" in out
    assert "sampled evidence, not a proof" in out and "between neighbouring points" in out
    pm_line = next(line for line in out.splitlines() if line.strip().startswith("phase margin"))
    # nominal 90 - 28.6 = 61.4 deg; worst at the corner K = 1.2, T = 1: 90 - 68.75 = 21.2 deg
    assert "61.4 deg" in pm_line and "21.2 deg" in pm_line and "K=1.2, T=1" in pm_line
    assert "Caution:" in out


@pytest.fixture(scope="module")
def swept(tmp_path_factory):
    """One sweep of both models, shared by the tests of the formats."""
    from loopwise.sweep import SweepOptions, sweep_paths

    folder = tmp_path_factory.mktemp("swept")
    paths = [write(folder, "inside.loop", INSIDE), write(folder, "crossing.loop", CROSSING)]
    return sweep_paths(paths, options=SweepOptions(samples=6), jobs=1)


def test_an_unstable_corner_exits_1_and_says_where_stability_is_lost(cli, tmp_path):
    write(tmp_path, "crossing.loop", CROSSING)
    code, out, _ = cli("sweep", "crossing.loop", *FAST, "--format", "json", "--output", "out.json")
    assert code == 1
    assert "FAIL  crossing.loop" in out and "UNSTABLE at" in out
    assert "stability lost between: stable at K=" in out
    assert "closed loop unstable at this plant: no margins" in out
    assert "json report written to out.json" in out
    (b,) = validate((tmp_path / "out.json").read_text())["models"][0]["breaks"]
    assert b["unstable_samples"] > 0 and not b["stable_everywhere"] and b["boundaries"]
    for k in b["boundaries"]:
        assert k["stable_at"]["K"] * k["stable_at"]["T"] < math.pi / 2 < k["unstable_at"]["K"] * k["unstable_at"]["T"]


def test_json_follows_the_schema_and_the_issue_contract(swept):
    from loopwise.report import json_report

    doc = validate(json_report.render(swept))
    assert doc["sweep_schema"] == 1 and doc["command"] == "sweep" and doc["caution"]
    inside, crossing = doc["models"]
    assert inside["stable_everywhere"] and not crossing["stable_everywhere"]
    assert inside["params"] == [{"name": "K", "nominal": 1.0, "lo": 0.5, "hi": 1.2},
                                {"name": "T", "nominal": 0.5, "lo": 0.2, "hi": 1.0}]
    assert inside["samples"] == sum(inside["design"].values()) and inside["design"]["corners"] == 4
    assert inside["evidence"] == "sampled, not a proof"
    (b,) = inside["breaks"]
    pm = b["worst"]["phase_margin_deg"]
    assert pm["at"] == {"K": 1.2, "T": 1.0}
    assert pm["value"] == pytest.approx(90 - math.degrees(1.2), rel=1e-6)
    assert b["worst"]["gain_margin_down_db"] == {"value": None, "at": None, "nominal": None}  # unbounded
    (req,) = b["requirements"]
    assert req["met"] and req["at"] == {"K": 1.2, "T": 1.0} and req["value"] == pytest.approx(pm["value"])
    (cb,) = crossing["breaks"]
    assert cb["unstable_samples"] > 0 and cb["first_unstable_at"]["K"] * cb["first_unstable_at"]["T"] > math.pi / 2
    (creq,) = cb["requirements"]
    assert not creq["met"] and creq["value"] is None and creq["at"]["K"] * creq["at"]["T"] > math.pi / 2
    doc["models"][0]["breaks"][0]["worst"]["phase_margin_deg"]["where"] = 1  # the schema is strict
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.Draft202012Validator(SCHEMA).validate(doc)


def test_junit_and_markdown_forms(swept):
    from loopwise.report import sweep_junit, sweep_markdown

    root = ET.fromstring(sweep_junit.render(swept))
    assert root.get("tests") == "2" and root.get("failures") == "1"
    evidence = root.find("testsuite/properties/property[@name='evidence']").get("value")
    assert evidence.endswith("not a proof: a plant between the samples may be worse")
    failing = [s for s in root.findall("testsuite") if s.get("failures") == "1"]
    (failure,) = [f for s in failing for f in s.iter("failure")]
    assert failure.get("type") == "instability" and "first at K=" in failure.get("message")
    md = sweep_markdown.render(swept)
    assert md.count("| margin | nominal | worst | where (param values) |") == 2
    assert "sampled evidence, not a proof" in md and "> **Caution:**" in md
    assert "Stability is lost between:" in md and "**FAIL**" in md


def test_the_worst_plant_reruns_with_check_set(cli, tmp_path):
    write(tmp_path, "two_lags.loop", """\
model two_lags
param K = 1 in [0.5, 6]
param z = 2 in [0.3, 3]
input r
e = r - y
y = [K*(1 + s)/(s*(1 + 3*s))*(1 + s/z)/(1 + 3*s/z)](e)
break loop at y
""")
    _, out, _ = cli("sweep", "two_lags.loop", "--samples", "12", "--jobs", "1", "--format", "json")
    worst = validate(out)["models"][0]["breaks"][0]["worst"]["phase_margin_deg"]
    sets = [a for name, value in worst["at"].items() for a in ("--set", f"{name}={value!r}")]
    code, out, _ = cli("check", "two_lags.loop", *sets, "--format", "json")
    assert code == 0
    assert json.loads(out)["models"][0]["breaks"][0]["phase_margin_deg"] == pytest.approx(worst["value"], rel=1e-12)


def test_set_fixes_a_param_and_takes_units(cli, tmp_path):
    write(tmp_path, "inside.loop", INSIDE)
    code, out, _ = cli("sweep", "inside.loop", *FAST, "--set", "T=500ms", "--format", "json")
    assert code == 0
    model = validate(out)["models"][0]
    assert [p["name"] for p in model["params"]] == ["K"] and model["fixed"] == {"T": 0.5}
    assert model["design"]["corners"] == 2
    # worst over K in [0.5, 1.2] with T = 0.5: PM = 90 - 0.6 rad
    pm = model["breaks"][0]["worst"]["phase_margin_deg"]
    assert pm["at"] == {"K": 1.2} and pm["value"] == pytest.approx(90 - math.degrees(0.6), rel=1e-6)


def test_set_outside_the_range_is_a_note_and_an_unknown_name_exit_2(cli, tmp_path):
    write(tmp_path, "inside.loop", INSIDE)
    code, out, _ = cli("check", "inside.loop", "--set", "K=1.3")
    assert code == 0
    assert "note LW292 param `K` is set to 1.3, outside its declared range [0.5, 1.2]" in out
    code, out, _ = cli("check", "inside.loop", "--set", "Kx=1")
    assert code == 2 and "LW254 no param `Kx` to set" in out and "did you mean `K`?" in out
    code, out, _ = cli("sweep", "inside.loop", *FAST, "--set", "Kx=1")
    assert code == 2 and "did you mean `K`?" in out
    code, _, err = cli("check", "inside.loop", "--set", "K")
    assert code == 2 and "expected NAME=VALUE" in err


def test_a_model_without_ranges_is_checked_at_its_nominal_point_with_a_note(cli, tmp_path):
    write(tmp_path, "plain.loop", NO_RANGES)
    code, out, _ = cli("sweep", "plain.loop", *FAST, "--format", "json")
    assert code == 0
    model = validate(out)["models"][0]
    assert model["samples"] == 1 and model["params"] == []
    assert [f["code"] for f in model["findings"]] == ["LW691"]


#: params and blocks only (a library for `use`), one param with a range
LIBRARY = "param k = 2 in [1, 3]\nblock C = k/(s + 1)\n"


def test_a_library_is_said_to_have_nothing_to_check_as_check_says(cli, tmp_path):
    # regression: `sweep` printed "PASS ... STABLE at every sampled plant" for a library,
    # and sampled its ranged params, while `check` calls it a library with nothing to check
    write(tmp_path, "lib.loop", LIBRARY)
    write(tmp_path, "plain.loop", NO_RANGES)
    code, checked, _ = cli("check", "lib.loop", "plain.loop")
    assert code == 0
    code, text, _ = cli("sweep", "lib.loop", "plain.loop", *FAST)
    assert code == 0
    library_line = "PASS  lib.loop  library of params and blocks for `use`: nothing to check on its own"
    assert checked.splitlines()[0] == text.splitlines()[0] == library_line
    assert text.splitlines()[1] == ""  # nothing sampled, no evidence lines, no notes
    assert text.splitlines()[-2] == ("1 model(s) swept, 1 passed, 0 failed, "
                                     "1 library for `use` not checked on its own.")
    doc = validate(cli("sweep", "lib.loop", *FAST, "--format", "json")[1])
    (lib,) = doc["models"]
    assert lib["params"] == [] and lib["samples"] == 1 and lib["breaks"] == []
    assert [f["code"] for f in lib["findings"]] == ["LW491"]  # no LW691: not a model to sweep
    markdown = cli("sweep", "lib.loop", *FAST, "--format", "markdown")[1]
    assert "#### PASS `lib` (`lib.loop`): library of params and blocks for `use`: nothing to check on its own" \
        in markdown and "Evidence:" not in markdown
    junit = ET.fromstring(cli("sweep", "lib.loop", *FAST, "--format", "junit")[1])
    (case,) = junit.iter("testcase")
    assert case.get("name") == "library" and case.find("skipped") is not None
    sarif = json.loads(cli("sweep", "lib.loop", *FAST, "--format", "sarif")[1])
    assert sarif["runs"][0]["results"] == []  # as check's SARIF gives a library no result


def test_a_plant_that_cannot_be_analysed_exits_2_and_names_it(cli, tmp_path):
    write(tmp_path, "divides.loop", DIVIDES)
    code, out, _ = cli("sweep", "divides.loop", *FAST)
    assert code == 2
    assert "LW601 the model could not be analysed at 1 of" in out
    assert "the first at a=0: LW221 division by zero" in out
    assert "--set a=0" in out


def test_cluster_without_dask_explains_how_to_install(cli, tmp_path, monkeypatch):
    write(tmp_path, "inside.loop", INSIDE)
    monkeypatch.setitem(sys.modules, "distributed", None)  # as if Dask were not installed
    code, _, err = cli("sweep", "inside.loop", "--cluster", "tcp://127.0.0.1:1")
    assert code == 2
    assert 'pip install "loopwise[cluster]"' in err


def test_the_installed_command_runs_in_parallel_like_in_one_process(tmp_path, cli):
    write(tmp_path, "inside.loop", INSIDE)
    proc = loopwise("sweep", "inside.loop", "--samples", "6", "--jobs", "2", "--format", "json",
                    cwd=tmp_path, script=True)
    assert proc.returncode == 0, proc.stderr
    _, serial, _ = cli("sweep", str(tmp_path / "inside.loop"), *FAST, "--format", "json")
    parallel, one = json.loads(proc.stdout), json.loads(serial)
    for doc in (parallel, one):
        for m in doc["models"]:
            m.pop("file")
            for f in m["findings"]:
                f.pop("file")
    assert parallel["models"] == one["models"]


#: `C` cancels its pole at s = 1 with a zero: the mode stays and counts (Z = 1 at every
#: plant) until a waiver accepts it. Reference: numpy.roots of the closed loop with the
#: factor kept, (s - 1) (s^2 + 3 s + 2 + k), has one root in the right half plane for
#: every k > -2 (tests/reference/test_hidden_modes_vs_python_control.py)
CANCELS = """\
model inblock
param k = 3 in [2, 4]
input r
block C = (s - 1)/((s - 1)*(s + 2))
block G = k/(s + 1)
e = r - y
y = G(C(e))
break b at y
"""
WAIVER = """\
[[waive]]
files = "*.loop"
code = "LW281"
at = "C"
reason = "the factor is an artefact of the identification"
"""


def test_the_sweep_judges_every_plant_with_the_waivers_check_uses(cli, tmp_path):
    roots = np.roots(np.polymul([1, -1], [1, 3, 2 + 3]))
    assert np.sum(roots.real > 0) == 1
    write(tmp_path, "c.loop", CANCELS)
    code, out, _ = cli("sweep", "c.loop", *FAST)
    assert code == 1 and "UNSTABLE at" in out
    assert cli("check", "c.loop")[0] == 1
    # a settings waiver reaches every plant (the workers read no settings file) ...
    write(tmp_path, "loopwise.toml", WAIVER)
    code, out, _ = cli("sweep", "c.loop", "--samples", "6", "--jobs", "2", "--fail-on-warnings")
    assert code == 0, out
    assert "STABLE at every sampled plant" in out and "waived: the factor is an artefact" in out
    assert cli("check", "c.loop", "--fail-on-warnings")[0] == 0
    # ... and so does the model's own `waive`, without the settings
    (tmp_path / "loopwise.toml").unlink()
    write(tmp_path, "c.loop", CANCELS + 'waive LW281 at C "known not to exist"\n')
    code, out, _ = cli("sweep", "c.loop", *FAST, "--fail-on-warnings")
    assert code == 0, out


def test_the_progress_count_reaches_every_plant_and_changes_nothing(tmp_path, monkeypatch):
    from rich.progress import Progress

    from loopwise.sweep import SweepOptions, sweep_paths

    write(tmp_path, "inside.loop", INSIDE)
    added = []
    original = Progress.advance
    monkeypatch.setattr(Progress, "advance", lambda self, task, n=1: (added.append(n), original(self, task, n)))
    options = SweepOptions(samples=6)
    with_count = sweep_paths([tmp_path / "inside.loop"], options=options, jobs=2, progress=True)
    assert sum(added) == with_count.models[0].samples and len(added) > 3  # one step per batch
    without = sweep_paths([tmp_path / "inside.loop"], options=options, jobs=1, progress=False)
    assert with_count.to_dict() == without.to_dict()


def test_a_settings_waiver_that_matches_nothing_is_reported_for_the_run(cli, tmp_path):
    write(tmp_path, "inside.loop", INSIDE)
    write(tmp_path, "loopwise.toml", WAIVER)  # LW281 at C: inside.loop has no such finding
    code, out, _ = cli("sweep", "inside.loop", *FAST, "--format", "json")
    doc = validate(out)
    (unmatched,) = doc["findings"]
    assert unmatched["code"] == "LW284" and unmatched["file"].endswith("loopwise.toml") and code == 0
    assert cli("check", "inside.loop", "--fail-on-warnings")[0] == 1  # as check says
    code, out, _ = cli("sweep", "inside.loop", *FAST, "--fail-on-warnings")
    assert code == 1 and "warning LW284 the waiver of LW281 at C matches no finding" in out
