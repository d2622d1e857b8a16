"""Local slip quantities from a solved :class:`~slipnet.stress.StressField`: resolved shear and
Schmid factors per point, their grain means, and the stress concentration near a point."""

from __future__ import annotations

import numpy as np
import pandas as pd

from slipnet._checks import check_positive
from slipnet.crystal.slip_systems import resolved_shear, schmid_factors, slip_systems
from slipnet.errors import ParameterError
from slipnet.maps.orientation_map import OrientationMap
from slipnet.stress.elastic import StressField

__all__ = [
    "default_systems",
    "edge_concentration",
    "grain_schmid_factors",
    "grain_stress_table",
    "local_resolved_shear",
    "local_schmid_factors",
    "stress_concentration",
    "uniform_schmid_factors",
]


# ---------------------------------------------------------------------------- local slip quantities
def default_systems(omap: OrientationMap, systems=None):
    """``systems``, or the catalogue's default systems for the map's most common phase."""
    if systems is not None:
        return systems
    counts = np.bincount(omap.phase[omap.indexed].ravel(), minlength=len(omap.phases))
    return slip_systems(omap.phases[int(counts.argmax())].structure)


def local_resolved_shear(field: StressField, omap: OrientationMap | None = None, systems=None) -> np.ndarray:
    """Resolved shear stress on every slip system at every point, ``(ny, nx, n_systems)`` MPa.

    ``τ = d · σ_c · n`` with the local stress rotated into the crystal frame (signed; slip
    sense matters in BCC). NaN at unindexed / compliant points.

    Parameters
    ----------
    field
        A solved :class:`StressField`.
    omap
        The map giving the orientations (default: ``field.omap``).
    systems
        A ``SlipSystems`` from :func:`slipnet.slip.slip_systems` (default: the catalogue's
        default for the main phase).
    """
    omap = field.omap if omap is None else omap
    if omap.shape != field.shape:
        raise ParameterError(f"omap shape {omap.shape} should match the stress field shape {field.shape}")
    systems = default_systems(omap, systems)
    ny, nx = omap.shape
    q = np.array(omap.quats, dtype=np.float64).reshape(-1, 4)
    q[field.compliant.reshape(-1)] = np.nan
    return np.asarray(resolved_shear(q, field.stress.reshape(-1, 3, 3), systems)).reshape(ny, nx, -1)


def local_schmid_factors(field: StressField, omap: OrientationMap | None = None, systems=None) -> np.ndarray:
    """Local signed Schmid factors ``τ / σ_applied`` per point and system, ``(ny, nx, n_systems)``.

    Under a uniform stress these equal the usual Schmid factors ``(n·l)(d·l)``.
    """
    return local_resolved_shear(field, omap, systems) / field.applied_stress


def uniform_schmid_factors(quats, load_axis, systems) -> np.ndarray:
    """Uniform-stress Schmid factors ``(n·l)(d·l)`` (signed), ``(n, n_systems)``.

    Uses :func:`slipnet.slip.schmid_factors`.
    """
    return np.asarray(schmid_factors(quats, load_axis, systems))


def _grain_means(values: np.ndarray, labels: np.ndarray, n_grains: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-grain mean and standard deviation of ``values`` (ny, nx, k) over finite points."""
    lab = labels.reshape(-1)
    v = values.reshape(lab.size, -1)
    ok = (lab >= 0) & np.all(np.isfinite(v), axis=1)
    lab, v = lab[ok], v[ok]
    cnt = np.bincount(lab, minlength=n_grains).astype(float)
    mean = np.full((n_grains, v.shape[1]), np.nan)
    std = np.full((n_grains, v.shape[1]), np.nan)
    has = cnt > 0
    for k in range(v.shape[1]):  # over slip systems (a few dozen), not over points
        s1 = np.bincount(lab, weights=v[:, k], minlength=n_grains)
        s2 = np.bincount(lab, weights=v[:, k] ** 2, minlength=n_grains)
        m = s1[has] / cnt[has]
        mean[has, k] = m
        std[has, k] = np.sqrt(np.maximum(s2[has] / cnt[has] - m**2, 0.0))
    return mean, std, cnt


def _aligned_map(field: StressField, gg, labels: np.ndarray) -> OrientationMap:
    """The field's map with every grain point's quaternion replaced by its cubic equivalent nearest
    the grain mean (``gg.mean_quats``), so system indices mean the same slip system at every point of
    a grain and in the grain-level (uniform-stress) tables built from the mean orientations."""
    from dataclasses import replace

    from slipnet.crystal.orientation import nearest_equivalent

    omap = field.omap
    mq = getattr(gg, "mean_quats", None)
    if mq is None:
        return omap
    mq = np.asarray(mq, dtype=float)
    q = np.array(omap.quats, dtype=float)
    sel = (labels >= 0) & omap.indexed
    if sel.any():
        ref = mq[labels[sel]]
        ok = np.all(np.isfinite(ref), axis=1)
        idx = np.flatnonzero(sel.ravel())[ok]
        flat = q.reshape(-1, 4)
        flat[idx] = nearest_equivalent(flat[idx], ref[ok])
    return replace(omap, quats=q)


def _labels(field: StressField, gg) -> np.ndarray:
    labels = np.asarray(gg.labels)
    if labels.shape != field.shape:
        raise ParameterError(f"grain labels shape {labels.shape} should match the stress field shape {field.shape}")
    return labels


def grain_schmid_factors(field: StressField, gg, systems=None) -> np.ndarray:
    """Grain means of the local signed Schmid factors, ``(n_grains, n_systems)``.

    Parameters
    ----------
    field
        A solved :class:`StressField` on the map of ``gg``.
    gg
        A ``GrainGraph`` (uses ``.labels`` and ``.omap``; grains ids 0..n−1).
    systems
        Slip systems (default: the catalogue's default for the main phase).

    Returns
    -------
    (n_grains, n_systems) ndarray
        Mean of ``τ / σ_applied`` over each grain's points (NaN for a grain with no solid point).
        Each point's orientation is first taken as its cubic equivalent nearest ``gg.mean_quats``,
        so system α here is system α of the uniform-stress factors of the grain mean orientation.
    """
    labels = _labels(field, gg)
    n_grains = int(labels.max()) + 1 if labels.size and labels.max() >= 0 else 0
    local = local_schmid_factors(field, _aligned_map(field, gg, labels), systems)
    mean, _std, _cnt = _grain_means(local, labels, n_grains)
    return mean


def grain_stress_table(field: StressField, gg, systems=None) -> pd.DataFrame:
    """One row per grain: local stress and the most stressed slip system against the uniform estimate.

    Columns: ``grain``, ``n_points``, ``normal_stress_mean_mpa``, ``normal_stress_std_mpa`` (along
    the load axis), ``von_mises_mean_mpa``, ``system`` (index of the system with the largest
    |grain-mean local Schmid factor|), ``family``, ``local_schmid_mean``, ``local_schmid_std``,
    ``uniform_schmid`` (same system, grain mean orientation, uniform stress),
    ``local_minus_uniform``.
    """
    omap = field.omap
    systems = default_systems(omap, systems)
    labels = _labels(field, gg)
    n_grains = int(labels.max()) + 1 if labels.size and labels.max() >= 0 else 0
    local = local_schmid_factors(field, _aligned_map(field, gg, labels), systems)
    mean, std, cnt = _grain_means(local, labels, n_grains)
    nstress = np.where(field.compliant, np.nan, field.normal_stress())[..., None]
    ns_mean, ns_std, _ = _grain_means(nstress, labels, n_grains)
    vm_mean, _, _ = _grain_means(np.where(field.compliant, np.nan, field.von_mises())[..., None], labels, n_grains)
    best = np.argmax(np.where(np.isfinite(mean), np.abs(mean), -1.0), axis=1) if n_grains else np.zeros(0, int)
    rows = np.arange(n_grains)
    mq = np.asarray(getattr(gg, "mean_quats", np.full((n_grains, 4), np.nan)), dtype=float)
    uni = np.full((n_grains, len(systems.normals)), np.nan)
    okq = np.all(np.isfinite(mq), axis=1)
    if okq.any():
        uni[okq] = uniform_schmid_factors(mq[okq], field.load_axis, systems)
    fam = np.asarray(systems.families, dtype=object)
    return pd.DataFrame({
        "grain": rows,
        "n_points": cnt.astype(int),
        "normal_stress_mean_mpa": ns_mean[:, 0],
        "normal_stress_std_mpa": ns_std[:, 0],
        "von_mises_mean_mpa": vm_mean[:, 0],
        "system": best,
        "family": fam[best] if n_grains else fam[:0],
        "local_schmid_mean": mean[rows, best],
        "local_schmid_std": std[rows, best],
        "uniform_schmid": uni[rows, best],
        "local_minus_uniform": mean[rows, best] - uni[rows, best],
    })


def stress_concentration(field: StressField, x_um: float, y_um: float, radius_um: float) -> dict[str, float]:
    """Largest local load-axis normal stress over the applied stress within a radius of a point.

    Parameters
    ----------
    field
        A solved :class:`StressField`.
    x_um, y_um
        Centre (e.g. the notch root), µm in the map frame.
    radius_um
        Search radius, µm (> 0). Compliant points are ignored.

    Returns
    -------
    dict
        ``concentration`` (max of ``l·σ·l / σ_applied``), ``x_um``, ``y_um`` (where it occurs),
        ``mean_concentration`` (mean over the disc), ``n_points``.
    """
    r = check_positive(radius_um, "radius_um")
    x, y = field.omap.coordinates()
    inside = ((x - float(x_um)) ** 2 + (y - float(y_um)) ** 2 <= r * r) & ~field.compliant
    if not inside.any():
        raise ParameterError(f"no solid map point lies within radius_um={r:g} of ({x_um:g}, {y_um:g}) µm; "
                             "give a larger radius or a point on the map")
    k = field.normal_stress() / field.applied_stress
    vals = np.where(inside, k, -np.inf)
    i, j = np.unravel_index(int(np.argmax(vals)), vals.shape)
    return {"concentration": float(k[i, j]), "x_um": float(x[i, j]), "y_um": float(y[i, j]),
            "mean_concentration": float(k[inside].mean()), "n_points": int(inside.sum())}


def _edge_shape(t: np.ndarray, shape: str) -> np.ndarray:
    """Decay of the stress excess ahead of a rounded edge, ``(σ/σ_applied − 1) / (K_t − 1)`` at depth t = s/ρ.

    ``"hole"``: Kirsch's circular hole (Kirsch 1898, Z. VDI 42:797), ``σ/σ_applied = 1 + u/2 + 3u²/2``
    with ``u = (1 + t)⁻²``, 3 at the edge. ``"notch"``: the field ahead of a slender notch root
    (Creager & Paris 1967, Int. J. Fract. Mech. 3:247, from memory), ``σ ∝ (1 + ρ/2x′)/√x′`` with
    ``x′ = s + ρ/2`` from the equivalent crack tip, normalised to 1 at the root.
    """
    if shape == "hole":
        u = 1.0 / (1.0 + t) ** 2
        return (0.5 * u + 1.5 * u * u) / 2.0
    xp = t + 0.5
    return np.sqrt(0.5 / xp) * (1.0 + 0.5 / xp) / 2.0


EDGE_SHAPES = ("notch", "hole")


def edge_concentration(field: StressField, x_um: float, y_um: float, root_radius_um: float,
                       shape: str = "notch") -> dict[str, float]:
    """Stress concentration at a free edge, fitted to the field a short distance inside the metal.

    The cells at a staircase edge carry the solver's largest errors (the single highest point
    overshoots and moves with the grid), so the edge value is not read off them: for each depth
    ``s`` below the edge (the distance to the nearest compliant point less half a step, binned by
    one step) the largest load-axis normal stress near the point is taken; the depths from
    ``max(1.5 steps, ρ/10)`` to ``max(ρ, that + 3 steps)`` are fitted by least squares with the
    decay ``1 + (K − 1)·g(s/ρ)`` of the chosen edge shape (:func:`_edge_shape`), and ``K`` is
    returned. It converges under grid refinement where the largest single point does not.

    Parameters
    ----------
    field
        A solved :class:`StressField` whose holes or notch are compliant points.
    x_um, y_um
        A point at the edge (the notch root), µm in the map frame.
    root_radius_um
        Radius of curvature of the edge there, µm (> 0); sets the decay length and the area
        searched (within twice the radius plus five steps of the point).
    shape
        ``"notch"`` (a slender notch root, default) or ``"hole"`` (a circular hole).

    Returns
    -------
    dict
        ``concentration`` (the fitted K), ``peak_concentration`` (the largest single point),
        ``n_bins`` (depths fitted), ``rms_misfit`` (of the fit, in units of the applied stress).

    Raises
    ------
    ParameterError
        If ``shape`` is unknown, the point has no compliant points near it, or there are too few
        solid depths to fit.
    """
    from scipy.spatial import cKDTree

    rho = check_positive(root_radius_um, "root_radius_um")
    if shape not in EDGE_SHAPES:
        raise ParameterError(f"shape should be one of {EDGE_SHAPES}, got {shape!r}")
    om = field.omap
    step = float(om.step)
    x, y = om.coordinates()
    reach = 2.0 * rho + 5.0 * step
    r2 = (x - float(x_um)) ** 2 + (y - float(y_um)) ** 2
    solid = (r2 <= reach * reach) & ~field.compliant
    hole = (r2 <= (reach + 2 * rho) ** 2) & field.compliant
    if not hole.any() or not solid.any():
        raise ParameterError(f"no free edge (compliant points) and metal near ({x_um:g}, {y_um:g}) µm: give the "
                             "notch root or a point on a hole's edge")
    dist, _ = cKDTree(np.column_stack((x[hole], y[hole]))).query(np.column_stack((x[solid], y[solid])))
    k = (field.normal_stress() / field.applied_stress)[solid]
    layer = np.rint(dist / step).astype(np.int64)  # 1 = the first solid layer, depth s = (layer - ½) step
    depth = (layer - 0.5) * step
    lo = max(1.5 * step, 0.1 * rho)
    use = (depth >= lo - 1e-9) & (depth <= max(rho, lo + 3 * step) + 1e-9)
    layers = np.unique(layer[use])
    if layers.size < 3:
        raise ParameterError(f"too few solid layers below the edge at ({x_um:g}, {y_um:g}) µm to fit its "
                             "concentration: the root radius should span a few map steps")
    peak = np.full(layers.size, -np.inf)
    np.maximum.at(peak, np.searchsorted(layers, layer[use]), k[use])
    g = _edge_shape((layers - 0.5) * step / rho, shape)
    kt = 1.0 + float(np.dot(g, peak - 1.0) / np.dot(g, g))
    misfit = float(np.sqrt(np.mean((1.0 + (kt - 1.0) * g - peak) ** 2)))
    return {"concentration": kt, "peak_concentration": float(k.max()), "n_bins": int(layers.size),
            "rms_misfit": misfit}
