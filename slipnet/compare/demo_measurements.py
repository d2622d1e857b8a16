"""Invented "measurements" for the demo and the tests: SYNTHETIC strain fields and growth records.

Nothing here is measured. The generator builds a displacement field from straight shear bands
(smooth steps of displacement along each band direction), adds a uniform background strain,
displacement noise, missing correlation points and dark fiducial marks, and records it in a strain
image frame that is slightly misregistered (rotated, scaled and shifted) against the map frame,
the way real strain images are. Every series it returns carries ``meta["synthetic"] = True`` and a
name starting with ``SYNTHETIC``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special

from slipnet._checks import check_positive
from slipnet.compare.registration import Transform
from slipnet.errors import ParameterError
from slipnet.maps.strain import StrainSeries

__all__ = ["DemoMeasurement", "SyntheticMeasurement", "band_displacement", "demo_measurement",
           "synthetic_crack_path", "synthetic_growth_record", "synthetic_strain_series"]


@dataclass(frozen=True, eq=False)
class SyntheticMeasurement:
    """A synthetic strain series with its true registration and fiducial marks.

    Attributes
    ----------
    series : StrainSeries
        Displacements ``u, v`` (µm) on the strain grid, strain-image frame; ``meta["synthetic"]``.
    strain_points, map_points : (k, 2) ndarray
        Fiducial mark positions as a user would pick them: in the strain image (with picking
        noise) and in the map (µm).
    true_transform : Transform
        The exact strain frame → map frame transform used to build the field.
    bands : DataFrame
        The imposed bands in the map frame: ``x_um``, ``y_um``, ``angle_deg``, ``amplitude``
        (engineering shear at the band centre, last step), ``length_um``, ``width_um``.
    """

    series: StrainSeries
    strain_points: np.ndarray
    map_points: np.ndarray
    true_transform: Transform
    bands: pd.DataFrame


def band_displacement(x, y, bands: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Displacement (µm) of straight shear bands at map positions ``x, y`` (µm).

    Each band (centre ``x_um, y_um``, direction ``angle_deg``, engineering shear ``amplitude`` at
    its centre line, Gaussian ``width_um`` across and ``length_um`` along) displaces material along
    its direction t by A·w·√(π/2)·erf(q/(w√2))·exp(−½(s/L)² − ½(q/L)²), with s, q the coordinates
    along and across the band, so near the band the shear is ∂u_t/∂q ≈ A·exp(−q²/2w²)·exp(−½(s/L)²);
    the envelopes add strains of order A·w/L around it.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    u = np.zeros(np.broadcast_shapes(x.shape, y.shape))
    v = np.zeros_like(u)
    for row in bands.itertuples(index=False):  # a few dozen bands, each a whole-array expression
        a = math.radians(row.angle_deg)
        t = (math.cos(a), math.sin(a))
        s = (x - row.x_um) * t[0] + (y - row.y_um) * t[1]
        q = -(x - row.x_um) * t[1] + (y - row.y_um) * t[0]
        w = row.width_um
        amp = row.amplitude * w * math.sqrt(math.pi / 2.0) * special.erf(q / (w * math.sqrt(2.0)))
        # the offset dies away over the band length in both directions, so the band is a local feature
        amp = amp * np.exp(-0.5 * (s / row.length_um) ** 2 - 0.5 * (q / row.length_um) ** 2)
        u += amp * t[0]
        v += amp * t[1]
    return u, v


def _similarity(rotation_deg: float, scale: float, shift) -> np.ndarray:
    c, s = math.cos(math.radians(rotation_deg)), math.sin(math.radians(rotation_deg))
    return np.array([[scale * c, -scale * s, shift[0]], [scale * s, scale * c, shift[1]], [0.0, 0.0, 1.0]])


def synthetic_strain_series(map_extent, step: float, bands: pd.DataFrame, *, cycles=(2000.0, 20000.0),
                            background_strain: float = 0.001, noise_um: float = 0.002, rotation_deg: float = 1.2,
                            scale: float = 1.01, shift_um=(2.5, -1.5), n_fiducials: int = 5,
                            fiducial_radius_um: float = 1.5, pick_noise_um: float = 0.15,
                            missing_fraction: float = 0.01, seed: int = 0) -> SyntheticMeasurement:
    """A SYNTHETIC displacement series over a map region, misregistered by a small similarity transform.

    Parameters
    ----------
    map_extent : (x_min, x_max, y_min, y_max)
        Map region to cover, µm.
    step : float
        Strain grid spacing, µm.
    bands : DataFrame
        ``x_um``, ``y_um`` (map frame), ``angle_deg``, ``amplitude`` (engineering shear at the last
        step), ``length_um``, ``width_um``.
    cycles : sequence of float
        Cycle count of each load step; band amplitudes grow linearly to the last one.
    background_strain : float
        Uniform uniaxial strain along x at the last step.
    noise_um : float
        Standard deviation of the displacement noise, µm.
    rotation_deg, scale, shift_um
        The strain-image frame: map = scale·R(rotation)·strain + (x_min, y_min) + shift.
    n_fiducials : int
        Fiducial marks (≥ 3) near the corners and the middle; each blanks a disc of
        ``fiducial_radius_um`` (no correlation on the mark) in every step.
    pick_noise_um : float
        Standard deviation of picking the marks in the strain image, µm.
    missing_fraction : float
        Share of grid points without correlation (in small clusters).
    seed : int
        Random seed.
    """
    x_min, x_max, y_min, y_max = (float(v) for v in map_extent)
    step = check_positive(step, "step")
    if n_fiducials < 3:
        raise ParameterError(f"n_fiducials should be at least 3; got {n_fiducials!r}")
    rng = np.random.default_rng(seed)
    m = _similarity(rotation_deg, scale, (x_min + shift_um[0], y_min + shift_um[1]))
    nx = math.floor((x_max - x_min) / step) + 1
    ny = math.floor((y_max - y_min) / step) + 1
    i, j = np.indices((ny, nx), dtype=float)
    xs, ys = j * step, i * step
    xm = m[0, 0] * xs + m[0, 1] * ys + m[0, 2]
    ym = m[1, 0] * xs + m[1, 1] * ys + m[1, 2]
    lin_inv = np.linalg.inv(m[:2, :2])
    cyc = np.asarray(cycles, float)
    frac = cyc / cyc[-1]
    um, vm = band_displacement(xm, ym, bands)
    # fiducials: four corners inset by a tenth of the region, then the middle and edge midpoints
    fx = np.array([0.1, 0.9, 0.9, 0.1, 0.5, 0.5, 0.1, 0.9])
    fy = np.array([0.1, 0.1, 0.9, 0.9, 0.5, 0.1, 0.5, 0.5])
    k = min(int(n_fiducials), fx.size)
    map_pts = np.stack([x_min + fx[:k] * (x_max - x_min), y_min + fy[:k] * (y_max - y_min)], axis=1)
    tr = Transform(m, "similarity", np.zeros(k), np.zeros((k, 2)), map_pts)
    strain_true = tr.inverse().apply(map_pts)
    strain_pts = strain_true + rng.normal(0.0, pick_noise_um, strain_true.shape)
    blank = np.zeros((ny, nx), bool)
    for p in strain_true:
        blank |= (xs - p[0]) ** 2 + (ys - p[1]) ** 2 <= fiducial_radius_um**2
    n_clusters = int(missing_fraction * nx * ny / 5) + 1
    ci = rng.integers(0, ny, n_clusters)
    cj = rng.integers(0, nx, n_clusters)
    holes = np.zeros((ny, nx), bool)
    holes[ci, cj] = True
    holes[np.clip(ci + 1, 0, ny - 1), cj] = True
    holes[ci, np.clip(cj + 1, 0, nx - 1)] = True
    u_steps, v_steps = [], []
    for f in frac:
        # the map-frame displacement seen in the strain-image frame: through the inverse linear part
        ub = background_strain * f * (xm - x_min)
        vb = -0.5 * background_strain * f * (ym - y_min)
        uu, vv = f * um + ub, f * vm + vb
        us = lin_inv[0, 0] * uu + lin_inv[0, 1] * vv + rng.normal(0.0, noise_um, uu.shape)
        vs = lin_inv[1, 0] * uu + lin_inv[1, 1] * vv + rng.normal(0.0, noise_um, uu.shape)
        miss = blank | holes
        u_steps.append(np.where(miss, np.nan, us))
        v_steps.append(np.where(miss, np.nan, vs))
    series = StrainSeries("displacement", {"u": np.stack(u_steps), "v": np.stack(v_steps)}, step, (0.0, 0.0), cyc,
                          "cycles", "SYNTHETIC strain series (invented by slipnet, not a measurement)",
                          {"synthetic": True, "seed": int(seed), "n_bands": len(bands)})
    res = np.linalg.norm(tr.apply(strain_pts) - map_pts, axis=1)
    true = Transform(m, "similarity", res, strain_pts, map_pts)
    return SyntheticMeasurement(series, strain_pts, map_pts, true, bands.reset_index(drop=True))


def synthetic_crack_path(path, *, deviation_um: float = 1.0, spacing_um: float = 1.0, seed: int = 0) -> np.ndarray:
    """A SYNTHETIC "measured" crack path: a predicted path with a smooth random sideways wander.

    Parameters
    ----------
    path : DataFrame with ``x0_um, y0_um, x1_um, y1_um`` or (n, 2) polyline
        The path to perturb (µm).
    deviation_um : float
        Typical sideways offset, µm.
    spacing_um : float
        Spacing of the output polyline, µm.
    seed : int

    Returns
    -------
    (m, 2) ndarray
        Polyline in µm.
    """
    from slipnet.compare.scores import densify_segments, path_segments

    seg = path_segments(path, "path")
    pts = densify_segments(seg, check_positive(spacing_um, "spacing_um"))
    keep = np.concatenate([[True], np.linalg.norm(np.diff(pts, axis=0), axis=1) > 1e-9])
    pts = pts[keep]
    if len(pts) < 2:
        return pts
    rng = np.random.default_rng(seed)
    tang = np.gradient(pts, axis=0)
    tang /= np.maximum(np.linalg.norm(tang, axis=1, keepdims=True), 1e-12)
    normal = np.stack([-tang[:, 1], tang[:, 0]], axis=1)
    walk = np.cumsum(rng.normal(0.0, 1.0, len(pts)))
    half = max(min(10, (len(pts) - 1) // 2), 1)  # "same" convolution keeps len(pts) only if the kernel is shorter
    kernel = np.exp(-0.5 * (np.arange(-half, half + 1) / (0.4 * half)) ** 2)
    walk = np.convolve(walk - walk.mean(), kernel / kernel.sum(), mode="same")
    walk = walk - walk[0]  # starts at the tip
    scale = deviation_um / max(float(np.std(walk)), 1e-12)
    return pts + normal * (walk * scale)[:, None]


def synthetic_growth_record(profile: pd.DataFrame | None = None, *, n_readings: int = 60, noise_um: float = 0.2,
                            a0_um: float = 5.0, a1_um: float = 150.0, paris_c: float = 2e-6, paris_m: float = 2.0,
                            dips_um=(), dip_depth: float = 0.7, dip_width_um: float = 4.0,
                            seed: int = 0) -> pd.DataFrame:
    """A SYNTHETIC crack-length record (``crack_length_um``, ``cycles``).

    From a predicted growth profile (``crack_length_um`` and ``cycles``) when given, else from a
    rate C·a^(m/2) (µm/cycle, a in µm) lowered by Gaussian dips at ``dips_um``; read at
    ``n_readings`` evenly spaced crack lengths with crack-length noise ``noise_um``.
    """
    rng = np.random.default_rng(seed)
    if profile is not None and {"crack_length_um", "cycles"} <= set(profile.columns):
        a = profile["crack_length_um"].to_numpy(float)
        n = profile["cycles"].to_numpy(float)
        ok = np.isfinite(a) & np.isfinite(n)
        a, n = a[ok], n[ok]
        keep = np.concatenate([[True], np.diff(n) > 0])
        a, n = a[keep], n[keep]
    else:
        a = np.linspace(a0_um, a1_um, 4000)
        rate = paris_c * a ** (paris_m / 2.0)
        for d in dips_um:
            rate = rate * (1.0 - dip_depth * np.exp(-0.5 * ((a - d) / dip_width_um) ** 2))
        inv = 1.0 / rate
        n = np.concatenate([[0.0], np.cumsum(0.5 * (inv[1:] + inv[:-1]) * np.diff(a))])
    if a.size < 2:
        raise ParameterError("the growth profile should hold at least two finite points")
    # readings at even crack-length intervals (the practice of ASTM E647 §9.5), then reading noise
    order = np.argsort(a, kind="stable")
    a_s, n_s = np.maximum.accumulate(a[order]), n[order]
    ar_true = np.linspace(a_s[0], a_s[-1], int(n_readings))
    nr = np.interp(ar_true, a_s, n_s)
    ar = ar_true + rng.normal(0.0, noise_um, nr.size)
    return pd.DataFrame({"cycles": np.rint(nr), "crack_length_um": ar}).drop_duplicates("cycles")


@dataclass(frozen=True, eq=False)
class DemoMeasurement:
    """The SYNTHETIC measurements the demo scores its own forecast against."""

    strain: SyntheticMeasurement
    measured_path: np.ndarray | None
    growth_record: pd.DataFrame
    description: str


def _site_angles(gg, sites: pd.DataFrame, load_axis) -> np.ndarray:
    """Slip-trace angle (deg) of each site: its own system in its grain if known, else the grain's
    most stressed system; NaN where neither can be found."""
    out = np.full(len(sites), np.nan)
    try:
        from slipnet.crystal.slip_systems import slip_systems, slip_trace_angles
    except ImportError:
        return out
    q = np.asarray(getattr(gg, "mean_quats", np.zeros((0, 4))), float)
    if q.size == 0:
        return out
    grains = (sites["grain"].to_numpy(np.int64) if "grain" in sites.columns
              else np.array([gg.grain_at(x, y) for x, y in sites[["x_um", "y_um"]].to_numpy()], dtype=np.int64))
    ok = (grains >= 0) & (grains < len(q))
    if not ok.any():
        return out
    systems = slip_systems("bcc")
    traces = slip_trace_angles(q[grains[ok]], systems)
    if "system" in sites.columns:
        sys_ = sites["system"].to_numpy(np.int64)[ok]
        good = (sys_ >= 0) & (sys_ < traces.shape[1])
        pick = np.where(good, sys_, 0)
        ang = np.take_along_axis(traces, pick[:, None], axis=1)[:, 0]
        ang = np.where(good, ang, np.nan)
    else:
        from slipnet.compare.comparison import grain_traces

        top = grain_traces(gg, load_axis, 1)
        ang = top[grains[ok], 0] if top is not None else np.full(ok.sum(), np.nan)
    out[ok] = ang
    return out


def demo_measurement(gg, forecast, growth=None, *, load_axis=(1.0, 0.0, 0.0), seed: int = 7,
                     n_sites: int = 12) -> DemoMeasurement:
    """SYNTHETIC measurements built from the demo's own forecast, imperfect on purpose.

    Shear bands sit along the predicted slip traces at the highest-ranked predicted sites, but a
    quarter of those sites get no band, the others are moved by about a grid step and turned by a
    few degrees, and two bands appear where nothing was predicted. The measured crack path wanders
    sideways around the predicted one; the growth record follows the predicted growth profile (or,
    without one, a power-law rate with dips at the on-path barriers) with reading noise.
    """
    rng = np.random.default_rng(seed)
    omap = gg.omap
    step = float(omap.step)
    x_min, x_max, y_min, y_max = omap.extent
    size = min(x_max - x_min, y_max - y_min)
    sites = getattr(forecast, "sites", None)
    if sites is None:
        sites = pd.DataFrame({"x_um": [], "y_um": []})
    elif "site_score_mpa_um" in sites.columns:
        sites = sites.sort_values("site_score_mpa_um", ascending=False, kind="stable")
    sites = sites.head(n_sites).reset_index(drop=True)
    angles = _site_angles(gg, sites, load_axis) if len(sites) else np.zeros(0)
    angles = np.where(np.isfinite(angles), angles, rng.uniform(0, 180, len(angles)))
    keep = (np.arange(len(sites)) % 4) != 3  # every fourth predicted site stays quiet
    score = (sites["site_score_mpa_um"].to_numpy(float) if "site_score_mpa_um" in sites.columns
             else np.ones(len(sites)))
    score = score / max(float(np.max(score)), 1e-12) if len(score) else score
    xs = sites["x_um"].to_numpy(float)[keep] + rng.normal(0, 0.7 * step, keep.sum())
    ys = sites["y_um"].to_numpy(float)[keep] + rng.normal(0, 0.7 * step, keep.sum())
    extra = 2
    ex = rng.uniform(x_min + 0.15 * size, x_max - 0.15 * size, extra)
    ey = rng.uniform(y_min + 0.15 * size, y_max - 0.15 * size, extra)
    bands = pd.DataFrame({
        "x_um": np.concatenate([xs, ex]), "y_um": np.concatenate([ys, ey]),
        "angle_deg": np.concatenate([angles[keep] + rng.normal(0, 3.0, keep.sum()), rng.uniform(0, 180, extra)]),
        "amplitude": np.concatenate([0.02 + 0.03 * score[keep], np.full(extra, 0.03)]),
        "length_um": np.full(keep.sum() + extra, max(4.0 * step, 0.04 * size)),
        "width_um": np.full(keep.sum() + extra, 1.2 * step),
    })
    # image correlation usually resolves finer than the orientation map: half its step
    sm = synthetic_strain_series(omap.extent, 0.5 * step, bands, noise_um=0.001 * step, missing_fraction=0.003,
                                 fiducial_radius_um=1.5 * step, seed=seed)
    path = getattr(forecast, "path", None)
    mpath = synthetic_crack_path(path, deviation_um=1.5 * step, spacing_um=step, seed=seed) \
        if path is not None and len(path) else None
    from slipnet.compare.comparison import growth_profile_from

    prof = growth_profile_from(growth)
    if prof is not None and "cycles" in prof.columns and np.isfinite(prof["cycles"]).sum() > 10:
        # dense readings (an eighth of a map step apart): the model's dips are a few µm wide
        span = float(np.nanmax(prof["crack_length_um"]) - np.nanmin(prof["crack_length_um"]))
        record = synthetic_growth_record(prof, n_readings=max(120, int(span / (0.125 * step))), noise_um=0.01 * step,
                                         seed=seed)
    else:
        bar = getattr(forecast, "barriers", None)
        dips = ()
        if isinstance(bar, pd.DataFrame) and {"distance_um", "on_path"} <= set(bar.columns):
            d = bar.loc[bar["on_path"].astype(bool), "distance_um"].to_numpy(float)
            dips = tuple(d[np.isfinite(d) & (d > 0)])
        a1 = float(path["length_um"].sum()) if path is not None and "length_um" in getattr(path, "columns", ()) \
            else 0.5 * size
        record = synthetic_growth_record(None, n_readings=120, noise_um=0.01 * step, a0_um=1.0,
                                         a1_um=max(a1, 10.0), dips_um=dips, dip_width_um=2.0 * step, seed=seed)
    text = ("SYNTHETIC measurements invented from the demo's own forecast (not measured): "
            f"{keep.sum()} of {len(sites)} top predicted sites carry a shear band, {extra} bands were added "
            "where nothing was predicted, displacement noise and missing points were added, and the strain "
            "images were rotated, scaled and shifted against the map; fiducial marks give the control points.")
    return DemoMeasurement(sm, mpath, record, text)
