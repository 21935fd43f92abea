"""Time of our full margin set vs python-control on the same delay-free loops, same run.

Ours: `loopwise.engine.margins.loop_margins` (every gain and phase crossover refined
to full precision, gain margins up and down from the winding count, delay
margin, balanced disk margin, Ms, Mt), given the engine's contour samples,
which the verdict computes anyway (timed apart as "engine count").
Reference: python-control's `stability_margins(sys, returnall=True)` plus
`disk_margins(sys, omega)` on a 1000-point log grid over the same frequency
range (its usual way: a grid, no refinement).

Disagreements counted (the reference tests say which side is right):
gain crossovers or phase crossovers (w > 0, inside our axis range) that do
not pair up to relative 1e-6, phase margins that differ by more than 1e-6
relative, and disk margins where python-control's grid minimum is below ours
(ours is the refined minimum) or more than 1e-3 above it (its grid is coarse), counted apart.

    python bench/margins.py [--repeat R]
"""
from __future__ import annotations

import argparse
import math
import sys
import time
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))

from reference.loopsets import delay_free_loops  # noqa: E402

from loopwise.testing import analyse_loop  # noqa: E402
from loopwise.engine.margins import loop_margins  # noqa: E402
from loopwise.transfer import Transfer  # noqa: E402


def _pairs(a, b) -> int:
    """How many of a and b do not pair up within relative 1e-6."""
    left, off = list(b), 0
    for x in a:
        j = next((j for j, y in enumerate(left) if math.isclose(x, y, rel_tol=1e-6)), None)
        if j is None:
            off += 1
        else:
            left.pop(j)
    return off + len(left)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    import control

    cases = [c for c in delay_free_loops() if len(c.poles) <= 8 and c.axis_poles == 0]
    warnings.simplefilter("ignore")
    prepared = []
    t0 = time.perf_counter()
    for c in cases:
        L = Transfer.from_zpk(list(c.zeros), list(c.poles), c.gain)
        try:
            res = analyse_loop(L)
        except Exception as exc:  # an engine failure is reported, not hidden
            print(f"  engine failed on {c.name}: {type(exc).__name__}: {exc}")
            continue
        prepared.append((c, L, res, c.to_control()))
    t_engine = time.perf_counter() - t0

    def ours():
        return [loop_margins(L.evaluate, res.response, res.open_loop_rhp_poles)
                for _, L, res, _ in prepared]

    grids = [np.geomspace(max(res.response.freq[res.response.freq > 0].min(), 1e-6),
                          res.response.freq.max(), 1000) for _, _, res, _ in prepared]

    def theirs():
        return [(control.stability_margins(sys_, returnall=True), control.disk_margins(sys_, w, skew=0.0))
                for (_, _, _, sys_), w in zip(prepared, grids)]

    def theirs_crossovers():
        return [control.stability_margins(sys_, returnall=True) for _, _, _, sys_ in prepared]

    ours(), theirs()  # warm-up: lazy imports on both sides
    t_ours = min(_timed(ours) for _ in range(args.repeat))
    t_theirs = min(_timed(theirs) for _ in range(args.repeat))
    t_cross = min(_timed(theirs_crossovers) for _ in range(args.repeat))
    mine, ref = ours(), theirs()

    off = {"gain crossovers": 0, "phase crossovers": 0, "phase margins": 0,
           "disk margin below ours": 0, "disk margin above ours by > 1e-3 (grid)": 0}
    for (c, _, res, _), m, ((gm, pm, _, w180, wc, _), (dm, _, _)) in zip(prepared, mine, ref):
        top = res.response.freq.max()
        n_g = _pairs([g.freq for g in m.gain_crossovers], [w for w in wc if w > 0])
        n_p = _pairs([p.freq for p in m.phase_crossovers],
                     [w for w, g in zip(w180, gm) if 0 < w <= top and np.isfinite(g) and g > 0])
        off["gain crossovers"] += n_g > 0
        off["phase crossovers"] += n_p > 0
        if n_g == 0 and len(pm):
            ours_pm = sorted(g.phase_margin_deg for g in m.gain_crossovers)
            off["phase margins"] += any(not math.isclose(a, b, rel_tol=1e-6, abs_tol=1e-9)
                                        for a, b in zip(ours_pm, sorted(abs(p) for p in pm)))
        a = m.disk_margin.alpha
        off["disk margin below ours"] += bool(dm < a * (1 - 1e-9))
        off["disk margin above ours by > 1e-3 (grid)"] += bool(dm > a * (1 + 1e-3))
        if dm < a * (1 - 1e-9):
            print(f"  {c.name}: python-control alpha {dm:.9g} below ours {a:.9g}")

    n = len(prepared)
    print(f"margins on {n} delay-free loops (tests/reference/loopsets.py, orders 1-8), best of {args.repeat}")
    print(f"  engine count (verdict + contour samples, once): {t_engine:8.3f} s")
    print(f"  ours   loop_margins (full set, refined):        {t_ours:8.3f} s  ({1e3 * t_ours / n:.2f} ms/loop)")
    print(f"  python-control stability_margins+disk_margins:  {t_theirs:8.3f} s  ({1e3 * t_theirs / n:.2f} ms/loop)")
    print(f"    of which stability_margins alone:             {t_cross:8.3f} s  ({1e3 * t_cross / n:.2f} ms/loop)")
    print(f"  ratio ours / python-control: {t_ours / t_theirs:.2f} "
          f"(ours / stability_margins alone: {t_ours / t_cross:.2f})")
    print(f"  loops with disagreements: " + ", ".join(f"{k} {v}" for k, v in off.items()))
    return 0


def _timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


if __name__ == "__main__":
    raise SystemExit(main())
