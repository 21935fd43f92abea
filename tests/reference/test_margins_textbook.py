"""Margins of analytic and published loops, through the whole engine (`analyse_loop`).

Every case names its source beside it. Values recalled from memory are marked
"from memory" and re-derived here: analytically (formula in a comment and in
the code), by numpy.roots of a polynomial, by scipy.optimize.brentq, or on a
dense numpy frequency grid (peaks: 2 million log-spaced points, whose spacing
puts the sampled maximum within 1e-9 of the true one).
"""
from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy.optimize import brentq

from loopwise.testing import analyse_loop
from loopwise.transfer import Transfer


def _margins(L: Transfer):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = analyse_loop(L)
    assert res.stable and res.margins is not None
    return res.margins


def _grid_peak(L: Transfer, fn, lo: float, hi: float) -> tuple[float, float]:
    """max over a dense log grid of fn(L(jw)): (value, frequency)."""
    w = np.geomspace(lo, hi, 2_000_001)
    v = fn(L.evaluate(1j * w))
    i = int(np.argmax(v))
    return float(v[i]), float(w[i])


def _S(L):
    return 1 / np.abs(1 + L)


def _T(L):
    return np.abs(L) / np.abs(1 + L)


def _balanced(L):
    return np.abs(1 - L) / np.abs(1 + L)


def _db(x: float) -> float:
    return 20 * math.log10(x)


# --- K / (s (s + 1) (s + 5)) -------------------------------------------------------------------
# From memory (a classic worked example, e.g. Ogata, Modern Control Engineering): re-derived.
# s(s+1)(s+5) at s = jw is -6 w^2 + j w (5 - w^2): real (negative) at w^2 = 5, where it is -30,
# so L(j sqrt 5) = -K/30 and GM = 30/K. Gain crossover: w^2 (1 + w^2)(25 + w^2) = K^2, a cubic in
# x = w^2; PM = 90 - atan(w) - atan(w/5) deg. K = 10: w = 1.227 rad/s, PM = 25.4 deg.
@pytest.mark.parametrize("K", [2.0, 10.0, 20.0], ids=lambda K: f"type1-three-poles-K{K:g}-from-memory")
def test_type1_three_poles(K):
    m = _margins(Transfer.from_zpk([], [0, -1, -5], K))
    x = max(r.real for r in np.roots([1, 26, 25, -K * K]) if abs(r.imag) < 1e-12 and r.real > 0)
    wc = math.sqrt(x)
    assert [p.freq for p in m.phase_crossovers] == pytest.approx([math.sqrt(5)], rel=1e-12)
    assert m.gain_margin_up_db == pytest.approx(_db(30 / K), rel=1e-10)
    assert m.gain_margin_down_db is None
    assert m.crossover_freq == pytest.approx(wc, rel=1e-12)
    pm = 90 - math.degrees(math.atan(wc) + math.atan(wc / 5))
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-10)
    if K == 10.0:
        assert wc == pytest.approx(1.227, abs=5e-4) and pm == pytest.approx(25.4, abs=0.05)


# --- 3 / (s + 1)^3 ---------------------------------------------------------------------------------
# Astrom & Murray, Feedback Systems (Princeton University Press), the chapter on robust
# performance, from memory: GM 8/3 at sqrt 3, PM about 41.7 deg, Ms about 2.2. Re-derived:
# (1 + j sqrt 3)^3 = (2 e^{j pi/3})^3 = -8, so L = -3/8 there; |L| = 1 at (1 + w^2)^(3/2) = 3,
# w = sqrt(3^(2/3) - 1); PM = 180 - 3 atan(w) deg. Ms confirmed on the dense grid.
def test_three_lags_astrom_murray():
    L = Transfer.from_zpk([], [-1, -1, -1], 3)
    m = _margins(L)
    assert m.phase_crossovers[0].freq == pytest.approx(math.sqrt(3), rel=1e-12)
    assert m.gain_margin_up_db == pytest.approx(_db(8 / 3), rel=1e-10)
    wc = math.sqrt(3 ** (2 / 3) - 1)
    assert m.crossover_freq == pytest.approx(wc, rel=1e-12)
    assert m.phase_margin_deg == pytest.approx(180 - 3 * math.degrees(math.atan(wc)), rel=1e-10)
    assert m.phase_margin_deg == pytest.approx(41.7, abs=0.05)
    ms, w_ms = _grid_peak(L, _S, 1e-2, 1e2)
    assert m.sensitivity_peak.value == pytest.approx(ms, rel=1e-9)
    assert m.sensitivity_peak.freq == pytest.approx(w_ms, rel=1e-4)
    assert m.sensitivity_peak.value == pytest.approx(2.2, abs=0.005)


# --- Seiler, Packard & Gahinet, "An Introduction to Disk Margins", IEEE Control Systems
# Magazine 40(5), 2020: L = 25/(s^3 + 10 s^2 + 10 s + 10), balanced disk margin alpha about 0.46
# at about 1.94 rad/s, disk gain margin about [0.63, 1.59], disk phase margin about 25.8 deg.
# Our peak of |(1 - L)/(1 + L)| lies at 1.955 rad/s (dense grid below agrees); the paper's
# 1.94 is read from a frequency grid, hence the looser tolerance on the frequency.
def test_disk_margin_seiler_packard_gahinet_2020():
    L = Transfer.from_coeffs([25], [1, 10, 10, 10])
    d = _margins(L).disk_margin
    assert d.alpha == pytest.approx(0.46, abs=0.005)
    assert d.freq == pytest.approx(1.94, abs=0.02)
    assert 10 ** (d.gain_db[0] / 20) == pytest.approx(0.63, abs=0.005)
    assert 10 ** (d.gain_db[1] / 20) == pytest.approx(1.59, abs=0.005)
    assert d.phase_deg == pytest.approx(25.8, abs=0.05)
    peak, w = _grid_peak(L, _balanced, 1e-2, 1e2)
    assert d.alpha == pytest.approx(2 / peak, rel=1e-9)
    assert d.freq == pytest.approx(w, rel=1e-4)
    # the disk's gain interval and phase from alpha (the paper's formulas)
    assert 10 ** (d.gain_db[1] / 20) == pytest.approx((2 + d.alpha) / (2 - d.alpha), rel=1e-12)
    assert d.phase_deg == pytest.approx(math.degrees(2 * math.atan(d.alpha / 2)), rel=1e-12)


# --- Skogestad & Postlethwaite, Multivariable Feedback Control, 2nd ed. (2005), chapter 2 ----------
# G = 3(-2s + 1)/((5s + 1)(10s + 1)), K = 1.136 (1 + 1/(12.7 s)): GM about 1.63, PM about 19.4 deg,
# Ms about 3.92, Mt about 3.35 (from memory). Confirmed: crossovers against numpy.roots of
# |num(jw)|^2 - |den(jw)|^2 and Im L(jw) numerators, peaks on the dense grid; the book's peaks are
# rounded from a grid (3.91 and 3.34 here), hence tolerances of 0.5 %.
def test_skogestad_postlethwaite_chapter2():
    G = Transfer.from_coeffs([-6, 3], [50, 15, 1])
    K = Transfer.from_coeffs([1.136 * 12.7, 1.136], [12.7, 0])
    L = G * K
    m = _margins(L)
    assert 10 ** (m.gain_margin_up_db / 20) == pytest.approx(1.63, abs=0.01)
    assert m.phase_margin_deg == pytest.approx(19.4, abs=0.05)
    assert m.sensitivity_peak.value == pytest.approx(3.92, rel=5e-3)
    assert m.complementary_peak.value == pytest.approx(3.35, rel=5e-3)
    for peak, fn in ((m.sensitivity_peak, _S), (m.complementary_peak, _T)):
        v, w = _grid_peak(L, fn, 1e-3, 1e1)
        assert peak.value == pytest.approx(v, rel=1e-9)
        assert peak.freq == pytest.approx(w, rel=1e-4)
    _check_crossovers_by_roots(L, m)


def _check_crossovers_by_roots(L: Transfer, m) -> None:
    """Crossover frequencies as polynomial roots (numpy.roots), delay-free L only."""
    num = np.poly(L.zeros).real * L.gain
    den = np.poly(L.poles).real
    # N(jw) conj(D(jw)): its real and imaginary parts are polynomials in w
    n_w = np.array([c * (1j) ** (len(num) - 1 - k) for k, c in enumerate(num)])
    d_w = np.array([c * (1j) ** (len(den) - 1 - k) for k, c in enumerate(den)])
    mag = np.polysub(np.polymul(n_w, n_w.conj()), np.polymul(d_w, d_w.conj())).real
    cross = np.polymul(n_w, d_w.conj())
    gains = sorted(r.real for r in np.roots(mag) if abs(r.imag) < 1e-9 * abs(r) and r.real > 0)
    assert [g.freq for g in m.gain_crossovers] == pytest.approx(gains, rel=1e-8)
    phase = [r.real for r in np.roots(cross.imag) if abs(r.imag) < 1e-9 * abs(r) and r.real > 0]
    phase = sorted(w for w in phase if L.evaluate(np.array([1j * w]))[0].real < 0)
    assert [p.freq for p in m.phase_crossovers] == pytest.approx(phase, rel=1e-8)


# --- First order plus dead time K e^{-theta s}/(tau s + 1), K = tau = theta = 1 ------------------------
# Phase: -atan(w tau) - w theta = -pi at the ultimate frequency, i.e. w = pi - atan(w) (tau = theta = 1);
# the ultimate gain is 1/|L(j wu)| = sqrt(1 + wu^2)/K. Solved here with scipy.optimize.brentq:
# wu = 2.0288 rad/s, Ku = 2.2618. No gain crossover (|L| < 1 for w > 0).
def test_fopdt_ultimate_gain_and_frequency():
    m = _margins(Transfer.from_zpk([], [-1], 1, delay=1.0))
    wu = brentq(lambda w: w - math.pi + math.atan(w), 1.0, 3.0, xtol=1e-15)
    assert m.phase_crossovers[0].freq == pytest.approx(wu, rel=1e-12)
    assert m.gain_margin_up_db == pytest.approx(_db(math.sqrt(1 + wu * wu)), rel=1e-10)
    assert wu == pytest.approx(2.029, abs=1e-3) and math.sqrt(1 + wu * wu) == pytest.approx(2.262, abs=1e-3)
    assert m.gain_crossovers == () and m.phase_margin_deg is None and m.delay_margin_s is None


# --- Integrator with delay K e^{-sT}/s: analytic ------------------------------------------------------
# |L| = K/w: gain crossover at w = K; arg L = -90 - K T (deg: K T 180/pi), so PM = 90 - K T 180/pi and
# the delay margin (pi/2 - K T)/K = pi/(2K) - T. Phase crossover: w T = pi/2, GM = w/K = pi/(2 K T).
@pytest.mark.parametrize("K,T", [(1.0, 0.2), (0.5, 1.0), (3.0, 0.05)],
                         ids=lambda v: f"analytic-integrator-delay-{v}")
def test_integrator_with_delay(K, T):
    m = _margins(Transfer.from_zpk([], [0], K, delay=T))
    assert m.crossover_freq == pytest.approx(K, rel=1e-12)
    assert m.phase_margin_deg == pytest.approx(90 - K * T * 180 / math.pi, rel=1e-10)
    assert m.delay_margin_s == pytest.approx(math.pi / (2 * K) - T, rel=1e-10)
    assert m.phase_crossovers[0].freq == pytest.approx(math.pi / (2 * T), rel=1e-12)
    assert m.gain_margin_up_db == pytest.approx(_db(math.pi / (2 * K * T)), rel=1e-10)
    assert m.gain_margin_down_db is None


# --- Open-loop unstable 2(s + 1)/(s (s - 1)): analytic (our own example) -----------------------------
# Closed loop of k L: s^2 + (2k - 1) s + 2k, stable iff k > 1/2 (Routh): GM down = -6.02 dB, no GM up.
# |L|^2 = 4(1 + w^2)/(w^2 (1 + w^2)) = 4/w^2: crossover at w = 2; arg L = 2 atan(w) - 270 deg, so
# lag = 2 atan 2 - 90 = 36.87 deg. Phase crossover where 2 atan(w) = 90: w = 1, L = -2 (GM -6.02 dB).
def test_open_loop_unstable_with_integrator():
    m = _margins(Transfer.from_zpk([-1], [0, 1], 2))
    assert m.gain_margin_down_db == pytest.approx(_db(0.5), rel=1e-10)
    assert m.gain_margin_up_db is None
    assert m.crossover_freq == pytest.approx(2.0, rel=1e-12)
    assert m.phase_margin_deg == pytest.approx(2 * math.degrees(math.atan(2)) - 90, rel=1e-10)
    assert [(p.freq, p.gain_margin_db) for p in m.phase_crossovers] == \
        [pytest.approx((1.0, _db(0.5)), rel=1e-10)]


# --- Conditionally stable 200 (s + 1)^2 / (s^3 (s + 10)(s + 20)) (our own example) ---------------------
# Both margins exist: too little gain and too much gain both destabilise. Reference: numpy.roots of
# the closed-loop polynomial s^3 (s + 10)(s + 20) + k 200 (s + 1)^2 just inside and just outside each
# bound, and at every factor between; crossovers against numpy.roots as above.
def test_conditionally_stable_both_margins():
    L = Transfer.from_zpk([-1, -1], [0, 0, 0, -10, -20], 200)
    m = _margins(L)
    assert m.gain_margin_up_db is not None and m.gain_margin_down_db is not None
    den, num = np.poly([0, 0, 0, -10, -20]), 200 * np.poly([-1, -1])

    def stable(k):
        return bool(np.all(np.roots(np.polyadd(den, k * num)).real < 0))

    k_up, k_down = 10 ** (m.gain_margin_up_db / 20), 10 ** (m.gain_margin_down_db / 20)
    assert all(stable(k) for k in np.geomspace(k_down * 1.0001, k_up / 1.0001, 50))
    assert not stable(k_up * 1.0001) and not stable(k_down / 1.0001)
    _check_crossovers_by_roots(L, m)


# --- Two gain crossovers: 2000 (s + 0.1)/((s + 1)(s + 20)^2) (our own example) ------------------------
# |L(0)| = 0.5 < 1, the lead lifts |L| above 1 in mid band and the poles bring it back: two gain
# crossovers. The loop's phase margin is the smaller of the two, crossover_freq the higher; crossover
# frequencies against numpy.roots of |num(jw)|^2 - |den(jw)|^2; phase there by direct evaluation.
def test_two_gain_crossovers():
    L = Transfer.from_zpk([-0.1], [-1, -20, -20], 2000)
    m = _margins(L)
    assert len(m.gain_crossovers) == 2
    _check_crossovers_by_roots(L, m)
    for g in m.gain_crossovers:
        lag = (math.degrees(np.angle(L.evaluate(np.array([1j * g.freq]))[0])) + 180) % 360
        assert g.lag_deg == pytest.approx(lag, rel=1e-10)
        assert g.phase_margin_deg == pytest.approx(min(lag, 360 - lag), rel=1e-10)
    assert m.phase_margin_deg == min(g.phase_margin_deg for g in m.gain_crossovers)
    assert m.crossover_freq == max(g.freq for g in m.gain_crossovers)
    assert m.gain_crossovers[0].lag_deg > 180  # L sits in the upper half plane at the first crossover
    assert m.gain_margin_up_db is None and m.gain_margin_down_db is None


# --- Delay margin of a first-order loop with delay: analytic ------------------------------------------
# L = 2 e^{-0.3 s}/(s + 1): |L| = 1 at w = sqrt 3; lag = 180 - atan(sqrt 3) - 0.3 sqrt 3 (rad -> deg)
# = 120 deg - 0.3 sqrt 3 rad; delay margin = lag_rad / sqrt 3.
def test_delay_margin_first_order_with_delay():
    m = _margins(Transfer.from_zpk([], [-1], 2, delay=0.3))
    w = math.sqrt(3)
    lag = math.pi - math.atan(w) - 0.3 * w
    assert m.crossover_freq == pytest.approx(w, rel=1e-12)
    assert m.gain_crossovers[0].lag_deg == pytest.approx(math.degrees(lag), rel=1e-10)
    assert m.delay_margin_s == pytest.approx(lag / w, rel=1e-10)
