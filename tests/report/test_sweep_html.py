"""The HTML report's sweep section (`loopwise report --sweep`) and its two pictures."""
from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from loopwise.cli import main
from loopwise.report.plots.sweep import PROFILE_BINS, worst_profile
from loopwise.sweep.results import WORST_KEYS, PlantTable
from tests.scenarios import DELAYED_INSIDE, NO_RANGES

SVG = "{http://www.w3.org/2000/svg}"

#: L = K exp(-sT)/s: PM = 90 deg - K T, stable for every plant of this box (K T <= 1.2)
MODEL = DELAYED_INSIDE.replace("require loop phase_margin >= 15deg\n", "")
PLAIN = NO_RANGES


@pytest.fixture(scope="module")
def page(tmp_path_factory):
    folder = tmp_path_factory.mktemp("sweep-report")
    (folder / "delayed.loop").write_text(MODEL)
    (folder / "plain.loop").write_text(PLAIN)
    out = folder / "report.html"
    code = main(["report", str(folder), "--sweep", "--samples", "4", "--output", str(out), "--no-progress"])
    text = out.read_text(encoding="utf-8")
    return code, text, ET.fromstring(text[text.index("<html"):])


def test_a_sweep_section_for_the_model_with_ranges_only(page):
    code, text, tree = page
    assert code == 0
    heads = ["".join(h.itertext()) for h in tree.iter("h3") if "sweep over the box" in "".join(h.itertext())]
    assert len(heads) == 1 and "STABLE at every sampled plant" in heads[0]
    assert "sampled evidence, not a proof" in text
    section = next(s for s in tree.iter("section") if any("sweep over the box" in "".join(h.itertext())
                                                          for h in s.iter("h3")))
    assert "delayed.loop" in "".join(section.itertext())
    # the worst phase margin is at the corner K = 1.2, T = 1: 90 - 68.75 = 21.2 deg
    rows = [[("".join(td.itertext())) for td in tr.iter("td")] for tr in section.iter("tr")]
    pm = next(r for r in rows if r and r[0] == "phase margin")
    assert pm[2] == "21.2 deg" and pm[3] == "K=1.2, T=1"


def test_the_band_draws_the_sampled_plants_around_the_nominal_curve(page):
    _, _, tree = page
    groups = {g.get("id", "") for g in tree.iter(f"{SVG}g")}
    nominal = [i for i in groups if i.endswith("band-nominal")]
    plants = [i for i in groups if "band-plant" in i]
    assert len(nominal) == 1
    # each plant is drawn as both halves of its curve; the box has 4 corners, so the band
    # holds between 4 (corners) and 16 plants
    assert 8 <= len(plants) <= 32 and len(plants) % 2 == 0
    worst = [i for i in groups if "worst-phase_margin_deg-" in i]
    assert {w.rsplit("-", 1)[-1] for w in worst} >= {"K", "T"}


def test_worst_profile_is_the_worst_value_in_each_stretch_of_each_range():
    rng = np.random.default_rng(3)
    values = rng.random((200, 2)) * [2.0, 10.0] + [1.0, 0.0]  # a in [1, 3], b in [0, 10]
    pm = 30.0 + 5.0 * values[:, 0] - values[:, 1]             # worst (smallest) at high b, low a
    margins = np.full((200, 1, len(WORST_KEYS)), np.nan)
    margins[:, 0, 0] = pm
    table = PlantTable(("a", "b"), values, ("space_filling",) * 200, np.ones((200, 1), bool), margins)
    x, worst = worst_profile(table, 0, "phase_margin_deg")
    assert x.shape == (PROFILE_BINS,) and worst.shape == (2, PROFILE_BINS)
    lo, hi = values.min(axis=0), values.max(axis=0)
    for p in range(2):  # brute force, stretch by stretch
        pos = (values[:, p] - lo[p]) / (hi[p] - lo[p])
        for k in range(PROFILE_BINS):
            inside = (pos >= k / PROFILE_BINS) & ((pos < (k + 1) / PROFILE_BINS) | (k == PROFILE_BINS - 1))
            assert worst[p, k] == pytest.approx(pm[inside].min())
    assert np.all(np.diff(worst[1]) < 0)  # the worst margin falls as b grows
    assert math.isclose(np.nanmin(worst), pm.min())


def test_the_band_reuses_the_parsed_model_and_the_nominal_point_of_the_sweep(tmp_path, monkeypatch):
    # regression: the band of plants parsed each swept model again (and checked its
    # nominal point again) although the sweep's result already held both
    import loopwise.analysis as analysis

    parsed, real = [], analysis.parse_for_check

    def counting(path, *args, **kwargs):
        parsed.append(str(path))
        return real(path, *args, **kwargs)

    monkeypatch.setattr(analysis, "parse_for_check", counting)
    (tmp_path / "delayed.loop").write_text(MODEL)
    out = tmp_path / "report.html"
    assert main(["report", str(tmp_path / "delayed.loop"), "--sweep", "--samples", "4", "--jobs", "1",
                 "--output", str(out), "--no-progress"]) == 0
    assert len(parsed) == 2  # the check's and the sweep's; the band's plants resolve from the sweep's
    # the band is still drawn: the nominal curve and the sampled plants around it
    assert "Nyquist curves of " in out.read_text(encoding="utf-8")
