"""The fitted localisation field, its sites and the fitted barrier probabilities of a forecast.

The field is the ``field`` model of :mod:`slipnet.forecast.predictor` applied to the point features
(:mod:`slipnet.forecast.features`): the probability that each metal point is among the top 10 % of
accumulated slip within the horizon. Sites are the field's peaks (greedy non-maximum suppression,
``site_separation_um`` apart, within the horizon of the tip); each carries the probability that a hot
point lies within ``hit_radius_um`` of it. Barriers get the probability that the slip drops across them
by at least ``drop_threshold`` (the relative drop ``(s_in − s_out)/(s_in + s_out)``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from slipnet.columns import FORECAST_SITES
from slipnet.forecast import _kernels as _k
from slipnet.forecast.features import FieldInputs, boundary_drops, field_peaks
from slipnet.forecast.predictor import BARRIER_FEATURES, Weights

__all__ = ["barrier_features", "field_logit", "peak_sites", "predict_field", "site_probability"]

_EPS = 1e-6


def predict_field(inputs: FieldInputs, weights: Weights, replicate: int | None = None) -> np.ndarray:
    """The localisation probability field ``(ny, nx)`` (0 off the metal)."""
    model = weights.model(inputs.mode, "field")
    out = np.zeros(inputs.solid.shape)
    if inputs.solid.any():
        out[inputs.solid] = model.probability(inputs.matrix(model.features), replicate)
    return out


def full_field(field: np.ndarray, inputs: FieldInputs, shape) -> np.ndarray:
    """A field of ``inputs``' window (:func:`predict_field`) on the whole map grid: 0 outside the window."""
    if inputs.window is None:
        return field
    r0, r1, c0, c1 = inputs.window
    out = np.zeros(tuple(shape))
    out[r0:r1, c0:c1] = field
    return out


def field_logit(p: np.ndarray) -> np.ndarray:
    """ln(p / (1 − p)) of field probabilities, clipped to [1e-6, 1 − 1e-6] (the site model's feature)."""
    p = np.clip(np.asarray(p, float), _EPS, 1.0 - _EPS)
    return np.log(p / (1.0 - p))


def site_probability(field_values, weights: Weights, mode: str, replicate: int | None = None) -> np.ndarray:
    """P(hot point within the hit radius) of sites whose field value is ``field_values``."""
    m = weights.model(mode, "sites")
    return m.probability(field_logit(field_values)[:, None], replicate)


def peak_sites(geo, cry, planes, inputs: FieldInputs, field: np.ndarray, weights: Weights, tip, horizon: float,
               amplitude: float, *, k: int = 10, replicate: int | None = None) -> pd.DataFrame:
    """The ``k`` strongest peaks of the field within the horizon, with what makes each (table columns of
    :data:`slipnet.columns.FORECAST_SITES`)."""
    omap_x0, omap_y0 = geo.ox, geo.oy
    x, y = _coords(geo, inputs.window)
    w0 = (0, 0) if inputs.window is None else (inputs.window[0], inputs.window[2])
    region = inputs.solid & (np.hypot(x - tip[0], y - tip[1]) <= horizon)
    cols = list(FORECAST_SITES)
    pk = field_peaks(field, region, _GridShim(x, y), k, weights.site_separation_um) if region.any() and k > 0 \
        else np.zeros((0, 2))
    if len(pk) == 0:
        return pd.DataFrame({c: pd.Series(dtype=object if c == "plane" else float) for c in cols})
    rows = []
    for sx, sy in pk:  # per site: ten at most
        i = round((sy - omap_y0) / geo.rs)
        j = round((sx - omap_x0 - (0.5 * geo.step * (i % 2) if geo.hexgrid else 0.0)) / geo.step)
        g = int(geo.labels[i, j])
        cry.ensure1(g)
        li, lj = i - w0[0], j - w0[1]  # the point in the arrays of the inputs' window
        s = int(inputs.best_system[li, lj])
        if s < 0:
            s = int(cry.best_sys[g])
        p = int(planes.plane_of[s])
        tr = cry.trace[g, p]
        ok = bool(cry.trace_ok[g, p])
        band, nb = 0.0, -1
        if ok:
            t_out = np.zeros((1, 2))
            lab_out = np.zeros((1, 2), np.int64)
            _k.chord_ends(geo.labels, geo.hexgrid, geo.ox, geo.oy, geo.step, geo.rs, np.array([sx]), np.array([sy]),
                          np.array([tr[0]]), np.array([tr[1]]), np.array([g], np.int64), geo.ds,
                          float(np.hypot(geo.nx * geo.step, geo.ny * geo.rs)), 3.0 * geo.step, t_out, lab_out)
            band = float(t_out.sum())
            # the band end nearer the site is the boundary the slip there runs into
            e = int(np.argmin(t_out[0]))
            nb = int(lab_out[0, e]) if lab_out[0, e] >= 0 and lab_out[0, e] != g else int(lab_out[0, 1 - e])
        if nb < 0 or nb == g:
            nbs = geo.neigh.get(g, [])
            nb = int(nbs[int(np.argmin(np.hypot(geo.cx[nbs] - sx, geo.cy[nbs] - sy)))]) if nbs else -1
        trans = 1.0
        if nb >= 0:
            mp = cry.m_prime_row(g, s, nb)
            trans = float(np.max(mp * cry.meff[nb] / max(float(np.max(cry.meff[nb])), 1e-12)))
        info = geo.edges.get((min(g, nb), max(g, nb))) if nb >= 0 else None
        tau_mpa = float(inputs.tau[li, lj]) * amplitude
        rows.append({"x_um": float(sx), "y_um": float(sy), "site_score_mpa_um": tau_mpa * band * (1.0 - trans),
                     "grain": g, "blocking_grain": nb, "boundary_id": info[0] if info else -1, "system": s,
                     "plane": planes.labels[p], "resolved_shear_mpa": tau_mpa, "band_length_um": band,
                     "transmission_score": trans, "field_value": float(field[li, lj])})
    df = pd.DataFrame(rows)
    df["site_probability"] = site_probability(df["field_value"].to_numpy(), weights, inputs.mode, replicate)
    df = df.sort_values("site_probability", ascending=False, kind="stable").reset_index(drop=True)
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    return df[cols]


class _GridShim:
    """The two coordinate arrays :func:`field_peaks` asks a map for."""

    def __init__(self, x, y) -> None:
        self._xy = (x, y)

    def coordinates(self):
        return self._xy


def barrier_features(barriers: pd.DataFrame, crossings: pd.DataFrame, inputs: FieldInputs, field: np.ndarray, geo,
                     cry, weights: Weights, horizon: float) -> np.ndarray:
    """The :data:`~slipnet.forecast.predictor.BARRIER_FEATURES` of every barrier row, ``(n, k)``.

    ``field_drop`` and ``tau_drop`` are the relative drops of the predicted field and of the effective
    resolved shear across the boundary (side means within ``drop_radius_um`` of the crossing, as the
    harness measures the reference's drop); ``untransmitted`` = 1 − |m′|; ``twist`` = α/90°;
    ``schmid_drop`` and ``boundary_class`` are the barrier terms of :func:`rank_barriers`;
    ``residual_burgers`` = min |d_in ∓ d_out| between the unit slip directions of the incoming and
    outgoing systems (Lee, Robertson & Birnbaum 1989); ``log_distance`` = ln(1 + distance / step).
    """
    n = len(barriers)
    if n == 0:
        return np.zeros((0, len(BARRIER_FEATURES)))
    xs, ys = barriers["x_um"].to_numpy(float), barriers["y_um"].to_numpy(float)
    ga, gb = barriers["grain_a"].to_numpy(np.int64), barriers["grain_b"].to_numpy(np.int64)
    cry.ensure(np.concatenate([ga, gb]))
    shim = _GridShim(*_coords(geo, inputs.window))
    r = weights.drop_radius_um
    labels = geo.labels if inputs.window is None else geo.labels[_slices(inputs.window)]
    fd = np.nan_to_num(boundary_drops(field, labels, inputs.solid, shim, xs, ys, ga, gb, r))
    td = np.nan_to_num(boundary_drops(inputs.tau, labels, inputs.solid, shim, xs, ys, ga, gb, r))
    # systems in and out of each barrier's crossing (first crossing of that grain pair)
    rb = np.zeros(n)
    if crossings is not None and len(crossings) and {"system_in", "system_out"} <= set(crossings.columns):
        key = {}
        for a, b, si, so in zip(crossings["grain_a"], crossings["grain_b"], crossings["system_in"],
                                crossings["system_out"], strict=True):
            key.setdefault((int(a), int(b)), (int(si), int(so)))
        for m, (a, b) in enumerate(zip(ga, gb, strict=True)):  # per barrier: tens
            si, so = key.get((int(a), int(b)), (-1, -1))
            si = si if si >= 0 else int(cry.best_sys[a])
            so = so if so >= 0 else int(cry.best_sys[b])
            da, db = cry.d_s[a, si], cry.d_s[b, so]
            rb[m] = min(float(np.linalg.norm(da - db)), float(np.linalg.norm(da + db)))
    cols = {
        "field_drop": fd, "tau_drop": td,
        "untransmitted": np.clip(1.0 - barriers["m_prime"].to_numpy(float), 0.0, 1.0),
        "twist": np.clip(barriers["twist_deg"].to_numpy(float) / 90.0, 0.0, 1.0),
        "schmid_drop": barriers["term_schmid_drop"].to_numpy(float),
        "boundary_class": barriers["term_class"].to_numpy(float),
        "residual_burgers": rb,
        "log_distance": np.log1p(barriers["distance_um"].to_numpy(float) / geo.step),
    }
    return np.nan_to_num(np.stack([cols[c] for c in BARRIER_FEATURES], axis=1))


def _coords(geo, window=None):
    """Point positions of the map (or of ``window`` = ``(r0, r1, c0, c1)``), µm, as ``(x, y)`` (read-only).

    Kept on the geometry for the last few windows: every Monte Carlo sample asks for the same one.
    """
    r0, r1, c0, c1 = (0, geo.ny, 0, geo.nx) if window is None else window
    cache = geo.__dict__.setdefault("coords_cache", {})
    hit = cache.get((r0, r1, c0, c1))
    if hit is not None:
        return hit
    jj, ii = np.meshgrid(np.arange(c0, c1), np.arange(r0, r1))
    x = geo.ox + jj * geo.step + (0.5 * geo.step * (ii % 2) if geo.hexgrid else 0.0)
    y = geo.oy + ii * geo.rs
    x.setflags(write=False)
    y.setflags(write=False)
    if len(cache) >= 4:
        cache.pop(next(iter(cache)), None)
    cache[(r0, r1, c0, c1)] = (x, y)
    return x, y


def _slices(window) -> tuple[slice, slice]:
    r0, r1, c0, c1 = window
    return slice(r0, r1), slice(c0, c1)
