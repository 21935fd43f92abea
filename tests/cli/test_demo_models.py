"""Every demo model's header states its expected verdict and the figures of an independent
check (python-control 0.10.2 poles and margins, delays as Pade approximants for that check
only; see each header). `loopwise check` must print the same figures, to the header's rounding.

The table below is copied from the headers of models/*.loop; a test reads the headers back
to make sure the two stay in step.
"""
from __future__ import annotations

import json
import math
import re

from pathlib import Path

import jsonschema
import pytest

from .conftest import loopwise

ROOT = Path(__file__).parents[2]

# model file -> break -> header figures (None: the header says unbounded / not stated)
HEADERS = {
    "conditionally_stable.loop": {"elevation": dict(P=0, wc=[4.95], pm=[53.3], up=22.0, down=-22.6,
                                                    dm=0.188)},
    "double_integrator.loop": {"attitude": dict(P=0, wc=[0.80], pm=[47.4], up=18.1, down=None, dm=1.04)},
    "greenhouse_heating.loop": {
        "water": dict(P=2, wc=[1.05e-3, 7.71e-3], pm=[69.3, 59.7], up=10.0, down=-9.5, dm=135, ms=1.58),
        "air": dict(P=0, wc=[1.17e-3], pm=[61.8], up=12.1, down=None, dm=919, ms=1.50),
    },
    "levitation_rig.loop": {"sensor": dict(P=1, wc=[175], pm=[50.8], up=19.1, down=-8.0, dm=5.1e-3)},
    "servo_axis.loop": {
        "current": dict(P=2, wc=[189, 4.22e3], pm=[52.6, 52.2], up=8.1, down=-25.0, dm=216e-6, ms=1.82),
        "speed": dict(P=2, wc=[38.7, 218], pm=[85, 61.8], up=29.1, down=-10.3),
        "position": dict(P=0, wc=[44.7], pm=[86.4], up=34.6, down=None, dm=33.7e-3),
    },
    "shared_params.loop": {
        "infeed": dict(P=0, wc=[191], pm=[57.7], up=22.4, down=None, dm=5.3e-3),
        "outfeed": dict(P=0, wc=[141], pm=[64.0], up=24.9, down=None, dm=7.9e-3),
    },
}


def _close(value: float, stated: float) -> bool:
    """Equal to the header's rounding: half a unit of its last significant digit, at least 0.5%
    relative for three-figure values (the headers were rounded by hand)."""
    text = repr(stated).rstrip("0")
    digits = len(re.sub(r"[^0-9]", "", text.split("e")[0]).lstrip("0")) or 1
    return math.isclose(value, stated, rel_tol=max(0.5 * 10 ** (1 - digits), 5e-3))


@pytest.fixture(scope="module")
def report():
    proc = loopwise("check", "models", "--format", "json", "--jobs", "2", cwd=ROOT)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    doc = json.loads(proc.stdout)
    jsonschema.Draft202012Validator(json.loads((ROOT / "docs" / "results.schema.json").read_text())).validate(doc)
    return {m["file"].split("/")[-1]: m for m in doc["models"]}


def test_every_demo_model_is_in_the_table(report):
    models = {p.name for p in (ROOT / "models").glob("*.loop")}
    assert models == set(HEADERS)
    assert set(report) >= models


@pytest.mark.parametrize("file", sorted(HEADERS))
def test_header_figures_match_the_check(report, file):
    model = report[file]
    assert model["stable"] and model["closed_loop_rhp_poles"] == 0
    breaks = {b["name"]: b for b in model["breaks"]}
    assert set(breaks) == set(HEADERS[file])
    for name, want in HEADERS[file].items():
        b = breaks[name]
        assert b["stable"] and all(r["met"] for r in b["requirements"]), (file, name)
        assert b["open_loop_rhp_poles"] == want["P"] and b["encirclements"] == -want["P"], (file, name)
        got_wc = [g["freq"] for g in b["gain_crossovers"]]
        got_pm = [g["phase_margin_deg"] for g in b["gain_crossovers"]]
        assert len(got_wc) == len(want["wc"]), (file, name, got_wc)
        for g, w in zip(got_wc, want["wc"]):
            assert _close(g, w), (file, name, "crossover", g, w)
        for g, w in zip(got_pm, want["pm"]):
            assert _close(g, w), (file, name, "phase margin", g, w)
        assert _close(b["gain_margin_up_db"], want["up"]), (file, name, b["gain_margin_up_db"])
        if want["down"] is None:
            assert b["gain_margin_down_db"] is None, (file, name)
        else:
            assert _close(b["gain_margin_down_db"], want["down"]), (file, name, b["gain_margin_down_db"])
        if "dm" in want:
            assert _close(b["delay_margin_s"], want["dm"]), (file, name, b["delay_margin_s"])
        if "ms" in want:
            assert _close(b["sensitivity_peak"]["value"], want["ms"]), (file, name)


@pytest.mark.parametrize("file", sorted(HEADERS))
def test_the_table_is_the_header(file):
    """Each table figure appears in the model's header text as written there."""
    header = []
    for line in (ROOT / "models" / file).read_text(encoding="utf-8").splitlines():
        if not line.startswith("#"):
            break
        header.append(line)
    text = " ".join(header)
    for name, want in HEADERS[file].items():
        for key in ("pm", "wc"):
            for v in want[key]:
                forms = {f"{v:g}", f"{v:.1f}", f"{v:.2f}", f"{v:.3g}", f"{v:.2e}".replace("e-0", "e-"),
                         f"{v:.3g}".replace("e+0", "e")}
                assert any(f in text for f in forms), (file, name, key, v)
