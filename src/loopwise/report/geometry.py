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
    "Ring", "choose_ring", "closed_curve", "Crossing",
    "crossings", "unwrapped_phase_deg", "low_frequency_asymptote", "verdict_word", "bode_range",
    "decade_label",
    "gap_at_axis_poles", "Unmarked", "select_crossings", "Zoom", "zoom_near_critical",
    "ZOOM_BELOW", "densify_ring_arcs", "simplify_mask",
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
        """The ring's outer radius on the page: where |L| = infinity is drawn."""
        return self.inner + self.width

    def compress(self, z: np.ndarray) -> np.ndarray:
        """Where points z of the true plane are drawn: unchanged inside the ring's inner
        radius, beyond it at `inner + width d/(1 + d)` with d the decades past `inner`,
        at the same angle (infinity on the outer edge, 0 stays 0)."""
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
        """The map in words, for the figure's note (`|L| > 2: radius drawn as ...`)."""
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


def low_frequency_asymptote(response: LoopResponse) -> tuple[int, int]:
    """(n, sign): L ~ c / s^n with sign(c) = sign, read off the lowest axis samples.

    n is the net number of integrators at s = 0 (negative for zeros there), from
    the slope of log|L| against log w; c = L(jw) (jw)^n is then real up to the
    phase of the dynamics above, and its sign is that of the loop gain.
    """
    n, sign, _ = _asymptote(response)
    return n, sign


def _asymptote(response: LoopResponse) -> tuple[int, int, int]:
    """(n, sign, i): the asymptote and the axis sample it was read at.

    The slope is read between samples a factor 1.5 apart, and trusted only where it
    is near an integer and the next such step agrees: where a loop with zeros at
    s = 0 has fallen to rounding noise (|L| about 1e-80 at 1e-10 rad/s, inside a
    closed cascade), successive slopes are erratic and that stretch is skipped.
    With no such stretch: n = 0 and the sign of the lowest sample.
    """
    w, L = response.freq, response.axis_L
    idx = np.flatnonzero((w > 0) & np.isfinite(L) & (L != 0))
    if idx.size < 2:
        return 0, 1, int(idx[0]) if idx.size else 0
    w, L = w[idx], L[idx]
    lw, lm = np.log(w), np.log(np.abs(L))
    j = np.minimum(np.searchsorted(w, 1.5 * w), w.size - 1)
    k = j[j]
    with np.errstate(all="ignore"):
        s1 = (lm[j] - lm) / (lw[j] - lw)
        s2 = (lm[k] - lm[j]) / (lw[k] - lw[j])
    good = (np.isfinite(s1) & np.isfinite(s2) & (k > j) & (j > np.arange(w.size))
            & (np.abs(s1 - np.round(s1)) < 0.1) & (np.round(s1) == np.round(s2)))
    hits = np.flatnonzero(good)
    if hits.size == 0:
        return 0, (1 if L[0].real >= 0 else -1), int(idx[0])
    i = int(hits[0])
    n = -int(round(float(s1[i])))
    # the phase of c = L (jw)^n without the power (w^n under- or overflows for large n)
    phase = float(np.angle(L[i])) + n * math.pi / 2
    return n, (1 if math.cos(phase) >= 0 else -1), int(idx[i])


def unwrapped_phase_deg(response: LoopResponse) -> np.ndarray:
    """Phase of L on the axis (deg), continuous along the whole contour and
    anchored on the low-frequency asymptote.

    The unwrapping runs along the contour in traversal order, indentations
    included, so the phase steps by -180 m deg across an indented axis pole of
    order m as the contour really turns (np.unwrap on the axis samples alone
    cannot tell +180 from -180 there). The branch is then chosen so that, where the
    asymptote is read, the phase sits nearest to -90 n deg for n integrators, 180 deg
    lower for a negative gain: a type-3 loop starts at -270 deg, and its critical
    line is -180 deg.
    """
    L = np.asarray(response.L, complex)
    ok = np.isfinite(L) & (L != 0)
    phase = np.full(L.size, np.nan)
    phase[ok] = np.degrees(np.unwrap(np.angle(L[ok])))
    axis = phase[response.on_axis]
    first = np.flatnonzero(np.isfinite(axis) & (response.freq > 0))
    if first.size == 0:
        return axis
    n, sign, i = _asymptote(response)
    anchor = i if np.isfinite(axis[i]) else first[0]
    target = -90.0 * n - (180.0 if sign < 0 else 0.0)
    return axis + 360.0 * round((target - axis[anchor]) / 360.0)


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


MAX_MARKS = 4


@dataclass(frozen=True)
class Unmarked:
    """Crossovers left unmarked, summarised by one line of the key.

    kind: 'gain' or 'phase'; side: 'above' or 'below' the marked stretch, or
    'among' the marked ones; `freq` the edge they lie beyond (rad/s); `closest`
    the smallest |gain margin| (dB) or phase margin (deg) among them; `sign` +1
    when every one of them has |L| below 0 dB there, -1 above, 0 mixed.
    """

    kind: str
    side: str
    count: int
    freq: float
    closest: float
    sign: int


def crossings(result: BreakResult) -> tuple[Crossing, ...]:
    """The crossovers to mark, in frequency order (see `select_crossings`)."""
    return select_crossings(result)[0]


def select_crossings(result: BreakResult) -> tuple[tuple[Crossing, ...], tuple[Unmarked, ...]]:
    """(marked, unmarked groups): what the views mark and what the key summarises.

    Marked: every gain crossover (up to MAX_MARKS, smallest phase margin first);
    the phase crossovers between the lowest and the highest marked gain crossover
    (up to MAX_MARKS, smallest |gain margin| first); and on each side beyond
    them, the phase crossover nearest to them and the one with the smallest
    |gain margin| on that side (the one that sets the margin). A delay adds
    endless phase crossovers above the last gain crossover, ever further below
    0 dB: they say nothing about a margin and are only counted in the key.
    """
    every = sorted(_all_crossings(result), key=lambda c: c.freq)
    gains = [c for c in every if c.kind == "gain"]
    phases = [c for c in every if c.kind == "phase"]
    marked = sorted(gains, key=lambda c: c.margin)[:MAX_MARKS]
    groups = []
    if len(gains) > len(marked):
        rest = [c for c in gains if c not in marked]
        groups.append(Unmarked("gain", "among", len(rest), rest[0].freq,
                               min(c.margin for c in rest), 0))
    lo = min((c.freq for c in marked), default=math.inf)
    hi = max((c.freq for c in marked), default=-math.inf)
    # with no gain crossover every phase crossover counts as lying above
    below = [c for c in phases if c.freq < lo] if marked else []
    above = [c for c in phases if c.freq > hi] if marked else phases
    among = sorted((c for c in phases if lo <= c.freq <= hi), key=lambda c: abs(c.margin))
    marked += among[:MAX_MARKS]
    groups += _summary(among[MAX_MARKS:], "among", lo)
    for side, group in (("below", below[::-1]), ("above", above)):
        if not group:
            continue
        keep = {id(group[0]), id(min(group, key=lambda c: abs(c.margin)))}
        marked += [c for c in group if id(c) in keep]
        groups += _summary([c for c in group if id(c) not in keep], side, group[0].freq)
    return tuple(sorted(marked, key=lambda c: c.freq)), tuple(groups)


def _summary(rest: list[Crossing], side: str, edge: float) -> list[Unmarked]:
    if not rest:
        return []
    signs = {1 if c.margin > 0 else -1 for c in rest}
    sign = signs.pop() if len(signs) == 1 else 0
    return [Unmarked("phase", side, len(rest), edge, min(abs(c.margin) for c in rest), sign)]


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


#: the Nyquist view gets an inset around -1 when the curve comes closer than this
#: (|1 + L| below 0.3, i.e. a sensitivity peak above 3.3 or 10.5 dB)
ZOOM_BELOW = 0.3
#: the inset shows at least this far around -1, and at least 2.5x the closest distance
ZOOM_MIN_HALF = 0.05


@dataclass(frozen=True)
class Zoom:
    """The neighbourhood of -1 shown in the inset: a square of half-side `half`
    centred on -1 that holds the sample `closest` (distance |1 + L| = `distance`,
    at contour point `s`)."""

    half: float
    closest: complex
    distance: float
    s: complex
    index: int

    @property
    def limits(self) -> tuple[float, float, float, float]:
        """(x min, x max, y min, y max) of the inset: the square around -1."""
        return (-1.0 - self.half, -1.0 + self.half, -self.half, self.half)


def zoom_near_critical(response: LoopResponse) -> Zoom | None:
    """The inset to draw, or None when no sample of L comes within ZOOM_BELOW of -1."""
    L = np.asarray(response.L, complex)
    d = np.abs(1.0 + L)
    d = np.where(np.isfinite(d), d, np.inf)
    if d.size == 0:
        return None
    i = int(np.argmin(d))
    if not d[i] < ZOOM_BELOW:
        return None
    return Zoom(max(2.5 * float(d[i]), ZOOM_MIN_HALF), complex(L[i]), float(d[i]),
                complex(response.s[i]), i)


def densify_ring_arcs(z: np.ndarray, ring: Ring, step_deg: float = 1.0,
                      max_deg: float = 30.0) -> np.ndarray:
    """Points added between neighbours that both lie on the ring (drawn radius
    beyond `ring.inner`) so the drawn curve follows an arc, not a polygon.

    Around an axis pole L ~ c / (s - jw)^m: along the indentation |L| is constant
    and its angle turns evenly, so the curve there is an arc of the ring; the
    engine's samples are spaced for the winding count, not for the eye. The
    added points interpolate angle and drawn radius linearly (steps of at most
    `step_deg`); only steps under `max_deg` are filled. Between two points at
    radius >= 3 an arc of less than 30 deg and its chord enclose nothing within
    3 cos(15 deg) > 2 of the origin, so -1 (and the winding about it) is untouched.
    """
    z = np.asarray(z, complex)
    if z.size < 2:
        return z
    r, a = np.abs(z), np.angle(z)
    da = np.angle(z[1:] / np.where(z[:-1] != 0, z[:-1], 1))
    fill = ((r[:-1] > ring.inner) & (r[1:] > ring.inner) & np.isfinite(da)
            & (np.abs(np.degrees(da)) > step_deg) & (np.abs(np.degrees(da)) < max_deg))
    extra = np.where(fill, np.ceil(np.abs(np.degrees(da)) / step_deg).astype(int) - 1, 0)
    if not extra.any():
        return z
    seg = np.repeat(np.arange(z.size - 1), extra)
    k = np.concatenate([np.arange(1, e + 1) for e in extra if e]) / np.repeat(extra + 1, extra)
    new = (r[seg] + k * (r[seg + 1] - r[seg])) * np.exp(1j * (a[seg] + k * da[seg]))
    pos = np.repeat(np.arange(1, z.size), extra)
    return np.insert(z, pos, new)


def simplify_mask(p: np.ndarray, tol: float, guard: np.ndarray | None = None) -> np.ndarray:
    """Points of a polyline to keep so that every dropped point lies within `tol`
    of the segment that replaces it (Ramer-Douglas-Peucker on (n, 2) display
    coordinates, every open segment split at once per pass). Non-finite points
    (gaps) and their neighbours are kept.

    With `guard` (the critical point -1 in the same coordinates), a segment that
    replaces dropped points must also pass further than `tol` from it. The dropped
    stretch and its replacement then lie in the convex tol-neighbourhood of the
    segment, which does not hold the guard: the turns around it are unchanged.
    """
    p = np.asarray(p, float)
    finite = np.all(np.isfinite(p), axis=1)
    keep = ~finite
    keep[:1] = keep[-1:] = True
    keep[:-1] |= ~finite[1:]
    keep[1:] |= ~finite[:-1]
    q = np.where(finite[:, None], p, 0.0)
    g = None if guard is None else np.asarray(guard, float)[None]
    open_ = np.flatnonzero(~keep)  # points whose segment is not settled yet
    while open_.size:
        kept = np.flatnonzero(keep)
        seg = np.searchsorted(kept, open_) - 1  # the kept point before each open point
        a, b = kept[seg], kept[seg + 1]
        d = _segment_distance(q[open_], q[a], q[b])
        worst = np.full(kept.size, -1.0)
        np.maximum.at(worst, seg, d)
        split = worst > tol
        if g is not None:
            starts = np.unique(seg)
            near = _segment_distance(np.repeat(g, starts.size, axis=0), q[kept[starts]],
                                     q[kept[starts + 1]]) <= tol
            split[starts[near]] = True
        if not split.any():
            break
        hit = split[seg] & (d == worst[seg])
        first = np.flatnonzero(hit)
        _, at = np.unique(seg[first], return_index=True)
        keep[open_[first[at]]] = True
        open_ = open_[split[seg] & ~keep[open_]]  # settled segments drop out
    return keep


def _segment_distance(q: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Distance of each point q[i] to the segment a[i]-b[i] (rows broadcast)."""
    ab = b - a
    n = np.einsum("ij,ij->i", ab, ab) if ab.ndim == 2 else np.full(len(q), float(ab @ ab))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.einsum("ij,ij->i", q - a, np.broadcast_to(ab, q.shape)) / n
    t = np.clip(np.nan_to_num(t), 0.0, 1.0)
    return np.hypot(*(q - a - t[:, None] * ab).T)


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
