"""`use`: includes stay inside the repository, name `.loop` regular files, are read once
per model, and are shown by paths relative to the model as it was named.

Every case is a crafted tree in tmp_path: a `.git` folder marks the repository where
the case needs one. Cases that hung before (a FIFO, /dev/zero, an include bomb) run in
a subprocess with a hard timeout.
"""
from __future__ import annotations

import math

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from loopwise.analysis import check_file
from loopwise.cli import main
from loopwise.errors import ModelError, ModelErrors, render
from loopwise.language.source import repository_root
from tests.scenarios import outside_git

LOOP = "input r\ne = r - y\ny = C(e)\nbreak b at y\n"  # needs a block C from an include
SECRET = "API_TOKEN=hunter2-do-not-print"


def errors(path, **options) -> list[ModelError]:
    with pytest.raises((ModelError, ModelErrors)) as info:
        check_file(path, **options)
    exc = info.value
    return list(exc.errors) if isinstance(exc, ModelErrors) else [exc]


def repo(tmp_path: Path) -> Path:
    """A repository (a `.git` folder) with models/ in it, and a folder outside it."""
    root = tmp_path / "repo"
    (root / "models" / "common").mkdir(parents=True)
    (root / ".git").mkdir()
    (tmp_path / "outside").mkdir()
    (tmp_path / "outside" / ".env").write_text(SECRET + "\n")
    (tmp_path / "outside" / "lib.loop").write_text(f"# {SECRET}\nparam k = 1\nblock C = k/(s+1)\n")
    return root


def model(root: Path, use: str, name: str = "m.loop") -> Path:
    path = root / "models" / name
    path.write_text(f'use "{use}"\n' + LOOP)
    return path


def every_format(capsys, path: Path) -> str:
    """What `loopwise check` prints for the model in every format (exit code 2 each time)."""
    out = []
    for fmt in ("text", "json", "junit", "markdown"):
        assert main(["check", str(path), "--format", fmt]) == 2, fmt
        captured = capsys.readouterr()
        out.append(captured.out + captured.err)
    return "\n".join(out)


# --- the repository boundary ----------------------------------------------------------------

@pytest.mark.parametrize("use", ["../../outside/.env", "../../outside/lib.loop"])
def test_include_outside_the_repository_is_refused_and_not_shown(tmp_path, capsys, use):
    # regression: `use "../outside/.env"` printed every line of the file as errors
    root = repo(tmp_path)
    m = model(root, use)
    (err,) = [e for e in errors(m) if e.span.line == 1]
    assert err.code == "LW207"
    assert err.message == f"included file {use} lies outside the repository"
    assert err.span.file == str(m)
    out = every_format(capsys, m)
    assert "hunter2" not in out and "LW207" in out


def test_absolute_include_of_a_system_file_is_refused(tmp_path, capsys):
    root = repo(tmp_path)
    m = model(root, "/etc/passwd")
    (err,) = [e for e in errors(m) if e.span.line == 1]
    assert err.code == "LW207" and "/etc/passwd" in err.message
    assert "root:" not in every_format(capsys, m)


def test_loop_link_that_leads_outside_is_refused(tmp_path, capsys):
    root = repo(tmp_path)
    os.symlink(tmp_path / "outside" / "lib.loop", root / "models" / "common" / "lib.loop")
    m = model(root, "common/lib.loop")
    (err,) = [e for e in errors(m) if e.span.line == 1]
    assert err.code == "LW207" and "outside the repository" in err.message
    assert "hunter2" not in every_format(capsys, m)


def test_loop_link_to_a_file_of_another_kind_never_shows_its_lines(tmp_path, capsys):
    root = repo(tmp_path)
    (root / ".env").write_text(SECRET + "\n")
    os.symlink(root / ".env", root / "models" / "env.loop")
    m = model(root, "env.loop")
    (err,) = [e for e in errors(m) if e.span.line == 1]
    # `API_TOKEN=hunter2-...` reads as an equation: refused in an included file (LW204),
    # reported without its text
    assert (err.code, err.span.file, err.span.col) == ("LW208", str(m), 5)
    assert err.message == ("included file env.loop has 1 error, not shown: only `.loop` files have "
                           "their lines shown")
    assert "hunter2" not in every_format(capsys, m)


def test_include_of_a_file_of_another_kind_never_shows_its_lines(tmp_path, capsys):
    root = repo(tmp_path)
    (root / "notes.txt").write_text(f"{SECRET}\nparam = 3\n")
    m = model(root, "../notes.txt")
    (err,) = [e for e in errors(m) if e.span.line == 1]
    assert err.code == "LW208" and err.message.startswith("included file ../notes.txt has 1 error, not shown")
    assert "hunter2" not in every_format(capsys, m)


def test_a_library_of_another_kind_is_read_and_its_warnings_point_at_the_use(tmp_path):
    root = repo(tmp_path)
    lib = root / "models" / "common"
    (lib / "plant.inc").write_text('use "more.loop"\nparam k = 2\nblock C = k/(s+1)\nblock Spare = 1/(s+3)\n')
    (lib / "more.loop").write_text("block Also = 1/(s+4)\n")
    m = model(root, "common/plant.inc")
    result = check_file(m)
    assert result.stable
    unused = sorted((f.message, f.span.file, f.span.line) for f in result.findings if f.code == "LW282")
    # both unused blocks: the one in plant.inc, and the one in the file it uses
    assert unused == [("block `Also` is never used", str(m), 1), ("block `Spare` is never used", str(m), 1)]


def test_model_that_is_a_link_out_of_the_repository_is_not_read(tmp_path, capsys):
    root = repo(tmp_path)
    (tmp_path / "outside" / "secret.loop").write_text(f"{SECRET}\n")
    os.symlink(tmp_path / "outside" / "secret.loop", root / "models" / "link.loop")
    (err,) = errors(root / "models" / "link.loop")
    assert err.code == "LW001" and "outside the repository" in err.message
    assert "hunter2" not in every_format(capsys, root / "models" / "link.loop")


def test_inside_git_an_include_may_reach_anywhere_in_the_work_tree(tmp_path):
    root = repo(tmp_path)
    (root / "lib").mkdir()
    (root / "lib" / "ctl.loop").write_text("param k = 2\nblock C = k/(s+1)\n")
    m = model(root, "../lib/ctl.loop")
    result = check_file(m)
    assert result.stable and result.breaks[0].name == "b"


def test_outside_git_the_checked_folder_bounds_includes(tmp_path, capsys):
    top = outside_git(tmp_path)
    (top / "lib" / "ctl.loop").write_text("param k = 2\nblock C = k/(s+1)\n")
    m = top / "models" / "m.loop"
    m.write_text('use "../lib/ctl.loop"\n' + LOOP)
    # alone, the model's own folder is the boundary
    (err,) = [e for e in errors(m) if e.span.line == 1]
    assert err.code == "LW207"
    # with the checked folder as root (what the command line passes), it is inside
    assert check_file(m, root=top).stable
    assert main(["check", str(top), "--format", "json"]) == 0
    capsys.readouterr()
    assert main(["check", str(top / "models")]) == 2  # the checked folder is models/ alone


# --- files that are not regular, links that loop ------------------------------------------------

def run_check(path: Path, timeout: float = 60) -> subprocess.CompletedProcess:
    """`loopwise check` in a fresh interpreter; a hang fails at the timeout."""
    return subprocess.run([sys.executable, "-m", "loopwise", "check", str(path)], capture_output=True,
                          text=True, timeout=timeout)


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_use_of_a_fifo_is_a_located_error(tmp_path):
    # regression: blocked forever
    root = repo(tmp_path)
    os.mkfifo(root / "models" / "common" / "pipe.loop")
    m = model(root, "common/pipe.loop")
    proc = run_check(m)
    assert proc.returncode == 2, proc.stderr
    assert "m.loop:1:5: error LW206 cannot read included file common/pipe.loop: is not a regular file" \
        in proc.stdout, proc.stdout


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_use_of_dev_zero_is_refused_at_once(tmp_path):
    # regression: read without limit (an internal error under a memory cap)
    root = repo(tmp_path)
    m = model(root, "/dev/zero")
    proc = run_check(m)
    assert proc.returncode == 2 and "error LW207 included file /dev/zero lies outside" in proc.stdout, \
        proc.stdout + proc.stderr


def test_use_of_a_symlink_loop_is_a_located_error(tmp_path):
    root = repo(tmp_path)
    os.symlink("b.loop", root / "models" / "a.loop")
    os.symlink("a.loop", root / "models" / "b.loop")
    m = model(root, "a.loop")
    (err,) = [e for e in errors(m) if e.span.line == 1]
    assert err.code == "LW206" and err.message == "cannot read included file a.loop: a loop of symbolic links"


# --- read once per model -------------------------------------------------------------------------

BOMB_COUNT = """
import sys
from loopwise.language import includes, resolve
calls = []
real = resolve.parse_text
def counting(text, file="<text>", *rest):
    calls.append(file)
    return real(text, file, *rest)
resolve.parse_text = counting   # the model itself (and settings requirements)
includes.parse_text = counting  # every included file
model = resolve.resolve_file(sys.argv[1])
print(len(calls), len(set(calls)), len(model.params))
"""


def test_include_bomb_parses_each_file_once(tmp_path):
    # regression: 26 files that each use the next twice made 2^25 parses
    root = repo(tmp_path)
    lib = root / "models" / "common"
    for i in range(26):
        uses = f'use "f{i + 1}.loop"\n' * 2 if i < 25 else ""
        (lib / f"f{i}.loop").write_text(uses + f"param p{i} = {i}\n")
    m = root / "models" / "m.loop"
    m.write_text('use "common/f0.loop"\ninput r\ne = r - y\ny = [1/(s+1)](e)\nbreak b at y\n')
    proc = subprocess.run([sys.executable, "-c", BOMB_COUNT, str(m)], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0, proc.stderr
    # the model's own text is parsed by resolve_file's caller path too: 1 + 26 files
    assert proc.stdout.split() == ["27", "27", "26"]


def test_a_library_reached_twice_is_included_once(tmp_path):
    # regression: the same library through two paths was LW202 at the same place twice
    root = repo(tmp_path)
    lib = root / "models" / "common"
    (lib / "base.loop").write_text("param k = 2\n")
    (lib / "a.loop").write_text('use "base.loop"\nblock C = k/(s+1)\n')
    (lib / "b.loop").write_text('use "base.loop"\nblock D = k/(s+2)\n')
    m = root / "models" / "m.loop"
    m.write_text('use "common/a.loop"\nuse "common/b.loop"\nuse "./common/../common/a.loop"\n'
                 "input r\ne = r - y\ny = C(D(e))\nbreak b at y\n")
    result = check_file(m)
    assert result.stable
    assert not [f for f in result.findings if f.code == "LW202"]


def test_two_files_that_define_one_name_still_conflict(tmp_path):
    root = repo(tmp_path)
    lib = root / "models" / "common"
    (lib / "a.loop").write_text("param k = 2\nblock C = k/(s+1)\n")
    (lib / "b.loop").write_text("param k = 3\n")
    m = root / "models" / "m.loop"
    m.write_text('use "common/a.loop"\nuse "common/b.loop"\n' + LOOP)
    (err,) = [e for e in errors(m) if e.code == "LW202"]
    # both places are named: the second definition is located, the first is in the message
    assert err.span.file.endswith("common/b.loop") and err.span.line == 1
    assert "common/a.loop:1:7" in err.message


def test_include_cycle_is_named(tmp_path):
    root = repo(tmp_path)
    lib = root / "models" / "common"
    (lib / "a.loop").write_text('use "b.loop"\nparam ka = 1\n')
    (lib / "b.loop").write_text('use "a.loop"\nparam kb = 1\n')
    m = model(root, "common/a.loop")
    (err,) = [e for e in errors(m) if e.code == "LW205"]
    assert err.message == "include cycle: a.loop -> b.loop -> a.loop"
    assert err.span.file.endswith("common/b.loop") and err.span.line == 1


# --- how included files are named in errors and findings -------------------------------------

def test_included_files_are_named_relative_to_the_model_as_given(tmp_path, monkeypatch):
    # regression: errors and warnings from included files carried absolute paths
    root = repo(tmp_path)
    lib = root / "models" / "common"
    (lib / "ctl.loop").write_text("param k = 2\nblock C = k/(s+1)\nblock Unused = 1/(s+3)\n")
    (lib / "bad.loop").write_text("param k = 2\nblock C = k/(0.5 s + 1)\n")
    model(root, "common/ctl.loop", "good.loop")
    model(root, "common/bad.loop", "bad.loop")
    monkeypatch.chdir(root)
    result = check_file("models/good.loop")
    (unused,) = [f for f in result.findings if f.code == "LW282"]
    assert unused.span.file == os.path.join("models", "common", "ctl.loop")
    err = errors("models/bad.loop")[0]
    assert (err.code, err.span.file, err.span.line) == ("LW102", os.path.join("models", "common", "bad.loop"), 2)
    text = render(err.as_finding())
    assert text.splitlines()[1] == "    block C = k/(0.5 s + 1)"  # the shown name opens the file


def test_errors_in_a_file_reached_through_one_of_another_kind_are_not_shown(tmp_path, capsys):
    root = repo(tmp_path)
    lib = root / "models" / "common"
    (lib / "plant.inc").write_text('use "deep.txt"\nparam k = 2\nblock C = k/(s+1)\n')
    (lib / "deep.txt").write_text(f"param x = {SECRET.split('=')[1].replace('-', '_')}\n")
    m = model(root, "common/plant.inc")
    (err,) = [e for e in errors(m) if e.span.line == 1]
    assert (err.code, err.span.file) == ("LW208", str(m))
    assert err.message.startswith("included file common/plant.inc uses ") and \
        err.message.endswith("deep.txt, which has 1 error, not shown: only `.loop` files have their lines shown")
    assert "hunter2" not in every_format(capsys, m)


def test_each_side_of_a_folder_diff_keeps_its_own_include_root(tmp_path, capsys):
    # outside git, a side's includes may reach anywhere in that side's folder (and no further)
    if repository_root(tmp_path) is not None:
        pytest.skip("the temporary folder lies inside a git work tree")
    for side, k in (("old", 2), ("new", 3)):
        (tmp_path / side / "models").mkdir(parents=True)
        (tmp_path / side / "lib").mkdir()
        (tmp_path / side / "lib" / "ctl.loop").write_text(f"param k = {k}\nblock C = k/(s+1)\n")
        (tmp_path / side / "models" / "m.loop").write_text('use "../lib/ctl.loop"\n' + LOOP)
    code = main(["diff", str(tmp_path / "old"), str(tmp_path / "new"), "--format", "json"])
    out = capsys.readouterr().out
    import json
    data = json.loads(out)
    assert "LW207" not in out
    # L = k/(s+1): |L| = 1 at w = sqrt(k^2 - 1), PM = 180 - atan(w) deg (by hand); k 2 -> 3 loses
    # 10.5 deg of phase margin: both sides were read through their own ../lib. (Information, not
    # a regression: 109 deg is far above the relevance level and no requirement is near, exit 0.)
    assert code == 0
    m = next(x for x in data["models"] if x["file"] == "models/m.loop")
    assert m["status"] == "changed"
    pm = next(x for x in m["breaks"][0]["margins"] if x["metric"] == "phase_margin_deg")
    assert pm["before"] == pytest.approx(180 - math.degrees(math.atan(math.sqrt(3))), rel=1e-9)
    assert pm["after"] == pytest.approx(180 - math.degrees(math.atan(math.sqrt(8))), rel=1e-9)


@pytest.mark.parametrize("command", [["check"], ["sweep"], ["report", "--output", "{out}"]])
def test_outside_git_the_root_is_the_folder_named_on_the_command_line(tmp_path, capsys, command):
    """`loopwise check plain/` with plain/models/m.loop using ../lib/ctl.inc: the library lies
    in the folder tree of the path named, though no model was found next to it (it is not a
    .loop file), so it is inside the root: the models found are not the paths checked."""
    if repository_root(tmp_path) is not None:
        pytest.skip("the temporary folder lies inside a git work tree")
    plain = tmp_path / "plain"
    (plain / "models").mkdir(parents=True)
    (plain / "lib").mkdir()
    (plain / "lib" / "ctl.inc").write_text("param k = 2\nblock C = k/(s+1)\n")
    (plain / "models" / "m.loop").write_text('use "../lib/ctl.inc"\n' + LOOP)
    argv = [a.format(out=tmp_path / "r.html") for a in command]
    assert main([argv[0], str(plain), *argv[1:]]) == 0
    assert "LW207" not in capsys.readouterr().out
