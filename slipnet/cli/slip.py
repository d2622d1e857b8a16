"""``slipnet slip``: Schmid factors, slip traces, Taylor factors and slip transmission."""

from __future__ import annotations

from slipnet.cli._common import grain_graph_from_args, name_value_pairs, output_run, solve_local_stress


def add(sub, parents) -> None:
    p = sub.add_parser(
        "slip", parents=[parents.map, parents.cleanup, parents.load, parents.output, parents.local_stress],
        help="Schmid factors, slip traces, Taylor factors and slip transmission per grain and boundary",
        description="Rebuild grains from IN, then write per-grain slip tables, slip traces, boundary "
        "transmission (m′, residual Burgers vector, Shen factor) and pictures into --out.",
    )
    p.add_argument("input", metavar="IN", nargs="?", help="orientation map file (omit with --graph)")
    p.add_argument("--structure", choices=("bcc", "fcc"), help="crystal structure (default: of the first phase)")
    p.add_argument("--families", nargs="+", metavar="FAMILY",
                   help="slip families, e.g. '{110}<111>' '{112}<111>' (or 'all'); default {110}+{112} for BCC")
    p.add_argument("--relative-crss", nargs="+", default=(), metavar="FAMILY=VALUE",
                   help="critical resolved shear stress per family relative to the others (dimensionless), "
                   "e.g. '{112}<111>=1.05'")
    p.add_argument("--twinning-asymmetry", type=float, default=1.0,
                   help="CRSS anti-twinning / twinning sense for {112}<111> (default 1)")
    p.add_argument("--boundary-inclination", type=float, default=90.0,
                   help="assumed boundary-plane inclination to the surface, degrees (90 = perpendicular, default)")
    p.add_argument("--no-taylor", action="store_true", help="skip the Taylor factor linear programmes")
    p.add_argument("--local-stress-mpa", type=float, default=100.0,
                   help="applied stress of the --local-stress solve, MPa (factors are per MPa; default 100)")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.crystal import slip_systems
    from slipnet.reports.slip import write_slip
    from slipnet.slip import slip_activity

    crss = name_value_pairs(args.relative_crss, "--relative-crss", "{112}<111>=1.05", form="FAMILY=VALUE")
    with output_run(args, args.input) as run:
        gg = grain_graph_from_args(args, args.input)
        structure = args.structure or gg.omap.phases[0].structure
        families = args.families[0] if args.families and args.families == ["all"] else args.families
        systems = slip_systems(structure, families, crss, twinning_asymmetry=args.twinning_asymmetry)
        act = slip_activity(gg, args.load_axis, systems, boundary_inclination_deg=args.boundary_inclination,
                            taylor=not args.no_taylor,
                            stress_field=solve_local_stress(args, gg.omap, args.local_stress_mpa))
        write_slip(act, gg, run.folder, figures=not args.no_figures)
    out = run.folder
    print(f"slip: {len(act.grains)} grains, {len(act.transmission) // 2} boundaries; load axis "
          f"({', '.join(f'{v:.3f}' for v in act.load_axis)}); outputs written to {out}")
    return 0
