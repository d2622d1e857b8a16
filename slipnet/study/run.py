"""Run a whole study on one map: every step once, cached, then one report.

Steps (each cached under ``<out>/.cache`` by a content hash, see :mod:`slipnet.study.cache`):
``map`` (read the file) → ``grains`` (reconstruction and clean-up) → ``slip`` (Schmid, traces,
transmission) → ``stress`` (full-field elastic) → ``notch`` (candidates along the chosen edges) →
``forecast-N<k>`` and ``growth-N<k>`` for the best k candidates → ``compare`` (when measurements
are given). Then the tables, the study file, a short Markdown companion and the HTML report.

Forecasts from a candidate notch start at its root along its inward normal; the notch is not cut
into the map. The grains ahead of the root are the same either way, so the path, barriers and
sites are the same; the notch's stress concentration enters the plan (K_t) and the growth start,
not the path choice. (Cutting each candidate in would need one grain reconstruction and one
stress solve per candidate.)
"""

from __future__ import annotations

import contextlib
import os
import sys
from collections.abc import Callable, Iterator
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet import __version__
from slipnet._progress import StepProgress
from slipnet.cautions import CAUTION
from slipnet.errors import SlipnetError
from slipnet.labels import notch_label
from slipnet.reports.html_study import write_study_report
from slipnet.reports.writer import Outputs, markdown_table
from slipnet.study import steps as st
from slipnet.study.cache import StepCache, file_digest, step_key
from slipnet.study.options import StudyOptions, study_file_text
from slipnet.study.tables import (
    barrier_table,
    boundary_table,
    candidate_table,
    dip_table,
    grain_table,
    map_table,
    site_table,
)

__all__ = ["StudyResult", "run_study", "validation_standing"]


@dataclass(eq=False)
class StudyResult:
    """Everything a study computed, and the files it wrote.

    Attributes
    ----------
    options
        The choices (as written to ``study.toml``).
    omap, gg, slip, stress_field, plan
        The map, grain graph, slip activity, stress field and notch plan.
    outcomes
        One :class:`~slipnet.study.steps.Outcome` per forecast candidate, best first; the first is
        the recommendation.
    comparison, calibration
        The comparison with measurements and the growth calibration (None when not asked).
    warnings
        ``(step, message)`` pairs, in the order they arose.
    log
        The step log: ``step``, ``status`` (computed / reused), ``seconds``, ``key``.
    tables
        The report's tables by name (the CSV files under ``tables/``).
    files
        Name → path of every file written.
    """

    options: StudyOptions
    omap: object
    gg: object
    slip: object
    stress_field: object
    plan: object
    outcomes: list
    comparison: object | None
    calibration: object | None
    warnings: list[tuple[str, str]]
    log: pd.DataFrame
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    files: dict[str, Path] = field(default_factory=dict)
    title: str = "slipnet study"
    description: str = ""
    version: str = __version__
    validation: pd.DataFrame | None = None
    assumptions: list[str] = field(default_factory=list)
    caution: str = CAUTION
    figures: bool = True

    @property
    def recommended(self):
        """The outcome of the best candidate notch (``N1``)."""
        return self.outcomes[0]


def validation_standing() -> pd.DataFrame | None:
    """The predictor's standing from the validation harness shipped with the package.

    Reads :func:`slipnet.validation.read_standing` (``slipnet validate --ship`` writes it): one row
    per target with its held-out value, threshold and whether it is met, and the harness's own
    statement that the reference is slipnet's model.

    Returns
    -------
    DataFrame or None
        Columns ``target``, ``value``, ``threshold``, ``met``, ``statement``; None when no standing
        is shipped.
    """
    from slipnet.errors import InputFileError
    from slipnet.validation import read_standing

    try:
        data = read_standing()
    except InputFileError:
        return None
    rows = [{"target": t.get("text"), "value": t.get("value"), "threshold": t.get("threshold"),
             "met": "yes" if t.get("met") else "no"} for t in data.get("targets", [])]
    table = pd.DataFrame(rows, columns=["target", "value", "threshold", "met"])
    table["statement"] = data.get("statement", "")
    return table


@contextlib.contextmanager
def _guard(step: str, source: str) -> Iterator[None]:
    """Re-raise a slipnet error inside ``step`` with the step and its input named."""
    try:
        yield
    except SlipnetError as err:
        raise type(err)(f"study stopped at step '{step}' ({source}): {err}. Fix it and run the study again; "
                        "the steps already done are reused") from err


def _printer(progress: bool) -> Callable[[str, str], None]:
    def echo(step: str, message: str) -> None:
        text = f"warning [{step}]: {message}"
        if progress:
            from tqdm.auto import tqdm

            tqdm.write(text, file=sys.stderr)
        else:
            print(text, file=sys.stderr)
    return echo


def run_study(options: StudyOptions, out: str | os.PathLike, *, progress: bool = False,
              on_warning: Callable[[str, str], None] | None = None, title: str = "slipnet study",
              description: str = "", cache: bool = True, write: bool = True, figures: bool = True,
              extra_assumptions: tuple[str, ...] = ()) -> StudyResult:
    """Run every step of a study on one map and write its report into ``out``.

    Parameters
    ----------
    options
        Every choice (:class:`~slipnet.study.StudyOptions`; the map path and load axis are required).
    out
        Output folder: ``report.html``, ``summary.md``, ``study.toml``, ``steps.csv``, ``tables/``
        and the cache ``.cache/``.
    progress
        Show a tqdm bar over the steps (and the notch sweep's own bar).
    on_warning
        Called with ``(step, message)`` for every warning as it arises (default: printed to
        stderr when ``progress``, else only collected).
    title, description
        Title of the report and a paragraph about the specimen.
    cache
        Reuse and store step results under ``out/.cache``.
    write
        Write the report and tables (False: compute only, e.g. before measurements exist).
    figures
        Draw the report's pictures (False: tables and text only).
    extra_assumptions
        Further assumptions to list in the report (the demo's synthetic data, say).

    Returns
    -------
    StudyResult

    Raises
    ------
    ParameterError, InputFileError, NumericalError
        From the step that failed, naming the step and its input; nothing of the report is written.
    """
    opts = options.check()
    out = Path(out)
    warnings: list[tuple[str, str]] = []
    echo = on_warning if on_warning is not None else (_printer(True) if progress else None)

    def warn(step: str, message: str) -> None:
        warnings.append((step, message))
        if echo is not None:
            echo(step, message)

    k = int(opts.forecast.candidates)
    total = 5 + 2 * k + (1 if opts.compare.given else 0) + (1 if write else 0)
    bar = StepProgress(total, progress, "study")
    c = StepCache(out / ".cache" if cache else None)
    try:
        with _guard("map", f"map file {opts.map.path}"):
            map_key = step_key("map", {**asdict(opts.map), "path": None},
                               (file_digest(opts.map.path),))
            omap = c.run("map", map_key, lambda: st.step_map(opts, warn))
            st.map_warnings(omap, warn)
        bar("map")
        load = {"axis": list(opts.load.axis), "amplitude": opts.load.stress_amplitude_mpa,
                "ratio": opts.load.stress_ratio}
        with _guard("grains", f"map file {opts.map.path}, clean-up options"):
            grains_key = step_key("grains", asdict(opts.grains), (map_key,))
            gg = c.run("grains", grains_key, lambda: st.step_grains(omap, opts, warn))
        bar("grains")
        with _guard("slip", "load axis and slip options"):
            slip_key = step_key("slip", {"load": load, "inclination": opts.forecast.boundary_inclination_deg},
                                (grains_key,))
            slip = c.run("slip", slip_key, lambda: st.step_slip(gg, opts, warn))
        bar("slip")
        with _guard("stress", "load and stress options"):
            stress_key = step_key("stress", {"load": load, **asdict(opts.stress)}, (map_key,))
            field_ = c.run("stress", stress_key, lambda: st.step_stress(omap, opts, warn))
            st.stress_warnings(field_, warn)
        bar("stress")
        with _guard("notch", f"notch options, edges {list(opts.notch.edges)}"):
            notch_key = step_key("notch", {"load": load, **asdict(opts.notch),
                                           "growth": opts.growth.model_constants()}, (grains_key,))
            plan = c.run("notch", notch_key, lambda: st.step_notch(gg, opts, warn, progress=progress))
            st.notch_warnings(plan, warn)
            chosen = st.forecast_candidates(plan, k)
            if chosen.empty:
                from slipnet.errors import ParameterError

                raise ParameterError("no candidate notch could be evaluated along the chosen edges; choose another "
                                     "edge, a shallower notch or a wider spacing")
        bar("notch")
        outcomes = []
        keys: dict[int, tuple[str, str]] = {}
        fore_opts = {"load": load, **asdict(opts.forecast)}
        for _, row in chosen.iterrows():
            rank = int(row["rank"])
            name = notch_label(rank)
            with _guard(f"forecast {name}", f"root ({row['root_x_um']:.1f}, {row['root_y_um']:.1f}) µm"):
                fkey = step_key(f"forecast-{name}", {**fore_opts, "rank": rank}, (notch_key, stress_key, slip_key))
                fc = c.run(f"forecast-{name}", fkey, lambda row=row: st.step_forecast(gg, field_, slip, row, opts,
                                                                                     warn))
                st.forecast_warnings(name, fc, opts.notch.window_um, warn)
            bar(f"forecast {name}")
            with _guard(f"growth {name}", "growth options"):
                gkey = step_key(f"growth-{name}", asdict(opts.growth), (fkey,))
                res = c.run(f"growth-{name}", gkey, lambda fc=fc: st.step_growth(fc, gg, field_, slip, opts, warn))
                for note in res.notes:
                    if not note.startswith("bands from"):
                        warn(f"growth {name}", note)
                n_mc = len(fc.samples) if fc.samples is not None else 0
                arrest = st.arrest_probabilities(res, n_mc, opts.growth.strength_scatter,
                                                 int(fc.settings.get("seed", opts.forecast.seed)))
            outcomes.append(st.Outcome(rank, row, fc, res, arrest))
            keys[rank] = (fkey, gkey)
            bar(f"growth {name}")
        if len(outcomes) < k:
            warn("notch", f"only {len(outcomes)} candidate notch(es) could be evaluated; {k} were asked for")
        comp = cal = None
        if opts.compare.given:
            cut = next((o for o in outcomes if o.rank == opts.compare.notch), None)
            with _guard("compare", f"strain file {opts.compare.strain}"):
                digests = [file_digest(f) for f in (opts.compare.strain, opts.compare.control_points,
                                                     opts.compare.crack_path, opts.compare.growth_record) if f]
                ckey = step_key("compare", {**asdict(opts.compare), "strain": None, "control_points": None,
                                            "crack_path": None, "growth_record": None}, (grains_key, *digests))
                if cut is None:
                    from slipnet.errors import ParameterError

                    raise ParameterError(f"compare notch {opts.compare.notch} is not among the forecast candidates "
                                         f"({', '.join(notch_label(o.rank) for o in outcomes)}); raise --candidates "
                                         "or give the rank of a forecast notch")
                cut_keys = next(v for n, v in keys.items() if n == cut.rank)
                comp, cal = c.run("compare", step_key("compare", ckey, cut_keys),
                                  lambda: st.step_compare(gg, cut, opts, warn))
                st.compare_warnings(opts, cal, warn, comp)
            bar("compare")
        result = StudyResult(options=opts, omap=omap, gg=gg, slip=slip, stress_field=field_, plan=plan,
                             outcomes=outcomes, comparison=comp, calibration=cal, warnings=warnings,
                             log=c.table(), title=title, description=description,
                             validation=validation_standing(), figures=figures,
                             assumptions=_assumptions(opts, field_, outcomes, extra_assumptions))
        result.tables = _tables(result)
        if write:
            result.files = _write(result, out)
            bar("report")
    finally:
        bar.close()
    return result


def _assumptions(opts: StudyOptions, field_, outcomes, extra) -> list[str]:
    fc = outcomes[0].forecast if outcomes else None
    plane = fc.settings.get("boundary_plane", "") if fc is not None else ""
    return [
        "Forecasts start at each candidate notch's root along its inward normal; the candidate notch is not cut "
        "into the map. The grains ahead of the root are the same either way; the notch's stress concentration "
        "enters the notch plan (K_t) but not the choice of path.",
        f"Boundary planes: {plane or 'perpendicular to the surface'} (a surface map does not show them), "
        f"inclination {opts.forecast.boundary_inclination_deg:g}° to the surface.",
        f"Local stresses: {field_.assumptions}",
        "The local Schmid factors of the forecast are grain means of the full-field solve on the map as given "
        "(without the candidate notch).",
        "Growth: strip-yield zone blocked at grain boundaries (Bilby, Cottrell & Swinden 1963; Navarro & de los "
        "Rios 1988); its constants are illustrative until calibrated against a growth record of the material; "
        "the mean stress (stress ratio) is not modelled.",
        "Monte Carlo bands: orientation, load-axis and tip perturbations of the forecast and log-normal barrier "
        f"strengths (σ_ln = {opts.growth.strength_scatter:g}) of the growth model; 5th–95th percentiles.",
        *extra,
    ]


def _tables(r: StudyResult) -> dict[str, pd.DataFrame]:
    t = {"map": map_table(r.omap, r.gg, r.options.map.path), "candidates": candidate_table(r.plan, r.outcomes),
         "grains": grain_table(r.gg, r.slip, r.stress_field), "boundaries": boundary_table(r.gg, r.slip),
         "steps": r.log}
    plan = r.plan.table.copy()
    plan.insert(0, "notch", [notch_label(v) for v in plan["rank"]])
    t["notch_plan"] = plan
    for o in r.outcomes:
        n = notch_label(o.rank)
        t[f"{n}_barriers"] = barrier_table(o)
        t[f"{n}_sites"] = site_table(o)
        t[f"{n}_dips"] = dip_table(o)
        t[f"{n}_path"] = o.forecast.path
        t[f"{n}_growth_profile"] = o.growth.profile
        if o.growth.bands is not None:
            t[f"{n}_growth_bands"] = o.growth.bands
    if r.comparison is not None:
        t["comparison_scores"] = r.comparison.score_table()
    if r.calibration is not None:
        t["calibration"] = r.calibration.table
    return t


def _write(r: StudyResult, out: Path) -> dict[str, Path]:
    files = Outputs(out)
    tables = Outputs(out / "tables")
    for name, table in r.tables.items():
        tables.table(name, table, f"{name}.csv")
    files.files.update({f"tables/{k}": v for k, v in tables.files.items()})
    files.text("study", study_file_text(r.options, header=f"slipnet {r.version} study file: every choice of this "
                                        "study.\nRun it again with: slipnet study --study study.toml"),
               "study.toml")
    files.table("steps", r.log, "steps.csv")
    files.summary(r.title, _summary_lines(r))
    files.file("report", write_study_report(r, out / "report.html"))
    return files.files


def _summary_lines(r: StudyResult) -> list[str]:
    best = r.recommended
    root = (float(best.row["root_x_um"]), float(best.row["root_y_um"]))
    lines = [
        "A plain-text companion of `report.html` (the report holds the pictures and every table).", "",
        f"Load axis (map frame): ({', '.join(f'{v:.3f}' for v in r.options.load.axis)}); amplitude "
        f"{r.options.load.stress_amplitude_mpa:g} MPa, R = {r.options.load.stress_ratio:g}.",
        f"Recommended notch: {notch_label(best.rank)}, root at ({root[0]:.1f}, {root[1]:.1f}) µm.", "",
    ]
    if r.warnings:
        lines += ["## Warnings", "", *(f"- [{s}] {m}" for s, m in r.warnings), ""]
    cand = r.tables["candidates"][["notch", "root_x_um", "root_y_um", "plan_score", "path_length_um",
                                   "first_barrier", "first_barrier_um", "arrest_probability"]]
    lines += ["## Candidate notches", "", markdown_table(cand), "",
              f"## Barriers ahead of {notch_label(best.rank)}", "",
              markdown_table(r.tables[f"{notch_label(best.rank)}_barriers"][
                  ["order", "boundary", "grains", "distance_from_root_um", "barrier_score", "p_arrest_here"]]), "",
              "## Steps", "", markdown_table(r.log), ""]
    return lines


def finite_table(table: pd.DataFrame) -> bool:
    """True when no numeric cell of ``table`` is NaN or infinite."""
    num = table.select_dtypes(include=[np.number])
    return bool(np.all(np.isfinite(num.to_numpy(dtype=float)))) if num.size else True
