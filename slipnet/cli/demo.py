"""``slipnet demo``: the whole job on the built-in synthetic specimen."""

from __future__ import annotations

DEFAULT_FOLDER = "slipnet-demo"


def add(sub, parents) -> None:
    p = sub.add_parser("demo", parents=[parents.run_folder],
                       help="run the whole job on the built-in synthetic demo specimen")
    p.add_argument("--out", default=DEFAULT_FOLDER, help=f"output folder (default: {DEFAULT_FOLDER}); manifest.json, "
                   "written last, lists every file of the run")
    p.add_argument("--seed", type=int, default=7, help="seed of the synthetic specimen (default 7)")
    p.add_argument("--quick", action="store_true", help="smaller specimen and fewer samples, for a fast look")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.cli._common import output_run
    from slipnet.demo import run_demo

    with output_run(args) as run:
        run_demo(run.folder, seed=args.seed, quick=args.quick)
    print(f"demo outputs written to {run.folder}")
    return 0
