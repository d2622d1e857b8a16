"""Write a crack forecast: tables (CSV and JSON), settings, the field, pictures and a summary."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from slipnet.figures.forecast import plot_forecast_map, plot_score_terms
from slipnet.forecast.types import CrackForecast
from slipnet.reports.writer import Outputs

__all__ = ["write_forecast"]

def write_forecast(fc: CrackForecast, folder: str | os.PathLike, gg=None, *, figures: bool = True,
                   title: str = "Crack forecast") -> dict[str, Path]:
    """Write the forecast tables (CSV and JSON), pictures and a summary with the caution.

    Parameters
    ----------
    fc
        The forecast.
    folder
        Output folder (created if missing).
    gg
        The grain graph, needed for the map picture (skipped without it).
    figures
        Also draw ``forecast_map.png`` and ``forecast_terms.png``.
    title
        Title of ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    out = Outputs(folder)
    tables = {"path": fc.path, "alternatives": fc.alternatives, "crossings": fc.crossings,
              "barriers": fc.barriers, "sites": fc.sites}
    if fc.samples is not None:
        tables["samples"] = fc.samples
    for name, df in tables.items():
        out.table(f"{name}_csv", df, f"forecast_{name}.csv")
        out.table(f"{name}_json", df, f"forecast_{name}.json")
    out.json("settings", {**fc.settings, "stop_reason": fc.stop_reason}, "forecast_settings.json")
    if fc.field is not None:
        out.array("field", fc.field.astype(np.float32), "forecast_field.npy")
    if figures:
        if gg is not None:
            out.figure("map_png", plot_forecast_map(fc, gg), "forecast_map.png")
        out.figure("terms_png", plot_score_terms(fc), "forecast_terms.png")
    st = fc.settings
    lines = [
        f"Tip ({st['tip_um'][0]:.1f}, {st['tip_um'][1]:.1f}) µm, direction ({st['direction'][0]:.3f}, "
        f"{st['direction'][1]:.3f}), load axis ({', '.join(f'{v:.3f}' for v in st['load_axis'])}), "
        f"amplitude {st['stress_amplitude_mpa']:g} MPa, R = {st['stress_ratio']:g}, horizon {st['horizon_um']:g} µm.",
        f"Main path: {fc.length_um:.1f} µm in {len(fc.path)} segments through "
        f"{fc.path['grain'].nunique() if len(fc.path) else 0} grains; stopped at: {fc.stop_reason}.",
        f"Alternative paths: {fc.alternatives['branch'].nunique() if len(fc.alternatives) else 0}.",
        f"Boundary plane: {st['boundary_plane']} (assumed from a surface map).",
        f"Forecast mode: {st.get('mode_note', 'n/a')}.",
        *[f"- {note}" for note in st.get("feature_notes", [])],
        "Field, sites and barrier probabilities use weights fitted against slipnet's own cyclic crystal-plasticity "
        "model on synthetic specimens (a consistency test between a fast and a slow model, not a validation against "
        f"experiments); weights: {st.get('weights_source', 'n/a')}.",
        *([f"Schmid factors: LOCAL grain means from a full-field stress solve. Local stress assumptions: "
           f"{st['stress_assumptions']}"] if st.get("stress_field") else []),
        "",
        "Strongest barriers (rank, boundary, grains, score, twist°, tilt°, |m′|, distance µm):",
    ]
    for r in fc.barriers.head(5).itertuples():
        lines.append(f"- {r.rank}: boundary {r.boundary_id} ({r.grain_a}→{r.grain_b}) score {r.barrier_score:.3f}, "
                     f"twist {r.twist_deg:.1f}, tilt {r.tilt_deg:.1f}, m′ {r.m_prime:.2f}, at {r.distance_um:.1f}")
    lines += ["", "Top localisation sites (rank, x, y µm, probability of a hot spot within "
              f"{st.get('hit_radius_um', float('nan')):g} µm, field value):"]
    for r in fc.sites.head(5).itertuples():
        lines.append(f"- {r.rank}: ({r.x_um:.1f}, {r.y_um:.1f}) p {r.site_probability:.2f}, field {r.field_value:.2f}, "
                     f"grain {r.grain} against {r.blocking_grain}")
    if fc.samples is not None:
        lines += ["", f"Monte Carlo: {len(fc.samples)} samples, seed {st['seed']}; probabilities in the "
                  "barrier and site tables (p_on_path, p_present, p_top_k)."]
    out.summary(title, lines)
    return out.files
