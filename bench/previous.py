"""The previous engine, for benchmarks only: a git revision checked out into a temporary folder.

    with previous_tree("ac270c3") as root:       # root/src holds that revision's package
        cpu = run_in(root, SNIPPET)               # a child Python with root/src first on the path

`run_in` runs a snippet in a child process whose `loopwise` is the old one (the same
interpreter and the same numpy), and returns what the snippet prints as JSON on its
last line. Nothing under src/ keeps old code: the tree is extracted with
`git archive` at bench time and removed afterwards.
"""
from __future__ import annotations

import contextlib
import json
import os
import subprocess
import sys
import tarfile
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

#: the engine as it was before the compiled engine (the end of the verdict fixes)
DEFAULT_REVISION = "ac270c3"


@contextlib.contextmanager
def previous_tree(revision: str = DEFAULT_REVISION):
    with tempfile.TemporaryDirectory(prefix="loopwise-previous-") as tmp:
        archive = Path(tmp) / "tree.tar"
        with open(archive, "wb") as out:
            subprocess.run(["git", "-C", str(ROOT), "archive", revision, "src", "grammar"], check=True,
                           stdout=out)
        with tarfile.open(archive) as tar:
            tar.extractall(tmp, filter="data")
        yield Path(tmp)


def child_env(src: Path | None) -> dict:
    env = dict(os.environ)
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        env.setdefault(var, "1")
    if src is not None:
        env["PYTHONPATH"] = os.pathsep.join([str(src), str(ROOT / "tests"), env.get("PYTHONPATH", "")])
    return env


def run_in(root: Path | None, snippet: str) -> dict:
    """Run `snippet` with root/src's loopwise (the current one when root is None); the
    snippet prints a JSON object on its last line."""
    src = None if root is None else root / "src"
    proc = subprocess.run([sys.executable, "-c", snippet], capture_output=True, text=True, env=child_env(src),
                          cwd=str(ROOT))
    if proc.returncode != 0:
        raise RuntimeError(f"the benchmark child failed:\n{proc.stderr[-2000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])
