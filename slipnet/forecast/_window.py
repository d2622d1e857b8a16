"""The part of a map a forecast can reach: a window of points around the tip and the grains in it
(private to :mod:`slipnet.forecast`).

Everything a forecast reports lies within its horizon of the tip: the path and its alternatives
(arc length ≤ horizon), the sites (field peaks within the horizon), the barrier features (means
within ``drop_radius_um`` of crossings on the path). So the point features and the field are
computed on a window holding that disc, and the per-grain quantities only for the grains in it and
their neighbours; the work of a repeated forecast then does not grow with the map.

The values inside the window equal those of the whole-map computation (to round-off) because:

* the grain-level terms (grain means, neighbour means, transmission to neighbours) are taken over
  whole grains: the compute crop holds every grain met in the window and every neighbour of those
  grains completely, and the sums run over the same points in the same (row-major) order;
* the distance to the nearest grain boundary is computed on a crop reaching :data:`EDT_MARGIN`
  points beyond the window: a nearer boundary is always found, a farther one enters the feature as
  ``exp(−distance) < e⁻⁴⁰``, below round-off;
* the holes and the distance to them are global (connected components over the whole map): they are
  computed once per map and cached beside the grain geometry;
* the crack slit is cut in on the points its segments cross, and its distance is computed on a crop
  holding the whole slit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import ndimage

from slipnet.stress.elastic import HOLE_MIN_POINTS  # clusters this large (or at the edge) are holes / the notch

#: Points of crop beyond the window for the boundary distance (e⁻⁴⁰ ≈ 4e-18: below round-off).
EDT_MARGIN = 42


def _holes(indexed: np.ndarray) -> np.ndarray:
    """Unindexed points that are holes or the notch (large clusters or touching the edge)."""
    soft = ~indexed
    if not soft.any():
        return soft
    lab, n_lab = ndimage.label(soft)
    sizes = np.bincount(lab.ravel(), minlength=n_lab + 1)
    edge = np.unique(np.concatenate([lab[0], lab[-1], lab[:, 0], lab[:, -1]]))
    hole = sizes >= HOLE_MIN_POINTS
    hole[edge] = True
    hole[0] = False
    return hole[lab]


@dataclass(frozen=True)
class _Box:
    """Rows ``r0:r1`` and columns ``c0:c1`` of the map."""

    r0: int
    r1: int
    c0: int
    c1: int

    @property
    def sl(self) -> tuple[slice, slice]:
        return slice(self.r0, self.r1), slice(self.c0, self.c1)

    @property
    def shape(self) -> tuple[int, int]:
        return self.r1 - self.r0, self.c1 - self.c0

    def contains(self, other: _Box) -> bool:
        return self.r0 <= other.r0 and self.c0 <= other.c0 and self.r1 >= other.r1 and self.c1 >= other.c1

    def inner(self, other: _Box) -> tuple[slice, slice]:
        """Slices of ``other`` (contained in this box) in this box's own indices."""
        return (slice(other.r0 - self.r0, other.r1 - self.r0), slice(other.c0 - self.c0, other.c1 - self.c0))


def _union(a: _Box, b: _Box) -> _Box:
    return _Box(min(a.r0, b.r0), max(a.r1, b.r1), min(a.c0, b.c0), max(a.c1, b.c1))


def _grow(b: _Box, m: int, ny: int, nx: int, hexgrid: bool) -> _Box:
    r0 = max(0, b.r0 - m)
    if hexgrid:
        r0 -= r0 % 2  # an even first row keeps the hex row shift of OrientationMap.coordinates
    return _Box(r0, min(ny, b.r1 + m), max(0, b.c0 - m), min(nx, b.c1 + m))


class _MapCache:
    """Whole-map quantities computed once per grain graph: holes, their distance, grain boxes, edge lists."""

    def __init__(self, gg, geo) -> None:
        om = gg.omap
        self.indexed = np.asarray(om.indexed, bool)
        self.holes = _holes(self.indexed)
        # the distance to holes and notch (µm), as _tip_geometry takes it (the crack is added per call)
        self.hole_dist = (ndimage.distance_transform_edt(~self.holes, sampling=(om.row_spacing, om.step))
                          if self.holes.any() else None)
        n = geo.n_grains
        objs = ndimage.find_objects(np.where(geo.labels >= 0, geo.labels + 1, 0), max_label=n)
        self.boxes = np.array([(o[0].start, o[0].stop, o[1].start, o[1].stop) if o is not None else (0, 0, 0, 0)
                               for o in objs], dtype=np.int64).reshape(-1, 4)
        self.has_box = np.array([o is not None for o in objs], bool)
        edges = [(int(a), int(b), float(d.get("length_um", 1.0))) for a, b, d in gg.graph.edges(data=True)]
        self.edge_a = np.array([e[0] for e in edges], np.int64)
        self.edge_b = np.array([e[1] for e in edges], np.int64)
        self.edge_w = np.array([e[2] for e in edges], float)
        # edges of each grain (either end), as a CSR list over grains, for the neighbour terms
        ends = np.concatenate([self.edge_a, self.edge_b])
        eid = np.concatenate([np.arange(len(edges)), np.arange(len(edges))])
        ok = (ends >= 0) & (ends < n)
        ends, eid = ends[ok], eid[ok]
        order = np.argsort(ends, kind="stable")
        self.edge_ptr = np.searchsorted(ends[order], np.arange(n + 1))
        self.edge_of = eid[order]
        self.windows: dict = {}  # geometry-only per-window terms (boundary distance) keyed by window and cut

    def edges_of(self, grains: np.ndarray) -> np.ndarray:
        """Ids of the edges touching any of ``grains``, in the graph's edge order."""
        if grains.size == 0 or self.edge_of.size == 0:
            return np.zeros(0, np.int64)
        parts = [self.edge_of[self.edge_ptr[g]:self.edge_ptr[g + 1]] for g in grains.tolist()]
        return np.unique(np.concatenate(parts)) if parts else np.zeros(0, np.int64)


def map_cache(gg, geo) -> _MapCache:
    """The :class:`_MapCache` of a graph, kept on its cached geometry."""
    mc = getattr(geo, "map_cache", None)
    if mc is None:
        mc = _MapCache(gg, geo)
        geo.map_cache = mc
    return mc


@dataclass
class _Window:
    """The inner window (where values are exact), the compute crop and the grains involved."""

    inner: _Box
    crop: _Box
    grains: np.ndarray  # grains with a point in the inner window
    reach: np.ndarray  # those and their neighbours (held whole by the crop)


def forecast_window(gg, geo, centres, radius_um: float) -> _Window:
    """Window of the points within ``radius_um`` of any of ``centres`` (µm, ``(k, 2)``), and its crop."""
    mc = map_cache(gg, geo)
    c = np.atleast_2d(np.asarray(centres, float))
    pad = 2.0 * max(geo.step, geo.rs)
    rr = radius_um + pad
    r0 = math.floor((c[:, 1].min() - rr - geo.oy) / geo.rs)
    r1 = math.ceil((c[:, 1].max() + rr - geo.oy) / geo.rs) + 1
    c0 = math.floor((c[:, 0].min() - rr - geo.ox) / geo.step) - 1
    c1 = math.ceil((c[:, 0].max() + rr - geo.ox) / geo.step) + 2
    inner = _grow(_Box(max(r0, 0), min(r1, geo.ny), max(c0, 0), min(c1, geo.nx)), 0, geo.ny, geo.nx, geo.hexgrid)
    inner = _Box(inner.r0, max(inner.r1, inner.r0), inner.c0, max(inner.c1, inner.c0))
    lab = geo.labels[inner.sl]
    grains = np.unique(lab[lab >= 0])
    reach = set(grains.tolist())
    for g in grains.tolist():
        reach.update(geo.neigh.get(g, []))
    reach_arr = np.array(sorted(reach), np.int64)
    box = inner
    ok = reach_arr[mc.has_box[reach_arr]] if reach_arr.size else reach_arr
    if ok.size:
        b = mc.boxes[ok]
        box = _union(box, _Box(int(b[:, 0].min()), int(b[:, 1].max()), int(b[:, 2].min()), int(b[:, 3].max())))
    crop = _grow(_union(box, _grow(inner, EDT_MARGIN, geo.ny, geo.nx, geo.hexgrid)), 0, geo.ny, geo.nx,
                 geo.hexgrid)
    return _Window(inner=inner, crop=crop, grains=grains, reach=reach_arr)


def crop_coordinates(omap, box: _Box) -> tuple[np.ndarray, np.ndarray]:
    """``omap.coordinates()`` on the box, computed as the whole map computes them (same round-off)."""
    i, j = np.indices(box.shape, dtype=np.float64)
    i += box.r0
    j += box.c0
    x = j * omap.step
    if omap.grid == "hex":
        x = x + 0.5 * omap.step * (i % 2)
    return x + omap.origin[0], i * omap.row_spacing + omap.origin[1]


def crop_map(omap, box: _Box, quats=None):
    """The orientation map on the box (origin moved so point positions stay in the map frame)."""
    sl = box.sl
    q = np.asarray(omap.quats)[sl] if quats is None else quats
    return replace(omap, quats=q, phase=np.asarray(omap.phase)[sl], quality=np.asarray(omap.quality)[sl],
                   indexed=np.asarray(omap.indexed)[sl],
                   origin=(omap.origin[0] + box.c0 * omap.step, omap.origin[1] + box.r0 * omap.row_spacing))


def crack_cells_box(crack, omap, box: _Box) -> np.ndarray:
    """:func:`slipnet.forecast.features.crack_cells` on the points of the box only."""
    import itertools

    from slipnet.errors import ParameterError

    pts = np.asarray(crack, dtype=float)
    if pts.ndim != 2 or pts.shape[1] != 2 or pts.shape[0] < 2 or not np.all(np.isfinite(pts)):
        raise ParameterError(f"crack should be a (k, 2) polyline in µm with k >= 2; got shape {pts.shape}")
    x, y = crop_coordinates(omap, box)
    hx, hy = omap.step, omap.row_spacing
    mask = np.zeros(box.shape, bool)
    for p0, p1 in itertools.pairwise(pts):  # over segments (a few), not points
        d = p1 - p0
        length = float(np.hypot(*d))
        if length <= 0:
            continue
        t = d / length
        nrm = np.array([-t[1], t[0]])
        along = (x - p0[0]) * t[0] + (y - p0[1]) * t[1]
        across = (x - p0[0]) * nrm[0] + (y - p0[1]) * nrm[1]
        half = 0.5 * (hx * abs(nrm[0]) + hy * abs(nrm[1])) * (1.0 + 1e-9)
        mask |= (np.abs(across) <= half) & (along >= -1e-9) & (along <= length + 1e-9)
    i, j = omap.index_of(pts[:, 0], pts[:, 1])
    i = np.clip(np.asarray(i), 0, omap.shape[0] - 1)
    j = np.clip(np.asarray(j), 0, omap.shape[1] - 1)
    inside = (i >= box.r0) & (i < box.r1) & (j >= box.c0) & (j < box.c1)
    mask[i[inside] - box.r0, j[inside] - box.c0] = True
    return mask


def crack_box(crack, omap) -> _Box:
    """Rows and columns holding every cell a crack polyline can cut (its bounding box and a cell more)."""
    pts = np.asarray(crack, float)
    ny, nx = omap.shape
    ox, oy = omap.origin
    r0 = math.floor((pts[:, 1].min() - oy) / omap.row_spacing) - 2
    r1 = math.ceil((pts[:, 1].max() - oy) / omap.row_spacing) + 3
    c0 = math.floor((pts[:, 0].min() - ox) / omap.step) - 2
    c1 = math.ceil((pts[:, 0].max() - ox) / omap.step) + 3
    r0 = max(0, min(r0, ny))
    r0 -= r0 % 2 if omap.grid == "hex" else 0
    return _Box(r0, max(r0, min(r1, ny)), max(0, min(c0, nx)), max(0, min(max(c1, c0), nx)))


def crop_field(field, box: _Box, quats=None):
    """A :class:`~slipnet.stress.StressField` on the box (its map cropped the same way)."""
    sl = box.sl
    return replace(field, stress=field.stress[sl], strain=field.strain[sl], omap=crop_map(field.omap, box, quats),
                   compliant=np.asarray(field.compliant)[sl])


@dataclass
class _LabelsOnly:
    """The two attributes :func:`slipnet.stress.grain_schmid_factors` reads from a grain graph."""

    labels: np.ndarray
    mean_quats: np.ndarray


def schmid_rows(field, gg, geo, systems):
    """Rows of ``grain_schmid_factors(field, gg, systems)`` (NaN as 0) for given grains, on demand.

    Each call crops the field to the boxes of the grains asked for, so the grain means run over the
    same points in the same order as on the whole map.
    """
    from slipnet.stress.local import grain_schmid_factors

    mc = map_cache(gg, geo)
    n_sys = int(np.asarray(systems.normals).shape[0])
    mq = np.asarray(gg.mean_quats, float)
    done = np.zeros(mq.shape[0], bool)  # rows kept for later calls (every Monte Carlo sample asks again)
    kept = np.zeros((mq.shape[0], n_sys))

    def rows(idx: np.ndarray) -> np.ndarray:
        new = idx[~done[idx]]
        if new.size:
            kept[new] = _compute(new)
            done[new] = True
        return kept[idx]

    def _compute(idx: np.ndarray) -> np.ndarray:
        out = np.zeros((idx.size, n_sys))
        sel = mc.has_box[idx]
        if sel.any():
            b = mc.boxes[idx[sel]]
            box = _grow(_Box(int(b[:, 0].min()), int(b[:, 1].max()), int(b[:, 2].min()), int(b[:, 3].max())), 0,
                        geo.ny, geo.nx, geo.hexgrid)
            local = grain_schmid_factors(crop_field(field, box), _LabelsOnly(geo.labels[box.sl], mq), systems)
            k = idx[sel]
            inside = k < local.shape[0]
            vals = np.zeros((k.size, n_sys))
            vals[inside] = np.nan_to_num(local[k[inside]])
            out[sel] = vals
        return out

    return rows
