"""The study's tables, as the report and the CSV files show them: one identifier per thing.

Grains are ``G<id>``, boundaries ``B<boundary_id>``, notch candidates ``N<rank>`` and sites
``N<rank>-S<k>`` (:mod:`slipnet.labels`) in every table, beside the plain numeric ids. Column
names are snake_case with a unit suffix, as everywhere in slipnet.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from slipnet.labels import boundary_label, grain_label, notch_label, site_label
from slipnet.stress.local import grain_stress_table
from slipnet.study.steps import Outcome

__all__ = [
    "barrier_table", "boundary_table", "candidate_table", "dip_table", "grain_table", "map_table", "site_table",
]


def _grains(a, b) -> str:
    return f"{grain_label(a)}→{grain_label(b)}"


def map_table(omap, gg, path: str = "") -> pd.DataFrame:
    """One row per fact of the map and its clean-up (``path``: the map file)."""
    ny, nx = omap.shape
    meta = omap.meta or {}
    rows = [
        ("file", str(path) or omap.name or "(in memory)", ""),
        ("grid", f"{omap.grid}, {ny} rows × {nx} columns", ""),
        ("step", f"{omap.step:g}", "µm"),
        ("field of view", f"{omap.extent[1] - omap.extent[0]:.0f} × {omap.extent[3] - omap.extent[2]:.0f}", "µm"),
        ("indexed points", f"{100 * float(np.mean(omap.indexed)):.1f}", "%"),
        ("phases", ", ".join(f"{p.name} ({p.structure})" for p in omap.phases), ""),
        ("quality source", str(meta.get("quality_source", "file")), ""),
        ("points in grains after clean-up", f"{100 * float(np.mean(np.asarray(gg.labels) >= 0)):.1f}", "%"),
        ("grains", f"{gg.n_grains}", "count"),
        ("boundaries", f"{len(gg.boundaries)}", "count"),
        ("triple junctions", f"{len(gg.triple_junctions)}", "count"),
    ]
    return pd.DataFrame(rows, columns=["item", "value", "unit"])


def grain_table(gg, slip, field) -> pd.DataFrame:
    """Per grain: size, orientation spread, largest Schmid factor, Taylor factor and local stress."""
    g = gg.grains.copy()
    out = pd.DataFrame({"grain_label": [grain_label(i) for i in g["grain"]], "grain": g["grain"].to_numpy()})
    for c in g.columns:
        if c != "grain" and (c.endswith("_um") or c.endswith("_um2") or c.endswith("_deg") or c in ("n_points",)):
            out[c] = g[c].to_numpy()
    s = slip.grains.set_index("grain")
    for c in ("schmid_max", "effective_max", "taylor_factor"):
        if c in s:
            out[c] = s[c].reindex(out["grain"]).to_numpy()
    if field is not None:
        st = grain_stress_table(field, gg, slip.systems).set_index("grain")
        for c in ("normal_stress_mean_mpa", "local_schmid_max", "local_minus_uniform"):
            if c in st:
                out[c] = st[c].reindex(out["grain"]).to_numpy()
    return out


def boundary_table(gg, slip) -> pd.DataFrame:
    """Per boundary: grains, length, misorientation, class and the transmission both ways."""
    b = gg.boundaries
    out = pd.DataFrame({
        "boundary": [boundary_label(i) for i in b["boundary_id"]], "boundary_id": b["boundary_id"].to_numpy(),
        "grains": [_grains(x, y) for x, y in zip(b["grain_a"], b["grain_b"], strict=True)],
    })
    for c in ("length_um", "misorientation_deg", "boundary_class"):
        if c in b:
            out[c] = b[c].to_numpy()
    t = slip.transmission
    if len(t) and "boundary_id" in t and "transmission_score" in t:
        best = t.groupby("boundary_id")["transmission_score"].agg(["min", "max"])
        out["transmission_min"] = best["min"].reindex(out["boundary_id"]).to_numpy()
        out["transmission_max"] = best["max"].reindex(out["boundary_id"]).to_numpy()
    return out


def barrier_table(o: Outcome) -> pd.DataFrame:
    """Barriers on the main path from one notch, in the order the crack meets them."""
    b = o.forecast.barriers
    main = b[b["on_path"].astype(bool)].sort_values("distance_um") if len(b) else b
    arrest = o.arrest.set_index("boundary_id") if len(o.arrest) else None
    rows = []
    for i, r in enumerate(main.itertuples(), start=1):
        row = {
            "order": i, "boundary": boundary_label(r.boundary_id), "boundary_id": int(r.boundary_id),
            "grains": _grains(r.grain_a, r.grain_b), "distance_from_root_um": float(r.distance_um),
            "barrier_score": float(r.barrier_score), "barrier_rank": int(r.rank), "twist_deg": float(r.twist_deg),
            "tilt_deg": float(r.tilt_deg), "m_prime": float(r.m_prime), "boundary_class": str(r.boundary_class),
        }
        if "p_on_path" in b:
            row["p_on_path"] = float(r.p_on_path)
        if arrest is not None and int(r.boundary_id) in arrest.index:
            a = arrest.loc[int(r.boundary_id)]
            a = a.iloc[0] if isinstance(a, pd.DataFrame) else a
            row["threshold_amplitude_mpa"] = float(a["threshold_amplitude_mpa"])
            row["p_arrest_here"] = float(a["p_arrest_here"])
        else:
            row["threshold_amplitude_mpa"] = math.nan
            row["p_arrest_here"] = 0.0
        rows.append(row)
    cols = ["order", "boundary", "boundary_id", "grains", "distance_from_root_um", "barrier_score", "barrier_rank",
            "twist_deg", "tilt_deg", "m_prime", "boundary_class", *(["p_on_path"] if "p_on_path" in b else []),
            "threshold_amplitude_mpa", "p_arrest_here"]
    return pd.DataFrame(rows, columns=cols)


def site_table(o: Outcome, limit: int | None = None) -> pd.DataFrame:
    """Localisation sites ahead of the root of one notch, best first, with their distance from the root."""
    s = o.forecast.sites
    root = np.array([float(o.row["root_x_um"]), float(o.row["root_y_um"])])
    rows = []
    for r in (s if limit is None else s.head(limit)).itertuples():
        row = {
            "site": site_label(o.rank, r.rank), "x_um": float(r.x_um), "y_um": float(r.y_um),
            "distance_from_root_um": float(math.hypot(r.x_um - root[0], r.y_um - root[1])),
            "grain": grain_label(r.grain), "against_grain": grain_label(r.blocking_grain),
            "boundary": boundary_label(r.boundary_id) if int(r.boundary_id) >= 0 else "—",
            "plane": str(r.plane), "resolved_shear_mpa": float(r.resolved_shear_mpa),
            "band_length_um": float(r.band_length_um), "site_score_mpa_um": float(r.site_score_mpa_um),
        }
        for p in ("p_present", "p_top_k"):
            if p in s:
                row[p] = float(getattr(r, p))
        rows.append(row)
    return pd.DataFrame(rows)


def dip_table(o: Outcome) -> pd.DataFrame:
    """Predicted growth-rate dips from one notch: the boundary, where, how deep."""
    d = o.growth.dips
    gb = o.growth.barriers.set_index("barrier")
    rows = []
    for r in d.itertuples():
        bid = int(gb.loc[int(r.barrier), "boundary_id"]) if int(r.barrier) in gb.index else -1
        rows.append({"boundary": boundary_label(bid) if bid >= 0 else "—", "crack_length_um": float(r.crack_length_um),
                     "dadn_min_um_per_cycle": float(r.dadn_min_um_per_cycle),
                     "dadn_after_um_per_cycle": float(r.dadn_after_um_per_cycle),
                     "depth_ratio": float(r.depth_ratio), "arrest": bool(r.arrest)})
    return pd.DataFrame(rows, columns=["boundary", "crack_length_um", "dadn_min_um_per_cycle",
                                       "dadn_after_um_per_cycle", "depth_ratio", "arrest"])


def _cycles_to(o: Outcome, length: float, column: str) -> float:
    t = o.growth.bands if column != "cycles" else o.growth.profile
    if t is None or column not in t:
        return math.nan
    a = t["crack_length_um"].to_numpy(float)
    if not len(a) or length > a[-1] + 1e-9:
        return math.inf
    return float(t[column].to_numpy(float)[min(int(np.searchsorted(a, length)), len(a) - 1)])


def candidate_table(plan, outcomes: list[Outcome]) -> pd.DataFrame:
    """The candidate notches forecast, side by side: placement, plan terms and what each would give."""
    window = float(plan.settings.window_um)
    rows = []
    for o in outcomes:
        r = o.row
        bt = barrier_table(o)
        strongest = bt.sort_values("barrier_score", ascending=False).iloc[0] if len(bt) else None
        p_arrest = float(o.arrest["p_arrest_here"].sum()) if len(o.arrest) else 0.0
        rows.append({
            "notch": notch_label(o.rank), "edge": str(r.get("edge", "")),
            "edge_x_um": float(r["edge_x_um"]), "edge_y_um": float(r["edge_y_um"]),
            "root_x_um": float(r["root_x_um"]), "root_y_um": float(r["root_y_um"]),
            "plan_score": float(r["plan_score"]), "kt": float(r["kt"]) if "kt" in r else math.nan,
            "root_grain": grain_label(int(r["root_grain"])) if "root_grain" in r and np.isfinite(r["root_grain"])
            else "—",
            "path_length_um": float(o.forecast.length_um), "stop_reason": str(o.forecast.stop_reason),
            "barriers_on_path": len(bt),
            "first_barrier": bt["boundary"].iloc[0] if len(bt) else "—",
            "first_barrier_um": float(bt["distance_from_root_um"].iloc[0]) if len(bt) else math.nan,
            "strongest_barrier": strongest["boundary"] if strongest is not None else "—",
            "strongest_barrier_um": float(strongest["distance_from_root_um"]) if strongest is not None else math.nan,
            "rate_dips": len(o.growth.dips), "arrest_probability": p_arrest,
            "cycles_to_window_p50": _cycles_to(o, window, "cycles_p50"),
        })
    return pd.DataFrame(rows)
