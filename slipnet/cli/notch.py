"""``slipnet notch``: rank candidate notch positions along a specimen edge."""

from __future__ import annotations

from slipnet.cli._common import grain_graph_from_args, name_value_pairs, output_run, print_warning, read_map_from_args
from slipnet.errors import ParameterError


def add(sub, parents) -> None:
    p = sub.add_parser("notch", parents=[parents.map, parents.cleanup, parents.output],
                       help="rank candidate notch positions along a specimen edge",
                       description="Rank candidate notch positions along an edge of IN (or run a TOML study "
                       "file, or one study over a folder of maps) and write the plan into --out.")
    p.add_argument("map", nargs="?", help="orientation map file (not needed with --study or --graph)")
    p.add_argument("--study", help="TOML study file recording the whole plan (see docs and examples/notch)")
    p.add_argument("--batch", metavar="FOLDER", help="run --study over every map in FOLDER")
    p.add_argument("--side", choices=["left", "right", "top", "bottom"], help="map side to notch")
    p.add_argument("--edge", type=float, nargs="+", metavar="X Y",
                   help="edge polyline as x1 y1 x2 y2 ... in µm (instead of --side)")
    p.add_argument("--load-axis", type=float, nargs=3, metavar=("X", "Y", "Z"),
                   help="uniaxial load axis in the map frame (required unless --study gives it)")
    p.add_argument("--spacing", type=float, default=20.0, help="candidate spacing along the edge, µm (20)")
    p.add_argument("--depth", type=float, default=50.0, help="notch depth, µm (50)")
    p.add_argument("--root-radius", type=float, default=10.0, help="notch root radius, µm (10)")
    p.add_argument("--opening", type=float, default=0.0, help="V-notch opening angle, degrees (0: U notch)")
    p.add_argument("--full-field", action="store_true",
                   help="K_t from a full-field elastic solve per candidate instead of the chart fit (slower)")
    p.add_argument("--stress", type=float, default=200.0, help="nominal stress amplitude, MPa (200)")
    p.add_argument("--ratio", type=float, default=-1.0, help="stress ratio R (-1)")
    p.add_argument("--window", type=float, default=200.0, help="observation window along the path, µm (200)")
    p.add_argument("--crack-sizes", type=float, nargs="+", default=(5.0, 20.0), help="initial crack sizes, µm")
    p.add_argument("--objective", action="append", metavar="NAME=WEIGHT",
                   help="objective and weight (repeat); default initiation_drive=1 barrier_strength_in_window=1")
    p.add_argument("--pareto", action="store_true", help="rank by Pareto fronts instead of the weighted score")
    p.add_argument("--samples", type=int, default=0, help="Monte Carlo samples per candidate (0)")
    p.add_argument("--seed", type=int, default=0, help="seed of every random draw (0)")
    p.add_argument("--scheduler", default=None,
                   help="synchronous | threads | processes | tcp://host:port of a dask.distributed scheduler; "
                   "overrides the study's. A remote address is used only when named here, never from a study "
                   "file, and is announced: trusted machines only (its workers run the tasks and their results "
                   "are unpickled here)")
    p.add_argument("--workers", type=int, default=None, help="local workers (default: all cores)")
    p.set_defaults(func=run)


def _edge(args):
    if (args.side is None) == (args.edge is None):
        raise ParameterError("give exactly one of --side or --edge")
    if args.edge is None:
        return args.side
    if len(args.edge) < 4 or len(args.edge) % 2:
        raise ParameterError(f"--edge should be an even count (>= 4) of numbers x1 y1 x2 y2; got {args.edge}")
    return [args.edge[i:i + 2] for i in range(0, len(args.edge), 2)]


def run(args) -> int:
    from slipnet.notch import iter_batch, plan_notch, run_study
    from slipnet.reports.notch import write_batch, write_plan

    if args.batch and not args.study:
        raise ParameterError("--batch needs --study FILE")
    st = None
    if args.study:
        from slipnet.io import read_study

        st = read_study(args.study)
    # the study's own map is read too (unless a batch folder replaces it)
    inputs = (args.map, args.study, args.batch, None if st is None or args.batch else st.map_path)
    with output_run(args, *inputs) as run:
        out = run.folder
        if args.batch:
            files = write_batch(iter_batch(args.batch, st, scheduler=args.scheduler, progress=True), out,
                                figures=not args.no_figures)
        else:
            gg, plan = _plan(args, st, plan_notch, run_study)
            write_plan(plan, gg, out, figures=not args.no_figures)
    if args.batch:
        print(f"batch: {sum(1 for k in files if k.endswith('/summary'))} specimens planned; written to {out}")
        return 0
    best = plan.table.iloc[0]
    print(f"best notch root at x = {best['root_x_um']:.1f} µm, y = {best['root_y_um']:.1f} µm (plan score "
          f"{best['plan_score']:.3f}); load axis "
          f"({', '.join(f'{v:.3f}' for v in plan.settings.load_axis)}); plan written to {out}")
    return 0


def _plan(args, st, plan_notch, run_study):
    """The grain graph and the notch plan of a single specimen (a study file, or the options)."""
    if st is not None:
        from slipnet.grains import build_grain_graph

        if args.graph:
            gg = grain_graph_from_args(args, None)
        elif st.map_path is not None:
            # the study file records the clean-up it was planned with: it wins over the command line
            gg = build_grain_graph(read_map_from_args(args, str(st.map_path)), **st.grain_options)
        else:
            gg = grain_graph_from_args(args, args.map)
        # a remote --scheduler named on this command line is the user's consent; one in the file is refused
        return gg, run_study(st, gg=gg, scheduler=args.scheduler, progress=True)
    if args.load_axis is None:
        raise ParameterError("notch: give --load-axis X Y Z (the uniaxial load axis in the map frame)")
    gg = grain_graph_from_args(args, args.map)
    plan = plan_notch(gg, _edge(args), args.load_axis, spacing_um=args.spacing, stress_amplitude=args.stress,
                      stress_ratio=args.ratio, depth_um=args.depth, root_radius_um=args.root_radius,
                      opening_deg=args.opening, window_um=args.window, crack_sizes_um=args.crack_sizes,
                      objectives=name_value_pairs(args.objective, "--objective", "initiation_drive=1",
                                                  default=1.0) or None,
                      method="pareto" if args.pareto else "weighted", samples=args.samples, seed=args.seed,
                      concentration="full_field" if args.full_field else "peterson",
                      scheduler=args.scheduler or "synchronous", workers=args.workers, progress=True,
                      allow_remote=args.scheduler is not None)
    from slipnet.study.steps import notch_warnings

    notch_warnings(plan, print_warning)
    return gg, plan
