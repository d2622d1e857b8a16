"""The crack path as the growth model sees it: barrier positions, grain factors, |m′| and twist.

:class:`GrowthPath` holds a path reduced to what :mod:`slipnet.growth` needs; :func:`path_from_tables`
and :func:`path_from_forecast` build one from a ``CrackForecast`` (its path, crossing and barrier
tables, optionally with local Schmid factors from a stress field). Lengths are µm along the path
from its start. Every public name here is also importable from :mod:`slipnet.growth`.

Public entries
--------------
GrowthPath, path_from_tables, path_from_forecast.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from slipnet._checks import check_positive
from slipnet.columns import SEGMENT_XY
from slipnet.errors import ParameterError

__all__ = ["GrowthPath", "path_from_forecast", "path_from_tables", "zones_along_path"]


def _float_array(value, name: str, size: int | None, default: float | None = None) -> np.ndarray:
    if value is None:
        if default is None or size is None:
            raise ParameterError(f"{name} is required")
        return np.full(size, float(default))
    try:
        arr = np.asarray(value, dtype=float).reshape(-1)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be numbers; got {value!r}") from err
    if size is not None and arr.size != size:
        raise ParameterError(f"{name} should have {size} values; got {arr.size}")
    return arr


@dataclass(frozen=True, eq=False)
class GrowthPath:
    """A crack path reduced to what the growth model needs.

    Grain ``k`` spans ``[barrier_positions_um[k-1], barrier_positions_um[k])`` along the path (grain 0
    starts at the path start, the last grain runs to ``length_um``).

    Attributes
    ----------
    barrier_positions_um
        (k,) distances of the barriers (grain boundaries) from the path start, µm, increasing, > 0.
    grain_factors
        (k+1,) orientation factor of each grain along the path (Schmid-type: larger = easier slip).
        Only ratios matter; all ones means no orientation effect.
    m_prime
        (k,) |m′| slip transmission factor of each barrier in [0, 1] (1 = perfect transmission).
    twist_deg
        (k,) twist angle of the crack plane across each barrier (degrees, Zhai, Wilkinson & Martin 2000).
    length_um
        Total path length, µm (≥ last barrier).
    grains
        (k+1,) grain ids along the path (−1 unknown).
    boundary_ids
        (k,) boundary ids (−1 unknown).
    polyline
        Optional (p, 3) array of (s_um, x_um, y_um) points along the path on the map, s increasing.
    strength_scale
        (k,) extra multiplier of each barrier's critical stress (1 by default; Monte Carlo draws use it).
    zone_positions_um, zone_widths_um, zone_strengths
        (z,) centres (µm from the path start, increasing), approach widths (µm, > 0) and strengths (in
        [0, 1]) of the zones of strain localisation on the path (retardation sites besides the
        boundaries; :func:`path_from_forecast` takes them from the forecast's localisation field).
        Empty by default: no zone.
    """

    barrier_positions_um: np.ndarray
    grain_factors: np.ndarray
    m_prime: np.ndarray
    twist_deg: np.ndarray
    length_um: float
    grains: np.ndarray = field(default=None)  # type: ignore[assignment]
    boundary_ids: np.ndarray = field(default=None)  # type: ignore[assignment]
    polyline: np.ndarray | None = None
    strength_scale: np.ndarray = field(default=None)  # type: ignore[assignment]
    zone_positions_um: np.ndarray = field(default=None)  # type: ignore[assignment]
    zone_widths_um: np.ndarray = field(default=None)  # type: ignore[assignment]
    zone_strengths: np.ndarray = field(default=None)  # type: ignore[assignment]

    def __post_init__(self) -> None:
        d = _float_array(self.barrier_positions_um, "barrier_positions_um", None)
        k = d.size
        if k and (not np.all(np.isfinite(d)) or d[0] <= 0 or np.any(np.diff(d) <= 0)):
            raise ParameterError("barrier_positions_um should be finite, > 0 µm and strictly increasing")
        gf = _float_array(self.grain_factors, "grain_factors", k + 1)
        if not np.all(np.isfinite(gf)) or np.any(gf <= 0):
            raise ParameterError("grain_factors should be finite and > 0 (Schmid-type orientation factors)")
        mp = _float_array(self.m_prime, "m_prime", k)
        mp = np.where(np.isfinite(mp), mp, 1.0)
        if np.any(mp < -1e-9) or np.any(mp > 1 + 1e-9):
            raise ParameterError("m_prime should lie in [0, 1] (|m′|)")
        tw = _float_array(self.twist_deg, "twist_deg", k)
        tw = np.where(np.isfinite(tw), tw, 0.0)
        length = float(self.length_um)
        if not math.isfinite(length) or length <= 0 or (k and length < d[-1]):
            raise ParameterError(f"length_um should be > 0 and >= the last barrier position; got {self.length_um!r}")
        grains = np.full(k + 1, -1, dtype=np.int64) if self.grains is None else np.asarray(self.grains, np.int64)
        bids = np.full(k, -1, dtype=np.int64) if self.boundary_ids is None else np.asarray(self.boundary_ids, np.int64)
        if grains.shape != (k + 1,) or bids.shape != (k,):
            raise ParameterError(f"grains should have {k + 1} ids and boundary_ids {k}")
        scale = np.ones(k) if self.strength_scale is None else _float_array(self.strength_scale, "strength_scale", k)
        if np.any(~np.isfinite(scale)) or np.any(scale <= 0):
            raise ParameterError("strength_scale should be finite and > 0")
        poly = None
        if self.polyline is not None:
            poly = np.asarray(self.polyline, dtype=float)
            if poly.ndim != 2 or poly.shape[1] != 3 or poly.shape[0] < 2:
                raise ParameterError("polyline should be a (p, 3) array of (s_um, x_um, y_um) with p >= 2")
        zp = np.zeros(0) if self.zone_positions_um is None else _float_array(self.zone_positions_um,
                                                                                     "zone_positions_um", None)
        zw = _float_array(self.zone_widths_um, "zone_widths_um", zp.size, 1.0)
        zs = _float_array(self.zone_strengths, "zone_strengths", zp.size, 1.0)
        if zp.size and (not np.all(np.isfinite(zp)) or np.any(np.diff(zp) <= 0) or np.any(zp < 0)):
            raise ParameterError("zone_positions_um should be finite, >= 0 µm and strictly increasing")
        if np.any(~np.isfinite(zw)) or np.any(zw <= 0):
            raise ParameterError("zone_widths_um should be finite and > 0 µm")
        if np.any(~np.isfinite(zs)) or np.any(zs < 0) or np.any(zs > 1):
            raise ParameterError("zone_strengths should lie in [0, 1]")
        for name, val in (("barrier_positions_um", d), ("grain_factors", gf), ("m_prime", np.clip(mp, 0, 1)),
                          ("twist_deg", tw), ("length_um", length), ("grains", grains), ("boundary_ids", bids),
                          ("polyline", poly), ("strength_scale", scale), ("zone_positions_um", zp),
                          ("zone_widths_um", zw), ("zone_strengths", zs)):
            object.__setattr__(self, name, val)

    @classmethod
    def from_barriers(
        cls,
        positions_um,
        *,
        grain_factors=None,
        m_prime=None,
        twist_deg=None,
        length_um: float | None = None,
    ) -> GrowthPath:
        """A hand-built path: barrier positions (µm) and optional per-grain / per-barrier factors.

        Missing factors default to neutral values (grain factors 1, |m′| = 1, twist 0°); the length
        defaults to 1.5 × the last barrier position (or 100 µm without barriers).
        """
        d = _float_array(positions_um, "positions_um", None)
        k = d.size
        if length_um is None:
            length_um = 1.5 * float(d[-1]) if k else 100.0
        return cls(
            barrier_positions_um=d,
            grain_factors=_float_array(grain_factors, "grain_factors", k + 1, 1.0),
            m_prime=_float_array(m_prime, "m_prime", k, 1.0),
            twist_deg=_float_array(twist_deg, "twist_deg", k, 0.0),
            length_um=float(length_um),
        )

    @classmethod
    def from_table(cls, table: pd.DataFrame, *, first_grain_factor: float = 1.0,
                   length_um: float | None = None, source: str = "barrier table") -> GrowthPath:
        """A path from a barrier table: one row per barrier.

        Columns: ``position_um`` (required), optional ``grain_factor`` (orientation factor of the grain
        entered past the barrier), ``m_prime``, ``twist_deg``. Rows are sorted by position.
        """
        if "position_um" not in table.columns:
            raise ParameterError(f"{source} should have a 'position_um' column; got columns {list(table.columns)}")
        t = table.sort_values("position_um").reset_index(drop=True)

        def col(name, default):
            return t[name].to_numpy(float) if name in t.columns else np.full(len(t), default)

        gf = np.concatenate([[check_positive(first_grain_factor, "first_grain_factor")], col("grain_factor", 1.0)])
        return cls.from_barriers(t["position_um"].to_numpy(float), grain_factors=gf, m_prime=col("m_prime", 1.0),
                                 twist_deg=col("twist_deg", 0.0), length_um=length_um)

    @property
    def n_barriers(self) -> int:
        """Number of barriers along the path."""
        return int(self.barrier_positions_um.size)

    @property
    def n_zones(self) -> int:
        """Number of localisation zones along the path."""
        return int(self.zone_positions_um.size)

    def with_zones(self, positions_um, widths_um, strengths) -> GrowthPath:
        """This path with the given localisation zones (replacing any it had)."""
        from dataclasses import replace

        return replace(self, zone_positions_um=positions_um, zone_widths_um=widths_um, zone_strengths=strengths)

    def table(self) -> pd.DataFrame:
        """The barriers as a DataFrame (one row per barrier)."""
        return pd.DataFrame({
            "barrier": np.arange(self.n_barriers),
            "position_um": self.barrier_positions_um,
            "boundary_id": self.boundary_ids,
            "grain_before": self.grains[:-1],
            "grain_after": self.grains[1:],
            "grain_factor_before": self.grain_factors[:-1],
            "grain_factor_after": self.grain_factors[1:],
            "m_prime": self.m_prime,
            "twist_deg": self.twist_deg,
        })

    def locate(self, s_um) -> tuple[np.ndarray, np.ndarray]:
        """Map positions (x, y) in µm of distances ``s_um`` along the path (needs ``polyline``)."""
        if self.polyline is None:
            raise ParameterError("this path has no map coordinates (polyline is None)")
        s = np.asarray(s_um, dtype=float)
        p = self.polyline
        return np.interp(s, p[:, 0], p[:, 1]), np.interp(s, p[:, 0], p[:, 2])


# --------------------------------------------------------------------------------------------
# From the forecast
# --------------------------------------------------------------------------------------------


def _match_transmission(table: pd.DataFrame | None, grains: np.ndarray, positions: np.ndarray, offset: float,
                        from_col: str, into_col: str, mp: np.ndarray, tw: np.ndarray, bid: np.ndarray,
                        done: np.ndarray) -> None:
    """Fill |m′|, twist and boundary id of the path barriers from a crossing or barrier table."""
    if table is None or len(table) == 0 or from_col not in table.columns or into_col not in table.columns:
        return
    ga = table[from_col].to_numpy(np.int64)
    gb = table[into_col].to_numpy(np.int64)
    dist = table["distance_um"].to_numpy(float) + offset if "distance_um" in table.columns else None
    for i in np.flatnonzero(~done):  # per barrier on the path: tens at most
        g0, g1 = grains[i], grains[i + 1]
        m = np.flatnonzero(((ga == g0) & (gb == g1)) | ((ga == g1) & (gb == g0)))
        if m.size == 0:
            continue
        if dist is not None:
            m = m[np.argsort(np.abs(np.nan_to_num(dist[m], nan=np.inf) - positions[i]), kind="stable")]
        row = table.iloc[int(m[0])]
        mp[i] = float(row["m_prime"]) if "m_prime" in table.columns else 1.0
        tw[i] = float(row["twist_deg"]) if "twist_deg" in table.columns else 0.0
        bid[i] = int(row["boundary_id"]) if "boundary_id" in table.columns else -1
        done[i] = True


def path_from_tables(path_table: pd.DataFrame, barrier_table: pd.DataFrame | None = None, *,
                     crossings: pd.DataFrame | None = None, offset_um: float = 0.0,
                     source: str = "path table") -> GrowthPath:
    """A :class:`GrowthPath` from a forecast path table (and optionally its crossing / barrier tables).

    Parameters
    ----------
    path_table
        One row per straight segment with columns ``grain``, ``x0_um``, ``y0_um``, ``x1_um``,
        ``y1_um``, ``length_um``, ``s_start_um`` and ``effective_schmid`` (the ``CrackForecast.path``
        contract, :data:`slipnet.columns.FORECAST_PATH`).
    barrier_table
        ``CrackForecast.barriers``: ``grain_a``, ``grain_b``, ``m_prime``, ``twist_deg``,
        ``distance_um``, ``boundary_id``, ``on_path``.
    crossings
        ``CrackForecast.crossings`` (preferred: one row per crossing of the main path, ``branch`` 0):
        ``grain_a`` (from), ``grain_b`` (into), ``m_prime``, ``twist_deg``, ``distance_um``.
    offset_um
        Crack already present behind the path start (µm): every position is shifted by it, so the
        crack length is the whole length (the forecast's ``initial_crack_um``).
    source
        Name used in error messages.

    Notes
    -----
    Barrier positions are the path distances where the grain changes; grain factors are the
    length-weighted ``effective_schmid`` of each grain's segments. |m′|, twist and boundary id are matched by
    grain pair (nearest distance first), from the crossings, then the barriers; an unmatched
    barrier gets neutral transmission (|m′| = 1, twist 0).
    """
    need = {"grain", *SEGMENT_XY, "length_um", "s_start_um", "effective_schmid"}
    if path_table is None or len(path_table) == 0:
        raise ParameterError(f"{source} is empty: the forecast found no path to grow a crack along")
    missing = need - set(path_table.columns)
    if missing:
        raise ParameterError(f"{source} should have columns {sorted(need)}; missing {sorted(missing)}")
    offset = check_positive(offset_um, "offset_um", allow_zero=True)
    t = path_table.sort_values("s_start_um").reset_index(drop=True)
    grain = t["grain"].to_numpy(np.int64)
    s0 = t["s_start_um"].to_numpy(float) + offset
    ln = t["length_um"].to_numpy(float)
    schmid = np.abs(t["effective_schmid"].to_numpy(float))
    change = np.flatnonzero(grain[1:] != grain[:-1]) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change, [len(t)]])
    positions = s0[change]
    grains = grain[starts]
    # length-weighted orientation factor of each grain's segments (per grain on the path: tens)
    gf = np.array([np.average(np.nan_to_num(schmid[i:j]), weights=np.maximum(ln[i:j], 1e-12))
                   for i, j in zip(starts, ends, strict=True)])
    if not np.any(gf > 0):
        gf = np.ones_like(gf)
    gf = np.maximum(gf, 1e-3)  # a grain with no resolved shear: very hard, never infinitely so
    k = positions.size
    mp, tw = np.ones(k), np.zeros(k)
    bid = np.full(k, -1, dtype=np.int64)
    done = np.zeros(k, dtype=bool)
    if crossings is not None and len(crossings) and "branch" in crossings.columns:
        crossings = crossings[crossings["branch"] == 0]
    _match_transmission(crossings, grains, positions, offset, "grain_a", "grain_b", mp, tw, bid, done)
    if barrier_table is not None and len(barrier_table) and "on_path" in barrier_table.columns:
        barrier_table = barrier_table[barrier_table["on_path"].astype(bool)]
    _match_transmission(barrier_table, grains, positions, offset, "grain_a", "grain_b", mp, tw, bid, done)
    total = float(s0[-1] + ln[-1])
    poly_s = np.concatenate([s0, [total]])
    poly_x = np.concatenate([t["x0_um"].to_numpy(float), [float(t["x1_um"].iloc[-1])]])
    poly_y = np.concatenate([t["y0_um"].to_numpy(float), [float(t["y1_um"].iloc[-1])]])
    keep = np.concatenate([[True], np.diff(poly_s) > 0])
    return GrowthPath(barrier_positions_um=positions, grain_factors=gf, m_prime=np.clip(np.nan_to_num(mp, nan=1.0),
                      0, 1), twist_deg=np.nan_to_num(tw), length_um=total, grains=grains, boundary_ids=bid,
                      polyline=np.column_stack([poly_s, poly_x, poly_y])[keep])


def path_from_forecast(forecast, *, offset_um: float | None = None, stress_field=None, gg=None,
                       systems=None, zones: bool = True, zone_threshold: float = 0.5) -> GrowthPath:
    """A :class:`GrowthPath` from a ``CrackForecast`` (its ``.path``, ``.crossings``, ``.barriers``).

    Parameters
    ----------
    forecast
        The forecast.
    offset_um
        Crack length already behind the forecast tip (µm); default the forecast's
        ``settings["initial_crack_um"]`` (0 for a notch root).
    stress_field
        Optional ``StressField``: the grain factors then come from the local grain Schmid factors
        (``slipnet.stress.grain_schmid_factors``) of the system the path follows in each grain
        (the largest over systems in stage II) instead of the forecast's ``effective_schmid`` column.
    gg
        The ``GrainGraph`` of the map (needed with ``stress_field``).
    systems
        The slip systems the forecast used (default catalogue when None; relative CRSS divide the
        local factors as in the effective Schmid factor).
    zones, zone_threshold
        Take the localisation zones on the path from the forecast's field (:func:`zones_along_path`):
        every stretch of the path where the field reaches ``zone_threshold`` is a zone.

    See :func:`path_from_tables` for how the tables are read.
    """
    if not hasattr(forecast, "path"):
        raise ParameterError(f"forecast should be a CrackForecast with a .path table; got {type(forecast).__name__}")
    if offset_um is None:
        settings = getattr(forecast, "settings", None) or {}
        offset_um = float(settings.get("initial_crack_um", 0.0) or 0.0)
    table = forecast.path
    if stress_field is not None:
        table = _local_factors(table, stress_field, gg, systems)
    path = path_from_tables(table, getattr(forecast, "barriers", None),
                            crossings=getattr(forecast, "crossings", None), offset_um=offset_um,
                            source="forecast.path")
    grid = (getattr(forecast, "settings", None) or {}).get("field_grid")
    fld = getattr(forecast, "field", None)
    if zones and fld is not None and grid is not None and path.polyline is not None:
        zp, zw, zs = zones_along_path(np.asarray(fld, float), grid, path.polyline, zone_threshold)
        path = path.with_zones(zp, zw, zs)
    return path


def zones_along_path(field: np.ndarray, grid: dict, polyline: np.ndarray, threshold: float = 0.5):
    """Localisation zones along a path: stretches where the field sampled along it reaches ``threshold``.

    Parameters
    ----------
    field : (ny, nx) ndarray
        The forecast's localisation field (probabilities).
    grid : dict
        ``origin_um`` (x, y), ``step_um``, ``row_spacing_um`` and ``hex`` of the field's grid (the
        forecast's ``settings["field_grid"]``).
    polyline : (p, 3) ndarray
        ``(s_um, x_um, y_um)`` along the path.
    threshold
        Field value that makes a zone, in (0, 1).

    Returns
    -------
    positions_um, widths_um, strengths : (z,) ndarray
        Each stretch's centre (its highest point), approach width (from where the stretch begins to
        the centre, at least one grid step) and strength (the field's highest value on it).
    """
    if not 0.0 < float(threshold) < 1.0:
        raise ParameterError(f"zone_threshold should lie in (0, 1); got {threshold!r}")
    step = float(grid["step_um"])
    rs = float(grid["row_spacing_um"])
    ox, oy = (float(v) for v in grid["origin_um"])
    s0, s1 = float(polyline[0, 0]), float(polyline[-1, 0])
    s = np.arange(s0, s1 + 1e-9, 0.5 * step)
    x = np.interp(s, polyline[:, 0], polyline[:, 1])
    y = np.interp(s, polyline[:, 0], polyline[:, 2])
    ny, nx = field.shape
    i = np.clip(np.rint((y - oy) / rs).astype(int), 0, ny - 1)
    shift = 0.5 * step * (i % 2) if grid.get("hex") else 0.0
    j = np.clip(np.rint((x - ox - shift) / step).astype(int), 0, nx - 1)
    f = field[i, j]
    above = f >= float(threshold)
    edges = np.flatnonzero(np.diff(np.concatenate([[0], above.astype(int), [0]])))
    pos, wid, strg = [], [], []
    for a, b in zip(edges[::2], edges[1::2], strict=True):  # per stretch: a few
        k = a + int(np.argmax(f[a:b]))
        pos.append(s[k])
        wid.append(max(s[k] - s[a], step))
        strg.append(float(np.clip(f[k], 0.0, 1.0)))
    return np.asarray(pos, float), np.asarray(wid, float), np.asarray(strg, float)


def _local_factors(table: pd.DataFrame, stress_field, gg, systems) -> pd.DataFrame:
    """The path table with ``effective_schmid`` replaced by local effective Schmid factors from a stress field."""
    if gg is None:
        raise ParameterError("gg should be given with stress_field (the local factors are grain means)")
    if "system" not in table.columns:
        raise ParameterError("forecast.path should have a 'system' column to use local Schmid factors")
    from slipnet.stress.local import grain_schmid_factors

    local = np.abs(np.asarray(grain_schmid_factors(stress_field, gg, systems), dtype=float))
    crss = np.asarray(getattr(systems, "crss", np.ones(local.shape[1])), dtype=float)
    eff = np.nan_to_num(local / crss[None, :])
    g = table["grain"].to_numpy(np.int64)
    sysi = table["system"].to_numpy(np.int64)
    ok = (g >= 0) & (g < eff.shape[0])
    gi = np.where(ok, g, 0)
    on_sys = eff[gi, np.clip(sysi, 0, eff.shape[1] - 1)]
    best = eff[gi].max(axis=1)
    out = table.copy()
    old = table["effective_schmid"].to_numpy(float)
    out["effective_schmid"] = np.where(ok, np.where(sysi >= 0, on_sys, best), old)
    return out
