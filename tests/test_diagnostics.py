"""The diagnostics registry, the codes the source raises, and docs/language.md agree."""
from __future__ import annotations

import re
from pathlib import Path

from loopwise.diagnostics import CODES

ROOT = Path(__file__).resolve().parents[1]
CODE = re.compile(r"[\"'](LW\d{3})[\"']")


def _raised() -> dict[str, list[str]]:
    found: dict[str, list[str]] = {}
    for path in (ROOT / "src" / "loopwise").rglob("*.py"):
        if path.name == "diagnostics.py":
            continue
        for code in CODE.findall(path.read_text(encoding="utf-8")):
            found.setdefault(code, []).append(path.name)
    return found


def test_every_code_in_the_source_is_registered():
    raised = _raised()
    assert raised, "the scan found no codes at all: the pattern is wrong"
    missing = {c: where for c, where in raised.items() if c not in CODES}
    assert not missing, f"codes raised but not in loopwise.diagnostics.CODES: {missing}"


def test_every_registered_code_is_in_the_docs_table_with_its_severity():
    text = (ROOT / "docs" / "language.md").read_text(encoding="utf-8")
    rows = dict(re.findall(r"^\| (LW\d{3}) \| (\w+) \|", text, flags=re.M))
    for code, entry in CODES.items():
        assert rows.get(code) == entry.severity, f"{code} missing or wrong in docs/language.md"
    assert set(rows) == set(CODES), f"documented but not registered: {set(rows) - set(CODES)}"


def test_severity_follows_the_numbering_rule():
    for code, entry in CODES.items():
        tens = code[3]
        expected = {"8": "warning", "9": "note"}.get(tens, "error")
        assert entry.severity == expected, code


def test_findings_use_the_severity_of_their_code():
    # every Finding(...) literal in the source names a severity that matches its code
    pattern = re.compile(r"Finding\(\s*\"(error|warning|note)\",\s*\"(LW\d{3})\"")
    seen = 0
    for path in (ROOT / "src" / "loopwise").rglob("*.py"):
        for severity, code in pattern.findall(path.read_text(encoding="utf-8")):
            seen += 1
            assert CODES[code].severity == severity, f"{path.name}: {code} raised as {severity}"
    assert seen > 5
