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
                   help="add rate-dependent crystal plasticity, load ramped in --increments increments")
    p.add_argument("--crss-mpa", type=float, default=100.0,
                   help="initial critical resolved shear stress, MPa (default 100)")
    p.add_argument("--increments", type=int, default=10, help="load increments with --plastic (default 10)")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.reports.stress import write_stress
    from slipnet.stress import solve_elastic, solve_plastic, stress_concentration

    with output_run(args, args.input) as run:
        omap = read_map_from_args(args, args.input)
        common = {"tol": args.tol, "max_iter": args.max_iter, "scheme": args.scheme, "unindexed": args.unindexed,
                  "compliant_ratio": args.compliant_ratio}
        plastic = None
        if args.plastic:
            plastic = solve_plastic(omap, args.load_axis, args.stress, crss_mpa=args.crss_mpa,
                                    increments=args.increments, **common)
            field = plastic.field
        else:
            field = solve_elastic(omap, args.load_axis, args.stress, **common)
        gg = grain_graph_from_args(args, args.input)
        write_stress(field, run.folder, gg, notch_root=args.concentration_at, radius_um=args.search_radius,
                     figures=not args.no_figures, plastic=plastic)
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
