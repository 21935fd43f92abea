"""Invented model texts, and helpers, that tests in several folders share.

Each is written once here so that a change to a scenario (and to what its tests
re-derive from it) happens in one place.
"""
from __future__ import annotations

from pathlib import Path

import pytest

#: a cascade whose loops are too close: re-derived, the inner crossover is 15.2 rad/s and
#: the outer 6.6 rad/s, a separation of 2.3 < 3 (common practice): LW383 at `inner`, line 6
CASCADE = """\
input r
e = r - y2
e1 = [8](e) - y1
y1 = [10/s](e1)
y2 = [1/(s+1)](y1)
break inner at y1 -> e1
break outer at y2
"""

#: a flow loop closed through its flow sensor `H` inside a level loop; `{inner}` is where
#: the flow break cuts (the reference derivations are in
#: tests/reference/test_break_cuts_vs_python_control.py)
FLOW_LEVEL = """model flow_level
input r, n
block Cl = {kl}*(1 + 1/(50*s))
block Cf = {kf}*(1 + 1/(2*s))
block Gf = 1/(0.5*s + 1)
block Gl = 1/(10*s)
block H  = {sensor}
el = r - level
fref = Cl(el)
ef = fref - flow_meas
flow = Gf(Cf(ef))
flow_meas = H(flow) + n
level = Gl(flow)
break flow at {inner}
break lvl at level
require flow separation >= 5
"""

#: L = K exp(-sT)/s: stable exactly when K T < pi/2, and then PM = 90 deg - K T (in degrees;
#: re-derived in tests/reference/test_sweep_analytic.py); K's range ends at `{k_hi}`
DELAYED = """\
model delayed
param K = 1 in [0.5, {k_hi}]
param T = 0.5 in [0.2, 1]
input r
e = r - y
y = [K*exp(-T*s)/s](e)
break loop at y
require loop phase_margin >= 15deg
"""
#: worst K T = 1.2: stable at every plant of the box, PM >= 90 - 68.8 = 21.2 deg
DELAYED_INSIDE = DELAYED.format(k_hi=1.2)
#: K T up to 1.7 > pi/2: unstable in a corner of the box, where PM >= 15 deg fails too
DELAYED_CROSSING = DELAYED.format(k_hi=1.7)

#: a loop with no ranged params: nothing to sweep beyond the nominal point
NO_RANGES = "model plain\ninput r\ne = r - y\ny = [2/(s*(s + 3))](e)\nbreak loop at y\n"


def outside_git(tmp_path: Path) -> Path:
    """`tmp_path/plain` with empty `models` and `lib` folders, for the include rules
    outside git (the test is skipped when the temporary folder lies in a work tree)."""
    from loopwise.language.source import repository_root

    top = tmp_path / "plain"
    (top / "models").mkdir(parents=True)
    if repository_root(top) is not None:
        pytest.skip("the temporary folder lies inside a git work tree")
    (top / "lib").mkdir()
    return top
