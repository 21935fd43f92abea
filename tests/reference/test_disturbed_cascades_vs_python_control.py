"""Cascades whose inner plant input is a sum with a disturbance (`y1 = G1(u + d)`), and
gain margins in rounding noise, vs python-control's closed-loop eigenvalues.

Reference: python-control 0.10.2 (`control.interconnect` of every block application,
tests/reference/loopsets.Wiring), the closed loop's eigenvalues counted in the right
half plane. A stabilising gain range or gain margin is checked by closing the loop
again with the factor on the cut wire (the break's L scaled by k).
"""
from __future__ import annotations

import math

import control as ct
import numpy as np
import pytest

from loopwise.analysis import check_text

from .loopsets import Wiring

# the minimal case from the field report (a stable 3-loop cascade, one break)
REPORTED = """model refused_cascade
input r, d
block C1 = 0.04352
block G1 = 32.55/s
block H1 = 1/(0.006*s + 1)
block C2 = 1.015
block G2 = 0.1716/(1.763*s + 1)
block C3 = 12.47*(1 + 1/(110.5*s))
block G3 = 0.00686/s
e3 = r - y3
ref2 = C3(e3)
e2 = ref2 - y2
ref1 = C2(e2)
e1 = ref1 - m1
u = C1(e1)
y1 = G1(u + d)
y2 = G2(y1)
y3 = G3(y2)
m1 = H1(y1)
break inner at y1 -> m1
"""


def _tf(text: str):
    """python-control tf of a block written as `k`, `k/(a*s + b)`, `k/s` or `k*(1 + 1/(T*s))`."""
    s = ct.tf("s")
    return eval(text.replace("^", "**"), {"s": s})


def _wiring(text: str, disturbance: bool, gains: dict | None = None) -> Wiring:
    """The cascade's wiring rebuilt by hand: blocks from the text, equations as written.
    `gains` scales a cut wire (break name -> factor) to close the loop of k L."""
    blocks = {}
    for line in text.splitlines():
        if line.startswith("block "):
            name, expr = line[6:].split(" = ")
            blocks[name] = _tf(expr)
    depth = max(int(n[1:]) for n in blocks if n.startswith("G"))
    k = gains or {}
    eqs: dict[str, list] = {}
    for i in range(depth, 0, -1):
        ref = "r" if i == depth else f"ref{i}"
        meas = "m1" if i == 1 else f"y{i}"
        out = "u" if i == 1 else f"ref{i - 1}"
        factor = k.get("inner" if i == 1 else f"l{i}", 1.0)
        eqs[f"e{i}"] = [(1.0, ref), (-factor, meas)]
        eqs[out] = [(blocks[f"C{i}"], f"e{i}")]
    eqs["g1_in"] = [(1.0, "u")] + ([(1.0, "d")] if disturbance else [])
    eqs["y1"] = [(blocks["G1"], "g1_in")]
    for i in range(2, depth + 1):
        eqs[f"y{i}"] = [(blocks[f"G{i}"], f"y{i - 1}")]
    eqs["m1"] = [(blocks["H1"], "y1")]
    cuts = {"inner": ("m1", "e1")} | {f"l{i}": (f"y{i}", f"e{i}") for i in range(2, depth + 1)}
    return Wiring(eqs, ("r", "d") if disturbance else ("r",), cuts)


def _z(wiring: Wiring) -> int:
    poles = wiring.closed_loop().poles()
    assert np.all(np.abs(poles.real) > 1e-9 * np.abs(poles))  # none on the axis
    return int(np.sum(poles.real > 0))


def generated(seed: int) -> str:
    """A cascade 3 to 5 deep: P or PI controllers, integrating or first-order plants, the inner
    loop closed through a measurement lag, a disturbance added at the inner plant's input."""
    rng = np.random.default_rng([seed, 11])

    def lu(a, b):
        return float(np.exp(rng.uniform(np.log(a), np.log(b))))

    depth = int(rng.integers(3, 6))
    lines = [f"model c{seed}", "input r, d",
             f"block G1 = {lu(1, 100):.4g}/s", f"block H1 = 1/({lu(1e-3, 1e-2):.4g}*s + 1)",
             f"block C1 = {lu(0.01, 1):.4g}"]
    for k in range(2, depth + 1):
        lines.append(f"block G{k} = {lu(0.01, 1):.4g}/({lu(0.1, 10):.4g}*s + 1)" if rng.integers(0, 3) == 0
                     else f"block G{k} = {lu(0.001, 1):.4g}/s")
        lines.append(f"block C{k} = {lu(0.5, 20):.4g}*(1 + 1/({lu(1, 200):.4g}*s))" if rng.random() < 0.5
                     else f"block C{k} = {lu(0.1, 5):.4g}")
    for k in range(depth, 0, -1):
        ref = "r" if k == depth else f"ref{k}"
        meas = "m1" if k == 1 else f"y{k}"
        lines += [f"e{k} = {ref} - {meas}", f"{'u' if k == 1 else f'ref{k - 1}'} = C{k}(e{k})"]
    lines.append("y1 = G1(u + d)")
    lines += [f"y{k} = G{k}(y{k - 1})" for k in range(2, depth + 1)]
    lines += ["m1 = H1(y1)", "break inner at y1 -> m1"]
    lines += [f"break l{k} at y{k} -> e{k}" for k in range(2, depth + 1)]
    return "\n".join(lines) + "\n"


def _check_against_reference(text: str, disturbance: bool = True):
    z_ref = _z(_wiring(text, disturbance))
    res = check_text(text)  # a refusal (LW402) raises here and fails the test
    assert res.closed_loop_rhp_poles == z_ref
    for b in res.breaks:
        assert b.closed_loop_rhp_poles == z_ref, (b.name, b.closed_loop_rhp_poles, z_ref)
        # every stabilising range is real: the loop closed again with a factor inside it is stable
        for lo, hi in b.stabilising_gains:
            k = math.sqrt(lo * hi) if lo > 0 and math.isfinite(hi) else (2 * lo if lo > 0 else hi / 2)
            assert _z(_wiring(text, disturbance, {b.name: k})) == 0, (b.name, lo, hi)
        # a gain margin is reachable: 1 dB beyond it the closed loop is unstable
        m = b.margins
        if m is not None and m.gain_margin_up_db is not None:
            assert m.gain_margin_up_db < 160.0
            k = 10 ** ((m.gain_margin_up_db + 1.0) / 20)
            assert _z(_wiring(text, disturbance, {b.name: k})) > 0
    return res


@pytest.mark.parametrize("disturbance", [True, False])
def test_the_reported_cascade_gets_its_verdict(disturbance):
    text = REPORTED if disturbance else REPORTED.replace("input r, d", "input r").replace("G1(u + d)", "G1(u)")
    res = _check_against_reference(text, disturbance)
    b = res.breaks[0]
    assert res.stable and b.stable
    # L -> 0 along the negative real axis as w -> 0: the crossings there lie in rounding noise.
    # The gain margin up is unbounded: python-control's closed loop stays stable with the inner
    # loop's gain raised 160 dB (a factor 1e8) ...
    assert b.margins.gain_margin_up_db is None
    assert _z(_wiring(text, disturbance, {"inner": 1e8})) == 0
    # ... and no listed phase crossover sits in the noise
    assert all(p.gain_margin_db < 160.0 for p in b.margins.phase_crossovers)


@pytest.mark.parametrize("seed", range(12))
def test_generated_disturbed_cascades(seed):
    _check_against_reference(generated(seed))
