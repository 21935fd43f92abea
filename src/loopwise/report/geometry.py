"""Pure geometry behind the plots: the compressed outer ring, the closed curve,
crossovers read off the engine's samples. numpy only (no drawing here), so the
tests can check the mathematics without a figure.

Everything starts from the engine's `LoopResponse`; nothing evaluates the loop again.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..results import BreakResult, LoopResponse
from .summary import break_status as verdict_word  # the tables' word for a break's verdict

__all__ = [
    "Ring", "choose_ring", "closed_curve", "winding_number", "Crossing",
    "crossings", "unwrapped_phase_deg", "verdict_word", "bode_range", "decade_label",
    "gap_at_axis_poles",
]

#: radius of the true-scale disk when a ring is drawn: -1 and the unit circle
#: (every gain crossover) sit inside the uncompressed part, so the compression
#: cannot change a winding about -1
MAX_INNER = 3.0
#: a curve that stays within this radius is drawn true to scale, without a ring
TRUE_SCALE_UP_TO = 6.0


@dataclass(frozen=True)
class Ring:
    """Radial compression: identity up to `inner`, then a bounded log-type map.

    For r > R0:  rho(r) = R0 + W * d / (1 + d),  d = log10(r / R0).
    Each decade beyond R0 covers half of what is left of the ring of width W
    (10x R0 lands at R0 + W/2, 100x at R0 + 2W/3, 1000x at R0 + 3W/4), so every
    far stretch stays on the page. The map keeps angles, is continuous and
    strictly increasing in r, and is the identity on the disk |z| <= R0, which
    contains -1: it is a homeomorphism of the plane fixing -1, so the drawn curve
    winds around -1 exactly as often as the true one.
    """

    inner: float
    width: float

    @property
    def outer(self) -> float:
        return self.inner + self.width

    def compress(self, z: np.ndarray) -> np.ndarray:
        z = np.asarray(z, dtype=complex)
        r = np.abs(z)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            d = np.log10(np.maximum(r, self.inner) / self.inner)
            rho = np.where(r > self.inner, self.inner + self.width * d / (1.0 + d), r)
            rho = np.where(np.isinf(r), self.outer, rho)
        return np.where(r > 0, np.exp(1j * np.angle(z)) * rho, 0j)

    def expand(self, w: np.ndarray) -> np.ndarray:
        """The inverse of `compress` (points on the outer edge map to infinity)."""
        w = np.asarray(w, dtype=complex)
        rho = np.abs(w)
        with np.errstate(divide="ignore", invalid="ignore"):
            f = np.clip((rho - self.inner) / self.width, 0.0, 1.0)
            d = f / (1.0 - f)
            r = np.where(rho > self.inner, self.inner * 10.0 ** d, rho)
            out = np.where(rho > 0, w / np.where(rho > 0, rho, 1.0) * r, w)
        return out

    def radius_of(self, r: float) -> float:
        """Drawn radius of a true radius (for the ring's decade marks)."""
        return float(np.abs(self.compress(np.array([r], dtype=complex)))[0])

    def note(self) -> str:
        return (f"|L| > {self.inner:g}: radius drawn as {self.inner:g} + {self.width:g}"
                f"\u00b7d/(1+d), d = log10(|L|/{self.inner:g})")


def choose_ring(response: LoopResponse) -> Ring | None:
    """The ring for a curve, or None when the whole curve fits the inner view.

    A curve that stays within TRUE_SCALE_UP_TO is drawn true to scale; otherwise the
    disk of radius MAX_INNER (which holds -1, the unit circle and so every gain
    crossover) stays true to scale and only the far stretches (around axis
    poles, or a large gain) go on the ring.
    """
    r = np.abs(response.L)
    finite = r[np.isfinite(r)]
    peak = float(finite.max()) if finite.size else math.inf
    if peak <= TRUE_SCALE_UP_TO and finite.size == r.size:
        return None
    inner = MAX_INNER
    return Ring(inner=inner, width=0.75 * inner)


def closed_curve(response: LoopResponse) -> tuple[np.ndarray, np.ndarray]:
    """(upper half, mirror half): the mirror is conj(L) reversed (negative frequencies)."""
    upper = np.asarray(response.L, dtype=complex)
    return upper, np.conj(upper[::-1])


def winding_number(z: np.ndarray, about: complex = -1.0) -> int:
    """Clockwise turns of the closed polyline z around `about` (sum of angle steps)."""
    z = np.asarray(z, dtype=complex) - about
    if z.size < 2:
        return 0
    z = np.append(z, z[0])
    steps = np.angle(z[1:] / z[:-1])
    return int(round(-steps.sum() / (2 * math.pi)))


def unwrapped_phase_deg(response: LoopResponse) -> np.ndarray:
    """Phase of L on the axis, continuous along ascending frequency (np.unwrap)."""
    return np.degrees(np.unwrap(np.angle(response.axis_L)))


@dataclass(frozen=True)
class Crossing:
    """A crossover to mark. kind: 'gain' (|L| = 1) or 'phase' (L real, negative).

    `point` is where L stands at the crossover; `margin` is the phase margin
    (deg) or gain margin (dB); `exact` is False when read off the samples
    (the engine claims no margins for an unstable closed loop).
    """

    kind: str
    freq: float
    point: complex
    margin: float
    lag_deg: float | None
    exact: bool


#: phase crossovers further than this from 0 dB are not marked (a delay makes
#: endless ones far below 0 dB that say nothing about a margin)
FAR_DB = 40.0
MAX_MARKS = 4


def crossings(result: BreakResult) -> tuple[Crossing, ...]:
    """The crossovers worth marking: every gain crossover (up to MAX_MARKS, smallest
    phase margin first) and the phase crossovers within FAR_DB of 0 dB (up to
    MAX_MARKS, smallest |gain margin| first), in frequency order."""
    every = _all_crossings(result)
    gain = sorted((c for c in every if c.kind == "gain"), key=lambda c: c.margin)[:MAX_MARKS]
    phase = sorted((c for c in every if c.kind == "phase" and abs(c.margin) <= FAR_DB),
                   key=lambda c: abs(c.margin))[:MAX_MARKS]
    return tuple(sorted(gain + phase, key=lambda c: c.freq))


def _all_crossings(result: BreakResult) -> tuple[Crossing, ...]:
    """Crossovers from the engine's margins, else read off the axis samples."""
    m = result.margins
    if m is not None:
        out = []
        for g in m.gain_crossovers:
            # L e^{-j lag} = -1  =>  L = -e^{j lag}
            out.append(Crossing("gain", g.freq, -np.exp(1j * math.radians(g.lag_deg)),
                                g.phase_margin_deg, g.lag_deg, True))
        for p in m.phase_crossovers:
            out.append(Crossing("phase", p.freq, complex(-(10.0 ** (-p.gain_margin_db / 20.0))),
                                p.gain_margin_db, None, True))
        return tuple(out)
    if result.response is None:
        return ()
    return _crossings_from_samples(result.response)


def _interp(w0, w1, a, b) -> float:
    """Frequency where a linear-in-log-frequency quantity crosses zero between samples."""
    t = a / (a - b)
    if w0 > 0 and w1 > 0:
        return float(math.exp(math.log(w0) + t * (math.log(w1) - math.log(w0))))
    return float(w0 + t * (w1 - w0))


def _crossings_from_samples(response: LoopResponse) -> tuple[Crossing, ...]:
    w, L = response.freq, response.axis_L
    ok = np.isfinite(L)
    w, L = w[ok], L[ok]
    out: list[Crossing] = []
    if w.size < 2:
        return ()
    mag = np.log(np.abs(L) + 1e-300)
    for i in np.nonzero(np.sign(mag[:-1]) * np.sign(mag[1:]) < 0)[0]:
        f = _interp(w[i], w[i + 1], mag[i], mag[i + 1])
        t = mag[i] / (mag[i] - mag[i + 1])
        z = L[i] + t * (L[i + 1] - L[i])
        z = z / abs(z) if z != 0 else z
        lag = math.degrees(np.angle(-z)) % 360.0  # L = -e^{j lag}
        out.append(Crossing("gain", f, z, min(lag, 360.0 - lag), lag, False))
    im = L.imag
    for i in np.nonzero(np.sign(im[:-1]) * np.sign(im[1:]) < 0)[0]:
        t = im[i] / (im[i] - im[i + 1])
        re = float(L[i].real + t * (L[i + 1].real - L[i].real))
        if re < 0:
            f = _interp(w[i], w[i + 1], im[i], im[i + 1])
            out.append(Crossing("phase", f, complex(re), -20.0 * math.log10(-re), None, False))
    return tuple(out)


def bode_range(response: LoopResponse, marks: tuple[Crossing, ...]) -> np.ndarray:
    """Mask of the axis samples worth a Bode view: from three decades below to two
    decades above the crossovers and axis poles (all samples when there are none).

    The engine may sample far beyond; there a delay's phase runs to thousands of
    degrees and would flatten the region that matters. Two decades above the
    last crossover still show a delay's roll-off.
    """
    w = response.freq
    keys = [c.freq for c in marks] + [p for p in response.axis_poles if p > 0]
    if not keys:
        return np.ones(w.size, bool)
    lo, hi = min(keys) / 1e3, max(keys) * 1e2
    return (w >= lo) & (w <= hi)


def gap_at_axis_poles(response: LoopResponse, x: np.ndarray, scale: float, *ys: np.ndarray):
    """The arrays with a NaN between the two samples either side of each axis
    pole (x ascending, in units of `scale` rad/s), so a drawn line does not jump
    straight across a pole that is not on the axis."""
    poles = sorted(p * scale for p in response.axis_poles if p > 0)
    cuts = [int(i) for i in np.searchsorted(x, poles) if 0 < i < x.size]
    if not cuts:
        return (x, *ys)
    return tuple(np.insert(np.asarray(a, float), cuts, np.nan) for a in (x, *ys))


_SUPERSCRIPT = str.maketrans("-0123456789", "\u207b\u2070\u00b9\u00b2\u00b3\u2074\u2075\u2076\u2077\u2078\u2079")


def decade_label(x: float, _pos=None) -> str:
    """1, 10, 10\u00b2, 10\u207b\u00b9 in plain Unicode for log axes (math-text typesetting
    costs about a second a figure); empty between decades."""
    if x <= 0:
        return ""
    k = math.log10(x)
    if abs(k - round(k)) > 1e-9:
        return ""
    k = int(round(k))
    return {0: "1", 1: "10"}.get(k, "10" + str(k).translate(_SUPERSCRIPT))
