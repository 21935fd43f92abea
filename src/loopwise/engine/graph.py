"""A small directed multigraph and the two graph algorithms the engine needs.

The loop graph of a model has a few dozen signals; what it needs is the strongly
connected components (Tarjan) and the simple cycles (Johnson, 1975: "Finding all the
elementary circuits of a directed graph", SIAM J. Comput. 4(1)). Written here so that
a check does not import a general graph library at start-up. `MultiGraph` offers the
small part of the usual multigraph interface the diagram and the nesting use:
nodes with attributes, parallel edges with data, `edges(data=True)`, `out_edges`,
`get_edge_data`, `has_edge`.
"""
from __future__ import annotations

from typing import Iterable, Iterator

__all__ = ["MultiGraph", "strongly_connected_components", "simple_cycles"]


class MultiGraph:
    """A directed graph with parallel edges; each edge carries a dict of data."""

    def __init__(self) -> None:
        self._nodes: dict[str, dict] = {}
        self._succ: dict[str, dict[str, dict[int, dict]]] = {}
        self._pred: dict[str, dict[str, dict[int, dict]]] = {}

    def add_node(self, name: str, **attrs) -> None:
        if name not in self._nodes:
            self._nodes[name] = {}
            self._succ[name] = {}
            self._pred[name] = {}
        self._nodes[name].update(attrs)

    def add_edge(self, u: str, v: str, **data) -> None:
        self.add_node(u)
        self.add_node(v)
        keys = self._succ[u].setdefault(v, {})
        keys[len(keys)] = data
        self._pred[v][u] = keys

    @property
    def nodes(self) -> dict[str, dict]:
        return self._nodes

    def __contains__(self, name: str) -> bool:
        return name in self._nodes

    def has_edge(self, u: str, v: str) -> bool:
        return v in self._succ.get(u, {})

    def get_edge_data(self, u: str, v: str) -> dict[int, dict] | None:
        return self._succ.get(u, {}).get(v)

    def edges(self, data: bool = False) -> list:
        """Every edge in insertion order of its source: (u, v) or (u, v, data)."""
        out = []
        for u, targets in self._succ.items():
            for v, keys in targets.items():
                for d in keys.values():
                    out.append((u, v, d) if data else (u, v))
        return out

    def out_edges(self, u: str) -> list[tuple[str, str]]:
        return [(u, v) for v, keys in self._succ.get(u, {}).items() for _ in keys]

    def successors(self, u: str) -> list[str]:
        return list(self._succ.get(u, {}))


def strongly_connected_components(nodes: Iterable[str], succ: dict[str, Iterable[str]]) -> list[list[str]]:
    """Tarjan's algorithm, iterative (no recursion limit): components in reverse topological order."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    on_stack: set[str] = set()
    stack: list[str] = []
    out: list[list[str]] = []
    counter = 0
    for root in nodes:
        if root in index:
            continue
        work = [(root, iter(succ.get(root, ())))]
        index[root] = low[root] = counter
        counter += 1
        stack.append(root)
        on_stack.add(root)
        while work:
            v, it = work[-1]
            for w in it:
                if w not in index:
                    index[w] = low[w] = counter
                    counter += 1
                    stack.append(w)
                    on_stack.add(w)
                    work.append((w, iter(succ.get(w, ()))))
                    break
                if w in on_stack:
                    low[v] = min(low[v], index[w])
            else:
                work.pop()
                if work:
                    low[work[-1][0]] = min(low[work[-1][0]], low[v])
                if low[v] == index[v]:
                    comp = []
                    while True:
                        w = stack.pop()
                        on_stack.discard(w)
                        comp.append(w)
                        if w == v:
                            break
                    out.append(comp)
    return out


def simple_cycles(nodes: list[str], succ: dict[str, Iterable[str]]) -> Iterator[list[str]]:
    """Every elementary cycle once (Johnson's algorithm), each as a list of nodes.

    Self-loops come out as one-node cycles. Nodes are taken in the order given: the
    cycles through nodes[0] first, then those through nodes[1] avoiding nodes[0], ...
    """
    adj = {v: [w for w in dict.fromkeys(succ.get(v, ())) if w in set(nodes)] for v in nodes}
    for v in nodes:
        if v in adj[v]:
            yield [v]
    position = {v: i for i, v in enumerate(nodes)}
    for i, start in enumerate(nodes):
        allowed = {v for v in nodes[i:]}
        # the strongly connected component of `start` among the allowed nodes
        sub = {v: [w for w in adj[v] if w in allowed and w != v] for v in allowed}
        comp = next((c for c in strongly_connected_components(sorted(allowed, key=position.get), sub)
                     if start in c), [start])
        if len(comp) < 2:
            continue
        members = set(comp)
        graph = {v: [w for w in sub[v] if w in members] for v in comp}
        yield from _circuits(start, graph)


def _circuits(start: str, graph: dict[str, list[str]]) -> Iterator[list[str]]:
    """Johnson's CIRCUIT procedure from `start`, iterative."""
    blocked: set[str] = {start}
    b: dict[str, set[str]] = {v: set() for v in graph}
    path = [start]
    closed = [False]
    stack = [iter(graph[start])]

    def unblock(node: str) -> None:
        todo = [node]
        while todo:
            u = todo.pop()
            if u in blocked:
                blocked.discard(u)
                todo.extend(b[u])
                b[u].clear()

    while stack:
        nbrs = stack[-1]
        for w in nbrs:
            if w == start:
                yield list(path)
                closed[-1] = True
            elif w not in blocked:
                path.append(w)
                closed.append(False)
                blocked.add(w)
                stack.append(iter(graph[w]))
                break
        else:
            stack.pop()
            v = path.pop()
            done = closed.pop()
            if done:
                unblock(v)
                if closed:
                    closed[-1] = True
            else:
                for w in graph[v]:
                    b[w].add(v)
