"""``slipnet grains``: rebuild grains and boundaries as a graph and write them."""

from __future__ import annotations

from slipnet.cli._common import grain_graph_from_args, output_run


def add(sub, parents) -> None:
    p = sub.add_parser(
        "grains", parents=[parents.map, parents.cleanup, parents.output],
        help="rebuild grains and boundaries as a graph: tables, GraphML, label image and pictures",
        description="Read IN, rebuild grains (neighbours join below --threshold), and write grain, boundary "
        "and triple-junction tables (CSV), the grain graph (GraphML), the label image (.npy), a grain map "
        "with boundaries by class and a misorientation histogram into --out.",
    )
    p.add_argument("input", metavar="IN", nargs="?", help="orientation map file (omit with --graph)")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.reports.grains import write_grains

    with output_run(args, args.input) as run:
        gg = grain_graph_from_args(args, args.input, progress=True)
        write_grains(gg, run.folder, figures=not args.no_figures, progress=True)
    out = run.folder
    print(f"grains: {gg.n_grains} grains, {len(gg.boundaries)} boundaries, {len(gg.triple_junctions)} triple "
          f"junctions; outputs written to {out}")
    return 0
