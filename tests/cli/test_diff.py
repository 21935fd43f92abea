"""`loopwise diff` end to end: a real git repository built in the test, files and folders.

The loop under test (an invented example) is L = K / (s (s+1) (s+5)), unity
negative feedback. Independent values:
- gain margin, analytic: the phase crossover is where the lags of the two poles
  add to 90 deg, w^2 = 1*5, and there |L| = K / (w sqrt(w^2+1) sqrt(w^2+25))
  = K / 30, so GM = 30/K (K 10 -> 20: 20log10(3) -> 20log10(1.5) dB). With the
  pole at 10 instead of 5 the same derivation gives GM = 1*10*(1+10)/K = 110/K.
- phase margin and crossover: python-control `stability_margins` on the same
  delay-free loop; delay margin = phase margin [rad] / crossover (rule 11).
"""
from __future__ import annotations

import json
import math
import re
import os
import subprocess
import sys
from pathlib import Path

import control
import jsonschema
import numpy as np
import pytest

from loopwise.cli import main
from loopwise.results import CAUTION

SCHEMA = json.loads((Path(__file__).resolve().parents[2] / "docs" / "diff.schema.json").read_text())

PYPROJECT = '[tool.loopwise]\nexclude = ["**/common/**"]\n'
PLANT_LIB = "# invented test plant\nblock P = 1/(s*(s+1)*(s+{b}))\n"
PLANT = """\
# invented test loop
model plant
use "common/plant.loop"
param K = {K}
input r
e = r - y
u = K*e
y = P(u)
break {name} at y
require {name} gain_margin >= 6dB
"""
STEADY = """\
# invented test loop with no phase crossover
model {model}
input r
e = r - y
y = [4/((s+1)*(s+2))](e)
break {name} at y
"""


def reference(K: float, b: float = 5.0) -> dict:
    """python-control `stability_margins` on L = K/(s(s+1)(s+b)), delay-free."""
    L = control.tf([K], [1.0, 1.0 + b, b, 0.0])
    gm, pm, _sm, _wpc, wgc, _wms = control.stability_margins(L)
    return {"gain_margin_up_db": 20 * math.log10(gm), "phase_margin_deg": pm,
            "crossover_freq": wgc, "delay_margin_s": math.radians(pm) / wgc}


def gm_analytic(K: float, b: float = 5.0) -> float:
    """Gain margin of K/(s(s+1)(s+b)) in dB: 20 log10(b (1+b) / K) (derived in the docstring)."""
    return 20 * math.log10(b * (1 + b) / K)


def write(root: Path, files: dict[str, str]) -> None:
    for rel, text in files.items():
        path = root / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text)


def model_set(K=10, b=5, plant_break="loop", steady_break="loop") -> dict[str, str]:
    return {"pyproject.toml": PYPROJECT,
            "models/common/plant.loop": PLANT_LIB.format(b=b),
            "models/plant.loop": PLANT.format(K=K, name=plant_break),
            "models/steady.loop": STEADY.format(model="steady", name=steady_break)}


@pytest.fixture
def repo(tmp_path, monkeypatch):
    """An empty git repository as the working folder; commits work on a clean machine."""
    for key, value in {"GIT_AUTHOR_NAME": "Test", "GIT_AUTHOR_EMAIL": "test@example.invalid",
                       "GIT_COMMITTER_NAME": "Test", "GIT_COMMITTER_EMAIL": "test@example.invalid",
                       "GIT_CONFIG_NOSYSTEM": "1", "GIT_CONFIG_GLOBAL": os.devnull}.items():
        monkeypatch.setenv(key, value)
    root = tmp_path / "repo"
    root.mkdir()
    monkeypatch.chdir(root)
    subprocess.run(["git", "init", "-q"], cwd=root, check=True)
    return root


def commit(root: Path, files: dict[str, str], message: str, remove=()) -> None:
    write(root, files)
    for rel in remove:
        (root / rel).unlink()
    subprocess.run(["git", "add", "-A", "."], cwd=root, check=True)
    subprocess.run(["git", "commit", "-q", "-m", message], cwd=root, check=True)


def run_json(capsys, *argv) -> tuple[int, dict, str]:
    code = main(["diff", *argv, "--format", "json"])
    out, err = capsys.readouterr()
    data = json.loads(out)
    jsonschema.validate(data, SCHEMA)
    return code, data, err


def by_metric(model: dict, break_name: str) -> dict:
    (brk,) = [b for b in model["breaks"] if b["name"] == break_name]
    return {m["metric"]: m for m in brk["margins"]}


def models(data: dict) -> dict:
    return {m["file"]: m for m in data["models"]}


def test_gain_doubled_between_revisions(repo, capsys):
    commit(repo, model_set(K=10), "K = 10")
    commit(repo, model_set(K=20), "K = 20")
    code, data, err = run_json(capsys, "--rev", "HEAD~1", "--rev", "HEAD")
    assert code == 1 and "Traceback" not in err
    plant = models(data)["models/plant.loop"]
    assert plant["status"] == "changed"
    m = by_metric(plant, "loop")
    before, after = reference(10), reference(20)
    # analytic gain margin 30/K (module docstring)
    assert m["gain_margin_up_db"]["before"] == pytest.approx(gm_analytic(10), abs=1e-3)
    assert m["gain_margin_up_db"]["after"] == pytest.approx(gm_analytic(20), abs=1e-3)
    assert m["gain_margin_up_db"]["delta"] == pytest.approx(-20 * math.log10(2), abs=1e-3)
    assert m["gain_margin_up_db"]["direction"] == "worse" and m["gain_margin_up_db"]["regression"]
    # python-control stability_margins: phase margin, crossover, delay margin
    for key in ("phase_margin_deg", "crossover_freq", "delay_margin_s"):
        assert m[key]["before"] == pytest.approx(before[key], rel=1e-3), key
        assert m[key]["after"] == pytest.approx(after[key], rel=1e-3), key
        assert m[key]["delta"] == pytest.approx(after[key] - before[key], rel=1e-3, abs=1e-6), key
    # the phase margin ends below 60 deg (the default relevance level): a regression; the
    # delay margin loses 76 % but nothing requires it and it has no relevance level: information
    assert "below 60 deg (common practice)" in m["phase_margin_deg"]["regression"]
    assert m["delay_margin_s"]["regression"] is None and m["delay_margin_s"]["direction"] == "worse"
    (req,) = plant["breaks"][0]["requirements"]
    assert (req["met_before"], req["met_after"], req["status"]) == (True, False, "stopped being met")
    assert models(data)["models/steady.loop"]["status"] == "unchanged"
    assert data["summary"]["exit_code"] == 1 and data["old"] == "HEAD~1" and data["new"] == "HEAD"


def test_working_tree_against_revision_in_text(repo, capsys):
    commit(repo, model_set(K=10), "K = 10")
    write(repo, model_set(K=20))  # not committed: the working tree is the new side
    code = main(["diff", "--rev", "HEAD"])
    out, err = capsys.readouterr()
    assert code == 1 and err == ""
    gm10, gm20 = gm_analytic(10), gm_analytic(20)  # analytic, see the module docstring
    line = rf"\n +gain margin up +{gm10:.2f} dB -> +{gm20:.2f} dB  \({gm20 - gm10:+.2f}, worse\)  REGRESSION"
    assert re.search(line, out), out
    assert "requirement gain_margin >= 6dB: met -> NOT MET" in out  # the limit as written
    assert "1 model unchanged" in out and "HEAD -> working tree" in out
    assert CAUTION in out


def test_unchanged_models_are_checked_once(repo, capsys, monkeypatch):
    from loopwise import analysis
    calls = []
    real = analysis.check_file

    def counting(path, settings=None, **options):
        calls.append(Path(path).name)
        return real(path, settings=settings, **options)
    monkeypatch.setattr(analysis, "check_file", counting)
    commit(repo, model_set(K=10), "K = 10")
    commit(repo, model_set(K=20), "K = 20")
    assert main(["diff", "--rev", "HEAD~1", "--rev", "HEAD"]) == 1
    # steady.loop (same text, same includes) once; plant.loop on both sides
    assert sorted(calls) == ["plant.loop", "plant.loop", "steady.loop"]


def test_changed_include_is_rechecked_from_its_revision(repo, capsys):
    commit(repo, model_set(K=10, b=5), "plant pole at 5")
    commit(repo, model_set(K=10, b=10), "plant pole at 10")  # only the included file changes
    code, data, _ = run_json(capsys, "--rev", "HEAD~1", "--rev", "HEAD")
    m = by_metric(models(data)["models/plant.loop"], "loop")
    # analytic: GM = b (1 + b) / K, 30/10 -> 110/10
    assert m["gain_margin_up_db"]["before"] == pytest.approx(gm_analytic(10, 5), abs=1e-3)
    assert m["gain_margin_up_db"]["after"] == pytest.approx(gm_analytic(10, 10), abs=1e-3)
    assert m["gain_margin_up_db"]["direction"] == "better"
    assert m["phase_margin_deg"]["after"] == pytest.approx(reference(10, 10)["phase_margin_deg"], rel=1e-3)
    assert code == 0


def test_paths_limit_the_revision_diff(repo, capsys):
    commit(repo, model_set(K=10), "K = 10")
    commit(repo, model_set(K=20, steady_break="renamed"), "K = 20, steady break renamed")
    code, data, _ = run_json(capsys, "--rev", "HEAD~1", "--rev", "HEAD", "models/steady.loop")
    assert [m["file"] for m in data["models"]] == ["models/steady.loop"]
    assert code == 0  # a renamed stable break is no regression


def test_folders_renamed_break_removed_and_added_models(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    write(tmp_path / "old", {**model_set(K=10), "models/gone.loop": STEADY.format(model="gone", name="g")})
    write(tmp_path / "new", {**model_set(K=10, steady_break="speed_loop"),
                             "models/added.loop": STEADY.format(model="added", name="a")})
    (tmp_path / "pyproject.toml").write_text(PYPROJECT)
    code, data, _ = run_json(capsys, "old", "new")
    status = {f: m["status"] for f, m in models(data).items()}
    assert status == {"models/added.loop": "added", "models/gone.loop": "removed",
                      "models/plant.loop": "unchanged", "models/steady.loop": "changed"}
    steady = models(data)["models/steady.loop"]
    assert {(b["name"], b["status"]) for b in steady["breaks"]} == {("loop", "removed"),
                                                                     ("speed_loop", "added")}
    assert code == 0
    assert main(["diff", "old", "new"]) == 0
    out = capsys.readouterr().out
    assert "- break loop (at y): removed" in out and "+ break speed_loop (at y): added, stable" in out
    assert "models/gone.loop: removed" in out and "1 model unchanged" in out


def test_parallel_checking_gives_the_same_report(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    write(tmp_path / "old", model_set(K=10))
    write(tmp_path / "new", model_set(K=20, steady_break="renamed"))
    (tmp_path / "pyproject.toml").write_text(PYPROJECT)
    serial = run_json(capsys, "old", "new")
    parallel = run_json(capsys, "old", "new", "--jobs", "2")
    assert serial == parallel and serial[0] == 1


def test_two_files_and_markdown_to_a_file(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    write(tmp_path, {"a/common/plant.loop": PLANT_LIB.format(b=5), "a/plant.loop": PLANT.format(K=10, name="loop"),
                     "b/common/plant.loop": PLANT_LIB.format(b=5), "b/plant.loop": PLANT.format(K=20, name="loop")})
    assert main(["diff", "a/plant.loop", "b/plant.loop", "--format", "markdown", "-o", "out.md"]) == 1
    text = (tmp_path / "out.md").read_text()
    gm10, gm20 = gm_analytic(10), gm_analytic(20)
    assert f"| `loop` | gain margin up | {gm10:.2f} dB | {gm20:.2f} dB | {gm20 - gm10:+.2f}, worse |" in text
    assert CAUTION in text and "regression" in text


INLINE = """\
# invented test loop
model {model}
input r
e = r - y
y = [{transfer}](e)
break loop at y
"""


def test_loop_that_becomes_unstable(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    write(tmp_path, {"a/m.loop": INLINE.format(model="m", transfer="10/(s*(s+1)*(s+5))"),
                     "b/m.loop": INLINE.format(model="m", transfer="40/(s*(s+1)*(s+5))")})
    code, data, _ = run_json(capsys, "a/m.loop", "b/m.loop")
    (brk,) = data["models"][0]["breaks"]
    # closed-loop poles: roots of s^3 + 6 s^2 + 5 s + K (numpy.roots), K = 40 > 30 is unstable
    z_after = int(sum(r.real > 0 for r in np.roots([1.0, 6.0, 5.0, 40.0])))
    assert z_after == 2
    assert brk["verdict"]["stable_before"] and not brk["verdict"]["stable_after"]
    assert (brk["verdict"]["closed_loop_rhp_poles_before"],
            brk["verdict"]["closed_loop_rhp_poles_after"]) == (0, z_after)
    assert brk["margins"] == [] and code == 1
    assert main(["diff", "a/m.loop", "b/m.loop"]) == 1
    assert "verdict stable -> UNSTABLE (Z 0 -> 2, worse)" in capsys.readouterr().out


def test_gain_margin_down_moving_towards_0_db(tmp_path, monkeypatch, capsys):
    # L = K/(s-1): the closed-loop pole is at 1 - K, stable for K > 1, so the gain may fall by
    # the factor 1/K: down margin -20 log10(K) dB (python-control stability_margins agrees: gm = 1/K)
    monkeypatch.chdir(tmp_path)
    write(tmp_path, {"a/m.loop": INLINE.format(model="m", transfer="4/(s-1)"),
                     "b/m.loop": INLINE.format(model="m", transfer="2/(s-1)")})
    code, data, _ = run_json(capsys, "a/m.loop", "b/m.loop")
    m = by_metric(data["models"][0], "loop")
    gm4 = control.stability_margins(control.tf([4.0], [1.0, -1.0]))[0]
    assert 20 * math.log10(gm4) == pytest.approx(-20 * math.log10(4))
    down = m["gain_margin_down_db"]
    assert down["before"] == pytest.approx(-20 * math.log10(4), abs=1e-3)
    assert down["after"] == pytest.approx(-20 * math.log10(2), abs=1e-3)
    assert down["direction"] == "worse" and down["regression"] and code == 1
    assert main(["diff", "b/m.loop", "a/m.loop", "--max-delay-loss", "50%"]) == 0  # down margin better
    capsys.readouterr()


def test_policy_comes_from_the_base_revision_and_options_win(repo, capsys):
    # K 10 -> 12 (python-control stability_margins): PM 25.4 -> 20.9 deg, GM 9.54 -> 7.96 dB,
    # delay margin 0.361 -> 0.267 s (-26 %): only the delay margin passes a default threshold,
    # and it matters because the base settings make delay margins below 1 s relevant
    ref10, ref12 = reference(10), reference(12)
    assert 0.2 < 1 - ref12["delay_margin_s"] / ref10["delay_margin_s"] < 0.5
    assert 4 < ref10["phase_margin_deg"] - ref12["phase_margin_deg"] < 5
    assert ref12["delay_margin_s"] < 1.0
    base = PYPROJECT + "[tool.loopwise.regression]\nrelevant_delay_margin_s = 1.0\n"
    relaxed = base + "delay_margin_loss_fraction = 0.5\n"
    models12 = {k: v for k, v in model_set(K=12).items() if k != "pyproject.toml"}
    commit(repo, {**model_set(K=10), "pyproject.toml": base}, "K = 10")
    write(repo, models12)
    assert main(["diff", "--rev", "HEAD"]) == 1
    # the change under review loosens its own gate: the working tree's settings are not used
    (repo / "pyproject.toml").write_text(relaxed)
    assert main(["diff", "--rev", "HEAD"]) == 1
    out = capsys.readouterr().out
    assert "settings: pyproject.toml at HEAD (the base revision; the other side's settings " \
           "are not used)" in out
    assert "delay margin loss > 20%" in out
    # named on purpose with --config, a file is used as it is
    assert main(["diff", "--rev", "HEAD", "--config", "pyproject.toml"]) == 0
    assert "settings: pyproject.toml (--config)" in capsys.readouterr().out
    # once the base revision holds the looser threshold, it is the gate
    commit(repo, {**model_set(K=10), "pyproject.toml": relaxed}, "looser delay threshold")
    write(repo, models12)
    assert main(["diff", "--rev", "HEAD"]) == 0
    assert main(["diff", "--rev", "HEAD", "--max-delay-loss", "20%"]) == 1
    assert main(["diff", "--rev", "HEAD", "--max-phase-loss", "4"]) == 1
    # two revisions: the first is the base
    commit(repo, {"pyproject.toml": PYPROJECT}, "K = 12, default thresholds again")
    assert main(["diff", "--rev", "HEAD~1", "--rev", "HEAD"]) == 0
    assert main(["diff", "--rev", "HEAD~2", "--rev", "HEAD"]) == 1
    capsys.readouterr()


def test_model_that_stops_parsing_is_unreadable_input(repo, capsys):
    commit(repo, model_set(K=10), "K = 10")
    write(repo, {"models/plant.loop": PLANT.format(K=10, name="loop").replace("y = P(u)", "y = P(u")})
    code = main(["diff", "--rev", "HEAD"])
    out, err = capsys.readouterr()
    assert code == 2
    assert "models/plant.loop: errors appeared" in out
    assert "models/plant.loop:8:" in out  # located at the broken line
    assert err.strip() == "loopwise: cannot read on the new side: models/plant.loop"
    assert "Traceback" not in out + err
    code, data, _ = run_json(capsys, "--rev", "HEAD")
    (error,) = models(data)["models/plant.loop"]["errors_after"]
    assert code == 2 and (error["file"], error["line"]) == ("models/plant.loop", 8)
    assert data["summary"]["errors_appeared"] == 1 and data["summary"]["exit_code"] == 2


def test_errors_that_disappear(repo, capsys):
    broken = model_set(K=10)
    broken["models/plant.loop"] = broken["models/plant.loop"].replace("y = P(u)", "y = P(u")
    commit(repo, broken, "broken")
    commit(repo, model_set(K=10), "fixed")
    code, data, err = run_json(capsys, "--rev", "HEAD~1", "--rev", "HEAD")
    plant = models(data)["models/plant.loop"]
    assert plant["status"] == "errors disappeared" and plant["errors_before"]
    assert plant["errors_before"][0]["file"] == "models/plant.loop"  # relative to the repository
    assert code == 0 and err == ""


def test_revision_that_does_not_exist(repo, capsys):
    commit(repo, model_set(K=10), "K = 10")
    code = main(["diff", "--rev", "no-such-branch"])
    out, err = capsys.readouterr()
    assert code == 2 and out == ""
    assert err.startswith(f"loopwise: revision 'no-such-branch' does not exist in {repo.resolve()}")
    assert err.count("\n") == 1 and "Traceback" not in err


def test_usage_mistakes_are_one_line(tmp_path, monkeypatch, capsys):
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("GIT_CEILING_DIRECTORIES", str(tmp_path.parent))  # surely not in a repository
    (tmp_path / "a.loop").write_text(STEADY.format(model="a", name="x"))
    for argv in (["diff", "a.loop"], ["diff", "a.loop", "missing.loop"], ["diff", "a.loop", "."],
                 ["diff", "--max-gain-loss", "-1", "a.loop", "a.loop"], ["diff", "--rev", "HEAD"],
                 ["diff", "--jobs", "x", "a.loop", "a.loop"]):
        assert main(argv) == 2, argv
        out, err = capsys.readouterr()
        assert out == "" and err.count("\n") == 1 and err.startswith("loopwise: "), (argv, err)


def test_installed_command_in_a_subprocess(repo):
    commit(repo, model_set(K=10), "K = 10")
    commit(repo, model_set(K=20), "K = 20")
    done = subprocess.run([sys.executable, "-m", "loopwise", "diff", "--rev", "HEAD~1", "--format", "markdown"],
                          cwd=repo, capture_output=True, text=True, timeout=120)
    assert done.returncode == 1, done.stderr
    assert "### loopwise diff: `HEAD~1` -> `working tree`" in done.stdout
    assert "requirement" in done.stdout and CAUTION in done.stdout
    assert done.stderr == ""


def _git_out(root: Path, *argv: str, stdin: str | None = None) -> str:
    return subprocess.run(["git", *argv], cwd=root, input=stdin, capture_output=True, text=True,
                          check=True).stdout.strip()


def _crafted_commit(root: Path, top_entries: str) -> str:
    """A commit whose top tree is `top_entries` (git mktree input lines)."""
    tree = _git_out(root, "mktree", stdin=top_entries)
    return _git_out(root, "commit-tree", tree, "-m", "crafted")


def test_a_tree_with_dot_dot_entries_is_refused_and_nothing_lands_outside(repo, tmp_path, capsys,
                                                                          monkeypatch):
    import tempfile

    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))  # where diff makes its folder
    commit(repo, model_set(K=10), "K = 10")
    blob = _git_out(repo, "hash-object", "-w", "--stdin", stdin="model pwned\n")
    escaped = _git_out(repo, "mktree", stdin=f"100644 blob {blob}\tPWNED.loop\n")
    inner = _git_out(repo, "mktree", stdin=f"040000 tree {escaped}\tescaped\n")
    # ../../escaped/PWNED.loop from <scratch>/loopwise-diff-*/side0 is <scratch>/escaped
    up_one = _git_out(repo, "mktree", stdin=f"040000 tree {inner}\t..\n")
    evil = _crafted_commit(repo, f"040000 tree {up_one}\t..\n100644 blob {blob}\tok.loop\n")
    assert "../../escaped/PWNED.loop" in _git_out(repo, "ls-tree", "-r", "--name-only", evil)
    for argv in (["--rev", evil], ["--rev", "HEAD", "--rev", evil]):
        code = main(["diff", *argv])
        out, err = capsys.readouterr()
        assert code == 2 and out == "", err
        assert err.startswith(f"loopwise: revision {evil[:12]} holds an unsafe path "
                              "'../../escaped/PWNED.loop'") and err.count("\n") == 1, err
    assert sorted(p.name for p in scratch.rglob("*")) == []  # nothing written, temp folder gone
    assert not (tmp_path / "escaped").exists() and not (repo.parent / "escaped").exists()


@pytest.mark.parametrize("name", [".", ".git", ".GIT"])
def test_a_tree_with_dot_or_git_entries_is_refused(repo, capsys, name):
    commit(repo, model_set(K=10), "K = 10")
    blob = _git_out(repo, "hash-object", "-w", "--stdin", stdin="model pwned\n")
    inner = _git_out(repo, "mktree", stdin=f"100644 blob {blob}\tx.loop\n")
    evil = _crafted_commit(repo, f"040000 tree {inner}\t{name}\n")
    assert main(["diff", "--rev", evil]) == 2
    assert "unsafe path" in capsys.readouterr().err


def test_safe_paths_and_targets(tmp_path):
    from loopwise.errors import UsageError
    from loopwise.revisions import _target, safe_relative

    for good in ("a.loop", "models/common/plant.loop", "a..b/c.loop", "..x.loop", "a\\..\\x.loop"):
        assert safe_relative(good), good
    for bad in ("", "/etc/x.loop", "../x.loop", "a/../../x.loop", "a/./x.loop", "a//x.loop",
                "a/", ".git/config", "a\0b.loop", "."):
        assert not safe_relative(bad), bad
    with pytest.raises(UsageError):
        _target(tmp_path, "../etc/passwd")
    # a path that is safe as text but would pass through a link out of the folder
    (tmp_path / "into").mkdir()
    (tmp_path / "outside").mkdir()
    (tmp_path / "into" / "link").symlink_to(tmp_path / "outside")
    with pytest.raises(UsageError, match="outside"):
        _target(tmp_path / "into", "link/x.loop")
    assert _target(tmp_path / "into", "a/x.loop") == tmp_path / "into" / "a" / "x.loop"
    # the refusal quotes the path through the one sanitiser: a control character or a
    # byte that was not UTF-8 cannot reach the terminal
    with pytest.raises(UsageError) as info:
        _target(tmp_path, "../\x1b[2Jx\udcff.loop")
    assert "'../?[2Jx\ufffd.loop'" in str(info.value) and "\x1b" not in str(info.value)


def test_an_included_file_with_another_suffix_comes_out_of_the_revision(repo, capsys):
    # the language takes any file name after `use`; a revision must hold its own copy
    def files(b):
        plant = PLANT.replace('use "common/plant.loop"', 'use "common/plant.inc"')
        return {"models/common/plant.inc": PLANT_LIB.format(b=b),
                "models/plant.loop": plant.format(K=10, name="loop")}
    commit(repo, files(5), "plant pole at 5")
    commit(repo, files(10), "plant pole at 10")
    code, data, err = run_json(capsys, "--rev", "HEAD~1", "--rev", "HEAD")
    m = by_metric(models(data)["models/plant.loop"], "loop")
    # analytic: GM = b (1 + b) / K (module docstring)
    assert m["gain_margin_up_db"]["before"] == pytest.approx(gm_analytic(10, 5), abs=1e-3)
    assert m["gain_margin_up_db"]["after"] == pytest.approx(gm_analytic(10, 10), abs=1e-3)
    assert code == 0, err
