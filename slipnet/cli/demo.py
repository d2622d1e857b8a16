"""``slipnet demo``: ``slipnet study`` on the built-in synthetic coupon, with invented measurements."""

from __future__ import annotations

# The same folder as slipnet.demo.DEMO_FOLDER (a test holds them equal): importing slipnet.demo here would load
# the whole study (scipy.signal, matplotlib, pandas) on every command, about 4 s before any argument is read.
DEFAULT_FOLDER = "slipnet-demo"


def add(sub, parents) -> None:
    p = sub.add_parser("demo", parents=[parents.run_folder],
                       help="run the whole study on the built-in synthetic demo coupon (invented data)",
                       description="Write the invented demo coupon's map, run 'slipnet study' on it (notch plan "
                       "along its right edge, forecasts from the best three notches), invent SYNTHETIC measurements "
                       "for the recommended one and write report.html into --out.")
    p.add_argument("--out", default=DEFAULT_FOLDER, help=f"output folder (default: {DEFAULT_FOLDER}); manifest.json, "
                   "written last, lists every file of the run")
    p.add_argument("--seed", type=int, default=7, help="seed of the synthetic coupon and every draw (default 7)")
    p.add_argument("--quick", action="store_true", help="coarser scan and fewer samples, for a fast look")
    p.add_argument("--quiet", action="store_true", help="no progress bar (warnings still printed)")
    p.set_defaults(func=run)


def run(args) -> int:
    import sys

    from slipnet.cli._common import output_run
    from slipnet.demo import run_demo
    from slipnet.labels import notch_label

    print(f"slipnet demo: synthetic coupon (invented data); load axis (0, 1, 0) in the map frame; writing into "
          f"{args.out}")
    with output_run(args, keep=(".cache",)) as orun:
        result = run_demo(orun.folder, seed=args.seed, quick=args.quick, progress=not args.quiet,
                          on_warning=(lambda step, msg: print(f"warning [{step}]: {msg}", file=sys.stderr))
                          if args.quiet else None)
    row = result.recommended.row
    print(f"recommended notch {notch_label(result.recommended.rank)}: root ({row['root_x_um']:.1f}, "
          f"{row['root_y_um']:.1f}) µm; report: {result.files['report']}")
    return 0
