"""Point features of the localisation forecast: what the predictor knows at every map point.

Three modes, from cheap to dear (:data:`MODES`):

``"map"``
    No solve. Resolved shear from the uniform applied stress (the nominal effective Schmid factor
    of each grain), scaled by the grain's Young's modulus along the load over the aggregate's Hill
    modulus (a stiffer grain carries more of the load when its neighbours strain with it: the
    iso-strain estimate of elastic anisotropy), plus the geometry of the notch and the crack tip.
    The cheaper, weaker mode, for quick sweeps.
``"elastic"`` (default)
    A full-field anisotropic elastic solve (:func:`slipnet.stress.solve_elastic`) on the map with
    the notch and the crack cut in as traction-free slits and the notched edge a free surface
    (:func:`crack_aware_stress`). The resolved shear per point then carries the notch and crack-tip
    field, elastic anisotropy and neighbour incompatibility.
``"cyclic"``
    The elastic features plus the accumulated slip of a short cyclic crystal-plasticity solve
    (:func:`slipnet.stress.solve_cyclic`, one cycle, coarse increments) on the same cut map.

Every feature is a ``(ny, nx)`` array named in :data:`FEATURES`; the fitted weights
(:mod:`slipnet.forecast.predictor`) combine them. All features are dimensionless: resolved shear is
divided by the stress amplitude, lengths by the map step.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

import numpy as np
from scipy import ndimage

from slipnet._checks import check_choice, check_positive, check_vector
from slipnet.crystal.orientation import matrix_from_quat, nearest_equivalent
from slipnet.errors import ParameterError
from slipnet.forecast._geometry import _matrices  # = matrix_from_quat, without a thread pool for a few grains
from slipnet.forecast._window import (
    _holes,
    _union,
    crack_box,
    crack_cells_box,
    crop_coordinates,
    crop_map,
    map_cache,
)
from slipnet.stress.elastic import HOLE_MIN_POINTS  # clusters this large (or at the edge) are holes / the notch

__all__ = ["FEATURES", "MODES", "FieldInputs", "boundary_drops", "crack_aware_stress", "crack_cells", "field_peaks",
           "free_edges_of", "localisation_features"]

MODES = ("map", "elastic", "cyclic")

#: Feature names per mode, in the order of the fitted weights.
FEATURES: dict[str, tuple[str, ...]] = {
    "map": ("tau", "modulus_ratio", "grain_excess", "boundary_block", "tip_field", "log_tip_distance",
            "log_notch_distance"),
    "elastic": ("tau", "tau_grain", "normal_stress", "grain_excess", "boundary_block", "tip_field",
                "log_tip_distance", "log_notch_distance"),
    "cyclic": ("log_cyclic_slip", "tau", "tau_grain", "normal_stress", "grain_excess", "boundary_block",
               "tip_field", "log_tip_distance", "log_notch_distance"),
}

#: Points of the compliant gap added beyond a free edge (as the cyclic solver does).
EDGE_PAD = 4

_EDGES = ("left", "right", "top", "bottom")


@dataclass(frozen=True, eq=False)
class FieldInputs:
    """The features of one forecast and what they were made from.

    Attributes
    ----------
    mode : str
        One of :data:`MODES`.
    features : dict of (ny, nx) ndarray
        Feature maps named in :data:`FEATURES` ``[mode]`` (finite at solid points, 0 elsewhere).
    solid : (ny, nx) bool ndarray
        Points of metal (indexed, not notch, crack or hole).
    tau : (ny, nx) ndarray
        Largest effective resolved shear over the systems, τ / (τ_c,rel · σ_a): local (elastic,
        cyclic) or nominal (map).
    best_system : (ny, nx) int ndarray
        The system carrying it, numbered in the grain-mean frame (−1 off the metal).
    grain_tau : (n_grains, n_systems) ndarray
        Grain means of the effective resolved shear per system (signed sense folded in), used by the path.
    stress_field : StressField or None
        The crack-aware elastic solve (elastic and cyclic modes).
    cyclic_field : CyclicField or None
        The cyclic solve (cyclic mode).
    free_edges : tuple of str
        Edges taken as free surfaces.
    notes : tuple of str
        Statements the outputs print (what was solved, what was assumed).
    window : tuple of int or None
        ``(r0, r1, c0, c1)``: the arrays cover rows ``r0:r1`` and columns ``c0:c1`` of the map (a
        forecast's window, :func:`window_features`); None for the whole map.
    """

    mode: str
    features: dict
    solid: np.ndarray
    tau: np.ndarray
    best_system: np.ndarray
    grain_tau: np.ndarray
    stress_field: object
    cyclic_field: object
    free_edges: tuple
    notes: tuple
    window: tuple | None = None

    def matrix(self, names, mask: np.ndarray | None = None) -> np.ndarray:
        """Features ``names`` at the points of ``mask`` (default: the metal) as an ``(n, k)`` array."""
        m = self.solid if mask is None else mask
        return np.stack([self.features[n][m] for n in names], axis=1)


# ---------------------------------------------------------------------------------------------- geometry
def crack_cells(crack, omap) -> np.ndarray:
    """Map points a crack polyline cuts out: every grid cell it passes through (a slit one cell wide).

    The same rule as the cyclic solver's slit, so both models see the same crack: the cell of a point
    (``step × row spacing``) is crossed by a segment with unit normal n when the point lies within
    ``(h_x|n_x| + h_y|n_y|)/2`` of the segment's line and between its ends; the cells holding the
    vertices are cut too.
    """
    pts = np.asarray(crack, dtype=float)
    if pts.ndim != 2 or pts.shape[1] != 2 or pts.shape[0] < 2 or not np.all(np.isfinite(pts)):
        raise ParameterError(f"crack should be a (k, 2) polyline in µm with k >= 2; got shape {pts.shape}")
    x, y = omap.coordinates()
    hx, hy = omap.step, omap.row_spacing
    mask = np.zeros(omap.shape, bool)
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
    mask[i, j] = True
    return mask


def free_edges_of(omap, load_axis) -> tuple[str, ...]:
    """Edges along the load that an unindexed region of at least ``HOLE_MIN_POINTS`` points touches (a notch).

    A notch cut into an edge makes that edge a free surface of the specimen; an edge across the load
    cannot be free (the load passes through it).
    """
    load = check_vector(load_axis, "load_axis")
    soft = ~np.asarray(omap.indexed)
    if not soft.any():
        return ()
    lab, n_lab = ndimage.label(soft)
    sizes = np.bincount(lab.ravel(), minlength=n_lab + 1)
    out = []
    for e, strip, normal in (("left", lab[:, 0], (1.0, 0.0)), ("right", lab[:, -1], (1.0, 0.0)),
                             ("top", lab[0], (0.0, 1.0)), ("bottom", lab[-1], (0.0, 1.0))):
        ids = np.unique(strip[strip > 0])
        if ids.size and sizes[ids].max() >= HOLE_MIN_POINTS and abs(normal[0] * load[0] + normal[1] * load[1]) <= 0.5:
            out.append(e)
    return tuple(out)


def _cut_map(omap, crack):
    """The map with small unindexed specks filled from the nearest point and the crack cut out."""
    indexed = np.asarray(omap.indexed, bool)
    holes = _holes(indexed)
    fill = ~indexed & ~holes
    q = np.array(omap.quats, dtype=float)
    ph = np.array(omap.phase)
    qual = np.array(omap.quality, dtype=float)
    ind = indexed.copy()
    if fill.any():
        idx = ndimage.distance_transform_edt(~indexed, return_distances=False, return_indices=True)
        q[fill] = q[idx[0][fill], idx[1][fill]]
        ph[fill] = ph[idx[0][fill], idx[1][fill]]
        qual[fill] = qual[idx[0][fill], idx[1][fill]]
        ind[fill] = True
    cut = np.zeros(omap.shape, bool) if crack is None else crack_cells(crack, omap)
    q[cut] = np.nan
    ph[cut] = -1
    qual[cut] = 0.0
    ind[cut] = False
    return replace(omap, quats=q, phase=ph, quality=qual, indexed=ind), cut


def _pad(omap, edges: tuple[str, ...]):
    """At least ``EDGE_PAD`` unindexed points beyond each edge in ``edges`` (origin kept in the map frame).

    The gap is widened to the next FFT-friendly size of the padded axis (``scipy.fft.next_fast_len``):
    a wider compliant gap changes nothing physically (it carries no load either way) and a size with
    large prime factors makes every FFT of the solve several times slower.
    """
    from scipy.fft import next_fast_len

    pad = {e: (EDGE_PAD if e in edges else 0) for e in _EDGES}
    ny, nx = omap.shape
    for a, b, n in (("left", "right", nx), ("top", "bottom", ny)):
        if pad[a] or pad[b]:
            extra = next_fast_len(n + pad[a] + pad[b], real=True) - (n + pad[a] + pad[b])
            if pad[a] and pad[b]:
                pad[a] += extra // 2
                pad[b] += extra - extra // 2
            elif pad[a]:
                pad[a] += extra
            else:
                pad[b] += extra
    widths = ((pad["top"], pad["bottom"]), (pad["left"], pad["right"]))
    q = np.pad(np.asarray(omap.quats), (*widths, (0, 0)), constant_values=np.nan)
    ph = np.pad(np.asarray(omap.phase), widths, constant_values=-1)
    qual = np.pad(np.asarray(omap.quality), widths, constant_values=0.0)
    ind = np.pad(np.asarray(omap.indexed), widths, constant_values=False)
    x0, y0 = omap.origin
    big = replace(omap, quats=q, phase=ph, quality=qual, indexed=ind,
                  origin=(x0 - pad["left"] * omap.step, y0 - pad["top"] * omap.row_spacing))
    return big, (pad["top"], pad["left"])


def crack_aware_stress(omap, load_axis, stress: float, *, crack=None, free_edges="auto", tol: float = 1e-4,
                       workers: int | None = None):
    """Elastic solve on the map with the notch, the crack and free edges cut in.

    Parameters
    ----------
    omap
        The orientation map.
    load_axis : (3,) array_like
        Load axis, map frame.
    stress
        Applied uniaxial stress, MPa.
    crack : (k, 2) array_like, optional
        Crack polyline, µm (mouth → tip), cut in as a traction-free slit one cell wide.
    free_edges
        ``"auto"`` (:func:`free_edges_of`), or edge names (``"left"`` …) that are free surfaces: a
        compliant gap of :data:`EDGE_PAD` points is added beyond each so the periodic cell does not join
        it to the opposite edge.
    tol, workers
        As in :func:`slipnet.stress.solve_elastic`; the default 1e-4 (normalised equilibrium residual) is
        ample for features that enter a fitted ranking (resolved shear changes in the fourth digit).

    Returns
    -------
    StressField
        On the map grid (the gap cropped off); ``omap`` is the map as solved (specks filled, crack
        unindexed), ``compliant`` marks notch, holes and crack.

    Notes
    -----
    Unindexed clusters smaller than ``HOLE_MIN_POINTS`` points that do not touch the map edge take the
    orientation of the nearest indexed point (badly indexed metal); larger ones and the crack are a
    very compliant phase. Cost: one conjugate-gradient solve (about a second at 256² on one core).
    """
    from slipnet.stress import StressField, solve_elastic

    load = check_vector(load_axis, "load_axis")
    cut_map, cut = _cut_map(omap, crack)
    if free_edges == "auto":
        edges = free_edges_of(omap, load)
    else:
        items = [free_edges] if isinstance(free_edges, str) else list(free_edges or ())
        edges = tuple(dict.fromkeys(check_choice(e, "free_edges", _EDGES) for e in items))
    big, (r0, c0) = _pad(cut_map, edges)
    f = solve_elastic(big, load, stress, tol, unindexed="compliant", workers=workers)
    ny, nx = omap.shape
    sl = (slice(r0, r0 + ny), slice(c0, c0 + nx))
    text = f.assumptions + (" The crack is cut in as a traction-free slit one cell wide." if cut.any() else "")
    if edges:
        text += (f" The {', '.join(edges)} edge(s) are free surfaces (a compliant gap of at least {EDGE_PAD} points "
                 "beyond them).")
    return StressField(stress=np.ascontiguousarray(f.stress[sl]), strain=np.ascontiguousarray(f.strain[sl]),
                       iterations=f.iterations, residual=f.residual, applied_stress=f.applied_stress,
                       load_axis=f.load_axis, macro_strain=f.macro_strain, assumptions=text, omap=cut_map,
                       compliant=np.ascontiguousarray(f.compliant[sl]), tol=f.tol, scheme=f.scheme,
                       meta={"free_edges": list(edges), "crack_cells": int(cut.sum())})


# ---------------------------------------------------------------------------------------------- features
def _aligned_quats(omap, labels: np.ndarray, mean_quats: np.ndarray) -> np.ndarray:
    """Point quaternions as the cubic equivalents nearest their grain means, ``(ny, nx, 4)``."""
    q = np.array(omap.quats, dtype=float)
    sel = (labels >= 0) & np.asarray(omap.indexed) & np.all(np.isfinite(q), axis=-1)
    if sel.any():
        ref = mean_quats[labels[sel]]
        ok = np.all(np.isfinite(ref), axis=1)
        flat = q.reshape(-1, 4)
        idx = np.flatnonzero(sel.ravel())[ok]
        flat[idx] = nearest_equivalent(flat[idx], ref[ok])
    return q


def _effective(tau: np.ndarray, systems) -> np.ndarray:
    """|τ| / relative CRSS of the sense it acts in (the {112} twinning asymmetry kept)."""
    return np.abs(tau) / np.where(tau >= 0, systems.crss, systems.crss_reverse)


def _youngs_ratio(mean_quats: np.ndarray, load: np.ndarray, constants, matrices=matrix_from_quat) -> np.ndarray:
    """Young's modulus of each grain along the load over the Hill modulus of the aggregate.

    ``1/E = S11 − 2 (S11 − S12 − S44/2)(l1² l2² + l2² l3² + l3² l1²)`` with l the load axis in the
    crystal frame (Nye 1957, *Physical Properties of Crystals*, Clarendon Press).
    """
    from slipnet.stress.constants import voigt_reuss_hill

    c11, c12, c44 = constants.c11, constants.c12, constants.c44
    s = np.linalg.inv(np.array([[c11, c12, c12], [c12, c11, c12], [c12, c12, c11]]))
    s11, s12, s44 = s[0, 0], s[0, 1], 1.0 / c44
    q = np.where(np.all(np.isfinite(mean_quats), axis=1)[:, None], mean_quats, [1.0, 0.0, 0.0, 0.0])
    lc = np.einsum("gij,j->gi", matrices(q), load)
    j = lc[:, 0] ** 2 * lc[:, 1] ** 2 + lc[:, 1] ** 2 * lc[:, 2] ** 2 + lc[:, 2] ** 2 * lc[:, 0] ** 2
    e = 1.0 / (s11 - 2.0 * (s11 - s12 - 0.5 * s44) * j)
    return e / voigt_reuss_hill(constants)["young_hill_gpa"]



def _field_terms(field, labels, mq, cut, systems, amp: float, ng: int):
    """Slip-system terms of a local stress ``field`` on its grid (the whole map or a window).

    Returns ``(solid, tau, point_sys, grain_tau, feats, tau_grain_mean)``: the points with a
    solved stress, the largest effective resolved shear (÷ amplitude) and its system per point,
    its grain means per system, the point features ``tau`` and ``normal_stress``, and the grain
    mean of ``tau``.
    """
    from slipnet.stress import local_resolved_shear

    scale = amp / float(field.applied_stress)
    solid = (labels >= 0) & ~np.asarray(field.compliant, bool) & ~cut
    qa = _aligned_quats(field.omap, labels, mq)
    qa = np.where(solid[..., None], qa, np.nan)
    aligned = replace(field.omap, quats=qa, indexed=solid, phase=np.where(solid, field.omap.phase, -1))
    tau_sys = local_resolved_shear(replace(field, omap=aligned), aligned, systems) * scale  # (ny, nx, S)
    eff = np.nan_to_num(_effective(np.nan_to_num(tau_sys), systems)) / amp
    eff[~solid] = 0.0
    tau = eff.max(axis=2)
    point_sys = np.where(solid, eff.argmax(axis=2), -1)
    lab = labels[solid]
    cnt = np.bincount(lab, minlength=ng).astype(float)
    grain_tau = np.stack([np.bincount(lab, weights=eff[..., k][solid], minlength=ng) for k in
                          range(eff.shape[2])], axis=1) / np.maximum(cnt, 1.0)[:, None]
    sn = field.normal_stress() * scale / amp
    feats = {"tau": tau, "normal_stress": np.where(solid, sn, 0.0)}
    tg = _grain_mean(tau, labels, solid, ng)
    return solid, tau, point_sys, grain_tau, feats, tg

def _grain_mean(values: np.ndarray, labels: np.ndarray, mask: np.ndarray, n: int) -> np.ndarray:
    lab = labels[mask]
    cnt = np.bincount(lab, minlength=n).astype(float)
    s = np.bincount(lab, weights=values[mask], minlength=n)
    return np.where(cnt > 0, s / np.maximum(cnt, 1.0), np.nan)


def _neighbour_mean(gg, per_grain: np.ndarray) -> np.ndarray:
    """Boundary-length weighted mean of ``per_grain`` over each grain's neighbours (NaN-safe)."""
    n = per_grain.size
    edges = [(int(a), int(b), float(d.get("length_um", 1.0))) for a, b, d in gg.graph.edges(data=True)]
    if not edges:
        return np.full(n, np.nan)
    a, b, w = (np.array(v) for v in zip(*edges, strict=True))
    ok = (a < n) & (b < n)
    a, b, w = a[ok].astype(int), b[ok].astype(int), w[ok]
    va, vb = np.nan_to_num(per_grain[b]), np.nan_to_num(per_grain[a])
    wa, wb = w * np.isfinite(per_grain[b]), w * np.isfinite(per_grain[a])
    num = np.bincount(a, wa * va, minlength=n) + np.bincount(b, wb * vb, minlength=n)
    den = np.bincount(a, wa, minlength=n) + np.bincount(b, wb, minlength=n)
    return np.where(den > 0, num / np.maximum(den, 1e-12), np.nan)


def _boundary_partner(labels: np.ndarray, solid: np.ndarray):
    """Distance (points) to the nearest grain boundary and the grain across it, per point."""
    lab = np.where(solid, labels, -1)
    other = np.full(lab.shape, -1, np.int64)
    for sl_a, sl_b in (((slice(None), slice(1, None)), (slice(None), slice(None, -1))),
                       ((slice(1, None), slice(None)), (slice(None, -1), slice(None)))):
        a, b = lab[sl_a], lab[sl_b]
        diff = (a >= 0) & (b >= 0) & (a != b)
        oa = other[sl_a]
        ob = other[sl_b]
        oa[diff & (oa < 0)] = b[diff & (oa < 0)]
        ob[diff & (ob < 0)] = a[diff & (ob < 0)]
    edge_pts = other >= 0
    if not edge_pts.any():
        return np.full(lab.shape, np.inf), np.full(lab.shape, -1, np.int64)
    dist, idx = ndimage.distance_transform_edt(~edge_pts, return_indices=True)
    near_lab = lab[idx[0], idx[1]]
    near_other = other[idx[0], idx[1]]
    partner = np.where(near_lab == lab, near_other, near_lab)
    partner = np.where(solid, partner, -1)
    return dist, partner


def _transmission_matrix(gg, mean_quats, best_sys_grain: np.ndarray, systems) -> dict:
    """Best |m′| from each grain's most stressed system to any system of each neighbour, keyed (a, b)."""
    q = np.where(np.all(np.isfinite(mean_quats), axis=1)[:, None], mean_quats, [1.0, 0.0, 0.0, 0.0])
    g = matrix_from_quat(q)
    ns_ = np.einsum("sk,gkj->gsj", np.asarray(systems.normals, float), g)
    ds_ = np.einsum("sk,gkj->gsj", np.asarray(systems.directions, float), g)
    pairs = np.array([(int(a), int(b)) for a, b in gg.graph.edges()], dtype=np.int64).reshape(-1, 2)
    if pairs.size == 0:
        return {}
    both = np.concatenate([pairs, pairs[:, ::-1]])
    a, b = both[:, 0], both[:, 1]
    sa = best_sys_grain[a]
    na, da = ns_[a, sa], ds_[a, sa]
    mp = np.abs(np.einsum("psj,pj->ps", ns_[b], na) * np.einsum("psj,pj->ps", ds_[b], da)).max(axis=1)
    return {(int(x), int(y)): float(v) for x, y, v in zip(a, b, mp, strict=True)}


def _tip_geometry(omap, tip, direction, solid_cut: np.ndarray):
    x, y = omap.coordinates()
    step = float(omap.step)
    dx, dy = x - tip[0], y - tip[1]
    r = np.hypot(dx, dy)
    d = np.asarray(direction, float) / np.linalg.norm(direction)
    theta = np.arctan2(dx * d[1] * -1.0 + dy * d[0], dx * d[0] + dy * d[1])  # angle from the growth direction
    # mode-I angular factor of the von Mises stress (plane stress): cos(θ/2)·sqrt(1 + 3 sin²(θ/2))
    # (Anderson 2005, Fracture Mechanics, 3rd ed., CRC Press, Table 2.1 stresses; from memory)
    ang = np.cos(0.5 * theta) * np.sqrt(1.0 + 3.0 * np.sin(0.5 * theta) ** 2)
    tip_field = ang * np.sqrt(step / (r + step))
    holes = ~solid_cut
    if holes.any():
        dn = ndimage.distance_transform_edt(~holes, sampling=(omap.row_spacing, omap.step))
    else:
        dn = np.full(omap.shape, 1e3 * step)
    return tip_field, np.log1p(r / step), np.log1p(dn / step)


def localisation_features(
    gg,
    tip,
    direction,
    load_axis,
    *,
    mode: str = "elastic",
    stress_amplitude: float = 200.0,
    crack=None,
    stress_field=None,
    cyclic_field=None,
    systems=None,
    free_edges="auto",
    stress_ratio: float = -1.0,
    constants=None,
    tol: float = 1e-4,
) -> FieldInputs:
    """The point features of :data:`FEATURES` ``[mode]`` for one crack tip.

    Parameters
    ----------
    gg
        Grain graph of the map.
    tip, direction : (2,) array_like
        Crack tip (µm) and growth direction (map frame).
    load_axis : (3,) array_like
        Load axis, map frame.
    mode
        ``"map"``, ``"elastic"`` or ``"cyclic"`` (:data:`MODES`).
    stress_amplitude, stress_ratio
        Applied amplitude σ_a (MPa) and R; the solves run at the peak σ_a·2/(1 − R) … the elastic one at
        σ_a (linear: only ratios enter the features).
    crack : (k, 2) array_like, optional
        Crack polyline (mouth → tip), cut into the solves.
    stress_field
        A solved :class:`~slipnet.stress.StressField` to use instead of the crack-aware solve
        (elastic and cyclic modes); its stress is scaled to the amplitude.
    cyclic_field
        A solved :class:`~slipnet.stress.CyclicField` to use instead of the short cyclic solve.
    systems
        Slip systems (default: the catalogue's default for the main phase).
    free_edges
        As in :func:`crack_aware_stress`.
    constants
        Cubic elastic constants of the main phase for the map mode's modulus ratio (default iron).
    tol
        Equilibrium tolerance of the elastic solve.
    """
    from slipnet.stress import IRON_CONSTANTS, default_systems, solve_cyclic
    from slipnet.stress.constants import DEFAULT_CONSTANTS

    mode = check_choice(mode, "mode", MODES)
    amp = check_positive(stress_amplitude, "stress_amplitude")
    omap = gg.omap
    systems = default_systems(omap, systems)
    labels = np.asarray(gg.labels, np.int64)
    mq = np.asarray(gg.mean_quats, float)
    ng = mq.shape[0]
    load = check_vector(load_axis, "load_axis")
    tip = np.asarray(tip, float)
    notes: list[str] = []
    field = None
    cyc = None
    if crack is not None:
        cut = crack_cells(crack, omap)
    else:
        cut = np.zeros(omap.shape, bool)
    indexed = np.asarray(omap.indexed, bool)
    holes = _holes(indexed)
    if mode == "map":
        edges = ()
        solid = (labels >= 0) & ~holes & ~cut
        q = np.where(np.all(np.isfinite(mq), axis=1)[:, None], mq, [1.0, 0.0, 0.0, 0.0])
        g = matrix_from_quat(q)
        n_s = np.einsum("sk,gkj->gsj", np.asarray(systems.normals, float), g)
        d_s = np.einsum("sk,gkj->gsj", np.asarray(systems.directions, float), g)
        schmid = (n_s @ load) * (d_s @ load)  # (G, S) signed, uniform stress
        struct = omap.phases[0].structure
        cst = constants if constants is not None else DEFAULT_CONSTANTS.get(struct, IRON_CONSTANTS)
        eratio = _youngs_ratio(mq, load, cst)
        grain_tau = _effective(schmid, systems) * eratio[:, None]
        lab0 = np.maximum(labels, 0)
        point_sys = np.where(solid, np.argmax(grain_tau, axis=1)[lab0], -1)
        tau = np.where(solid, grain_tau.max(axis=1)[lab0], 0.0)
        feats = {"tau": tau, "modulus_ratio": np.where(solid, eratio[lab0], 0.0)}
        notes.append("map-only mode (no stress solve): nominal Schmid factors scaled by each grain's Young's modulus "
                     "along the load; the cheaper, weaker forecast mode.")
    else:
        if stress_field is None:
            field = crack_aware_stress(omap, load, amp, crack=crack, free_edges=free_edges, tol=tol)
        else:
            field = stress_field
            if field.shape != omap.shape:
                raise ParameterError(f"stress_field shape {field.shape} should match the map {omap.shape}")
        edges = tuple(field.meta.get("free_edges", ())) if isinstance(field.meta, dict) else ()
        solid, tau, point_sys, grain_tau, feats, tg = _field_terms(field, labels, mq, cut, systems, amp, ng)
        feats["tau_grain"] = np.where(solid, np.nan_to_num(tg)[np.maximum(labels, 0)], 0.0)
        notes.append("Local stress from a full-field anisotropic elastic solve with the notch and crack cut in: "
                     + field.assumptions)
        if mode == "cyclic":
            if cyclic_field is None:
                cyc = solve_cyclic(omap, load, stress_amplitude=amp, ratio=float(stress_ratio), cycles=1,
                                   crack=crack, free_edges=edges, grains=gg, boundary_width_um=float(omap.step),
                                   max_slip_increment=2e-3)
            else:
                cyc = cyclic_field
            acc = np.asarray(cyc.accumulated_slip, float)
            feats["log_cyclic_slip"] = np.where(solid, np.log10(np.maximum(acc, 0.0) + 1e-7), 0.0)
            notes.append("Cyclic crystal-plasticity field (one cycle, coarse increments) added: " + cyc.assumptions)
    # grain-level incompatibility: a grain loaded more than its neighbours
    tg = _grain_mean(tau, labels, solid, ng)
    nbm = _neighbour_mean(gg, tg)
    excess = np.nan_to_num(tg - nbm)
    lab0 = np.maximum(labels, 0)
    feats["grain_excess"] = np.where(solid, excess[lab0], 0.0)
    # slip blocked near a boundary its most stressed system does not transmit across
    best_grain = np.argmax(np.nan_to_num(grain_tau), axis=1) if ng else np.zeros(0, np.int64)
    trans = _transmission_matrix(gg, mq, best_grain, systems)
    dist, partner = _boundary_partner(labels, solid)
    if trans:
        keys = np.array(list(trans.keys()), dtype=np.int64)
        vals = np.array(list(trans.values()))
        code = keys[:, 0] * (ng + 1) + keys[:, 1]
        order = np.argsort(code)
        pc = lab0 * (ng + 1) + np.maximum(partner, 0)
        pos = np.clip(np.searchsorted(code[order], pc), 0, code.size - 1)
        hit = (code[order][pos] == pc) & (partner >= 0)
        mp = np.where(hit, vals[order][pos], 1.0)
    else:
        mp = np.ones(omap.shape)
    feats["boundary_block"] = np.where(solid, (1.0 - mp) * np.exp(-np.nan_to_num(dist, posinf=1e3)), 0.0)
    # the notch distance is to holes, notch and crack, not to the map edge
    tf, ltd, lnd = _tip_geometry(omap, tip, direction, ~(holes | cut))
    feats["tip_field"] = np.where(solid, tf, 0.0)
    feats["log_tip_distance"] = np.where(solid, ltd, 0.0)
    feats["log_notch_distance"] = np.where(solid, lnd, 0.0)
    for k in FEATURES[mode]:
        if not np.all(np.isfinite(feats[k])):
            feats[k] = np.nan_to_num(feats[k], nan=0.0, posinf=0.0, neginf=0.0)
    return FieldInputs(mode=mode, features={k: feats[k] for k in FEATURES[mode]}, solid=solid, tau=tau,
                       best_system=point_sys.astype(np.int64), grain_tau=np.nan_to_num(grain_tau),
                       stress_field=field, cyclic_field=cyc, free_edges=tuple(edges), notes=tuple(notes))


# ---------------------------------------------------------------------------------------------- shared measures
def field_peaks(field: np.ndarray, region: np.ndarray, omap, k: int, min_separation_um: float) -> np.ndarray:
    """The ``k`` highest points of ``field`` in ``region``, at least ``min_separation_um`` apart, ``(≤k, 2)`` µm.

    Greedy non-maximum suppression: take the highest remaining point, drop every point closer than
    the separation, repeat.
    """
    x, y = omap.coordinates()
    vals = np.ascontiguousarray(field, dtype=float).ravel()
    if np.all(np.isfinite(vals)) and int(k) > 0:
        # the same greedy choice in one kernel: k passes over the points instead of a sort of them all
        from slipnet.forecast._kernels import greedy_peaks

        out = np.zeros((int(k), 2))
        n = greedy_peaks(vals, np.ascontiguousarray(region, dtype=np.bool_).ravel(),
                         np.ascontiguousarray(x, dtype=float).ravel(), np.ascontiguousarray(y, dtype=float).ravel(),
                         int(k), float(min_separation_um) ** 2, out)
        return out[:n].copy()
    idx = np.flatnonzero(region.ravel())
    if idx.size == 0:
        return np.zeros((0, 2))
    v = np.asarray(field, float).ravel()[idx]
    order = idx[np.argsort(-v, kind="stable")]
    px, py = x.ravel()[order], y.ravel()[order]
    alive = np.ones(order.size, bool)
    out = []
    sep2 = float(min_separation_um) ** 2
    pos = 0
    while len(out) < k:
        nxt = np.flatnonzero(alive[pos:])
        if nxt.size == 0:
            break
        pos += int(nxt[0])
        out.append((px[pos], py[pos]))
        alive &= (px - px[pos]) ** 2 + (py - py[pos]) ** 2 >= sep2
    return np.asarray(out, float).reshape(-1, 2)


def boundary_drops(values: np.ndarray, labels: np.ndarray, solid: np.ndarray, omap, x_um, y_um, grain_a, grain_b,
                   radius_um: float, min_points: int = 3) -> np.ndarray:
    """Drop of ``values`` across each boundary crossing: ``(v_a − v_b) / (|v_a| + |v_b|)`` in [−1, 1].

    ``v_a`` and ``v_b`` are the means of ``values`` over the metal points of grain ``a`` (the side the
    crack comes from) and grain ``b`` within ``radius_um`` of the crossing point; NaN where either
    side has fewer than ``min_points`` points or both means are zero. For non-negative values (slip,
    probabilities) this is ``(v_a − v_b) / (v_a + v_b)``.
    """
    x, y = omap.coordinates()
    lab = np.asarray(labels, np.int64)
    vals = np.asarray(values, float)
    out = np.full(len(np.atleast_1d(x_um)), np.nan)
    r2 = float(radius_um) ** 2
    ny, nx = lab.shape
    y0, x0 = float(y[0, 0]), float(x[0, 0])
    rs = float(y[1, 0] - y[0, 0]) if ny > 1 else 1.0
    st = float(x[0, 1] - x[0, 0]) if nx > 1 else 1.0
    for i, (cx, cy, a, b) in enumerate(zip(np.atleast_1d(x_um), np.atleast_1d(y_um), np.atleast_1d(grain_a),
                                           np.atleast_1d(grain_b), strict=True)):  # per crossing: a handful
        # a window of rows and columns around the crossing (one spare point for hex row shifts)
        r0 = max(0, int(np.floor((cy - radius_um - y0) / rs)) - 1)
        r1 = min(ny, int(np.ceil((cy + radius_um - y0) / rs)) + 2)
        c0 = max(0, int(np.floor((cx - radius_um - x0) / st)) - 1)
        c1 = min(nx, int(np.ceil((cx + radius_um - x0) / st)) + 2)
        w = (slice(r0, r1), slice(c0, c1))
        near = solid[w] & ((x[w] - cx) ** 2 + (y[w] - cy) ** 2 <= r2)
        lw = lab[w]
        ma, mb = near & (lw == int(a)), near & (lw == int(b))
        vw = vals[w]
        if ma.sum() < min_points or mb.sum() < min_points:
            continue
        va, vb = float(vw[ma].mean()), float(vw[mb].mean())
        if abs(va) + abs(vb) > 0:
            out[i] = (va - vb) / (abs(va) + abs(vb))
    return out


# ---------------------------------------------------------------------------------------------- windowed
def window_features(gg, geo, win, tip, direction, load_axis, *, mode: str = "elastic", stress_amplitude: float = 200.0,
                    crack=None, stress_field=None, cyclic_field=None, systems=None, free_edges="auto",
                    stress_ratio: float = -1.0, constants=None, tol: float = 1e-4, mean_quats=None,
                    point_rotation=None, memo: dict | None = None) -> FieldInputs:
    """:func:`localisation_features` on the inner window of ``win`` (:mod:`slipnet.forecast._window`).

    The arrays of the returned inputs have the window's shape and ``window`` holds its box; their
    values equal the whole-map features on those points (to round-off). ``mean_quats`` replaces the
    graph's grain means (a Monte Carlo sample; only the window's grains are read) and
    ``point_rotation`` (per grain quaternions) rotates every point of each grain of the crop the
    same way, as :func:`slipnet.forecast.monte_carlo._rotated_quats` rotates the whole map.
    ``memo`` (a dict kept by the caller) keeps the terms that depend only on the geometry (slit,
    metal mask, boundary and notch distances) between calls with the same window, crack and field.
    """
    from slipnet.stress import IRON_CONSTANTS, default_systems, solve_cyclic
    from slipnet.stress.constants import DEFAULT_CONSTANTS

    mode = check_choice(mode, "mode", MODES)
    amp = check_positive(stress_amplitude, "stress_amplitude")
    omap = gg.omap
    systems = default_systems(omap, systems)
    mc = map_cache(gg, geo)
    box, inner = win.crop, win.inner
    csl = box.sl
    labels = geo.labels[csl]
    mq = np.asarray(gg.mean_quats if mean_quats is None else mean_quats, float)
    ng = mq.shape[0]
    load = check_vector(load_axis, "load_axis")
    tip = np.asarray(tip, float)
    notes: list[str] = []
    field = None
    cyc = None
    if memo is not None and (mode == "map" or stress_field is not None):
        key = ((box.r0, box.r1, box.c0, box.c1), None if crack is None else np.asarray(crack, float).tobytes(),
               id(stress_field), mode)
        geo_terms = memo.get(key)
        if geo_terms is None:
            geo_terms = memo.setdefault(key, {})
    else:
        geo_terms = {}
    cut = geo_terms.get("cut")
    if cut is None:
        cut = np.zeros(box.shape, bool) if crack is None else crack_cells_box(crack, omap, box)
        geo_terms["cut"] = cut
    holes = mc.holes[csl]
    lab0 = np.maximum(labels, 0)
    # the grains whose rows are read: those of the crop (the window's grains and their neighbours whole)
    used = np.unique(labels[labels >= 0])
    if mode == "map":
        edges = ()
        solid = (labels >= 0) & ~holes & ~cut
        q = np.where(np.all(np.isfinite(mq[used]), axis=1)[:, None], mq[used], [1.0, 0.0, 0.0, 0.0])
        g = _matrices(q)
        n_s = np.einsum("sk,gkj->gsj", np.asarray(systems.normals, float), g)
        d_s = np.einsum("sk,gkj->gsj", np.asarray(systems.directions, float), g)
        schmid = (n_s @ load) * (d_s @ load)
        struct = omap.phases[0].structure
        cst = constants if constants is not None else DEFAULT_CONSTANTS.get(struct, IRON_CONSTANTS)
        eratio = np.zeros(ng)
        eratio[used] = _youngs_ratio(mq[used], load, cst, _matrices)
        grain_tau = np.zeros((ng, schmid.shape[1]))
        grain_tau[used] = _effective(schmid, systems) * eratio[used, None]
        point_sys = np.where(solid, np.argmax(grain_tau, axis=1)[lab0], -1)
        tau = np.where(solid, grain_tau.max(axis=1)[lab0], 0.0)
        feats = {"tau": tau, "modulus_ratio": np.where(solid, eratio[lab0], 0.0)}
        notes.append("map-only mode (no stress solve): nominal Schmid factors scaled by each grain's Young's modulus "
                     "along the load; the cheaper, weaker forecast mode.")
    else:
        if stress_field is None:
            full = crack_aware_stress(omap, load, amp, crack=crack, free_edges=free_edges, tol=tol)
        else:
            full = stress_field
            if full.shape != omap.shape:
                raise ParameterError(f"stress_field shape {full.shape} should match the map {omap.shape}")
        edges = tuple(full.meta.get("free_edges", ())) if isinstance(full.meta, dict) else ()
        fq = np.asarray(full.omap.quats)[csl]
        if point_rotation is not None:
            fq = _rotate_points(fq, labels, np.asarray(full.omap.indexed)[csl], point_rotation)
        fomap = crop_map(full.omap, box, quats=fq)
        field = replace(full, stress=full.stress[csl], strain=full.strain[csl], omap=fomap,
                        compliant=np.asarray(full.compliant)[csl])
        solid, tau, point_sys, grain_tau, feats, tg = _field_terms(field, labels, mq, cut, systems, amp, ng)
        feats["tau_grain"] = np.where(solid, np.nan_to_num(tg)[lab0], 0.0)
        notes.append("Local stress from a full-field anisotropic elastic solve with the notch and crack cut in: "
                     + full.assumptions)
        field = full
        if mode == "cyclic":
            if cyclic_field is None:
                cyc = solve_cyclic(omap, load, stress_amplitude=amp, ratio=float(stress_ratio), cycles=1,
                                   crack=crack, free_edges=edges, grains=gg, boundary_width_um=float(omap.step),
                                   max_slip_increment=2e-3)
            else:
                cyc = cyclic_field
            acc = np.asarray(cyc.accumulated_slip, float)[csl]
            feats["log_cyclic_slip"] = np.where(solid, np.log10(np.maximum(acc, 0.0) + 1e-7), 0.0)
            notes.append("Cyclic crystal-plasticity field (one cycle, coarse increments) added: " + cyc.assumptions)
    tg = _grain_mean(tau, labels, solid, ng)
    eids = mc.edges_of(win.grains)
    nbm = _neighbour_mean_edges(mc.edge_a[eids], mc.edge_b[eids], mc.edge_w[eids], tg)
    excess = np.nan_to_num(tg - nbm)
    feats["grain_excess"] = np.where(solid, excess[lab0], 0.0)
    # only the crop's grains are read: the most stressed system of those (zeros elsewhere)
    best_grain = np.zeros(ng, np.int64)
    if used.size:
        best_grain[used] = np.argmax(np.nan_to_num(grain_tau[used]), axis=1)
    keys, vals = _transmission_pairs(mc.edge_a[eids], mc.edge_b[eids], mq, best_grain, systems)
    if "partner" not in geo_terms:
        geo_terms["dist"], geo_terms["partner"] = _boundary_partner(labels, solid)
    dist, partner = geo_terms["dist"], geo_terms["partner"]
    if keys.size:
        code = keys[:, 0] * (ng + 1) + keys[:, 1]
        order = np.argsort(code)
        pc = lab0 * (ng + 1) + np.maximum(partner, 0)
        pos = np.clip(np.searchsorted(code[order], pc), 0, code.size - 1)
        hit = (code[order][pos] == pc) & (partner >= 0)
        mp = np.where(hit, vals[order][pos], 1.0)
    else:
        mp = np.ones(box.shape)
    feats["boundary_block"] = np.where(solid, (1.0 - mp) * np.exp(-np.nan_to_num(dist, posinf=1e3)), 0.0)
    if "dn" not in geo_terms:
        geo_terms["x"], geo_terms["y"] = crop_coordinates(omap, box)
        geo_terms["dn"] = _notch_distance(mc, omap, box, crack, cut)
    x, y, dn = geo_terms["x"], geo_terms["y"], geo_terms["dn"]
    step = float(omap.step)
    tf, ltd, lnd = _tip_terms(x, y, step, tip, direction, dn)
    feats["tip_field"] = np.where(solid, tf, 0.0)
    feats["log_tip_distance"] = np.where(solid, ltd, 0.0)
    feats["log_notch_distance"] = np.where(solid, lnd, 0.0)
    isl = box.inner(inner)
    out = {}
    for k in FEATURES[mode]:
        v = feats[k][isl]
        out[k] = np.nan_to_num(v, nan=0.0, posinf=0.0, neginf=0.0) if not np.all(np.isfinite(v)) else v
    grain_tau[used] = np.nan_to_num(grain_tau[used])
    return FieldInputs(mode=mode, features=out, solid=solid[isl], tau=tau[isl],
                       best_system=point_sys[isl].astype(np.int64), grain_tau=grain_tau,
                       stress_field=field, cyclic_field=cyc, free_edges=tuple(edges), notes=tuple(notes),
                       window=(inner.r0, inner.r1, inner.c0, inner.c1))


def _rotate_points(q: np.ndarray, labels: np.ndarray, indexed: np.ndarray, dq: np.ndarray) -> np.ndarray:
    """Every point of grain g rotated by ``dq[g]`` (w ≥ 0 kept), as the Monte Carlo rotates the whole map."""
    from slipnet.crystal.orientation import quat_multiply

    q = np.array(q, float)
    sel = (labels >= 0) & indexed & np.all(np.isfinite(q), axis=-1)
    if sel.any():
        r = quat_multiply(dq[labels[sel]], q[sel])
        q[sel] = np.where(r[:, :1] < 0, -r, r)
    return q


def _neighbour_mean_edges(a: np.ndarray, b: np.ndarray, w: np.ndarray, per_grain: np.ndarray) -> np.ndarray:
    """:func:`_neighbour_mean` over the given edges (exact for grains all of whose edges are given)."""
    n = per_grain.size
    if a.size == 0:
        return np.full(n, np.nan)
    ok = (a < n) & (b < n)
    a, b, w = a[ok].astype(int), b[ok].astype(int), w[ok]
    va, vb = np.nan_to_num(per_grain[b]), np.nan_to_num(per_grain[a])
    wa, wb = w * np.isfinite(per_grain[b]), w * np.isfinite(per_grain[a])
    num = np.bincount(a, wa * va, minlength=n) + np.bincount(b, wb * vb, minlength=n)
    den = np.bincount(a, wa, minlength=n) + np.bincount(b, wb, minlength=n)
    return np.where(den > 0, num / np.maximum(den, 1e-12), np.nan)


def _transmission_pairs(ea: np.ndarray, eb: np.ndarray, mean_quats, best_sys_grain: np.ndarray, systems):
    """:func:`_transmission_matrix` for the given edges: keys ``(m, 2)`` (both senses) and values."""
    pairs = np.stack([ea, eb], axis=1).astype(np.int64).reshape(-1, 2)
    if pairs.size == 0:
        return np.zeros((0, 2), np.int64), np.zeros(0)
    both = np.concatenate([pairs, pairs[:, ::-1]])
    a, b = both[:, 0], both[:, 1]
    used, inv = np.unique(both.ravel(), return_inverse=True)
    mq = np.asarray(mean_quats, float)[used]
    q = np.where(np.all(np.isfinite(mq), axis=1)[:, None], mq, [1.0, 0.0, 0.0, 0.0])
    g = _matrices(q)
    ns_ = np.einsum("sk,gkj->gsj", np.asarray(systems.normals, float), g)
    ds_ = np.einsum("sk,gkj->gsj", np.asarray(systems.directions, float), g)
    ia, ib = inv.reshape(-1, 2)[:, 0], inv.reshape(-1, 2)[:, 1]
    sa = best_sys_grain[a]
    na, da = ns_[ia, sa], ds_[ia, sa]
    mp = np.abs(np.einsum("psj,pj->ps", ns_[ib], na) * np.einsum("psj,pj->ps", ds_[ib], da)).max(axis=1)
    # a later duplicate key wins in the whole-map dict: keep the last of each key the same way
    code = a * (best_sys_grain.size + 1) + b
    _, last = np.unique(code[::-1], return_index=True)
    keep = np.sort(code.size - 1 - last)
    return both[keep], mp[keep]


def _notch_distance(mc, omap, box, crack, cut: np.ndarray) -> np.ndarray:
    """Distance (µm) from the box's points to the nearest hole, notch or crack point of the whole map."""
    step = float(omap.step)
    dn = None if mc.hole_dist is None else mc.hole_dist[box.sl]
    if crack is not None:
        cb = _union(box, crack_box(crack, omap))
        cc = crack_cells_box(crack, omap, cb)
        if cc.any():
            d = ndimage.distance_transform_edt(~cc, sampling=(omap.row_spacing, omap.step))[cb.inner(box)]
            dn = d if dn is None else np.minimum(dn, d)
    return np.full(box.shape, 1e3 * step) if dn is None else dn


def _tip_terms(x, y, step, tip, direction, dn):
    """The tip and notch terms of :func:`_tip_geometry` from point positions and the notch distance."""
    dx, dy = x - tip[0], y - tip[1]
    r = np.hypot(dx, dy)
    d = np.asarray(direction, float) / np.linalg.norm(direction)
    theta = np.arctan2(dx * d[1] * -1.0 + dy * d[0], dx * d[0] + dy * d[1])
    ang = np.cos(0.5 * theta) * np.sqrt(1.0 + 3.0 * np.sin(0.5 * theta) ** 2)
    return ang * np.sqrt(step / (r + step)), np.log1p(r / step), np.log1p(dn / step)


class MapFieldPlan:
    """The map-mode field of many Monte Carlo samples on one window (no crack moved per sample).

    What depends only on the geometry (metal mask, boundary distance and partner, notch distance,
    pair look-up, positions) is computed once from a :func:`window_features` call; each sample then
    costs its grain terms and one kernel pass over the window
    (:func:`slipnet.forecast._kernels.map_field`). The field equals :func:`predict_field` of
    :func:`window_features` to round-off (the logit is summed in another order).
    """

    def __init__(self, gg, geo, win, tip, direction, load_axis, systems, constants=None) -> None:
        from slipnet.stress import IRON_CONSTANTS
        from slipnet.stress.constants import DEFAULT_CONSTANTS

        memo: dict = {}
        ref = window_features(gg, geo, win, tip, direction, load_axis, mode="map", systems=systems, memo=memo,
                              constants=constants)
        (terms,) = memo.values()
        mc = map_cache(gg, geo)
        self.win, self.systems, self.window = win, systems, ref.window
        box = win.crop
        isl = box.inner(win.inner)
        labels = geo.labels[box.sl]
        self.labels_crop = labels
        solid_c = (labels >= 0) & ~mc.holes[box.sl] & ~terms["cut"]
        self.solid_crop = solid_c
        self.lab_solid = labels[solid_c]
        self.used = np.unique(labels[labels >= 0])
        self.eids = mc.edges_of(win.grains)
        self.ea, self.eb, self.ew = mc.edge_a[self.eids], mc.edge_b[self.eids], mc.edge_w[self.eids]
        self.ng = int(np.asarray(gg.mean_quats).shape[0])
        # the pair keys are the same for every sample (the same edges); only their |m′| changes
        keys, _ = _transmission_pairs(self.ea, self.eb, np.asarray(gg.mean_quats, float),
                                      np.zeros(self.ng, np.int64), systems)
        self.keys = keys
        lab_i = labels[isl]
        partner = terms["partner"][isl]
        lab0 = np.maximum(lab_i, 0)
        pos = np.full(lab_i.shape, -1, np.int64)
        if keys.size:
            code = keys[:, 0] * (self.ng + 1) + keys[:, 1]
            self.order = np.argsort(code)
            pc = lab0 * (self.ng + 1) + np.maximum(partner, 0)
            p = np.clip(np.searchsorted(code[self.order], pc), 0, code.size - 1)
            hit = (code[self.order][p] == pc) & (partner >= 0)
            pos = np.where(hit, p, -1)
        else:
            self.order = np.zeros(0, np.int64)
        def flat(a):
            return np.ascontiguousarray(a).ravel()

        self.shape = lab_i.shape
        self.lab = flat(lab0).astype(np.int64)
        self.solid = flat(solid_c[isl])
        self.e_block = flat(np.exp(-np.nan_to_num(terms["dist"][isl], posinf=1e3)))
        self.pair_pos = flat(pos)
        self.lnd = flat(np.log1p(terms["dn"][isl] / float(gg.omap.step)))
        self.x, self.y = flat(terms["x"][isl]), flat(terms["y"][isl])
        self.step = float(gg.omap.step)
        struct = gg.omap.phases[0].structure
        self.constants = constants if constants is not None else DEFAULT_CONSTANTS.get(struct, IRON_CONSTANTS)

    def sample(self, mean_quats, load_axis, tip, direction, model, replicate=None):
        """``(inputs, field)`` of one sample: the window's metal mask, τ and window, and the field there."""
        from slipnet.forecast import _kernels as _k

        mq = np.asarray(mean_quats, float)
        load = check_vector(load_axis, "load_axis")
        used, systems = self.used, self.systems
        q = np.where(np.all(np.isfinite(mq[used]), axis=1)[:, None], mq[used], [1.0, 0.0, 0.0, 0.0])
        g = _matrices(q)
        n_s = np.einsum("sk,gkj->gsj", np.asarray(systems.normals, float), g)
        d_s = np.einsum("sk,gkj->gsj", np.asarray(systems.directions, float), g)
        schmid = (n_s @ load) * (d_s @ load)
        eratio = np.zeros(self.ng)
        eratio[used] = _youngs_ratio(mq[used], load, self.constants, _matrices)
        grain_tau = np.zeros((self.ng, schmid.shape[1]))
        grain_tau[used] = _effective(schmid, systems) * eratio[used, None]
        tau_g = grain_tau.max(axis=1)
        # grain means over the metal points of the crop, summed as the feature builder sums them
        cnt = np.bincount(self.lab_solid, minlength=self.ng).astype(float)
        tg = np.where(cnt > 0, np.bincount(self.lab_solid, weights=tau_g[self.lab_solid], minlength=self.ng)
                      / np.maximum(cnt, 1.0), np.nan)
        excess = np.nan_to_num(tg - _neighbour_mean_edges(self.ea, self.eb, self.ew, tg))
        best = np.argmax(grain_tau, axis=1)
        _keys, vals = _transmission_pairs(self.ea, self.eb, mq, best, systems)
        mp_sorted = vals[self.order] if vals.size else np.ones(1)
        c, b = model.coef, model.intercept
        if replicate is not None and model.bootstrap_coef.shape[0]:
            r = int(replicate) % model.bootstrap_coef.shape[0]
            c, b = model.bootstrap_coef[r], float(model.bootstrap_intercept[r])
        perm = np.array([FEATURES["map"].index(n) for n in model.features], np.int64)
        d = np.asarray(direction, float) / np.linalg.norm(direction)
        fld = np.empty(self.lab.size)
        tau = np.empty(self.lab.size)
        _k.map_field(self.lab, self.solid, self.e_block, self.pair_pos, self.lnd, self.x, self.y, tau_g, eratio,
                     excess, mp_sorted, float(tip[0]), float(tip[1]), float(d[0]), float(d[1]), self.step, perm,
                     np.asarray(model.mean, float), np.asarray(model.scale, float), np.asarray(c, float), float(b),
                     fld, tau)
        inputs = FieldInputs(mode="map", features={}, solid=self.solid.reshape(self.shape),
                             tau=tau.reshape(self.shape), best_system=np.zeros(self.shape, np.int64),
                             grain_tau=grain_tau, stress_field=None, cyclic_field=None, free_edges=(), notes=(),
                             window=self.window)
        return inputs, fld.reshape(self.shape)
