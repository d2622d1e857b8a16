"""The fast paths of the grain build against the plain versions they replaced (same values, bit for bit)."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from slipnet.crystal import quat_from_axis_angle, quat_multiply, random_quats
from slipnet.grains import build_grain_graph
from slipnet.maps import OrientationMap
from slipnet.maps.grain_graph import EDGE_KEYS, NODE_KEYS


def voronoi(ny: int, nx_: int, n_cells: int, grid: str = "square", seed: int = 0) -> OrientationMap:
    """Voronoi cells (in index space) with random orientations, 0.5° noise and 2 % holes."""
    rng = np.random.default_rng(seed)
    centres = rng.uniform(0, 1, (n_cells, 2)) * (ny, nx_)
    ii, jj = np.indices((ny, nx_))
    d2 = (ii[..., None] - centres[:, 0]) ** 2 + (jj[..., None] - centres[:, 1]) ** 2
    lab = np.argmin(d2, axis=-1).ravel()
    gq = random_quats(n_cells, seed=seed)
    noise = quat_from_axis_angle(rng.normal(size=(lab.size, 3)), np.abs(rng.normal(0.0, 0.5, lab.size)))
    q = quat_multiply(noise, gq[lab])
    ind = rng.random(lab.size) >= 0.02
    q[~ind] = np.nan
    shape = (ny, nx_)
    return OrientationMap(q.reshape(ny, nx_, 4), np.zeros(shape, np.int32), np.ones(shape, np.float32),
                          ind.reshape(shape), 1.0, grid=grid)


def public_graph(gg) -> nx.Graph:
    """The graph as networkx's public calls build it (the reference of the direct assembly)."""
    g = nx.Graph(**gg.graph.graph)
    grains, bd = gg.grains, gg.boundaries
    g.add_nodes_from((int(r["grain"]), {k: r[k] for k in NODE_KEYS}) for r in grains.to_dict("records"))
    g.add_edges_from((int(r["grain_a"]), int(r["grain_b"]), {k: r[k] for k in EDGE_KEYS})
                     for r in bd.to_dict("records"))
    return g


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_graph_equals_the_one_built_through_networkx_calls(grid):
    gg = build_grain_graph(voronoi(60, 70, 25, grid, seed=3))
    ref = public_graph(gg)
    g = gg.graph
    assert g.graph == ref.graph
    assert list(g.nodes(data=True)) == list(ref.nodes(data=True))
    assert list(g.edges(data=True)) == list(ref.edges(data=True))
    assert [list(g.adj[u]) for u in g] == [list(ref.adj[u]) for u in ref]  # neighbour order too
    # both directions of an edge share one attribute dict, as after add_edges_from
    u, v = next(iter(g.edges()))
    assert g.adj[u][v] is g.adj[v][u]
    g.edges[u, v]["extra"] = 1.0
    assert g.edges[v, u]["extra"] == 1.0
    assert len(g) == gg.n_grains and g.number_of_edges() == len(gg.boundaries)
    assert all(isinstance(val, (int, float, str, bool)) for _, d in g.nodes(data=True) for val in d.values())
