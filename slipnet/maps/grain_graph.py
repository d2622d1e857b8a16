"""The grain graph: grains and boundaries of one orientation map, as tables and a networkx graph.

:func:`slipnet.grains.build_grain_graph` makes it; every later step reads it; nothing changes it
(functions that add to it return a new one). :mod:`slipnet.io.graph` saves and loads it without
pickle.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from slipnet._checks import check_positive
from slipnet.errors import ParameterError
from slipnet.maps.orientation_map import OrientationMap

if TYPE_CHECKING:  # only the field types: networkx and pandas cost ~1 s at start-up
    import networkx as nx
    import pandas as pd

__all__ = ["EDGE_KEYS", "NODE_KEYS", "BoundaryPolylines", "GrainGraph"]

#: Graph node attribute keys (plain numbers / strings / bools).
NODE_KEYS: tuple[str, ...] = (
    "phase", "n_points", "area_um2", "ecd_um", "centroid_x_um", "centroid_y_um",
    "mean_qw", "mean_qx", "mean_qy", "mean_qz", "gos_deg", "touches_edge",
)
#: Graph edge attribute keys.
EDGE_KEYS: tuple[str, ...] = (
    "boundary_id", "length_um", "misorientation_deg", "axis_h", "axis_k", "axis_l",
    "boundary_class", "trace_angle_deg",
)


# ============================================================================ container
class BoundaryPolylines(Mapping):
    """Read-only ``{boundary_id: [(k, 2) µm arrays]}`` built on access from flat chain arrays."""

    def __init__(self, xy: np.ndarray, chain_offsets: np.ndarray, boundary_chains: np.ndarray) -> None:
        self._xy = xy
        self._off = chain_offsets
        self._bc = boundary_chains

    def __getitem__(self, key: int) -> list[np.ndarray]:
        k = int(key)
        if not 0 <= k < self._bc.size - 1:
            raise KeyError(key)
        return [self._xy[self._off[c]:self._off[c + 1]] for c in range(self._bc[k], self._bc[k + 1])]

    def __iter__(self) -> Iterator[int]:
        return iter(range(self._bc.size - 1))

    def __len__(self) -> int:
        return self._bc.size - 1

    @property
    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(xy (k, 2) µm, chain_offsets, boundary_chains)``: the flat arrays behind the mapping."""
        return self._xy, self._off, self._bc


@dataclass(frozen=True, eq=False)
class GrainGraph:
    """Grains, boundaries and their adjacency graph for one orientation map.

    Attributes
    ----------
    omap : OrientationMap
        The map the grains were built from.
    labels : (ny, nx) int64 ndarray
        Grain id per point (0..n_grains−1, numbered in raster order of each grain's first point);
        −1 where no grain (unindexed, below quality and not filled).
    graph : networkx.Graph
        One node per grain id with attributes :data:`NODE_KEYS`; one edge per boundary with
        attributes :data:`EDGE_KEYS` (``boundary_class`` one of :data:`BOUNDARY_CLASSES`,
        ``trace_angle_deg`` in [0, 180) from +x towards +y).
    grains : DataFrame
        One row per grain (column ``grain`` = id); units in the column names.
    boundaries : DataFrame
        One row per adjacent grain pair (``boundary_id``, ``grain_a`` < ``grain_b``, ...).
    triple_junctions : DataFrame
        Cell vertices where three or more grains meet: ``junction_id``, ``x_um``, ``y_um``,
        ``n_grains``, ``grain_1`` … ``grain_4`` (−1 where fewer grains).
    mean_quats : (n_grains, 4) ndarray
        Mean orientation of each grain (w ≥ 0).
    boundary_polylines : Mapping[int, list of (k, 2) ndarray]
        µm polylines of each boundary (start vertex, edge midpoints in order, end vertex; a closed
        loop repeats its first vertex at the end).
    kam_deg : (ny, nx) float32 ndarray
        Kernel average misorientation: mean disorientation to first neighbours in the same grain
        with disorientation below the threshold; NaN where no such neighbour.
    misorientation_to_mean_deg : (ny, nx) float32 ndarray
        Disorientation of each point to its grain's mean orientation; NaN where no orientation.
    subgrain_labels : (ny, nx) int64 ndarray or None
        Sub-grain id per point when ``subgrain_deg`` was given (components joined below it).
    subgrain_boundaries : DataFrame or None
        ``subgrain_a``, ``subgrain_b``, ``grain``, ``length_um``, ``misorientation_deg``.
    settings : dict
        The parameters used.
    log : list of str
        One line per reconstruction and clean-up step.
    """

    omap: OrientationMap
    labels: np.ndarray
    graph: nx.Graph
    grains: pd.DataFrame
    boundaries: pd.DataFrame
    triple_junctions: pd.DataFrame
    mean_quats: np.ndarray
    boundary_polylines: Mapping
    kam_deg: np.ndarray
    misorientation_to_mean_deg: np.ndarray
    subgrain_labels: np.ndarray | None = None
    subgrain_boundaries: pd.DataFrame | None = None
    settings: dict = field(default_factory=dict)
    log: tuple[str, ...] = ()

    # ------------------------------------------------------------------ queries
    @property
    def n_grains(self) -> int:
        """Number of grains."""
        return int(self.mean_quats.shape[0])

    def _check_grain(self, g, name: str = "grain") -> int:
        try:
            gi = int(g)
        except (TypeError, ValueError) as err:
            raise ParameterError(f"{name} should be a grain id (int); got {g!r}") from err
        if not 0 <= gi < self.n_grains:
            raise ParameterError(f"{name} should be a grain id in 0..{self.n_grains - 1}; got {g!r}")
        return gi

    def grain_at(self, x, y):
        """Grain id at position ``(x, y)`` µm (nearest grid point); −1 outside the map or where no grain.

        Scalars give an ``int``; arrays give an int64 array of the broadcast shape.
        """
        xa, ya = np.broadcast_arrays(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
        i, j = self.omap.index_of(xa, ya)
        inside = i >= 0
        out = np.where(inside, self.labels[np.where(inside, i, 0), np.where(inside, j, 0)], -1)
        if out.ndim == 0:
            return int(out)
        return out.astype(np.int64)

    def neighbours(self, g: int) -> list[int]:
        """Ids of the grains sharing a boundary with grain ``g``, ascending."""
        gi = self._check_grain(g)
        return sorted(int(v) for v in self.graph.neighbors(gi))

    def boundary(self, a: int, b: int) -> dict:
        """The boundary between grains ``a`` and ``b`` as a dict.

        Holds every column of :attr:`boundaries` for that row plus ``polylines`` (list of (k, 2)
        µm arrays) and ``triple_junctions`` ((t, 2) µm array of junctions on it).

        Raises
        ------
        ParameterError
            If the grains are not adjacent.
        """
        ai, bi = self._check_grain(a, "a"), self._check_grain(b, "b")
        if not self.graph.has_edge(ai, bi):
            raise ParameterError(f"grains {ai} and {bi} share no boundary; neighbours of {ai}: {self.neighbours(ai)}")
        bid = int(self.graph.edges[ai, bi]["boundary_id"])
        row = {k: (v.item() if hasattr(v, "item") else v) for k, v in self.boundaries.iloc[bid].items()}
        row["polylines"] = self.boundary_polylines[bid]
        tj = self.triple_junctions
        cols = tj[["grain_1", "grain_2", "grain_3", "grain_4"]].to_numpy()
        on = (cols == ai).any(axis=1) & (cols == bi).any(axis=1)
        row["triple_junctions"] = tj.loc[on, ["x_um", "y_um"]].to_numpy()
        return row

    def grains_on_segment(self, p0, p1) -> list[tuple[int, float, float]]:
        """Grains crossed by the straight segment from ``p0`` to ``p1`` (µm), in order.

        The segment is sampled at spacing ≤ step/2 through the label image; a boundary is placed
        halfway between the last sample of one grain and the first of the next.

        Returns
        -------
        list of (grain, s_enter_um, s_leave_um)
            Distances along the segment from ``p0``; stretches with no grain are skipped.
        """
        a = np.asarray(p0, dtype=np.float64).reshape(-1)
        b = np.asarray(p1, dtype=np.float64).reshape(-1)
        if a.size != 2 or b.size != 2 or not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
            raise ParameterError(f"p0 and p1 should be finite (x, y) points in µm; got {p0!r}, {p1!r}")
        length = float(np.hypot(*(b - a)))
        n = max(2, math.ceil(length / (0.5 * self.omap.step)) + 1)
        t = np.linspace(0.0, length, n)
        u = (b - a) / length if length > 0 else np.zeros(2)
        labs = self.grain_at(a[0] + t * u[0], a[1] + t * u[1])
        starts = np.concatenate(([0], np.flatnonzero(labs[1:] != labs[:-1]) + 1))
        ends = np.concatenate((starts[1:] - 1, [n - 1]))
        s_in = np.where(starts == 0, 0.0, 0.5 * (t[starts] + t[np.maximum(starts - 1, 0)]))
        s_out = np.where(ends == n - 1, length, 0.5 * (t[ends] + t[np.minimum(ends + 1, n - 1)]))
        g = labs[starts]
        keep = g >= 0
        return [(int(gg), float(si), float(so)) for gg, si, so in zip(g[keep], s_in[keep], s_out[keep], strict=True)]

    def grains_within(self, x: float, y: float, r_um: float) -> list[int]:
        """Ids of grains with at least one point within ``r_um`` of ``(x, y)`` µm, ascending."""
        r = check_positive(r_um, "r_um", allow_zero=True)
        om = self.omap
        x0, y0 = om.origin
        ny, nx_ = om.shape
        i0 = max(0, math.floor((float(y) - r - y0) / om.row_spacing) - 1)
        i1 = min(ny, math.ceil((float(y) + r - y0) / om.row_spacing) + 2)
        j0 = max(0, math.floor((float(x) - r - x0) / om.step) - 1)
        j1 = min(nx_, math.ceil((float(x) + r - x0) / om.step) + 2)
        if i0 >= i1 or j0 >= j1:
            return []
        ii, jj = np.mgrid[i0:i1, j0:j1]
        px = x0 + jj * om.step + (0.5 * om.step * (ii % 2) if om.grid == "hex" else 0.0)
        py = y0 + ii * om.row_spacing
        near = (px - float(x)) ** 2 + (py - float(y)) ** 2 <= r * r
        labs = self.labels[i0:i1, j0:j1][near]
        return [int(v) for v in np.unique(labs[labs >= 0])]
