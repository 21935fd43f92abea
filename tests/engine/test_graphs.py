"""The engine's own graph searches for small wirings against networkx (the library the
diagram stage uses for everything else): every simple cycle, the strongly connected
components, and the components upstream first, on random directed graphs with
self-loops and parallel wires."""
from __future__ import annotations

import networkx as nx
import numpy as np

from loopwise.engine.diagram import _rooted_cycles, strong_components
from loopwise.engine.reduce import _upstream_first


def _graphs(seed: int, count: int):
    rng = np.random.default_rng(seed)
    for _ in range(count):
        n = int(rng.integers(1, 12))
        m = int(rng.integers(0, 3 * n + 1))
        edges = [(int(rng.integers(0, n)), int(rng.integers(0, n))) for _ in range(m)]
        yield n, edges


def test_every_simple_cycle_once_as_networkx_finds_them():
    for n, edges in _graphs(1, 300):
        nodes = [f"x{i}" for i in (np.random.default_rng(n + len(edges)).permutation(n))]
        wires = {(nodes[u], nodes[v]) for u, v in edges}
        got = _rooted_cycles(nodes, wires)
        if got is None:
            continue
        g = nx.DiGraph()
        g.add_nodes_from(nodes)
        g.add_edges_from(wires)
        order = {v: i for i, v in enumerate(nodes)}
        want = set()
        for cyc in nx.simple_cycles(g):
            k = min(range(len(cyc)), key=lambda i: order[cyc[i]])
            want.add(tuple(cyc[k:] + cyc[:k]))
        assert len(got) == len(set(got)) == len(want)
        assert set(got) == want


def test_components_and_their_upstream_order_as_networkx_gives_them():
    for n, edges in _graphs(2, 300):
        g = nx.DiGraph()
        g.add_nodes_from(range(n))
        g.add_edges_from(edges)
        comps = strong_components(n, edges)
        assert sorted(map(tuple, comps)) == sorted(tuple(sorted(c)) for c in nx.strongly_connected_components(g))
        condensed = nx.condensation(g)
        want = [sorted(condensed.nodes[c]["members"]) for c in
                nx.lexicographical_topological_sort(condensed, key=lambda c: min(condensed.nodes[c]["members"]))]
        assert _upstream_first(n, edges) == want


def test_a_search_too_long_for_the_plain_walk_is_left_to_networkx():
    nodes = [f"x{i}" for i in range(14)]
    wires = {(u, v) for u in nodes for v in nodes}  # complete: millions of cycles
    assert _rooted_cycles(nodes, wires) is None
