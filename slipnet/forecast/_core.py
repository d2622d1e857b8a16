"""Internals of the crack forecast: grid marching, plane choice at boundaries, slip bands.

Public entry and documentation: :mod:`slipnet.forecast`. Kept apart so each module stays small;
nothing here is public API except :func:`crack_plane_angles` (re-exported by ``slipnet.forecast``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from slipnet._checks import check_choice, check_positive, check_range, check_vector
from slipnet.columns import FORECAST_SITES
from slipnet.crystal.slip_systems import plane_label
from slipnet.errors import ParameterError
from slipnet.forecast import _kernels as _k
from slipnet.forecast.barriers import _MAX_SCHMID

if TYPE_CHECKING:
    from slipnet.forecast.types import PathWeights

_Z = np.array([0.0, 0.0, 1.0])
_MAX_SEGMENTS = 20000  # guard against a path that never progresses

# ---------------------------------------------------------------------------------------------
# geometry of crossings


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


# ---------------------------------------------------------------------------------------------
# precomputed inputs


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

    def label_at(self, x: float, y: float) -> int:
        return int(_k.label_at(self.labels, self.hexgrid, self.ox, self.oy, self.step, self.rs, x, y))

    def march(self, x, y, d, grain, max_len, max_gap) -> tuple[float, int, int]:
        t, lab, st = _k.march_ray(self.labels, self.hexgrid, self.ox, self.oy, self.step, self.rs,
                                  float(x), float(y), float(d[0]), float(d[1]), int(grain), self.ds,
                                  float(max_len), float(max_gap))
        return float(t), int(lab), int(st)


_GEOMETRY_CACHE: dict[int, tuple] = {}
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
        self.crss = np.asarray(systems.crss, dtype=float)
        # {112} slip is sense-dependent (twinning / anti-twinning); other families are symmetric
        self.crss_rev = np.asarray(getattr(systems, "crss_reverse", systems.crss), dtype=float)
        self.sys_normals = normals
        self.sys_dirs = np.asarray(systems.directions, dtype=float)


def _matrices(q: np.ndarray) -> np.ndarray:
    """Rotation matrices g (v_c = g v_s) of unit quaternions, (n, 3, 3): plain numpy, cheap for grains."""
    w, x, y, z = (np.asarray(q, dtype=float)[:, k] for k in range(4))
    return np.stack([
        np.stack([1 - 2 * (y * y + z * z), 2 * (x * y - w * z), 2 * (x * z + w * y)], axis=-1),
        np.stack([2 * (x * y + w * z), 1 - 2 * (x * x + z * z), 2 * (y * z - w * x)], axis=-1),
        np.stack([2 * (x * z - w * y), 2 * (y * z + w * x), 1 - 2 * (x * x + y * y)], axis=-1),
    ], axis=1)


class _Crystal:
    """Everything orientation-dependent: sample-frame normals, Schmid factors, plane traces."""

    def __init__(self, quats: np.ndarray, load: np.ndarray, planes: _Planes, schmid=None) -> None:
        g = _matrices(quats)  # (n, 3, 3); v_s = gᵀ v_c
        # (n_s)_i = Σ_j g_ji n_j: a batched matrix product (much faster than einsum here)
        self.n_s = np.matmul(planes.sys_normals[None], g)
        self.d_s = np.matmul(planes.sys_dirs[None], g)
        if schmid is None:
            schmid = (self.n_s @ load) * (self.d_s @ load)
        self.schmid = np.asarray(schmid, dtype=float)
        self.meff = np.abs(self.schmid) / np.where(self.schmid >= 0, planes.crss, planes.crss_rev)
        ng = quats.shape[0]
        # best system on each plane, per grain
        self.plane_sys = np.zeros((ng, planes.n_planes), np.int64)
        for p, idx in enumerate(planes.members):  # a few dozen planes: vectorised over grains
            self.plane_sys[:, p] = idx[np.argmax(self.meff[:, idx], axis=1)]
        self.plane_meff = np.take_along_axis(self.meff, self.plane_sys, axis=1)
        self.plane_n = np.matmul(planes.normals[None], g)
        t = np.stack([self.plane_n[..., 1], -self.plane_n[..., 0]], axis=-1)  # n × z, in-plane part
        tn = np.linalg.norm(t, axis=-1)
        # planes within ~3° of the surface have no usable trace
        self.trace_ok = tn > 0.05
        self.trace = t / np.where(self.trace_ok, tn, 1.0)[..., None]
        self.best_sys = np.argmax(self.meff, axis=1) if ng else np.zeros(0, int)

    def m_prime_row(self, ga: int, sys_a: int, gb: int) -> np.ndarray:
        """|m′| from system ``sys_a`` of grain ``ga`` to every system of grain ``gb``, (S,)."""
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






# ---------------------------------------------------------------------------------------------
# path tracing


@dataclass
class _Opts:
    horizon: float
    d_ref: np.ndarray
    d_stage2: np.ndarray | None
    stage2_after: float
    stage2_min_schmid: float
    zigzag_tol: float
    zigzag_fraction: float
    branch_tol: float
    max_branches: int
    inclination: float
    max_gap: float
    pw: PathWeights


@dataclass
class _State:
    x: float
    y: float
    grain: int
    s: float
    branch: int
    forced_plane: int = -1
    incoming_sys: int = -1
    stage: str = "I"
    segments: list = field(default_factory=list)
    crossings: list = field(default_factory=list)
    stop: str = ""


def _choose_plane(cry: _Crystal, g: int) -> int:
    return int(np.argmax(np.where(cry.trace_ok[g], cry.plane_meff[g], -np.inf)))


def _zigzag_partner(cry: _Crystal, g: int, p: int, tol: float) -> int:
    """Best other plane whose factor is within ``tol`` (relative) of plane ``p``'s, trace ≥ 5° away; −1 if none."""
    if tol <= 0:
        return -1
    m = cry.plane_meff[g]
    # close = within tol of each other, relative to the larger of the two factors
    ok = (cry.trace_ok[g] & (np.abs(m - m[p]) <= tol * np.maximum(m, m[p]))
          & (np.abs(cry.trace[g] @ cry.trace[g, p]) < math.cos(math.radians(5.0))))
    ok[p] = False
    if not ok.any():
        return -1
    return int(np.argmax(np.where(ok, cry.plane_meff[g], -np.inf)))


def _sense(t: np.ndarray, d_ref: np.ndarray) -> np.ndarray:
    return t if float(t @ d_ref) >= 0.0 else -t


def _crossing_scores(cry: _Crystal, planes: _Planes, ga: int, sys_a: int, gb: int, trace_angle: float,
                     opts: _Opts) -> dict[str, np.ndarray]:
    """Choice-score terms for every plane of the grain entered, (P,) arrays."""
    pw = opts.pw
    psys = cry.plane_sys[gb]
    meff = cry.plane_meff[gb]
    if sys_a >= 0:
        mp = cry.m_prime_row(ga, sys_a, gb)[psys]
        n_in = cry.n_s[ga, sys_a]
        twist, tilt = crack_plane_angles(n_in, cry.plane_n[gb], trace_angle, opts.inclination)
    else:
        mp = np.ones_like(meff)
        twist = np.zeros_like(meff)
        tilt = np.zeros_like(meff)
    terms = {
        "schmid": np.minimum(meff / _MAX_SCHMID, 1.0),
        "m_prime": mp,
        "twist": 1.0 - twist / 90.0,
        "tilt": 1.0 - tilt / 90.0,
    }
    wsum = pw.schmid + pw.m_prime + pw.twist + pw.tilt
    score = (pw.schmid * terms["schmid"] + pw.m_prime * terms["m_prime"] + pw.twist * terms["twist"]
             + pw.tilt * terms["tilt"]) / (wsum if wsum > 0 else 1.0)
    score = np.where(cry.trace_ok[gb], score, -np.inf)
    return {"score": score, "m_prime": mp, "twist": twist, "tilt": tilt, "meff": meff, **{
        f"choice_{k}": v for k, v in terms.items()}}


def _run_state(geo: _Geometry, cry: _Crystal, planes: _Planes, st: _State, opts: _Opts,
               queue: list, budget: list) -> _State:
    """Advance one path until it stops; alternatives found on the way are pushed on ``queue``."""
    nseg = 0
    prev_grain = -1
    while st.s < opts.horizon - 1e-9 and nseg < _MAX_SEGMENTS:
        g = st.grain
        if st.stage == "I" and (st.s >= opts.stage2_after or float(np.max(
                np.where(cry.trace_ok[g], cry.plane_meff[g], 0.0))) < opts.stage2_min_schmid):
            if opts.d_stage2 is None:
                raise ParameterError(
                    "stage II needs an in-plane load component, but load_axis is (nearly) along the "
                    "surface normal; give stage2_after_um=None and stage2_min_schmid=None, or tilt the load"
                )
            st.stage = "II"
        if st.stage == "II":
            legs = [(-1, _sense(opts.d_stage2, opts.d_ref), np.inf, "stage2")]
        else:
            best = _choose_plane(cry, g)
            p = st.forced_plane if st.forced_plane >= 0 else best
            partner = _zigzag_partner(cry, g, p, opts.zigzag_tol)
            if partner >= 0:
                leg = max(opts.zigzag_fraction * geo.ecd[g], 2.0 * geo.step)
                legs = [(p, _sense(cry.trace[g, p], opts.d_ref), leg, "zigzag"),
                        (partner, _sense(cry.trace[g, partner], opts.d_ref), leg, "zigzag")]
            else:
                legs = [(p, _sense(cry.trace[g, p], opts.d_ref), np.inf, "trace")]
        st.forced_plane = -1
        k = 0
        crossed = False
        while not crossed and st.s < opts.horizon - 1e-9 and nseg < _MAX_SEGMENTS:
            p, d, leg_len, kind = legs[k % len(legs)]
            k += 1
            max_len = min(leg_len, opts.horizon - st.s)
            t, lab, status = geo.march(st.x, st.y, d, g, max_len, opts.max_gap)
            sys_ = int(cry.plane_sys[g, p]) if p >= 0 else -1
            x1, y1 = st.x + t * d[0], st.y + t * d[1]
            end = {0: "horizon" if st.s + t >= opts.horizon - 1e-9 else "leg", 1: "boundary",
                   2: "unindexed", 3: "map_edge"}[status]
            if t > 1e-9:
                st.segments.append({
                    "grain": g, "x0_um": st.x, "y0_um": st.y, "x1_um": x1, "y1_um": y1, "length_um": t,
                    "s_start_um": st.s, "system": sys_, "plane": planes.labels[p] if p >= 0 else "stage II",
                    "effective_schmid": float(cry.meff[g, sys_]) if sys_ >= 0 else float(np.max(cry.meff[g])),
                    "stage": st.stage, "direction_deg": math.degrees(math.atan2(d[1], d[0])),
                    "leg": kind, "end": end, "branch": st.branch,
                })
                nseg += 1
            st.x, st.y, st.s = x1, y1, st.s + t
            if status == _k.STATUS_INSIDE:
                if len(legs) == 1 and st.s < opts.horizon - 1e-9 and t <= 1e-9:
                    st.stop = "blocked"
                    return st
                continue
            if status in (_k.STATUS_EDGE, _k.STATUS_UNINDEXED):
                st.stop = end
                return st
            # entered grain ``lab``
            if lab == prev_grain and t < 2.0 * geo.step:
                # the chosen trace leads straight back: the crack is deflected along the boundary
                st.stop = "blocked"
                return st
            _cross(geo, cry, planes, st, g, lab, sys_, d, opts, queue, budget)
            prev_grain = g
            crossed = True
        if st.s >= opts.horizon - 1e-9:
            break
    st.stop = st.stop or "horizon"
    return st


def _cross(geo, cry, planes, st: _State, g: int, lab: int, sys_in: int, d: np.ndarray, opts: _Opts,
           queue: list, budget: list) -> None:
    bid, mis, cls, ang = _boundary_info(geo, g, lab, d)
    if st.stage == "II":
        sys_in_eff = int(cry.best_sys[g])
        sc = _crossing_scores(cry, planes, g, -1, lab, ang, opts)
        mp_best = float(np.max(cry.m_prime_row(g, sys_in_eff, lab)))
        best = int(np.argmax(sc["score"]))
        row = {"grain_a": g, "grain_b": lab, "x_um": st.x, "y_um": st.y, "distance_um": st.s, "system_in": -1,
               "twist_deg": 0.0, "tilt_deg": 0.0, "m_prime": mp_best,
               "schmid_in": float(cry.meff[g, sys_in_eff]), "schmid_out": float(np.max(cry.meff[lab])),
               "system_out": -1, "plane_out": "stage II", "n_close": 0}
        row.update({k: float("nan") for k in ("choice_schmid", "choice_m_prime", "choice_twist", "choice_tilt",
                                                "choice_score")})
    else:
        sc = _crossing_scores(cry, planes, g, sys_in, lab, ang, opts)
        order = np.argsort(-sc["score"], kind="stable")
        best = int(order[0])
        close = [int(p) for p in order[1:] if np.isfinite(sc["score"][p])
                 and sc["score"][p] >= sc["score"][best] - opts.branch_tol]
        for p in close:
            if budget[0] <= 0:
                break
            budget[0] -= 1
            alt = _State(x=st.x, y=st.y, grain=lab, s=st.s, branch=-1, forced_plane=p,
                         incoming_sys=int(cry.plane_sys[lab, p]), stage="I")
            queue.append((alt, {**_crossing_row(bid, g, lab, st, sc, p, cry, sys_in, planes), "n_close": len(close),
                                "boundary_id": bid, "misorientation_deg": mis, "boundary_class": cls,
                                "trace_angle_deg": ang}))
        row = _crossing_row(bid, g, lab, st, sc, best, cry, sys_in, planes)
        row["n_close"] = len(close)
    row.update({"boundary_id": bid, "misorientation_deg": mis, "boundary_class": cls, "trace_angle_deg": ang})
    st.crossings.append({**row, "branch": st.branch})
    st.forced_plane = best if st.stage == "I" else -1
    st.incoming_sys = int(cry.plane_sys[lab, best]) if st.stage == "I" else -1
    st.grain = lab


def _crossing_row(bid, g, lab, st, sc, p, cry, sys_in, planes) -> dict:
    return {
        "boundary_id": bid, "grain_a": g, "grain_b": lab, "x_um": st.x, "y_um": st.y, "distance_um": st.s,
        "twist_deg": float(sc["twist"][p]), "tilt_deg": float(sc["tilt"][p]), "m_prime": float(sc["m_prime"][p]),
        "schmid_in": float(cry.meff[g, sys_in]) if sys_in >= 0 else float(np.max(cry.meff[g])),
        "schmid_out": float(sc["meff"][p]), "system_in": int(sys_in), "system_out": int(cry.plane_sys[lab, p]),
        "plane_out": planes.labels[p],
        **{k: float(sc[k][p]) for k in ("choice_schmid", "choice_m_prime", "choice_twist", "choice_tilt")},
        "choice_score": float(sc["score"][p]),
    }


def _trace_all(geo, cry, planes, x, y, grain, opts: _Opts) -> tuple[list[_State], list[dict]]:
    """Main path (branch 0) and up to ``max_branches`` alternatives, breadth-first."""
    budget = [int(opts.max_branches)]
    queue: list = []
    main = _run_state(geo, cry, planes, _State(x=x, y=y, grain=grain, s=0.0, branch=0), opts, queue, budget)
    states = [main]
    alt_cross = []
    i = 0
    while i < len(queue):
        alt, row = queue[i]
        i += 1
        alt.branch = len(states)
        alt.crossings.append({**row, "branch": alt.branch})
        states.append(_run_state(geo, cry, planes, alt, opts, queue, budget))
        alt_cross.extend(alt.crossings)
    return states, alt_cross


# ---------------------------------------------------------------------------------------------
# localisation sites


def _anchor_points(geo: _Geometry, grains: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A point inside each grain: its centroid, or the grain point nearest it if outside."""
    ax = geo.cx[grains].copy()
    ay = geo.cy[grains].copy()
    for k, g in enumerate(grains):
        if int(g) in geo.anchors:
            ax[k], ay[k] = geo.anchors[int(g)]
            continue
        if geo.label_at(ax[k], ay[k]) != g:  # non-convex grain: few, so a per-grain fallback
            ii, jj = np.nonzero(geo.labels == g)
            x = geo.ox + jj * geo.step + (0.5 * geo.step * (ii % 2) if geo.hexgrid else 0.0)
            y = geo.oy + ii * geo.rs
            m = int(np.argmin((x - ax[k]) ** 2 + (y - ay[k]) ** 2))
            ax[k], ay[k] = x[m], y[m]
        geo.anchors[int(g)] = (float(ax[k]), float(ay[k]))  # geometry only: reused by Monte Carlo
    return ax, ay


def _sites(geo: _Geometry, cry: _Crystal, planes: _Planes, grains: np.ndarray, amplitude: float,
           want_bands: bool = False, max_gap: float = 0.0):
    """Slip bands of ``grains`` and the sites where they end on poorly transmitting boundaries."""
    cols = list(FORECAST_SITES)
    grains = np.asarray(grains, dtype=np.int64)
    if grains.size == 0:
        return pd.DataFrame({c: pd.Series(dtype=float) for c in cols}), None
    sys_ = cry.best_sys[grains]
    p = planes.plane_of[sys_]
    tr = cry.trace[grains, p]
    ok = cry.trace_ok[grains, p]
    grains, sys_, p, tr = grains[ok], sys_[ok], p[ok], tr[ok]
    ax, ay = _anchor_points(geo, grains)
    t_out = np.zeros((grains.size, 2))
    lab_out = np.zeros((grains.size, 2), np.int64)
    max_len = float(np.hypot(geo.nx * geo.step, geo.ny * geo.rs))
    _k.chord_ends(geo.labels, geo.hexgrid, geo.ox, geo.oy, geo.step, geo.rs, ax, ay,
                  np.ascontiguousarray(tr[:, 0]), np.ascontiguousarray(tr[:, 1]), grains, geo.ds, max_len,
                  max_gap, t_out, lab_out)
    band = t_out.sum(axis=1)
    tau = cry.meff[grains, sys_] * amplitude
    rows = []
    band_w = np.zeros(grains.size)
    for k in range(grains.size):
        g, s = int(grains[k]), int(sys_[k])
        for e, sg in ((0, 1.0), (1, -1.0)):
            nb_ = int(lab_out[k, e])
            if nb_ < 0 or nb_ == g:
                continue
            # transmission: best |m′| to a system of the neighbour, weighted by that system's
            # effective Schmid factor relative to the neighbour's best (a blocked band needs an
            # outgoing system that is both aligned and stressed; common practice)
            mp = cry.m_prime_row(g, s, nb_)
            trans = float(np.max(mp * cry.meff[nb_] / max(float(np.max(cry.meff[nb_])), 1e-12)))
            score = float(tau[k] * band[k] * (1.0 - trans))
            band_w[k] += score
            info = geo.edges.get((min(g, nb_), max(g, nb_)))
            rows.append({"x_um": ax[k] + sg * t_out[k, e] * tr[k, 0], "y_um": ay[k] + sg * t_out[k, e] * tr[k, 1],
                         "site_score_mpa_um": score, "grain": g, "blocking_grain": nb_,
                         "boundary_id": info[0] if info else -1, "system": s, "plane": planes.labels[int(p[k])],
                         "resolved_shear_mpa": float(tau[k]), "band_length_um": float(band[k]),
                         "transmission_score": trans})
    df = pd.DataFrame(rows, columns=cols[1:])
    df = df.sort_values("site_score_mpa_um", ascending=False, kind="stable").reset_index(drop=True)
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    bands = None
    if want_bands:
        bands = (ax - t_out[:, 1] * tr[:, 0], ay - t_out[:, 1] * tr[:, 1],
                 ax + t_out[:, 0] * tr[:, 0], ay + t_out[:, 0] * tr[:, 1], band_w / np.maximum(band, 1e-9))
    return df, bands


def _field(geo: _Geometry, bands, sigma_um: float) -> np.ndarray:
    from scipy.ndimage import gaussian_filter

    img = np.zeros((geo.ny, geo.nx))
    if bands is not None and len(bands[0]):
        x0, y0, x1, y1, w = (np.ascontiguousarray(a, dtype=float) for a in bands)
        _k.accumulate_segments(img, geo.hexgrid, geo.ox, geo.oy, geo.step, geo.rs, x0, y0, x1, y1, w, geo.ds)
    img = gaussian_filter(img, sigma=(sigma_um / geo.rs, sigma_um / geo.step), mode="constant")
    top = float(img.max())
    return img / top if top > 0 else img


# ---------------------------------------------------------------------------------------------
# public entry


def _parse_tip(geo: _Geometry, tip, direction) -> tuple[np.ndarray, np.ndarray, float]:
    t = np.asarray(tip, dtype=float)
    crack_len = 0.0
    if t.ndim == 2 and t.shape[1] == 2 and t.shape[0] >= 2:
        seg = np.diff(t, axis=0)
        crack_len = float(np.linalg.norm(seg, axis=1).sum())
        if direction is None:
            direction = seg[-1]
        t = t[-1]
    if t.shape != (2,) or not np.all(np.isfinite(t)):
        raise ParameterError(f"tip should be (x, y) in µm or a (k, 2) crack polyline with k ≥ 2; got {tip!r}")
    if direction is None:
        raise ParameterError("direction should be a 2-vector (x, y) in the map frame when tip is a single point")
    d = check_vector(direction, "direction", 2)
    return t, d, crack_len


def _start_grain(geo: _Geometry, tip: np.ndarray, d: np.ndarray) -> int:
    lab = geo.label_at(tip[0], tip[1])
    if lab == -2:
        ex = (geo.ox, geo.ox + (geo.nx - 1) * geo.step, geo.oy, geo.oy + (geo.ny - 1) * geo.rs)
        raise ParameterError(
            f"tip ({tip[0]:g}, {tip[1]:g}) µm lies outside the map; it should lie within "
            f"x {ex[0]:g}..{ex[1]:g}, y {ex[2]:g}..{ex[3]:g} µm"
        )
    ahead = geo.label_at(tip[0] + 0.5 * geo.step * d[0], tip[1] + 0.5 * geo.step * d[1])
    # a tip on a boundary starts in the grain it faces (half a step ahead)
    if ahead >= 0:
        return ahead
    if lab < 0:
        raise ParameterError(
            f"tip ({tip[0]:g}, {tip[1]:g}) µm lies on an unindexed point (no grain); move it into a grain "
            "or rebuild the graph with fill_unindexed=True"
        )
    return lab


def _make_opts(horizon, d, load, *, stage2_after_um, stage2_min_schmid, zigzag_tol, zigzag_step_fraction,
               branch_tol, max_branches, boundary_inclination_deg, unindexed, unindexed_gap_um, path_weights) -> _Opts:
    lxy = np.asarray(load[:2], dtype=float)
    n = float(np.linalg.norm(lxy))
    # the crack plane in stage II is normal to the load; its surface trace is ⟂ the in-plane load
    d2 = np.array([-lxy[1], lxy[0]]) / n if n > 1e-3 else None
    return _Opts(
        horizon=horizon, d_ref=d, d_stage2=d2,
        stage2_after=np.inf if stage2_after_um is None else check_positive(stage2_after_um, "stage2_after_um",
                                                                               allow_zero=True),
        stage2_min_schmid=-1.0 if stage2_min_schmid is None else check_range(stage2_min_schmid,
                                                                               "stage2_min_schmid", 0.0, 10.0),
        zigzag_tol=check_range(zigzag_tol, "zigzag_tol", 0.0, 1.0),
        zigzag_fraction=check_positive(zigzag_step_fraction, "zigzag_step_fraction"),
        branch_tol=check_range(branch_tol, "branch_tol", 0.0, 1.0),
        max_branches=int(check_range(max_branches, "max_branches", 0, 100)),
        inclination=check_range(boundary_inclination_deg, "boundary_inclination_deg", 1.0, 179.0),
        max_gap=np.inf if check_choice(unindexed, "unindexed", ("stop", "cross")) == "cross" else unindexed_gap_um,
        pw=path_weights,
    )


def _distance_to_segments(px: np.ndarray, py: np.ndarray, segs: np.ndarray) -> np.ndarray:
    """Distance (µm) of each point to the nearest of the segments ``(k, 4)`` = x0, y0, x1, y1."""
    ax, ay, bx, by = (segs[:, i][None, :] for i in range(4))
    vx, vy = bx - ax, by - ay
    t = np.clip(((px[:, None] - ax) * vx + (py[:, None] - ay) * vy) / np.maximum(vx * vx + vy * vy, 1e-12), 0, 1)
    return np.hypot(px[:, None] - ax - t * vx, py[:, None] - ay - t * vy).min(axis=1)


