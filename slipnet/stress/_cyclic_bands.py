"""Geometry for the cyclic solver (private): the crack slit, the boundary layer, slip bands, grain responses."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd

from slipnet.crystal.orientation import matrix_from_quat
from slipnet.errors import ParameterError
from slipnet.stress import _cyclic_kernels as _ck


# ---------------------------------------------------------------------------- crack
def crack_polyline(crack, omap) -> np.ndarray:
    """Validate a crack polyline: ``(k, 2)`` µm vertices, k ≥ 2, all inside the map."""
    try:
        pts = np.asarray(crack, dtype=float)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"crack should be a (k, 2) array of (x, y) vertices in µm; got {crack!r}") from err
    if pts.ndim != 2 or pts.shape[1] != 2 or pts.shape[0] < 2:
        raise ParameterError(f"crack should be a (k, 2) array of (x, y) vertices in µm with k >= 2; got shape "
                             f"{pts.shape}")
    if not np.all(np.isfinite(pts)):
        raise ParameterError("crack vertices should be finite numbers (µm); got NaN or infinity")
    x0, x1, y0, y1 = omap.extent
    tol_x, tol_y = 0.5 * omap.step, 0.5 * omap.row_spacing
    for k, (x, y) in enumerate(pts):
        if not (x0 - tol_x <= x <= x1 + tol_x and y0 - tol_y <= y <= y1 + tol_y):
            raise ParameterError(
                f"crack vertex {k} should lie inside the map (x in [{x0:g}, {x1:g}], y in [{y0:g}, {y1:g}] µm); "
                f"got ({x:g}, {y:g}) µm"
            )
    seg = np.linalg.norm(np.diff(pts, axis=0), axis=1)
    if np.any(seg <= 0):
        raise ParameterError("crack segments should have positive length; got two equal consecutive vertices")
    return pts


def crack_mask(pts: np.ndarray, omap) -> np.ndarray:
    """Map points cut out as the crack: every grid cell the polyline passes through (a slit one cell wide).

    A cell of size ``hx × hy`` centred on a point is crossed by the line with unit normal n when
    the point lies within ``(hx|n_x| + hy|n_y|)/2`` of it; cells beyond a segment's ends are not
    counted, except the cells holding the vertices. The cells share edges (not only corners), so
    no load path crosses the slit.
    """
    x, y = omap.coordinates()
    hx, hy = omap.step, omap.row_spacing
    mask = np.zeros(omap.shape, bool)
    for p0, p1 in itertools.pairwise(pts):  # over segments (a few), not points
        d = p1 - p0
        length = float(np.hypot(*d))
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


# ---------------------------------------------------------------------------- grains
def grain_frames(mean_quats: np.ndarray, systems) -> tuple[np.ndarray, np.ndarray]:
    """Sample-frame slip plane normals and directions of every grain, ``(G, ns, 3)`` each."""
    q = np.asarray(mean_quats, dtype=float)
    ok = np.all(np.isfinite(q), axis=1)
    q = np.where(ok[:, None], q, np.array([1.0, 0.0, 0.0, 0.0]))
    g = matrix_from_quat(q)  # v_c = g v_s, so v_s = gᵀ v_c: row vectors v_c @ g
    gn = np.einsum("sk,gkj->gsj", np.asarray(systems.normals, float), g)
    gd = np.einsum("sk,gkj->gsj", np.asarray(systems.directions, float), g)
    return np.ascontiguousarray(gn), np.ascontiguousarray(gd)


def boundary_layer(labels: np.ndarray, solid: np.ndarray, omap, gn: np.ndarray, gd: np.ndarray, width_um: float,
                   strength_mpa: float) -> tuple[np.ndarray, np.ndarray]:
    """Resistance increase ``(ny, nx, ns)`` MPa and the neighbouring grain ``(ny, nx)`` (−1 outside the layer)."""
    ny, nx = labels.shape
    ns = gn.shape[1]
    x, y = omap.coordinates()
    reach = width_um + 0.5 * omap.step
    ri = math.ceil(reach / omap.row_spacing) + 1
    rj = math.ceil(reach / omap.step) + 1
    out = np.zeros((ny, nx, ns))
    partner = np.empty((ny, nx), np.int64)
    _ck.boundary_resistance(np.ascontiguousarray(labels, dtype=np.int64), np.ascontiguousarray(x, dtype=float),
                            np.ascontiguousarray(y, dtype=float), np.ascontiguousarray(solid), gn, gd, reach,
                            float(strength_mpa), ri, rj, out, partner)
    return out, partner


def slip_bands(labels: np.ndarray, valid: np.ndarray, omap, mean_quats: np.ndarray, systems, fip: np.ndarray,
               srange: np.ndarray, width_um: float, min_points: int) -> pd.DataFrame:
    """Band-averaged FIP: strips of ``width_um`` along each slip plane's surface trace through each grain.

    Castelluccio & McDowell (2014), Mater. Sci. Eng. A 598:34 (from memory) average the FIP over
    slip bands parallel to each plane; on a surface map a band is the strip of points between two
    lines parallel to the plane's surface trace (trace ``t = n_s × z``). Planes (nearly) parallel
    to the surface have no trace and no bands.
    """
    ny, nx = labels.shape
    n = ny * nx
    x, y = omap.coordinates()
    xs = np.ascontiguousarray(x.reshape(n), dtype=float)
    ys = np.ascontiguousarray(y.reshape(n), dtype=float)
    lab = np.ascontiguousarray(labels.reshape(n), dtype=np.int64)
    val = np.ascontiguousarray(valid.reshape(n))
    n_grains = int(mean_quats.shape[0])
    plane_of = np.asarray(systems.plane_index, dtype=np.int64)
    n_planes = int(plane_of.max()) + 1
    slot = np.zeros(len(plane_of), np.int64)
    seen: dict[int, int] = {}
    for s, pl in enumerate(plane_of.tolist()):  # over systems (a few dozen)
        slot[s] = seen.get(pl, 0)
        seen[pl] = slot[s] + 1
    per = int(slot.max()) + 1
    q = np.asarray(mean_quats, dtype=float)
    ok = np.all(np.isfinite(q), axis=1)
    g = matrix_from_quat(np.where(ok[:, None], q, np.array([1.0, 0.0, 0.0, 0.0])))
    pn = np.einsum("pk,gkj->gpj", np.asarray(systems.planes, float), g)  # (G, n_planes, 3) sample frame
    norm = np.hypot(pn[..., 0], pn[..., 1])
    inplane = np.where((norm > 1e-3)[..., None], pn[..., :2] / np.maximum(norm, 1e-300)[..., None], np.nan)
    inplane[~ok] = np.nan
    inplane = np.ascontiguousarray(inplane)
    smin = np.full((n_grains, n_planes), np.inf)
    smax = np.full((n_grains, n_planes), -np.inf)
    if n_grains == 0 or n == 0:
        return _empty_bands()
    _ck.band_extents(lab, xs, ys, val, inplane, smin, smax)
    used = np.isfinite(smin)
    nb = np.where(used, np.floor((smax - smin) / width_um).astype(np.int64, copy=False) + 1, 0) if used.any() else \
        np.zeros_like(smin, dtype=np.int64)
    nb = np.where(used, nb, 0).astype(np.int64)
    offsets = np.concatenate([[0], np.cumsum(nb.reshape(-1))]).astype(np.int64)
    total = int(offsets[-1])
    count = np.zeros(total, np.int64)
    sx = np.zeros(total)
    sy = np.zeros(total)
    sum_fip = np.zeros((total, per))
    sum_range = np.zeros((total, per))
    _ck.band_sums(lab, xs, ys, val, inplane, np.where(used, smin, 0.0), offsets, float(width_um), plane_of, slot,
                  np.ascontiguousarray(fip.reshape(n, -1)), np.ascontiguousarray(srange.reshape(n, -1)), count, sx,
                  sy, sum_fip, sum_range)
    # one row per (band, system on its plane) with enough points
    band_grain = np.repeat(np.arange(n_grains * n_planes) // n_planes, nb.reshape(-1))
    band_plane = np.repeat(np.arange(n_grains * n_planes) % n_planes, nb.reshape(-1))
    band_index = np.arange(total) - offsets[:-1][np.repeat(np.arange(n_grains * n_planes), nb.reshape(-1))]
    keep = count >= min_points
    rows = []
    trace = np.degrees(np.arctan2(-inplane[..., 0], inplane[..., 1])) % 180.0  # t = (m_y, −m_x)
    for s in range(len(plane_of)):  # over systems
        sel = keep & (band_plane == plane_of[s])
        if not sel.any():
            continue
        c = count[sel].astype(float)
        rows.append(pd.DataFrame({
            "grain": band_grain[sel],
            "system": s,
            "label": systems.labels[s],
            "family": systems.families[s],
            "band": band_index[sel],
            "n_points": count[sel],
            "fip_mean": sum_fip[sel, slot[s]] / c,
            "slip_range_mean": sum_range[sel, slot[s]] / c,
            "x_um": sx[sel] / c,
            "y_um": sy[sel] / c,
            "trace_angle_deg": trace[band_grain[sel], plane_of[s]],
            "width_um": float(width_um),
            "area_um2": c * omap.point_area,
        }))
    if not rows:
        return _empty_bands()
    table = pd.concat(rows, ignore_index=True)
    table = table.sort_values(["fip_mean", "grain", "system", "band"], ascending=[False, True, True, True],
                              kind="mergesort", ignore_index=True)
    table.insert(0, "rank", np.arange(1, len(table) + 1))
    return table


#: Columns of the ranked slip-band table (snake_case, units as suffixes; FIP and slip are dimensionless).
BAND_COLUMNS = ("rank", "grain", "system", "label", "family", "band", "n_points", "fip_mean", "slip_range_mean",
                "x_um", "y_um", "trace_angle_deg", "width_um", "area_um2")
#: Columns of the per-grain response table.
GRAIN_RESPONSE_COLUMNS = ("grain", "n_points", "accumulated_slip_mean", "slip_range_mean", "plastic_strain_axial",
                          "ratchet_strain_per_cycle", "response")


def _empty_bands() -> pd.DataFrame:
    return pd.DataFrame({c: [] for c in BAND_COLUMNS})


def grain_response(labels: np.ndarray, valid: np.ndarray, cycle_ends: list, srange_max: np.ndarray,
                   acc: np.ndarray, elastic_floor: float, ratchet_fraction: float) -> pd.DataFrame:
    """Per grain: mean accumulated slip, last-cycle slip range, plastic strain drift; a response flag.

    ``cycle_ends`` holds the load-axis plastic strain of every point at the end of each cycle.
    The flag compares the grain-mean load-axis plastic strain at the end of the last two cycles
    (the drift per cycle) with the grain-mean last-cycle slip range: ``elastic shakedown`` when
    the slip range stays below ``elastic_floor``, ``ratcheting`` when the drift exceeds
    ``ratchet_fraction`` times the slip range (and the floor), else ``plastic shakedown``
    (a closed loop: alternating plasticity).
    """
    lab = labels.reshape(-1)
    ok = (lab >= 0) & valid.reshape(-1)
    n_grains = int(lab.max()) + 1 if ok.any() else 0
    li = lab[ok]
    cnt = np.bincount(li, minlength=n_grains).astype(float)
    has = cnt > 0
    safe = np.where(has, cnt, 1.0)

    def gmean(vals: np.ndarray) -> np.ndarray:
        return np.where(has, np.bincount(li, weights=vals.reshape(-1)[ok], minlength=n_grains) / safe, np.nan)

    ends = [c for c in cycle_ends if c["segment"] != "unload"]
    ep_last = gmean(ends[-1]["ep_axial"])
    ep_prev = gmean(ends[-2]["ep_axial"]) if len(ends) >= 2 else np.zeros(n_grains)
    drift = ep_last - ep_prev
    rng = gmean(srange_max)
    resp = np.where(rng < elastic_floor, "elastic shakedown",
                    np.where(np.abs(drift) > np.maximum(ratchet_fraction * rng, elastic_floor), "ratcheting",
                             "plastic shakedown"))
    table = pd.DataFrame({
        "grain": np.arange(n_grains),
        "n_points": cnt.astype(int),
        "accumulated_slip_mean": gmean(acc),
        "slip_range_mean": rng,
        "plastic_strain_axial": ep_last,
        "ratchet_strain_per_cycle": drift,
        "response": resp,
    })
    return table[has].reset_index(drop=True)
