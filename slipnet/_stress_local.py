"""Local slip quantities and outputs from a :class:`~slipnet.stress.StressField` (private;
re-exported by :mod:`slipnet.stress`)."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd

from ._checks import check_positive
from .errors import ParameterError
from .maps import OrientationMap
from .stress import StressField


# ---------------------------------------------------------------------------- local slip quantities
def _catalogue(structure: str):
    """The slip catalogue's default systems for a structure."""
    from .slip import slip_systems

    return slip_systems(structure)


def _default_systems(omap: OrientationMap, systems):
    if systems is not None:
        return systems
    counts = np.bincount(omap.phase[omap.indexed].ravel(), minlength=len(omap.phases))
    return _catalogue(omap.phases[int(counts.argmax())].structure)


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
    systems = _default_systems(omap, systems)
    ny, nx = omap.shape
    q = np.array(omap.quats, dtype=np.float64).reshape(-1, 4)
    q[field.compliant.reshape(-1)] = np.nan
    from .slip import resolved_shear

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
    from .slip import schmid_factors

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

    from .orientation import nearest_equivalent

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
    systems = _default_systems(omap, systems)
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


# ---------------------------------------------------------------------------- outputs
def write_stress_outputs(field: StressField, folder: str | os.PathLike, gg=None, systems=None, *,
                         title: str = "Local stresses", notch_root=None, radius_um: float | None = None,
                         figures: bool = True, plastic=None) -> dict:
    """Write pictures, a grain table and a summary (with the assumptions and the caution) into ``folder``.

    Parameters
    ----------
    field
        The solved field.
    folder
        Output folder (created).
    gg
        A ``GrainGraph`` for the per-grain table ``grain_stress.csv`` (optional).
    systems
        Slip systems (default: the catalogue's default for the main phase).
    notch_root
        ``(x, y)`` µm: report the stress concentration within ``radius_um`` (default 5 steps).
    plastic
        A :class:`~slipnet.plasticity.PlasticField` whose accumulated slip is also drawn.

    Returns
    -------
    dict
        ``table`` (DataFrame or None), ``concentration`` (dict or None), ``paths`` (list of Path).
    """
    from pathlib import Path

    from .report import write_summary, write_table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    table = None
    if gg is not None:
        table = grain_stress_table(field, gg, systems)
        paths.append(write_table(table, folder / "grain_stress.csv"))
    conc = None
    if notch_root is not None:
        r = 5.0 * field.omap.step if radius_um is None else radius_um
        conc = stress_concentration(field, notch_root[0], notch_root[1], r)
    if figures:
        from .figures._common import save_figure
        from .figures.stress import plot_accumulated_slip, write_stress_figures

        paths += write_stress_figures(field, folder, systems)
        if plastic is not None:
            save_figure(plot_accumulated_slip(plastic), folder / "accumulated_slip.png")
            paths.append(folder / "accumulated_slip.png")
    lines = [
        f"Applied uniaxial stress {field.applied_stress:g} MPa along load axis "
        f"({field.load_axis[0]:.3f}, {field.load_axis[1]:.3f}, {field.load_axis[2]:.3f}) (map frame).",
        f"Solver: {field.iterations} conjugate-gradient iterations, normalised equilibrium residual "
        f"{field.residual:.2e} (tolerance {field.tol:g}).",
        f"Apparent Young's modulus of the cell along the load axis: {field.apparent_modulus:.1f} GPa.",
        f"Load-axis normal stress over solid points: min {np.min(field.normal_stress()[~field.compliant]):.1f}, "
        f"max {np.max(field.normal_stress()[~field.compliant]):.1f} MPa.",
    ]
    if conc is not None:
        lines.append(f"Stress concentration near ({notch_root[0]:.1f}, {notch_root[1]:.1f}) µm: "
                     f"{conc['concentration']:.2f} x applied at ({conc['x_um']:.1f}, {conc['y_um']:.1f}) µm.")
    if table is not None and len(table):
        worst = np.nanmax(np.abs(table["local_minus_uniform"]))
        lines.append(f"Grains: largest |local - uniform| Schmid factor {worst:.3f} (grain_stress.csv).")
    if plastic is not None:
        lines.append(f"Crystal plasticity: mean accumulated slip {plastic.accumulated_slip.mean():.2e}, "
                     f"max {plastic.accumulated_slip.max():.2e}.")
    lines += ["", "Assumptions: " + field.assumptions]
    paths.append(write_summary(folder, title, lines))
    return {"table": table, "concentration": conc, "paths": paths}
