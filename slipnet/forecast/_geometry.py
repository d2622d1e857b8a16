"""Forecast geometry: the grain graph read once into arrays, crack-plane angles at a boundary,
slip planes of the catalogue and the grains' crystal data (private to :mod:`slipnet.forecast`)."""

from __future__ import annotations

import math

import numpy as np

from slipnet.crystal.slip_systems import plane_label
from slipnet.forecast import _kernels as _k
from slipnet.forecast._trace_kernel import crystal_rows

_Z = np.array([0.0, 0.0, 1.0])


def crack_plane_angles(n_in, n_out, trace_angle_deg,
                       boundary_inclination_deg: float = 90.0) -> tuple[np.ndarray, np.ndarray]:
    """Twist and tilt angles between two crack planes meeting at a boundary (Zhai et al. 2000).

    Parameters
    ----------
    n_in : (..., 3) array_like
        Incoming crack-plane normal, sample frame (need not be unit).
    n_out : (..., 3) array_like
        Outgoing crack-plane normals, sample frame; broadcast against ``n_in``.
    trace_angle_deg
        Direction of the boundary's surface trace, degrees from +x towards +y.
    boundary_inclination_deg
        Angle between the boundary plane and the surface, measured about the boundary's surface
        trace, degrees in (0, 180) (90: the plane contains the surface normal, the assumption when
        only a surface map is known; above 90 it leans the other way). The same convention as
        :func:`slipnet.crystal.boundary_plane_normals`.

    Returns
    -------
    twist_deg, tilt_deg : ndarray
        In [0°, 90°] (angles between lines), shape of the broadcast leading axes.

    Notes
    -----
    With the boundary trace ``b = (cos θ, sin θ, 0)`` and the inclination φ, the boundary plane
    normal is ``n_gb = sin φ (z × b) + cos φ z``. The traces of the crack planes on the boundary
    plane are ``l = n × n_gb``; the twist is the angle between the two lines,
    ``α = arccos(|l̂_in · l̂_out|)``. The traces on the surface are ``t = n × z``; the tilt is
    ``β = arccos(|t̂_in · t̂_out|)``. A crack plane parallel to the boundary plane (``l = 0``) has no
    trace on it: the twist is then reported as 0 (the crack can run along the boundary).
    """
    n_in = np.asarray(n_in, dtype=float)
    n_out = np.asarray(n_out, dtype=float)
    th = math.radians(float(trace_angle_deg))
    phi = math.radians(float(boundary_inclination_deg))
    b = np.array([math.cos(th), math.sin(th), 0.0])
    n_gb = math.sin(phi) * np.array([-b[1], b[0], 0.0]) + math.cos(phi) * _Z  # sin φ (z × b) + cos φ z
    return _line_angle(_cross3(n_in, n_gb), _cross3(n_out, n_gb)), _line_angle(
        _cross3(n_in, _Z), _cross3(n_out, _Z)
    )


def _cross3(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    # np.cross re-arranges axes on every call; written out it is several times cheaper here
    a, b = np.broadcast_arrays(np.asarray(a, dtype=float), np.asarray(b, dtype=float))
    return np.stack([a[..., 1] * b[..., 2] - a[..., 2] * b[..., 1], a[..., 2] * b[..., 0] - a[..., 0] * b[..., 2],
                     a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]], axis=-1)


def _line_angle(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    # atan2(|a × b|, |a · b|): accurate near 0° and 90° where arccos loses digits
    na = np.linalg.norm(a, axis=-1)
    nb_ = np.linalg.norm(b, axis=-1)
    ok = (na > 1e-9) & (nb_ > 1e-9)
    dot = np.abs(np.einsum("...i,...i->...", a, b))
    crs = np.linalg.norm(_cross3(a, b), axis=-1)
    return np.where(ok, np.degrees(np.arctan2(crs, dot)), 0.0)


class _Geometry:
    """Grid, label image, grain centroids/sizes and boundary look-up: built once per graph."""

    def __init__(self, gg) -> None:
        om = gg.omap
        self.labels = np.ascontiguousarray(np.asarray(gg.labels, dtype=np.int64))
        self.hexgrid = om.grid == "hex"
        self.ox, self.oy = om.origin
        self.step = float(om.step)
        self.rs = float(om.row_spacing)
        self.ny, self.nx = self.labels.shape
        self.n_grains = int(np.asarray(gg.mean_quats).shape[0])
        self.structure = om.phases[0].structure
        x, y = om.coordinates()
        lab = self.labels.ravel()
        ok = lab >= 0
        cnt = np.bincount(lab[ok], minlength=self.n_grains).astype(float)
        self.cx = np.bincount(lab[ok], x.ravel()[ok], minlength=self.n_grains) / np.maximum(cnt, 1)
        self.cy = np.bincount(lab[ok], y.ravel()[ok], minlength=self.n_grains) / np.maximum(cnt, 1)
        self.ecd = 2.0 * np.sqrt(cnt * om.point_area / math.pi)
        self.edges: dict[tuple[int, int], tuple[int, float, str, float]] = {}
        self.neigh: dict[int, list[int]] = {}
        for a, b, d in gg.graph.edges(data=True):
            key = (min(int(a), int(b)), max(int(a), int(b)))
            self.edges[key] = (
                int(d.get("boundary_id", -1)),
                float(d.get("misorientation_deg", np.nan)),
                str(d.get("boundary_class", "high_angle")),
                float(d.get("trace_angle_deg", np.nan)),
            )
            self.neigh.setdefault(int(a), []).append(int(b))
            self.neigh.setdefault(int(b), []).append(int(a))
        self.ds = 0.25 * min(self.step, self.rs)
        self.anchors: dict[int, tuple[float, float]] = {}
        self._edge_arrays: _EdgeArrays | None = None

    def edge_arrays(self) -> _EdgeArrays:
        """The boundary look-up :attr:`edges` as sorted arrays, for the path-tracer kernel (built once)."""
        if self._edge_arrays is None:
            self._edge_arrays = _EdgeArrays(self.edges, self.n_grains)
        return self._edge_arrays

    def label_at(self, x: float, y: float) -> int:
        return int(_k.label_at(self.labels, self.hexgrid, self.ox, self.oy, self.step, self.rs, x, y))

    def march(self, x, y, d, grain, max_len, max_gap) -> tuple[float, int, int]:
        t, lab, st = _k.march_ray(self.labels, self.hexgrid, self.ox, self.oy, self.step, self.rs,
                                  float(x), float(y), float(d[0]), float(d[1]), int(grain), self.ds,
                                  float(max_len), float(max_gap))
        return float(t), int(lab), int(st)


class _EdgeArrays:
    """``_Geometry.edges`` as arrays sorted by the pair code ``min·base + max`` (``base`` = grains + 1).

    ``cls`` indexes ``names`` (``names[cls_high]`` is ``"high_angle"``, the class of a pair the graph
    does not hold); ``mis`` in degrees, ``ang`` the trace angle in degrees (NaN where unknown).
    """

    def __init__(self, edges: dict, n_grains: int) -> None:
        self.base = int(n_grains) + 1
        keys = list(edges)
        names = list(dict.fromkeys(["high_angle", *(v[2] for v in edges.values())]))
        self.names = names
        self.cls_high = 0
        code = np.array([a * self.base + b for a, b in keys], np.int64)
        order = np.argsort(code, kind="stable")
        vals = [edges[k] for k in keys]
        self.code = np.ascontiguousarray(code[order])
        self.bid = np.array([v[0] for v in vals], np.int64)[order] if vals else np.zeros(0, np.int64)
        self.mis = np.array([v[1] for v in vals], float)[order] if vals else np.zeros(0)
        idx = {c: i for i, c in enumerate(names)}
        self.cls = np.array([idx[v[2]] for v in vals], np.int64)[order] if vals else np.zeros(0, np.int64)
        self.ang = np.array([v[3] for v in vals], float)[order] if vals else np.zeros(0)


_GEOMETRY_CACHE_SIZE = 4


def geometry_of(gg) -> _Geometry:
    """The :class:`_Geometry` of a grain graph, cached for the last few graphs.

    The geometry depends only on the labels and the graph, so repeated forecasts on one graph
    (notch sweeps, interactive use) skip the O(points) set-up. The entry is keyed by the object
    identity and checked against a weak reference and the label array, so a new graph never sees
    a stale entry.
    """
    import weakref

    hit = _GEOMETRY_CACHE.get(id(gg))
    if hit is not None:
        ref, labels, geo = hit
        if ref() is gg and gg.labels is labels:
            return geo
    geo = _Geometry(gg)
    try:
        ref = weakref.ref(gg)
    except TypeError:  # objects without weak-reference support are not cached
        return geo
    if len(_GEOMETRY_CACHE) >= _GEOMETRY_CACHE_SIZE:
        _GEOMETRY_CACHE.pop(next(iter(_GEOMETRY_CACHE)))
    _GEOMETRY_CACHE[id(gg)] = (ref, gg.labels, geo)
    return geo


class _Planes:
    """Grouping of the catalogue's systems by slip plane (normals equal up to sign)."""

    def __init__(self, systems) -> None:
        normals = np.asarray(systems.normals, dtype=float)
        canon = normals.copy()
        first = np.argmax(np.abs(canon) > 1e-6, axis=1)
        sign = np.sign(canon[np.arange(len(canon)), first])
        canon *= sign[:, None]
        keys = [tuple(np.round(r, 5)) for r in canon]
        uniq: dict[tuple, int] = {}
        self.plane_of = np.array([uniq.setdefault(k, len(uniq)) for k in keys])
        self.n_planes = len(uniq)
        self.normals = np.array([canon[np.flatnonzero(self.plane_of == p)[0]] for p in range(self.n_planes)])
        hkl = np.asarray(systems.plane_hkl, dtype=float) * sign[:, None]
        first_member = [int(np.flatnonzero(self.plane_of == p)[0]) for p in range(self.n_planes)]
        self.labels = [plane_label(hkl[i]) for i in first_member]
        self.members = [np.flatnonzero(self.plane_of == p) for p in range(self.n_planes)]
        self.crss = np.ascontiguousarray(systems.crss, dtype=float)
        # {112} slip is sense-dependent (twinning / anti-twinning); other families are symmetric
        self.crss_rev = np.ascontiguousarray(getattr(systems, "crss_reverse", systems.crss), dtype=float)
        self.sys_normals = np.ascontiguousarray(normals)
        self.sys_dirs = np.ascontiguousarray(systems.directions, dtype=float)
        # the members as a padded array, for the crystal-row kernel
        self.n_members = np.array([m.size for m in self.members], np.int64)
        self.member_table = np.zeros((self.n_planes, max(int(self.n_members.max(initial=1)), 1)), np.int64)
        for p, m in enumerate(self.members):
            self.member_table[p, :m.size] = m


def _matrices(q: np.ndarray) -> np.ndarray:
    """Rotation matrices g (v_c = g v_s) of unit quaternions, (n, 3, 3): plain numpy, cheap for grains."""
    w, x, y, z = (np.asarray(q, dtype=float)[:, k] for k in range(4))
    return np.stack([
        np.stack([1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)], axis=-1),
        np.stack([2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)], axis=-1),
        np.stack([2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)], axis=-1),
    ], axis=1)


class _Crystal:
    """Everything orientation-dependent: sample-frame normals, Schmid factors, plane traces.

    Rows are computed for the grains a forecast reads (``rows``, default all) and for any other grain
    on first use (:meth:`ensure`): a forecast near the tip of a large map touches tens of grains of
    thousands. Rows not yet computed are left unset (allocating is then free of a pass over all
    grains); every reader calls :meth:`ensure` first.
    ``schmid`` is a ``(n, S)`` array or a callable giving the rows of the grains it is passed.
    """

    def __init__(self, quats: np.ndarray, load: np.ndarray, planes: _Planes, schmid=None, rows=None) -> None:
        self._q = np.asarray(quats, dtype=float)
        self._load = np.ascontiguousarray(load, dtype=float)
        self._planes = planes
        self._schmid_src = schmid
        ng = self._q.shape[0]
        ns, npl = planes.sys_normals.shape[0], planes.n_planes
        self.have = np.zeros(ng, bool)
        self.n_s = np.empty((ng, ns, 3))
        self.d_s = np.empty((ng, ns, 3))
        self.schmid = np.empty((ng, ns))
        self.meff = np.empty((ng, ns))
        self.plane_sys = np.empty((ng, npl), np.int64)
        self.plane_meff = np.empty((ng, npl))
        self.plane_n = np.empty((ng, npl, 3))
        self.trace_ok = np.empty((ng, npl), bool)
        self.trace = np.empty((ng, npl, 2))
        self.best_sys = np.empty(ng, np.int64)
        self.ensure(np.arange(ng) if rows is None else rows)

    def ensure1(self, g: int) -> None:
        """:meth:`ensure` for one grain (the path's per-segment check)."""
        if 0 <= g < self.have.size and not self.have[g]:
            self.ensure(np.array([g]))

    def ensure(self, grains) -> None:
        """Compute the rows of ``grains`` (ids) not computed yet."""
        idx = np.unique(np.asarray(grains, dtype=np.int64).ravel())
        idx = idx[(idx >= 0) & (idx < self.have.size)]
        idx = idx[~self.have[idx]]
        if idx.size == 0:
            return
        planes = self._planes
        src = self._schmid_src
        if src is None:
            schmid = np.zeros((0, planes.sys_normals.shape[0]))
        elif callable(src):
            schmid = np.asarray(src(idx), dtype=float)
        else:
            schmid = np.asarray(src, dtype=float)[idx]
        # one kernel pass over the rows (the numbers of the numpy pass this replaced, to the bit)
        crystal_rows(np.ascontiguousarray(self._q), idx, planes.sys_normals, planes.sys_dirs, planes.normals,
                     planes.member_table, planes.n_members, self._load, planes.crss, planes.crss_rev,
                     np.ascontiguousarray(schmid), src is not None, self.n_s, self.d_s, self.schmid, self.meff,
                     self.plane_sys, self.plane_meff, self.plane_n, self.trace_ok, self.trace, self.best_sys,
                     self.have)

    def m_prime_row(self, ga: int, sys_a: int, gb: int) -> np.ndarray:
        """|m′| from system ``sys_a`` of grain ``ga`` to every system of grain ``gb``, (S,)."""
        self.ensure((ga, gb))
        return np.abs((self.n_s[gb] @ self.n_s[ga, sys_a]) * (self.d_s[gb] @ self.d_s[ga, sys_a]))


def _boundary_info(geo: _Geometry, a: int, b: int, d_in: np.ndarray):
    info = geo.edges.get((min(a, b), max(a, b)))
    if info is None:
        # grains not adjacent in the graph (met through an unindexed gap): assume a boundary
        # perpendicular to the incoming direction, class high-angle
        ang = math.degrees(math.atan2(d_in[0], -d_in[1])) % 180.0
        return -1, np.nan, "high_angle", ang
    bid, mis, cls, ang = info
    if not np.isfinite(ang):
        ang = math.degrees(math.atan2(d_in[0], -d_in[1])) % 180.0
    return bid, mis, cls, ang


_GEOMETRY_CACHE: dict[int, tuple] = {}
