"""Crack forecast: the stage-I path ahead of a tip, ranked arrest barriers and localisation sites.

Given a grain graph (:class:`slipnet.grains.GrainGraph`), the load and a crack tip, this module
says where a microstructurally short crack will run, which boundaries should slow or stop it, and
where shear should pile up ahead of it, and shows every term of every ranking.

Notation (sample/map frame unless stated): g orientation (``v_c = g v_s``), n slip-plane normal,
d slip direction, l unit load axis, z = (0, 0, 1) the surface normal (into the specimen),
t = n × z the surface trace of a plane, b the surface trace of a boundary, n_gb its plane normal.

The path (stage I)
------------------
Inside a grain the crack follows the surface trace of the slip plane whose best system carries
the highest effective Schmid factor ``|m| / τ_c`` (``τ_c`` the relative critical resolved shear
stress of its family), in the sense with a positive projection on the macroscopic growth
direction (the direction given at the tip). Where another plane's effective factor is within
``zigzag_tol`` (relative) of the best, the crack alternates between the two traces (zig-zag) in
legs of ``zigzag_step_fraction`` × the grain's equivalent circle diameter. At a boundary the
outgoing plane is the one with the highest choice score (see :class:`PathWeights`). Stage II
(growth perpendicular to the in-plane projection of the load axis) starts past
``stage2_after_um`` or in a grain whose best effective factor is below ``stage2_min_schmid``.

References
----------
Zhai, T., Wilkinson, A. J. & Martin, J. W. (2000). A crystallographic mechanism for fatigue crack
propagation through grain boundaries. Acta Materialia 48, 4917–4927.
https://doi.org/10.1016/S1359-6454(00)00214-7
Luster, J. & Morris, M. A. (1995). Compatibility of deformation in two-phase Ti-Al alloys.
Metallurgical and Materials Transactions A 26, 1745–1756.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields

import numpy as np
import pandas as pd

from . import _forecast_kernels as _k
from ._checks import check_choice, check_positive, check_range, check_vector
from .errors import ParameterError

__all__ = [
    "CLASS_FACTORS",
    "BarrierWeights",
    "CrackForecast",
    "MonteCarloNoise",
    "PathWeights",
    "crack_plane_angles",
    "forecast_crack",
    "rank_barriers",
    "write_forecast",
]

_Z = np.array([0.0, 0.0, 1.0])
_MAX_SCHMID = 0.5  # largest possible Schmid factor: normalises the Schmid terms to [0, 1]
_MAX_SEGMENTS = 20000  # guard against a path that never progresses

#: Barrier factor of each boundary class (0 no barrier … 1 full high-angle barrier).
#: Sub-grain and low-angle boundaries let slip and cracks through almost unchanged (common
#: practice; Zhai et al. 2000 saw cracks cross low-misorientation boundaries without arrest);
#: coherent Σ3 twins transmit slip on the shared {111}/{112} plane family more easily than a
#: general boundary (common practice), other CSL boundaries sit in between (common practice).
CLASS_FACTORS: dict[str, float] = {
    "subgrain": 0.1,
    "low_angle": 0.3,
    "sigma3": 0.6,
    "csl": 0.8,
    "high_angle": 1.0,
}


@dataclass(frozen=True)
class PathWeights:
    """Weights of the outgoing-plane choice score at a boundary.

    ``score = (w_s·min(m_eff/0.5, 1) + w_m·|m′| + w_α·(1 − α/90°) + w_β·(1 − β/90°)) / Σw``,
    in [0, 1]; m_eff is the outgoing plane's best effective Schmid factor, |m′| is between the
    incoming system and that best system, α and β the crack-plane twist and tilt.

    Notes
    -----
    Defaults: the driving force (Schmid) and the twist carry equal weight, because Zhai et al.
    (2000) found the twist angle to govern whether and where a stage-I crack crosses; the tilt
    is "a minor factor" in the same work (weight 0.25); |m′| (Luster & Morris 1995) adds slip
    continuity at half weight, since the crack plane need not be the transmitted slip plane.
    """

    schmid: float = 1.0
    m_prime: float = 0.5
    twist: float = 1.0
    tilt: float = 0.25


@dataclass(frozen=True)
class BarrierWeights:
    """Weights of the barrier resistance score.

    ``score = relevance · (w_α·α/90° + w_T·(1 − |m′|) + w_c·class_factor + w_Δ·Δm_eff/0.5) / Σw``
    with ``relevance = exp(−distance / decay_length)``.

    Notes
    -----
    Defaults: twist and 1 − transmission weigh 1 each (twist: Zhai et al. 2000, the main
    resistance to crack crossing; transmission: slip blocked at a boundary holds the plastic
    zone back, Navarro & de los Rios 1988), the boundary class 0.5 (it repeats part of the
    twist/m′ information: a low-angle boundary has small twist and high m′ anyway) and the drop
    of effective Schmid factor 0.5 (a less favourably oriented next grain slows the crack,
    Tanaka et al. 1986; common practice).
    """

    twist: float = 1.0
    transmission: float = 1.0
    boundary_class: float = 0.5
    schmid_drop: float = 0.5


@dataclass(frozen=True)
class MonteCarloNoise:
    """Standard deviations of the Monte Carlo perturbations.

    Attributes
    ----------
    orientation_deg
        Rotation angle (normal, random axis) applied to every grain mean orientation; 1–2° is
        the usual angular precision of an orientation map (common practice).
    load_deg
        Misalignment of the load axis (normal angle about a random perpendicular axis).
    tip_um
        Gaussian jitter of each tip coordinate, µm.
    weights
        Log-normal relative jitter of every score weight.
    """

    orientation_deg: float = 1.5
    load_deg: float = 2.0
    tip_um: float = 1.0
    weights: float = 0.2


@dataclass(frozen=True, eq=False)
class CrackForecast:
    """Result of :func:`forecast_crack`.

    Attributes
    ----------
    path : DataFrame
        Main path, one row per straight segment: ``grain``, ``x0``, ``y0``, ``x1``, ``y1`` (µm),
        ``length_um``, ``s_start_um`` (distance along the path from the tip), ``system`` (index
        into the catalogue, −1 in stage II), ``plane`` (Miller label), ``schmid`` (effective
        factor of that system in that grain), ``stage`` ("I"/"II"), ``direction_deg`` (from +x
        towards +y), ``leg`` ("trace"/"zigzag"/"stage2"), ``end`` (what stopped the segment).
    crossings : DataFrame
        One row per boundary crossing of the main path and of the alternatives (``branch``):
        ``boundary_id``, ``grain_a`` (from), ``grain_b`` (into), ``x``, ``y`` (µm),
        ``distance_um``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``schmid_in``, ``schmid_out``,
        the choice-score terms ``choice_*`` and ``choice_score``, ``n_close`` (other planes within
        the branch tolerance).
    barriers : DataFrame
        Ranked boundaries (``rank`` 1 = strongest): ``boundary_id``, ``grain_a``, ``grain_b``,
        ``score``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``distance_um``, ``on_path``, the
        terms ``term_*``, the weights ``weight_*``, ``relevance``, ``boundary_class``, ``branches``,
        and with Monte Carlo ``p_on_path``, ``p_top_k``.
    sites : DataFrame
        Ranked localisation sites: ``rank``, ``x``, ``y`` (µm), ``score`` (MPa·µm), ``grain``,
        ``blocking_grain``, ``boundary_id``, ``system``, ``plane``, ``resolved_shear_mpa``,
        ``band_length_um``, ``transmission``; with Monte Carlo ``p_present``, ``p_top_k``.
    alternatives : DataFrame
        Segments of the alternative paths (same columns as ``path`` plus ``branch`` ≥ 1).
    field : (ny, nx) ndarray or None
        Predicted localisation field on the map grid, maximum 1.
    samples : DataFrame or None
        One row per Monte Carlo sample, or None without sampling.
    settings : dict
        Every input that shaped the result (JSON-safe).
    stop_reason : str
        Why the main path ended: "horizon", "map_edge", "unindexed", "blocked".
    """

    path: pd.DataFrame
    crossings: pd.DataFrame
    barriers: pd.DataFrame
    sites: pd.DataFrame
    alternatives: pd.DataFrame
    field: np.ndarray | None
    samples: pd.DataFrame | None
    settings: dict
    stop_reason: str

    @property
    def length_um(self) -> float:
        """Length of the main path, µm."""
        return float(self.path["length_um"].sum()) if len(self.path) else 0.0


# ---------------------------------------------------------------------------------------------
# geometry of crossings


def crack_plane_angles(n_in, n_out, trace_angle_deg, inclination_deg: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """Twist and tilt angles between two crack planes meeting at a boundary (Zhai et al. 2000).

    Parameters
    ----------
    n_in : (..., 3) array_like
        Incoming crack-plane normal, sample frame (need not be unit).
    n_out : (..., 3) array_like
        Outgoing crack-plane normals, sample frame; broadcast against ``n_in``.
    trace_angle_deg
        Direction of the boundary's surface trace, degrees from +x towards +y.
    inclination_deg
        Rotation of the boundary plane about its surface trace away from the vertical (0: the
        plane contains the surface normal, the assumption when only a surface map is known).

    Returns
    -------
    twist_deg, tilt_deg : ndarray
        In [0°, 90°] (angles between lines), shape of the broadcast leading axes.

    Notes
    -----
    With the boundary trace ``b = (cos θ, sin θ, 0)`` and the inclination ψ, the boundary plane
    normal is ``n_gb = cos ψ (z × b) + sin ψ z``. The traces of the crack planes on the boundary
    plane are ``l = n × n_gb``; the twist is the angle between the two lines,
    ``α = arccos(|l̂_in · l̂_out|)``. The traces on the surface are ``t = n × z``; the tilt is
    ``β = arccos(|t̂_in · t̂_out|)``. A crack plane parallel to the boundary plane (``l = 0``) has no
    trace on it: the twist is then reported as 0 (the crack can run along the boundary).
    """
    n_in = np.asarray(n_in, dtype=float)
    n_out = np.asarray(n_out, dtype=float)
    th = math.radians(float(trace_angle_deg))
    psi = math.radians(float(inclination_deg))
    b = np.array([math.cos(th), math.sin(th), 0.0])
    n_gb = math.cos(psi) * np.array([-b[1], b[0], 0.0]) + math.sin(psi) * _Z  # cos ψ (z × b) + sin ψ z
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


def _miller_label(n: np.ndarray) -> str:
    v = np.asarray(n, dtype=float)
    v = v / np.abs(v[np.abs(v) > 1e-6]).min()
    for k in range(1, 13):
        w = v * k
        if np.allclose(w, np.rint(w), atol=1e-3):
            return "(" + " ".join(str(int(x)) for x in np.rint(w)) + ")"
    return "(" + " ".join(f"{x:.2f}" for x in n) + ")"


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

    def label_at(self, x: float, y: float) -> int:
        return int(_k.label_at(self.labels, self.hexgrid, self.ox, self.oy, self.step, self.rs, x, y))

    def march(self, x, y, d, grain, max_len, max_gap) -> tuple[float, int, int]:
        t, lab, st = _k.march_ray(self.labels, self.hexgrid, self.ox, self.oy, self.step, self.rs,
                                  float(x), float(y), float(d[0]), float(d[1]), int(grain), self.ds,
                                  float(max_len), float(max_gap))
        return float(t), int(lab), int(st)


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
        self.labels = [_miller_label(n) for n in self.normals]
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
        self.n_s = np.einsum("gji,sj->gsi", g, planes.sys_normals)
        self.d_s = np.einsum("gji,sj->gsi", g, planes.sys_dirs)
        if schmid is None:
            schmid = np.einsum("gsi,i->gs", self.n_s, load) * np.einsum("gsi,i->gs", self.d_s, load)
        self.schmid = np.asarray(schmid, dtype=float)
        self.meff = np.abs(self.schmid) / np.where(self.schmid >= 0, planes.crss, planes.crss_rev)
        ng = quats.shape[0]
        # best system on each plane, per grain
        self.plane_sys = np.zeros((ng, planes.n_planes), np.int64)
        for p, idx in enumerate(planes.members):  # a few dozen planes: vectorised over grains
            self.plane_sys[:, p] = idx[np.argmax(self.meff[:, idx], axis=1)]
        self.plane_meff = np.take_along_axis(self.meff, self.plane_sys, axis=1)
        self.plane_n = np.einsum("gji,pj->gpi", g, planes.normals)
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


def _check_decay(value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"decay_length_um should be a number > 0 (inf allowed); got {value!r}") from err
    if not v > 0:  # NaN fails too
        raise ParameterError(f"decay_length_um should be a number > 0 (inf allowed); got {value!r}")
    return v


def _class_factor(cls: str, factors: dict[str, float]) -> float:
    if cls in factors:
        return float(factors[cls])
    if cls.startswith("sigma"):
        return float(factors.get("csl", 0.8))
    return float(factors.get("high_angle", 1.0))


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
    """Best other plane within ``tol`` (relative) of plane ``p``'s factor, trace ≥ 5° away; −1 if none."""
    if tol <= 0:
        return -1
    ok = (cry.trace_ok[g] & (cry.plane_meff[g] >= (1.0 - tol) * cry.plane_meff[g, p])
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
                    "grain": g, "x0": st.x, "y0": st.y, "x1": x1, "y1": y1, "length_um": t,
                    "s_start_um": st.s, "system": sys_, "plane": planes.labels[p] if p >= 0 else "stage II",
                    "schmid": float(cry.meff[g, sys_]) if sys_ >= 0 else float(np.max(cry.meff[g])),
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
        row = {"grain_a": g, "grain_b": lab, "x": st.x, "y": st.y, "distance_um": st.s, "system_in": -1,
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
        "boundary_id": bid, "grain_a": g, "grain_b": lab, "x": st.x, "y": st.y, "distance_um": st.s,
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
# barrier ranking


def rank_barriers(
    crossings: pd.DataFrame,
    weights: BarrierWeights | None = None,
    *,
    decay_length_um: float = np.inf,
    class_factors: dict[str, float] | None = None,
) -> pd.DataFrame:
    """Rank boundary crossings by a resistance score that shows every term and weight.

    Parameters
    ----------
    crossings
        Crossing rows as in :attr:`CrackForecast.crossings` (at least ``boundary_id``,
        ``grain_a``, ``grain_b``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``schmid_in``,
        ``schmid_out``, ``boundary_class``, ``distance_um``; ``branch`` 0 marks the main path).
    weights
        Term weights (:class:`BarrierWeights`).
    decay_length_um
        Relevance decay length: ``relevance = exp(−distance_um / decay_length_um)``; ``inf``
        ranks by the terms alone.
    class_factors
        Barrier factor per boundary class (default :data:`CLASS_FACTORS`).

    Returns
    -------
    DataFrame
        One row per boundary (the main-path crossing when the boundary is on it, else its first
        crossing by an alternative), sorted by ``score`` (descending), ``rank`` from 1.

    Notes
    -----
    ``score = relevance · Σ_k w_k·term_k / Σ_k w_k`` with ``term_twist = α/90°``,
    ``term_transmission = 1 − |m′|``, ``term_class`` from the boundary class and
    ``term_schmid_drop = max(0, m_eff,in − m_eff,out)/0.5``; every term lies in [0, 1].
    A boundary between identical orientations has twist 0, |m′| = 1 and no Schmid drop, so only
    its class term (sub-grain: 0.1) remains: the weakest possible barrier.
    """
    w = weights or BarrierWeights()
    cf = CLASS_FACTORS if class_factors is None else class_factors
    decay_length_um = _check_decay(decay_length_um)
    cols = ["rank", "boundary_id", "grain_a", "grain_b", "score", "twist_deg", "tilt_deg", "m_prime",
            "distance_um", "on_path", "term_twist", "term_transmission", "term_class", "term_schmid_drop",
            "relevance", "weight_twist", "weight_transmission", "weight_class", "weight_schmid_drop",
            "boundary_class", "misorientation_deg", "schmid_in", "schmid_out", "x", "y", "branches"]
    if crossings is None or len(crossings) == 0:
        return pd.DataFrame({c: pd.Series(dtype=object if c in ("boundary_class", "branches") else float)
                             for c in cols})
    n = len(crossings)
    col = {c: crossings[c].to_numpy() for c in crossings.columns}
    branch = col.get("branch", np.zeros(n, int))
    ga, gb = col["grain_a"].astype(int), col["grain_b"].astype(int)
    keys = [(min(a, b), max(a, b)) for a, b in zip(ga, gb, strict=True)]
    # one row per boundary: its main-path crossing if any, else the first alternative crossing
    first: dict = {}
    seen: dict = {}
    for i in np.lexsort((col["distance_um"], branch)):
        k = keys[i]
        seen.setdefault(k, set()).add(int(branch[i]))
        first.setdefault(k, i)
    idx = np.array(list(first.values()), dtype=int)
    mis = col.get("misorientation_deg", np.full(n, np.nan))
    out = pd.DataFrame({
        "boundary_id": col["boundary_id"][idx].astype(int),
        "grain_a": ga[idx], "grain_b": gb[idx],
        "twist_deg": col["twist_deg"][idx].astype(float), "tilt_deg": col["tilt_deg"][idx].astype(float),
        "m_prime": col["m_prime"][idx].astype(float), "distance_um": col["distance_um"][idx].astype(float),
        "on_path": [0 in seen[keys[i]] for i in idx],
        "boundary_class": col["boundary_class"][idx].astype(str),
        "misorientation_deg": mis[idx].astype(float),
        "schmid_in": col["schmid_in"][idx].astype(float), "schmid_out": col["schmid_out"][idx].astype(float),
        "x": col["x"][idx].astype(float), "y": col["y"][idx].astype(float),
        "branches": [";".join(str(b) for b in sorted(seen[keys[i]])) for i in idx],
    })
    out["term_twist"] = np.clip(out["twist_deg"].to_numpy() / 90.0, 0.0, 1.0)
    out["term_transmission"] = np.clip(1.0 - out["m_prime"].to_numpy(), 0.0, 1.0)
    out["term_class"] = [_class_factor(c, cf) for c in out["boundary_class"]]
    out["term_schmid_drop"] = np.clip((out["schmid_in"].to_numpy() - out["schmid_out"].to_numpy()) / _MAX_SCHMID,
                                      0.0, 1.0)
    out["relevance"] = np.exp(-out["distance_um"] / decay_length_um)
    out["weight_twist"] = w.twist
    out["weight_transmission"] = w.transmission
    out["weight_class"] = w.boundary_class
    out["weight_schmid_drop"] = w.schmid_drop
    wsum = w.twist + w.transmission + w.boundary_class + w.schmid_drop
    if wsum <= 0:
        raise ParameterError(f"barrier weights should have a positive sum; got {w}")
    raw = (w.twist * out["term_twist"] + w.transmission * out["term_transmission"]
           + w.boundary_class * out["term_class"] + w.schmid_drop * out["term_schmid_drop"]) / wsum
    out["score"] = out["relevance"] * raw
    out = out.sort_values(["score", "distance_um"], ascending=[False, True], kind="stable").reset_index(drop=True)
    out["rank"] = np.arange(1, len(out) + 1)
    return out[cols]


# ---------------------------------------------------------------------------------------------
# localisation sites


def _anchor_points(geo: _Geometry, grains: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A point inside each grain: its centroid, or the grain point nearest it if outside."""
    ax = geo.cx[grains].copy()
    ay = geo.cy[grains].copy()
    for k, g in enumerate(grains):
        if geo.label_at(ax[k], ay[k]) != g:  # non-convex grain: few, so a per-grain fallback
            ii, jj = np.nonzero(geo.labels == g)
            x = geo.ox + jj * geo.step + (0.5 * geo.step * (ii % 2) if geo.hexgrid else 0.0)
            y = geo.oy + ii * geo.rs
            m = int(np.argmin((x - ax[k]) ** 2 + (y - ay[k]) ** 2))
            ax[k], ay[k] = x[m], y[m]
    return ax, ay


def _sites(geo: _Geometry, cry: _Crystal, planes: _Planes, grains: np.ndarray, amplitude: float,
           want_bands: bool = False, max_gap: float = 0.0):
    """Slip bands of ``grains`` and the sites where they end on poorly transmitting boundaries."""
    cols = ["rank", "x", "y", "score", "grain", "blocking_grain", "boundary_id", "system", "plane",
            "resolved_shear_mpa", "band_length_um", "transmission"]
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
            rows.append({"x": ax[k] + sg * t_out[k, e] * tr[k, 0], "y": ay[k] + sg * t_out[k, e] * tr[k, 1],
                         "score": score, "grain": g, "blocking_grain": nb_,
                         "boundary_id": info[0] if info else -1, "system": s, "plane": planes.labels[int(p[k])],
                         "resolved_shear_mpa": float(tau[k]), "band_length_um": float(band[k]),
                         "transmission": trans})
    df = pd.DataFrame(rows, columns=cols[1:])
    df = df.sort_values("score", ascending=False, kind="stable").reset_index(drop=True)
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
               branch_tol, max_branches, inclination_deg, unindexed, unindexed_gap_um, path_weights) -> _Opts:
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
        inclination=check_range(inclination_deg, "inclination_deg", -89.0, 89.0),
        max_gap=np.inf if check_choice(unindexed, "unindexed", ("stop", "cross")) == "cross" else unindexed_gap_um,
        pw=path_weights,
    )


def _core(geo, planes, quats, load, schmid, tip, grain0, opts: _Opts, *, amplitude, decay, bw, cf,
          want_field: bool, sigma_um: float) -> dict:
    cry = _Crystal(quats, load, planes, schmid)
    states, alt_cross = _trace_all(geo, cry, planes, float(tip[0]), float(tip[1]), grain0, opts)
    main = states[0]
    seg_cols = ["grain", "x0", "y0", "x1", "y1", "length_um", "s_start_um", "system", "plane", "schmid", "stage",
                "direction_deg", "leg", "end", "branch"]
    path = pd.DataFrame(main.segments, columns=seg_cols).drop(columns="branch")
    alts = pd.DataFrame([s for st in states[1:] for s in st.segments], columns=seg_cols)
    crossings = pd.DataFrame(main.crossings + alt_cross)
    barriers = rank_barriers(crossings, bw, decay_length_um=decay, class_factors=cf)
    on = set(path["grain"].tolist()) | set(alts["grain"].tolist())
    near = set(on)
    for g in path["grain"].tolist():
        near.update(geo.neigh.get(int(g), []))
    cand = np.array(sorted(near), dtype=np.int64)
    if cand.size:
        dist = np.hypot(geo.cx[cand] - tip[0], geo.cy[cand] - tip[1])
        cand = cand[(dist <= opts.horizon + 0.5 * geo.ecd[cand]) | np.isin(cand, list(on))]
    sites, bands = _sites(geo, cry, planes, cand, amplitude, want_bands=want_field,
                          max_gap=min(opts.max_gap, 3.0 * geo.step))
    sites["on_path_grain"] = sites["grain"].isin(path["grain"]) if len(sites) else pd.Series(dtype=bool)
    fld = _field(geo, bands, sigma_um) if want_field else None
    return {"path": path, "alternatives": alts, "crossings": crossings, "barriers": barriers, "sites": sites,
            "field": fld, "stop": main.stop}


def forecast_crack(
    gg,
    tip,
    direction=None,
    load_axis=(0.0, 1.0, 0.0),
    horizon: float = 200.0,
    *,
    stress_amplitude: float = 200.0,
    stress_ratio: float = -1.0,
    systems=None,
    stress_field=None,
    samples: int = 0,
    seed: int = 0,
    noise: MonteCarloNoise | None = None,
    top_k: int = 3,
    path_weights: PathWeights | None = None,
    barrier_weights: BarrierWeights | None = None,
    class_factors: dict[str, float] | None = None,
    decay_length_um: float | None = None,
    zigzag_tol: float = 0.05,
    zigzag_step_fraction: float = 0.25,
    branch_tol: float = 0.05,
    max_branches: int = 4,
    stage2_after_um: float | None = None,
    stage2_min_schmid: float | None = None,
    inclination_deg: float = 0.0,
    unindexed: str = "stop",
    unindexed_gap_um: float | None = None,
    field_sigma_um: float | None = None,
) -> CrackForecast:
    """Forecast the short-crack path ahead of a tip, rank barriers and localisation sites.

    Parameters
    ----------
    gg : GrainGraph
        Grains and boundaries (:func:`slipnet.grains.build_grain_graph`).
    tip : (2,) or (k, 2) array_like
        Crack tip ``(x, y)`` in µm, or a crack polyline (tip = last point; if ``direction`` is
        None, direction = last segment). A notch root is given as a tip with the notch direction.
    direction : (2,) array_like or None
        Macroscopic growth direction (map frame, need not be unit). The crack always takes the
        sense of a trace that has a positive projection on it.
    load_axis : (3,) array_like
        Uniaxial load axis in the map frame.
    horizon
        Path length to forecast ahead of the tip, µm (> 0).
    stress_amplitude
        Applied stress amplitude, MPa (resolved shear of the sites = m_eff × amplitude).
    stress_ratio
        R = σ_min/σ_max (< 1); recorded in the settings for the growth model.
    systems
        Slip-system catalogue (default ``slipnet.slip.slip_systems`` of the map's first phase).
    stress_field
        A :class:`slipnet.stress.StressField`: grain-mean local Schmid factors replace the
        uniform-load ones (and load misalignment is then not sampled).
    samples, seed, noise, top_k
        Monte Carlo samples (0: none), their seed, perturbation sizes and the k of "top k".
    path_weights, barrier_weights, class_factors
        Score weights (:class:`PathWeights`, :class:`BarrierWeights`, :data:`CLASS_FACTORS`).
    decay_length_um
        Barrier relevance decay length, µm; default the horizon (a barrier at the horizon
        counts e⁻¹ ≈ 0.37 of one at the tip).
    zigzag_tol, zigzag_step_fraction
        Relative tolerance on the effective Schmid factor under which two planes alternate, and
        the leg length as a fraction of the grain's equivalent circle diameter (≥ 2 steps).
    branch_tol, max_branches
        Alternative outgoing planes within ``branch_tol`` of the best choice score start an
        alternative path, at most ``max_branches`` in all (breadth first).
    stage2_after_um, stage2_min_schmid
        Switch to stage II past this path length, or in a grain whose best effective Schmid
        factor is below this threshold (None: never).
    inclination_deg
        Boundary-plane inclination about its trace (0: perpendicular to the surface, assumed).
    unindexed, unindexed_gap_um
        ``"stop"``: the path ends where it meets a run of unindexed points longer than
        ``unindexed_gap_um`` (default 5 steps: isolated bad points and small clusters are walked
        through, a notch or a large unindexed region stops it); ``"cross"``: walk through any unindexed run to the
        next grain (the crossing is recorded where that grain begins).
    field_sigma_um
        Gaussian width of the localisation field, µm (default 2 steps).

    Returns
    -------
    CrackForecast

    Raises
    ------
    ParameterError
        Tip outside the map or on an unindexed point, zero/negative horizon, zero vectors,
        stage II requested with a load along the surface normal (no in-plane component).

    Notes
    -----
    A tip lying on a boundary starts in the grain half a step ahead along ``direction``. A load
    along the surface normal is valid for stage I (Schmid factors are defined) but has no stage II
    direction: every in-plane direction is normal to it, so stage II options are refused.
    Cost: one march per segment (numba), O(grains ahead × systems) for scores; a forecast takes
    milliseconds once the graph exists (``benchmarks/bench_forecast.py``).
    """
    geo = _Geometry(gg)
    horizon = check_positive(horizon, "horizon")
    tip_xy, d, crack_len = _parse_tip(geo, tip, direction)
    load = check_vector(load_axis, "load_axis", 3)
    amplitude = check_positive(stress_amplitude, "stress_amplitude")
    ratio = float(stress_ratio)
    if not (math.isfinite(ratio) and ratio < 1.0):
        raise ParameterError(f"stress_ratio should be a finite number < 1; got {stress_ratio!r}")
    pw = path_weights or PathWeights()
    bw = barrier_weights or BarrierWeights()
    for wobj in (pw, bw):
        if any(getattr(wobj, f.name) < 0 for f in fields(wobj)):
            raise ParameterError(f"score weights should be >= 0; got {wobj}")
    decay = horizon if decay_length_um is None else _check_decay(decay_length_um)
    sigma_um = 2.0 * geo.step if field_sigma_um is None else check_positive(field_sigma_um, "field_sigma_um")
    gap = 5.0 * geo.step if unindexed_gap_um is None else check_positive(
        unindexed_gap_um, "unindexed_gap_um",
                                                                           allow_zero=True)
    opts = _make_opts(horizon, d, load, stage2_after_um=stage2_after_um, stage2_min_schmid=stage2_min_schmid,
                      zigzag_tol=zigzag_tol, zigzag_step_fraction=zigzag_step_fraction, branch_tol=branch_tol,
                      max_branches=max_branches, inclination_deg=inclination_deg, unindexed=unindexed,
                      unindexed_gap_um=gap, path_weights=pw)
    if opts.d_stage2 is None and (stage2_after_um is not None or stage2_min_schmid is not None):
        raise ParameterError(
            f"load_axis {tuple(np.round(load, 3))} is (nearly) along the surface normal, so stage II "
            "(growth normal to the in-plane load) has no direction; give stage2_after_um=None and "
            "stage2_min_schmid=None, or a load axis with an in-plane component"
        )
    grain0 = _start_grain(geo, tip_xy, d)
    if systems is None:
        from .slip import slip_systems

        systems = slip_systems(geo.structure)
    planes = _Planes(systems)
    quats = np.asarray(gg.mean_quats, dtype=float)
    schmid = None
    if stress_field is not None:
        from .stress import grain_schmid_factors

        local = np.asarray(grain_schmid_factors(stress_field, gg, systems), dtype=float)
        schmid = np.zeros((quats.shape[0], local.shape[1]))
        schmid[: local.shape[0]] = np.nan_to_num(local[: quats.shape[0]])
    res = _core(geo, planes, quats, load, schmid, tip_xy, grain0, opts, amplitude=amplitude, decay=decay, bw=bw,
                cf=class_factors, want_field=True, sigma_um=sigma_um)
    noise = noise or MonteCarloNoise()
    settings = {
        "tip_um": [float(v) for v in tip_xy], "direction": [float(v) for v in d],
        "load_axis": [float(v) for v in load], "horizon_um": horizon, "stress_amplitude_mpa": amplitude,
        "stress_ratio": ratio, "initial_crack_um": crack_len, "start_grain": int(grain0),
        "samples": int(samples), "seed": int(seed), "top_k": int(top_k),
        "noise": {f.name: getattr(noise, f.name) for f in fields(noise)},
        "path_weights": {f.name: getattr(pw, f.name) for f in fields(pw)},
        "barrier_weights": {f.name: getattr(bw, f.name) for f in fields(bw)},
        "class_factors": dict(CLASS_FACTORS if class_factors is None else class_factors),
        "decay_length_um": decay, "zigzag_tol": opts.zigzag_tol, "zigzag_step_fraction": opts.zigzag_fraction,
        "branch_tol": opts.branch_tol, "max_branches": opts.max_branches,
        "stage2_after_um": stage2_after_um, "stage2_min_schmid": stage2_min_schmid,
        "inclination_deg": opts.inclination, "boundary_plane": "perpendicular to the surface through the "
        "fitted boundary trace" if opts.inclination == 0 else f"inclined {opts.inclination:g}° about the trace",
        "unindexed": unindexed, "unindexed_gap_um": gap, "field_sigma_um": sigma_um,
        "stress_field": stress_field is not None,
        "systems": sorted(set(map(str, getattr(systems, "families", [])))),
    }
    fc = CrackForecast(path=res["path"], crossings=res["crossings"], barriers=res["barriers"], sites=res["sites"],
                       alternatives=res["alternatives"], field=res["field"], samples=None, settings=settings,
                       stop_reason=res["stop"])
    if int(samples) > 0:
        from .forecast_mc import monte_carlo

        fc = monte_carlo(fc, geo, planes, quats, load, schmid, tip_xy, opts, samples=int(samples), seed=int(seed),
                         noise=noise, top_k=int(top_k), amplitude=amplitude, decay=decay, bw=bw, cf=class_factors)
    return fc


def write_forecast(fc: CrackForecast, folder, gg=None, *, figures: bool = True, title: str = "Crack forecast") -> dict:
    """Write the forecast tables (CSV and JSON), pictures and a summary with the caution.

    Parameters
    ----------
    fc
        The forecast.
    folder
        Output folder (created if missing).
    gg
        The grain graph, needed for the map picture (skipped without it).
    figures
        Also draw ``forecast_map.png`` and ``forecast_terms.png``.
    title
        Title of ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    import json
    from pathlib import Path

    from ._files import atomic_path
    from .report import write_summary, write_table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = {}
    tables = {"path": fc.path, "alternatives": fc.alternatives, "crossings": fc.crossings,
              "barriers": fc.barriers, "sites": fc.sites}
    if fc.samples is not None:
        tables["samples"] = fc.samples
    for name, df in tables.items():
        out[f"{name}_csv"] = write_table(df, folder / f"forecast_{name}.csv")
        out[f"{name}_json"] = write_table(df, folder / f"forecast_{name}.json")
    with atomic_path(folder / "forecast_settings.json") as tmp:
        tmp.write_text(json.dumps({**fc.settings, "stop_reason": fc.stop_reason}, indent=1, default=str),
                       encoding="utf-8")
    out["settings"] = folder / "forecast_settings.json"
    if fc.field is not None:
        with atomic_path(folder / "forecast_field.npy") as tmp, open(tmp, "wb") as fh:
            np.save(fh, fc.field.astype(np.float32))
        out["field"] = folder / "forecast_field.npy"
    if figures:
        from .figures._common import save_figure
        from .figures.forecast import plot_forecast_map, plot_score_terms

        if gg is not None:
            fig = plot_forecast_map(fc, gg)
            save_figure(fig, folder / "forecast_map.png")
            out["map_png"] = folder / "forecast_map.png"
        fig = plot_score_terms(fc)
        save_figure(fig, folder / "forecast_terms.png")
        out["terms_png"] = folder / "forecast_terms.png"
    st = fc.settings
    lines = [
        f"Tip ({st['tip_um'][0]:.1f}, {st['tip_um'][1]:.1f}) µm, direction ({st['direction'][0]:.3f}, "
        f"{st['direction'][1]:.3f}), load axis ({', '.join(f'{v:.3f}' for v in st['load_axis'])}), "
        f"amplitude {st['stress_amplitude_mpa']:g} MPa, R = {st['stress_ratio']:g}, horizon {st['horizon_um']:g} µm.",
        f"Main path: {fc.length_um:.1f} µm in {len(fc.path)} segments through "
        f"{fc.path['grain'].nunique() if len(fc.path) else 0} grains; stopped at: {fc.stop_reason}.",
        f"Alternative paths: {fc.alternatives['branch'].nunique() if len(fc.alternatives) else 0}.",
        f"Boundary plane: {st['boundary_plane']} (assumed from a surface map).",
        "",
        "Strongest barriers (rank, boundary, grains, score, twist°, tilt°, |m′|, distance µm):",
    ]
    for r in fc.barriers.head(5).itertuples():
        lines.append(f"- {r.rank}: boundary {r.boundary_id} ({r.grain_a}→{r.grain_b}) score {r.score:.3f}, "
                     f"twist {r.twist_deg:.1f}, tilt {r.tilt_deg:.1f}, m′ {r.m_prime:.2f}, at {r.distance_um:.1f}")
    lines += ["", "Top localisation sites (rank, x, y µm, score MPa·µm):"]
    for r in fc.sites.head(5).itertuples():
        lines.append(f"- {r.rank}: ({r.x:.1f}, {r.y:.1f}) score {r.score:.0f}, grain {r.grain} against "
                     f"{r.blocking_grain}")
    if fc.samples is not None:
        lines += ["", f"Monte Carlo: {len(fc.samples)} samples, seed {st['seed']}; probabilities in the "
                  "barrier and site tables (p_on_path, p_present, p_top_k)."]
    out["summary"] = write_summary(folder, title, lines)
    return out
