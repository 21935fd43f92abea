"""Our margins vs python-control 0.10.2 `control.stability_margins(sys, returnall=True)`.

Reference and rules:
* Crossovers: python-control finds gain crossovers (|L| = 1) and phase
  crossovers (L real and negative) as roots of polynomials in w. Every one of
  them (w > 0; phase crossovers up to the top of our axis samples) must match
  one of ours to relative 1e-6, and every one of ours must match one of theirs,
  with the same phase margin (theirs is `mod(arg L, 360) - 180` = our lag
  shifted into [-180, 180); our phase margin = its absolute value) and the same
  gain margin in dB. Where the two lists differ, the point in question is
  evaluated directly (numpy.polyval of the loop's coefficients): if it is not
  a crossover, the side that reported it is wrong. python-control's mistakes go
  to the findings in the terminal summary (tests/reference/findings.py); ours
  fail the test.
* Gain margins: python-control's single answer (`returnall=False`) is the phase
  crossover nearest to 0 dB either way, whether or not it bounds the range of
  stable gains. It is "consistent with the Nyquist count" when the closed loop
  (numpy.roots of den + k num) is stable for every factor between 1 and it and
  unstable just beyond; then our gain margin (the smaller of up and -down) must
  equal it to relative 1e-6. Otherwise it is a finding. Our own up/down margins
  are always checked against numpy.roots in the same way.
* The set: tests/reference/loopsets.py `delay_free_loops()` (fixed seed), orders
  1-8, every fourth case (all families: RHP poles, integrators, light damping,
  RHP zeros, near cancellations, biproper, gain sweeps), plus named textbook
  loops (sources in tests/reference/test_margins_textbook.py). Gain margins:
  every loop of orders 1-8 that is clearly stable (closed-loop poles from
  python-control's `feedback(L, 1).poles()`, none within 1e-6 of the axis).
"""
from __future__ import annotations

import functools
import math
import warnings

import control
import numpy as np
import pytest

from loopwise.testing import analyse_loop
from loopwise.engine.margins import loop_margins
from loopwise.transfer import Transfer

from .findings import record
from .loopsets import LoopCase, closed_loop_rhp, delay_free_loops, near_axis

REL = 1e-6

_NAMED = [
    # textbook-K/(s(s+1)(s+5)), K = 10: phase crossover sqrt(5), GM 30/K (from memory, re-derived
    # in test_margins_textbook.py)
    LoopCase("textbook/type1-three-poles", "textbook", (), (0j, -1 + 0j, -5 + 0j), 10.0),
    # Astrom & Murray, Feedback Systems: 3/(s+1)^3
    LoopCase("textbook/three-lags", "textbook", (), (-1 + 0j,) * 3, 3.0),
    # Seiler, Packard & Gahinet 2020: 25/(s^3+10s^2+10s+10)
    LoopCase("textbook/seiler-2020", "textbook", (), tuple(complex(r) for r in np.roots([1, 10, 10, 10])),
             25.0),
    # open-loop unstable 2(s+1)/(s(s-1)): stable for factors above 1/2 only
    LoopCase("textbook/unstable-integrator", "textbook", (-1 + 0j,), (0j, 1 + 0j), 2.0),
]
_ALL = [c for c in delay_free_loops() if len(c.poles) <= 8]
CASES = _ALL[::4] + _NAMED


def _clearly_stable(case: LoopCase) -> bool:
    """Stable by python-control's closed-loop poles, none within 1e-6 of the axis, and no
    undamped pole pair in L (python-control evaluates L at the pole there)."""
    if any(p.real == 0 and p.imag != 0 for p in case.poles):
        return False
    z, poles = closed_loop_rhp(case)
    return z == 0 and not near_axis(poles, 1e-6)


# gain margins: every clearly stable loop of orders 1-8 (they are cheap to check)
STABLE = [c for c in _ALL + _NAMED if _clearly_stable(c)]
_BY_NAME = {c.name: c for c in CASES + STABLE}


def _loop(case: LoopCase) -> Transfer:
    return Transfer.from_zpk(list(case.zeros), list(case.poles), case.gain)


@functools.lru_cache(maxsize=None)
def _ours(name: str):
    case = _BY_NAME[name]
    L = _loop(case)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = analyse_loop(L, name=name)
    return res, loop_margins(L.evaluate, res.response, res.open_loop_rhp_poles)


@functools.lru_cache(maxsize=None)
def _theirs(name: str):
    sys = _BY_NAME[name].to_control()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        all_ = control.stability_margins(sys, returnall=True)
        one = control.stability_margins(sys)
    return all_, one


def _L(case: LoopCase, w: float) -> complex:
    num, den = case.num_den()
    with np.errstate(all="ignore"):
        return complex(np.polyval(num, 1j * w) / np.polyval(den, 1j * w))


def _stable_at(case: LoopCase, k: float) -> bool:
    """numpy.roots of the closed-loop characteristic polynomial den + k num."""
    num, den = case.num_den()
    char = np.polyadd(den, k * num)
    return bool(np.all(np.roots(char).real < 0))


def _match(ours: list[float], theirs: list[float]) -> tuple[list, list, list]:
    """Pairs within REL, and what is left on either side."""
    left, pairs = list(theirs), []
    missing = []
    for w in ours:
        j = next((j for j, v in enumerate(left) if math.isclose(v, w, rel_tol=REL)), None)
        if j is None:
            missing.append(w)
        else:
            pairs.append((w, left.pop(j)))
    return pairs, missing, left


def _finding(name: str, text: str) -> None:
    record("margins vs python-control", f"{name}: {text}")


@pytest.mark.parametrize("name", [c.name for c in CASES], ids=[f"pc-{c.name}" for c in CASES])
def test_gain_crossovers_match_python_control(name):
    case = _BY_NAME[name]
    _, m = _ours(name)
    (gm, pm, _, w180, wc, _), _ = _theirs(name)
    theirs = {float(w): float(p) for w, p in zip(wc, pm) if w > 0 and math.isfinite(p)}
    ours = {g.freq: g for g in m.gain_crossovers}
    pairs, only_ours, only_theirs = _match(list(ours), list(theirs))
    for w_ours, w_theirs in pairs:
        g, p = ours[w_ours], theirs[w_theirs]
        assert g.lag_deg == pytest.approx(p % 360.0, rel=REL, abs=1e-7), (name, w_ours)
        assert g.phase_margin_deg == pytest.approx(abs(p), rel=REL, abs=1e-7), (name, w_ours)
    for w in only_ours:
        assert abs(abs(_L(case, w)) - 1) < 1e-8, (name, "our gain crossover is not one", w)
        _finding(name, f"python-control misses the gain crossover at {w:.9g} rad/s")
    for w in only_theirs:
        assert abs(abs(_L(case, w)) - 1) > 1e-6, (name, "we miss a gain crossover", w)
        _finding(name, f"python-control reports a gain crossover at {w:.9g} rad/s where "
                       f"|L| = {abs(_L(case, w)):.6g}")


@pytest.mark.parametrize("name", [c.name for c in CASES], ids=[f"pc-{c.name}" for c in CASES])
def test_phase_crossovers_match_python_control(name):
    case = _BY_NAME[name]
    res, m = _ours(name)
    (gm, _, _, w180, _, _), _ = _theirs(name)
    top = float(res.response.freq.max())
    theirs = {float(w): float(g) for w, g in zip(w180, gm)
              if 0 < w <= top and math.isfinite(g) and g > 0}
    ours = {p.freq: p for p in m.phase_crossovers}
    pairs, only_ours, only_theirs = _match(list(ours), list(theirs))
    for w_ours, w_theirs in pairs:
        assert ours[w_ours].gain_margin_db == pytest.approx(20 * math.log10(theirs[w_theirs]),
                                                            rel=REL, abs=1e-7), (name, w_ours)
    for w in only_ours:
        L = _L(case, w)
        assert L.real < 0 and abs(L.imag) < 1e-8 * abs(L), (name, "our phase crossover is not one", w)
        _finding(name, f"python-control misses the phase crossover at {w:.9g} rad/s (L = {L.real:.6g})")
    for w in only_theirs:
        L = _L(case, w)
        assert not (L.real < 0 and abs(L.imag) < 1e-6 * abs(L)), (name, "we miss a phase crossover", w)
        why = " (an undamped pole pair: L is unbounded there, the contour goes round it)" \
            if abs(L) > 1e8 else ""
        _finding(name, f"python-control reports a phase crossover at {w:.9g} rad/s where "
                       f"L = {L:.6g}{why}")


def _boundary(case: LoopCase, k: float) -> bool:
    """k bounds the stable range next to 1: stable on the way there, unstable just beyond."""
    path = np.geomspace(1.0, k, 25)[1:-1]
    beyond = k * (1.001 if k > 1 else 1 / 1.001)
    inside = k * (1 / 1.001 if k > 1 else 1.001)
    return all(_stable_at(case, x) for x in path) and _stable_at(case, inside) \
        and not _stable_at(case, beyond)


@pytest.mark.parametrize("name", [c.name for c in STABLE], ids=[f"pc-{c.name}" for c in STABLE])
def test_gain_margins_vs_closed_loop_roots_and_python_control(name):
    case = _BY_NAME[name]
    res, m = _ours(name)
    assert res.stable and res.margins is not None, name
    for db, side in ((m.gain_margin_up_db, "up"), (m.gain_margin_down_db, "down")):
        if db is None:
            far = 1e6 if side == "up" else 1e-6
            assert all(_stable_at(case, k) for k in np.geomspace(1.0, far, 13)), (name, side, "unbounded")
        else:
            assert _boundary(case, 10 ** (db / 20)), (name, side, db)
    (_, _, _, _, _, _), (gm, pm, _, wpc, wgc, _) = _theirs(name)
    if m.phase_margin_deg is not None and math.isfinite(pm):
        assert m.phase_margin_deg == pytest.approx(abs(pm), rel=REL, abs=1e-7), name
    if not (math.isfinite(gm) and gm > 0):
        return  # python-control states no gain margin: ours were checked against the roots above
    if _boundary(case, gm):
        assert m.gain_margin_db == pytest.approx(abs(20 * math.log10(gm)), rel=REL, abs=1e-7), name
    else:
        _finding(name, f"python-control's gain margin {20 * math.log10(gm):+.4g} dB at {wpc:.6g} rad/s "
                       "is a phase crossover, not a bound of the stable gains (numpy.roots of "
                       f"den + k num); ours: up {m.gain_margin_up_db}, down {m.gain_margin_down_db}")


# ----------------------------------------------------------------- multi-loop models (cascades)
# Breaks of nested cascades (tests/reference/loopsets.py `nested_cascade`, fixed seeds): each
# break's L_k (other loops closed) is rebuilt independently in python-control (`Wiring.loop`,
# L = -G) and its `stability_margins(returnall=True)` crossovers compared with ours; the gain
# margins are checked on the whole closed loop (`control.interconnect` poles) with the cut
# wire closed again with the factor: stable on the way, unstable just beyond. Inner breaks see
# the outer integrators closed (P_k may be > 0) while the contour still indents round them.

_CASCADES = [(2, 4.0), (3, 3.0), (4, 2.0), (5, 2.5)]


def _stable_with_factor(g, k: float) -> bool:
    """Close the cut wire again with a factor k: v = k y around python-control's state-space
    G from the injection v to the cut signal y (all block states kept, other loops closed),
    x' = (A + B k C / (1 - k D)) x; stable iff every eigenvalue is in the open left half plane."""
    A, B, C, D = (np.asarray(m, float) for m in (g.A, g.B, g.C, g.D))
    A_cl = A + (k / (1.0 - k * D[0, 0])) * (B @ C)
    return bool(np.all(np.linalg.eigvals(A_cl).real < 0))


@functools.lru_cache(maxsize=None)
def _cascade(n: int, separation: float):
    from loopwise.analysis import check_text
    from .loopsets import nested_cascade
    c = nested_cascade(n, seed=31, separation=separation)
    return c, check_text(c.text(), file=f"<cascade {n}>")


@pytest.mark.parametrize("n, separation", _CASCADES,
                         ids=[f"pc-interconnect-cascade{n}-sep{s}" for n, s in _CASCADES])
def test_cascade_break_margins_vs_python_control(n, separation):
    cascade, res = _cascade(n, separation)
    wiring = cascade.wiring()
    assert res.stable
    for b in res.breaks:
        m = b.margins
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            Lk = -control.ss2tf(wiring.loop(b.name))
            gm, pm, _, w180, wc, _ = control.stability_margins(Lk, returnall=True)
        ours = [g.freq for g in m.gain_crossovers]
        theirs = sorted(float(w) for w in wc if w > 0)
        assert ours == pytest.approx(theirs, rel=1e-6), (b.name, ours, theirs)
        assert [g.phase_margin_deg for g in m.gain_crossovers] == \
            pytest.approx([abs(p) for _, p in sorted(zip(wc, pm)) if _ > 0], rel=1e-6), b.name
        top = b.response.freq.max()
        theirs = sorted(float(w) for w, g in zip(w180, gm) if 0 < w <= top and np.isfinite(g))
        for w in theirs[:]:
            L = complex(wiring.loop_response(b.name, np.array([1j * w]))[0])
            if abs(L) < 1e-9:  # L has zeros at s = 0 (outer integrators closed): the origin
                theirs.remove(w)
                _finding(f"cascade{n}/{b.name}", f"python-control reports a phase crossover at "
                         f"{w:.6g} rad/s where |L| = {abs(L):.2g} (the zeros of L at s = 0 come out "
                         "of ss2tf as tiny complex pairs; the curve only passes the origin there)")
        assert [p.freq for p in m.phase_crossovers] == pytest.approx(theirs, rel=1e-6), b.name
        g = wiring.loop(b.name)
        for db, side in ((m.gain_margin_up_db, "up"), (m.gain_margin_down_db, "down")):
            if db is None:
                far = 1e6 if side == "up" else 1e-6
                assert all(_stable_with_factor(g, k) for k in np.geomspace(1, far, 25)), (b.name, side)
                continue
            k = 10 ** (db / 20)
            path = np.geomspace(1.0, k, 25)[1:-1]
            beyond, inside = (k * 1.001, k / 1.001) if k > 1 else (k / 1.001, k * 1.001)
            assert all(_stable_with_factor(g, x) for x in [*path, inside]), (b.name, side, db)
            assert not _stable_with_factor(g, beyond), (b.name, side, db)


def test_python_control_states_gain_margins_for_most_stable_loops():
    """The gain-margin comparison above has teeth only where python-control gives a finite
    margin: it must do so for a good share of the stable set (counted directly here)."""
    assert len(STABLE) >= 40
    finite = sum(1 for c in STABLE if math.isfinite(_theirs(c.name)[1][0]) and _theirs(c.name)[1][0] > 0)
    assert finite >= len(STABLE) // 3, (finite, len(STABLE))
