"""Shared helpers for the command-line tests.

Two kinds: hand-built result objects (the reporters are tested on these, with
every field chosen by the test, independent of the engine), and small model
files written into tmp_path plus a helper that runs the real command in a
subprocess and checks that no traceback escapes.
"""
from __future__ import annotations

import os
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

from loopwise.errors import Finding, Span
from loopwise.results import (BreakResult, DiskMargin, GainCrossover, LoopResponse, Margins,
                              ModelResult, Peak, PhaseCrossover, RequirementResult, RunResult)

# --- hand-built results ------------------------------------------------------------------


def margins(pm=52.5, gm_up=14.0, gm_down=None, delay=0.0123, wc=3.25) -> Margins:
    return Margins(
        gain_crossovers=(GainCrossover(freq=wc, lag_deg=180 - pm, phase_margin_deg=pm),),
        phase_crossovers=(PhaseCrossover(freq=9.5, gain_margin_db=gm_up),),
        phase_margin_deg=pm, gain_margin_up_db=gm_up, gain_margin_down_db=gm_down,
        delay_margin_s=delay, disk_margin=DiskMargin(0.71, (-5.2, 8.3), 38.9, 4.1),
        sensitivity_peak=Peak(1.62, 4.4), complementary_peak=Peak(1.21, 2.9), crossover_freq=wc,
    )


def requirement(metric="phase_margin", op=">=", limit=30.0, value=52.5, line=7, met=None,
                file="") -> RequirementResult:
    if met is None:
        met = value is not None and (value >= limit if op in (">=", ">") else value <= limit)
    return RequirementResult(metric, op, limit, value, met, line, file)


def response() -> LoopResponse:
    w = np.geomspace(1e-2, 1e2, 50)
    s = 1j * w
    return LoopResponse(s=s, L=2.0 / ((s + 1) * (s + 2)), on_axis=np.ones(w.size, bool))


def stable_break(name="b", reqs=(), warnings=(), at="y", line=6, **kw) -> BreakResult:
    return BreakResult(name=name, at=at, line=line, stable=True, open_loop_rhp_poles=0,
                       encirclements=0, closed_loop_rhp_poles=0, marginal=False,
                       marginal_freq=None, margins=margins(**kw), requirements=tuple(reqs),
                       warnings=tuple(Finding("warning", "LW481", w, Span("m.loop", line, 1)) for w in warnings),
                       response=response())


def unstable_break(name="b", P=1, N=1, reqs=(), gains=((0.2, 0.8),)) -> BreakResult:
    return BreakResult(name=name, at="y", line=6, stable=False, open_loop_rhp_poles=P,
                       encirclements=N, closed_loop_rhp_poles=P + N, marginal=False,
                       marginal_freq=None, margins=None, requirements=tuple(reqs), warnings=(),
                       stabilising_gains=gains)


def marginal_break(name="b") -> BreakResult:
    return BreakResult(name=name, at="y", line=6, stable=False, open_loop_rhp_poles=0,
                       encirclements=0, closed_loop_rhp_poles=0, marginal=True,
                       marginal_freq=1.414, margins=None, requirements=(), warnings=())


def model(file="m.loop", name="m", breaks=(), findings=()) -> ModelResult:
    breaks = tuple(breaks)
    return ModelResult(file=file, model=name, stable=all(b.stable for b in breaks),
                       closed_loop_rhp_poles=max((b.closed_loop_rhp_poles for b in breaks), default=0),
                       breaks=breaks, findings=tuple(findings))


def syntax_error(file="bad.loop", line=2, col=9) -> Finding:
    return Finding("error", "LW101", "unexpected `)`", Span(file, line, col, col + 1),
                   "expected a name")


def run_of(*models, errors=()) -> RunResult:
    return RunResult(models=tuple(models), errors=tuple(errors), version="0.1.0")


@pytest.fixture
def mixed_run(tmp_path) -> RunResult:
    return build_mixed_run(tmp_path)


def build_mixed_run(folder: Path) -> RunResult:
    """Every case at once: pass, unmet requirement, unstable, marginal, warnings, unreadable."""
    bad = folder / "bad.loop"
    bad.write_text("model bad\nblock G = 1/(s+1))\n")
    return run_of(
        model("good.loop", "good", [stable_break("inner", [requirement()]),
                                    stable_break("outer", gm_down=-7.5, delay=2.5e-6)]),
        model("weak.loop", "weak", [stable_break("b", [requirement(limit=60.0, line=9)])]),
        model("unstable.loop", "tipping", [unstable_break("b", reqs=[requirement(value=None, met=False)])]),
        model("ring.loop", "ring", [marginal_break("b")]),
        model("warn.loop", "warned", [stable_break("b", warnings=["the loop gain is neutral"])],
              findings=[Finding("warning", "LW281", "block `K` is never used",
                                Span("warn.loop", 3, 7, 8))]),
        errors=[syntax_error(str(bad), 2, 18),
                Finding("error", "LW001", "cannot read the model: Permission denied",
                        Span("locked.loop", 0, 0))],
    )


# --- models on disk and the real command ------------------------------------------------

GOOD = """\
model m
input r
block G = 10/((s+1)*(s+2))
e = r - y
y = G(e)
break b at y
require b phase_margin >= 30deg
"""

#: phase margin of L = 10/((s+1)(s+2)), re-derived: |L| = 1 where
#: (w^2+1)(w^2+4) = 100, w^2 = (-5 + sqrt(409))/2, w = 2.759 rad/s; the lag there is
#: atan(w) + atan(w/2) = 124.1 deg, so PM = 55.9 deg. No phase crossover (GM unbounded).
GOOD_PM_DEG = 55.9
GOOD_WC = 2.759
UNMET = GOOD.replace("phase_margin >= 30deg", "phase_margin >= 70deg")

#: positive feedback around a gain of 3: 1 - 3/(s+1) has a zero at s = 2
UNSTABLE = """\
model tip
input r
block G = 3/(s+1)
e = r + y
y = G(e)
break b at y
"""

BROKEN = """\
model broken
input r
block G = 10/((s+1)*(s+2)))
e = r - y
y = G(e)
break b at y
"""


def write(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(textwrap.dedent(text))
    return path


def loopwise(*args, cwd=None, env=None, script=False) -> subprocess.CompletedProcess:
    """Run the command as a user would; fail the test if a traceback escapes."""
    full_env = {**os.environ, "NO_COLOR": "", "CI": "1", **(env or {})}
    full_env.pop("LOOPWISE_DEBUG", None)
    cmd = ["loopwise", *args] if script else [sys.executable, "-m", "loopwise", *args]
    proc = subprocess.run(cmd, cwd=cwd, env=full_env, capture_output=True, text=True, timeout=120)
    assert "Traceback" not in proc.stderr, proc.stderr
    assert "Traceback" not in proc.stdout, proc.stdout
    return proc


@pytest.fixture
def cli(capsys, monkeypatch, tmp_path):
    """Run `loopwise ARGS` in this process from tmp_path: (exit code, stdout, stderr).

    Cheaper than a subprocess (the engine is imported once per test session); the
    subprocess path is exercised once per format and exit code with `loopwise()`.
    """
    from loopwise.cli import main

    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("LOOPWISE_DEBUG", raising=False)

    def invoke(*args) -> tuple[int, str, str]:
        code = main(list(args))
        out, err = capsys.readouterr()
        assert "Traceback" not in err and "Traceback" not in out, err
        return code, out, err

    return invoke

