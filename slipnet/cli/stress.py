"""``slipnet stress``: local stresses from a full-field elastic (optionally crystal-plastic) solve."""

from __future__ import annotations

from slipnet.cli._common import grain_graph_from_args, output_run, read_map_from_args


def add(sub, parents) -> None:
    p = sub.add_parser(
        "stress", parents=[parents.map, parents.cleanup, parents.load, parents.output],
        help="local stresses from a full-field elastic (optionally crystal-plastic) solve on the map",
        description="Solve for the local stress in IN taken as a periodic cell of columnar grains under a "
        "uniaxial load, then write stress and local Schmid factor pictures, a per-grain table and a summary "
        "(with the model assumptions) into --out.",
    )
    p.add_argument("input", metavar="IN", help="orientation map file")
    p.add_argument("--stress", type=float, default=100.0, help="applied uniaxial stress, MPa (default 100)")
    p.add_argument("--tol", type=float, default=1e-6, help="normalised equilibrium residual to reach (default 1e-6)")
    p.add_argument("--max-iter", type=int, default=1000, help="most solver iterations (default 1000)")
    p.add_argument("--scheme", choices=("rotated", "fourier"), default="rotated",
                   help="discretisation (default rotated finite differences)")
    p.add_argument("--unindexed", choices=("auto", "compliant", "nearest"), default="auto",
                   help="unindexed points: compliant holes, nearest orientation, or auto by cluster size (default)")
    p.add_argument("--compliant-ratio", type=float, default=1e-3,
                   help="stiffness of holes/notch relative to the matrix (default 0.001)")
    p.add_argument("--concentration-at", nargs=2, type=float, metavar=("X", "Y"),
                   help="point (µm) around which to report the stress concentration, e.g. the notch root")
    p.add_argument("--search-radius", type=float, metavar="UM",
                   help="radius of that search, µm (default 5 steps)")
    p.add_argument("--plastic", action="store_true",
                   help="monotonic crystal plasticity: ramp to --stress with the implicit solver of --cyclic "
                   "(its monotonic special case) and write its outputs (accumulated slip, FIP bands, grain responses)")
    p.add_argument("--crss-mpa", type=float, default=90.0,
                   help="initial critical resolved shear stress, MPa (default 90)")
    p.add_argument("--increments", type=int, default=6,
                   help="fewest load increments of the ramp with --plastic (more when slip needs them; default 6)")
    g = p.add_argument_group("cyclic crystal plasticity")
    g.add_argument("--cyclic", action="store_true",
                   help="cyclic crystal plasticity instead: --stress is the stress amplitude; writes ranked FIP slip "
                   "bands, grain responses (shakedown/ratcheting), the hysteresis loop and the fields")
    g.add_argument("--ratio", type=float, default=-1.0, help="load ratio R = min/max (default -1)")
    g.add_argument("--cycles", type=int, default=3, help="cycles after the first loading (default 3)")
    g.add_argument("--frequency", type=float, default=1.0, help="loading frequency, Hz (default 1)")
    g.add_argument("--crack", nargs="+", type=float, metavar="XY",
                   help="crack polyline: x1 y1 x2 y2 ... µm, from the mouth to the tip (cut in as a slit)")
    g.add_argument("--free-edge", nargs="+", choices=("left", "right", "top", "bottom"), default=(),
                   help="map edges that are free surfaces (e.g. the notched edge); they must run along the load")
    g.add_argument("--buffer-edge", nargs="+", choices=("left", "right", "top", "bottom"), default=(),
                   help="map edges beyond which an isotropic elastic buffer separates the map from its periodic copy")
    g.add_argument("--boundary-width", type=float, default=0.0,
                   help="width of the boundary layer that resists slip by (1 - m'), µm (default 0: none)")
    g.add_argument("--boundary-strength", type=float, default=50.0,
                   help="largest resistance rise in that layer, MPa (default 50)")
    g.add_argument("--max-newton", type=int, default=12, help="global Newton iterations per increment (default 12)")
    g.add_argument("--max-cutbacks", type=int, default=8, help="cut-backs of one increment (default 8)")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.errors import ParameterError
    from slipnet.reports.stress import write_stress
    from slipnet.stress import solve_elastic, stress_concentration

    if args.plastic and args.cyclic:
        raise ParameterError("--plastic (a monotonic ramp) and --cyclic (cycles) exclude each other; give one")
    with output_run(args, args.input) as run:
        omap = read_map_from_args(args, args.input)
        if args.cyclic or args.plastic:
            return _run_cyclic(args, omap, run.folder, monotonic=args.plastic)
        field = solve_elastic(omap, args.load_axis, args.stress, tol=args.tol, max_iter=args.max_iter,
                              scheme=args.scheme, unindexed=args.unindexed, compliant_ratio=args.compliant_ratio)
        gg = grain_graph_from_args(args, args.input)
        write_stress(field, run.folder, gg, notch_root=args.concentration_at, radius_um=args.search_radius,
                     figures=not args.no_figures)
    out = run.folder
    print(f"stress: {field.iterations} iterations, residual {field.residual:.2e}, apparent modulus "
          f"{field.apparent_modulus:.1f} GPa along the load axis "
          f"({', '.join(f'{v:.3f}' for v in field.load_axis)})")
    if args.concentration_at is not None:
        r = 5.0 * omap.step if args.search_radius is None else args.search_radius
        c = stress_concentration(field, args.concentration_at[0], args.concentration_at[1], r)
        print(f"stress: concentration {c['concentration']:.2f} at ({c['x_um']:.1f}, {c['y_um']:.1f}) µm")
    print(f"assumptions: {field.assumptions}")
    print(f"outputs written to {out}")
    return 0


def _run_cyclic(args, omap, out, *, monotonic: bool = False) -> int:
    from slipnet.errors import ParameterError
    from slipnet.reports.cyclic import write_cyclic
    from slipnet.stress import CyclicMaterial, solve_cyclic, solve_monotonic

    crack = None
    if args.crack:
        if len(args.crack) < 4 or len(args.crack) % 2:
            raise ParameterError("--crack should give x y pairs (at least two vertices); "
                                 f"got {len(args.crack)} numbers")
        crack = [args.crack[i:i + 2] for i in range(0, len(args.crack), 2)]
    gg = grain_graph_from_args(args, args.input)
    common = {"crack": crack, "free_edges": args.free_edge, "buffer_edges": args.buffer_edge, "grains": gg,
              "material": CyclicMaterial(crss_mpa=args.crss_mpa), "boundary_width_um": args.boundary_width,
              "boundary_strength_mpa": args.boundary_strength, "tol": max(args.tol, 1e-5),
              "max_iter": max(args.max_iter, 3000), "max_newton": args.max_newton, "max_cutbacks": args.max_cutbacks,
              "scheme": args.scheme, "unindexed": args.unindexed, "compliant_ratio": args.compliant_ratio,
              "progress": True}
    if monotonic:
        if isinstance(args.increments, bool) or args.increments < 1:
            raise ParameterError(f"--increments should be a positive integer; got {args.increments!r}")
        result = solve_monotonic(omap, args.load_axis, args.stress, min_increments=args.increments, **common)
    else:
        result = solve_cyclic(omap, args.load_axis, stress_amplitude=args.stress, ratio=args.ratio,
                              cycles=args.cycles, frequency_hz=args.frequency, **common)
    write_cyclic(result, out, figures=not args.no_figures)
    s = result.settings
    print(f"cyclic: {s['increments']} increments, {s['newton_iterations']} Newton / {s['cg_iterations']} CG "
          f"iterations, {s['cutbacks']} cut-backs; largest FIP {result.fip.max():.3e}")
    print(f"assumptions: {result.assumptions}")
    print(f"outputs written to {out}")
    return 0
