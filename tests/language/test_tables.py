"""The parser's LALR tables ship in the package as JSON (language/tables.py): they must
fit the grammar, parse exactly as a parser built from the grammar, and nothing may be
unpickled or written in the shared temp folder.
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap

import pytest
from lark import Lark
from lark.exceptions import UnexpectedInput

from loopwise.language.tables import TABLES_FILE, build_parser, grammar_text, shipped_tables

from .conftest import ALL_LOOP_FILES, ROOT

REGENERATE = "the shipped parser tables are stale: run `python -m loopwise.language.tables` and commit " \
             "src/loopwise/language/lalr_tables.json"


def test_shipped_tables_fit_the_grammar_and_lark():
    assert shipped_tables() is not None, REGENERATE
    stored = json.loads(TABLES_FILE.read_text("utf-8"))
    assert stored["grammar"] == grammar_text(), REGENERATE


def test_tables_made_from_another_grammar_are_not_used():
    assert shipped_tables(grammar_text() + "\n// changed\n") is None


def _corpus() -> list[str]:
    texts = [p.read_text("utf-8") for p in ALL_LOOP_FILES]
    import re
    docs = (ROOT / "docs" / "language.md").read_text("utf-8")
    texts += [m.group(1) for m in re.finditer(r"```loop\n(.*?)```", docs, flags=re.S)]
    texts += ["param = 3", "x = (y", "block B 1/s", "x = y +* z", "break a at b ->", "use common.loop",
              'x = [1/s](y) z', "require a phase_margin 45deg", "x = 2^-3^2 - -y", "param k = 1 in [1, 2"]
    return texts


def _outcome(parser: Lark, text: str):
    try:
        return ("tree", parser.parse(text + "\n"))
    except UnexpectedInput as exc:
        return ("error", type(exc).__name__, exc.line, exc.column, sorted(getattr(exc, "expected", ()) or ()))


def test_shipped_tables_parse_as_the_grammar_does():
    shipped = Lark.load(shipped_tables())
    built = build_parser()
    corpus = _corpus()
    assert len(corpus) > 20
    for text in corpus:
        assert _outcome(shipped, text) == _outcome(built, text), text


PROBE = """
import json, os, pickle, sys, tempfile
loads = []
for name in ("load", "loads"):
    real = getattr(pickle, name)
    setattr(pickle, name, lambda *a, _real=real, **k: (loads.append(1), _real(*a, **k))[1])
from loopwise.language.parse import parse_text
parse_text("input r\\ny = [1/(s+1)](r)\\n", "m.loop")
print(json.dumps({"unpickled": len(loads), "temp": sorted(os.listdir(tempfile.gettempdir()))}))
"""


def test_parsing_unpickles_nothing_and_writes_nothing_to_the_temp_folder(tmp_path):
    # regression: lark's cache=True unpickled a file with a predictable name in the shared
    # temp folder at every start (a planted pickle ran code)
    temp = tmp_path / "shared-temp"
    temp.mkdir()
    env = dict(os.environ, TMPDIR=str(temp), TEMP=str(temp), TMP=str(temp))
    proc = subprocess.run([sys.executable, "-c", textwrap.dedent(PROBE)], capture_output=True, text=True,
                          timeout=60, env=env)
    assert proc.returncode == 0, proc.stderr
    assert json.loads(proc.stdout) == {"unpickled": 0, "temp": []}


def test_no_source_module_asks_lark_for_a_cache():
    src = ROOT / "src" / "loopwise"
    offenders = [p.name for p in src.rglob("*.py") if "cache=True" in p.read_text("utf-8")]
    assert offenders == []
