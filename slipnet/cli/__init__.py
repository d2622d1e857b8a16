"""Command line: parses arguments and calls the library; no computation lives here.

One module per subcommand (``slipnet.cli.<name>``) with ``add(sub, parents)`` to register its parser
and ``run(args)`` to call the library; the parent parsers for the map, clean-up, load, output and
local-stress options live in :mod:`slipnet.cli._common`, so an option means the same on every
command. Register a new subcommand in :data:`SUBCOMMANDS`.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from slipnet import __version__
from slipnet.cautions import CAUTION
from slipnet.cli import compare, demo, forecast, grains, growth, notch, slip, stress, validate
from slipnet.cli import map as map_command
from slipnet.cli._common import parents
from slipnet.errors import SlipnetError

__all__ = ["SUBCOMMANDS", "build_parser", "main"]

#: Subcommand modules in the order of the pipeline.
SUBCOMMANDS = (demo, map_command, grains, slip, stress, forecast, growth, notch, compare, validate)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand registered."""
    parser = argparse.ArgumentParser(
        prog="slipnet",
        description="Forecast short fatigue crack paths, arrest barriers and strain localisation "
        "from orientation maps.",
        epilog=CAUTION,
    )
    parser.add_argument("--version", action="version", version=f"slipnet {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    shared = parents()
    for module in SUBCOMMANDS:
        module.add(sub, shared)
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
