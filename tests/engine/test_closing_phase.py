"""The arc's phase change (docs/method.md, "The arc is not sampled"): the t-path sampled by
`certificate.closing_phase` gives the same change as a t-grid ten thousand steps fine, for
every loop component and cut of the demo models (delays, integrators, improper blocks
scaled), and the number of t-samples it may stop at is the one the bound allows."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from loopwise.analysis import prepare_file
from loopwise.engine.certificate import ScaledTerms, certificate_radius, closing_phase, scaling

MODELS = sorted((Path(__file__).resolve().parents[2] / "models").glob("*.loop"))


def _dense(comp, terms, d, b, R, n=10_000):
    s = np.array([complex(R, 0.0), complex(0.0, R)])
    with np.errstate(all="ignore"):
        V = comp.bank.values(s)
        expo = (d[terms.rows] - d[terms.cols])[None, :]
        V0 = np.where(terms.delayed, 0.0, terms.limit)[None, :] * s[:, None] ** expo
    out = []
    for k in range(2):
        t = np.linspace(0.0, 1.0, n + 1)
        phase = comp.phase_at(V0[k][None, :] + t[:, None] * (V[k] - V0[k])[None, :], b)
        steps = (np.diff(phase) + np.pi) % (2 * np.pi) - np.pi
        assert np.max(np.abs(steps)) < 0.1  # fine enough to be the reference
        out.append(float(np.sum(steps)))
    return out[0] - out[1]


@pytest.mark.parametrize("path", [p for p in MODELS if "common" not in p.parts], ids=lambda p: p.stem)
def test_closing_phase_matches_a_dense_t_grid(path):
    prep = prepare_file(path)
    for comp in prep.reduction.components:
        d = scaling(comp)
        terms = ScaledTerms(comp, d)
        R = certificate_radius(comp, terms, [(), *comp.cut_positions])[0]
        for b in [None, *range(len(comp.breaks))]:
            assert closing_phase(comp, terms, d, b, R) == pytest.approx(_dense(comp, terms, d, b, R), abs=1e-9)
