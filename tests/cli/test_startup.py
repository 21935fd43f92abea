"""Start-up cost: asking for help must not load the numerical stack.

Checked by running the command in a fresh interpreter and listing which heavy
modules it imported (a timing test would be flaky; the import list is exact).
"""
from __future__ import annotations

import json
import subprocess
import sys

import pytest

from .conftest import GOOD

HEAVY = ("matplotlib", "control", "scipy")

PROBE = """
import json, sys
from loopwise.cli import main
try:
    code = main({argv!r})
except SystemExit as exc:   # argparse's --help exits
    code = exc.code
loaded = sorted(m for m in sys.modules if m.split(".")[0] in {heavy!r} or m == "loopwise.analysis")
print(json.dumps({{"code": code, "loaded": loaded}}), file=sys.stderr)
"""


def probe(argv: list[str]) -> tuple[dict, str]:
    code = PROBE.format(argv=argv, heavy=HEAVY)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert "Traceback" not in proc.stderr, proc.stderr
    return json.loads(proc.stderr.strip().splitlines()[-1]), proc.stdout


@pytest.mark.parametrize("argv", [["--help"], ["check", "--help"], ["sweep", "--help"]])
def test_help_does_not_import_the_numerical_stack(argv):
    result, out = probe(argv)
    assert result["code"] == 0
    assert result["loaded"] == [], result["loaded"]
    assert "usage: loopwise" in out


def test_check_help_lists_the_options():
    _, out = probe(["check", "--help"])
    for option in ("--format", "--output", "--config", "--jobs", "--fail-on-warnings",
                   "--no-fail-on-warnings", "--color", "Exit codes"):
        assert option in out, option


def test_probe_sees_the_engine_when_a_check_runs(tmp_path):
    # the probe can fail: a real check loads the analysis, and the probe says so
    model = tmp_path / "m.loop"
    model.write_text(GOOD)
    result, _ = probe(["check", str(model), "--format", "json"])
    assert result["code"] == 0
    assert "loopwise.analysis" in result["loaded"]


def test_library_api_is_lazy_and_works():
    code = (
        "import sys, loopwise\n"
        "assert 'loopwise.analysis' not in sys.modules\n"
        f"r = loopwise.check_text({GOOD!r}, file='m.loop')\n"
        "b = r.breaks[0]\n"
        "print(r.stable, b.name, round(b.margins.phase_margin_deg, 1))\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split() == ["True", "b", "55.9"]


@pytest.mark.parametrize("command", ["check", "graph", "diff", "plot", "report"])
def test_every_command_takes_config_and_output(command, capsys):
    from loopwise.cli import main

    with pytest.raises(SystemExit):
        main([command, "--help"])
    text = capsys.readouterr().out
    assert "--config FILE" in text and "--output" in text
