"""The built-in demo: ``slipnet study`` on the invented synthetic coupon, with invented measurements.

The demo writes the coupon's map (:func:`slipnet.synthetic.demo_specimen`, invented data) into
``<out>/input/``, runs the study on that file with the choices of :func:`demo_options`, invents
SYNTHETIC measurements (strain field, control points, crack path, growth record) from the forecast
of the recommended notch as if it had been cut and tested, writes them beside the map in the
documented formats, and runs the study again with them: every earlier step is reused from the
cache, the comparison is added and the report written. The coupon already carries a V-notch on
its left edge; the study plans a notch along its uncut right edge, away from the corners, and every
forecast, growth prediction and comparison starts from the candidates of that plan.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

import pandas as pd

from slipnet.compare.demo_measurements import demo_measurement
from slipnet.io.maps import write_map
from slipnet.io.strain import write_strain
from slipnet.reports.writer import write_table
from slipnet.study import (
    CompareOptions,
    ForecastOptions,
    GrainOptions,
    LoadOptions,
    MapOptions,
    NotchOptions,
    StudyOptions,
    StudyResult,
    run_study,
)
from slipnet.synthetic import demo_specimen

__all__ = ["DEMO_FOLDER", "demo_options", "run_demo"]

#: Default output folder of ``slipnet demo``.
DEMO_FOLDER = "slipnet-demo"

_SYNTHETIC_NOTE = ("The map and every measurement in this demo are SYNTHETIC: invented by slipnet's generator and "
                   "its demo, not measured on any specimen. The comparison scores show how the report reads, not how "
                   "good the forecast is.")


def demo_options(map_path: str | os.PathLike, extent: tuple[float, float, float, float], *,
                 quick: bool = False, seed: int = 7) -> StudyOptions:
    """The demo's study choices on the coupon map at ``map_path``.

    Parameters
    ----------
    map_path
        The coupon's map file.
    extent
        ``(x_min, x_max, y_min, y_max)`` of the map, µm (the right edge is notched, 100 µm clear of
        each corner).
    quick
        Fewer candidates and Monte Carlo samples.
    seed
        Seed of the Monte Carlo draws.
    """
    _, x1, y0, y1 = (float(v) for v in extent)
    edge = ((x1, y0 + 100.0), (x1, y1 - 100.0))
    return StudyOptions(
        map=MapOptions(path=str(Path(map_path).resolve())),
        grains=GrainOptions(threshold_deg=15.0, subgrain_deg=2.0, min_grain_size=4),
        # tension along y, across a notch cut from the right edge along x: it opens in mode I
        load=LoadOptions(axis=(0.0, 1.0, 0.0), stress_amplitude_mpa=200.0, stress_ratio=-1.0),
        notch=NotchOptions(edges=(edge,), spacing_um=80.0 if quick else 40.0, depth_um=60.0, root_radius_um=15.0,
                           opening_deg=45.0, window_um=200.0, crack_sizes_um=(10.0, 30.0),
                           samples=0 if quick else 6, seed=seed),
        forecast=ForecastOptions(candidates=3, horizon_um=300.0, samples=8 if quick else 30, seed=seed),
    )


def _write_measurements(result: StudyResult, folder: Path, seed: int) -> CompareOptions:
    best = result.recommended
    meas = demo_measurement(result.gg, best.forecast, best.growth, load_axis=result.options.load.axis, seed=seed)
    sm = meas.strain
    strain = write_strain(sm.series, folder / "measured_strain_synthetic.npz")
    points = write_table(pd.DataFrame({"strain_x_um": sm.strain_points[:, 0], "strain_y_um": sm.strain_points[:, 1],
                                       "map_x_um": sm.map_points[:, 0], "map_y_um": sm.map_points[:, 1]}),
                         folder / "control_points_synthetic.csv")
    record = write_table(meas.growth_record, folder / "growth_record_synthetic.csv")
    path = None
    if meas.measured_path is not None and len(meas.measured_path):
        path = write_table(pd.DataFrame({"x_um": meas.measured_path[:, 0], "y_um": meas.measured_path[:, 1]}),
                           folder / "crack_path_synthetic.csv")
    return CompareOptions(strain=str(strain), control_points=str(points), crack_path=None if path is None
                          else str(path), growth_record=str(record), notch=best.rank, window=5,
                          dip_prominence=0.05, synthetic=True)


def run_demo(out: str | os.PathLike = DEMO_FOLDER, *, seed: int = 7, quick: bool = False, progress: bool = False,
             on_warning: Callable[[str, str], None] | None = None) -> StudyResult:
    """Run the study on the synthetic coupon and write its report into ``out``.

    Parameters
    ----------
    out
        Output folder: ``report.html``, ``summary.md``, ``study.toml``, ``tables/``, and the invented
        inputs under ``input/``.
    seed
        Seed of the synthetic coupon, the invented measurements and every Monte Carlo draw.
    quick
        The coupon scanned at 4 µm instead of 2 µm and fewer samples.
    progress, on_warning
        As :func:`slipnet.study.run_study`.

    Returns
    -------
    StudyResult
        Of the second run (with the comparison).
    """
    out = Path(out)
    spec = demo_specimen(seed=seed, quick=quick)
    folder = out / "input"
    map_path = write_map(spec.omap, folder / "specimen.npz")
    opts = demo_options(map_path, spec.omap.extent, quick=quick, seed=seed)
    first = run_study(opts, out, progress=progress, write=False, on_warning=lambda step, message: None)
    compare = _write_measurements(first, folder, seed)
    ny, nx = spec.omap.shape
    computed = first.log[first.log["status"] == "computed"]
    description = (f"{spec.description} The map ({ny} × {nx} points at {spec.omap.step:g} µm) is in input/"
                   f"{map_path.name}; the study plans a second notch along the uncut right edge. A first pass "
                   f"computed {len(computed)} steps in {computed['seconds'].sum():.0f} s; this pass reuses them "
                   "and adds the comparison with the invented measurements.")
    return run_study(replace(opts, compare=compare), out, progress=progress, on_warning=on_warning,
                     title=f"slipnet demo: {spec.name}", description=description,
                     extra_assumptions=(_SYNTHETIC_NOTE,))
