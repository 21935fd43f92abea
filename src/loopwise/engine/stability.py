"""The Nyquist verdict of every break and of the whole model, component by component.

det(I - A) = prod_c det(I - A_c) over the loop components (engine/reduce.py), so

    Z = P0_outside + sum_c (P0_c + wind(det(I - A_c)))

where P0_c counts the open right-half-plane poles of the terms inside component c
and P0_outside those of the terms on no loop (they have states but no part in any
determinant). Each component is traced on its own contour (its own indentations,
its own certified radius). For a break k of component c:
N_k = wind(1 + L_k), P_k = Z - N_k, and the component's own trace gives
P0_c + wind(det(I - A_c,k)) = Z_c - N_k, the consistency check.

The count uses the contour up to the certificate radius R. The margins also need
L_k further up the axis (a delayed loop can cross -180 deg beyond R), so each
break's response continues with an extension traced for the component's L_k alone.
The extension is traced in two pieces, split at the settling frequency (where the
reach grid shows every |L_k| below SETTLE_LEVEL for good): a sweep may trace the
first piece alone when that settles every value it records (`settled`; docs/method.md,
"The sweep's short extension").
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..results import LoopResponse
from .certificate import ImproperLoop, ScaledTerms, Uncertified, certificate_radius, closing_phases, scaling
from .reduce import Component, Reduction
from .refusals import check_range, check_span, check_values, improper_loop, out_of_range, uncertified_radius, unresolved
from .solve import distinct
from .winding import Piece, axis_orders, build_contour, encirclements, phase_change, principal_log, trace

__all__ = ["Contour", "NyquistCount", "ModelCount", "count", "prepare", "nyquist_counts", "reach_rule",
           "extension_pieces", "stops_short", "SETTLE_LEVEL", "ShortProbe", "settled"]

#: a closed-loop pole this close to the axis (|1 + L| relative to 1 + |L|) is called marginal
MARGINAL = 1e-8
#: the margins' extension of the axis runs until every |L_k| stays below this
REACH_LEVEL = 1e-3
#: the settling level: beyond the frequency where every |L_k| stays below it (on the reach
#: grid) no crossing, crossover or peak can change a margin value that is already worse
#: than the bounds it gives (1/l, 1/(1 - l), l/(1 - l), (1 + l)/(1 - l)); see `settled`
SETTLE_LEVEL = 1e-2
#: the reach grid: the margins' reach and the settling frequency are read on these
#: multiples of R (20 a decade)
REACH_GRID = np.logspace(-6.0, 4.0, 201)
#: the reach never exceeds this multiple of R (the grid's end)
REACH_CAP = 1e4
#: sample budget of the margins' extension (the count itself has the engine's own budget)
EXTENSION_SAMPLES = 60_000
#: a sweep's extension stops short only where the step rule asks under this share of the
#: budget (`stops_short`)
SHORT_BUDGET = 0.1
#: the extension's chord test: looser than the count's (no count depends on it; the delay
#: step rule still keeps every turn, and the crossings found are refined)
EXTENSION_CHORD = 0.6


@dataclass(frozen=True, eq=False)
class Contour:
    """What every count of one component shares: its contour, radius and open-loop facts.

    `axis_freqs` are the frequencies (rad/s, >= 0) of the indented poles; `axis_poles`
    the poles themselves (complex, on the imaginary axis).
    """

    component: Component
    pieces: tuple[Piece, ...]
    R: float
    reach: float
    P0: int
    features: np.ndarray
    axis_freqs: tuple[float, ...]
    indent: str
    roots: np.ndarray
    axis_poles: np.ndarray
    scaling: np.ndarray
    orders: dict
    terms: object  # certificate.ScaledTerms
    #: where the extension is split (`reach_rule`); None: traced in one piece
    settle: float | None = None

    def touching(self, freqs: tuple[float, ...]) -> "Contour":
        """The same contour with extra indentations around closed-loop poles on the axis."""
        pieces = build_contour(self.axis_poles, self.roots, self.R, self.indent, freqs, self.orders)
        return replace(self, pieces=tuple(pieces))


@dataclass(frozen=True, eq=False)
class NyquistCount:
    """One break's count on the indented contour: P, the poles of its loop transfer L inside
    the contour (strictly in the right half plane with the default indentation); N, the
    clockwise encirclements of -1 by L; Z = N + P, the closed loop's right-half-plane poles.
    `marginal` when 1 + L touches zero on the axis, at `marginal_freq` (rad/s); `warnings`
    as (code, message); `response`, L's samples along the contour for the margins."""

    P: int
    N: int
    Z: int
    marginal: bool
    marginal_freq: float | None
    warnings: tuple[tuple[str, str], ...]  # (code, message) of this break's warnings
    response: LoopResponse | None = None
    #: where `response` stops short of the margins' reach (a sweep's short extension,
    #: engine/batch.py); None when it runs the whole way, as in `check`
    short: float | None = None


@dataclass(frozen=True, eq=False)
class ModelCount:
    """The whole model's Z, its warnings, and every break's count."""

    Z: int
    warnings: tuple[tuple[str, str], ...]
    counts: dict[str, NyquistCount]


#: the seed grid's points beside a lightly damped root p: Im p + k |Re p|
_SIDES = np.array([-4, -2, -1, -0.5, 0.5, 1, 2, 4], float)[:, None]


def _features(roots: np.ndarray) -> np.ndarray:
    r = roots[roots != 0]
    upper = r[r.imag > 0]
    light = upper[np.abs(upper.real) < 0.2 * np.abs(upper)]
    f = np.concatenate([np.abs(r), upper.imag, (light.imag + _SIDES * np.abs(light.real)).ravel()])
    return distinct(f[f > 0])


def _open_rhp(poles: np.ndarray, indent: str) -> int:
    return int(np.sum(poles.real > 0)) + (int(np.sum(poles.real == 0)) if indent == "left" else 0)


def prepare(red: Reduction, indent: str = "right", for_margins: bool = True, values: bool = True) -> list[Contour]:
    """One contour per loop component; ModelError (located) where no radius certifies a
    count (LW401, LW403, LW404, LW406). With `values` False the terms' values below R are
    not checked for overflow (LW406): the caller checks them (batch.py, many samples at once)."""
    check_range(red)
    breaks = {c.stmt.name: c for c in red.diagram.breaks}
    out = []
    for comp in red.components:
        check_span(red, comp)
        try:
            d = scaling(comp)
        except ImproperLoop as exc:
            raise improper_loop(red, comp, exc) from None
        terms = ScaledTerms(comp, d)
        names = [None, *comp.breaks]
        try:
            R, _ = certificate_radius(comp, terms, [(), *comp.cut_positions])
        except Uncertified as exc:
            raise uncertified_radius(red, comp, breaks.get(names[exc.cut]), exc) from None
        if values:
            check_values(red, comp, R)
        poles, zeros = comp.roots()
        roots = np.concatenate([poles, zeros])
        axis = poles[poles.real == 0]
        orders = axis_orders(tf for _, _, _, tf in comp.entries)
        pieces = build_contour(axis, roots, R, indent, (), orders)
        reach, settle = _margin_reach(comp, R) if for_margins else (R, None)
        out.append(Contour(comp, tuple(pieces), R, reach, _open_rhp(poles, indent), _features(roots),
                           tuple(sorted({abs(p.imag) for p in axis})), indent, roots, axis, d, orders, terms,
                           settle))
    return out


def _margin_reach(comp: Component, R: float) -> tuple[float, float | None]:
    """How far up the axis the margins and pictures need samples, and where the extension
    is split (`reach_rule` on the reach grid)."""
    if not comp.breaks:
        return R, None
    w = R * REACH_GRID
    g = comp.values(1j * w).g
    with np.errstate(all="ignore"):
        mag = np.abs(g / (1.0 + g))
    return reach_rule(w, mag, R)


def reach_rule(w: np.ndarray, mag: np.ndarray, R: float) -> tuple[float, float | None]:
    """The margins' reach and the settling frequency, from |L_k| (`mag`, one row per grid
    frequency `w` = R * REACH_GRID, one column per break).

    The reach: until every |L_k| stays below REACH_LEVEL, and at least 30 times the last
    frequency where some |L_k| >= 1 (so that a delay's roll-off shows in a Bode view);
    at most REACH_CAP R. The settling frequency: the first grid frequency after the last
    where some |L_k| >= SETTLE_LEVEL (R when there is none), when it lies below the reach;
    None when it does not, or when the reach is capped (the grid then says nothing of the
    axis beyond the reach, where `check` may follow a curve on; curve.add_tail).

    Both rest on the grid's samples (20 a decade): between them |L_k| is not bounded.
    """
    n = w.size
    big = np.nonzero((~(mag < REACH_LEVEL)).any(axis=1))[0]
    unit = np.nonzero((~(mag < 1.0)).any(axis=1))[0]
    last_small = max(R, float(w[min(big[-1] + 1, n - 1)])) if big.size else R
    last_unit = float(w[unit[-1]]) if unit.size else 0.0
    reach = min(max(1.5 * last_small, 30.0 * last_unit, R), REACH_CAP * R)
    above = np.nonzero((~(mag < SETTLE_LEVEL)).any(axis=1))[0]
    if reach >= REACH_CAP * R or (above.size and above[-1] == n - 1):
        return reach, None
    settle = max(R, float(w[above[-1] + 1])) if above.size else R
    return reach, (settle if settle < reach else None)


def stops_short(ct: Contour, delay: float) -> bool:
    """Whether a sweep's short extension may stop at the contour's settling frequency: there
    is one, and the delay step rule alone (steps of pi/4 over the summed delays `delay`)
    asks under SHORT_BUDGET of the budget from R to the reach. Where check's whole
    extension could run out of its budget (LW581), the sweep traces it whole too. Below,
    a trace would need ten times the step rule's count to run out; the whole extensions of
    tests/sweep's delayed unstable loop took 2.6 to 4.5 times it (the most where the count
    is small and the 30-a-decade seeds weigh most): observed, not proven."""
    if ct.settle is None or ct.reach <= ct.R * (1 + 1e-12):
        return False
    return (ct.reach - ct.R) * delay / (np.pi / 4) <= SHORT_BUDGET * EXTENSION_SAMPLES


def extension_pieces(R: float, reach: float, settle: float | None, short: bool = False) -> list[Piece]:
    """The margins' extension from R to the reach: one piece, or two split at the settling
    frequency (then each piece's samples do not depend on the other's, so that a sweep may
    trace the first alone). With `short`, only the first piece (none when the settling
    frequency is R itself: the response then stops at R)."""
    if reach <= R * (1 + 1e-12):
        return []
    if settle is None:
        return [Piece("axis", R, reach, log=True)]
    pieces = [Piece("axis", R, settle, log=True)] if settle > R * (1 + 1e-12) else []
    return pieces if short else pieces + [Piece("axis", settle, reach, log=True)]


def count(red: Reduction, indent: str = "right", for_margins: bool = True) -> ModelCount:
    """Z of the whole model and every break's P, N, Z and contour samples."""
    contours = prepare(red, indent, for_margins)
    outside = [red.instances[k].transfer.poles for k in red.outside if red.instances[k].transfer is not None]
    outside += [t.app.transfer.poles for t in red.exogenous]
    Z = sum(_open_rhp(p, indent) for p in outside)
    warnings: list[tuple[str, str]] = []
    local: dict[str, tuple[NyquistCount, int]] = {}
    for ct in contours:
        Zc, warns, counts = _count_component(red, ct)
        warnings.extend(warns)
        Z += Zc
        local.update({name: (c, Zc) for name, c in counts.items()})
    # P_k sees the other components closed: their poles and those outside every loop
    counts = {name: replace(c, P=c.P + Z - Zc, Z=c.Z + Z - Zc) for name, (c, Zc) in local.items()}
    return ModelCount(Z, tuple(warnings), counts)


def _step_rule(comp: Component, red: Reduction):
    return comp.step_ok if comp.has_delay else None


def _max_step(comp: Component) -> float | None:
    """The seed grid's widest axis step with delays: 0.3 rad of the summed delays' phase
    (within the step rule's pi/4, and about what the chord rule asks of a curve a delay
    turns), so that few halving rounds remain."""
    total = float(comp.bank.delay.sum())
    return 0.3 / total if total > 0 else None


def _raw(comp: Component, s: np.ndarray, B: int) -> np.ndarray:
    log_det, log_one_g, L = comp.terms(s, B)
    with np.errstate(all="ignore"):
        return np.concatenate([log_det[:, None], log_one_g, principal_log(L)], axis=1)


def _origin_orders(comp: Component, ct: Contour, B: int) -> np.ndarray:
    """For each traced function f, an integer q with f ~ c s^-q next to s = 0, where the
    contour starts on an indentation round poles at the origin (else zeros).

    The trace follows f s^q instead, which is flat there: tens of integrators make
    det(I - A) fall by hundreds of dB a decade, and sampling that slope finely would
    serve nothing. Any integer q is exact (see _count_component); this one only saves
    samples.
    """
    first = ct.pieces[0]
    q = np.zeros(1 + 2 * B)
    if first.kind != "indent" or first.a != 0.0:
        return q
    eps = first.b
    s = np.array([2.0 * eps, 20.0 * eps]) * np.exp(1j * first.theta0)
    with np.errstate(all="ignore"):
        v = _raw(comp, s, B)
        slope = -(v[1].real - v[0].real) / np.log(10.0)
        whole = np.round(slope)
        ok = np.isfinite(slope) & (np.abs(slope - whole) < 0.05)
    return np.where(ok, whole, 0.0)


def _trace(red: Reduction, ct: Contour, with_breaks: bool = True):
    """Trace log det(I - A_c), log(1 + g_k) and log L_k for the component's breaks, each
    times s^q next to the origin (`_origin_orders`). Returns the trace (values with the
    s^q factors) and the q.

    arg det(I - A_c,k) = arg det(I - A_c) + arg(1 + g_k), arg(1 + L_k) = -arg(1 + g_k).
    """
    comp = ct.component
    B = len(comp.breaks) if with_breaks else 0
    q = _origin_orders(comp, ct, B)

    def evaluate(s):
        v = _raw(comp, s, B)
        # NaN beside a finite determinant is no pole hit (that makes the determinant 0 or
        # infinite) but an overflow of the solve: refuse at once rather than halving
        # intervals that can never settle until the sample budget runs out
        lost = np.isfinite(v[:, 0]) & np.isnan(v[:, 1:]).any(axis=1)
        if lost.any():
            raise out_of_range(red, comp, float(np.abs(s[lost][0])))
        if q.any():
            with np.errstate(all="ignore"):
                v = v + np.log(s)[:, None] * q[None, :]
        return v

    floors = (None,) * (1 + B) + (1e-2,) * B
    tr = trace(list(ct.pieces), evaluate, ct.features, floors, step_ok=_step_rule(comp, red), orders=q,
               max_step=_max_step(comp))
    if not tr.complete:
        names = comp.breaks[:B]
        raise unresolved(red, tr, ["the characteristic function det(I - A) of the model"]
                         + [f"the loop opened at break `{n}` (det(I - A_k))" for n in names]
                         + [f"the loop transfer L at break `{n}`" for n in names])
    return tr, q


def _steps(tr, q: np.ndarray) -> np.ndarray:
    """Continuous phase change of each traced function itself: that of f s^q (certified by
    the sampling rule) minus q times that of s, which runs from the contour's first point
    to j R exactly: arg s_end - arg s_start (both principal values, no turn in between)."""
    turn = float(np.angle(tr.s[-1]) - np.angle(tr.s[0]))
    return phase_change(tr.values) - q * turn


def _count_component(red: Reduction, ct: Contour) -> tuple[int, list, dict[str, NyquistCount]]:
    comp = ct.component
    tr, q = _trace(red, ct)
    B = len(comp.breaks)
    steps = _steps(tr, q)
    closes = closing_phases(comp, ct.terms, ct.scaling, ct.R)  # det(I - A_c), then each break's
    close_full = closes[0]
    wz, err_z = encirclements(steps[0] + close_full)
    warnings = []
    if err_z > 1e-3:
        warnings.append(("LW482", "the whole-model count did not settle cleanly "
                         f"(residual {err_z:.2g}); treat the verdict with care"))
    ext = _extension(red, ct) if B and extension_pieces(ct.R, ct.reach, ct.settle) else None
    counts = {}
    touching = []
    for k, name in enumerate(comp.breaks):
        close_k = closes[1 + k]
        wk, err_k = encirclements(steps[0] + steps[1 + k] + close_k)
        N, err_n = encirclements(-steps[1 + k] + close_full - close_k)
        warns = []
        if max(err_k, err_n) > 1e-3:
            warns.append(("LW481", "the count did not settle cleanly "
                          f"(residual {max(err_k, err_n):.2g}); treat the verdict with care"))
        for w in tr.unresolved:
            warns.append(("LW485", f"sampling could not resolve the curve near {w:.6g} rad/s"))
        with np.errstate(all="ignore"):
            L_k = np.exp(tr.values[:, 1 + B + k] - (q[1 + B + k] * np.log(tr.s) if q[1 + B + k] else 0.0))
        s_k, on_axis = tr.s, tr.on_axis
        if ext is not None:
            s_k = np.concatenate([s_k, ext.s[1:]])
            L_k = np.concatenate([L_k, np.exp(ext.values[1:, k])])
            on_axis = np.concatenate([on_axis, ext.on_axis[1:]])
            if not ext.complete:
                warns.append(("LW581", f"the loop transfer beyond {ct.R:.4g} rad/s winds too often to "
                              "sample fully; crossings there may be missing"))
        response = LoopResponse(*_dedupe(s_k, L_k, on_axis), ct.axis_freqs)
        marginal_freq = _marginal(comp, k, response)
        if marginal_freq is not None:
            touching.append(marginal_freq)
        P = ct.P0 + wk
        counts[name] = NyquistCount(P, N, P + N, marginal_freq is not None, marginal_freq, tuple(warns), response)
    Zc = ct.P0 + wz
    if touching:
        # count again round the closed-loop poles on the axis so that Z counts strictly
        # unstable poles only (the marginal breaks keep their samples and frequency)
        again = ct.touching(tuple(sorted(set(touching))))
        tr, q = _trace(red, again)
        steps = _steps(tr, q)
        Zc = again.P0 + encirclements(steps[0] + close_full)[0]
        for k, name in enumerate(comp.breaks):
            c = counts[name]
            if c.marginal:
                close_k = closes[1 + k]
                P = again.P0 + encirclements(steps[0] + steps[1 + k] + close_k)[0]
                N = encirclements(-steps[1 + k] + close_full - close_k)[0]
                counts[name] = replace(c, P=P, N=N, Z=P + N)
    return Zc, warnings, counts


def _dedupe(s: np.ndarray, L: np.ndarray, on_axis: np.ndarray):
    """Drop a sample that repeats the one before it (pieces share their end points)."""
    keep = np.concatenate([[True], s[1:] != s[:-1]])
    return s[keep], L[keep], on_axis[keep]


def _extension(red: Reduction, ct: Contour):
    """L_k of the component's breaks on the axis from R to the margins' reach (no count
    depends on it)."""
    comp = ct.component

    def evaluate(s):
        g = comp.values(s).g
        with np.errstate(all="ignore"):
            return principal_log(-g / (1.0 + g))

    step = _max_step(comp)
    return trace(extension_pieces(ct.R, ct.reach, ct.settle), evaluate, np.zeros(0),
                 (REACH_LEVEL / 5,) * len(comp.breaks), EXTENSION_SAMPLES, _step_rule(comp, red),
                 max_step=None if step is None else 2.0 * step, chord=EXTENSION_CHORD, midpoint=0.3)


def _loop_values(comp: Component, k: int, s: np.ndarray) -> np.ndarray:
    return comp.terms(s)[2][:, k]


def _marginal(comp: Component, k: int, resp: LoopResponse) -> float | None:
    """The frequency where 1 + L touches zero on the axis, if it does."""
    w = resp.freq
    L = resp.axis_L
    if w.size < 3:
        return None
    with np.errstate(invalid="ignore"):  # inf / inf at a sample on a pole of L: not marginal
        rel = np.nan_to_num(np.abs(1.0 + L) / (1.0 + np.abs(L)), nan=1.0)
    if rel.min() < MARGINAL:
        return float(w[np.argmin(rel)])
    cand = np.nonzero((rel[1:-1] <= rel[:-2]) & (rel[1:-1] <= rel[2:]) & (rel[1:-1] < 1e-3))[0] + 1
    if cand.size == 0:
        return None
    from .solve import zoom_max

    for i in cand[:20]:
        def closeness(x):
            Lx = _loop_values(comp, k, 1j * np.asarray(x))
            return -np.abs(1.0 + Lx) / (1.0 + np.abs(Lx))
        x, v = zoom_max(closeness, float(w[i - 1]), float(w[i + 1]), log=w[i - 1] > 0, rounds=14)
        if -v < MARGINAL:
            return float(x)
    return None


#: metrics.peaks keeps a sampled peak over the limits only when it is larger by a factor
#: 1 + 1e-9; `settled` asks a peak to beat the bound beyond the cut by this larger factor,
#: which covers that one (it must never be smaller)
_PEAK_TIE = 1e-6


class ShortProbe:
    """break_margins' `tail` rule for a sweep's rows (docs/method.md, "The sweep's short
    extension"). A curve of a full response is followed on as `check` follows it
    (curve.tail_matters). A curve cut at the settling frequency (`short[i]`) is not: what
    lies beyond is the full extension's business, and `settled` says whether it can matter.
    For those curves the probe notes what `settled` needs, from the curve as break_margins
    holds it: the nearest crossing right of -1 before any refinement, each peaked metric's
    largest sample, and |L| at the last sample."""

    def __init__(self, short: list[bool]):
        self.short = list(short)
        self.seen: dict[int, tuple[float, dict[str, float], float]] = {}

    def __call__(self, c, stretch_list) -> bool:
        from .curve import crossings, tail_matters
        from .metrics import METRICS

        if not self.short[c.index]:
            return tail_matters(c, stretch_list)
        right = [x.x for x in crossings(c) if x.x > -1.0]
        # the largest sample over the axis runs is the largest over all axis samples
        L = c.L[c.axis]
        with np.errstate(all="ignore"):
            tops = {name: float(np.max(np.nan_to_num(fn(L), nan=-np.inf), initial=-np.inf))
                    for name, fn, _ in METRICS}
        self.seen[c.index] = (min(right, default=0.0), tops, float(abs(c.L[-1])))
        return False

    def settled(self, index: int, margins) -> bool:
        """Whether the margins of curve `index` are those the full extension gives (always,
        for a curve that is not short)."""
        if not self.short[index]:
            return True
        if index not in self.seen or margins is None:
            return False
        nearest, tops, last = self.seen[index]
        return settled(nearest, tops, last, margins.gain_margin_up_db)


def settled(nearest: float, tops: dict[str, float], last: float, gain_up_db: float | None,
            level: float = SETTLE_LEVEL) -> bool:
    """Whether a curve cut at the settling frequency already has every margin value of the
    whole curve, given that |L| < `level` beyond the cut (the reach grid's word).

    Beyond the cut the curve stays in the disk |L| < level: it has no gain crossover,
    its crossings of the negative real axis lie in (-level, 0], |S| <= 1/(1 - level),
    |T| <= level/(1 - level), |S - T| <= (1 + level)/(1 - level). So the phase and delay
    margins and the crossover are settled; the gain margins are when the stretch that
    holds -1 ends left of -level both before refinement (`nearest`: the nearest crossing
    right of -1 as sampled, so the same crossings are refined) and after (`gain_up_db`,
    from the refined end; None: unbounded, not settled); each peak is when its largest
    sample (`tops`) beats the bound beyond by a factor 1 + _PEAK_TIE, at least the peaks'
    own tie factor (then the same sample is refined, between the same neighbours, and
    beats the limit at infinity);
    `last`, |L| at the cut, must be inside the disk too."""
    l = level
    bounds = {"sensitivity": 1.0 / (1.0 - l), "complementary": l / (1.0 - l), "balanced": (1.0 + l) / (1.0 - l)}
    return (last < l and nearest < -l and gain_up_db is not None and gain_up_db < -20.0 * np.log10(l)
            and all(tops.get(name, -np.inf) > (1.0 + _PEAK_TIE) * b for name, b in bounds.items()))


def nyquist_counts(red: Reduction, indent: str = "right") -> ModelCount:
    """The verdict alone (no margins' extension of the axis)."""
    return count(red, indent, for_margins=False)

