"""Resolved model -> the loop graph (networkx) and its structural checks.

Signals are nodes; each wiring term is an edge from its source signal into the
signal whose equation uses it, carrying the term (a gain, or one block
application). Checks: unused inputs, algebraic loops (ill-posed or merely
present), loops that no break opens, breaks that open nothing or name a wire
that does not exist, and the cascade nesting of the breaks.

Which cycles each break opens, the nesting of the breaks and the cuts that open
more than one loop (LW384) are worked out in `nesting.py`.
"""
from __future__ import annotations

from dataclasses import dataclass

import networkx as nx
import numpy as np

from ..errors import Finding, ModelError, ModelErrors, Span
from ..language.ast import BreakStmt
from ..language.hints import did_you_mean as _hint  # the one "did you mean" rule
from ..language.resolve import Model, Term
from .nesting import cycle_wires, enclosing, loop_text, opened_by, own_cycles, wide_cut_warning
from .solve import nonsingular

__all__ = ["Diagram", "BreakCut", "build_diagram", "acyclic", "strong_components", "MAX_CYCLES"]

#: cycle enumeration stops here; larger models get their loop checks on what was found
MAX_CYCLES = 20000
#: path steps the plain cycle search may take before the graph library's search takes over
SMALL_SEARCH = 20000


@dataclass(frozen=True, eq=False)
class BreakCut:
    """The wires one break cuts: (source signal, equation signal) pairs.

    `loop` holds the signals on every cycle the break opens; `cycles` the
    break's own cycles (those it is the most specific opener of, see
    nesting.own_cycles), from which the nesting follows; `warnings` its
    structural warnings as (code, message, hint).
    """

    stmt: BreakStmt
    signal: str
    edges: tuple[tuple[str, str], ...]
    loop: frozenset[str]
    enclosed_by: str | None = None
    cycles: tuple[tuple[str, ...], ...] = ()
    warnings: tuple[tuple[str, str, str | None], ...] = ()

    def findings(self) -> tuple[Finding, ...]:
        """The structural warnings as findings located at the break statement."""
        return tuple(Finding("warning", code, message, self.stmt.span, hint, (self.stmt.name,))
                     for code, message, hint in self.warnings)


@dataclass(frozen=True, eq=False)
class Diagram:
    """A model's loop graph: signals and inputs as nodes, each wiring term an edge from its
    source into the signal whose equation uses it. `signals` lists the wiring's signals in
    a fixed order (inputs excluded), `cycles` holds the simple loops (each from its first-defined
    signal, shortest first; `cycles_complete` is False when there were too many to list),
    `breaks` every break's cut wires, loops and enclosing break, and `findings` the
    structural warnings and notes."""

    model: Model
    graph: nx.MultiDiGraph
    signals: tuple[str, ...]  # the state of the wiring, in a fixed order (inputs excluded)
    cycles: tuple[tuple[str, ...], ...]
    breaks: tuple[BreakCut, ...]
    findings: tuple[Finding, ...]
    cycles_complete: bool = True


def _feeds(term: Term) -> bool:
    """Whether the term passes its input through at infinite frequency without delay."""
    if term.app is None:
        return term.gain != 0.0
    tf = term.app.transfer
    return tf.delay == 0.0 and tf.feedthrough != 0.0


def build_diagram(model: Model) -> Diagram:
    """The loop graph of a resolved model and its structural checks: unused inputs, algebraic
    loops, loops that no break opens, breaks that open nothing or name a wire that does not
    exist, requirements on unknown breaks, and the cascade nesting of the breaks (nesting.py).
    Raises ModelErrors (each located) for what makes the model uncheckable; the rest are
    findings on the diagram."""
    g = nx.MultiDiGraph()
    for name in model.inputs:
        g.add_node(name, kind="input")
    for name in model.signals:
        g.add_node(name, kind="hidden" if name in model.hidden else "signal")
    for target, terms in model.equations.items():
        for term in terms:
            g.add_edge(term.source, target, term=term)
    errors: list[ModelError] = []
    findings: list[Finding] = list(model.findings)
    for terms in model.equations.values():
        for term in terms:
            if not np.isfinite(term.gain):  # `1e300*1e300*x`
                raise ModelError("LW106", "this term's gain is not a finite number (overflow in double "
                                 "precision)", term.span, "rescale the model's gains")
    used = {term.source for terms in model.equations.values() for term in terms}  # every wire's source
    for name, span in model.inputs.items():
        if name not in used:
            findings.append(Finding("warning", "LW381", f"input `{name}` is never used", span,
                                    "use it in a signal equation or remove it", (name,)))
    signals = tuple(n for n in model.signals)  # defined order: equations, then hidden ones
    findings.extend(_algebraic_loops(model, g, signals, errors))
    cycles, complete = _cycles(g, model)
    cuts = _breaks(model, g, errors)
    names = {c.stmt.name for c in cuts} | {b.name for b in model.breaks}
    for req in model.requirements:
        if req.target != "*" and req.target not in names:
            errors.append(ModelError("LW307", f"requirement on unknown break `{req.target}`", req.target_span,
                                     _hint(req.target, names) or
                                     ("breaks: " + ", ".join(sorted(names)) if names else "the model has no breaks")))
    if errors:
        raise ModelErrors(errors)
    cuts = _loops_and_nesting(cuts, cycles, model, g)
    findings.extend(_unbroken(cycles, cuts, model))
    for cut in cuts:
        if not cut.loop:
            errors.append(ModelError("LW302", f"break `{cut.stmt.name}` at `{cut.stmt.at}` opens no loop",
                                     cut.stmt.signal_span, "the cut wire lies on no feedback loop; "
                                     "break a signal that the loop feeds back"))
    if errors:
        raise ModelErrors(errors)
    if not complete:
        findings.append(Finding("note", "LW392", f"more than {MAX_CYCLES} loops: structural loop checks "
                                "covered the first ones only", Span(model.file, 1, 1), None))
    return Diagram(model, g, signals, tuple(cycles), tuple(cuts), tuple(findings), complete)


def _display(name: str, model: Model) -> str:
    return model.hidden_owner.get(name, name) if name in model.hidden else name


def _algebraic_loops(model: Model, g, signals, errors) -> list[Finding]:
    index = {n: i for i, n in enumerate(signals)}
    pairs = [(index[term.source], index[v]) for v, terms in model.equations.items() for term in terms
             if term.source in model.signals and _feeds(term)]
    if acyclic(len(signals), pairs):
        return []  # no loop without dynamics
    wires = [(u, v) for u, v, data in g.edges(data=True) if u in model.signals and _feeds(data["term"])]
    direct = nx.DiGraph()
    direct.add_nodes_from(signals)
    direct.add_edges_from(wires)
    out = []
    for comp in nx.strongly_connected_components(direct):
        if len(comp) == 1:
            (n,) = comp
            if not direct.has_edge(n, n):
                continue
        names = sorted({_display(n, model) for n in comp})
        # well-posedness: I - A(inf) restricted to the loop must be invertible
        idx = {n: i for i, n in enumerate(sorted(comp))}
        inner = [data["term"] for u, v, data in g.edges(data=True) if u in idx and v in idx and _feeds(data["term"])]
        if any(t.app is not None and not t.app.transfer.is_proper for t in inner):
            continue  # an ideal derivative on a loop: the engine's high-frequency check names it (LW403)
        m = np.eye(len(idx))
        gross = np.eye(len(idx))
        for u, v, data in g.edges(data=True):
            if u in idx and v in idx and _feeds(data["term"]):
                t = data["term"]
                a = t.gain * (1.0 if t.app is None else t.app.transfer.feedthrough)
                m[idx[v], idx[u]] -= a
                gross[idx[v], idx[u]] += abs(a)
        span = model.signals[sorted(comp)[0]]
        if not nonsingular(m, gross):
            errors.append(ModelError("LW301", "ill-posed algebraic loop through " + ", ".join(f"`{n}`" for n in names),
                                     span, "the loop has no dynamics and its direct gain is exactly 1: "
                                     "the signals are not determined; add dynamics or change a gain"))
        else:
            out.append(Finding("note", "LW391", "algebraic loop (no dynamics) through "
                               + ", ".join(f"`{n}`" for n in names) + "; it is well-posed", span, None,
                               tuple(names)))
    return out


def _cycles(g, model: Model):
    """Simple cycles, each starting at its signal defined first, shortest first.

    networkx returns them in an order that follows set iteration (string
    hashes vary between runs), so they are put in a fixed order here.
    """
    order = {n: i for i, n in enumerate(model.signals)}
    wires = {(term.source, v) for v, terms in model.equations.items() for term in terms
             if term.source in order and v in order}  # the graph's wires between signals
    found = _rooted_cycles(list(model.signals), wires)
    if found is not None:
        return sorted(found, key=lambda c: (len(c), [order[n] for n in c])), True
    # a plain DiGraph of the signals' wires (a subgraph view of the multigraph is slow to copy)
    simple = nx.DiGraph()
    simple.add_nodes_from(n for n in g if n in order)
    simple.add_edges_from((u, v) for u, v in g.edges() if u in order and v in order)
    cycles = []
    complete = True
    for cyc in nx.simple_cycles(simple):
        k = min(range(len(cyc)), key=lambda i: order[cyc[i]])
        cycles.append(tuple(cyc[k:] + cyc[:k]))
        if len(cycles) >= MAX_CYCLES:
            complete = False
            break
    cycles.sort(key=lambda c: (len(c), [order[n] for n in c]))
    return cycles, complete


def _rooted_cycles(nodes: list[str], wires: set[tuple[str, str]]) -> list[tuple[str, ...]] | None:
    """Every simple cycle, each once, from its first node in `nodes` order: a depth-first
    search from each node through later nodes only (a cycle is found from its first node
    alone). The set of simple cycles of a graph is unique, so sorted they are those of
    the graph library's search. None when the search would exceed SMALL_SEARCH steps or
    find MAX_CYCLES cycles: the library's search (and its cut-off) decides those."""
    pos = {n: i for i, n in enumerate(nodes)}
    succ: dict[int, list[int]] = {i: [] for i in range(len(nodes))}
    for u, v in sorted(wires, key=lambda e: (pos[e[0]], pos[e[1]])):
        succ[pos[u]].append(pos[v])
    out: list[tuple[str, ...]] = []
    steps = 0
    for start in range(len(nodes)):
        path, on_path = [start], {start}
        stack = [iter(succ[start])]
        while stack:
            nxt = next(stack[-1], None)
            if nxt is None:
                stack.pop()
                on_path.discard(path.pop())
                continue
            steps += 1
            if steps > SMALL_SEARCH:
                return None
            if nxt == start:
                out.append(tuple(nodes[i] for i in path))
                if len(out) >= MAX_CYCLES:
                    return None
            elif nxt > start and nxt not in on_path:
                path.append(nxt)
                on_path.add(nxt)
                stack.append(iter(succ[nxt]))
    return out


def acyclic(n: int, edges) -> bool:
    """Whether the directed graph on nodes 0..n-1 with `edges` (pairs) has no cycle: every
    strongly connected component a single node with no edge onto itself."""
    edges = list(edges)
    return not any(u == v for u, v in edges) and all(len(c) == 1 for c in strong_components(n, edges))


def strong_components(n: int, edges) -> list[list[int]]:
    """The strongly connected components of the graph on nodes 0..n-1 with directed `edges`
    (pairs), each a sorted list (Tarjan's algorithm, iterative). The components of a graph
    are unique; their order here is Tarjan's (a component after every one it feeds)."""
    succ: list[list[int]] = [[] for _ in range(n)]
    for u, v in edges:
        succ[u].append(v)
    index, low, on_stack = [-1] * n, [0] * n, [False] * n
    stack: list[int] = []
    out: list[list[int]] = []
    counter = 0
    for root in range(n):
        if index[root] >= 0:
            continue
        work = [(root, 0)]
        while work:
            v, i = work.pop()
            if i == 0:
                index[v] = low[v] = counter
                counter += 1
                stack.append(v)
                on_stack[v] = True
            recurse = False
            while i < len(succ[v]):
                w = succ[v][i]
                i += 1
                if index[w] < 0:
                    work.append((v, i))
                    work.append((w, 0))
                    recurse = True
                    break
                if on_stack[w]:
                    low[v] = min(low[v], index[w])
            if recurse:
                continue
            if low[v] == index[v]:
                comp = []
                while True:
                    w = stack.pop()
                    on_stack[w] = False
                    comp.append(w)
                    if w == v:
                        break
                out.append(sorted(comp))
            if work:
                u = work[-1][0]
                low[u] = min(low[u], low[v])
    return out


def _breaks(model: Model, g, errors) -> list[BreakCut]:
    cuts = []
    seen: dict[str, Span] = {}
    for stmt in model.breaks:
        if stmt.name in seen:
            errors.append(ModelError("LW304", f"break `{stmt.name}` is defined twice (first at {seen[stmt.name]})",
                                     stmt.span, "give each break its own name"))
            continue
        seen[stmt.name] = stmt.span
        if stmt.signal in model.inputs:
            errors.append(ModelError("LW305", f"`{stmt.signal}` is an input: no loop returns to it",
                                     stmt.signal_span, "break a signal inside the loop"))
            continue
        if stmt.signal not in model.signals or stmt.signal in model.hidden:
            errors.append(ModelError("LW306", f"break at unknown signal `{stmt.signal}`", stmt.signal_span,
                                     _hint(stmt.signal, [s for s in model.signals if s not in model.hidden])))
            continue
        out_edges = [(u, v) for u, v in g.out_edges(stmt.signal)]
        if stmt.target is None:
            edges = out_edges
        else:
            if stmt.target not in model.signals or stmt.target in model.hidden:
                errors.append(ModelError("LW306", f"unknown target signal `{stmt.target}`", stmt.target_span,
                                         _hint(stmt.target, [s for s in model.signals if s not in model.hidden])))
                continue
            edges = [(u, v) for u, v in out_edges
                     if v == stmt.target or model.hidden_owner.get(v) == stmt.target]
            if not edges:
                users = sorted({_display(v, model) for _, v in out_edges})
                errors.append(ModelError(
                    "LW303", f"`{stmt.target}` does not use `{stmt.signal}`", stmt.target_span,
                    ("`" + stmt.signal + "` feeds " + ", ".join(f"`{u}`" for u in users)) if users
                    else f"`{stmt.signal}` is not used by any equation"))
                continue
        cuts.append(BreakCut(stmt, stmt.signal, tuple(dict.fromkeys(edges)), frozenset()))
    return cuts


def _loops_and_nesting(cuts: list[BreakCut], cycles, model: Model, g) -> list[BreakCut]:
    wires = cycle_wires(cycles)
    opened = {c.stmt.name: opened_by(c.edges, wires) for c in cuts}
    own = own_cycles(opened)
    outer = enclosing(g, cycles, own)
    out = []
    for cut in cuts:
        name = cut.stmt.name
        loop = frozenset(n for i in opened[name] for n in cycles[i])
        warning = wide_cut_warning(cut, own, cycles, wires, model, g)
        out.append(BreakCut(cut.stmt, cut.signal, cut.edges, loop, outer[name] if loop else None,
                            tuple(cycles[i] for i in own[name]), (warning,) if warning else ()))
    return out


def _unbroken(cycles, cuts: list[BreakCut], model: Model) -> list[Finding]:
    cut_edges = {e for c in cuts for e in c.edges}
    out = []
    reported: set[frozenset] = set()
    for cyc in cycles:
        pairs = list(zip(cyc, (*cyc[1:], cyc[0])))
        if any(p in cut_edges for p in pairs):
            continue
        key = frozenset(cyc)
        if key in reported:
            continue
        reported.add(key)
        first = next((n for n in cyc if n not in model.hidden), cyc[0])
        about = tuple(dict.fromkeys(_display(n, model) for n in cyc))
        out.append(Finding("warning", "LW382", f"loop {loop_text(cyc, model, first)} is not opened by any break",
                           model.signals[first], f"add e.g. `break <name> at {first}` to check its stability margins",
                           about))
    return out
