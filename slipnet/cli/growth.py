"""``slipnet growth``: short-crack growth rate along a path (dips at barriers, arrest, cycles)."""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

from slipnet.cli._common import output_run, print_warning
from slipnet.errors import InputFileError, ParameterError


def add_record_options(p, *, encoding: bool = True) -> None:
    """Options that say how to read a crack-growth record (shared with ``slipnet compare``)."""
    p.add_argument("--record-column", action="append", metavar="NAME=COLUMN", default=None,
                   help="which column of the record holds slipnet's 'cycles' or 'crack_length' "
                   "(e.g. --record-column crack_length='a [mm]'; '#2' for the 2nd column); repeatable")
    p.add_argument("--record-length-unit", choices=("nm", "um", "mm"), default=None,
                   help="unit of the record's crack lengths (default: from the header, e.g. 'a [mm]')")
    p.add_argument("--record-cycles-unit", choices=("cycles", "kcycles", "mcycles"), default=None,
                   help="unit of the record's cycles (default: from the header, e.g. 'N [kcycles]', else cycles)")
    if encoding:
        p.add_argument("--encoding", default=None,
                       help="text encoding of the table files (default: detected; e.g. cp1252, latin-1)")


def text_mapping(items, option: str) -> dict[str, str] | None:
    """``NAME=COLUMN`` arguments as a dict of strings (None when none were given)."""
    out: dict[str, str] = {}
    for it in items or ():
        name, sep, val = str(it).partition("=")
        if not sep or not name.strip() or not val.strip():
            raise ParameterError(f"{option} should be NAME=COLUMN, e.g. {option} exx=E_xx; got {it!r}")
        out[name.strip()] = val.strip()
    return out or None


def record_options(args) -> dict:
    """Keyword arguments of :func:`slipnet.io.read_growth_record` from the record options."""
    return {"columns": text_mapping(getattr(args, "record_column", None), "--record-column"),
            "length_unit": getattr(args, "record_length_unit", None),
            "cycles_unit": getattr(args, "record_cycles_unit", None),
            "encoding": getattr(args, "encoding", None)}


def add(sub, parents) -> None:
    p = sub.add_parser(
        "growth", parents=[parents.output],
        help="short-crack growth rate along a path: dips at barriers, crossings, arrest, cycles",
        description="Predict da/dN and cycles against crack length along a crack path, from a barrier table "
        "(CSV: position_um [, grain_factor, m_prime, twist_deg]) or from a saved forecast folder "
        "(forecast_path.csv, forecast_crossings.csv, forecast_barriers.csv, forecast_settings.json). "
        "With --record, first fit friction stress, coefficient and exponent to a measured growth record.",
    )
    src = p.add_mutually_exclusive_group(required=True)
    src.add_argument("--barriers", metavar="CSV", help="barrier table, one row per barrier along the path")
    src.add_argument("--forecast", metavar="DIR", help="folder written by 'slipnet forecast'")
    p.add_argument("--stress-amplitude", type=float, metavar="MPA",
                   help="stress amplitude σ_a = Δσ/2, MPa (default: the forecast's, else required)")
    p.add_argument("--length", type=float, metavar="UM", help="path length for --barriers (default 1.5 × last barrier)")
    p.add_argument("--first-grain-factor", type=float, default=1.0,
                   help="orientation factor of the first grain for --barriers (default 1)")
    p.add_argument("--friction-stress", type=float, default=400.0, help="σ_f, MPa (default 400)")
    p.add_argument("--coefficient", type=float, default=0.05, help="C in da/dN = C·φ^m, µm/cycle (default 0.05)")
    p.add_argument("--exponent", type=float, default=1.5, help="m in da/dN = C·φ^m (default 1.5)")
    p.add_argument("--barrier-stress", type=float, default=500.0,
                   help="critical stress on the source beyond a neutral barrier, MPa (default 500)")
    p.add_argument("--source-distance", type=float, default=1.0,
                   help="source distance r₀ beyond a barrier, µm (default 1)")
    p.add_argument("--transmission-weight", type=float, default=0.5, help="k_m of the |m′| coupling (default 0.5)")
    p.add_argument("--twist-weight", type=float, default=0.5, help="k_α of the twist coupling (default 0.5)")
    p.add_argument("--initial-length", type=float, metavar="UM",
                   help="first crack length (default 0.1 × first barrier)")
    p.add_argument("--final-length", type=float, metavar="UM", help="last crack length (default the path length)")
    p.add_argument("--profile-points", type=int, default=2000,
                   help="crack lengths in the growth profile (default 2000)")
    p.add_argument("--samples", type=int, help="Monte Carlo draws of barrier strength for bands "
                   "(default: the forecast's sample count, else 0)")
    p.add_argument("--seed", type=int, default=0, help="seed of the draws (default 0)")
    p.add_argument("--record", metavar="CSV", help="measured crack-growth record to calibrate on (cycles and crack "
                   "length; any delimiter and column names, units from the header brackets: docs/own-data.md)")
    add_record_options(p)
    p.add_argument("--life", type=float, metavar="CYCLES",
                   help="also find the stress amplitude that grows the crack to the final length in CYCLES")
    p.add_argument("--local-stress", action="store_true",
                   help="require local Schmid factors: growth reads no map, so it cannot solve for the stress itself; "
                   "the --forecast folder must come from 'slipnet forecast --local-stress' (its path table carries "
                   "the local factors and its settings the assumptions, which go into the summary); "
                   "not with --barriers")
    p.set_defaults(func=run)


def _path_from_forecast_folder(folder: Path, local_stress: bool):
    from slipnet.growth import path_from_tables
    from slipnet.io import read_csv_table

    settings = {}
    if (folder / "forecast_settings.json").exists():
        try:
            settings = json.loads((folder / "forecast_settings.json").read_text(encoding="utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as err:
            raise InputFileError(f"forecast settings are not valid JSON ({err})",
                                 path=str(folder / "forecast_settings.json")) from err
    optional = {name: read_csv_table(folder / f"forecast_{name}.csv", (), f"forecast {name} table")
                for name in ("crossings", "barriers") if (folder / f"forecast_{name}.csv").exists()}
    path = path_from_tables(read_csv_table(folder / "forecast_path.csv", (), "forecast path table"),
                            optional.get("barriers"), crossings=optional.get("crossings"),
                            offset_um=float(settings.get("initial_crack_um", 0.0) or 0.0),
                            source=str(folder / "forecast_path.csv"))
    if local_stress and not settings.get("stress_field"):
        raise ParameterError(f"growth --local-stress: the forecast in {folder} used uniform-stress Schmid factors; "
                             "rerun 'slipnet forecast --local-stress' (growth reads no map to solve on)")
    return path, settings


def run(args) -> int:
    from slipnet.reports.growth import write_growth

    with output_run(args, args.barriers, args.forecast, args.record) as run:
        path, res, fit = _simulate(args)
        write_growth(res, run.folder, figures=not args.no_figures, calibration=fit)
    arrest = (f"arrests at {res.arrest_length_um:.1f} µm" if res.arrest_length_um < float("inf")
              else "no arrest on the path")
    print(f"growth: {path.n_barriers} barriers, {len(res.dips)} dips, {arrest}; outputs written to {run.folder}")
    return 0


def _simulate(args):
    """The growth path, the simulated growth and the calibration (or None) the arguments ask for."""
    from slipnet.growth import GrowthParameters, GrowthPath, calibrate, life_amplitude, simulate_growth
    from slipnet.io import read_csv_table, read_growth_record

    amplitude, samples, seed, settings = args.stress_amplitude, args.samples, args.seed, {}
    if args.barriers and args.local_stress:
        raise ParameterError("growth --local-stress needs --forecast DIR from 'slipnet forecast --local-stress'; "
                             "a barrier table has no map to solve the local stress on")
    if args.barriers:
        table = read_csv_table(args.barriers, ("position_um",), "barrier table")
        path = GrowthPath.from_table(table, first_grain_factor=args.first_grain_factor, length_um=args.length,
                                     source=f"barrier table {args.barriers}")
    else:
        path, settings = _path_from_forecast_folder(Path(args.forecast), args.local_stress)
        if amplitude is None:
            amplitude = settings.get("stress_amplitude_mpa")
        if samples is None:
            samples = int(settings.get("samples", 0) or 0)
            seed = int(settings.get("seed", seed))
    if amplitude is None:
        raise ParameterError("growth: give --stress-amplitude (MPa)")
    params = GrowthParameters(friction_stress=args.friction_stress, coefficient=args.coefficient,
                              exponent=args.exponent, barrier_stress=args.barrier_stress,
                              source_distance=args.source_distance, transmission_weight=args.transmission_weight,
                              twist_weight=args.twist_weight)
    fit = None
    if args.record:
        notes: list[str] = []
        rec = read_growth_record(args.record, notes=notes, **record_options(args))
        for note in notes:
            print_warning("growth", f"growth record: {note}")
        fit = calibrate(rec["crack_length_um"], rec["cycles"], path, float(amplitude), initial=params)
        if fit.success:
            params = fit.params
        else:
            print_warning("growth", f"the calibration did not converge: {fit.message}. The growth below uses the "
                          f"starting constants (σ_f {params.friction_stress:g} MPa, C {params.coefficient:g}, "
                          f"m {params.exponent:g}), not the failed fit")
    res = simulate_growth(path, float(amplitude), params=params, initial_length=args.initial_length,
                          final_length=args.final_length, n_points=args.profile_points, samples=samples or 0,
                          seed=seed)
    if args.life is not None:
        life = life_amplitude(path, args.life, params=params, initial_length=args.initial_length,
                              final_length=args.final_length)
        res = replace(res, notes=(*res.notes, f"amplitude for a life of {args.life:g} cycles to the final length: "
                                  f"{life:.1f} MPa"))
        print(f"growth: {life:.1f} MPa grows the crack to the final length in {args.life:g} cycles")
    if args.local_stress:
        res = replace(res, notes=(*res.notes, "Grain factors: LOCAL Schmid factors of the forecast's full-field "
                                  "stress solve. Local stress assumptions: "
                                  f"{settings.get('stress_assumptions') or 'not recorded by that forecast'}"))
    return path, res, fit
