"""``slipnet map``: convert an orientation map between formats, or print a summary of it."""

from __future__ import annotations

from slipnet.cli._common import output_run, read_map_from_args
from slipnet.errors import ParameterError


def add(sub, parents) -> None:
    p = sub.add_parser(
        "map", parents=[parents.map],
        help="convert an orientation map between formats, or print a summary of it",
        description="Read IN (slipnet text table, slipnet .npz bundle, or any file orix reads) and write OUT "
        "(.txt/.tsv text table or .npz bundle), and/or print a summary with --info.",
    )
    p.add_argument("input", metavar="IN", help="map file to read")
    p.add_argument("output", metavar="OUT", nargs="?", help="file to write (.txt, .tsv or .npz)")
    p.add_argument("--info", action="store_true", help="print shape, grid, step, phases and indexed fraction")
    p.add_argument("--no-overwrite", action="store_true", help="refuse to replace an existing OUT (OUT is never IN)")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.io import map_summary, write_map

    if args.output is None and not args.info:
        raise ParameterError("map: give an output file OUT, or --info to print a summary")
    if args.output is None:
        omap = read_map_from_args(args, args.input)
        print("\n".join(map_summary(omap)))
        return 0
    # one file out, no folder: the run checks OUT against IN and leaves OUT as it was on failure
    with output_run(args, args.input, outputs=[args.output], folder=None):
        omap = read_map_from_args(args, args.input)
        if args.info:
            print("\n".join(map_summary(omap)))
        path = write_map(omap, args.output, overwrite=not args.no_overwrite)
    print(f"map written to {path}")
    return 0
