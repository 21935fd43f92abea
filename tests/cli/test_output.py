"""The one output writer (`loopwise.output`) through every command that writes:
never over an input, atomic, streams and links kept, any file name.
"""
from __future__ import annotations

import json
import os
import resource
import stat
import subprocess
import sys
import threading
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from .conftest import GOOD, write

LIB = "# invented shared plant\nblock G = 10/((s+1)*(s+2))\n"
USES_LIB = """\
# invented test loop that takes its plant from a shared file
model m
use "lib/plant.loop"
input r
e = r - y
y = G(e)
break b at y
"""


@pytest.fixture
def project(tmp_path) -> Path:
    """m.loop using lib/plant.loop, a settings file, and a second model for diff."""
    write(tmp_path, "m.loop", USES_LIB)
    write(tmp_path, "lib/plant.loop", LIB)
    write(tmp_path, "other.loop", GOOD)
    write(tmp_path, "pyproject.toml", "[tool.loopwise]\nrequirements = []\n")
    return tmp_path


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file() and not p.is_symlink()}


# --- never over an input -------------------------------------------------------------------

@pytest.mark.parametrize("argv, what", [
    (["check", "m.loop", "--format", "json", "--output", "m.loop"], "it is an input model"),
    (["check", "m.loop", "other.loop", "-o", "lib/plant.loop"], "it is a file included by m.loop"),
    (["check", ".", "--output", "lib/plant.loop"], "it is an input model"),  # a library, found
    (["check", "m.loop", "--format", "junit", "-o", "pyproject.toml"], "it is the settings file"),
    (["check", "m.loop", "--format", "markdown", "-o", "alias.md"], "it is an input model"),
    (["graph", "m.loop", "--output", "m.loop"], "it is an input model"),
    (["graph", "m.loop", "--dot", "-o", "lib/plant.loop"], "it is a file included by m.loop"),
    (["diff", "other.loop", "m.loop", "--output", "m.loop"], "it is an input model"),
    (["diff", "other.loop", "m.loop", "-o", "lib/plant.loop"], "it is a file included by"),
    (["plot", "m.loop", "--output", "figure.svg"], "it is a file included by m.loop"),
    (["report", "m.loop", "--output", "page.html"], "it is an input model"),
    (["sweep", "m.loop", "--samples", "4", "--format", "json", "--output", "m.loop"], "it is an input model"),
    (["sweep", "m.loop", "--samples", "4", "-o", "lib/plant.loop"], "it is a file included by m.loop"),
    (["sweep", "m.loop", "--samples", "4", "--format", "junit", "-o", "pyproject.toml"], "it is the settings file"),
])
def test_an_output_over_an_input_is_refused_and_nothing_changes(project, cli, argv, what):
    # links: the refusal goes by file identity, not by name
    (project / "alias.md").symlink_to("m.loop")
    (project / "figure.svg").symlink_to("lib/plant.loop")
    os.link(project / "m.loop", project / "page.html")
    before = _snapshot(project)
    code, out, err = cli(*argv)
    assert code == 2, (out, err)
    assert what in err and err.startswith("loopwise: refusing to write to "), err
    assert err.count("\n") == 1 and out == ""
    assert _snapshot(project) == before


def test_diff_of_revisions_never_writes_over_a_working_tree_model(project, cli, monkeypatch):
    env = {"GIT_AUTHOR_NAME": "T", "GIT_AUTHOR_EMAIL": "t@example.invalid",
           "GIT_COMMITTER_NAME": "T", "GIT_COMMITTER_EMAIL": "t@example.invalid",
           "GIT_CONFIG_NOSYSTEM": "1", "GIT_CONFIG_GLOBAL": os.devnull}
    for key, value in env.items():
        monkeypatch.setenv(key, value)
    for argv in (["init", "-q"], ["add", "-A"], ["commit", "-q", "-m", "models"]):
        subprocess.run(["git", *argv], cwd=project, check=True)
    before = _snapshot(project)
    code, _, err = cli("diff", "--rev", "HEAD", "--format", "json", "--output", "lib/plant.loop")
    assert code == 2 and "refusing to write to lib/plant.loop" in err
    assert _snapshot(project) == before
    assert cli("diff", "--rev", "HEAD", "--format", "json", "--output", "d.json")[0] == 0
    assert json.loads((project / "d.json").read_text())["kind"] == "diff"


# --- atomic: a write that fails half-way leaves the previous file ---------------------------

def _limited(limit: int):
    def apply():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return apply


@pytest.mark.parametrize("argv, target", [
    (["check", "m.loop", "--format", "json", "--output", "out.json"], "out.json"),
    (["check", "m.loop", "--format", "junit", "--output", "out.xml", "--quiet"], "out.xml"),
    (["graph", "m.loop", "--output", "out.txt"], "out.txt"),
    (["diff", "other.loop", "m.loop", "--format", "markdown", "--output", "out.md"], "out.md"),
    (["plot", "m.loop", "--output", "out.svg"], "out.svg"),
    (["report", "m.loop", "--output", "out.html"], "out.html"),
    (["sweep", "m.loop", "--jobs", "1", "--format", "json", "--output", "out.json"], "out.json"),
])
def test_a_write_cut_short_by_a_size_limit_leaves_the_previous_file(project, argv, target):
    previous = b"the previous report\n"
    (project / target).write_bytes(previous)
    env = {**os.environ, "CI": "1"}
    env.pop("LOOPWISE_DEBUG", None)
    # 64 bytes: more than the previous file, less than any of these outputs
    done = subprocess.run([sys.executable, "-m", "loopwise", *argv], cwd=project, env=env,
                          capture_output=True, text=True, timeout=120, preexec_fn=_limited(64))
    assert done.returncode == 2, done.stderr
    assert f"loopwise: cannot write {target}: File too large" in done.stderr
    assert "Traceback" not in done.stderr
    assert (project / target).read_bytes() == previous
    leftovers = [p.name for p in project.iterdir() if p.name.startswith(f".{target}.")]
    assert leftovers == []


def test_permissions_of_an_existing_report_are_kept_and_a_new_one_gets_the_usual(project, cli):
    (project / "old.json").write_text("{}")
    os.chmod(project / "old.json", 0o640)
    assert cli("check", "m.loop", "--format", "json", "-o", "old.json", "-q")[0] == 0
    assert stat.S_IMODE(os.stat(project / "old.json").st_mode) == 0o640
    assert json.loads((project / "old.json").read_text())["models"][0]["model"] == "m"
    assert cli("check", "m.loop", "--format", "json", "-o", "new.json", "-q")[0] == 0
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(os.stat(project / "new.json").st_mode) == 0o666 & ~umask


def test_a_link_to_a_report_stays_a_link(project, cli):
    (project / "reports").mkdir()
    (project / "reports" / "real.json").write_text("{}")
    (project / "latest.json").symlink_to("reports/real.json")
    assert cli("check", "m.loop", "--format", "json", "-o", "latest.json", "-q")[0] == 0
    assert (project / "latest.json").is_symlink()
    assert json.loads((project / "reports" / "real.json").read_text())["models"][0]["model"] == "m"


def test_a_stream_is_written_to_not_replaced(project, cli):
    fifo = project / "pipe.json"
    os.mkfifo(fifo)
    got = []
    reader = threading.Thread(target=lambda: got.append(fifo.read_bytes()))
    reader.start()
    code, _, err = cli("check", "m.loop", "--format", "json", "-o", "pipe.json", "-q")
    reader.join(30)
    assert code == 0, err
    assert stat.S_ISFIFO(os.stat(fifo).st_mode)
    assert json.loads(got[0])["models"][0]["model"] == "m"


def test_missing_output_folder_is_refused_before_the_run(project, cli):
    code, out, err = cli("check", "m.loop", "-o", "no/such/folder/out.json")
    assert code == 2 and "the folder no/such/folder does not exist" in err and out == ""


# --- file names that are not UTF-8 ------------------------------------------------------------

def test_file_names_that_are_not_utf8_work_in_every_format_and_the_report(tmp_path):
    folder = tmp_path / "models"
    folder.mkdir()
    (folder / "plain.loop").write_text(GOOD)
    raw = os.fsencode(folder) + b"/caf\xe9-\xff.loop"  # Latin-1 bytes: not UTF-8
    with open(raw, "w") as fh:
        fh.write(GOOD.replace("model m", "model odd"))
    env = {**os.environ, "CI": "1"}
    env.pop("LOOPWISE_DEBUG", None)

    def run(*args):
        done = subprocess.run([sys.executable, "-m", "loopwise", *args], cwd=tmp_path, env=env,
                              capture_output=True, timeout=120)
        assert b"Traceback" not in done.stderr, done.stderr
        return done

    outputs = {}
    for fmt in ("text", "json", "junit", "markdown"):
        name = b"out-\xfe." + fmt.encode()  # the output's own name is not UTF-8 either
        done = run("check", "models", "--format", fmt, "--output", name)
        assert done.returncode == 0, done.stderr
        outputs[fmt] = (tmp_path / os.fsdecode(name)).read_bytes().decode("utf-8")  # valid UTF-8
        assert "caf\ufffd-\ufffd.loop" in outputs[fmt], fmt
    data = json.loads(outputs["json"])
    assert sorted(m["model"] for m in data["models"]) == ["m", "odd"]
    ET.fromstring(outputs["junit"])
    done = run("report", "models", "--output", b"r-\xfe.html")
    assert done.returncode == 0, done.stderr
    page = (tmp_path / os.fsdecode(b"r-\xfe.html")).read_bytes().decode("utf-8")
    assert "caf\ufffd-\ufffd.loop" in page
    ET.fromstring(page.split("\n", 1)[1])  # well-formed after the doctype line
    done = run("plot", raw, "--output", b"fig-\xfe.svg")
    assert done.returncode == 0, done.stderr
    assert ET.parse(tmp_path / os.fsdecode(b"fig-\xfe.svg")).getroot().tag.endswith("svg")
