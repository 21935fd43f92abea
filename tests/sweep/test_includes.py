"""A sweep reads a model and its includes exactly as `check` does (the bounded reader,
the include root, links followed, files of another kind unshown), once; its plants are
then resolved from the kept trees, without the disk.

Every case is a crafted tree in tmp_path; a `.git` folder marks the repository.
"""
from __future__ import annotations

import dataclasses
import json
import math
import os
from pathlib import Path

import pytest

from loopwise.cli import main
from loopwise.errors import ModelErrors
from loopwise.language import ast
from loopwise.language import includes as includes_module, resolve as resolve_module
from loopwise.language.resolve import resolve_parsed
from tests.scenarios import outside_git
from loopwise.settings import Settings
from loopwise.sweep.driver import prepare_sweep
from loopwise.sweep.evaluate import evaluate_points

LOOP = "input r\ne = r - y\ny = C(e)\nbreak b at y\n"  # needs a block C from an include
SECRET = "API_TOKEN=hunter2-do-not-print"
SWEEP = ("--samples", "4", "--jobs", "1")


def repo(tmp_path: Path) -> Path:
    """A repository (a `.git` folder) with models/common in it, and a library outside it."""
    root = tmp_path / "repo"
    (root / "models" / "common").mkdir(parents=True)
    (root / ".git").mkdir()
    (tmp_path / "outside").mkdir()
    (tmp_path / "outside" / "lib.loop").write_text(f"# {SECRET}\nparam k = 1 in [0.5, 2]\nblock C = k/(s+1)\n")
    return root


def run(capsys, *argv) -> tuple[int, str]:
    code = main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out + captured.err


# --- the first reading: the same refusals as `check` -------------------------------------------

@pytest.mark.parametrize("case", ["outside", "link", "model_link"])
def test_a_sweep_refuses_what_check_refuses_with_the_same_errors(tmp_path, capsys, case):
    root = repo(tmp_path)
    m = root / "models" / "m.loop"
    if case == "outside":     # `use` of a file outside the repository: LW207
        m.write_text('use "../../outside/lib.loop"\n' + LOOP)
    elif case == "link":      # a `.loop` link inside that leads out: LW207
        os.symlink(tmp_path / "outside" / "lib.loop", root / "models" / "common" / "lib.loop")
        m.write_text('use "common/lib.loop"\n' + LOOP)
    else:                     # the model itself a link out of the repository: LW001, not read
        os.symlink(tmp_path / "outside" / "lib.loop", m)
    code, checked = run(capsys, "check", str(m), "--format", "json")
    assert code == 2
    code, swept = run(capsys, "sweep", str(m), "--format", "json", *SWEEP)
    assert code == 2
    errors = json.loads(swept)["errors"]
    assert errors == json.loads(checked)["errors"]  # the same located errors, word for word
    assert errors[0]["code"] == {"outside": "LW207", "link": "LW207", "model_link": "LW001"}[case]
    assert "outside the repository" in errors[0]["message"]
    for fmt in ("text", "junit", "markdown"):
        code, out = run(capsys, "sweep", str(m), "--format", fmt, *SWEEP)
        assert code == 2 and errors[0]["code"] in out and "hunter2" not in out, fmt


def test_a_sweep_refuses_a_model_that_is_not_utf8_at_the_byte_as_check_does(tmp_path, capsys):
    # the sweep's own reader decoded with errors="replace": a Latin-1 byte was swept as U+FFFD
    root = repo(tmp_path)
    m = root / "models" / "m.loop"
    m.write_bytes(b"# gr\xfcn\nparam k = 2 in [1, 3]\ninput r\ne = r - y\ny = [k/(s+1)](e)\nbreak b at y\n")
    code, checked = run(capsys, "check", str(m), "--format", "json")
    code_swept, swept = run(capsys, "sweep", str(m), "--format", "json", *SWEEP)
    assert code == code_swept == 2
    (err,) = json.loads(swept)["errors"]
    assert (err["code"], err["line"], err["col"]) == ("LW104", 1, 5)
    assert json.loads(checked)["errors"] == [err]


def test_outside_git_a_sweep_uses_the_checked_folder_as_check_does(tmp_path, capsys):
    top = outside_git(tmp_path)
    (top / "lib" / "ctl.loop").write_text("param k = 2 in [1, 3]\nblock C = k/(s+1)\n")
    m = top / "models" / "m.loop"
    m.write_text('use "../lib/ctl.loop"\n' + LOOP)
    # alone, the model's own folder bounds its includes
    code, out = run(capsys, "sweep", str(m), *SWEEP)
    assert code == 2 and "LW207 included file ../lib/ctl.loop lies outside the repository" in out
    # the folder that holds both: inside (the library itself is swept too, as check lists it)
    code, out = run(capsys, "sweep", str(top), "--format", "json", *SWEEP)
    assert code == 0, out
    doc = json.loads(out)
    assert not doc["errors"] and "models/m.loop" in {Path(x["file"]).relative_to(top).as_posix()
                                                      for x in doc["models"]}


# --- the plants: from the kept trees, never the disk ----------------------------------------------

def diamond(tmp_path: Path) -> Path:
    """m uses a and b, both use base (a diamond); L = C*P = 2/(J*s + 1), J ranged."""
    root = repo(tmp_path)
    lib = root / "models" / "common"
    (lib / "base.loop").write_text("param J = 2 in [1, 4]\n")
    (lib / "a.loop").write_text('use "base.loop"\nblock P = 1/(J*s + 1)\n')
    (lib / "b.loop").write_text('use "base.loop"\nblock C = 2\n')
    m = root / "models" / "m.loop"
    m.write_text('use "common/a.loop"\nuse "common/b.loop"\ninput r\ne = r - y\ny = P(C(e))\nbreak b at y\n')
    return m


def uses(tree: ast.ModelFile) -> list[ast.UseStmt]:
    return [st for st in tree.statements if isinstance(st, ast.UseStmt)]


def no_disk(monkeypatch):
    """Reading, parsing or locating a file from here on fails the test."""
    def refuse(*args, **kwargs):
        raise AssertionError("a plant's resolution went to the disk or the parser")
    for module in (resolve_module, includes_module):
        monkeypatch.setattr(module, "read_source", refuse)
        monkeypatch.setattr(module, "parse_text", refuse)
    monkeypatch.setattr(Path, "resolve", refuse)


def test_a_sweeps_plants_resolve_from_the_kept_trees_without_the_disk(tmp_path, monkeypatch):
    m = diamond(tmp_path)
    parsed, model, nominal = prepare_sweep(str(m), Settings())
    assert model.ranges == {"J": (1.0, 4.0)} and nominal.stable
    # every `use` is kept, the diamond's second way to base.loop too (it was not read twice)
    trees = [parsed.tree, *(tree for _, tree in parsed.sources.values())]
    assert set(parsed.sources) == {st for tree in trees for st in uses(tree)}
    assert len(parsed.sources) == 4 and len({real for real, _ in parsed.sources.values()}) == 3
    (tmp_path / "repo").rename(tmp_path / "gone")  # the files are no longer there
    no_disk(monkeypatch)
    outcomes = evaluate_points(parsed, ["J"], [[1.0], [4.0]])
    for J, outcome in zip((1.0, 4.0), outcomes):
        assert outcome.error is None and outcome.stable
        (b,) = outcome.breaks
        # |2/(j w J + 1)| = 1 at w = sqrt(3)/J; PM = 180 deg - atan(sqrt(3)) = 120 deg (by hand)
        assert b.value("crossover") == pytest.approx(math.sqrt(3.0) / J, rel=1e-9)
        assert b.value("phase_margin") == pytest.approx(120.0, rel=1e-9)
    plant = resolve_parsed(parsed, {"J": 3.0})
    assert plant.params["J"].value == 3.0 and set(plant.sources) == set(parsed.sources)


def test_without_the_kept_trees_a_plant_would_need_the_deleted_file(tmp_path):
    # the counter-check of the test above: the parsed model alone reads the includes again
    m = diamond(tmp_path)
    parsed, _, _ = prepare_sweep(str(m), Settings())
    bare = resolve_module.Parsed(parsed.file, parsed.path, parsed.tree, parsed.extra, root=parsed.root)
    (m.parent / "common" / "base.loop").unlink()
    with pytest.raises(ModelErrors) as info:
        resolve_parsed(bare, {"J": 3.0})
    assert [e.code for e in info.value.errors][:1] == ["LW206"]
    assert resolve_parsed(parsed, {"J": 3.0}).params["J"].value == 3.0


def test_the_kept_tree_of_a_file_of_another_kind_still_never_shows_its_lines(tmp_path, monkeypatch):
    root = repo(tmp_path)
    (root / "models" / "common" / "plant.inc").write_text(
        f"# {SECRET}\nparam a = 1 in [0, 2]\nblock C = 1/(s + 1)/a\n")
    m = root / "models" / "m.loop"
    m.write_text('use "common/plant.inc"\n' + LOOP)
    parsed, _, nominal = prepare_sweep(str(m), Settings())
    assert nominal.stable
    no_disk(monkeypatch)
    # at a = 0 the block divides by zero in plant.inc: one LW208 at the `use`, as on a first reading
    with pytest.raises(ModelErrors) as info:
        resolve_parsed(parsed, {"a": 0.0})
    err = info.value.errors[0]  # (then LW228: block `C` could not be evaluated, at its use)
    assert (err.code, err.span.file, err.span.line) == ("LW208", str(m), 1)
    assert err.message == ("included file common/plant.inc has 1 error, not shown: only `.loop` files "
                           "have their lines shown")
    assert {e.span.file for e in info.value.errors} == {str(m)}
    (outcome,) = evaluate_points(parsed, ["a"], [[0.0]])
    assert outcome.error == (err.code, err.message)


def test_a_kept_tree_is_still_held_to_the_include_root(tmp_path, monkeypatch):
    # the root check is a comparison of paths: it costs no disk, so kept trees get it too
    m = diamond(tmp_path)
    parsed, _, _ = prepare_sweep(str(m), Settings())
    narrowed = dataclasses.replace(parsed, root=m.parent.resolve() / "elsewhere")
    no_disk(monkeypatch)
    with pytest.raises(ModelErrors) as info:
        resolve_parsed(narrowed, {"J": 3.0})
    assert [e.code for e in info.value.errors][:2] == ["LW207", "LW207"]  # both `use`s of m.loop


def test_report_sweep_reads_the_includes_as_check_does_for_its_band_too(tmp_path, capsys):
    # outside git the report's sweep (and the band of plants drawn from it) uses the
    # checked folder as the include root, as the report's check does
    top = outside_git(tmp_path)
    # a library found in the folder too: the models found span plain/ (see docs/language.md)
    (top / "lib" / "ctl.loop").write_text("param k = 2 in [1, 3]\nblock C = k/(s+1)\n")
    (top / "models" / "m.loop").write_text('use "../lib/ctl.loop"\n' + LOOP)
    out = tmp_path / "report.html"
    code, said = run(capsys, "report", str(top), "--sweep", "--samples", "4", "--output", str(out),
                     "--no-progress")
    assert code == 0, said
    page = out.read_text()
    assert "LW207" not in page and "sweep over the box: STABLE at every sampled plant" in page
