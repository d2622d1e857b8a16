"""``slipnet study``: one study on one map — one answer, one report.

Options given on the command line override those of ``--study FILE``; the study records every
choice in ``<out>/study.toml``, so ``slipnet study --study <out>/study.toml`` runs it again.
"""

from __future__ import annotations

import os
from dataclasses import replace

from slipnet.cli._common import name_value_pairs, out_folder, phase_structures
from slipnet.cli.compare import add_points_reader_options, add_strain_reader_options, points_options, strain_options
from slipnet.cli.growth import add_record_options, record_options
from slipnet.errors import ParameterError

#: option dest → (options section, field).
_OVERRIDES = {
    "frame_rotation": ("map", "frame_rotation"), "quality_prop": ("map", "quality_prop"),
    "step_um": ("map", "step_um"),
    "threshold": ("grains", "threshold_deg"), "subgrain": ("grains", "subgrain_deg"),
    "min_quality": ("grains", "min_quality"), "min_points": ("grains", "min_grain_size"),
    "min_area": ("grains", "min_grain_area_um2"),
    "stress": ("load", "stress_amplitude_mpa"), "ratio": ("load", "stress_ratio"),
    "stress_tol": ("stress", "tol"),
    "spacing": ("notch", "spacing_um"), "depth": ("notch", "depth_um"), "root_radius": ("notch", "root_radius_um"),
    "opening": ("notch", "opening_deg"), "window": ("notch", "window_um"), "plan_samples": ("notch", "samples"),
    "scheduler": ("notch", "scheduler"), "workers": ("notch", "workers"),
    "candidates": ("forecast", "candidates"), "horizon": ("forecast", "horizon_um"),
    "samples": ("forecast", "samples"), "seed": ("forecast", "seed"),
    "inclination": ("forecast", "boundary_inclination_deg"),
    "friction_stress": ("growth", "friction_stress"), "coefficient": ("growth", "coefficient"),
    "exponent": ("growth", "exponent"), "barrier_stress": ("growth", "barrier_stress"),
    "initial_length": ("growth", "initial_length"), "final_length": ("growth", "final_length"),
    "growth_points": ("growth", "n_points"), "strength_scatter": ("growth", "strength_scatter"),
    "transform": ("compare", "transform"), "cut": ("compare", "notch"),
}
_PATHS = {"strain": ("compare", "strain"), "control_points": ("compare", "control_points"),
          "crack_path": ("compare", "crack_path"), "growth_record": ("compare", "growth_record")}


def add(sub, parents) -> None:
    p = sub.add_parser(
        "study", parents=[parents.map, parents.cleanup, parents.output],
        help="one study on a map: notch plan, forecasts from the best notches, one HTML report",
        description="Read and clean MAP, build grains, slip and the full-field stress, plan the notch along the "
        "chosen edges, forecast path, growth and uncertainty from each of the best candidate notches (and compare "
        "with measurements when given), then write report.html into --out. Every step is cached: running again with "
        "a changed later option reuses the earlier steps.")
    p.add_argument("map", nargs="?", help="orientation map file (or [specimen] map in --study)")
    p.add_argument("--study", help="TOML study file (a notch study file works too); the command line overrides it")
    g = p.add_argument_group("load")
    g.add_argument("--load-axis", type=float, nargs=3, metavar=("X", "Y", "Z"),
                   help="uniaxial load axis in the map frame (required unless --study gives it)")
    g.add_argument("--stress", type=float, help="stress amplitude, MPa (200)")
    g.add_argument("--ratio", type=float, help="stress ratio R (-1)")
    g.add_argument("--stress-tol", type=float, help="equilibrium tolerance of the full-field solve (1e-5)")
    g = p.add_argument_group("notch plan")
    g.add_argument("--side", action="append", choices=["left", "right", "top", "bottom"],
                   help="map side to notch (repeat for several)")
    g.add_argument("--edge", type=float, nargs="+", action="append", metavar="X Y",
                   help="edge polyline x1 y1 x2 y2 ... in µm (repeat for several)")
    g.add_argument("--spacing", type=float, help="candidate spacing along the edge, µm (20)")
    g.add_argument("--depth", type=float, help="notch depth, µm (50)")
    g.add_argument("--root-radius", type=float, help="notch root radius, µm (10)")
    g.add_argument("--opening", type=float, help="V-notch opening angle, degrees (0: U notch)")
    g.add_argument("--full-field", action="store_true", help="K_t from a full-field solve per candidate (slower)")
    g.add_argument("--window", type=float, help="observation window along the path, µm (200)")
    g.add_argument("--crack-sizes", type=float, nargs="+", help="initial crack sizes, µm (5 20)")
    g.add_argument("--objective", action="append", metavar="NAME=WEIGHT", help="plan objective and weight (repeat)")
    g.add_argument("--pareto", action="store_true", help="rank candidates by Pareto fronts")
    g.add_argument("--plan-samples", type=int, help="Monte Carlo samples per candidate in the plan (0)")
    g.add_argument("--scheduler", help="synchronous | threads | processes | tcp://host:port (notch sweep)")
    g.add_argument("--workers", type=int, help="local workers of the notch sweep")
    g = p.add_argument_group("forecast and growth")
    g.add_argument("--candidates", type=int, help="forecast from the best K candidate notches (3)")
    g.add_argument("--horizon", type=float, help="forecast path length ahead of each root, µm (300)")
    g.add_argument("--samples", type=int, help="Monte Carlo samples of each forecast (20)")
    g.add_argument("--seed", type=int, help="seed of the forecast and growth Monte Carlo (0)")
    g.add_argument("--inclination", type=float, help="assumed boundary-plane inclination, degrees (90)")
    g.add_argument("--friction-stress", type=float, help="growth model friction stress σ_f, MPa")
    g.add_argument("--coefficient", type=float, help="growth model coefficient C (µm/cycle)")
    g.add_argument("--exponent", type=float, help="growth model exponent m")
    g.add_argument("--barrier-stress", type=float, help="growth model barrier critical stress, MPa")
    g.add_argument("--initial-length", type=float, help="initial crack length, µm")
    g.add_argument("--final-length", type=float, help="final crack length, µm")
    g.add_argument("--growth-points", type=int, help="crack lengths of the growth profile (2000)")
    g.add_argument("--strength-scatter", type=float, help="log-normal σ of barrier strengths (0.2)")
    g = p.add_argument_group("comparison with measurements (optional)")
    g.add_argument("--strain", help="measured strain or displacement file")
    g.add_argument("--control-points", help="CSV of control points (strain_x_um, strain_y_um, map_x_um, map_y_um)")
    g.add_argument("--transform", choices=["affine", "projective"], help="registration kind (affine)")
    g.add_argument("--crack-path", help="CSV of the measured crack path (x_um, y_um)")
    g.add_argument("--growth-record", help="CSV crack-growth record (cycles, crack_length_um)")
    g.add_argument("--cut", type=int, help="rank of the candidate notch that was cut and measured (1)")
    g.add_argument("--calibrate", action="store_true", help="fit the growth constants to the growth record")
    add_strain_reader_options(p)
    add_points_reader_options(p)
    add_record_options(p, encoding=False)
    g = p.add_argument_group("run")
    g.add_argument("--quiet", action="store_true", help="no progress bar (warnings still printed)")
    g.add_argument("--no-cache", action="store_true", help="compute every step; store nothing under <out>/.cache")
    g.add_argument("--title", help="report title")
    p.set_defaults(func=run)


def options_from_args(args):
    """The :class:`~slipnet.study.StudyOptions` of a parsed command line (study file first, then overrides)."""
    from slipnet.study import StudyOptions, read_study_file

    if getattr(args, "graph", None):
        raise ParameterError("study: --graph is not used; the study builds its grain graph from the map and caches "
                             "it itself (use --save-graph to keep a copy)")
    opts = read_study_file(args.study) if args.study else StudyOptions()
    parts = {name: {} for name in ("map", "grains", "load", "notch", "forecast", "growth", "compare", "stress")}
    if args.map:
        parts["map"]["path"] = os.path.abspath(args.map)
    if args.load_axis is not None:
        parts["load"]["axis"] = tuple(args.load_axis)
    for dest, (sec, key) in _OVERRIDES.items():
        v = getattr(args, dest, None)
        if v is not None:
            parts[sec][key] = v
    for dest, (sec, key) in _PATHS.items():
        v = getattr(args, dest, None)
        if v is not None:
            parts[sec][key] = os.path.abspath(v)
    if args.phase:
        parts["map"]["structures"] = {**(opts.map.structures or {}), **phase_structures(args.phase)}
    if args.fill:
        parts["grains"]["fill_unindexed"] = True
    if args.calibrate:
        parts["compare"]["calibrate"] = True
    if args.full_field:
        parts["notch"]["concentration"] = "full_field"
    if args.pareto:
        parts["notch"]["method"] = "pareto"
    if args.crack_sizes:
        parts["notch"]["crack_sizes_um"] = tuple(args.crack_sizes)
    readers = {"strain_reader": strain_options(args), "points_reader": points_options(args),
               "record_reader": record_options(args)}
    for name, given in readers.items():
        given = {k: v for k, v in given.items() if v is not None}
        if given.get("sidecar"):
            given["sidecar"] = os.path.abspath(given["sidecar"])
        if given:
            parts["compare"][name] = {**(getattr(opts.compare, name) or {}), **given}
    if args.objective:
        parts["notch"]["weights"] = name_value_pairs(args.objective, "--objective", "initiation_drive=1", default=1.0)
    edges: list = list(args.side or [])
    for e in args.edge or []:
        if len(e) < 4 or len(e) % 2:
            raise ParameterError(f"--edge should be an even count (>= 4) of numbers x1 y1 x2 y2; got {e}")
        edges.append(tuple((e[i], e[i + 1]) for i in range(0, len(e), 2)))
    if edges:
        parts["notch"]["edges"] = tuple(edges)
    elif not args.study:
        raise ParameterError("study: give the edge(s) to notch: --side left|right|top|bottom (repeatable) or --edge "
                             "x1 y1 x2 y2 ... in µm, or a study file")
    if not args.study and args.load_axis is None:
        raise ParameterError("study: give --load-axis X Y Z (the uniaxial load axis in the map frame; there is no "
                             "default)")
    return replace(opts, **{k: replace(getattr(opts, k), **v) for k, v in parts.items() if v})


def run(args) -> int:
    from pathlib import Path

    from slipnet.cli._common import output_run
    from slipnet.labels import notch_label
    from slipnet.study import run_study

    opts = options_from_args(args)
    out = out_folder(args)
    axis = ", ".join(f"{v:g}" for v in opts.load.axis)
    print(f"study of {opts.map.path}; load axis ({axis}) in the map frame; writing into {out}")
    inputs = [opts.map.path, *(getattr(opts.compare, k, None) for k in ("strain", "control_points", "crack_path",
                                                                          "growth_record"))]
    if args.study and not Path(args.study).resolve().is_relative_to(Path(out).resolve()):
        inputs.append(args.study)  # a study.toml inside the folder is the earlier run's own record, rewritten
    # the step cache is a store reused run after run; a changed option revises the study in place
    with output_run(args, *inputs, keep=(".cache",), revise=True) as orun:
        result = run_study(opts, orun.folder, progress=not args.quiet, title=args.title or "slipnet study",
                           cache=not args.no_cache, figures=not args.no_figures,
                           on_warning=None if not args.quiet else _quiet_printer)
        if getattr(args, "save_graph", None):
            from slipnet.io import write_grain_graph

            write_grain_graph(result.gg, args.save_graph)
    best = result.recommended
    row = best.row
    reused = int((result.log["status"] == "reused").sum())
    print(f"recommended notch {notch_label(best.rank)}: edge ({row['edge_x_um']:.1f}, {row['edge_y_um']:.1f}) µm, root "
          f"({row['root_x_um']:.1f}, {row['root_y_um']:.1f}) µm; forecast path {best.forecast.length_um:.0f} µm")
    print(f"{len(result.log)} steps ({reused} reused from the cache), {len(result.warnings)} warnings; report: "
          f"{result.files['report']}")
    return 0


def _quiet_printer(step: str, message: str) -> None:
    import sys

    print(f"warning [{step}]: {message}", file=sys.stderr)
