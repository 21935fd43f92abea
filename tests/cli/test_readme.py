"""README's promises: its model checks, its table is what check prints, CI runs its test command."""
from __future__ import annotations

import re
from pathlib import Path

from loopwise.analysis import check_text
from loopwise.cli import main

ROOT = Path(__file__).resolve().parents[2]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _blocks(lang: str | None = None) -> list[str]:
    return re.findall(r"```" + (lang or r"\w*") + r"\n(.*?)```", README, flags=re.S)


def test_the_model_in_readme_checks_stable_with_its_requirements_met():
    model = next(b for b in _blocks() if b.startswith("model servo_axis"))
    result = check_text(model, "README.loop")
    assert result.stable and result.requirements_met
    assert [b.name for b in result.breaks] == ["current", "speed", "position"]


def test_the_table_in_readme_is_what_check_prints(capsys):
    shown = next(b for b in _blocks() if b.startswith("PASS  models/servo_axis.loop"))
    assert main(["check", str(ROOT / "models" / "servo_axis.loop"), "--color", "never"]) == 0
    out = capsys.readouterr().out
    rows = [l.split() for l in shown.splitlines()[2:]]
    printed = {l.split()[0]: l.split() for l in out.splitlines()[2:5]}
    for row in rows:
        assert printed[row[0]] == row


def test_ci_runs_the_test_command_that_readme_gives():
    commands = [b.strip() for b in _blocks("sh")]
    test_command = next(c for c in commands if "pytest" in c)
    assert test_command in (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    main_command = next(c for c in commands if "loopwise check models/" in c and "pip install" in c)
    assert main_command.startswith("python3 -m venv .venv")


def test_readme_carries_the_caution():
    assert "analysis aid" in README and "qualified engineer" in README
