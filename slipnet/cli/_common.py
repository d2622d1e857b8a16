"""Parent parsers and helpers shared by every subcommand: map, clean-up, load, output and stress options.

A subcommand module defines ``add(sub, parents)`` (register its parser) and ``run(args)`` (call the
library); nothing here computes anything beyond turning arguments into library inputs.

Every command that writes does so inside :func:`output_run` (a :class:`slipnet.runs.OutputRun`):
its outputs are checked against its inputs, the folder is locked while it runs, a failed run
leaves the folder as it was, and ``manifest.json`` is written last.
"""

from __future__ import annotations

import argparse
import sys

from slipnet.errors import ParameterError

__all__ = ["Parents", "grain_graph_from_args", "out_folder", "output_run", "parents", "phase_structures",
           "print_warning", "read_map_from_args", "solve_local_stress"]


class Parents:
    """The shared parent parsers (``argparse`` ``parents=``), built once per top-level parser."""

    def __init__(self) -> None:
        self.map = argparse.ArgumentParser(add_help=False)
        g = self.map.add_argument_group("map reading")
        g.add_argument("--frame-rotation", metavar="ROT",
                       help="rotation taking the recorded sample frame into the map frame: 'AXIS@DEG' "
                       "(e.g. 1,0,0@180) or a quaternion 'w,x,y,z'")
        g.add_argument("--quality-prop", metavar="NAME",
                       help="per-point property used as quality (files read through orix); default: the first of "
                       "confidence index, image quality, band contrast, band slope, pattern quality, mean angular "
                       "deviation (inverted), pattern fit (inverted) that the file has (docs/map-format.md)")
        g.add_argument("--phase", action="append", metavar="NAME=STRUCTURE",
                       help="say what a phase of the map is (by name or id): bcc, fcc, other (shown, not analysed "
                       "for slip) or ignore (its points unindexed); repeatable. Overrides what the file says")
        g.add_argument("--step-um", type=float, metavar="UM",
                       help="grid step in µm for a file read through orix whose scan unit is pixels (required "
                       "there), or to place its points with this step")

        self.cleanup = argparse.ArgumentParser(add_help=False)
        g = self.cleanup.add_argument_group("grain reconstruction and clean-up")
        g.add_argument("--threshold", type=float, default=15.0, help="grain boundary threshold, degrees (default 15)")
        g.add_argument("--subgrain", type=float, metavar="DEG", help="sub-grain threshold inside grains, degrees")
        g.add_argument("--min-quality", type=float, metavar="Q", help="leave out points with quality below Q")
        g.add_argument("--fill", action="store_true",
                       help="fill unlabelled points from the majority of their neighbours")
        g.add_argument("--min-points", type=int, metavar="N", help="merge grains with fewer than N points")
        g.add_argument("--min-area", type=float, metavar="UM2",
                       help="merge grains smaller than UM2 square micrometres")
        g.add_argument("--graph", metavar="FILE",
                       help="use a grain graph saved earlier with --save-graph instead of rebuilding one "
                       "(slipnet's own safe format)")
        g.add_argument("--save-graph", metavar="FILE", help="also save the grain graph here for later runs")

        self.load = argparse.ArgumentParser(add_help=False)
        g = self.load.add_argument_group("load")
        g.add_argument("--load-axis", nargs=3, type=float, required=True, metavar=("X", "Y", "Z"),
                       help="uniaxial load axis in the map frame (required; x right, y down, z into the specimen)")

        self.run_folder = argparse.ArgumentParser(add_help=False)
        g = self.run_folder.add_argument_group("output folder")
        g.add_argument("--overwrite", action="store_true",
                       help="replace an earlier run of another command, options or inputs in the output folder (its "
                       "files are removed once this run succeeds; the same run again needs no flag)")
        g.add_argument("--break-lock", action="store_true",
                       help="clear a lock left in the output folder by a run that cannot be checked from here (on "
                       "another machine), rolling back its partial files; a run still alive here is never broken")

        self.output = argparse.ArgumentParser(add_help=False, parents=[self.run_folder])
        g = self.output.add_argument_group("output")
        g.add_argument("--out", help="output folder (default: slipnet-<command>); never one holding an input; "
                       "manifest.json, written last, lists what the run read and wrote")
        g.add_argument("--no-figures", action="store_true", help="write tables and summary only")

        self.local_stress = argparse.ArgumentParser(add_help=False)
        g = self.local_stress.add_argument_group("local stress")
        g.add_argument("--local-stress", action="store_true",
                       help="use local Schmid factors (grain means of τ / applied stress) from a full-field elastic "
                       "solve on the map instead of the uniform-stress ones; the summary states the model's "
                       "assumptions")
        g.add_argument("--stress-tol", type=float, default=1e-6,
                       help="equilibrium residual of that solve (default 1e-6)")


def parents() -> Parents:
    """A fresh set of parent parsers."""
    return Parents()


def out_folder(args) -> str:
    """``--out``, or ``slipnet-<command>``."""
    return args.out or f"slipnet-{args.command}"


#: Namespace entries that are not options of the run (argparse plumbing).
_NOT_OPTIONS = frozenset({"func", "argv", "command"})


def output_run(args, *inputs, outputs=(), folder: str | bool | None = True, keep=(), revise: bool = False):
    """The :class:`slipnet.runs.OutputRun` of a command: its inputs, outputs and options from ``args``.

    Parameters
    ----------
    args
        The parsed command line (``--overwrite``, ``--break-lock`` and ``--out`` are read from it).
    *inputs
        Every file or folder the command reads (None entries skipped); ``--graph`` is added.
    outputs
        Files written outside the output folder's usual names; ``--save-graph`` is added.
    folder
        The output folder; True (default) for :func:`out_folder`, None for a command that writes
        only ``outputs`` (``slipnet map``).
    keep, revise
        As :class:`slipnet.runs.OutputRun` (the study keeps its step cache and revises its own run).
    """
    from slipnet.runs import OutputRun

    options = {k: v for k, v in vars(args).items() if k not in _NOT_OPTIONS}
    return OutputRun(out_folder(args) if folder is True else folder,
                     inputs=[*inputs, getattr(args, "graph", None)],
                     outputs=[*outputs, getattr(args, "save_graph", None)], options=options,
                     command=str(getattr(args, "command", "python")), argv=getattr(args, "argv", None),
                     overwrite=bool(getattr(args, "overwrite", False)),
                     break_lock=bool(getattr(args, "break_lock", False)), echo=print, keep=keep, revise=revise)


def print_warning(step: str, message: str) -> None:
    """Tell the user on stderr what a step had to guess or could not do (the study report collects the same)."""
    print(f"warning [{step}]: {message}", file=sys.stderr)


def read_map_from_args(args, path: str):
    """Read the map at ``path`` with the shared map options; print what the reader had to guess."""
    from slipnet.io import read_map
    from slipnet.study.steps import map_warnings

    omap = read_map(path, frame_rotation=getattr(args, "frame_rotation", None),
                    quality_prop=getattr(args, "quality_prop", None),
                    structures=phase_structures(getattr(args, "phase", None)) or None,
                    step_um=getattr(args, "step_um", None))
    map_warnings(omap, print_warning)
    return omap


def grain_graph_from_args(args, path: str | None, *, progress: bool = False):
    """The grain graph the shared options ask for: loaded from ``--graph``, or built from the map at ``path``.

    Saved with ``--save-graph`` when asked. The clean-up options chosen once apply to every command.
    """
    from slipnet.io import read_grain_graph, write_grain_graph

    if getattr(args, "graph", None):
        gg = read_grain_graph(args.graph)
    elif path:
        from slipnet.grains import build_grain_graph

        gg = build_grain_graph(read_map_from_args(args, path), threshold_deg=args.threshold,
                               subgrain_deg=args.subgrain, min_quality=args.min_quality, fill_unindexed=args.fill,
                               min_grain_size=args.min_points, min_grain_area_um2=args.min_area, progress=progress)
    else:
        raise ParameterError(f"{args.command}: give a map file, or --graph FILE (a saved grain graph)")
    if getattr(args, "save_graph", None):
        write_grain_graph(gg, args.save_graph)
    return gg


def solve_local_stress(args, omap, stress: float):
    """The local stress field for ``--local-stress`` (None without it)."""
    if not getattr(args, "local_stress", False):
        return None
    from slipnet.stress import solve_elastic

    field = solve_elastic(omap, args.load_axis, stress=stress, tol=args.stress_tol)
    print(f"local stress: {field.iterations} iterations, residual {field.residual:.2e}; "
          f"assumptions: {field.assumptions}")
    return field


def phase_structures(items) -> dict[str, str]:
    """``--phase NAME=STRUCTURE`` arguments as ``{name: structure}`` (the check of the choice is the reader's)."""
    out: dict[str, str] = {}
    for it in items or ():
        name, sep, val = str(it).rpartition("=")
        if not sep or not name.strip() or not val.strip():
            raise ParameterError(f"--phase should be NAME=STRUCTURE with STRUCTURE one of bcc, fcc, other, ignore, "
                                 f"e.g. 'austenite=fcc'; got {it!r}")
        out[name.strip()] = val.strip()
    return out


def name_value_pairs(items, option: str, example: str, *, default: float | None = None,
                     form: str = "NAME=VALUE") -> dict[str, float]:
    """``NAME=VALUE`` arguments as a dict of floats (``default`` when ``=VALUE`` is left out)."""
    out: dict[str, float] = {}
    for it in items or ():
        name, sep, val = str(it).partition("=")
        if not sep and default is None:
            raise ParameterError(f"{option} should be {form}, e.g. {example!r}; got {it!r}")
        try:
            out[name.strip()] = float(val) if sep else float(default)
        except ValueError as err:
            raise ParameterError(f"{option} should be {form} with a number, e.g. {example!r}; got {it!r}") from err
    return out
