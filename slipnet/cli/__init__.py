"""Command line: parses arguments and calls the library; no computation lives here.

One module per subcommand (``slipnet.cli.<name>``) with ``add(sub, parents)`` to register its parser
and ``run(args)`` to call the library; the parent parsers for the map, clean-up, load, output and
local-stress options live in :mod:`slipnet.cli._common`, so an option means the same on every
command. Register a new subcommand in :data:`SUBCOMMANDS`.
"""

from __future__ import annotations

import argparse
import contextlib
import signal
import sys
from collections.abc import Iterator, Sequence

from slipnet import __version__
from slipnet.cautions import CAUTION
from slipnet.cli import compare, demo, forecast, grains, growth, notch, slip, stress, study, validate
from slipnet.cli import map as map_command
from slipnet.cli._common import parents
from slipnet.errors import SlipnetError

__all__ = ["SUBCOMMANDS", "build_parser", "main"]

#: Subcommand modules in the order of the pipeline.
SUBCOMMANDS = (study, demo, map_command, grains, slip, stress, forecast, growth, notch, compare, validate)


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


@contextlib.contextmanager
def _terminate_as_exit() -> Iterator[None]:
    """Turn SIGTERM (``kill PID``) into SystemExit, so an output run rolls back instead of dying mid-write."""
    def stop(signum, frame):
        raise SystemExit(128 + signum)

    try:
        previous = signal.signal(signal.SIGTERM, stop)
    except (ValueError, OSError):  # not the main thread, or no such signal here
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``slipnet`` console script.

    Returns 0 on success and 2 for an error slipnet explains (one line on stderr, no traceback),
    including a full disk or a read-only output folder; 130 when interrupted (Ctrl-C). A failed or
    interrupted command leaves its output folder as it was.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    args.argv = list(sys.argv[1:] if argv is None else argv)
    try:
        with _terminate_as_exit():
            return int(args.func(args) or 0)
    except SlipnetError as err:
        print(f"slipnet {args.command}: error: {err}", file=sys.stderr)
        return 2
    except OSError as err:  # an operating-system failure no step explained: still one line, no traceback
        print(f"slipnet {args.command}: error: {err}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"slipnet {args.command}: interrupted; its output folder was left as it was before the run",
              file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
