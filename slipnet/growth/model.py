"""Short-crack growth along a forecast path: where the rate should dip, stall or arrest.

The model is the strip-yield crack with a plastic zone of Bilby, Cottrell & Swinden (1963), blocked
at grain boundaries as in Navarro & de los Rios (1988): the zone ahead of the tip stops at the next
barrier until the stress it concentrates on a source beyond that barrier reaches a critical value,
then jumps on. The growth rate is a power law of the crack tip sliding displacement (CTSD). Every
equation, its source and each added assumption is written out in ``docs/growth-model.md``.

Lengths are µm measured along the path from its start (the notch root or crack origin), stresses
are MPa, rates are µm per cycle.

Public entries
--------------
plastic_zone_ratio, sliding_displacement, GrowthPath, GrowthParameters, path_from_forecast,
path_from_tables, barrier_strengths, crossing_lengths, threshold_amplitudes, zone_state,
simulate_growth, growth_profile, predicted_dips, life_amplitude, calibrate.

This module holds the model itself; the path and its construction from a forecast live in
:mod:`slipnet.growth.path`, calibration and the finite-life amplitude in
:mod:`slipnet.growth.calibration`, file output in :mod:`slipnet.reports.growth`. Every name above
is importable from :mod:`slipnet.growth`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy import integrate

from slipnet._checks import check_positive
from slipnet.columns import GROWTH_DIPS
from slipnet.errors import NumericalError, ParameterError
from slipnet.growth.path import GrowthPath, path_from_forecast, path_from_tables
from slipnet.growth.strip_yield import GrowthParameters, _check_amplitude, _params
from slipnet.growth.zones import (
    ARRESTED,
    BLOCKED,
    SPREADING,
    barrier_strengths,
    crossing_lengths,
    threshold_amplitudes,
    zone_state,
)

__all__ = ["GrowthResult", "growth_profile", "predicted_dips", "simulate_growth"]



# --------------------------------------------------------------------------------------------
# Strip-yield pieces
# --------------------------------------------------------------------------------------------








# --------------------------------------------------------------------------------------------
# The parameters
# --------------------------------------------------------------------------------------------








# --------------------------------------------------------------------------------------------
# Barriers
# --------------------------------------------------------------------------------------------










# --------------------------------------------------------------------------------------------
# Profiles
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class GrowthResult:
    """Everything :func:`simulate_growth` computed.

    Attributes
    ----------
    profile
        DataFrame, one row per crack length: ``crack_length_um`` (along the path), ``cycles`` (inf
        after arrest), ``dadn_um_per_cycle``, ``ctsd_um``, ``zone_end_um``, ``n_ratio``, ``zone_state``
        ("spreading" | "blocked" | "arrested"), ``barrier`` (index of the blocking barrier or −1),
        ``grain`` (grain id, or the grain index along the path when ids are unknown), ``arrested``.
    barriers
        DataFrame per barrier: ``barrier``, ``position_um``, ``critical_stress_mpa``,
        ``threshold_amplitude_mpa``, ``pass_amplitude_mpa`` (needed to pass it and all before),
        ``crossing_length_um`` (inf where arrested), ``dip_length_um``, ``dip_depth_ratio``, ``arrest`` and
        the path factors.
    dips
        :func:`predicted_dips` of the profile.
    bands
        DataFrame of Monte Carlo bands on the same crack lengths (``cycles_p05``, ``cycles_p50``,
        ``cycles_p95``, ``dadn_p05``, ``dadn_p50``, ``dadn_p95``) or None.
    path
        The :class:`GrowthPath` used.
    params
        The :class:`GrowthParameters` used.
    stress_amplitude
        σ (MPa).
    arrest_length_um
        Crack length where the crack arrests (inf when it reaches ``final_length``).
    """

    profile: pd.DataFrame
    barriers: pd.DataFrame
    dips: pd.DataFrame
    bands: pd.DataFrame | None
    path: GrowthPath
    params: GrowthParameters
    stress_amplitude: float
    arrest_length_um: float
    notes: tuple[str, ...] = ()


def _grid(path: GrowthPath, a0: float, a1: float, n_points: int, x: np.ndarray) -> np.ndarray:
    # even spacing, plus geometric spacing for short cracks, where 1/(da/dN) ∝ a^(-m) is steep
    base = np.concatenate([np.linspace(a0, a1, n_points), np.geomspace(a0, a1, max(n_points // 4, 10))])
    d = path.barrier_positions_um
    xf = x[np.isfinite(x)]
    # the crossing is a jump in zone size: put a point on each side so the jump is sharp
    extra = [xf, xf * (1 - 1e-9), d * (1 - 1e-6), d * (1 + 1e-6)]
    # a blocked tip close to its barrier slows as √(1 − a/c): 1/(da/dN) peaks sharply just before the
    # crossing (or the arrest barrier), so cluster points geometrically towards those ends
    ends = np.concatenate([xf, d[~np.isfinite(x)][:1]])
    if ends.size:
        prev = np.concatenate([[a0], d])[np.searchsorted(d, ends, side="left")]
        span = np.maximum(ends - prev, 0.0)
        frac = np.geomspace(1e-7, 1.0, 48)
        extra.append((ends[:, None] - span[:, None] * frac[None, :]).ravel())
    if path.n_zones:  # resolve each zone's dip: points across its approach and recovery
        u = np.linspace(-3.0, 3.0, 61)
        extra.append((path.zone_positions_um[:, None] + u[None, :] * path.zone_widths_um[:, None]).ravel())
        extra.append(path.zone_positions_um)
    extra = np.concatenate(extra)
    extra = extra[(extra > a0) & (extra < a1)]
    return np.unique(np.concatenate([base, extra]))


def _integrate_cycles(a: np.ndarray, dadn: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        inv = np.where(dadn > 0, 1.0 / dadn, np.inf)
    finite = np.isfinite(inv)
    n = np.full(a.shape, np.inf)
    # integrate only up to the first point where the rate vanishes: beyond it the crack never goes
    stop = int(np.argmin(finite)) if not finite.all() else a.size
    if stop > 0:
        n[:stop] = integrate.cumulative_trapezoid(inv[:stop], a[:stop], initial=0.0)
    return n


def _profile_frame(path: GrowthPath, a: np.ndarray, st: dict, cycles: np.ndarray) -> pd.DataFrame:
    gidx = np.where(st["arrested"], np.maximum(st["barrier"], 0), st["grain_index"])
    grain = np.where(path.grains[gidx] >= 0, path.grains[gidx], gidx)
    state = np.where(st["arrested"], ARRESTED, np.where(st["blocked"], BLOCKED, SPREADING))
    return pd.DataFrame({
        "crack_length_um": a,
        "cycles": cycles,
        "dadn_um_per_cycle": st["dadn"],
        "ctsd_um": st["ctsd"],
        "zone_end_um": st["zone_end"],
        "n_ratio": st["n_ratio"],
        "zone_state": state,
        "barrier": st["barrier"].astype(np.int64),
        "grain": grain.astype(np.int64),
        "arrested": st["arrested"],
        "zone_factor": st["zone_factor"],
        "zone": st["zone"],
    })


def _run(path: GrowthPath, s: float, p: GrowthParameters, a0: float, a1: float, n_points: int):
    x = crossing_lengths(path, s, p)
    a = _grid(path, a0, a1, n_points, x)
    st = zone_state(path, a, s, p, crossings=x)
    cycles = _integrate_cycles(a, st["dadn"])
    return a, st, cycles, x


def _resolve_path(forecast_or_path, **kw) -> GrowthPath:
    kw = {k: v for k, v in kw.items() if v is not None}
    if isinstance(forecast_or_path, GrowthPath):
        return forecast_or_path
    if hasattr(forecast_or_path, "path"):
        return path_from_forecast(forecast_or_path, **kw)
    raise ParameterError(
        f"forecast_or_path should be a GrowthPath or a CrackForecast; got {type(forecast_or_path).__name__}"
    )


def simulate_growth(
    forecast_or_path,
    stress_amplitude: float,
    *,
    params: GrowthParameters | None = None,
    friction_stress: float | None = None,
    coefficient: float | None = None,
    exponent: float | None = None,
    barrier_stress: float | None = None,
    initial_length: float | None = None,
    final_length: float | None = None,
    n_points: int = 2000,
    samples: int | None = None,
    strength_scatter: float = 0.2,
    seed: int = 0,
    stress_field=None,
    gg=None,
    systems=None,
) -> GrowthResult:
    """Grow a crack along a path: rate and cycles versus crack length, crossings, dips and arrest.

    Parameters
    ----------
    forecast_or_path
        A :class:`GrowthPath` or a ``CrackForecast`` (converted with :func:`path_from_forecast`).
    stress_amplitude
        σ_a = Δσ/2 (MPa), 0 < σ_a < σ_f. The model uses the amplitude throughout; the mean stress
        (stress ratio) is not modelled.
    params
        Model constants; the keyword constants below override single fields.
    friction_stress, coefficient, exponent, barrier_stress
        See :class:`GrowthParameters`.
    initial_length
        First crack length a₀ (µm), default 10 % of the first barrier position (or of the path length).
    final_length
        Last crack length (µm), default the path length.
    n_points
        Crack lengths on the evenly spaced grid (crossing points are added).
    samples
        Monte Carlo draws for the bands. ``None``: follow the forecast's Monte Carlo: its per-sample
        paths when it carries them, else as many barrier-strength draws as it has samples (its seed),
        else none. An integer > 0: that many log-normal barrier-strength draws.
    strength_scatter
        Log-normal σ of the barrier strength draws.
    seed
        Seed of those draws.
    stress_field, gg, systems
        With a forecast: take the grain orientation factors from the local stress field instead of the
        forecast's uniform-stress Schmid factors (see :func:`path_from_forecast`).

    Returns
    -------
    GrowthResult
    """
    path = _resolve_path(forecast_or_path, stress_field=stress_field, gg=gg, systems=systems)
    p = _params(params, friction_stress=friction_stress, coefficient=coefficient, exponent=exponent,
                barrier_stress=barrier_stress)
    s = _check_amplitude(stress_amplitude, p)
    d = path.barrier_positions_um
    a1 = path.length_um if final_length is None else check_positive(final_length, "final_length")
    a0 = (0.1 * (d[0] if d.size else a1)) if initial_length is None else check_positive(initial_length,
                                                                                         "initial_length")
    if a0 >= a1:
        raise ParameterError(f"initial_length should be below final_length={a1:g} µm; got {a0:g} µm")
    if int(n_points) < 10:
        raise ParameterError(f"n_points should be >= 10; got {n_points!r}")
    a, st, cycles, x = _run(path, s, p, a0, a1, int(n_points))
    profile = _profile_frame(path, a, st, cycles)
    if not np.all(np.diff(cycles[np.isfinite(cycles)]) >= 0):
        raise NumericalError("integrated cycles are not monotone; check the growth constants")

    dips = predicted_dips(profile)
    sth = threshold_amplitudes(path, p)
    table = path.table()
    table["critical_stress_mpa"] = barrier_strengths(path, p)
    table["threshold_amplitude_mpa"] = sth
    table["pass_amplitude_mpa"] = np.maximum.accumulate(sth) if sth.size else sth
    table["crossing_length_um"] = x
    table["arrest"] = ~np.isfinite(x) & (np.arange(x.size) == (np.argmax(~np.isfinite(x)) if x.size else 0))
    table["dip_length_um"] = np.nan
    table["dip_depth_ratio"] = np.nan
    bdips = dips[dips["kind"] == "boundary"] if len(dips) else dips
    if len(bdips):
        idx = bdips["barrier"].to_numpy()
        table.loc[idx, "dip_length_um"] = bdips["crack_length_um"].to_numpy()
        table.loc[idx, "dip_depth_ratio"] = bdips["depth_ratio"].to_numpy()
    arrest = np.flatnonzero(~np.isfinite(x))
    arrest_len = float(d[arrest[0]]) if arrest.size and d[arrest[0]] <= a1 else math.inf

    notes: list[str] = []
    bands = None
    sample_paths = _sample_paths(forecast_or_path, path, samples, strength_scatter, seed, notes)
    if sample_paths:
        bands = _bands(sample_paths, s, p, a)
    return GrowthResult(profile=profile, barriers=table, dips=dips, bands=bands, path=path, params=p,
                        stress_amplitude=s, arrest_length_um=arrest_len, notes=tuple(notes))


def growth_profile(
    forecast_or_path,
    stress_amplitude: float,
    *,
    friction_stress: float | None = None,
    coefficient: float | None = None,
    exponent: float | None = None,
    initial_length: float | None = None,
    final_length: float | None = None,
    n_points: int = 2000,
    **kwargs: Any,
) -> pd.DataFrame:
    """Growth-rate profile along a forecast path (the ``profile`` of :func:`simulate_growth`).

    Returns
    -------
    DataFrame
        ``crack_length_um`` (along the path from its start, the strip-yield half-length a),
        ``cycles`` (counts from ``initial_length``; ``inf`` once arrested), ``dadn_um_per_cycle``,
        ``grain``, ``zone_state``, ``n_ratio``, ``barrier``, ``ctsd_um``, ``zone_end_um``, ``arrested``.
    """
    return simulate_growth(forecast_or_path, stress_amplitude, friction_stress=friction_stress,
                           coefficient=coefficient, exponent=exponent, initial_length=initial_length,
                           final_length=final_length, n_points=n_points, samples=0, **kwargs).profile


def predicted_dips(profile_or_result) -> pd.DataFrame:
    """Rate dips before each barrier the zone was blocked at.

    For each barrier k the zone was blocked at, the dip is the lowest rate after the rate's peak while
    blocked there (the rate falls as the tip nears the barrier, Navarro & de los Rios 1988); its
    ``depth_ratio`` is that rate divided by the rate just after slip crosses k (a ratio < 1; 0 where the
    crack arrests at k). Barriers still blocking at the end of the profile are left out. For each
    localisation zone on the path (``kind`` "zone", its index in ``zone``) the dip is the lowest rate in
    the zone's window where the zone slows it most (its centre), its ``depth_ratio`` that rate over the
    rate just past the window.

    Parameters
    ----------
    profile_or_result
        A profile DataFrame (from :func:`growth_profile`) or a :class:`GrowthResult`.

    Returns
    -------
    DataFrame
        ``barrier`` (index), ``crack_length_um`` (at the dip minimum), ``dadn_min_um_per_cycle``,
        ``dadn_peak_um_per_cycle`` (highest rate while blocked), ``dadn_after_um_per_cycle``,
        ``depth_ratio``, ``crossing_length_um``
        (inf when arrested; the zone centre for a zone), ``arrest`` (bool), ``kind`` ("boundary" or "zone"),
        ``zone`` (zone index, −1 for a boundary dip), sorted by crack length.
    """
    prof = profile_or_result.profile if isinstance(profile_or_result, GrowthResult) else profile_or_result
    need = {"crack_length_um", "dadn_um_per_cycle", "barrier", "zone_state"}
    if not need.issubset(prof.columns):
        raise ParameterError(f"profile should have columns {sorted(need)}; got {list(prof.columns)}")
    a = prof["crack_length_um"].to_numpy(float)
    r = prof["dadn_um_per_cycle"].to_numpy(float)
    b = prof["barrier"].to_numpy(np.int64)
    state = prof["zone_state"].to_numpy()
    pos = np.arange(a.size)
    blk = pd.DataFrame({"barrier": b, "dadn": r, "pos": pos})[(b >= 0) & (state == BLOCKED)]
    rows = []
    if len(blk):
        grp = blk.groupby("barrier", sort=True)
        # the CTSD of a blocked zone is unimodal in n = a/c: past its peak the rate falls until slip
        # crosses, so the dip minimum is the lowest rate after the peak (the last blocked point)
        peak_pos = blk.loc[grp["dadn"].idxmax(), ["barrier", "pos"]].set_index("barrier")["pos"]
        tail = blk[blk["pos"].to_numpy() >= peak_pos.reindex(blk["barrier"]).to_numpy()]
        min_pos = tail.loc[tail.groupby("barrier")["dadn"].idxmin(), ["barrier", "pos"]].set_index("barrier")["pos"]
        last_pos = grp["pos"].max()
        arrested_k = set(np.unique(b[(b >= 0) & (state == ARRESTED)]).tolist())
        for k in last_pos.index:  # per barrier: O(1) work each
            last, i_min, i_peak = int(last_pos[k]), int(min_pos[k]), int(peak_pos[k])
            arrest = int(k) in arrested_k
            if arrest:
                after, cross, depth = 0.0, math.inf, 0.0
            elif last + 1 >= a.size:
                continue  # the profile ends while still blocked: no crossing seen, no dip to report
            else:
                after, cross = r[last + 1], a[last + 1]
                depth = r[i_min] / after if after > 0 else math.nan
            rows.append({"barrier": int(k), "crack_length_um": a[i_min], "dadn_min_um_per_cycle": r[i_min],
                         "dadn_peak_um_per_cycle": r[i_peak], "dadn_after_um_per_cycle": after, "depth_ratio": depth,
                         "crossing_length_um": cross, "arrest": arrest, "kind": "boundary", "zone": -1})
    if "zone" in prof.columns:
        fac = prof["zone_factor"].to_numpy(float) if "zone_factor" in prof.columns else np.ones(a.size)
        rows += _zone_dips(a, r, prof["zone"].to_numpy(np.int64), state, fac)
    rows.sort(key=lambda d: d["crack_length_um"])
    return pd.DataFrame(rows, columns=list(GROWTH_DIPS))


def _zone_dips(a: np.ndarray, r: np.ndarray, zone: np.ndarray, state: np.ndarray, factor: np.ndarray
               ) -> list[dict]:
    """One dip per localisation zone whose window the profile passes through (a few zones per path).

    The dip sits where the zone slows the crack most (the smallest zone factor, the zone's centre):
    the unretarded rate itself grows with the crack length, so the lowest rate in the window can lie
    at its start.
    """
    rows = []
    for z in np.unique(zone[zone >= 0]):
        idx = np.flatnonzero((zone == z) & (state != ARRESTED))
        if idx.size < 3 or idx[-1] + 1 >= a.size:
            continue  # the window is cut by the profile's end or an arrest: no recovery seen
        i_min = int(idx[np.argmin(factor[idx])])
        before = idx[idx <= i_min]
        i_peak = int(before[np.argmax(r[before])])
        after = float(r[idx[-1] + 1])
        rows.append({"barrier": -1, "crack_length_um": a[i_min], "dadn_min_um_per_cycle": r[i_min],
                     "dadn_peak_um_per_cycle": r[i_peak], "dadn_after_um_per_cycle": after,
                     "depth_ratio": r[i_min] / after if after > 0 else math.nan,
                     "crossing_length_um": a[i_min], "arrest": False, "kind": "zone", "zone": int(z)})
    return rows


# --------------------------------------------------------------------------------------------
# Uncertainty bands
# --------------------------------------------------------------------------------------------


def _sample_paths(source, path: GrowthPath, samples, scatter: float, seed: int, notes: list) -> list[GrowthPath]:
    if samples is not None and int(samples) < 0:
        raise ParameterError(f"samples should be >= 0; got {samples!r}")
    if samples is None or samples == 0:
        if samples is None and not isinstance(source, GrowthPath):
            paths = _forecast_sample_paths(source)
            if paths:
                notes.append(f"bands from {len(paths)} forecast Monte Carlo paths")
                return paths
            table = getattr(source, "samples", None)
            if isinstance(table, pd.DataFrame) and len(table):
                # the forecast keeps per-sample summaries, not paths: draw as many barrier-strength samples
                settings = getattr(source, "settings", None) or {}
                return _sample_paths(path, path, len(table), scatter, int(settings.get("seed", seed)), notes)
        return []
    scatter = check_positive(scatter, "strength_scatter", allow_zero=True)
    rng = np.random.default_rng(seed)
    k = path.n_barriers
    draws = rng.lognormal(0.0, scatter, size=(int(samples), k))
    notes.append(f"bands from {int(samples)} log-normal barrier-strength draws (σ_ln = {scatter:g}, seed {seed})")
    return [replace(path, strength_scale=path.strength_scale * draws[i]) for i in range(int(samples))]


def _forecast_sample_paths(forecast) -> list[GrowthPath]:
    """Per-sample paths carried by ``forecast.samples`` (a list of forecasts or path tables), if any."""
    samples = getattr(forecast, "samples", None)
    if samples is None:
        return []
    items = None
    if isinstance(samples, (list, tuple)):
        items = samples
    elif isinstance(samples, dict) and isinstance(samples.get("paths"), (list, tuple)):
        items = samples["paths"]
    if not items:
        return []
    out = []
    for item in items:
        try:
            if hasattr(item, "path"):
                out.append(path_from_forecast(item))
            elif isinstance(item, pd.DataFrame):
                out.append(path_from_tables(item, getattr(forecast, "barriers", None)))
        except ParameterError:
            continue  # a sample whose path is empty: it adds no band
    return out


def _bands(paths: list[GrowthPath], s: float, p: GrowthParameters, a: np.ndarray) -> pd.DataFrame:
    cyc = np.empty((len(paths), a.size))
    rate = np.empty((len(paths), a.size))
    for i, sp in enumerate(paths):  # one vectorised model run per sample
        dense = np.unique(np.concatenate([a, _grid(sp, a[0], a[-1], a.size, crossing_lengths(sp, s, p))]))
        st = zone_state(sp, dense, s, p)
        nd = _integrate_cycles(dense, st["dadn"])
        idx = np.searchsorted(dense, a)
        cyc[i] = nd[idx]
        rate[i] = st["dadn"][idx]
    out = {"crack_length_um": a}
    for q in (5, 50, 95):
        # "inverted_cdf" picks sample values, so arrested (inf) samples never produce NaN
        out[f"cycles_p{q:02d}"] = np.percentile(cyc, q, axis=0, method="inverted_cdf")
        out[f"dadn_um_per_cycle_p{q:02d}"] = np.percentile(rate, q, axis=0, method="inverted_cdf")
    return pd.DataFrame(out)
