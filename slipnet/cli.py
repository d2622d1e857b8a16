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


# (name, register function); each register function sets ``func`` on its parser.
_SUBCOMMANDS: list[tuple[str, Callable]] = [
    ("demo", _add_demo),
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
