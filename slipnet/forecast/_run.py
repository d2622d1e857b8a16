"""One deterministic forecast pass from prepared inputs (shared by the forecast and its Monte Carlo)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from slipnet.columns import FORECAST_ALTERNATIVES, SEGMENT_XY
from slipnet.forecast._core import _distance_to_segments, _Opts, _trace_all
from slipnet.forecast._geometry import _Crystal
from slipnet.forecast._sites import _field, _sites
from slipnet.forecast.barriers import rank_barriers


def run_forecast_pass(geo, planes, quats, load, schmid, tip, grain0, opts: _Opts, *, amplitude, decay, bw, cf,
          want_field: bool, sigma_um: float, site_radius: float | None = None, rows=None,
                      want_sites: bool = True) -> dict:
    cry = _Crystal(quats, load, planes, schmid, rows=rows)
    states, alt_cross = _trace_all(geo, cry, planes, float(tip[0]), float(tip[1]), grain0, opts)
    main = states[0]
    crossings = pd.DataFrame(main.crossings + alt_cross)
    barriers = rank_barriers(crossings, bw, decay_length_um=decay, class_factors=cf)
    if not want_sites:  # the Monte Carlo's path passes need no band sites and no segment tables
        seg = main.segments
        summary = {"length_um": float(sum(s["length_um"] for s in seg)), "n_main_crossings": len(main.crossings),
                   "end": (seg[-1]["x1_um"], seg[-1]["y1_um"]) if seg else None}
        return {"path": None, "path_summary": summary, "alternatives": None, "crossings": crossings,
                "barriers": barriers, "sites": None, "field": None, "stop": main.stop, "crystal": cry}
    seg_cols = list(FORECAST_ALTERNATIVES)
    path = pd.DataFrame(main.segments, columns=seg_cols).drop(columns="branch")
    alts = pd.DataFrame([s for st in states[1:] for s in st.segments], columns=seg_cols)
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
    segs = pd.concat([path[list(SEGMENT_XY)], alts[list(SEGMENT_XY)]]).to_numpy(float)
    if len(sites) and len(segs):
        dpath = _distance_to_segments(sites["x_um"].to_numpy(float), sites["y_um"].to_numpy(float), segs)
        radius = site_radius if site_radius is not None else float(np.median(geo.ecd[path["grain"].to_numpy()]))
        sites = sites.assign(path_distance_um=dpath)[dpath <= radius].reset_index(drop=True)
        sites["rank"] = np.arange(1, len(sites) + 1)
    else:
        sites = sites.assign(path_distance_um=np.full(len(sites), np.nan))
    sites["on_path_grain"] = sites["grain"].isin(path["grain"]) if len(sites) else pd.Series(dtype=bool)
    fld = _field(geo, bands, sigma_um) if want_field else None
    return {"path": path, "alternatives": alts, "crossings": crossings, "barriers": barriers, "sites": sites,
            "field": fld, "stop": main.stop, "crystal": cry}
