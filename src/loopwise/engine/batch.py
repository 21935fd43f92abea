"""One wiring in many parameter samples, evaluated and counted at once (the sweeps build on it).

Contract
--------
`Batch(reductions)` takes the reductions (engine/reduce.py) of one model resolved with
different parameter values: the same signals, the same wiring terms in the same order
(each a gain times a block application or a plain gain), the same breaks. Only the
values may differ: gains, poles, zeros, delays, even how many poles or zeros a term
has. A reduction whose wiring differs raises ValueError. Then, for an array `s` of
points (shape (M,)) shared by every sample:

* `loop_transfer(name, s)` -> complex (samples, M): L_k = -y/v at break `name`;
* `characteristic(s)` -> (phase, log|.|), each (samples, M): det(I - A(s));
* `break_terms(name, s)` -> (phase, log|.|, L), each (samples, M): det(I - A_k(s))
  with break k cut, and L_k (so that det(I - A) = det(I - A_k)(1 + L_k));
* `open_loop(indent)` -> (P0, axis): per sample, the open right-half-plane poles of all
  block applications (plus those on the imaginary axis with indent "left") and the
  frequencies of the poles on the imaginary axis (the contour's indentations);
* `radius()` -> (samples,): per sample, the certified radius R beyond which no
  characteristic function of the model has a zero in Re s >= 0 (docs/method.md).

These are the count's inputs: Z = P0 + wind(det(I - A)), P_k = P0 + wind(det(I - A_k)),
N_k = wind(1 + L_k) on the indented contour up to R. `count()` does that count for every
sample, certified as for one model: every sample's contour is traced adaptively, all
samples' points evaluated in one batch per round (and `margins()` refines every
sample's crossovers together). Values are exact (delays as exp(-sT)); a point on a
pole gives NaN there. All of it is pure numpy.
"""
from __future__ import annotations

from dataclasses import replace
from typing import Sequence

import numpy as np

from ..errors import ModelError
from ..results import LoopResponse
from .blocks import Bank, FactorTable
from .certificate import ScaledTerms, certificate_radius, scaling
from .reduce import CANCEL, Reduction, elimination_programs, program_groups
from .refusals import VALUE_LIMIT, value_grids
from .solve import distinct
from .stability import (EXTENSION_CHORD, EXTENSION_SAMPLES, REACH_GRID, REACH_LEVEL, ModelCount, NyquistCount,
                        _dedupe, _open_rhp, count as count_one, extension_pieces, reach_rule, stops_short)
from .winding import MAX_SAMPLES, MAX_WORK, carried, encirclements, in_chunks, principal_log, trace

__all__ = ["Batch", "StackedBank", "wiring"]

#: |1 + L| / (1 + |L|) below this on the axis: 1 + L comes near zero there, and the
#: one-model count decides the sample (its marginal test and its warnings)
TOUCH = 1e-3


class StackedBank:
    """The terms of one wiring in many samples: `values(s, which)` gives, for points s[j] of
    samples which[j], every term's value, shape (M, terms). The samples' factors lie in one
    table (engine/blocks.py, FactorTable), so a round costs a few numpy operations whatever
    the number of samples, and a sample's values are bit for bit those its own Bank (its
    one-model count) gives."""

    def __init__(self, banks: Sequence[Bank]):
        self.banks = tuple(banks)
        self.samples, self.size = len(self.banks), self.banks[0].size
        self.delay = np.array([b.delay for b in self.banks], float)
        self.has_delay = bool(np.any(self.delay > 0))
        self.table = FactorTable(self.banks)

    def values(self, s: np.ndarray, which: np.ndarray) -> np.ndarray:
        """Every term's value gain * transfer(s[j]) in sample which[j], complex, shape (len(s),
        terms); delays exact, a point on a pole gives inf or nan there."""
        s = np.asarray(s, dtype=complex).ravel()
        return in_chunks(self.table.values, s, np.broadcast_to(np.asarray(which, dtype=np.intp), s.shape))


def wiring(red: Reduction) -> tuple:
    """A hashable key of a reduction's wiring (signals, terms, breaks, loop components):
    reductions with equal keys may share a Batch, as the contract above asks."""
    return _structure(red)


def _structure(red: Reduction):
    return (red.signals, tuple((i.row, i.col, i.transfer is None) for i in red.instances),
            tuple(sorted((k, tuple(sorted(v))) for k, v in red.cut_sets.items())),
            tuple((c.signals, c.instances, c.breaks) for c in red.components))


class _Stacked:
    """One loop component in every sample: a shared elimination program over stacked values."""

    def __init__(self, comps: list, big: set[int]):
        first = comps[0]
        self.comps, self.breaks = comps, first.breaks
        self.bank = StackedBank([c.bank for c in comps])
        ends = [(row, col) for row, col, _, _ in first.entries]
        measured = [first.entries[p[0]][1] if p else None for p in first.cut_positions]
        cuts = [frozenset(p) for p in first.cut_positions]
        members = list(first.signals)
        self.program, self.safe, self.mid = elimination_programs(members, ends, measured, cuts, big)
        self.big = sorted(big)

    def _groups(self, V):
        # the samples' poles differ, so no point is known to be near one (reduce.program_groups)
        return program_groups(V, self.big, None, (self.program, self.safe, self.mid), len(self.breaks))

    def terms(self, s, which, breaks: int | None = None):
        """log det(I - A_c), log(1 + g_k), L_k at points s of samples which (as Component.terms)."""
        s = np.asarray(s, complex).ravel()
        B = len(self.breaks) if breaks is None else breaks
        log_det = np.zeros(s.size, complex)
        g = np.zeros((s.size, len(self.breaks)), complex)
        with np.errstate(all="ignore"):
            V = self.bank.values(s, which)
            for idx, prog in self._groups(V):
                ph, lg, g[idx] = prog.values(V[idx])
                log_det[idx] = lg + 1j * ph
            g = g[:, :B]
            one_g = 1.0 + g
            L = -g / one_g
            log_one_g = np.log(one_g + 0j)
            bad = ~(np.abs(one_g) > CANCEL * np.maximum(1.0, np.abs(g)))
            for k in np.nonzero(bad.any(axis=0))[0]:
                rows = np.nonzero(bad[:, k])[0]
                ph, lg, Lk = self._direct(int(k), V[rows])
                log_one_g[rows, k] = (lg + 1j * ph) - log_det[rows]
                L[rows, k] = Lk
        return log_det, log_one_g, L

    def direct(self, b: int, s, which):
        """Break b solved with its wires cut at points s of samples which (Component.direct)."""
        with np.errstate(all="ignore"):
            return self._direct(b, self.bank.values(np.asarray(s, complex).ravel(), which))

    def _direct(self, b: int, V):
        # from the term values already at hand (a point's values do not depend on the others)
        phase, logabs, L = np.zeros(V.shape[0]), np.zeros(V.shape[0]), np.zeros(V.shape[0], complex)
        with np.errstate(all="ignore"):
            for idx, prog in self._groups(V):
                phase[idx], logabs[idx], L[idx] = prog.direct(V[idx], b)
        return phase, logabs, L

    def loops(self, s, which, cols):
        """L of break cols[j] at s[j] of sample which[j] (the margins' evaluator)."""
        s = np.asarray(s, complex).ravel()
        g = np.empty(s.size, complex)
        with np.errstate(all="ignore"):
            V = self.bank.values(s, which)
            for idx, prog in self._groups(V):
                g[idx] = prog.selected(V[idx], cols[idx])
            L = -g / (1.0 + g)
            bad = ~(np.abs(1.0 + g) > CANCEL * np.maximum(1.0, np.abs(g)))
            for k in distinct(cols[bad]):
                rows = np.nonzero(bad & (cols == k))[0]
                L[rows] = self._direct(int(k), V[rows])[2]
        return L


class Batch:
    """One wiring in many parameter samples (see the module text for the contract)."""

    def __init__(self, reductions: Sequence[Reduction]):
        if not reductions:
            raise ValueError("a batch needs at least one sample")
        shape = _structure(reductions[0])
        for r in reductions[1:]:
            if _structure(r) != shape:
                raise ValueError("every sample of a batch must have the same wiring (signals, terms, breaks)")
        self.reductions = tuple(reductions)
        first = reductions[0]
        self.breaks = tuple(b.stmt.name for b in first.diagram.breaks)
        self.stacks = []
        for c, comp in enumerate(first.components):
            comps = [r.components[c] for r in reductions]
            big = {p for cc in comps for p in cc.big}
            self.stacks.append(_Stacked(comps, big))
        self._where = {name: (c, st.breaks.index(name)) for c, st in enumerate(self.stacks) for name in st.breaks}

    @property
    def samples(self) -> int:
        """How many parameter samples (reductions) the batch holds."""
        return len(self.reductions)

    def _grid(self, s):
        s = np.asarray(s, complex).ravel()
        which = np.repeat(np.arange(self.samples), s.size)
        return np.tile(s, self.samples), which, s.size

    # --- the contract: values at shared points -------------------------------------
    def loop_transfer(self, name: str, s) -> np.ndarray:
        """L at break `name`, shape (samples, len(s))."""
        c, k = self._where[name]
        pts, which, m = self._grid(s)
        return self.stacks[c].direct(k, pts, which)[2].reshape(self.samples, m)

    def characteristic(self, s) -> tuple[np.ndarray, np.ndarray]:
        """Phase and log|.| of det(I - A), each (samples, len(s))."""
        pts, which, m = self._grid(s)
        total = np.zeros(pts.size, complex)
        for st in self.stacks:
            total += st.terms(pts, which, 0)[0]
        return np.angle(np.exp(1j * total.imag)).reshape(self.samples, m), total.real.reshape(self.samples, m)

    def break_terms(self, name: str, s) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Phase and log|.| of det(I - A_k) (break `name` cut) and L_k, each (samples, len(s))."""
        c, k = self._where[name]
        pts, which, m = self._grid(s)
        log_det = np.zeros(pts.size, complex)
        for i, st in enumerate(self.stacks):
            if i != c:
                log_det += st.terms(pts, which, 0)[0]
        ph, lg, L = self.stacks[c].direct(k, pts, which)
        log_det += lg + 1j * ph
        shape = (self.samples, m)
        return np.angle(np.exp(1j * log_det.imag)).reshape(shape), log_det.real.reshape(shape), L.reshape(shape)

    def open_loop(self, indent: str = "right") -> tuple[np.ndarray, list[np.ndarray]]:
        """Per sample: P0 (open right-half-plane poles of every application) and the
        frequencies of the poles on the imaginary axis."""
        P0, axis = [], []
        for r in self.reductions:
            poles = r.block_poles()
            P0.append(_open_rhp(poles, indent))
            axis.append(distinct(np.abs(poles[poles.real == 0].imag)))
        return np.array(P0), axis

    def radius(self) -> np.ndarray:
        """Per sample, the certified radius R (the largest over the loop components)."""
        out = np.zeros(self.samples)
        for i, r in enumerate(self.reductions):
            for comp in r.components:
                d = scaling(comp)
                out[i] = max(out[i], certificate_radius(comp, ScaledTerms(comp, d), [(), *comp.cut_positions])[0])
        return out

    # --- the certified count of every sample -----------------------------------------
    def count(self, indent: str = "right", for_margins: bool = True, short: bool = False) -> list[ModelCount]:
        """Every sample's Z and break counts, as stability.count gives them for one model,
        with every sample's contour traced in the same batched rounds. With `short` (a
        sweep's), the margins' extension stops at the settling frequency where there is
        one (stability.extension_pieces; the counts say where: NyquistCount.short); a
        sample counted again alone gets the whole extension."""
        contours = self._contours(indent)
        # the margins' reach of every sample in one stacked evaluation per component
        if for_margins:
            for c, st in enumerate(self.stacks):
                for cs, (reach, settle) in zip(contours, _reach(st, [cs[c] for cs in contours])):
                    cs[c] = replace(cs[c], reach=reach, settle=settle)
        Z = np.array([sum(_open_rhp(p, indent) for p in _outside_poles(r)) for r in self.reductions])
        per = [dict() for _ in self.reductions]
        redo: set[int] = set()
        # what `lengthen` needs: the contours and each sample's extension points so far
        self._traced = (indent, contours, [])
        for c, st in enumerate(self.stacks):
            cts = [cs[c] for cs in contours]
            zc, counts, marginal, used = _count_stacked(st, cts, short)
            self._traced[2].append(used)
            Z += zc
            redo |= marginal
            for i in range(self.samples):
                for name, cnt in counts[i].items():
                    per[i][name] = (cnt, zc[i])
        out = []
        for i, r in enumerate(self.reductions):
            if i in redo:  # a closed-loop pole on the axis: recount that sample alone
                out.append(count_one(r, indent, for_margins))
                continue
            counts = {n: replace(cnt, P=cnt.P + Z[i] - zc, Z=cnt.Z + Z[i] - zc) if Z[i] != zc else cnt
                      for n, (cnt, zc) in per[i].items()}  # nothing to add: the count as it is
            out.append(ModelCount(int(Z[i]), (), counts))
        return out

    def lengthen(self, counts: list[ModelCount], samples: list[int]) -> list[ModelCount]:
        """The counts of `samples` (indices into the batch; `counts` from `count(short=True)`)
        with every response that stops at the settling frequency carried on to the reach:
        the far piece of the extension (stability.extension_pieces) traced for those samples,
        so that each response is the one `count()` without `short` gives. A sample whose
        extension, both pieces together, would not have been traced whole as one model's
        (its budget, a point that could not be resolved, a touch of -1) is counted again
        alone, as `count` does."""
        indent, contours, used = self._traced
        out = {i: c for i, c in zip(samples, counts)}
        redo: set[int] = set()
        for c, st in enumerate(self.stacks):
            B = len(st.breaks)
            mine = sorted(i for i in samples if B and any(out[i].counts[n].short is not None for n in st.breaks))
            pieces, owner, skip = [], [], {}
            for i in mine:
                ct = contours[i][c]
                whole = extension_pieces(ct.R, ct.reach, ct.settle)
                near = extension_pieces(ct.R, ct.reach, ct.settle, short=True)
                far = whole[len(near):]
                pieces += far
                owner += [i] * len(far)
                skip[i] = not near  # no first piece: the far piece's first sample repeats R
            if not pieces:
                continue
            owner = np.array(owner)
            ext = _trace_pieces(st, pieces, owner)
            ext_of = owner[ext.pid]
            if not ext.complete:
                redo |= set(mine)
            redo |= {int(owner[p]) for p in ext.unresolved_pieces}
            points = np.bincount(ext_of, minlength=self.samples) + used[c]
            redo |= _outgrown(points, EXTENSION_SAMPLES, MAX_WORK // B) & set(mine)
            at = np.searchsorted(ext_of, np.arange(self.samples + 1))
            for i in mine:
                rows = np.arange(at[i] + (1 if skip[i] else 0), at[i + 1])
                longer = dict(out[i].counts)
                for k, name in enumerate(st.breaks):
                    cnt = longer[name]
                    r = cnt.response
                    s = np.concatenate([r.s, ext.s[rows]])
                    L = np.concatenate([r.L, np.exp(ext.values[rows, k])])
                    on_axis = np.concatenate([r.on_axis, ext.on_axis[rows]])
                    response = LoopResponse(*_dedupe(s, L, on_axis), r.axis_poles)
                    if response.axis_L.size and _closeness(response.axis_L).min() < TOUCH:
                        redo.add(i)
                    longer[name] = replace(cnt, response=response, short=None)
                out[i] = replace(out[i], counts=longer)
        for i in redo:
            out[i] = count_one(self.reductions[i], indent, True)
        return [out[i] for i in samples]

    def _contours(self, indent: str) -> list[list]:
        """stability.prepare of every sample, the overflow check of the terms' values (LW406)
        done for all samples in one stacked evaluation per component. Where any sample is
        refused, the samples are prepared one by one again, so that the error raised is the
        one a one-by-one check raises first."""
        from .stability import prepare
        try:
            contours = [prepare(r, indent, False, values=False) for r in self.reductions]
            fit = all(_values_fit(st, [cs[c] for cs in contours]) for c, st in enumerate(self.stacks))
        except ModelError:
            fit = False
        return contours if fit else [prepare(r, indent, False) for r in self.reductions]

    def circle_orders(self, circles: list[list[tuple[complex, int, float]]]) -> list[dict]:
        """hidden.structural_modes' winding round its circles (`hidden.circles`, one list per
        sample), every sample's first 64-step circles in one stacked evaluation: per sample,
        {circle: (order, error)} for those those steps resolve (the rest are wound alone).
        Empty where a component has a 'safe' program: only without one is the stacked
        elimination the very program each sample's own reduction runs (one program for all
        points, the same signals kept), so that the phases are those of Reduction.characteristic."""
        from .hidden import circle, circle_order

        out: list[dict] = [dict() for _ in circles]
        todo = [(i, c) for i, cs in enumerate(circles) for c in cs]
        if not todo or any(st.safe is not None for st in self.stacks):
            return out
        rings = [circle(p, radius, 64) for _, (p, _, radius) in todo]
        s = np.concatenate([ring[1] for ring in rings])
        which = np.repeat([i for i, _ in todo], 65)
        phase = np.zeros(s.size)
        for st in self.stacks:
            phase = phase + st.terms(s, which, 0)[0].imag
        phase = np.angle(np.exp(1j * phase)).reshape(len(todo), 65)
        for (i, c), (theta, _), ph in zip(todo, rings, phase):
            found = circle_order(ph, theta, c[1])
            if found is not None:
                out[i][c] = found
        return out

    def evaluator(self, name_rows: list[tuple[int, str]]):
        """The margins' evaluator for curves (sample, break name): evaluate(s, i) gives L of
        curve i[j] at s[j]."""
        comp_of = np.array([self._where[n][0] for _, n in name_rows])
        col_of = np.array([self._where[n][1] for _, n in name_rows])
        sample_of = np.array([i for i, _ in name_rows])

        def evaluate(s, i):
            s = np.asarray(s, complex).ravel()
            i = np.broadcast_to(np.asarray(i, int), s.shape).ravel()
            if len(self.stacks) == 1:
                return self.stacks[0].loops(s, sample_of[i], col_of[i])
            out = np.empty(s.size, complex)
            for c in distinct(comp_of[i]):
                sel = np.nonzero(comp_of[i] == c)[0]
                out[sel] = self.stacks[c].loops(s[sel], sample_of[i[sel]], col_of[i[sel]])
            return out

        return evaluate


def _values_fit(st: _Stacked, cts: list) -> bool:
    """refusals.check_values for every sample of one component (the same grids, the same
    values): whether no term overflows double precision on the axis below any sample's R."""
    grids = value_grids([ct.component for ct in cts], [ct.R for ct in cts])
    which = np.repeat(np.arange(len(cts)), [w.size for w in grids])
    with np.errstate(all="ignore"):
        V = st.bank.values(1j * np.concatenate(grids), which)
        return bool(np.all(np.abs(V) < VALUE_LIMIT))


def _reach(st: _Stacked, cts: list) -> list[tuple[float, float | None]]:
    """stability._margin_reach for every sample: the same grid and rule (stability.reach_rule),
    all samples' points in one evaluation."""
    if not st.breaks:
        return [(ct.R, None) for ct in cts]
    S, n = len(cts), REACH_GRID.size
    R = np.array([ct.R for ct in cts])
    w = R[:, None] * REACH_GRID[None, :]
    s, which = 1j * w.ravel(), np.repeat(np.arange(S), n)
    g = np.zeros((s.size, len(st.breaks)), complex)
    with np.errstate(all="ignore"):
        V = st.bank.values(s, which)
        for idx, prog in st._groups(V):
            g[idx] = prog.values(V[idx])[2]
        mag = np.abs(g / (1.0 + g)).reshape(S, n, -1)
    return [reach_rule(w[i], mag[i], float(R[i])) for i in range(S)]


def _outside_poles(r: Reduction) -> list[np.ndarray]:
    out = [r.instances[k].transfer.poles for k in r.outside if r.instances[k].transfer is not None]
    return out + [t.app.transfer.poles for t in r.exogenous]


def _count_stacked(st: _Stacked, cts: list, short: bool = False
                   ) -> tuple[np.ndarray, list[dict], set[int], np.ndarray]:
    """One loop component in every sample: each sample's Z_c and break counts (P, N local to
    the component, as stability._count_component gives them), the samples with a
    closed-loop pole on the axis (counted again alone by the caller), and each sample's
    points on the margins' extension. With `short`, the extension stops at each sample's
    settling frequency (`Batch.count`)."""
    S, B = len(cts), len(st.breaks)
    pieces, owner = [], []
    for i, ct in enumerate(cts):
        pieces += list(ct.pieces)
        owner += [i] * len(ct.pieces)
    owner = np.array(owner)
    q = _orders(st, cts)
    features = [cts[i].features for i in owner]
    steps = [_max_step(st, i) for i in owner]

    def evaluate(s, pid):
        which = owner[pid]
        log_det, log_one_g, L = st.terms(s, which)
        if (np.isfinite(log_det) & (np.isnan(log_one_g).any(axis=1) | np.isnan(L).any(axis=1))).any():
            raise _Overflow  # as stability._trace: no pole hit but an overflow of the solve
        v = np.empty((log_det.size, 1 + 2 * B), complex)
        v[:, 0], v[:, 1:1 + B], v[:, 1 + B:] = log_det, log_one_g, principal_log(L)
        return carried(s, q, which, out=v)  # the s^q factors, at the samples that have some

    floors = (None,) * (1 + B) + (1e-2,) * B
    try:
        tr = trace(pieces, evaluate, features, floors, MAX_SAMPLES * S, _step_ok(st, owner) if st.bank.has_delay
                   else None, orders=q[owner], max_step=steps, by_piece=True, max_work=MAX_WORK * S)
    except _Overflow:
        tr = None  # each sample counted alone: its own count refuses it at once, or certifies it
    if tr is None or not tr.complete:
        return np.zeros(S, int), [dict() for _ in range(S)], set(range(S)), np.zeros(S, int)
    closes = _closing(st, cts)
    short_at = [short and stops_short(ct, float(st.bank.delay[i].sum())) for i, ct in enumerate(cts)]
    ext = _extension(st, cts, short_at) if B else None
    # pieces are listed sample by sample and a trace is ordered by piece: each sample's
    # samples are one contiguous run (bounds by bisection, not a scan per sample)
    sample_of = owner[tr.pid]
    at = np.searchsorted(sample_of, np.arange(S + 1))
    ext_of = None if ext is None else ext[1][ext[0].pid]
    ext_at = None if ext is None else np.searchsorted(ext_of, np.arange(S + 1))
    used = np.zeros(S, int) if ext is None else np.bincount(ext_of, minlength=S)
    zc, counts, redo = np.zeros(S, int), [], set()
    # the batch pools the samples' budgets: a sample that used more than one model's trace
    # may (winding.trace) would have stopped short alone; the one-model count decides it
    redo |= _outgrown(np.bincount(sample_of, minlength=S), MAX_SAMPLES, MAX_WORK // (1 + 2 * B))
    # where sampling could not settle, the one-model count words the warnings
    redo |= {int(owner[p]) for p in tr.unresolved_pieces}
    if ext is not None:
        if not ext[0].complete:
            redo |= set(ext[1].tolist())
        redo |= _outgrown(used, EXTENSION_SAMPLES, MAX_WORK // B)
        redo |= {int(ext[1][p]) for p in ext[0].unresolved_pieces}
    # the elementwise work of every sample at once (the same numbers, sample by sample)
    with np.errstate(all="ignore"):
        D = np.diff(tr.values.imag, axis=0)  # (the imaginary part of the complex differences)
        D = np.where(np.isfinite(D), (D + np.pi) % (2 * np.pi) - np.pi, 0.0)
        # the s^q factors' logs (the same numbers as q * log s), at the samples that carry some
        L_all = np.exp(tr.values[:, 1 + B:] - carried(tr.s, q[:, 1 + B:], sample_of))
        # how near 1 + L comes to zero on every sample's axis points, trace and extension
        # rows (a repeated point repeats its value: dropping it changes no minimum)
        near_T = np.where(tr.on_axis[:, None], _closeness(L_all), np.inf)
        near_T = np.minimum.reduceat(near_T, at[:-1], axis=0) if S else near_T[:0]
        if ext is not None:
            L_ext = np.exp(ext[0].values)
            near_E = np.where(ext[0].on_axis[:, None], _closeness(L_ext), np.inf)
    # each sample's first and last contour point's angle (its turn, as stability._steps), and
    # the sum of its phase steps D[a:b - 1] (rows a to b - 2: not the step into the next
    # sample), every sample's in one pass; a sample of one point has no step
    first, last = np.angle(tr.s[at[:-1]]), np.angle(tr.s[at[1:] - 1])
    bounds = np.ravel(np.column_stack([at[:-1], at[1:] - 1]))[:-1]
    sums = np.add.reduceat(D, np.minimum(bounds, max(D.shape[0] - 1, 0)), axis=0)[0::2] if D.shape[0] else \
        np.zeros((S, D.shape[1]))
    sums[at[1:] - 1 <= at[:-1]] = 0.0
    for i, ct in enumerate(cts):
        a, b = at[i], at[i + 1]
        s0, on0 = tr.s[a:b], tr.on_axis[a:b]
        turn = float(last[i] - first[i])
        stp = sums[i] - q[i] * turn
        close_full = closes[i][0]
        wz, err = encirclements(stp[0] + close_full)
        zc[i] = ct.P0 + wz
        er = np.arange(ext_at[i] + 1, ext_at[i + 1]) if ext is not None else np.zeros(0, int)
        mine = {}
        for k, name in enumerate(st.breaks):
            close_k = closes[i][1 + k]
            wk, err_k = encirclements(stp[0] + stp[1 + k] + close_k)
            N, err_n = encirclements(-stp[1 + k] + close_full - close_k)
            err = max(err, err_k, err_n)
            L, s, on_axis, near = L_all[a:b, k], s0, on0, near_T[i, k]
            if er.size:
                s = np.concatenate([s0, ext[0].s[er]])
                L = np.concatenate([L, L_ext[er, k]])
                on_axis = np.concatenate([on0, ext[0].on_axis[er]])
                near = min(near, float(near_E[er, k].min()))
            response = LoopResponse(*_dedupe(s, L, on_axis), ct.axis_freqs)
            if near < TOUCH:
                redo.add(i)  # 1 + L comes near zero on the axis: the one-model count decides
            P = ct.P0 + wk
            mine[name] = NyquistCount(P, N, P + N, False, None, (), response, ct.settle if short_at[i] else None)
        if err > 1e-3:
            redo.add(i)  # a residual: the one-model count words the warning
        counts.append(mine)
    return zc, counts, redo, used


class _Overflow(Exception):
    """NaN beside a finite determinant in a batched trace: the solve overflowed."""


def _outgrown(used: np.ndarray, most: int, work: int) -> set[int]:
    """The samples with more points (`used`, per sample) than one model's trace allows
    (`most` points, `work` points times traced functions): alone, their trace would have
    ended incomplete."""
    return set(np.nonzero(used > min(most, work))[0].tolist())


def _closeness(L: np.ndarray) -> np.ndarray:
    """|1 + L| / (1 + |L|), 1 where that is NaN: below TOUCH on the axis, 1 + L comes near
    zero there and the one-model count decides the sample."""
    with np.errstate(invalid="ignore"):
        return np.nan_to_num(np.abs(1.0 + L) / (1.0 + np.abs(L)), nan=1.0)


def _orders(st: _Stacked, cts: list) -> np.ndarray:
    """stability._origin_orders for every sample: (samples, columns)."""
    B = len(st.breaks)
    q = np.zeros((len(cts), 1 + 2 * B))
    idx = [i for i, ct in enumerate(cts) if ct.pieces[0].kind == "indent" and ct.pieces[0].a == 0.0]
    if not idx:
        return q
    eps = np.array([cts[i].pieces[0].b for i in idx])
    th = np.array([cts[i].pieces[0].theta0 for i in idx])
    s = np.concatenate([2.0 * eps * np.exp(1j * th), 20.0 * eps * np.exp(1j * th)])
    which = np.concatenate([idx, idx])
    log_det, log_one_g, L = st.terms(s, which)
    with np.errstate(all="ignore"):
        v = np.concatenate([log_det[:, None], log_one_g, principal_log(L)], axis=1)
        n = len(idx)
        slope = -(v[n:].real - v[:n].real) / np.log(10.0)
        whole = np.round(slope)
        ok = np.isfinite(slope) & (np.abs(slope - whole) < 0.05)
    q[idx] = np.where(ok, whole, 0.0)
    return q


def _max_step(st: _Stacked, i: int) -> float | None:
    total = float(st.bank.delay[i].sum())
    return 0.3 / total if total > 0 else None


def _step_ok(st: _Stacked, owner: np.ndarray):
    """The delay step rule (Component.step_ok) for points of many samples."""
    delayed = np.nonzero(np.any(st.bank.delay > 0, axis=0))[0]

    def ok(sa, sb, pid):
        which = owner[pid]
        with np.errstate(all="ignore"):
            big = np.maximum(np.abs(st.bank.values(sa, which)[:, delayed]),
                             np.abs(st.bank.values(sb, which)[:, delayed]))
        rate = np.where(~(big < 1e-6), st.bank.delay[which][:, delayed], 0.0).sum(axis=1)
        return np.abs(sb - sa) * rate <= np.pi / 4

    return ok


def _closing(st: _Stacked, cts: list) -> list[list[float]]:
    """certificate.closing_phase for every sample and cut, the t-samples of all samples and
    cuts in one evaluation; a sample whose steps are not fine enough is done alone."""
    from .certificate import closing_phase
    S, n = len(cts), 16
    t = np.linspace(0.0, 1.0, n + 1)
    rows, which = [], []
    ends = np.zeros((S, 2), complex)  # s = R and s = jR of every sample, evaluated together
    ends[:, 0].real = ends[:, 1].imag = [ct.R for ct in cts]
    with np.errstate(all="ignore"):
        V_ends = st.bank.values(ends.ravel(), np.repeat(np.arange(S), 2)).reshape(S, 2, -1)
    for i, ct in enumerate(cts):
        terms, d = ct.terms, ct.scaling
        s = ends[i]
        with np.errstate(all="ignore"):
            V = V_ends[i]
            expo = (d[terms.rows] - d[terms.cols])[None, :]
            V0 = np.where(terms.delayed, 0.0, terms.limit)[None, :] * s[:, None] ** expo
        for k in range(2):
            rows.append(V0[k][None, :] + t[:, None] * (V[k] - V0[k])[None, :])
            which.append(i)
    Vt = np.concatenate(rows)
    # every cut from one evaluation, as certificate.closing_phases: arg det(I - A_k) =
    # arg det(I - A_c) + arg(1 + g_k); a cut where 1 + g_k cancels is done alone
    B = len(st.breaks)
    with np.errstate(all="ignore"):
        phase, _, g = st.program.values(Vt)
        one_g = 1.0 + g
        clean = np.all((np.abs(one_g) > CANCEL * np.maximum(1.0, np.abs(g))).reshape(S, 2 * (n + 1), B), axis=1)
        cols = np.concatenate([phase[:, None], phase[:, None] + np.angle(one_g)], axis=1)
        steps = (np.diff(cols.reshape(S, 2, n + 1, 1 + B), axis=2) + np.pi) % (2 * np.pi) - np.pi
        fine = np.max(np.abs(steps), axis=(1, 2)) < np.pi / 8
        fine[:, 1:] &= clean
        branch = steps.sum(axis=2)
    out = [[0.0] * (1 + B) for _ in range(S)]
    for col, b in enumerate([None, *range(B)]):
        for i in range(S):
            if fine[i, col]:
                out[i][col] = float(branch[i, 0, col] - branch[i, 1, col])
            else:
                comp = cts[i].component
                out[i][col] = closing_phase(comp, cts[i].terms, cts[i].scaling, b, cts[i].R)
    return out


def _extension(st: _Stacked, cts: list, short: list[bool] | None = None):
    """stability._extension for every sample: (trace, owner of each piece). Where `short[i]`,
    sample i's first piece alone (stability.extension_pieces)."""
    pieces, owner = [], []
    for i, ct in enumerate(cts):
        mine = extension_pieces(ct.R, ct.reach, ct.settle, bool(short and short[i]))
        pieces += mine
        owner += [i] * len(mine)
    if not pieces:
        return None
    owner = np.array(owner)
    return _trace_pieces(st, pieces, owner), owner


def _trace_pieces(st: _Stacked, pieces: list, owner: np.ndarray):
    """The trace of extension pieces of many samples (`owner[p]`: the sample of piece p), as
    stability._extension traces one model's."""
    B = len(st.breaks)

    def evaluate(s, pid):
        which = owner[pid]
        return principal_log(st.terms(s, which)[2])

    steps = [None if _max_step(st, i) is None else 2.0 * _max_step(st, i) for i in owner]
    # one model's budget per sample traced, whatever its pieces (as stability._extension)
    traced = len(set(owner.tolist()))
    return trace(pieces, evaluate, [np.zeros(0)] * len(pieces), (REACH_LEVEL / 5,) * B,
                 EXTENSION_SAMPLES * traced, _step_ok(st, owner) if st.bank.has_delay else None,
                 max_step=steps, chord=EXTENSION_CHORD, midpoint=0.3, by_piece=True,
                 max_work=MAX_WORK * traced)
