"""Command line: parses arguments and calls the library; no computation lives here.

Each subcommand has a ``_add_<name>`` function that registers its parser and a ``_run_<name>``
function that calls the library. Register new subcommands in :data:`_SUBCOMMANDS`.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable, Sequence

from .cautions import CAUTION
from .errors import SlipnetError

DEFAULT_DEMO_FOLDER = "slipnet-demo"


def _add_demo(sub) -> None:
    p = sub.add_parser("demo", help="run the whole job on the built-in synthetic demo specimen")
    p.add_argument("--out", default=DEFAULT_DEMO_FOLDER, help=f"output folder (default: {DEFAULT_DEMO_FOLDER})")
    p.add_argument("--seed", type=int, default=7, help="seed of the synthetic specimen (default 7)")
    p.add_argument("--quick", action="store_true", help="smaller specimen and fewer samples, for a fast look")
    p.set_defaults(func=_run_demo)


def _run_demo(args) -> int:
    from .demo import run_demo

    run_demo(args.out, seed=args.seed, quick=args.quick)
    print(f"demo outputs written to {args.out}")
    return 0


def _add_map(sub) -> None:
    p = sub.add_parser(
        "map",
        help="convert an orientation map between formats, or print a summary of it",
        description="Read IN (slipnet text table, slipnet .npz bundle, or any file orix reads) and write OUT "
        "(.txt/.tsv text table or .npz bundle), and/or print a summary with --info.",
    )
    p.add_argument("input", metavar="IN", help="map file to read")
    p.add_argument("output", metavar="OUT", nargs="?", help="file to write (.txt, .tsv or .npz)")
    p.add_argument("--info", action="store_true", help="print shape, grid, step, phases and indexed fraction")
    p.add_argument(
        "--frame-rotation",
        metavar="ROT",
        help="rotation taking the recorded sample frame into the map frame: 'AXIS@DEG' (e.g. 1,0,0@180) "
        "or a quaternion 'w,x,y,z'",
    )
    p.add_argument("--quality-prop", metavar="NAME", help="orix property used as quality (files read by orix)")
    p.add_argument("--no-overwrite", action="store_true", help="refuse to replace an existing OUT")
    p.set_defaults(func=_run_map)


def _run_map(args) -> int:
    from .errors import ParameterError
    from .io import map_summary, read_map, write_map

    if args.output is None and not args.info:
        raise ParameterError("map: give an output file OUT, or --info to print a summary")
    omap = read_map(args.input, frame_rotation=args.frame_rotation, quality_prop=args.quality_prop)
    if args.info:
        print("\n".join(map_summary(omap)))
    if args.output is not None:
        path = write_map(omap, args.output, overwrite=not args.no_overwrite)
        print(f"map written to {path}")
    return 0


def _add_grains(sub) -> None:
    p = sub.add_parser(
        "grains",
        help="rebuild grains and boundaries as a graph: tables, GraphML, label image and pictures",
        description="Read IN, rebuild grains (neighbours join below --threshold), and write grain, boundary "
        "and triple-junction tables (CSV), the grain graph (GraphML), the label image (.npy), a grain map "
        "with boundaries by class and a misorientation histogram into --out.",
    )
    p.add_argument("input", metavar="IN", help="orientation map file")
    p.add_argument("--out", default="slipnet-grains", help="output folder (default: slipnet-grains)")
    p.add_argument("--threshold", type=float, default=15.0, help="grain boundary threshold, degrees (default 15)")
    p.add_argument("--subgrain", type=float, metavar="DEG", help="sub-grain threshold inside grains, degrees")
    p.add_argument("--min-quality", type=float, metavar="Q", help="leave out points with quality below Q")
    p.add_argument("--fill", action="store_true", help="fill unlabelled points from the majority of their neighbours")
    p.add_argument("--min-points", type=int, metavar="N", help="merge grains with fewer than N points")
    p.add_argument("--min-area", type=float, metavar="UM2", help="merge grains smaller than UM2 square micrometres")
    p.add_argument("--no-figures", action="store_true", help="skip the pictures")
    p.add_argument("--frame-rotation", metavar="ROT", help="as for 'slipnet map'")
    p.set_defaults(func=_run_grains)


def _run_grains(args) -> int:
    from .grains import build_grain_graph, write_grain_outputs
    from .io import read_map

    omap = read_map(args.input, frame_rotation=args.frame_rotation)
    gg = build_grain_graph(omap, threshold_deg=args.threshold, subgrain_deg=args.subgrain,
                           min_quality=args.min_quality, fill_unindexed=args.fill, min_grain_size=args.min_points,
                           min_grain_area_um2=args.min_area, progress=True)
    write_grain_outputs(gg, args.out, figures=not args.no_figures, progress=True)
    print(f"grains: {gg.n_grains} grains, {len(gg.boundaries)} boundaries, {len(gg.triple_junctions)} triple "
          f"junctions; outputs written to {args.out}")
    return 0


def _add_local_stress(p, amplitude: str) -> None:
    """Register ``--local-stress`` and ``--stress-tol`` on a subcommand that reads a map."""
    p.add_argument("--local-stress", action="store_true",
                   help="use local Schmid factors (grain means of τ / applied stress) from a full-field elastic "
                   f"solve on the map at {amplitude} instead of the uniform-stress ones; the summary states the "
                   "model's assumptions")
    p.add_argument("--stress-tol", type=float, default=1e-6,
                   help="equilibrium residual of that solve (default 1e-6)")


def _solve_local(args, omap, stress: float):
    """The local stress field for ``--local-stress`` (None without it)."""
    if not getattr(args, "local_stress", False):
        return None
    from .stress import solve_elastic

    field = solve_elastic(omap, args.load_axis, stress=stress, tol=args.stress_tol)
    print(f"local stress: {field.iterations} iterations, residual {field.residual:.2e}; "
          f"assumptions: {field.assumptions}")
    return field


def _add_slip(sub) -> None:
    p = sub.add_parser(
        "slip",
        help="Schmid factors, slip traces, Taylor factors and slip transmission per grain and boundary",
        description="Rebuild grains from IN, then write per-grain slip tables, slip traces, boundary "
        "transmission (m′, residual Burgers vector, Shen factor) and pictures into --out.",
    )
    p.add_argument("input", metavar="IN", help="orientation map file")
    p.add_argument("--out", default="slipnet-slip", help="output folder (default: slipnet-slip)")
    p.add_argument("--load-axis", nargs=3, type=float, default=(1.0, 0.0, 0.0), metavar=("X", "Y", "Z"),
                   help="uniaxial load axis in the map frame (default 1 0 0)")
    p.add_argument("--threshold", type=float, default=15.0, help="grain boundary threshold, degrees (default 15)")
    p.add_argument("--structure", choices=("bcc", "fcc"), help="crystal structure (default: of the first phase)")
    p.add_argument("--families", nargs="+", metavar="FAMILY",
                   help="slip families, e.g. '{110}<111>' '{112}<111>' (or 'all'); default {110}+{112} for BCC")
    p.add_argument("--crss", nargs="+", default=(), metavar="FAMILY=VALUE",
                   help="relative critical resolved shear stress per family, e.g. '{112}<111>=1.05'")
    p.add_argument("--twinning-asymmetry", type=float, default=1.0,
                   help="CRSS anti-twinning / twinning sense for {112}<111> (default 1)")
    p.add_argument("--inclination", type=float, default=90.0,
                   help="assumed boundary-plane inclination to the surface for the Shen factor, degrees (default 90)")
    p.add_argument("--no-taylor", action="store_true", help="skip the Taylor factor linear programmes")
    p.add_argument("--frame-rotation", metavar="ROT", help="as for 'slipnet map'")
    _add_local_stress(p, "100 MPa")
    p.set_defaults(func=_run_slip)


def _run_slip(args) -> int:
    from .errors import ParameterError
    from .grains import build_grain_graph
    from .io import read_map
    from .slip import slip_systems, write_slip_outputs

    crss = {}
    for item in args.crss:
        fam, sep, val = item.partition("=")
        try:
            crss[fam.strip()] = float(val)
        except ValueError as err:
            raise ParameterError(f"--crss should be FAMILY=VALUE, e.g. '{{112}}<111>=1.05'; got {item!r}") from err
        if not sep:
            raise ParameterError(f"--crss should be FAMILY=VALUE; got {item!r}")
    omap = read_map(args.input, frame_rotation=args.frame_rotation)
    structure = args.structure or omap.phases[0].structure
    families = args.families[0] if args.families and args.families == ["all"] else args.families
    systems = slip_systems(structure, families, crss, twinning_asymmetry=args.twinning_asymmetry)
    gg = build_grain_graph(omap, threshold_deg=args.threshold)
    res = write_slip_outputs(gg, args.load_axis, args.out, systems=systems, inclination_deg=args.inclination,
                             taylor=not args.no_taylor, stress_field=_solve_local(args, omap, 100.0))
    print(f"slip: {len(res['grain_table'])} grains, {len(res['transmission_table']) // 2} boundaries; "
          f"outputs written to {args.out}")
    return 0


def _add_stress(sub) -> None:
    p = sub.add_parser(
        "stress",
        help="local stresses from a full-field elastic (optionally crystal-plastic) solve on the map",
        description="Solve for the local stress in IN taken as a periodic cell of columnar grains under a "
        "uniaxial load, then write stress and local Schmid factor pictures, a per-grain table and a summary "
        "(with the model assumptions) into --out.",
    )
    p.add_argument("input", metavar="IN", help="orientation map file")
    p.add_argument("--out", default="slipnet-stress", help="output folder (default: slipnet-stress)")
    p.add_argument("--load-axis", nargs=3, type=float, default=(1.0, 0.0, 0.0), metavar=("X", "Y", "Z"),
                   help="uniaxial load axis in the map frame (default 1 0 0)")
    p.add_argument("--stress", type=float, default=100.0, help="applied uniaxial stress, MPa (default 100)")
    p.add_argument("--tol", type=float, default=1e-6, help="normalised equilibrium residual to reach (default 1e-6)")
    p.add_argument("--max-iter", type=int, default=1000, help="most solver iterations (default 1000)")
    p.add_argument("--scheme", choices=("rotated", "fourier"), default="rotated",
                   help="discretisation (default rotated finite differences)")
    p.add_argument("--unindexed", choices=("auto", "compliant", "nearest"), default="auto",
                   help="unindexed points: compliant holes, nearest orientation, or auto by cluster size (default)")
    p.add_argument("--compliant-ratio", type=float, default=1e-3,
                   help="stiffness of holes/notch relative to the matrix (default 0.001)")
    p.add_argument("--threshold", type=float, default=15.0,
                   help="grain boundary threshold for the per-grain table, degrees (default 15)")
    p.add_argument("--notch", nargs=2, type=float, metavar=("X", "Y"),
                   help="point (µm) around which to report the stress concentration, e.g. the notch root")
    p.add_argument("--radius", type=float, metavar="UM", help="radius of that search, µm (default 5 steps)")
    p.add_argument("--plastic", action="store_true",
                   help="add rate-dependent crystal plasticity, load ramped in --increments increments")
    p.add_argument("--crss", type=float, default=100.0,
                   help="initial critical resolved shear stress, MPa (default 100)")
    p.add_argument("--increments", type=int, default=10, help="load increments with --plastic (default 10)")
    p.add_argument("--no-figures", action="store_true", help="skip the pictures")
    p.add_argument("--frame-rotation", metavar="ROT", help="as for 'slipnet map'")
    p.set_defaults(func=_run_stress)


def _run_stress(args) -> int:
    from .grains import build_grain_graph
    from .io import read_map
    from .stress import solve_elastic, write_stress_outputs

    omap = read_map(args.input, frame_rotation=args.frame_rotation)
    common = {"tol": args.tol, "max_iter": args.max_iter, "scheme": args.scheme, "unindexed": args.unindexed,
              "compliant_ratio": args.compliant_ratio}
    plastic = None
    if args.plastic:
        from .plasticity import solve_plastic

        plastic = solve_plastic(omap, args.load_axis, args.stress, crss_mpa=args.crss, increments=args.increments,
                                **common)
        field = plastic.field
    else:
        field = solve_elastic(omap, args.load_axis, args.stress, **common)
    gg = build_grain_graph(omap, threshold_deg=args.threshold)
    res = write_stress_outputs(field, args.out, gg, notch_root=args.notch, radius_um=args.radius,
                               figures=not args.no_figures, plastic=plastic)
    print(f"stress: {field.iterations} iterations, residual {field.residual:.2e}, apparent modulus "
          f"{field.apparent_modulus:.1f} GPa along the load axis")
    if res["concentration"] is not None:
        c = res["concentration"]
        print(f"stress: concentration {c['concentration']:.2f} at ({c['x_um']:.1f}, {c['y_um']:.1f}) µm")
    print(f"assumptions: {field.assumptions}")
    print(f"outputs written to {args.out}")
    return 0


def _add_growth(sub) -> None:
    p = sub.add_parser(
        "growth",
        help="short-crack growth rate along a path: dips at barriers, crossings, arrest, cycles",
        description="Predict da/dN and cycles against crack length along a crack path, from a barrier table "
        "(CSV: position_um [, grain_factor, m_prime, twist_deg]) or from a saved forecast folder "
        "(forecast_path.csv, forecast_crossings.csv, forecast_barriers.csv, forecast_settings.json). "
        "With --record, first fit friction stress, coefficient and exponent to a measured growth record.",
    )
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--barriers", metavar="CSV", help="barrier table, one row per barrier along the path")
    src.add_argument("--forecast", metavar="DIR", help="folder written by 'slipnet forecast'")
    p.add_argument("--stress-amplitude", type=float, metavar="MPA",
                   help="stress amplitude σ_a = Δσ/2, MPa (default: the forecast's, else required)")
    p.add_argument("--out", default="slipnet-growth", help="output folder (default: slipnet-growth)")
    p.add_argument("--length", type=float, metavar="UM", help="path length for --barriers (default 1.5 × last barrier)")
    p.add_argument("--first-grain-factor", type=float, default=1.0,
                   help="orientation factor of the first grain for --barriers (default 1)")
    p.add_argument("--friction-stress", type=float, default=400.0, help="σ_f, MPa (default 400)")
    p.add_argument("--coefficient", type=float, default=0.05, help="C in da/dN = C·φ^m, µm/cycle (default 0.05)")
    p.add_argument("--exponent", type=float, default=1.5, help="m in da/dN = C·φ^m (default 1.5)")
    p.add_argument("--barrier-stress", type=float, default=500.0,
                   help="critical stress on the source beyond a neutral barrier, MPa (default 500)")
    p.add_argument("--source-distance", type=float, default=1.0,
                   help="source distance r₀ beyond a barrier, µm (default 1)")
    p.add_argument("--transmission-weight", type=float, default=0.5, help="k_m of the |m′| coupling (default 0.5)")
    p.add_argument("--twist-weight", type=float, default=0.5, help="k_α of the twist coupling (default 0.5)")
    p.add_argument("--initial-length", type=float, metavar="UM",
                   help="first crack length (default 0.1 × first barrier)")
    p.add_argument("--final-length", type=float, metavar="UM", help="last crack length (default the path length)")
    p.add_argument("--points", type=int, default=2000, help="crack lengths in the profile (default 2000)")
    p.add_argument("--samples", type=int, help="Monte Carlo draws of barrier strength for bands "
                   "(default: the forecast's sample count, else 0)")
    p.add_argument("--seed", type=int, default=0, help="seed of the draws (default 0)")
    p.add_argument("--record", metavar="CSV", help="measured record (columns crack_length_um, cycles) to calibrate on")
    p.add_argument("--life", type=float, metavar="CYCLES",
                   help="also find the stress amplitude that grows the crack to the final length in CYCLES")
    p.add_argument("--no-figures", action="store_true", help="write tables only")
    p.add_argument("--local-stress", action="store_true",
                   help="require local Schmid factors: growth reads no map, so it cannot solve for the stress itself; "
                   "the --forecast folder must come from 'slipnet forecast --local-stress' (its path table carries "
                   "the local factors and its settings the assumptions, which go into the summary); "
                   "not with --barriers")
    p.set_defaults(func=_run_growth)


def _run_growth(args) -> int:
    import json
    from pathlib import Path

    import pandas as pd

    from .errors import InputFileError, ParameterError
    from .growth import GrowthParameters, GrowthPath, calibrate, path_from_tables, simulate_growth, write_growth

    def read_csv(path, what):
        try:
            return pd.read_csv(path)
        except FileNotFoundError as err:
            raise InputFileError(f"{what} not found", path=str(path)) from err
        except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
            raise InputFileError(f"{what} is not a readable CSV table ({err})", path=str(path)) from err

    amplitude = args.stress_amplitude
    samples = args.samples
    seed = args.seed
    if args.barriers and args.local_stress:
        raise ParameterError("growth --local-stress needs --forecast DIR from 'slipnet forecast --local-stress'; "
                             "a barrier table has no map to solve the local stress on")
    if args.barriers:
        table = read_csv(args.barriers, "barrier table")
        if "position_um" not in table.columns:
            raise InputFileError("should have a 'position_um' column", path=args.barriers, column="position_um")
        path = GrowthPath.from_table(table, first_grain_factor=args.first_grain_factor, length_um=args.length,
                                     source=f"barrier table {args.barriers}")
    else:
        folder = Path(args.forecast)
        settings = {}
        if (folder / "forecast_settings.json").exists():
            settings = json.loads((folder / "forecast_settings.json").read_text(encoding="utf-8"))
        optional = {name: read_csv(folder / f"forecast_{name}.csv", f"forecast {name} table")
                    for name in ("crossings", "barriers") if (folder / f"forecast_{name}.csv").exists()}
        path = path_from_tables(read_csv(folder / "forecast_path.csv", "forecast path table"),
                                optional.get("barriers"), crossings=optional.get("crossings"),
                                offset_um=float(settings.get("initial_crack_um", 0.0) or 0.0),
                                source=str(folder / "forecast_path.csv"))
        if args.local_stress and not settings.get("stress_field"):
            raise ParameterError(f"growth --local-stress: the forecast in {folder} used uniform-stress Schmid factors; "
                                 "rerun 'slipnet forecast --local-stress' (growth reads no map to solve on)")
        if amplitude is None:
            amplitude = settings.get("stress_amplitude_mpa")
        if samples is None:
            samples = int(settings.get("samples", 0) or 0)
            seed = int(settings.get("seed", seed))
    if amplitude is None:
        raise ParameterError("growth: give --stress-amplitude (MPa)")
    params = GrowthParameters(friction_stress=args.friction_stress, coefficient=args.coefficient,
                              exponent=args.exponent, barrier_stress=args.barrier_stress,
                              source_distance=args.source_distance, transmission_weight=args.transmission_weight,
                              twist_weight=args.twist_weight)
    fit = None
    if args.record:
        rec = read_csv(args.record, "growth record")
        for col in ("crack_length_um", "cycles"):
            if col not in rec.columns:
                raise InputFileError(f"should have columns crack_length_um and cycles; missing {col!r}",
                                     path=args.record, column=col)
        fit = calibrate(rec["crack_length_um"], rec["cycles"], path, float(amplitude), initial=params)
        params = fit.params
    res = simulate_growth(path, float(amplitude), params=params, initial_length=args.initial_length,
                          final_length=args.final_length, n_points=args.points, samples=samples or 0, seed=seed)
    if args.life is not None:
        from dataclasses import replace

        from .growth import life_amplitude

        life = life_amplitude(path, args.life, params=params, initial_length=args.initial_length,
                              final_length=args.final_length)
        res = replace(res, notes=(*res.notes, f"amplitude for a life of {args.life:g} cycles to the final length: "
                                  f"{life:.1f} MPa"))
        print(f"growth: {life:.1f} MPa grows the crack to the final length in {args.life:g} cycles")
    if args.local_stress:
        from dataclasses import replace as _replace

        res = _replace(res, notes=(*res.notes, "Grain factors: LOCAL Schmid factors of the forecast's full-field "
                                   "stress solve. Local stress assumptions: "
                                   f"{settings.get('stress_assumptions') or 'not recorded by that forecast'}"))
    write_growth(res, args.out, figures=not args.no_figures, calibration=fit)
    arrest = (f"arrests at {res.arrest_length_um:.1f} µm" if res.arrest_length_um < float("inf")
              else "no arrest on the path")
    print(f"growth: {path.n_barriers} barriers, {len(res.dips)} dips, {arrest}; outputs written to {args.out}")
    return 0


def _add_compare(sub) -> None:
    p = sub.add_parser("compare", help="score a forecast against measured strain maps and a crack-growth record",
                       description="Register a measured displacement/strain series (our text, npz or TIFF "
                       "format; see docs/strain-format.md) to the orientation map by control points, measure "
                       "strain localisation and score the forecast sites, path, barriers and growth-rate dips.")
    p.add_argument("strain", help="measured displacement or strain file (text table, .npz or .tif)")
    p.add_argument("--points", help="control points CSV: strain_x_um, strain_y_um, map_x_um, map_y_um")
    p.add_argument("--kind", default="affine", choices=("similarity", "affine", "projective"),
                   help="registration transform (default affine)")
    p.add_argument("--map", dest="map_path", help="orientation map file (for grain and boundary statistics)")
    p.add_argument("--threshold", type=float, default=15.0, help="grain boundary angle, degrees (default 15)")
    p.add_argument("--forecast", help="folder written by 'slipnet forecast' (forecast_sites/path/barriers.csv)")
    p.add_argument("--sites", help="predicted sites CSV (x, y in µm, score)")
    p.add_argument("--path", help="predicted path CSV (x0, y0, x1, y1 in µm)")
    p.add_argument("--barriers", help="ranked barriers CSV (boundary_id, score)")
    p.add_argument("--measured-path", help="measured crack path CSV (x_um, y_um polyline or x0, y0, x1, y1)")
    p.add_argument("--record", help="crack-growth record CSV (cycles, crack_length_um)")
    p.add_argument("--growth", help="folder written by 'slipnet growth' (growth_dips.csv, growth_profile.csv)")
    p.add_argument("--load-axis", type=float, nargs=3, metavar=("X", "Y", "Z"),
                   help="load axis in the map frame, for the predicted slip traces of each grain")
    p.add_argument("--step", type=int, default=None, help="load step index to analyse (default the last)")
    p.add_argument("--method", default="small", choices=("small", "green-lagrange"), help="strain measure")
    p.add_argument("--window", type=int, default=None,
                   help="odd window (points) of a least-squares plane fit; default central differences")
    p.add_argument("--peak-threshold", type=float, default=None,
                   help="smallest shear strain peak, %% (default the 95th percentile of the field)")
    p.add_argument("--peak-distance", type=float, default=5.0, help="minimum peak separation, µm (default 5)")
    p.add_argument("--site-tol", type=float, default=5.0, help="site matching tolerance, µm (default 5)")
    p.add_argument("--path-tol", type=float, default=5.0, help="path distance tolerance, µm (default 5)")
    p.add_argument("--band-tol", type=float, default=10.0, help="band direction tolerance, degrees (default 10)")
    p.add_argument("--dip-tol", type=float, default=5.0, help="dip matching tolerance, µm of crack (default 5)")
    p.add_argument("--max-sites", type=int, default=None, help="score only the N highest-scored predicted sites")
    p.add_argument("--out", default="slipnet-compare", help="output folder (default: slipnet-compare)")
    p.add_argument("--no-figures", action="store_true", help="write tables and summary only")
    p.set_defaults(func=_run_compare)


def _run_compare(args) -> int:
    from .compare import compare_files, write_comparison

    comp = compare_files(
        args.strain, points=args.points, kind=args.kind, map_path=args.map_path, threshold_deg=args.threshold,
        forecast_folder=args.forecast, sites=args.sites, path=args.path, barriers=args.barriers,
        measured_path=args.measured_path, record=args.record, growth_folder=args.growth, load_axis=args.load_axis,
        step=args.step, strain_method=args.method, window=args.window,
        peak_threshold=None if args.peak_threshold is None else args.peak_threshold / 100.0,
        peak_distance_um=args.peak_distance, site_tol_um=args.site_tol, path_tol_um=args.path_tol,
        band_tol_deg=args.band_tol, dip_tol_um=args.dip_tol, max_sites=args.max_sites)
    write_comparison(comp, args.out, figures=not args.no_figures)
    if comp.transform is not None:
        print(f"compare: registration {comp.transform.kind}, RMS residual {comp.transform.rms:.3g} µm "
              f"over {len(comp.transform.residuals)} control points")
    else:
        print("compare: no control points given; strain and map frames taken as identical")
    for key in ("n_measured_peaks", "sites_f1", "grains_roc_auc", "path_mean_distance_um", "dips_hits"):
        if key in comp.scores:
            print(f"  {key}: {comp.scores[key]:.4g}")
    print(f"outputs written to {args.out}")
    return 0


def _add_notch(sub) -> None:
    p = sub.add_parser("notch", help="rank candidate notch positions along a specimen edge")
    p.add_argument("map", nargs="?", help="orientation map file (not needed with --study)")
    p.add_argument("--study", help="TOML study file recording the whole plan (see slipnet.notch_sweep)")
    p.add_argument("--batch", metavar="FOLDER", help="run --study over every map in FOLDER")
    p.add_argument("--side", choices=["left", "right", "top", "bottom"], help="map side to notch")
    p.add_argument("--edge", type=float, nargs="+", metavar="X Y",
                   help="edge polyline as x1 y1 x2 y2 ... in µm (instead of --side)")
    p.add_argument("--spacing", type=float, default=20.0, help="candidate spacing along the edge, µm (20)")
    p.add_argument("--depth", type=float, default=50.0, help="notch depth, µm (50)")
    p.add_argument("--radius", type=float, default=10.0, help="notch root radius, µm (10)")
    p.add_argument("--opening", type=float, default=0.0, help="V-notch opening angle, degrees (0: U notch)")
    p.add_argument("--full-field", action="store_true",
                   help="K_t from a full-field elastic solve per candidate instead of the chart fit (slower)")
    p.add_argument("--load-axis", type=float, nargs=3, default=(1.0, 0.0, 0.0), metavar=("LX", "LY", "LZ"),
                   help="load axis in the map frame (default 1 0 0)")
    p.add_argument("--stress", type=float, default=200.0, help="nominal stress amplitude, MPa (200)")
    p.add_argument("--ratio", type=float, default=-1.0, help="stress ratio R (-1)")
    p.add_argument("--window", type=float, default=200.0, help="observation window along the path, µm (200)")
    p.add_argument("--crack-sizes", type=float, nargs="+", default=(5.0, 20.0), help="initial crack sizes, µm")
    p.add_argument("--objective", action="append", metavar="NAME=WEIGHT",
                   help="objective and weight (repeat); default initiation_drive=1 barrier_strength_in_window=1")
    p.add_argument("--pareto", action="store_true", help="rank by Pareto fronts instead of the weighted score")
    p.add_argument("--samples", type=int, default=0, help="Monte Carlo samples per candidate (0)")
    p.add_argument("--seed", type=int, default=0, help="seed of every random draw (0)")
    p.add_argument("--threshold", type=float, default=15.0, help="grain boundary threshold, degrees (15)")
    p.add_argument("--scheduler", default=None,
                   help="synchronous | threads | processes | tcp://host:port of a dask.distributed scheduler")
    p.add_argument("--workers", type=int, default=None, help="local workers (default: all cores)")
    p.add_argument("--out", default="notch-plan", help="output folder (default notch-plan)")
    p.set_defaults(func=_run_notch)


def _parse_objectives(items) -> dict | None:
    from .errors import ParameterError

    if not items:
        return None
    out = {}
    for it in items:
        name, sep, val = it.partition("=")
        try:
            out[name.strip()] = float(val) if sep else 1.0
        except ValueError as err:
            raise ParameterError(f"--objective should be NAME=WEIGHT with a numeric weight; got {it!r}") from err
    return out


def _run_notch(args) -> int:
    from .errors import ParameterError
    from .notch_sweep import run_batch, run_study

    if args.batch:
        if not args.study:
            raise ParameterError("--batch needs --study FILE")
        table = run_batch(args.batch, args.study, args.out, scheduler=args.scheduler, progress=True)
        print(f"{len(table)} best candidates of the batch written to {args.out}")
        return 0
    if args.study:
        plan = run_study(args.study, args.out, scheduler=args.scheduler, progress=True)
    else:
        from .grains import build_grain_graph
        from .io import read_map
        from .notch import plan_notch
        from .notch_sweep import write_plan

        if not args.map:
            raise ParameterError("give a map file, or --study FILE")
        if (args.side is None) == (args.edge is None):
            raise ParameterError("give exactly one of --side or --edge")
        edge = args.side
        if args.edge is not None:
            if len(args.edge) < 4 or len(args.edge) % 2:
                raise ParameterError(f"--edge should be an even count (>= 4) of numbers x1 y1 x2 y2; got {args.edge}")
            edge = [args.edge[i:i + 2] for i in range(0, len(args.edge), 2)]
        gg = build_grain_graph(read_map(args.map), threshold_deg=args.threshold)
        plan = plan_notch(gg, edge, args.load_axis, spacing_um=args.spacing, stress_amplitude=args.stress,
                          stress_ratio=args.ratio, depth_um=args.depth, root_radius_um=args.radius,
                          opening_deg=args.opening, window_um=args.window, crack_sizes_um=args.crack_sizes,
                          objectives=_parse_objectives(args.objective),
                          method="pareto" if args.pareto else "weighted", samples=args.samples, seed=args.seed,
                          concentration="full_field" if args.full_field else "peterson",
                          scheduler=args.scheduler or "synchronous", workers=args.workers, progress=True)
        write_plan(plan, gg, args.out)
    best = plan.iloc[0]
    print(f"best notch root at x = {best['x']:.1f} µm, y = {best['y']:.1f} µm (score {best['score']:.3f}); "
          f"plan written to {args.out}")
    return 0


def _add_forecast(sub) -> None:
    p = sub.add_parser(
        "forecast",
        help="short-crack path ahead of a tip, ranked arrest barriers and strain-localisation sites",
        description="Rebuild grains from IN (an orientation map) or load a saved grain graph (--graph), then "
        "forecast the stage-I crack path from the tip, rank the boundaries it meets and the sites where "
        "slip bands pile up; write tables (CSV + JSON), pictures and a summary into --out.",
    )
    p.add_argument("input", metavar="IN", nargs="?", help="orientation map file (omit when --graph is given)")
    p.add_argument("--graph", metavar="FILE", help="grain graph saved earlier with --save-graph (trusted files only)")
    p.add_argument("--save-graph", metavar="FILE", help="also save the rebuilt grain graph here for later runs")
    p.add_argument("--out", default="slipnet-forecast", help="output folder (default: slipnet-forecast)")
    p.add_argument("--tip", nargs=2, type=float, metavar=("X", "Y"), help="crack tip in µm")
    p.add_argument("--crack", metavar="CSV", help="crack polyline: CSV with columns x_um, y_um (tip = last point)")
    p.add_argument("--direction", nargs=2, type=float, metavar=("DX", "DY"),
                   help="growth direction in the map frame (default: last crack segment)")
    p.add_argument("--load-axis", nargs=3, type=float, default=(0.0, 1.0, 0.0), metavar=("X", "Y", "Z"),
                   help="uniaxial load axis in the map frame (default 0 1 0)")
    p.add_argument("--stress", type=float, default=200.0, help="stress amplitude, MPa (default 200)")
    p.add_argument("--ratio", type=float, default=-1.0, help="stress ratio R = min/max (default -1)")
    p.add_argument("--horizon", type=float, default=200.0, help="path length to forecast, µm (default 200)")
    p.add_argument("--samples", type=int, default=0, help="Monte Carlo samples (default 0: none)")
    p.add_argument("--seed", type=int, default=0, help="Monte Carlo seed (default 0)")
    p.add_argument("--top-k", type=int, default=3, help="k of the top-k probabilities (default 3)")
    p.add_argument("--threshold", type=float, default=15.0, help="grain boundary threshold, degrees (default 15)")
    p.add_argument("--stage2-after", type=float, help="switch to stage II past this path length, µm")
    p.add_argument("--zigzag-tol", type=float, default=0.05, help="relative Schmid tolerance for zig-zag (0.05)")
    p.add_argument("--max-branches", type=int, default=4, help="alternative paths to follow (default 4)")
    p.add_argument("--inclination", type=float, default=0.0,
                   help="boundary-plane inclination from the vertical about its trace, degrees (default 0)")
    p.add_argument("--frame-rotation", metavar="ROT", help="as for 'slipnet map'")
    _add_local_stress(p, "the --stress amplitude (the map of --graph when given); the saved path table then "
                      "carries the local factors for 'slipnet growth'")
    p.set_defaults(func=_run_forecast)


def _run_forecast(args) -> int:
    import pickle

    from .errors import InputFileError, ParameterError
    from .forecast import forecast_crack, write_forecast

    if args.graph:
        try:
            with open(args.graph, "rb") as fh:
                gg = pickle.load(fh)
        except (OSError, pickle.UnpicklingError, EOFError) as err:
            raise InputFileError(f"cannot read a saved grain graph: {err}", path=args.graph) from err
        if not hasattr(gg, "labels") or not hasattr(gg, "mean_quats"):
            raise InputFileError("the file does not hold a slipnet grain graph", path=args.graph)
    elif args.input:
        from .grains import build_grain_graph
        from .io import read_map

        gg = build_grain_graph(read_map(args.input, frame_rotation=args.frame_rotation),
                               threshold_deg=args.threshold)
    else:
        raise ParameterError("forecast: give a map file IN or --graph FILE")
    if args.save_graph:
        from ._files import atomic_path

        with atomic_path(args.save_graph) as tmp, open(tmp, "wb") as fh:
            pickle.dump(gg, fh)
    if args.crack:
        import pandas as pd

        try:
            cr = pd.read_csv(args.crack)
            tip = cr[["x_um", "y_um"]].to_numpy(float)
        except (OSError, KeyError, ValueError) as err:
            raise InputFileError(f"crack polyline should be a CSV with columns x_um, y_um: {err}",
                                 path=args.crack) from err
    elif args.tip:
        tip = args.tip
    else:
        raise ParameterError("forecast: give the crack tip (--tip X Y) or a crack polyline (--crack CSV)")
    fc = forecast_crack(gg, tip, args.direction, args.load_axis, args.horizon, stress_amplitude=args.stress,
                        stress_ratio=args.ratio, samples=args.samples, seed=args.seed, top_k=args.top_k,
                        stage2_after_um=args.stage2_after, zigzag_tol=args.zigzag_tol,
                        max_branches=args.max_branches, inclination_deg=args.inclination,
                        stress_field=_solve_local(args, gg.omap, args.stress))
    write_forecast(fc, args.out, gg)
    print(f"forecast: path {fc.length_um:.1f} µm through {fc.path['grain'].nunique() if len(fc.path) else 0} "
          f"grains (stopped: {fc.stop_reason}), {len(fc.barriers)} barriers, {len(fc.sites)} sites; "
          f"outputs written to {args.out}")
    return 0


# (name, register function); each register function sets ``func`` on its parser.
_SUBCOMMANDS: list[tuple[str, Callable]] = [
    ("demo", _add_demo),
    ("map", _add_map),
    ("grains", _add_grains),
    ("slip", _add_slip),
    ("stress", _add_stress),
    ("forecast", _add_forecast),
    ("growth", _add_growth),
    ("notch", _add_notch),
    ("compare", _add_compare),
]


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand registered."""
    parser = argparse.ArgumentParser(
        prog="slipnet",
        description="Forecast short fatigue crack paths, arrest barriers and strain localisation "
        "from orientation maps.",
        epilog=CAUTION,
    )
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for _name, register in _SUBCOMMANDS:
        register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``slipnet`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except SlipnetError as err:
        print(f"slipnet {args.command}: error: {err}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
