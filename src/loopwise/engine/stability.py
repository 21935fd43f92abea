"""The Nyquist verdict of one break (and of the whole model) from the winding engine.

P_k = P0 + wind(det(I - A_k)): open-loop RHP poles seen at break k with the
other loops closed. N_k = wind(1 + L_k): clockwise encirclements of -1 by L_k.
Z = P_k + N_k: closed-loop RHP poles, the same from every break.

The count uses the contour up to the certificate radius R. The margins also
need L_k further up the axis (a delayed loop can cross -180 deg beyond R), so
each break's response continues with an extension traced for L_k alone.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from ..errors import ModelError, Span
from .hidden import applications
from .reduce import ImproperLoop, Reduction, Uncertified, certificate_radius, closing_phase
from ..results import LoopResponse
from .winding import Piece, build_contour, encirclements, phase_change, trace

__all__ = ["Setup", "NyquistCount", "prepare_contour", "count_model", "count_break", "count_all"]

#: a closed-loop pole this close to the axis (|1 + L| relative to 1 + |L|) is called marginal
MARGINAL = 1e-8
#: the margins' extension of the axis runs until every |L_k| stays below this
REACH_LEVEL = 1e-3
#: sample budget of the margins' extension (the count itself has the engine's own budget)
EXTENSION_SAMPLES = 60_000
#: poles and zeros (rad/s, nonzero) must lie in this range (LW406 otherwise)
ROOT_RANGE = (1e-150, 1e150)
#: a wiring term larger than this on the axis overflows the engine's solves (LW406)
VALUE_LIMIT = 1e200


@dataclass(frozen=True, eq=False)
class Setup:
    """What every count of one model shares: the contour and its closing radius."""

    pieces: tuple[Piece, ...]
    R: float
    reach: float
    P0: int
    features: np.ndarray
    axis_poles: tuple[float, ...]
    indent: str
    roots: np.ndarray
    poles_on_axis: np.ndarray

    def touching(self, freqs: tuple[float, ...]) -> "Setup":
        """The same contour with extra indentations around closed-loop poles on the axis."""
        pieces = build_contour(self.poles_on_axis, self.roots, self.R, self.indent, freqs)
        return replace(self, pieces=tuple(pieces))


@dataclass(frozen=True, eq=False)
class NyquistCount:
    P: int
    N: int
    Z: int
    marginal: bool
    marginal_freq: float | None
    warnings: tuple[tuple[str, str], ...]  # (code, message) of this break's warnings
    response: LoopResponse | None = None


def _features(roots: np.ndarray) -> np.ndarray:
    out = []
    for r in roots:
        if r == 0:
            continue
        out.append(abs(r))
        if r.imag > 0:
            out.append(r.imag)
            if abs(r.real) < 0.2 * abs(r):
                out.extend(r.imag + k * abs(r.real) for k in (-4, -2, -1, -0.5, 0.5, 1, 2, 4))
    f = np.array(out, float)
    return np.unique(f[f > 0]) if f.size else f


def prepare_contour(red: Reduction, indent: str = "right", for_margins: bool = True) -> Setup:
    """The contour shared by every count of the model; ModelError (located) where no
    radius certifies a count: a neutral loop (LW401), an improper loop or closed loop
    (LW403), an improper loop transfer at a break (LW404), gains beyond double
    precision (LW406)."""
    _check_range(red)
    poles = red.block_poles()
    roots = np.concatenate([poles, red.block_zeros()])
    R = 0.0
    try:
        red.scaling
    except ImproperLoop as exc:
        raise _improper_loop(red, exc) from None
    cuts = [(None, frozenset())] + [(c, red.cut_sets[c.stmt.name]) for c in red.diagram.breaks]
    for brk, cut in cuts:
        try:
            r, _ = certificate_radius(red, cut)
        except Uncertified as exc:
            raise _uncertified_radius(red, brk, exc) from None
        R = max(R, r)
    _check_values(red, roots, R)
    axis = poles[poles.real == 0]
    P0 = int(np.sum(poles.real > 0)) + (axis.size if indent == "left" else 0)
    pieces = build_contour(axis, roots, R, indent)
    reach = _margin_reach(red, R) if for_margins else R
    return Setup(tuple(pieces), R, reach, P0, _features(roots),
                 tuple(sorted({abs(p.imag) for p in axis})), indent, roots, axis)


def _check_range(red: Reduction) -> None:
    """LW406 for a pole or zero outside ROOT_RANGE: the contour would span more decades
    than double precision can sample and evaluate."""
    lo, hi = ROOT_RANGE
    for term in applications(red):
        tf = term.app.transfer
        for roots, what in ((tf.poles, "pole"), (tf.zeros, "zero")):
            mags = np.abs(roots[roots != 0])
            bad = mags[(mags < lo) | (mags > hi)]
            if bad.size:
                raise ModelError("LW406", f"`{term.app.label}` has a {what} at {bad[0]:.3g} rad/s, beyond the "
                                 f"engine's range ({lo:g} to {hi:g} rad/s)", term.app.span,
                                 "rescale the model's time unit or drop modes far outside the loops' bandwidth")


def _check_values(red: Reduction, roots: np.ndarray, R: float) -> None:
    """LW406 where the wiring's values overflow double precision on the axis below R."""
    mags = np.abs(roots[roots != 0])
    low = float(np.min(mags)) * 1e-3 if mags.size else 1e-3
    w = np.geomspace(min(low, R / 10), R, 301)
    axis = np.abs(roots[roots.real == 0].imag)
    if axis.size:
        w = w[np.min(np.abs(w[:, None] - axis[None, :]), axis=1) > 1e-6 * w]
    with np.errstate(all="ignore"):
        big = ~(np.abs(red.matrix(1j * w)) < VALUE_LIMIT)
    if np.any(big):
        i = int(np.nonzero(big.any(axis=(1, 2)))[0][0])
        raise ModelError("LW406", f"the model's transfer values overflow double precision near {w[i]:.3g} rad/s "
                         f"(beyond {VALUE_LIMIT:g})", Span(red.diagram.model.file, 1, 1),
                         "rescale the model's gains or time unit")


def _improper_blocks(red: Reduction, instances=None) -> list[str]:
    insts = red.instances if instances is None else instances
    return list(dict.fromkeys(i.term.app.label for i in insts
                              if i.transfer is not None and not i.transfer.is_proper))


def _improper_loop(red: Reduction, exc: ImproperLoop) -> ModelError:
    model = red.diagram.model
    names = list(dict.fromkeys(model.hidden_owner.get(red.signals[i.row], red.signals[i.row])
                               for i in exc.instances))
    blocks = _improper_blocks(red, exc.instances)
    first = next(i for i in exc.instances if i.transfer is not None and not i.transfer.is_proper)
    return ModelError(
        "LW403", "the closed loop is improper: the loop through " + ", ".join(f"`{n}`" for n in names)
        + " has more zeros than poles all the way round (ideal derivative in "
        + ", ".join(f"`{b}`" for b in blocks) + "), so its gain grows without bound at high frequency",
        first.term.app.span, "give the derivative a filter pole, e.g. Kd*s/(Tf*s + 1), or add a lag on the loop")


def _uncertified_radius(red: Reduction, brk, exc: Uncertified) -> ModelError:
    model = red.diagram.model
    span = brk.stmt.span if brk is not None else Span(model.file, 1, 1)
    where = f"at break `{brk.stmt.name}`" if brk is not None else "of the model"
    if exc.reason == "neutral":
        return ModelError(
            "LW401", f"the model is of neutral type: the high-frequency loop gain {where} through delays is "
            f"{exc.rho:.3g} (>= 1), so no finite frequency range certifies its stability", span,
            "a loop with direct feedthrough and a delay must have a high-frequency gain below 1; "
            "add a filter pole")
    if exc.reason == "ill-posed":
        blocks = _improper_blocks(red)
        with_blocks = (" (ideal derivative in " + ", ".join(f"`{b}`" for b in blocks) + ")") if blocks else ""
        if brk is None:
            return ModelError("LW403", "the closed loop is improper: at high frequency its loops cancel the "
                              f"direct path exactly{with_blocks}, so the signals are not determined", span,
                              "give the derivative a filter pole, e.g. Kd*s/(Tf*s + 1)")
        return ModelError("LW404", f"the loop transfer {where} is improper{with_blocks}: with the other "
                          "loops closed, the wiring is singular at high frequency", span,
                          "give the derivative a filter pole, e.g. Kd*s/(Tf*s + 1), or break the loop elsewhere")
    return ModelError("LW406", f"the gains {where} need a frequency range beyond double precision "
                      "(above 1e250 rad/s) to certify the count", span,
                      "rescale the model's gains or time unit (e.g. work in ms)")


def _margin_reach(red: Reduction, R: float) -> float:
    """How far up the axis the margins and pictures need samples.

    Until every |L_k| stays below REACH_LEVEL, and at least 30 times the last
    frequency where some |L_k| >= 1 (so that a delay's roll-off shows in a Bode
    view); at most 1e4 R.
    """
    if not red.cut_sets:
        return R
    w = R * np.logspace(-6.0, 4.0, 1001)
    last_small, last_unit = R, 0.0
    for name in red.cut_sets:
        with np.errstate(all="ignore"):
            mag = np.abs(red.loop_transfer(name, 1j * w))
        big = np.nonzero(~(mag < REACH_LEVEL))[0]
        if big.size:
            last_small = max(last_small, float(w[min(big[-1] + 1, w.size - 1)]))
        unit = np.nonzero(~(mag < 1.0))[0]
        if unit.size:
            last_unit = max(last_unit, float(w[unit[-1]]))
    return min(max(1.5 * last_small, 30.0 * last_unit, R), 1e4 * R)


def count_model(red: Reduction, setup: Setup) -> tuple[int, tuple[tuple[str, str], ...]]:
    """Z of the whole closed loop: P0 + wind(det(I - A))."""
    def evaluate(s):
        phase, logabs = red.characteristic(s)
        return (logabs + 1j * phase)[:, None]

    tr = trace(list(setup.pieces), evaluate, setup.features, (None,), step_ok=_step_rule(red))
    total = phase_change(tr.values)[0] + closing_phase(red, frozenset(), setup.R)
    w, err = encirclements(total)
    warnings = []
    if not tr.complete:
        raise _uncertified(red, tr, ["the characteristic function det(I - A) of the whole model"])
    if err > 1e-3:
        warnings.append(("LW482", "the whole-model count did not settle cleanly "
                         f"(residual {err:.2g}); treat the verdict with care"))
    return setup.P0 + w, tuple(warnings)


def _step_rule(red: Reduction):
    return red.delay_step_ok if red.has_delay else None


def _uncertified(red: Reduction, tr, columns: list[str]) -> ModelError:
    """LW402, saying which curve could not be resolved where, and why that may be."""
    stuck = tr.stuck
    if stuck is None:
        what, where, why = ["the contour"], "", "check the model's numbers"
    else:
        (lo, hi), cols, by_delay = stuck
        what = list(dict.fromkeys(columns[c] for c in cols if c < len(columns))) or ["the contour"]
        where = f" near {lo:.4g} rad/s" if hi <= lo * 1.01 else f" between {lo:.4g} and {hi:.4g} rad/s"
        if by_delay:
            why = ("the delays turn the curve faster than the sample budget can follow there; a delay that "
                   "long at that frequency is beyond the certificate: check the delay's value and unit")
        else:
            why = ("a resonance too lightly damped, or values that differ by rounding only; check the "
                   "damping and the numbers of the blocks that act there")
    return ModelError("LW402", f"the Nyquist count could not be certified within {tr.s.size} samples: "
                      f"{', '.join(what)} still {'changes' if len(what) == 1 else 'change'} too fast to "
                      f"sample{where}", Span(red.diagram.model.file, 1, 1), why)


def count_all(red: Reduction, setup: Setup) -> tuple[int, tuple[tuple[str, str], ...], dict[str, NyquistCount]]:
    """The whole model's Z and every break's count from one trace of the contour.

    Each point needs one factorisation of I - A for all breaks (reduce.all_loops):
    traced together are log det(I - A), log(1 + g_k) and log L_k for every k, so
    arg det(I - A_k) = arg det(I - A) + arg(1 + g_k) and arg(1 + L_k) = -arg(1 + g_k).
    """
    names = list(red.cut_sets)
    K = len(names)

    def evaluate(s):
        phase, logabs, g = red.all_loops(s)
        with np.errstate(all="ignore"):
            one_g = 1.0 + g
            L = -g / one_g
            log_det = logabs + 1j * phase
            log_one_g = np.log(one_g + 0j)
            # where 1 + g cancels (|L_k| >> 1, e.g. next to a double integrator) solve that
            # break directly: det(I - A_k) and L_k without the subtraction
            bad = ~(np.abs(one_g) > 1e-7 * np.maximum(1.0, np.abs(g)))
            for k in np.nonzero(bad.any(axis=0))[0]:
                rows = np.nonzero(bad[:, k])[0]
                ev = red.loop(names[k], s[rows])
                log_one_g[rows, k] = (ev.det_k_log + 1j * ev.det_k_phase) - log_det[rows]
                L[rows, k] = ev.L
            return np.concatenate([log_det[:, None], log_one_g, np.log(L + 0j)], axis=1)

    floors = (None,) * (1 + K) + (1e-2,) * K
    tr = trace(list(setup.pieces), evaluate, setup.features, floors, step_ok=_step_rule(red))
    if not tr.complete:
        raise _uncertified(red, tr, ["the characteristic function det(I - A) of the whole model"]
                           + [f"the loop opened at break `{n}` (det(I - A_k))" for n in names]
                           + [f"the loop transfer L at break `{n}`" for n in names])
    steps = phase_change(tr.values)
    close_full = closing_phase(red, frozenset(), setup.R)
    wz, err_z = encirclements(steps[0] + close_full)
    model_warnings = []
    if err_z > 1e-3:
        model_warnings.append(("LW482", "the whole-model count did not settle cleanly "
                               f"(residual {err_z:.2g}); treat the verdict with care"))
    ext = _extension_all(red, setup) if K and setup.reach > setup.R * (1 + 1e-12) else None
    counts = {}
    for k, name in enumerate(names):
        close_k = closing_phase(red, red.cut_sets[name], setup.R)
        wk, err_k = encirclements(steps[0] + steps[1 + k] + close_k)
        N, err_n = encirclements(-steps[1 + k] + close_full - close_k)
        warnings = []
        if max(err_k, err_n) > 1e-3:
            warnings.append(("LW481", "the count did not settle cleanly "
                             f"(residual {max(err_k, err_n):.2g}); treat the verdict with care"))
        for w in tr.unresolved:
            warnings.append(("LW485", f"sampling could not resolve the curve near {w:.6g} rad/s"))
        s_k, L_k, on_axis = tr.s, np.exp(tr.values[:, 1 + K + k]), tr.on_axis
        if ext is not None:
            s_k = np.concatenate([s_k, ext.s[1:]])
            L_k = np.concatenate([L_k, np.exp(ext.values[1:, k])])
            on_axis = np.concatenate([on_axis, ext.on_axis[1:]])
            if not ext.complete:
                warnings.append(("LW581", f"the loop transfer beyond {setup.R:.4g} rad/s winds too often to "
                                 "sample fully; crossings there may be missing"))
        response = LoopResponse(*_dedupe(s_k, L_k, on_axis), setup.axis_poles)
        marginal_freq = _marginal(red, name, response)
        P = setup.P0 + wk
        count = NyquistCount(P, N, P + N, marginal_freq is not None, marginal_freq, tuple(warnings), response)
        if count.marginal:
            again = _count_break(red, name, setup.touching((marginal_freq,)))
            count = NyquistCount(again.P, again.N, again.Z, True, marginal_freq, again.warnings, response)
        counts[name] = count
    return setup.P0 + wz, tuple(model_warnings), counts


def _dedupe(s: np.ndarray, L: np.ndarray, on_axis: np.ndarray):
    """Drop a sample that repeats the one before it (pieces share their end points)."""
    keep = np.concatenate([[True], s[1:] != s[:-1]])
    return s[keep], L[keep], on_axis[keep]


def _extension_all(red: Reduction, setup: Setup):
    def evaluate(s):
        _, _, g = red.all_loops(s)
        with np.errstate(all="ignore"):
            return np.log(-g / (1.0 + g) + 0j)

    return trace([Piece("axis", setup.R, setup.reach, log=True)], evaluate, np.zeros(0),
                 (REACH_LEVEL / 5,) * len(red.cut_sets), EXTENSION_SAMPLES, _step_rule(red))


def count_break(red: Reduction, name: str, setup: Setup) -> NyquistCount:
    count = _count_break(red, name, setup)
    if count.marginal:
        # count again around the axis pole so that Z counts strictly unstable poles only
        again = _count_break(red, name, setup.touching((count.marginal_freq,)))
        return NyquistCount(again.P, again.N, again.Z, True, count.marginal_freq,
                            again.warnings, count.response)
    return count


def _count_break(red: Reduction, name: str, setup: Setup) -> NyquistCount:
    cut = red.cut_sets[name]

    def evaluate(s):
        ev = red.loop(name, s)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.stack([ev.det_k_log + 1j * ev.det_k_phase, np.log(1.0 + ev.L + 0j),
                             np.log(ev.L + 0j)], axis=1)

    tr = trace(list(setup.pieces), evaluate, setup.features, (None, None, 1e-2), step_ok=_step_rule(red))
    if not tr.complete:
        raise _uncertified(red, tr, [f"the loop opened at break `{name}` (det(I - A_k))",
                                     f"1 + L at break `{name}`", f"the loop transfer L at break `{name}`"])
    steps = phase_change(tr.values)
    close_k = closing_phase(red, cut, setup.R)
    close_full = closing_phase(red, frozenset(), setup.R)
    wk, err_k = encirclements(steps[0] + close_k)
    N, err_n = encirclements(steps[1] + close_full - close_k)
    warnings = []
    if max(err_k, err_n) > 1e-3:
        warnings.append(("LW481", "the count did not settle cleanly "
                         f"(residual {max(err_k, err_n):.2g}); treat the verdict with care"))
    for w in tr.unresolved:
        warnings.append(("LW485", f"sampling could not resolve the curve near {w:.6g} rad/s"))
    s, L, on_axis = tr.s, np.exp(tr.values[:, 2]), tr.on_axis
    if setup.reach > setup.R * (1 + 1e-12):
        ext, complete = _extension(red, name, setup)
        s = np.concatenate([s, ext.s[1:]])
        L = np.concatenate([L, np.exp(ext.values[1:, 0])])
        on_axis = np.concatenate([on_axis, ext.on_axis[1:]])
        if not complete:
            warnings.append(("LW581", f"the loop transfer beyond {setup.R:.4g} rad/s winds too often to "
                             "sample fully; crossings there may be missing"))
    response = LoopResponse(*_dedupe(s, L, on_axis), setup.axis_poles)
    marginal_freq = _marginal(red, name, response)
    P = setup.P0 + wk
    return NyquistCount(P, N, P + N, marginal_freq is not None, marginal_freq, tuple(warnings), response)


def _extension(red: Reduction, name: str, setup: Setup):
    """L_k on the axis from R to the margins' reach (no count depends on it)."""
    def evaluate(s):
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.log(red.loop_transfer(name, s) + 0j)[:, None]

    tr = trace([Piece("axis", setup.R, setup.reach, log=True)], evaluate, np.zeros(0),
               (REACH_LEVEL / 5,), EXTENSION_SAMPLES, _step_rule(red))
    return tr, tr.complete


def _marginal(red: Reduction, name: str, resp: LoopResponse) -> float | None:
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
            Lx = red.loop_transfer(name, 1j * np.asarray(x))
            return -np.abs(1.0 + Lx) / (1.0 + np.abs(Lx))
        x, v = zoom_max(closeness, float(w[i - 1]), float(w[i + 1]), log=w[i - 1] > 0, rounds=14)
        if -v < MARGINAL:
            return float(x)
    return None
