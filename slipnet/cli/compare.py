"""``slipnet compare``: score a forecast against measured strain maps and a crack-growth record."""

from __future__ import annotations

from slipnet.cli._common import grain_graph_from_args, output_run, print_warning
from slipnet.cli.growth import add_record_options, record_options, text_mapping


def add_strain_reader_options(p) -> None:
    """Options that say how to read a lab's strain file and tables (shared with ``slipnet study``)."""
    g = p.add_argument_group("reading the strain file (docs/own-data.md)")
    g.add_argument("--strain-column", action="append", metavar="NAME=COLUMN", default=None,
                   help="which column (or .mat/HDF5 variable) holds slipnet's NAME (x, y, u, v, exx, eyy, exy, step), "
                   "e.g. --strain-column exx=E_xx; '#3' for the 3rd column; repeatable")
    g.add_argument("--strain-length-unit", choices=("nm", "um", "mm", "px"), default=None,
                   help="unit of the positions and grid step (default: the header brackets, e.g. 'x [mm]', or the "
                   "sidecar); given, it wins over the file")
    g.add_argument("--strain-value-unit", choices=("1", "%", "ustrain", "nm", "um", "mm", "px"), default=None,
                   help="unit of the values: strain 1, %%, ustrain; displacement a length (default: from the file)")
    g.add_argument("--strain-pixel-size", type=float, metavar="UM", default=None,
                   help="µm per pixel, when a unit is px")
    g.add_argument("--strain-quantity", choices=("strain", "displacement"), default=None,
                   help="which fields to read when the file holds both (or a plain TIFF says neither)")
    g.add_argument("--strain-grid-step", type=float, metavar="STEP", default=None,
                   help="grid spacing (in the length unit) of a file without x, y (TIFF stack, .mat fields)")
    g.add_argument("--strain-shear", choices=("tensor", "engineering"), default=None,
                   help="exy is tensor shear (default) or engineering shear γxy (halved on reading)")
    g.add_argument("--strain-sidecar", metavar="FILE", default=None,
                   help="JSON/TOML sidecar of a TIFF stack, .mat or HDF5 file (default: <stem>.json/.toml beside it)")
    g.add_argument("--strain-delimiter", default=None, help="column delimiter of a text table (default: detected)")
    g.add_argument("--encoding", default=None,
                   help="text encoding of the strain, control-point and record tables (default: detected; e.g. cp1252)")


def add_points_reader_options(p) -> None:
    """Options that say how to read a control-point table (shared with ``slipnet study``)."""
    p.add_argument("--points-column", action="append", metavar="NAME=COLUMN", default=None,
                   help="which column holds slipnet's strain_x, strain_y, map_x or map_y (e.g. map_x='EBSD X'); "
                   "repeatable")
    p.add_argument("--points-length-unit", choices=("nm", "um", "mm"), default=None,
                   help="unit of every control-point position (default: the header's)")
    p.add_argument("--points-strain-unit", choices=("nm", "um", "mm", "px"), default=None,
                   help="unit of the strain-image positions only (px uses --strain-pixel-size)")


def add(sub, parents) -> None:
    p = sub.add_parser("compare", parents=[parents.map, parents.cleanup, parents.output],
                       help="score a forecast against measured strain maps and a crack-growth record",
                       description="Register a measured displacement/strain series (our text, npz or TIFF "
                       "format, docs/strain-format.md, or a file as the lab exports it: CSV/TXT with bracketed units, "
                       "MATLAB .mat, HDF5, a TIFF stack with a sidecar, docs/own-data.md) to the orientation map "
                       "by control points, measure "
                       "strain localisation and score the forecast sites, path, barriers and growth-rate dips.")
    p.add_argument("strain", help="measured displacement or strain file (CSV/TXT table, .npz, .tif, .mat, .h5)")
    add_strain_reader_options(p)
    p.add_argument("--control-points", metavar="CSV",
                   help="control points table: strain_x_um, strain_y_um, map_x_um, map_y_um (or other names with "
                   "--points-column; units from the header brackets)")
    add_points_reader_options(p)
    p.add_argument("--kind", default="affine", choices=("similarity", "affine", "projective"),
                   help="registration transform (default affine)")
    p.add_argument("--map", dest="map_path", help="orientation map file (for grain and boundary statistics)")
    p.add_argument("--forecast", help="folder written by 'slipnet forecast' (forecast_sites/path/barriers.csv)")
    p.add_argument("--sites", help="predicted sites CSV (x, y in µm, score)")
    p.add_argument("--path", help="predicted path CSV (x0, y0, x1, y1 in µm)")
    p.add_argument("--barriers", help="ranked barriers CSV (boundary_id, score)")
    p.add_argument("--measured-path", help="measured crack path CSV (x_um, y_um polyline or x0, y0, x1, y1)")
    p.add_argument("--record", help="crack-growth record table (cycles and crack length; see --record-column)")
    add_record_options(p, encoding=False)
    p.add_argument("--growth", help="folder written by 'slipnet growth' (growth_dips.csv, growth_profile.csv)")
    p.add_argument("--load-axis", type=float, nargs=3, metavar=("X", "Y", "Z"),
                   help="load axis in the map frame, for the predicted slip traces of each grain")
    p.add_argument("--load-step", type=int, default=None,
                   help="index of the load step of the strain series to analyse (default the last)")
    p.add_argument("--method", default="small", choices=("small", "green-lagrange"), help="strain measure")
    p.add_argument("--window", type=int, default=None,
                   help="odd window (points) of a least-squares plane fit; default central differences")
    p.add_argument("--peak-threshold", type=float, default=None,
                   help="smallest shear strain peak, %% (default the 95th percentile of the field)")
    p.add_argument("--peak-distance", type=float, default=5.0, help="minimum peak separation, µm (default 5)")
    p.add_argument("--site-tol", type=float, default=5.0, help="site matching tolerance, µm (default 5)")
    p.add_argument("--path-tol", type=float, default=5.0, help="path distance tolerance, µm (default 5)")
    p.add_argument("--band-tol", type=float, default=10.0, help="band direction tolerance, degrees (default 10)")
    p.add_argument("--dip-tol", type=float, default=5.0, help="dip matching tolerance, µm of crack (default 5)")
    p.add_argument("--max-sites", type=int, default=None, help="score only the N highest-scored predicted sites")
    p.set_defaults(func=run)


def run(args) -> int:
    from slipnet.compare import compare_files
    from slipnet.reports.compare import write_comparison

    inputs = (args.strain, args.strain_sidecar, args.control_points, args.map_path, args.forecast, args.sites,
              args.path, args.barriers,
              args.measured_path, args.record, args.growth)
    with output_run(args, *inputs) as run:
        gg = grain_graph_from_args(args, args.map_path) if (args.map_path or args.graph) else None
        comp = compare_files(
            args.strain, points=args.control_points, kind=args.kind, gg=gg,
            forecast_folder=args.forecast, sites=args.sites, path=args.path, barriers=args.barriers,
            measured_path=args.measured_path, record=args.record, growth_folder=args.growth,
            load_axis=args.load_axis, step=args.load_step, strain_method=args.method, window=args.window,
            peak_threshold=None if args.peak_threshold is None else args.peak_threshold / 100.0,
            peak_distance_um=args.peak_distance, site_tol_um=args.site_tol, path_tol_um=args.path_tol,
            band_tol_deg=args.band_tol, dip_tol_um=args.dip_tol, max_sites=args.max_sites,
            strain_options=strain_options(args), points_options=points_options(args),
            record_options=record_options(args))
        write_comparison(comp, run.folder, figures=not args.no_figures)
    out = run.folder
    if comp.transform is not None:
        print(f"compare: registration {comp.transform.kind}, RMS residual {comp.transform.rms:.3g} µm "
              f"over {len(comp.transform.residuals)} control points")
    else:
        print_warning("compare", "no control points given: the strain map's frame is taken as equal to the "
                      "orientation map's frame (give --control-points to register them)")
    for warning in comp.warnings:
        print_warning("compare", warning)
    for key in ("n_measured_peaks", "sites_f1", "grains_roc_auc", "path_mean_distance_um", "dips_hits"):
        if key in comp.scores:
            print(f"  {key}: {comp.scores[key]:.4g}")
    print(f"outputs written to {out}")
    return 0


def strain_options(args) -> dict:
    """Keyword arguments of :func:`slipnet.io.read_strain` from the ``--strain-*`` options."""
    return {"columns": text_mapping(args.strain_column, "--strain-column"), "length_unit": args.strain_length_unit,
            "value_unit": args.strain_value_unit, "pixel_size_um": args.strain_pixel_size,
            "quantity": args.strain_quantity, "grid_step": args.strain_grid_step, "shear": args.strain_shear,
            "sidecar": args.strain_sidecar, "encoding": args.encoding, "delimiter": args.strain_delimiter}


def points_options(args) -> dict:
    """Keyword arguments of :func:`slipnet.io.read_control_points` from the ``--points-*`` options."""
    return {"columns": text_mapping(args.points_column, "--points-column"), "length_unit": args.points_length_unit,
            "strain_length_unit": args.points_strain_unit, "pixel_size_um": args.strain_pixel_size,
            "encoding": args.encoding}
