"""``slipnet forecast``: the short-crack path ahead of a tip, ranked barriers and localisation sites."""

from __future__ import annotations

from slipnet.cli._common import grain_graph_from_args, output_run, print_warning, solve_local_stress
from slipnet.errors import ParameterError


def add(sub, parents) -> None:
    p = sub.add_parser(
        "forecast", parents=[parents.map, parents.cleanup, parents.load, parents.output, parents.local_stress],
        help="short-crack path ahead of a tip, ranked arrest barriers and strain-localisation sites",
        description="Rebuild grains from IN (an orientation map) or load a saved grain graph (--graph), then "
        "forecast the stage-I crack path from the tip, rank the boundaries it meets by the fitted probability "
        "that slip drops across them, and map where strain will localise (a fitted probability field and its "
        "peaks); write tables (CSV + JSON), pictures and a summary into --out. By default an elastic solve with "
        "the notch and the crack (--crack) cut in feeds the forecast; --mode map skips it (the cheaper, weaker "
        "mode for quick sweeps) and --cyclic adds a short cyclic crystal-plasticity solve. With --local-stress a "
        "plain periodic elastic solve at the --stress amplitude is used instead of the crack-aware one.",
    )
    p.add_argument("input", metavar="IN", nargs="?", help="orientation map file (omit when --graph is given)")
    p.add_argument("--tip", nargs=2, type=float, metavar=("X", "Y"), help="crack tip in µm")
    p.add_argument("--crack", metavar="CSV", help="crack polyline: CSV with columns x_um, y_um (tip = last point)")
    p.add_argument("--direction", nargs=2, type=float, metavar=("DX", "DY"),
                   help="growth direction in the map frame (default: last crack segment)")
    p.add_argument("--stress", type=float, default=200.0, help="stress amplitude, MPa (default 200)")
    p.add_argument("--ratio", type=float, default=-1.0, help="stress ratio R = min/max (default -1)")
    p.add_argument("--horizon", type=float, default=200.0, help="path length to forecast, µm (default 200)")
    p.add_argument("--samples", type=int, default=0, help="Monte Carlo samples (default 0: none)")
    p.add_argument("--seed", type=int, default=0, help="Monte Carlo seed (default 0)")
    p.add_argument("--top-k", type=int, default=3, help="k of the top-k probabilities (default 3)")
    p.add_argument("--stage2-after", type=float, help="switch to stage II past this path length, µm")
    p.add_argument("--zigzag-tol", type=float, default=0.05, help="relative Schmid tolerance for zig-zag (0.05)")
    p.add_argument("--max-branches", type=int, default=4, help="alternative paths to follow (default 4)")
    p.add_argument("--mode", choices=["elastic", "map", "cyclic"], default="elastic",
                   help="what the field, sites and barriers come from: elastic (default: an elastic solve with notch "
                   "and crack cut in), map (no solve: cheaper, weaker), cyclic (adds cyclic crystal plasticity)")
    p.add_argument("--cyclic", action="store_true", help="the same as --mode cyclic")
    p.add_argument("--weights", metavar="JSON", help="fitted weights file (default: the shipped one)")
    p.add_argument("--free-edges", nargs="*", metavar="EDGE",
                   help="map edges that are free surfaces in the solve (default: edges a notch is cut into)")
    p.add_argument("--boundary-inclination", type=float, default=90.0,
                   help="assumed boundary-plane inclination to the surface, degrees (90 = perpendicular, default)")
    p.set_defaults(func=run)


def _tip(args):
    if args.crack:
        from slipnet.io import read_csv_table

        return read_csv_table(args.crack, ("x_um", "y_um"), "crack polyline")[["x_um", "y_um"]].to_numpy(float)
    if args.tip:
        return args.tip
    raise ParameterError("forecast: give the crack tip (--tip X Y) or a crack polyline (--crack CSV)")


def run(args) -> int:
    from slipnet.forecast import forecast_crack
    from slipnet.reports.forecast import write_forecast

    with output_run(args, args.input, args.crack, args.weights) as run:
        tip = _tip(args)
        gg = grain_graph_from_args(args, args.input)
        fc = forecast_crack(gg, tip, args.direction, args.load_axis, args.horizon, stress_amplitude=args.stress,
                            stress_ratio=args.ratio, samples=args.samples, seed=args.seed, top_k=args.top_k,
                            stage2_after_um=args.stage2_after, zigzag_tol=args.zigzag_tol,
                            max_branches=args.max_branches, boundary_inclination_deg=args.boundary_inclination,
                            mode="cyclic" if args.cyclic else args.mode, weights=args.weights,
                            free_edges="auto" if args.free_edges is None else tuple(args.free_edges),
                            stress_field=None if args.mode == "map" and not args.cyclic else
                            solve_local_stress(args, gg.omap, args.stress))
        write_forecast(fc, run.folder, gg, figures=not args.no_figures)
    from slipnet.study.steps import forecast_warnings

    forecast_warnings("", fc, float(args.horizon), print_warning, reach="horizon (--horizon)")
    out = run.folder
    print(f"forecast: path {fc.length_um:.1f} µm through {fc.path['grain'].nunique() if len(fc.path) else 0} "
          f"grains (stopped: {fc.stop_reason}), {len(fc.barriers)} barriers, {len(fc.sites)} sites; load axis "
          f"({', '.join(f'{v:.3f}' for v in fc.settings['load_axis'])}); {fc.settings['mode_note']}; outputs written "
          f"to {out}")
    return 0
