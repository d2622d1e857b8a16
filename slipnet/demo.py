"""The built-in demo: the invented specimen run through every step of the job.

Each step is a function ``_step_<name>(ctx)`` that reads what earlier steps left in ``ctx`` (a
plain dict) and writes its outputs under ``ctx["out"]``. :data:`STEPS` lists them in order.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from pathlib import Path

from slipnet.reports.writer import write_summary


def _step_specimen(ctx: dict) -> None:
    from slipnet.synthetic import demo_specimen

    spec = demo_specimen(seed=ctx["seed"], quick=ctx["quick"])
    ctx["specimen"] = spec
    ctx["omap"] = spec.omap
    ny, nx = spec.omap.shape
    ctx.setdefault("notes", []).extend([
        f"Specimen: {spec.name}, {ny} × {nx} points at {spec.omap.step:g} µm, {spec.n_grains} grains.",
        spec.description,
        "",
    ])


def _step_files(ctx: dict) -> None:
    from slipnet.reports.maps import write_map_files

    spec, out = ctx["specimen"], ctx["out"]
    files = list(write_map_files(spec.omap, out, notch_root=spec.notch_root,
                                 title=f"{spec.name}: IPF colouring, normal direction z").values())
    ctx["files"] = files
    ctx.setdefault("notes", []).append("Map files: " + ", ".join(p.name for p in files) + ".")


def _step_grains(ctx: dict) -> None:
    """Rebuild the demo grains and boundaries; tables, graph, labels and pictures under grains/."""
    from slipnet.grains import build_grain_graph
    from slipnet.reports.grains import write_grains

    gg = build_grain_graph(ctx["omap"], 15.0, subgrain_deg=2.0, min_grain_size=4)
    ctx["grain_graph"] = gg
    write_grains(gg, Path(ctx["out"]) / "grains")
    cls = gg.boundaries["boundary_class"]
    ctx.setdefault("notes", []).append(
        f"Grains: {gg.n_grains} grains, {len(gg.boundaries)} boundaries ({int(cls.str.startswith('sigma').sum())} "
        f"CSL, {int((cls == 'low_angle').sum())} low-angle), {len(gg.triple_junctions)} triple junctions (grains/).")


def _step_slip(ctx: dict) -> None:
    """Schmid factors, slip traces, Taylor factors and slip transmission for the demo grains."""
    from slipnet.reports.slip import write_slip
    from slipnet.slip import slip_activity

    gg = ctx.get("grain_graph")
    if gg is None:
        ctx.setdefault("notes", []).append("Slip: skipped (needs the grains step).")
        return
    act = slip_activity(gg, ctx["specimen"].load_axis)
    write_slip(act, gg, Path(ctx["out"]) / "slip", title="Slip activity (demo)")
    ctx["systems"] = act.systems
    ctx["slip"] = act
    gt, tt = act.grains, act.transmission
    ctx.setdefault("notes", []).append(
        f"Slip: {int(gt['schmid_max'].notna().sum())} grains, mean largest Schmid factor "
        f"{gt['schmid_max'].mean():.3f}, mean Taylor factor {gt['taylor_factor'].mean():.2f}; "
        f"{len(tt) // 2} boundaries, median transmission score {tt['transmission_score'].median():.2f} (slip/).")


def _step_stress(ctx: dict) -> None:
    """Full-field elastic stress on the demo map: local Schmid factors, notch-root concentration."""
    from slipnet.reports.stress import write_stress
    from slipnet.stress import solve_elastic, stress_concentration

    omap, spec = ctx.get("omap"), ctx.get("specimen")
    if omap is None or spec is None:
        ctx.setdefault("notes", []).append("Stress: skipped (needs the specimen).")
        return
    load = spec.load_axis if getattr(spec, "load_axis", None) is not None else (0.0, 1.0, 0.0)
    # the notch stays a compliant hole; specks of bad indexing take the nearest orientation
    field = solve_elastic(omap, load, stress=200.0, tol=1e-5, unindexed="auto")
    ctx["stress_field"] = field
    root = getattr(spec, "notch_root", None)
    write_stress(field, Path(ctx["out"]) / "stress", ctx.get("grain_graph"), ctx.get("systems"),
                 title="Local stresses (demo)", notch_root=root, radius_um=6.0 * omap.step)
    conc = None if root is None else stress_concentration(field, root[0], root[1], 6.0 * omap.step)
    ctx.setdefault("notes", []).append(
        f"Stress: full-field elastic solve in {field.iterations} iterations (residual {field.residual:.1e}), "
        f"apparent modulus {field.apparent_modulus:.0f} GPa"
        + (f", notch-root concentration {conc['concentration']:.2f}" if conc else "")
        + " (stress/; periodic columnar elastic model)."
    )


def _step_forecast(ctx: dict) -> None:
    """Forecast the crack path from the demo notch root: barriers, sites, a modest Monte Carlo."""
    from slipnet.forecast import forecast_crack
    from slipnet.reports.forecast import write_forecast

    gg = ctx.get("grain_graph")
    spec = ctx.get("specimen")
    if gg is None or spec is None or getattr(spec, "notch_root", None) is None:
        ctx.setdefault("notes", []).append("Forecast: skipped (needs the grains step and a notch).")
        return
    load = spec.load_axis if getattr(spec, "load_axis", None) is not None else (0.0, 1.0, 0.0)
    horizon = 0.6 * (gg.omap.extent[1] - gg.omap.extent[0])
    fc = forecast_crack(gg, spec.notch_root, spec.notch_direction, load, horizon, stress_amplitude=200.0,
                        stress_ratio=-1.0, systems=ctx.get("systems"), stress_field=ctx.get("stress_field"),
                        samples=8 if ctx["quick"] else 40, seed=ctx["seed"])
    write_forecast(fc, Path(ctx["out"]) / "forecast", gg, title="Demo crack forecast from the notch root")
    ctx["forecast"] = fc
    top = fc.barriers.iloc[0] if len(fc.barriers) else None
    ctx.setdefault("notes", []).append(
        f"Forecast: path {fc.length_um:.0f} µm through {fc.path['grain'].nunique() if len(fc.path) else 0} grains "
        f"(stopped: {fc.stop_reason}); {len(fc.barriers)} barriers"
        + (f", strongest boundary {int(top['boundary_id'])} at {top['distance_um']:.0f} µm" if top is not None else "")
        + f"; {len(fc.sites)} localisation sites (forecast/).")


def _step_growth(ctx: dict) -> None:
    from slipnet.growth import simulate_growth
    from slipnet.reports.growth import write_growth

    fc = ctx.get("forecast")
    if fc is None or len(getattr(fc, "path", ())) == 0:
        ctx.setdefault("notes", []).append("Growth: skipped (no forecast path to grow along).")
        return
    amplitude = float((fc.settings or {}).get("stress_amplitude_mpa", 200.0))
    res = simulate_growth(fc, amplitude, seed=ctx["seed"], n_points=800 if ctx["quick"] else 2000)
    gg = next((ctx[k] for k in ("gg", "grain_graph", "grains") if hasattr(ctx.get(k), "labels")), None)
    write_growth(res, ctx["out"] / "growth", gg)
    ctx["growth"] = res
    arrest = (f"arrest at {res.arrest_length_um:.0f} µm" if res.arrest_length_um < float("inf")
              else "no arrest along the path")
    ctx.setdefault("notes", []).append(
        f"Growth: {res.path.n_barriers} barriers on the path, {len(res.dips)} predicted rate dips, {arrest} at "
        f"σ_a = {amplitude:g} MPa (growth/).")


def _step_notch(ctx: dict) -> None:
    """Where else could the notch go? Rank positions along the uncut right edge of the coupon."""
    from slipnet.notch import plan_notch
    from slipnet.reports.notch import write_plan

    gg = ctx.get("grain_graph")
    spec = ctx["specimen"]
    if gg is None:
        ctx.setdefault("notes", []).append("Notch plan: skipped (needs the grains step).")
        return
    quick = ctx["quick"]
    # a notch cut from the right edge runs along x, across the load axis (y): it opens in mode I
    plan = plan_notch(gg, "right", spec.load_axis, spacing_um=80.0 if quick else 40.0, depth_um=60.0,
                      root_radius_um=15.0, opening_deg=45.0, window_um=200.0, crack_sizes_um=(10.0, 30.0),
                      samples=3 if quick else 8, seed=ctx["seed"], scheduler="synchronous")
    write_plan(plan, gg, Path(ctx["out"]) / "notch")
    ctx["notch_plan"] = plan
    best = plan.table.iloc[0]
    ctx.setdefault("notes", []).append(
        f"Notch plan: {len(plan.table)} candidate positions along the right edge; best root at "
        f"({best['root_x_um']:.0f}, {best['root_y_um']:.0f}) µm, plan score {best['plan_score']:.2f} (notch/).")


def _step_compare(ctx: dict) -> None:
    """Score the forecast against SYNTHETIC measurements the demo invents from its own scenario."""
    import pandas as pd

    from slipnet.compare import compare_forecast, demo_measurement, fit_transform
    from slipnet.io import write_strain
    from slipnet.reports.compare import write_comparison
    from slipnet.reports.writer import write_table

    if ctx.get("grain_graph") is None or ctx.get("forecast") is None:
        ctx.setdefault("notes", []).append("Compare: skipped (needs the grains and forecast steps).")
        return
    folder = Path(ctx["out"]) / "compare"
    spec = ctx.get("specimen")
    load_axis = getattr(spec, "load_axis", None)
    if load_axis is None:
        load_axis = (1.0, 0.0, 0.0)
    meas = demo_measurement(ctx["grain_graph"], ctx["forecast"], ctx.get("growth"), load_axis=load_axis,
                            seed=ctx["seed"])
    sm = meas.strain
    # the inputs a user would bring, written in our documented formats
    write_strain(sm.series, folder / "measured_strain_synthetic.npz")
    write_table(pd.DataFrame({"strain_x_um": sm.strain_points[:, 0], "strain_y_um": sm.strain_points[:, 1],
                              "map_x_um": sm.map_points[:, 0], "map_y_um": sm.map_points[:, 1]}),
                folder / "control_points_synthetic.csv")
    write_table(meas.growth_record, folder / "growth_record_synthetic.csv")
    transform = fit_transform(sm.strain_points, sm.map_points, "affine")
    comp = compare_forecast(sm.series, forecast=ctx["forecast"], gg=ctx["grain_graph"],
                            transform=transform, window=5, peak_distance_um=4.0 * ctx["omap"].step,
                            site_tol_um=3.0 * ctx["omap"].step, path_tol_um=3.0 * ctx["omap"].step,
                            measured_path=meas.measured_path, load_axis=load_axis,
                            growth_record=meas.growth_record, growth=ctx.get("growth"),
                            dip_prominence=0.05, dip_tol_um=3.0 * ctx["omap"].step, max_sites=12)
    write_comparison(comp, folder, title="Forecast against SYNTHETIC measurements")
    ctx["comparison"] = comp
    sc = comp.scores
    ctx.setdefault("notes", []).append(
        f"Compare (against SYNTHETIC measurements): registration RMS {transform.rms:.2f} µm, sites F1 "
        f"{sc.get('sites_f1', float('nan')):.2f}, grains ROC AUC {sc.get('grains_roc_auc', float('nan')):.2f}, "
        f"dips hit {sc.get('dips_hits', 0)} (compare/).")


STEPS: list[tuple[str, Callable[[dict], None]]] = [
    ("specimen", _step_specimen),
    ("files", _step_files),
    ("grains", _step_grains),
    ("slip", _step_slip),
    ("stress", _step_stress),
    ("forecast", _step_forecast),
    ("growth", _step_growth),
    ("notch", _step_notch),
    ("compare", _step_compare),
]


def run_demo(out: str | os.PathLike = "slipnet-demo", *, seed: int = 7, quick: bool = False) -> dict:
    """Run every demo step, writing into ``out``; returns the context dict of results.

    Parameters
    ----------
    out
        Output folder (created if missing).
    seed
        Seed of the synthetic specimen and of every random step.
    quick
        A smaller specimen and fewer Monte Carlo samples.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    ctx: dict = {"out": out, "seed": int(seed), "quick": bool(quick), "log": []}
    for name, step in STEPS:
        t0 = time.perf_counter()
        step(ctx)
        ctx["log"].append(f"- {name}: {time.perf_counter() - t0:.1f} s")
    write_summary(out, "slipnet demo",
                  ["Synthetic demo specimen (invented data).", "", *ctx.get("notes", []), "", "Steps:", *ctx["log"]])
    return ctx
