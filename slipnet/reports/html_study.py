"""The study report: one self-contained HTML page that opens with the answer, then the evidence.

Order: title and caution; warnings; the answer (where to cut the notch and why, one picture; what
the crack is expected to do from there, with the Monte Carlo bands); the candidates side by side;
then one section per step (map and clean-up, grains and boundaries, slip and transmission,
stress, forecast, growth, notch candidates, comparison); parameters, validation standing,
assumptions, software and steps; the caution again. The page is written to a temporary name and
renamed, so a failed run never leaves half a report.
"""

from __future__ import annotations

import math
import os
from dataclasses import asdict, fields
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet.figures.compare import comparison_figures
from slipnet.figures.grains import plot_grain_map, plot_misorientation_histogram
from slipnet.figures.maps import plot_ipf_map
from slipnet.figures.slip import plot_schmid_map, plot_transmission
from slipnet.figures.stress import plot_max_local_schmid, plot_stress_component
from slipnet.figures.study import (
    plot_candidate_growth,
    plot_candidate_map,
    plot_notch_forecast,
    plot_study_answer,
    plot_study_growth,
)
from slipnet.labels import grain_label, notch_label
from slipnet.reports.html import esc, figure_html, format_cell, html_page, html_table, section
from slipnet.reports.writer import Outputs

__all__ = ["SECTIONS", "study_report_html", "write_study_report"]

#: Section anchors and titles, in the order of the report.
SECTIONS: tuple[tuple[str, str], ...] = (
    ("warnings", "Warnings"),
    ("answer", "The answer"),
    ("candidates", "The candidate notches side by side"),
    ("map", "Map and clean-up"),
    ("grains", "Grains and boundaries"),
    ("slip", "Slip and transmission"),
    ("stress", "Stress"),
    ("forecast", "Forecast"),
    ("growth", "Growth"),
    ("notch", "Notch candidates"),
    ("comparison", "Comparison with measurements"),
    ("parameters", "Parameters"),
    ("validation", "Validation standing of the predictor"),
    ("assumptions", "Assumptions"),
    ("software", "Software and steps"),
    ("caution", "Caution"),
)


def _figure(r, make, caption: str) -> str:
    """``make()`` drawn and embedded, unless the report is asked without pictures."""
    return figure_html(make(), caption) if getattr(r, "figures", True) else ""


def _n(v, digits: int = 3) -> str:
    return format_cell(v, digits)[0]


def _p(text: str, cls: str = "") -> str:
    return f"<p class=\"{cls}\">{esc(text)}</p>" if cls else f"<p>{esc(text)}</p>"


def _xy(x, y) -> str:
    return f"({float(x):.0f}, {float(y):.0f}) µm"


def _edge_text(edge) -> str:
    if isinstance(edge, str):
        return f"the {edge} edge of the map"
    pts = " – ".join(f"({float(x):.0f}, {float(y):.0f})" for x, y in edge)
    return f"the edge {pts} µm"


def _answer_paragraph(r) -> str:
    best = r.recommended
    row = best.row
    t = r.tables["candidates"]
    c0 = t.iloc[0]
    others = t.iloc[1:]
    weights = ", ".join(f"{k.replace('_', ' ')} (weight {v:g})" for k, v in r.plan.settings.weights.items())
    why = (f"It has the best plan score, {_n(c0['plan_score'])}, of the {len(r.plan.table)} candidate positions "
           f"along {' and '.join(_edge_text(e) for e in r.options.notch.edges)}, ranked by {weights}")
    if len(others):
        why += "; next " + ", ".join(f"{o['notch']} {_n(o['plan_score'])}" for _, o in others.iterrows())
    why += "."
    bt = r.tables[f"{notch_label(best.rank)}_barriers"]
    first = (f" The crack should meet boundary {bt['boundary'].iloc[0]} first, "
             f"{bt['distance_from_root_um'].iloc[0]:.0f} µm from the root" if len(bt) else
             " No boundary lies on the forecast path")
    strongest = ""
    if len(bt):
        s = bt.sort_values("barrier_score", ascending=False).iloc[0]
        strongest = (f", and the strongest barrier on its path is {s['boundary']} at "
                     f"{s['distance_from_root_um']:.0f} µm (barrier score {_n(s['barrier_score'])})")
    kt = f", K_t ≈ {_n(row['kt'])}" if "kt" in row and np.isfinite(row["kt"]) else ""
    return (f"Cut the notch {notch_label(best.rank)}: from {_xy(row['edge_x_um'], row['edge_y_um'])} on the "
            f"edge, {r.plan.settings.notch.depth_um:g} µm deep along "
            f"({float(row['normal_x']):.2f}, {float(row['normal_y']):.2f}), root radius "
            f"{r.plan.settings.notch.root_radius_um:g} µm, opening {r.plan.settings.notch.opening_deg:g}°, so its "
            f"root lies at {_xy(row['root_x_um'], row['root_y_um'])}{kt}. {why}{first}{strongest}. Load axis "
            f"({', '.join(f'{v:.3f}' for v in r.options.load.axis)}) in the map frame, amplitude "
            f"{r.options.load.stress_amplitude_mpa:g} MPa, R = {r.options.load.stress_ratio:g}.")


def _expectation(r) -> list[str]:
    best = r.recommended
    name = notch_label(best.rank)
    fc, g = best.forecast, best.growth
    grains = [grain_label(v) for v in dict.fromkeys(fc.path["grain"].tolist())] if len(fc.path) else []
    p_arrest = float(best.arrest["p_arrest_here"].sum()) if len(best.arrest) else 0.0
    arrest = (f"In the central model the crack arrests at {g.arrest_length_um:.0f} µm"
              if math.isfinite(g.arrest_length_um) else
              f"In the central model the crack does not arrest within {g.profile['crack_length_um'].iloc[-1]:.0f} µm")
    mc = (f"; in {len(fc.samples)} Monte Carlo draws it arrests somewhere on the path with probability "
          f"{p_arrest:.2f}" if fc.samples is not None and len(fc.samples) else "")
    text = (f"From the root of {name} the stage-I crack is forecast to run {fc.length_um:.0f} µm through "
            f"{len(grains)} grains ({', '.join(grains[:8])}{', …' if len(grains) > 8 else ''}) before it stops "
            f"({fc.stop_reason}). It meets the barriers below in this order; {len(g.dips)} growth-rate dips are "
            f"expected before barriers. {arrest}{mc}.")
    parts = [f"<h3>What the crack is expected to do from {esc(name)}</h3>", _p(text)]
    parts.append(html_table(r.tables[f"{name}_barriers"], caption=f"Barriers on the path from {name}, in order",
                            columns=["order", "boundary", "grains", "distance_from_root_um", "barrier_score",
                                     "twist_deg", "m_prime", "p_on_path", "threshold_amplitude_mpa",
                                     "p_arrest_here"],
                            note="barrier score 0–1 (higher resists more); p on path: share of Monte Carlo "
                                 "samples whose path meets it; p arrest here: share of draws arresting there."))
    parts.append(html_table(r.tables[f"{name}_sites"], caption=f"Localisation zones ahead of the tip ({name})",
                            columns=["site", "x_um", "y_um", "distance_from_root_um", "grain", "against_grain",
                                     "boundary", "site_score_mpa_um", "p_present"], max_rows=6))
    parts.append(html_table(r.tables[f"{name}_dips"], caption=f"Expected growth-rate dips ({name})",
                            note="depth ratio = lowest rate before the barrier / rate just after crossing it."))
    parts.append(_figure(r, lambda: plot_study_growth(r, 0),
                             f"Growth from {name}: rate and crack length against cycles, with the 5–95 % Monte "
                             "Carlo bands; dotted lines are the barriers (B = boundary id)."))
    return parts


def _candidates(r) -> list[str]:
    t = r.tables["candidates"]
    parts = [_p(f"The forecast, growth and uncertainty from each of the best {len(r.outcomes)} candidate notches, so "
                "the placements can be weighed against each other. Each row is one notch, N1 the recommendation."),
             html_table(t, caption="Candidate notches: placement, plan and what each would give", highlight_first=True,
                        note="arrest probability: share of Monte Carlo draws in which the crack arrests on the "
                             "forecast path; cycles to window p50: median cycles to grow through the plan's "
                             f"observation window ({r.plan.settings.window_um:g} µm)."),
             _figure(r, lambda: plot_candidate_growth(r), "Growth rate from each candidate notch (central values).")]
    return parts


def _map_section(r) -> list[str]:
    g = r.options.grains
    return [html_table(r.tables["map"], caption="The map and what the clean-up kept"),
            _p(f"Clean-up: grain boundary threshold {g.threshold_deg:g}°"
               + (f", sub-grain threshold {g.subgrain_deg:g}°" if g.subgrain_deg else "")
               + (f", points of quality below {g.min_quality:g} left out" if g.min_quality is not None else "")
               + (", unlabelled points filled from their neighbours" if g.fill_unindexed else "")
               + (f", grains under {g.min_grain_size} points merged" if g.min_grain_size else "")
               + (f", grains under {g.min_grain_area_um2:g} µm² merged" if g.min_grain_area_um2 else "") + "."),
            _figure(r, lambda: plot_ipf_map(r.omap, title="Orientation map: IPF colouring, normal direction z").figure,
                    "The map as read, in IPF colours (normal direction z); unindexed points dark.")]


def _grains_section(r) -> list[str]:
    gg = r.gg
    cls = gg.boundaries["boundary_class"].value_counts().rename_axis("boundary_class").reset_index(name="count")
    return [_figure(r, lambda: plot_grain_map(gg), "Grains coloured by mean orientation, boundaries by class."),
            _figure(r, lambda: plot_misorientation_histogram(gg), "Boundary misorientation, length weighted."),
            html_table(cls, caption="Boundary classes"),
            html_table(r.tables["grains"], caption="Grains (G = grain id)", max_rows=40),
            html_table(r.tables["boundaries"], caption="Boundaries (B = boundary id)", max_rows=40)]


def _slip_section(r) -> list[str]:
    gg, act = r.gg, r.slip
    return [_p(f"Structure {act.systems.structure}, families {', '.join(act.systems.family_names)} "
               f"({len(act.systems)} systems), uniform uniaxial load along the load axis. Transmission: Luster–Morris "
               "m′ weighted by the outgoing system's effective Schmid factor."),
            _figure(r, lambda: plot_schmid_map(gg, act.grains["schmid_max"].to_numpy()),
                        "Largest Schmid factor per grain (dimensionless, 0–0.5)."),
            _figure(r, lambda: plot_transmission(gg, act.transmission),
                        "Slip transmission score per boundary (dimensionless, 0–1).")]


def _stress_section(r) -> list[str]:
    f = r.stress_field
    solid = ~f.compliant
    ns = f.normal_stress()[solid]
    t = pd.DataFrame([("applied stress along the load axis", f"{f.applied_stress:g}", "MPa"),
                      ("solver iterations", f"{f.iterations}", "count"),
                      ("normalised equilibrium residual", f"{f.residual:.2e}", "–"),
                      ("tolerance", f"{f.tol:g}", "–"),
                      ("apparent Young's modulus along the load axis", f"{f.apparent_modulus:.1f}", "GPa"),
                      ("load-axis normal stress, min", f"{np.min(ns):.1f}", "MPa"),
                      ("load-axis normal stress, max", f"{np.max(ns):.1f}", "MPa")],
                     columns=["item", "value", "unit"])
    return [html_table(t, caption="Full-field elastic solve"),
            _figure(r, lambda: plot_stress_component(f), "Local normal stress along the load axis (MPa)."),
            _figure(r, lambda: plot_max_local_schmid(f, r.slip.systems),
                    "Largest local Schmid factor (dimensionless)."),
            _p("Assumptions: " + f.assumptions, "meta")]


def _forecast_section(r) -> list[str]:
    parts = [_p("Each candidate's forecast starts at its root along the notch's inward normal. Barrier tables list "
                "the boundaries on the main path in the order met; site tables the localisation zones.")]
    for i, o in enumerate(r.outcomes):
        name = notch_label(o.rank)
        fc = o.forecast
        parts += [f"<h3>{esc(name)}: root {esc(_xy(o.row['root_x_um'], o.row['root_y_um']))}</h3>",
                  _p(f"Path {fc.length_um:.0f} µm in {len(fc.path)} segments, stopped: {fc.stop_reason}; "
                     f"{len(fc.barriers)} boundaries ranked (main and alternative paths), {len(fc.sites)} sites; "
                     f"{len(fc.samples) if fc.samples is not None else 0} Monte Carlo samples (seed "
                     f"{fc.settings.get('seed')})."),
                  _figure(r, lambda i=i: plot_notch_forecast(r, i),
                          f"{name}: forecast path, barriers and sites over the "
                              "predicted localisation field."),
                  html_table(r.tables[f"{name}_barriers"], caption=f"{name}: barriers on the path"),
                  html_table(r.tables[f"{name}_sites"], caption=f"{name}: localisation sites", max_rows=12)]
    return parts


def _growth_section(r) -> list[str]:
    p = r.outcomes[0].growth.params
    consts = pd.DataFrame([{"parameter": k, "value": v} for k, v in asdict(p).items()])
    parts = [_p("Navarro–de los Rios blocked-zone model on a strip-yield crack (see docs/growth-model.md); bands "
                "from the forecast's Monte Carlo samples and log-normal barrier strengths."),
             html_table(consts, caption="Growth model constants (friction stress, barrier stress, shear modulus in "
                                        "MPa; source distance in µm; coefficient in µm/cycle)")]
    for i, o in enumerate(r.outcomes):
        name = notch_label(o.rank)
        if i:
            parts.append(_figure(r, lambda i=i: plot_study_growth(r, i),
                                 f"Growth from {name} with the 5–95 % Monte Carlo bands."))
        parts.append(html_table(r.tables[f"{name}_dips"], caption=f"{name}: growth-rate dips"))
    return parts


_PLAN_COLUMNS = ("notch", "rank", "edge", "edge_x_um", "edge_y_um", "root_x_um", "root_y_um", "plan_score", "kt",
                 "initiation_drive", "barrier_strength_in_window", "first_barrier_um", "log10_cycles_to_window",
                 "arrest_probability", "p_top_k")


def _notch_section(r) -> list[str]:
    s = r.plan.settings
    plan = r.tables["notch_plan"]
    return [_p(f"{len(plan)} candidate positions every {r.options.notch.spacing_um:g} µm; notch depth "
               f"{s.notch.depth_um:g} µm, root radius {s.notch.root_radius_um:g} µm, opening {s.notch.opening_deg:g}°; "
               f"stress concentration: {s.concentration}; ranking {r.plan.method}; observation window "
               f"{s.window_um:g} µm."),
            _figure(r, lambda: plot_candidate_map(r),
                    "Every candidate (edge → root) coloured by plan score; N = rank."),
            html_table(plan, caption="All candidates, best first", columns=_PLAN_COLUMNS, max_rows=40),
            *(_p("Note: " + n, "meta") for n in r.plan.notes)]


def _comparison_section(r) -> list[str]:
    comp = r.comparison
    if comp is None:
        return [_p("No measurements were given. Run the study again with --strain FILE (and --control-points, "
                   "--crack-path, --growth-record) once the notch is cut and tested; the steps done here are reused.")]
    name = notch_label(r.options.compare.notch)
    parts = []
    if comp.settings.get("synthetic"):
        parts.append("<p class=\"warnings\"><strong>The measured strain field, crack path and growth record here are "
                     "SYNTHETIC, invented by slipnet's demo from its own forecast: not measurements.</strong></p>")
    parts.append(_p(f"Measured against the forecast from {name}, the notch taken as cut."))
    if comp.transform is not None:
        parts.append(html_table(comp.transform.table(), caption="Control points and their residuals"))
    parts.append(html_table(r.tables["comparison_scores"], caption="Scores of the forecast"))
    for fname, fig in (comparison_figures(comp) if getattr(r, "figures", True) else {}).items():
        parts.append(figure_html(fig, fname.removesuffix(".png").replace("_", " ")))
    if r.calibration is not None:
        parts.append(html_table(r.tables["calibration"], caption="Growth constants fitted to the record (95 % "
                                                                 "intervals)"))
    return parts


def _parameters(r) -> pd.DataFrame:
    rows = []
    for f in fields(r.options):
        part = getattr(r.options, f.name)
        for g in fields(part):
            v = getattr(part, g.name)
            rows.append({"section": f.name, "option": g.name, "value": "default of the step" if v is None else
                         (", ".join(map(str, v)) if isinstance(v, (list, tuple)) else str(v))})
    return pd.DataFrame(rows)


def _validation(r) -> list[str]:
    if r.validation is None or len(r.validation) == 0:
        return [_p("No validation standing is recorded in this installation: the predictor has not been scored "
                   "by the validation harness. Read the forecast as a ranking of likely behaviour, not a measured "
                   "accuracy.")]
    statement = str(r.validation["statement"].iloc[0]) if "statement" in r.validation else ""
    table = r.validation.drop(columns=["statement"], errors="ignore")
    return [_p("The predictor's held-out standing from slipnet's validation harness (slipnet validate). "
               + statement + " It is not a validation against experiments; no measured specimen was used."),
            html_table(table, caption="Validation standing (held-out virtual experiments)")]


def study_report_html(r) -> str:
    """The whole report page of a study result (``slipnet.study.StudyResult``) as HTML text."""
    best = r.recommended
    name = notch_label(best.rank)
    warn_items = "".join(f"<li><strong>{esc(s)}</strong>: {esc(m)}</li>" for s, m in r.warnings)
    nav = "<nav><ol>" + "".join(f"<li><a href=\"#{a}\">{esc(t)}</a></li>" for a, t in SECTIONS) + "</ol></nav>"
    head = (f"<header><h1>{esc(r.title)}</h1>"
            f"<p class=\"meta\">slipnet {esc(r.version)} · map {esc(Path(str(r.options.map.path)).name)} · "
            f"{len(r.outcomes)} candidate notches forecast · report of a study run from study.toml</p>"
            + (_p(r.description) if r.description else "")
            + f"<p class=\"caution\">{esc(r.caution)}</p>{nav}</header>")
    body = [head]
    body.append(section("warnings", f"Warnings ({len(r.warnings)})",
                        [f"<ul class=\"warnings\">{warn_items}</ul>" if r.warnings else
                         _p("None: no step had to guess or fall back.")], first=True))
    body.append(section("answer", "The answer", [
        f"<p class=\"lead\">{esc(_answer_paragraph(r))}</p>",
        _figure(r, lambda: plot_study_answer(r),
                f"Where to cut: the candidate notches (outlines, N = rank), the forecast "
                    f"path from each, and for {name} the barriers (B = boundary id), the localisation sites and "
                    "where the Monte Carlo paths end."),
        *_expectation(r)]))
    body.append(section("candidates", "The candidate notches side by side", _candidates(r)))
    body.append(section("map", "Map and clean-up", _map_section(r)))
    body.append(section("grains", "Grains and boundaries", _grains_section(r)))
    body.append(section("slip", "Slip and transmission", _slip_section(r)))
    body.append(section("stress", "Stress", _stress_section(r)))
    body.append(section("forecast", "Forecast", _forecast_section(r)))
    body.append(section("growth", "Growth", _growth_section(r)))
    body.append(section("notch", "Notch candidates", _notch_section(r)))
    body.append(section("comparison", "Comparison with measurements", _comparison_section(r)))
    body.append(section("parameters", "Parameters", [
        _p("Every option of this study (also in study.toml beside this report; run it again with "
           "slipnet study --study study.toml)."), html_table(_parameters(r), caption="Options")]))
    body.append(section("validation", "Validation standing of the predictor", _validation(r)))
    body.append(section("assumptions", "Assumptions", ["<ul>" + "".join(f"<li>{esc(a)}</li>" for a in r.assumptions)
                                                       + "</ul>"]))
    body.append(section("software", "Software and steps", [
        _p(f"slipnet {r.version}. Each step is cached by a content hash of its inputs and options; 'reused' steps "
           "were read back from the cache."), html_table(r.log, caption="Step log")]))
    body.append(section("caution", "Caution", [f"<p class=\"caution\">{esc(r.caution)}</p>"]))
    return html_page(f"{r.title}: notch {name}", body)


def write_study_report(r, path: str | os.PathLike) -> Path:
    """Write :func:`study_report_html` to ``path`` (temporary name, renamed when complete)."""
    path = Path(path)
    return Outputs(path.parent).text("report", study_report_html(r), path.name)
