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
                             taylor=not args.no_taylor)
    print(f"slip: {len(res['grain_table'])} grains, {len(res['transmission_table']) // 2} boundaries; "
          f"outputs written to {args.out}")
    return 0


# (name, register function); each register function sets ``func`` on its parser.
_SUBCOMMANDS: list[tuple[str, Callable]] = [
    ("demo", _add_demo),
    ("map", _add_map),
    ("slip", _add_slip),
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
