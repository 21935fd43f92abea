"""The one bounded reader (regular files, the size limit while reading, strict UTF-8)
and the include root (git work tree, else the checked paths' folder, else the model's).

Cases that hung before the reader existed (a FIFO, /dev/zero) run in a subprocess
with a hard timeout, so a regression fails instead of stalling the suite.
"""
from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from loopwise.errors import ModelError
from loopwise.language.resolve import resolve_file
from loopwise.language.source import (MAX_MODEL_BYTES, SourceError, common_root, include_root,
                                      read_source, repository_root)

GOOD = "input r\nblock G = 2/((s+1)*(s+2))\ne = r - y\ny = G(e)\nbreak b at y\n"


def run_python(code: str, timeout: float = 60) -> subprocess.CompletedProcess:
    """Run code in a fresh interpreter; a hang fails the test at the timeout."""
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True,
                          text=True, timeout=timeout)


# --- the reader -----------------------------------------------------------------------------

def test_reads_a_regular_utf8_file(tmp_path):
    f = tmp_path / "m.loop"
    f.write_text("# café\n" + GOOD, encoding="utf-8")
    assert read_source(f) == "# café\n" + GOOD


def test_non_utf8_byte_is_located_even_in_a_comment(tmp_path):
    # regression: the file was decoded with errors="replace", so a Latin-1 byte in a
    # comment was accepted although the docs say non-UTF-8 is refused
    f = tmp_path / "m.loop"
    f.write_bytes(b"input r\n# caf\xe9 au lait\n" + GOOD.encode()[8:])
    with pytest.raises(SourceError) as info:
        read_source(f)
    assert (info.value.code, info.value.line, info.value.col) == ("LW104", 2, 6)


def test_non_utf8_model_is_a_located_lw104(tmp_path):
    f = tmp_path / "m.loop"
    f.write_bytes(b"input r\n# caf\xe9\n" + GOOD.encode()[8:])
    with pytest.raises(ModelError) as info:
        resolve_file(f)
    err = info.value
    assert (err.code, err.span.line, err.span.col) == ("LW104", 2, 6)
    assert err.hint == "a model is plain UTF-8 text"


def test_size_limit_is_applied_while_reading(tmp_path):
    f = tmp_path / "m.loop"
    f.write_text("# " + "x" * 200 + "\n")
    with pytest.raises(SourceError) as info:
        read_source(f, limit=100)
    assert info.value.code == "LW105" and "too large" in info.value.reason
    assert len(read_source(f, limit=203)) == 203


def test_a_folder_is_not_read(tmp_path):
    with pytest.raises(SourceError, match="folder"):
        read_source(tmp_path)


def test_a_missing_file(tmp_path):
    with pytest.raises(SourceError, match="no such file"):
        read_source(tmp_path / "nowhere.loop")


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_a_fifo_named_loop_is_refused_without_blocking(tmp_path):
    # regression: open() on a FIFO waits for a writer forever
    fifo = tmp_path / "pipe.loop"
    os.mkfifo(fifo)
    proc = run_python(f"""
        from loopwise.language.resolve import resolve_file
        from loopwise.errors import ModelError
        try:
            resolve_file({str(fifo)!r})
        except ModelError as err:
            print(err.code, err.message)
        """)
    assert proc.stdout.strip() == "LW001 is not a regular file (a pipe, device or socket is never read)", \
        proc.stderr


@pytest.mark.skipif(not os.path.exists("/dev/zero"), reason="needs /dev/zero")
def test_a_device_is_refused_without_reading_it():
    # regression: /dev/zero was read without limit
    proc = run_python("""
        from loopwise.language.source import read_source, SourceError
        try:
            read_source("/dev/zero")
        except SourceError as err:
            print(err.code, err.reason)
        """)
    assert proc.stdout.strip().startswith("LW001 is not a regular file"), proc.stderr


# --- the include root ------------------------------------------------------------------------

def test_repository_root_is_the_nearest_git_entry(tmp_path):
    (tmp_path / "repo" / "a" / "b").mkdir(parents=True)
    (tmp_path / "repo" / ".git").mkdir()
    assert repository_root(tmp_path / "repo" / "a" / "b") == tmp_path / "repo"
    # a linked work tree or a submodule has a `.git` file, not a folder
    (tmp_path / "repo" / "a" / ".git").write_text("gitdir: elsewhere\n")
    assert repository_root(tmp_path / "repo" / "a" / "b") == tmp_path / "repo" / "a"


def test_include_root_inside_git_is_the_work_tree(tmp_path):
    (tmp_path / ".git").mkdir()
    (tmp_path / "models").mkdir()
    model = tmp_path / "models" / "m.loop"
    assert include_root(model) == tmp_path.resolve()
    # a checked root does not narrow the repository
    assert include_root(model, checked_root=tmp_path / "models") == tmp_path.resolve()


def test_include_root_outside_git(tmp_path):
    if repository_root(tmp_path) is not None:
        pytest.skip("the temporary folder lies inside a git work tree")
    (tmp_path / "a" / "models").mkdir(parents=True)
    model = tmp_path / "a" / "models" / "m.loop"
    assert include_root(model) == (tmp_path / "a" / "models").resolve()
    assert include_root(model, checked_root=tmp_path / "a") == (tmp_path / "a").resolve()
    # a checked root that does not hold the model is not taken
    assert include_root(model, checked_root=tmp_path / "b") == (tmp_path / "a" / "models").resolve()


def test_common_root_of_checked_paths(tmp_path):
    (tmp_path / "x" / "m").mkdir(parents=True)
    (tmp_path / "x" / "n").mkdir()
    a, b = tmp_path / "x" / "m" / "a.loop", tmp_path / "x" / "n" / "b.loop"
    a.write_text(GOOD)
    b.write_text(GOOD)
    assert common_root([a, b]) == tmp_path / "x"
    assert common_root([tmp_path / "x" / "m"]) == tmp_path / "x" / "m"
    assert common_root([a]) == tmp_path / "x" / "m"


def test_limit_is_documented():
    text = (Path(__file__).resolve().parents[2] / "docs" / "language.md").read_text("utf-8")
    assert f"{MAX_MODEL_BYTES // (1024 * 1024)} MiB" in text


# --- the light scan's reads go through the same reader ----------------------------------------

def test_the_light_scan_reads_with_the_bounded_reader(tmp_path):
    from loopwise.sources import model_sources, read_regular

    big = tmp_path / "big.loop"
    big.write_bytes(b"#" * (MAX_MODEL_BYTES + 10))
    # not refused: the first limit + 1 bytes, enough to tell it from its first 4 MiB
    assert len(read_regular(big)) == MAX_MODEL_BYTES + 1
    assert read_regular(tmp_path) is None and read_regular(tmp_path / "nowhere.loop") is None
    (tmp_path / "lib.txt").write_text("param k = 1\n")
    m = tmp_path / "m.loop"
    m.write_text('use "lib.txt"\nuse "missing.loop"\n' + GOOD)
    found = {s.path.name: s for s in model_sources(m)}
    assert found["lib.txt"].data == b"param k = 1\n" and found["lib.txt"].line == 1
    assert found["missing.loop"].data is None and found["missing.loop"].line == 2


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs FIFOs")
def test_the_light_scan_never_blocks_on_a_fifo(tmp_path):
    fifo = tmp_path / "pipe.loop"
    os.mkfifo(fifo)
    proc = run_python(f"""
        from pathlib import Path
        from loopwise.sources import read_regular
        print(read_regular(Path({str(fifo)!r})))
        """)
    assert proc.stdout.strip() == "None", proc.stderr
