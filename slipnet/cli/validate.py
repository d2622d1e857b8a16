"""``slipnet validate``: score the forecast and its baselines against slipnet's own cyclic model; refit the weights."""

from __future__ import annotations

from slipnet.errors import ParameterError


def add(sub, parents) -> None:
    p = sub.add_parser(
        "validate", parents=[parents.output],
        help="score the forecast and its baselines on virtual experiments (slipnet's own cyclic crystal-plasticity "
        "model as the reference); refit the forecast's weights",
        description="Draw notched synthetic specimens with a short crack (fixed seeds, stated ranges), solve the "
        "cyclic crystal-plasticity reference on each (cached), run the forecast in each mode and the baselines, and "
        "write the scores (pixel ROC AUC, grain Spearman, site hit rate, barrier ranking, path agreement), the "
        "calibration of the probabilities and a figure into --out. The reference is slipnet's own model: this is a "
        "consistency test between a fast and a slow model, not a validation against experiments. --refit first "
        "fits the weights on the training seeds (never the held-out ones).",
    )
    p.add_argument("--seeds", type=int, nargs="+", help="case seeds to score (default: the held-out seeds)")
    p.add_argument("--modes", nargs="+", default=["elastic", "map"], choices=["elastic", "map", "cyclic"],
                   help="forecast modes to score (default: elastic map); the first also runs the Monte Carlo")
    p.add_argument("--samples", type=int, default=8, help="Monte Carlo samples per case (default 8; 0: none)")
    p.add_argument("--mc-seed", type=int, default=0, help="Monte Carlo seed (default 0)")
    p.add_argument("--scheduler", default="local",
                   help="dask scheduler: local (default: a local cluster), synchronous, threads, processes, or a "
                   "dask.distributed address tcp://HOST:PORT for more machines")
    p.add_argument("--workers", type=int, help="local workers (default: the machine's cores)")
    p.add_argument("--cache", metavar="DIR", help="reference cache folder (default: the user cache)")
    p.add_argument("--weights", metavar="JSON", help="weights file to score (default: the shipped one)")
    p.add_argument("--refit", action="store_true",
                   help="fit the weights on the training seeds first and write them (to --weights-out)")
    p.add_argument("--weights-out", metavar="JSON",
                   help="where --refit writes the weights (default: the shipped slipnet/forecast/weights.json)")
    p.add_argument("--ship", action="store_true",
                   help="also write the standing into the package (slipnet/validation/standing.json)")
    p.add_argument("--progress", action="store_true", help="show progress bars")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.reports.validation import write_validation
    from slipnet.validation import HELD_OUT_SEEDS, fit_weights, run_validation, write_standing, write_weights

    if args.samples < 0:
        raise ParameterError(f"--samples should be >= 0; got {args.samples}")
    weights = args.weights
    if args.refit:
        w = fit_weights(scheduler=args.scheduler, workers=args.workers, cache_dir=args.cache, progress=args.progress)
        path = write_weights(w, args.weights_out)
        print(f"validate: weights fitted on training seeds {w.provenance['training_seeds']} written to {path}")
        weights = str(path)
    if str(args.scheduler).startswith(("tcp://", "tls://")):
        print(f"connecting to the remote dask scheduler {args.scheduler} (trusted machines only: its workers run "
              "the validation's tasks and their results are unpickled on this machine)")
    seeds = args.seeds or list(HELD_OUT_SEEDS)
    res = run_validation(seeds, modes=tuple(args.modes), samples=args.samples, mc_seed=args.mc_seed,
                         scheduler=args.scheduler, workers=args.workers, cache_dir=args.cache, weights=weights,
                         progress=args.progress)
    from slipnet.cli._common import output_run

    with output_run(args, args.weights) as orun:
        files = write_validation(res, orun.folder, figures=not args.no_figures)
    out = orun.folder
    if args.ship:
        print(f"validate: standing written to {write_standing(res)}")
    piv = res.summary.pivot(index="predictor", columns="metric", values="mean")
    for p in piv.index:
        print(f"  {p:30s} AUC slip {piv.loc[p, 'auc_slip']:.3f}  FIP {piv.loc[p, 'auc_fip']:.3f}  grain rho "
              f"{piv.loc[p, 'grain_rho']:.2f}  top-5 hits {piv.loc[p, 'site_hit_rate']:.2f}  barrier rho "
              f"{piv.loc[p, 'barrier_rho']:.2f}")
    print(f"validate: {len(seeds)} cases scored; {res.statement} Outputs written to {out} ({len(files)} files)")
    return 0
