"""The wiring reduced once per model: loop components, kept signals, loop transfers.

Signals x obey ``x = A(s) x + B(s) u``. A is reduced once, structurally:

* **Components.** The strongly connected components of the signal graph that hold a
  loop. With the signals ordered by component, I - A is block triangular, so
  ``det(I - A) = prod_c det(I - A_c)``: each component is counted on its own (and a
  break, whose cut wires lie inside one component, belongs to one). Terms outside
  every component (on a path between loops, from an input, to an output) have states
  but no part in any determinant.
* **Kept signals.** In each component a set K of signals is kept - every break's
  signal and enough others that no loop is left among the rest, H (a feedback vertex
  set, chosen greedily). H is then acyclic: ordered topologically, I - A_HH is unit
  triangular, and the Schur complement
  ``S = A_KK + A_KH (I - A_HH)^-1 A_HK`` has ``det(I - A_c) = det(I - S)``.
  S is formed at each frequency by propagating through H in topological order (one
  vectorised operation per wiring term, all frequencies at once); a series chain or a
  signal that carries no loop of its own never reaches a matrix solve.
* **Breaks.** Cutting break k is a rank-one change A_k = A - u_k e_sig^T (u_k: the cut
  terms, all from the break's signal). The same propagation carries u_k into the kept
  signals (U[:, k]); with g_k = e_sig^T (I - S)^-1 U[:, k] (Sherman-Morrison),
  ``det(I - A_k) = det(I - A)(1 + g_k)`` and ``L_k = -g_k / (1 + g_k)``. One solve of the
  |K| x |K| system per frequency serves every break of the component.
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import heapq

import numpy as np

from ..language.resolve import Term
from .blocks import Bank
from .diagram import Diagram, strong_components
from .program import Program, build_program
from .solve import distinct

__all__ = ["Instance", "Component", "Reduction", "reduce_diagram", "ComponentValues", "elimination_programs",
           "program_groups", "safe_program", "CANCEL"]

#: 1 + g_k smaller than this (relative to max(1, |g_k|)) is solved with the break's wires cut
CANCEL = 1e-3
#: points closer to a pole in Re s >= 0 than this fraction of its distance to the nearest
#: other root are evaluated with the outputs of the terms with that pole kept
NEAR = 1e-3
#: a term with a pole in Re s >= 0 larger than this at a point sends it to the safe program
SAFE_LEVEL = 1e16
#: the safe program lets this many such terms multiply on one path: their values stay below
#: about 1e75 each at the smallest indentation (radius >= 1e-250^(1/order) scaled), 1e300 together
SAFE_PER_PATH = 4
#: points where every such term stays below MID_LEVEL (and none is near its pole) use a
#: program that lets MID_PER_PATH of them multiply: below 1e200 together, the main program's
#: margin (12 terms below SAFE_LEVEL, 1e192); it keeps fewer signals than the safe one (a
#: 47-loop cascade: 16 instead of 24, a quarter of the cost per point)
MID_LEVEL = 1e25
MID_PER_PATH = 8
#: complex values one batch of points may hold in a propagation (about 64 MB)
CHUNK = 4_000_000


@dataclass(frozen=True, eq=False)
class Instance:
    """One wiring term: row i (equation), column j (source), gain, transfer or None."""

    row: int
    col: int
    term: Term

    @property
    def transfer(self):
        """The applied block's transfer function (a Transfer), or None for a plain gain."""
        return None if self.term.app is None else self.term.app.transfer


@dataclass(frozen=True, eq=False)
class ComponentValues:
    """A component at an array of s: phase and log|.| of det(I - A_c), and g_k for its breaks
    (columns in the order of `Component.breaks`)."""

    det_phase: np.ndarray
    det_log: np.ndarray
    g: np.ndarray


@dataclass(frozen=True, eq=False)
class Component:
    """One strongly connected part of the wiring that holds a loop, reduced to kept signals.

    `signals` and `instances` are global indices; `bank` holds the values of its terms
    (one position per instance, in the order of `instances`), `entries` their (global
    row, global column, gain, transfer or None); `program` the elimination used at most
    points (program.py). `safe` lets at most SAFE_PER_PATH terms with a pole in Re s >= 0
    multiply along a path through the eliminated signals; points within `near` (pole, radius) of such a
    pole, or where such a term exceeds SAFE_LEVEL, use it, so the values that are huge
    there meet the pivoted solve rather than being multiplied together. It is None where
    the main program already keeps them apart (`safe_program`). `mid` lets MID_PER_PATH
    of them multiply and serves the points where each stays below MID_LEVEL (away from
    the poles), when it keeps fewer signals than `safe`.
    """

    signals: tuple[int, ...]
    instances: tuple[int, ...]
    breaks: tuple[str, ...]
    bank: Bank
    cut_positions: tuple[tuple[int, ...], ...]  # per break: bank positions of its cut terms
    entries: tuple[tuple[int, int, float, object], ...]
    program: Program
    safe: Program | None = None
    near: tuple[tuple[complex, float], ...] = ()
    big: tuple[int, ...] = ()  # bank positions of the terms with a pole in Re s >= 0
    mid: Program | None = None  # MID_PER_PATH such terms per path (None: not smaller than `safe`)

    @property
    def kept(self) -> tuple[int, ...]:
        """The signals the component's main program keeps (global signal indices): every break's
        signal and a feedback set, so that no loop is left among the eliminated ones."""
        return self.program.kept

    def _groups(self, s: np.ndarray, V: np.ndarray) -> list[tuple[np.ndarray | slice, Program]]:
        """Which program evaluates which points (`program_groups`), next to a pole in
        Re s >= 0 the safe one."""
        near = None
        if self.safe is not None:
            near = np.zeros(s.size, bool)
            for p, r in self.near:
                near |= (np.abs(s - p) <= r) | (np.abs(s - np.conj(p)) <= r)
        return program_groups(V, self.big, near, (self.program, self.safe, self.mid), len(self.breaks))

    def values(self, s: np.ndarray) -> ComponentValues:
        """det(I - A_c) and every break's g_k at the points s (one propagation, one solve)."""
        s = np.asarray(s, dtype=complex).ravel()
        with np.errstate(all="ignore"):
            return self._values(s, self.bank.values(s))

    def _values(self, s: np.ndarray, V: np.ndarray) -> ComponentValues:
        with np.errstate(all="ignore"):
            groups = self._groups(s, V)
            if len(groups) == 1:
                return ComponentValues(*groups[0][1].values(V))
            phase, logabs = np.zeros(s.size), np.zeros(s.size)
            g = np.zeros((s.size, len(self.breaks)), complex)
            for idx, prog in groups:
                phase[idx], logabs[idx], g[idx] = prog.values(V[idx])
        return ComponentValues(phase, logabs, g)

    def terms(self, s: np.ndarray, breaks: int | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """log det(I - A_c), log(1 + g_k) and L_k (columns: the first `breaks` breaks) at s.

        Where 1 + g_k cancels (|1 + g_k| < CANCEL max(1, |g_k|): |L_k| large, e.g. next to
        a double integrator), break k is solved with its wires cut instead, so that
        neither L_k nor det(I - A_k) = det(I - A)(1 + g_k) loses digits.
        """
        s = np.asarray(s, dtype=complex).ravel()
        with np.errstate(all="ignore"):
            V = self.bank.values(s)
        v = self._values(s, V)
        g = v.g[:, :breaks]
        with np.errstate(all="ignore"):
            one_g = 1.0 + g
            L = -g / one_g
            log_det = v.det_log + 1j * v.det_phase
            log_one_g = np.log(one_g + 0j)
            bad = ~(np.abs(one_g) > CANCEL * np.maximum(1.0, np.abs(g)))
            for k in np.nonzero(bad.any(axis=0))[0]:
                rows = np.nonzero(bad[:, k])[0]
                ph, lg, Lk = self._direct(int(k), s[rows], V[rows])
                log_one_g[rows, k] = (lg + 1j * ph) - log_det[rows]
                L[rows, k] = Lk
        return log_det, log_one_g, L

    def loops(self, s: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """L of break cols[j] (position in `breaks`) at s[j]: the margins' evaluator.

        Sherman-Morrison with one right-hand side per point; where 1 + g cancels (|L|
        large) that break is solved with its wires cut."""
        s = np.asarray(s, dtype=complex).ravel()
        cols = np.broadcast_to(np.asarray(cols, dtype=int), s.shape).ravel()
        g = np.empty(s.size, complex)
        with np.errstate(all="ignore"):
            V = self.bank.values(s)
            for idx, prog in self._groups(s, V):
                g[idx] = prog.selected(V[idx], cols[idx])
            L = -g / (1.0 + g)
            bad = ~(np.abs(1.0 + g) > CANCEL * np.maximum(1.0, np.abs(g)))
            for k in distinct(cols[bad]):
                rows = np.nonzero(bad & (cols == k))[0]
                L[rows] = self._direct(int(k), s[rows], V[rows])[2]
        return L

    def direct(self, b: int, s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Break b solved with its wires cut: phase and log|.| of det(I - A_k), and L_k
        (accurate where L_k is far below or far above 1; see Program.direct)."""
        s = np.asarray(s, dtype=complex).ravel()
        with np.errstate(all="ignore"):
            return self._direct(b, s, self.bank.values(s))

    def _direct(self, b: int, s: np.ndarray, V: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        # from the term values already at hand (a point's values do not depend on the others)
        phase, logabs, L = np.zeros(s.size), np.zeros(s.size), np.zeros(s.size, complex)
        with np.errstate(all="ignore"):
            for idx, prog in self._groups(s, V):
                phase[idx], logabs[idx], L[idx] = prog.direct(V[idx], b)
        return phase, logabs, L

    @cached_property
    def _delayed(self) -> tuple[np.ndarray, Bank | None]:
        """The delays and a bank of the component's delayed terms alone (for step_ok)."""
        pos = np.nonzero(self.bank.delay > 0)[0]
        if pos.size == 0:
            return np.zeros(0), None
        return self.bank.delay[pos], Bank([self.entries[p][2] for p in pos], [self.entries[p][3] for p in pos])

    @property
    def has_delay(self) -> bool:
        """Whether any of the component's terms carries a delay exp(-T s)."""
        return self.bank.has_delay

    def step_ok(self, sa: np.ndarray, sb: np.ndarray) -> np.ndarray:
        """Whether each interval [sa, sb] is short enough for the delays that matter there.

        The sum of the delays of the terms that are not negligible at either end
        (|term| > 1e-6) times the interval's length must stay below pi/4: three samples
        cannot tell a whole number of turns of exp(-j w T) from none.
        """
        delays, bank = self._delayed
        if bank is None:
            return np.ones(sa.shape, bool)
        with np.errstate(all="ignore"):
            big = np.maximum(np.abs(bank.values(sa)), np.abs(bank.values(sb)))
        rate = np.where(~(big < 1e-6), delays[None, :], 0.0).sum(axis=1)
        return np.abs(sb - sa) * rate <= np.pi / 4

    def phase_at(self, V: np.ndarray, b: int | None = None) -> np.ndarray:
        """arg det(I - A_c) (or A_k with break b cut) for given term values V (rows: points)."""
        with np.errstate(all="ignore"):
            return self.program.values(V)[0] if b is None else self.program.direct(V, b)[0]

    def dense(self, s: np.ndarray, cut: frozenset[int] = frozenset()) -> np.ndarray:
        """The component's own block A_c (or A_k with the bank positions in `cut` removed),
        shape (len(s), n_c, n_c), rows and columns in the order of `signals`."""
        s = np.asarray(s, dtype=complex).ravel()
        with np.errstate(all="ignore"):
            V = self.bank.values(s)
        n = len(self.signals)
        A = np.zeros((s.size, n, n), complex)
        order = {g: i for i, g in enumerate(self.signals)}
        for p, (row, col, _, _) in enumerate(self.entries):
            if p not in cut:
                A[:, order[row], order[col]] += V[:, p]
        return A

    def roots(self) -> tuple[np.ndarray, np.ndarray]:
        """Poles and zeros of the component's terms."""
        tfs = [t for _, _, _, t in self.entries if t is not None]
        empty = np.zeros(0, complex)
        return (np.concatenate([t.poles for t in tfs]) if tfs else empty,
                np.concatenate([t.zeros for t in tfs]) if tfs else empty)


@dataclass(frozen=True, eq=False)
class Reduction:
    """A model's wiring, reduced once: its terms, components and breaks."""

    diagram: Diagram
    signals: tuple[str, ...]
    instances: tuple[Instance, ...]
    cut_sets: dict[str, frozenset[int]]  # break name -> indices of instances cut
    #: applications driven by an input only: outside A, but their states are part of the
    #: system, so their poles belong in prod(den_b) (and an unstable one in Z)
    exogenous: tuple[Term, ...] = ()
    components: tuple[Component, ...] = ()
    #: instances on no loop (between loops, on output paths): states outside every determinant
    outside: tuple[int, ...] = ()

    # --- structural facts ------------------------------------------------------------
    @property
    def n(self) -> int:
        """How many signals the wiring has (inputs excluded): the size of A(s)."""
        return len(self.signals)

    def block_poles(self) -> np.ndarray:
        """All poles of all applications (each application is its own instance)."""
        poles = [i.transfer.poles for i in self.instances if i.transfer is not None]
        poles += [t.app.transfer.poles for t in self.exogenous]
        return np.concatenate(poles) if poles else np.zeros(0, complex)

    def block_zeros(self) -> np.ndarray:
        """All zeros (complex, rad/s) of the block applications inside the wiring, each
        application its own instance; blocks on input paths are left out."""
        zs = [i.transfer.zeros for i in self.instances if i.transfer is not None]
        return np.concatenate(zs) if zs else np.zeros(0, complex)

    @property
    def has_delay(self) -> bool:
        """Whether any block application in the wiring carries a delay (then no state-space form exists)."""
        return any(i.transfer is not None and i.transfer.delay > 0 for i in self.instances)

    def cut_signal(self, name: str) -> str:
        """The signal break `name` cuts (and measures)."""
        return next(b.signal for b in self.diagram.breaks if b.stmt.name == name)

    @cached_property
    def component_of(self) -> dict[str, int]:
        """Break name -> index of its component."""
        return {b: i for i, c in enumerate(self.components) for b in c.breaks}

    # --- evaluation --------------------------------------------------------------------
    def characteristic(self, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Phase and log|.| of det(I - A(s)) = prod over components of det(I - A_c)."""
        s = np.asarray(s, dtype=complex).ravel()
        phase, logabs = np.zeros(s.size), np.zeros(s.size)
        for c in self.components:
            v = c.values(s)
            phase, logabs = phase + v.det_phase, logabs + v.det_log
        return np.angle(np.exp(1j * phase)), logabs

    def loop_transfer(self, name: str, s) -> np.ndarray:
        """L_k = -y/v at break `name` (other loops closed) at the points s."""
        s = np.atleast_1d(np.asarray(s, dtype=complex)).ravel()
        c = self.components[self.component_of[name]]
        return c.direct(c.breaks.index(name), s)[2]


def bounded_batches(groups, n_breaks: int) -> list:
    """(point indices, program) groups cut into batches of bounded memory: a propagation
    holds (points, nodes, kept + breaks) values, at most about CHUNK of them at once."""
    out = []
    for idx, prog in groups:
        per_point = len(prog.feeds) * (prog.n_kept + n_breaks + 1) + prog.n_kept ** 2
        step = max(64, int(CHUNK / per_point))
        out += [(idx[i:i + step], prog) for i in range(0, idx.size, step)]
    return out


def reduce_diagram(diagram: Diagram) -> Reduction:
    """A model's wiring reduced once (see the module text): its terms indexed by equation row
    and source column, the terms each break cuts, the block applications on input paths,
    and the loop components, upstream first, each with its kept signals and elimination
    programs."""
    model = diagram.model
    signals = diagram.signals
    index = {n: i for i, n in enumerate(signals)}
    instances = []
    exogenous = []
    for target, terms in model.equations.items():
        for term in terms:
            if term.source in model.inputs:
                # B(s) u: no part in any loop, but a block here still has states of its own
                if term.app is not None:
                    exogenous.append(term)
                continue
            instances.append(Instance(index[target], index[term.source], term))
    cut_sets = {}
    for cut in diagram.breaks:
        edges = set(cut.edges)
        cut_sets[cut.stmt.name] = frozenset(
            k for k, inst in enumerate(instances)
            if (signals[inst.col], signals[inst.row]) in edges)
    components, outside = _components(signals, instances, cut_sets, diagram)
    return Reduction(diagram, signals, tuple(instances), cut_sets, tuple(exogenous), components, outside)


def _components(signals, instances, cut_sets, diagram) -> tuple[tuple[Component, ...], tuple[int, ...]]:
    n = len(signals)
    succ: dict[int, list[int]] = {i: [] for i in range(n)}
    for inst in instances:
        succ[inst.col].append(inst.row)
    comps = []
    inside: set[int] = set()
    # components upstream first (a topological order of the condensation), so that a
    # loop's signals are known before the loops they feed
    for members in _upstream_first(n, [(i.col, i.row) for i in instances]):
        if len(members) == 1 and members[0] not in succ[members[0]]:
            continue  # no loop through this signal
        member_set = set(members)
        insts = tuple(k for k, i in enumerate(instances) if i.row in member_set and i.col in member_set)
        inside.update(insts)
        breaks = tuple(c.stmt.name for c in diagram.breaks if signals.index(c.signal) in member_set
                       and any(k in insts for k in cut_sets[c.stmt.name]))
        comps.append(_component(members, insts, breaks, instances, cut_sets, signals))
    outside = tuple(k for k in range(len(instances)) if k not in inside)
    return tuple(comps), outside


def elimination_programs(members, ends, measured, cuts, big: set[int], program: Program | None = None
                         ) -> tuple[Program, Program | None, Program | None]:
    """A component's main, safe and middle programs (see `Component`): the safe one only
    where the main one does not already keep the terms with a pole in Re s >= 0 apart,
    the middle one only where it keeps fewer signals than the safe one. `program`: the
    main one, if already built."""
    if program is None:
        program = build_program(members, ends, measured, cuts, big)
    safe = safe_program(members, ends, measured, cuts, big)
    mid = build_program(members, ends, measured, cuts, big, most=MID_PER_PATH) if safe is not None else None
    if mid is not None and mid.n_kept >= safe.n_kept:
        mid = None
    return program, safe, mid


def program_groups(V: np.ndarray, big, near: np.ndarray | None, programs: tuple, n_breaks: int
                   ) -> list[tuple[np.ndarray | slice, Program]]:
    """Which of a component's programs (main, safe, middle: `elimination_programs`)
    evaluates which points, from the terms' values V (points, terms): where a term with a
    pole in Re s >= 0 (bank positions `big`) is huge, or at a point `near` one of its poles
    (a mask; None: not known), the safe one; where each stays below MID_LEVEL, the middle
    one; elsewhere the main one. Cut into batches of bounded size."""
    program, safe, mid = programs
    if safe is None:
        groups = [(np.arange(V.shape[0]), program)]
    else:
        with np.errstate(all="ignore"):
            level = np.max(np.abs(V[:, list(big)]), axis=1)
        far = ~near if near is not None else np.ones(V.shape[0], bool)
        plain = (level < SAFE_LEVEL) & far
        middle = ~plain & (level < MID_LEVEL) & far if mid is not None else np.zeros(V.shape[0], bool)
        groups = [(np.nonzero(plain)[0], program), (np.nonzero(middle)[0], mid),
                  (np.nonzero(~plain & ~middle)[0], safe)]
        groups = [(idx, prog) for idx, prog in groups if idx.size]
    out = bounded_batches(groups, n_breaks)
    if len(out) == 1 and out[0][0].size == V.shape[0]:
        return [(slice(None), out[0][1])]  # every point, one program: no copies by index
    return out


def safe_program(members, ends, measured, cuts, big: set[int]) -> Program | None:
    """The program that lets at most SAFE_PER_PATH terms with a pole in Re s >= 0 multiply
    along a path through the eliminated signals; None when the main program already does:
    a path through them (a loop-free order) passes each term at most once, so with no more
    than SAFE_PER_PATH such terms in all, both programs keep the same signals and are the
    same program."""
    return build_program(members, ends, measured, cuts, big, most=SAFE_PER_PATH) if len(big) > SAFE_PER_PATH \
        else None


def _upstream_first(n: int, edges: list[tuple[int, int]]) -> list[list[int]]:
    """The strongly connected components (sorted member lists) in topological order of the
    condensation, ties broken by the smallest member: at each step, of the components
    whose feeding components are all listed, the one with the smallest member. Members
    are unique, so the order is unique."""
    comps = strong_components(n, edges)
    comp_of = [0] * n
    for c, members in enumerate(comps):
        for m in members:
            comp_of[m] = c
    feeds: list[set[int]] = [set() for _ in comps]
    waiting = [0] * len(comps)
    for u, v in edges:
        cu, cv = comp_of[u], comp_of[v]
        if cu != cv and cv not in feeds[cu]:
            feeds[cu].add(cv)
            waiting[cv] += 1
    ready = [(comps[c][0], c) for c in range(len(comps)) if waiting[c] == 0]
    heapq.heapify(ready)
    out = []
    while ready:
        _, c = heapq.heappop(ready)
        out.append(comps[c])
        for d in feeds[c]:
            waiting[d] -= 1
            if waiting[d] == 0:
                heapq.heappush(ready, (comps[d][0], d))
    return out


def _component(members, insts, breaks, instances, cut_sets, signals) -> Component:
    position = {k: p for p, k in enumerate(insts)}
    ends = [(instances[k].row, instances[k].col) for k in insts]
    measured = [instances[next(iter(cut_sets[name]))].col for name in breaks]
    cuts = [frozenset(position[k] for k in cut_sets[name] if k in position) for name in breaks]
    entries = tuple((instances[k].row, instances[k].col, instances[k].term.gain, instances[k].transfer)
                    for k in insts)
    tfs = [e[3] for e in entries]
    big = {p for p, tf in enumerate(tfs) if tf is not None and np.any(tf.poles.real >= 0)}
    program = build_program(members, ends, measured, cuts, big)
    roots = np.concatenate([np.concatenate([t.poles, t.zeros]) for t in tfs if t is not None] or [np.zeros(0)])
    near = []
    upper = [t.poles[(t.poles.real >= 0) & (t.poles.imag >= 0)] for t in tfs if t is not None]
    for p in dict.fromkeys(complex(p) for ps in upper for p in ps):
        others = roots[roots != p]
        d = float(np.min(np.abs(others - p))) if others.size else max(1.0, abs(p))
        near.append((p, NEAR * d))
    _, safe, mid = elimination_programs(members, ends, measured, cuts, big, program)
    bank = Bank([instances[k].term.gain for k in insts], [instances[k].transfer for k in insts])
    return Component(tuple(members), tuple(insts), tuple(breaks), bank, tuple(tuple(sorted(c)) for c in cuts),
                     entries, program, safe, tuple(near), tuple(sorted(big)), mid)
