"""Which loops each break opens, how the breaks nest, and cuts that open more than one loop.

A break *opens* the simple cycles that contain one of its cut wires. Its *own*
cycles are those for which it is the most specific opener (see `own_cycles`): a
cut at a plant output that also opens the loop around it (`break speed at spd`,
where `spd` also feeds the position) still belongs to the loop it was meant for.

Two cycles of a cascade form a "theta": they share one stretch, the inner
loop's forward path from the junction M where their returns meet to the signal
S where they part, and return from S to M separately. The picture alone is
symmetric (swap the two returns and nothing changes), so the rule reads what
the model says about the two returns at M:

1. a return that is a single wire from S to M (no signal between them) is the
   inner loop's measurement, used as it is; a return through other signals
   (the outer controller, its plant, its junction) is not;
2. otherwise the return subtracted at M is the inner loop's measurement and the
   return added at M is its setpoint, computed by the outer loop's controller
   (junctions written setpoint minus measurement, `e = ref - m`);
3. otherwise (both the same sign) the two loops sit side by side: not nested.

Cycles that share nothing, a single signal, or more than one stretch are
coupled, not nested. Break B is enclosed by break A when one of B's own cycles
is inside one of A's and none of A's is inside one of B's; B's enclosing break
is the innermost such A. docs/method.md ("Cascade nesting") gives the reasons.
"""
from __future__ import annotations

from ..language.model import Model

__all__ = ["NESTING_CYCLES", "cycle_wires", "opened_by", "own_cycles", "shared_stretch", "cycle_inside",
           "enclosing", "wide_cut_warning", "loop_text"]

#: own cycles per break compared for nesting: the shortest ones (bounds the pairwise work on big models)
NESTING_CYCLES = 64


def cycle_wires(cycles) -> list[frozenset[tuple[str, str]]]:
    """Each cycle (its signals in loop order) as the set of its wires (source signal, equation
    signal), the last wire closing back to the first signal."""
    return [frozenset(zip(c, (*c[1:], c[0]))) for c in cycles]


def opened_by(edges, wires) -> tuple[int, ...]:
    """Indices of the cycles that contain one of the cut wires `edges`."""
    cut = set(edges)
    return tuple(i for i, w in enumerate(wires) if not cut.isdisjoint(w))


def own_cycles(opened: dict[str, tuple[int, ...]]) -> dict[str, tuple[int, ...]]:
    """Each break's own cycles: those for which it is the one most specific break.

    A cycle's openers are the breaks whose cut lies on it; the most specific is
    the opener whose set of opened cycles lies inside every other opener's set
    (a wide cut at an inner plant output also opens the loops around it, but
    those belong to the breaks that open them alone). A cycle with no such
    opener (two breaks on the same wire, or the cross-coupling cycle of two
    side-by-side loops) belongs to none. A break that owns no cycle keeps all
    it opens.
    """
    sets = {name: frozenset(idx) for name, idx in opened.items()}
    within = {(a, b): sets[a] < sets[b] for a in sets for b in sets if a != b}
    openers: dict[int, list[str]] = {}
    for name, idx in opened.items():
        for i in idx:
            openers.setdefault(i, []).append(name)
    owner: dict[int, str] = {}
    for i, names in openers.items():
        specific = [a for a in names if all(within[(a, b)] for b in names if b != a)]
        if len(specific) == 1:
            owner[i] = specific[0]
    return {name: tuple(i for i in idx if owner.get(i) == name) or idx for name, idx in opened.items()}


def _run(cycle, common) -> list[str] | None:
    """The common signals of `cycle` in its order when they form one stretch; [] when all are common."""
    n = len(cycle)
    starts = [i for i in range(n) if cycle[i] in common and cycle[i - 1] not in common]
    if not starts:
        return []
    if len(starts) > 1:
        return None
    i, run = starts[0], []
    while cycle[i % n] in common:
        run.append(cycle[i % n])
        i += 1
    return run


def _rotate(cycle, first) -> list[str]:
    k = cycle.index(first)
    return list(cycle[k:]) + list(cycle[:k])


def shared_stretch(a, b) -> tuple[str, ...] | None:
    """The one stretch (at least one wire) that cycles a and b share, from M to S; None otherwise."""
    common = set(a) & set(b)
    if len(common) < 2:
        return None
    ra, rb = _run(a, common), _run(b, common)
    if ra is None or rb is None or (ra == [] and rb == []):
        return None
    if ra == []:
        ra = _rotate(a, rb[0])
    if rb == []:
        rb = _rotate(b, ra[0])
    return tuple(ra) if ra == rb else None


def _sign(graph, u: str, v: str) -> int:
    """+1 / -1 when every term of the wire u -> v is added / subtracted, 0 when mixed."""
    gains = [d["term"].gain for d in graph.get_edge_data(u, v).values()]
    if all(g < 0 for g in gains):
        return -1
    if all(g > 0 for g in gains):
        return 1
    return 0


def cycle_inside(graph, inner, outer, stretch=...) -> bool:
    """Whether cycle `inner` is the inner loop of a cascade whose outer loop is cycle `outer`
    (`stretch`: their shared_stretch when already known)."""
    if stretch is ...:
        stretch = shared_stretch(inner, outer)
    if stretch is None:
        return False
    m, s = stretch[0], stretch[-1]
    p_in = inner[inner.index(m) - 1]
    p_out = outer[outer.index(m) - 1]
    plain_in, plain_out = p_in == s, p_out == s
    if plain_in != plain_out:
        return plain_in  # rule 1: a single wire back to the junction is the measurement
    return _sign(graph, p_in, m) < 0 < _sign(graph, p_out, m)  # rule 2: measurement subtracted


def _loop_inside(graph, cycles, inner: tuple[int, ...], outer: tuple[int, ...], stretches: dict) -> bool:
    inner, outer = inner[:NESTING_CYCLES], outer[:NESTING_CYCLES]

    def stretch(i: int, j: int):
        # the same stretch either way round (both cycles' runs must agree): found once a pair
        key = (i, j) if i <= j else (j, i)
        if key not in stretches:
            stretches[key] = shared_stretch(cycles[i], cycles[j])
        return stretches[key]

    pairs = [(b, a) for b in inner for a in outer]
    return (any(cycle_inside(graph, cycles[b], cycles[a], stretch(b, a)) for b, a in pairs)
            and not any(cycle_inside(graph, cycles[a], cycles[b], stretch(a, b)) for b, a in pairs))


def enclosing(graph, cycles, own: dict[str, tuple[int, ...]]) -> dict[str, str | None]:
    """Each break's enclosing break: the innermost of those whose loop is around its own."""
    names = list(own)
    stretches: dict = {}
    inside = {(b, a): a != b and _loop_inside(graph, cycles, own[b], own[a], stretches)
              for b in names for a in names}
    out: dict[str, str | None] = {}
    for b in names:
        around = [a for a in names if inside[(b, a)]]
        innermost = [a for a in around if all(inside[(a, other)] for other in around if other != a)]
        if len(innermost) == 1:
            out[b] = innermost[0]
        elif around:
            # the loops around B do not nest among themselves: take the smallest (documented)
            size = {a: len({n for i in own[a] for n in cycles[i]}) for a in around}
            out[b] = min(around, key=lambda a: (size[a], names.index(a)))
        else:
            out[b] = None
    return out


def loop_text(cycle, model: Model, start: str | None = None) -> str:
    """A cycle as the user wrote it: hidden signals shown as their equation, each signal once."""
    if start is not None and start in cycle:
        cycle = _rotate(cycle, start)
    names = [model.hidden_owner.get(n, n) if n in model.hidden else n for n in cycle]
    names = [n for i, n in enumerate(names) if i == 0 or n != names[i - 1]]
    while len(names) > 1 and names[-1] == names[0]:
        names.pop()
    return " -> ".join(names + names[:1])


def _listing(names) -> str:
    quoted = [f"`{n}`" for n in names]
    return quoted[0] if len(quoted) == 1 else ", ".join(quoted[:-1]) + " and " + quoted[-1]


def wide_cut_warning(cut, own: dict[str, tuple[int, ...]], cycles, wires, model: Model,
                     graph) -> tuple[str, str, str] | None:
    """LW384 for a break whose wires feed several equations that each close a loop.

    (A break with `-> target` cuts wires into one equation only.) `own` holds
    every break's own cycles. loopwise does not know which blocks are the
    controller, so every equation fed with a loop counts; the wires are listed
    with the likeliest feedback junction first: the one carrying this break's
    own loop and no other break's, where the signal is subtracted, where an
    input (a setpoint) enters, where a signal from off this break's own loops
    (an outer controller's setpoint) enters, the first defined.
    """
    name = cut.stmt.name
    groups: dict[str, list[tuple[str, str]]] = {}
    for u, v in cut.edges:
        groups.setdefault(model.hidden_owner.get(v, v), []).append((u, v))
    closing = {target: idx for target, edges in groups.items() if (idx := opened_by(edges, wires))}
    if len(closing) < 2:
        return None
    order = {n: i for i, n in enumerate(model.signals)}
    mine = set(own.get(name, ()))
    on_own = {n for i in mine for n in cycles[i]}

    def theirs(target) -> list[str]:
        return [b for b, idx in own.items() if b != name and not set(idx).isdisjoint(closing[target])]

    def rank(target):
        junctions = {v for _, v in groups[target]}
        sources = {t.source for v in junctions for t in model.equations[v]} - {cut.signal}
        subtracted = all(_sign(graph, u, v) < 0 for u, v in groups[target])
        return (mine.isdisjoint(closing[target]), bool(theirs(target)), not subtracted,
                sources.isdisjoint(model.inputs), sources <= on_own, order.get(target, len(order)))

    targets = sorted(closing, key=rank)
    parts = []
    for target in targets:
        loop = loop_text(cycles[closing[target][0]], model, cut.signal)
        names = theirs(target)
        plural = "s" if len(names) > 1 else ""
        whose = f", the loop{plural} of break{plural} {_listing(names)}" if names else ""
        parts.append(f"into `{target}` ({loop}{whose})")
    x, first = cut.signal, targets[0]
    message = (f"`{x}` feeds {len(targets)} equations that each close a loop, and this break cuts them all: "
               + "; ".join(parts) + ". The margins are those with all of them open at once; to open only "
               f"the loop through `{first}`, write `break {name} at {x} -> {first}`")
    hint = (f"if the wider opening is what you mean (a controller that reads `{x}` twice, an actuator that "
            f"drives several channels), route `{x}` through one signal (`{x}_m = {x}`, used wherever `{x}` was) "
            f"and break at `{x} -> {x}_m`")
    return ("LW384", message, hint)
