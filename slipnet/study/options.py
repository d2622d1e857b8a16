"""Every choice of a whole study, read from and written to a TOML study file.

A study file written by :func:`write_study_file` records every option (defaults included), so the
study can be run again exactly: ``slipnet study --study <out>/study.toml``. Notch study files of
``slipnet notch --study`` (sections ``specimen``, ``loading``, ``notch``, ``candidates``,
``objectives``, ``uncertainty``, ``growth``, ``run``) are whole-study files too; the whole study adds
``[cleanup]``, ``[stress]``, ``[forecast]`` and ``[compare]``::

    [specimen]     map (path, relative to the study file), frame_rotation, quality_prop,
                   structures (table: phase name or id = "bcc" | "fcc" | "other" | "ignore"),
                   step_um (grid step of a pixel scan), threshold_deg, min_grain_size
    [cleanup]      subgrain_deg, min_quality, fill_unindexed, min_grain_area_um2
    [loading]      axis (3 numbers, map frame; required), stress_amplitude_mpa, stress_ratio
    [stress]       tol, unindexed ("auto" | "compliant" | "nearest")
    [notch]        depth_um, root_radius_um, opening_deg, concentration ("peterson" | "full_field")
    [candidates]   edge (a side, or [[x, y], ...] µm) or edges (a list of them), spacing_um,
                   window_um, crack_sizes_um
    [objectives]   weights (table), method, strong_barrier, top_k, target
    [uncertainty]  samples, orientation_noise_deg, load_misalignment_deg, position_error_um, seed
                   (of the notch plan's Monte Carlo)
    [forecast]     candidates (how many of the best notches to forecast from), horizon_um, samples,
                   seed, boundary_inclination_deg
    [growth]       friction_stress, coefficient, exponent, barrier_stress, initial_length,
                   final_length, n_points, strength_scatter (simulate_growth keywords)
    [compare]      strain, control_points, transform ("affine" | "projective"), crack_path,
                   growth_record (paths relative to the study file), notch (rank of the notch that
                   was cut, 1), step, window, site_tol_um, path_tol_um, peak_distance_um,
                   dip_prominence, dip_tol_um, calibrate (fit the growth constants to the record),
                   strain_reader, points_reader, record_reader (tables of keywords of read_strain,
                   read_control_points and read_growth_record that say how a lab's files are laid
                   out: columns, units, encoding...; docs/own-data.md)
    [run]          scheduler, workers (of the notch sweep)
"""

from __future__ import annotations

import math
import os
import tomllib
from dataclasses import asdict, dataclass, field, fields, replace
from pathlib import Path

from slipnet._files import atomic_path
from slipnet._inputs import check_nesting, checked_input, guarded_reader
from slipnet.errors import InputFileError, ParameterError
from slipnet.maps.notch import SIDES

__all__ = [
    "CompareOptions", "ForecastOptions", "GrainOptions", "GrowthOptions", "LoadOptions", "MapOptions",
    "NotchOptions", "StressOptions", "StudyOptions", "read_study_file", "study_file_text", "write_study_file",
]


@dataclass(frozen=True)
class MapOptions:
    """How the map is read (:func:`slipnet.io.read_map` keywords).

    The file, a frame rotation ('AXIS@DEG' or 'w,x,y,z'), the quality property, what phases are
    (``{phase name or id: "bcc" | "fcc" | "other" | "ignore"}``) and the grid step in µm of a
    pixel scan.
    """

    path: str = ""
    frame_rotation: str | None = None
    quality_prop: str | None = None
    structures: dict | None = None
    step_um: float | None = None


@dataclass(frozen=True)
class GrainOptions:
    """Grain reconstruction and clean-up (:func:`slipnet.grains.build_grain_graph` keywords)."""

    threshold_deg: float = 15.0
    subgrain_deg: float | None = None
    min_quality: float | None = None
    fill_unindexed: bool = False
    min_grain_size: int | None = None
    min_grain_area_um2: float | None = None


@dataclass(frozen=True)
class LoadOptions:
    """The load: axis (map frame, required), amplitude (MPa) and stress ratio R."""

    axis: tuple[float, float, float] = (math.nan, math.nan, math.nan)
    stress_amplitude_mpa: float = 200.0
    stress_ratio: float = -1.0


@dataclass(frozen=True)
class StressOptions:
    """The full-field elastic solve: equilibrium tolerance and the treatment of unindexed points."""

    tol: float = 1e-5
    unindexed: str = "auto"


@dataclass(frozen=True)
class NotchOptions:
    """The notch plan (:func:`slipnet.notch.plan_notch` keywords) and the edges it runs along."""

    edges: tuple = ("left",)
    spacing_um: float = 20.0
    depth_um: float = 50.0
    root_radius_um: float = 10.0
    opening_deg: float = 0.0
    concentration: str = "peterson"
    window_um: float = 200.0
    crack_sizes_um: tuple[float, ...] = (5.0, 20.0)
    weights: dict | None = None
    method: str = "weighted"
    strong_barrier: float = 0.5
    top_k: int = 3
    target: dict | None = None
    samples: int = 0
    orientation_noise_deg: float = 1.5
    load_misalignment_deg: float = 2.0
    position_error_um: float = 5.0
    seed: int = 0
    scheduler: str = "synchronous"
    workers: int | None = None


@dataclass(frozen=True)
class ForecastOptions:
    """Forecasts from the best ``candidates`` notches: horizon (µm), Monte Carlo samples and seed."""

    candidates: int = 3
    horizon_um: float = 300.0
    samples: int = 20
    seed: int = 0
    boundary_inclination_deg: float = 90.0


@dataclass(frozen=True)
class GrowthOptions:
    """Growth model keywords (:func:`slipnet.growth.simulate_growth`); None keeps the model default."""

    friction_stress: float | None = None
    coefficient: float | None = None
    exponent: float | None = None
    barrier_stress: float | None = None
    initial_length: float | None = None
    final_length: float | None = None
    n_points: int = 2000
    strength_scatter: float = 0.2

    def model_constants(self) -> dict:
        """The constants that are set (for the notch plan's growth estimate too)."""
        return {k: v for k, v in asdict(self).items()
                if k in ("friction_stress", "coefficient", "exponent", "barrier_stress") and v is not None}


@dataclass(frozen=True)
class CompareOptions:
    """Measured inputs of the optional comparison and its tolerances (µm)."""

    strain: str | None = None
    control_points: str | None = None
    transform: str = "affine"
    crack_path: str | None = None
    growth_record: str | None = None
    notch: int = 1
    step: int | None = None
    window: int | None = None
    site_tol_um: float | None = None
    path_tol_um: float | None = None
    peak_distance_um: float | None = None
    dip_prominence: float = 0.1
    dip_tol_um: float | None = None
    calibrate: bool = False
    synthetic: bool = False
    strain_reader: dict | None = None
    points_reader: dict | None = None
    record_reader: dict | None = None

    @property
    def given(self) -> bool:
        """True when a measured strain file is given (the comparison runs)."""
        return self.strain is not None


@dataclass(frozen=True)
class StudyOptions:
    """Every choice of a study, one section per step."""

    map: MapOptions = field(default_factory=MapOptions)
    grains: GrainOptions = field(default_factory=GrainOptions)
    load: LoadOptions = field(default_factory=LoadOptions)
    stress: StressOptions = field(default_factory=StressOptions)
    notch: NotchOptions = field(default_factory=NotchOptions)
    forecast: ForecastOptions = field(default_factory=ForecastOptions)
    growth: GrowthOptions = field(default_factory=GrowthOptions)
    compare: CompareOptions = field(default_factory=CompareOptions)

    def check(self) -> StudyOptions:
        """Check the choices that no later step would check before work is done; returns self.

        Raises
        ------
        ParameterError
            A missing map or load axis, a bad edge, a number outside its range (:data:`RANGES`).
        """
        if not self.map.path:
            raise ParameterError("study: give the orientation map (MAP on the command line or [specimen] map "
                                 "in the study file)")
        axis = self.load.axis
        if len(axis) != 3 or not all(math.isfinite(float(v)) for v in axis) or not any(float(v) for v in axis):
            raise ParameterError("study: give the load axis as three numbers in the map frame (--load-axis X Y Z "
                                 f"or [loading] axis = [x, y, z]); got {list(axis)}")
        _check_ranges(self)
        _check_readers(self.compare)
        from slipnet.io.maps import check_structures

        check_structures(self.map.structures)  # a wrong phase choice is refused before any work
        if not self.notch.edges:
            raise ParameterError("study: give at least one edge to notch (--side, --edge or [candidates] edges)")
        for e in self.notch.edges:
            if isinstance(e, str) and e not in SIDES:
                raise ParameterError(f"study: notch edge should be one of {', '.join(SIDES)} or a polyline of "
                                     f"[x, y] points in µm; got {e!r}")
        if int(self.forecast.candidates) < 1:
            raise ParameterError(f"study: forecast candidates should be >= 1; got {self.forecast.candidates}")
        if int(self.compare.notch) < 1:
            raise ParameterError(f"study: compare notch (the rank of the notch cut) should be >= 1; got "
                                 f"{self.compare.notch}")
        if not self.compare.given and any(getattr(self.compare, k) for k in ("control_points", "crack_path",
                                                                             "growth_record")):
            raise ParameterError("study: control points, crack path and growth record are compared with a measured "
                                 "strain map: give --strain FILE too")
        return self


# ------------------------------------------------------------------------------------------------ TOML
#: (section, key) of the study file → (options section, field).
_FILE_KEYS: dict[tuple[str, str], tuple[str, str]] = {
    ("specimen", "map"): ("map", "path"),
    ("specimen", "frame_rotation"): ("map", "frame_rotation"),
    ("specimen", "quality_prop"): ("map", "quality_prop"),
    ("specimen", "structures"): ("map", "structures"),
    ("specimen", "step_um"): ("map", "step_um"),
    ("specimen", "threshold_deg"): ("grains", "threshold_deg"),
    ("specimen", "min_grain_size"): ("grains", "min_grain_size"),
    **{("cleanup", k): ("grains", k) for k in ("subgrain_deg", "min_quality", "fill_unindexed", "min_grain_area_um2")},
    ("loading", "axis"): ("load", "axis"),
    ("loading", "stress_amplitude_mpa"): ("load", "stress_amplitude_mpa"),
    ("loading", "stress_ratio"): ("load", "stress_ratio"),
    ("stress", "tol"): ("stress", "tol"),
    ("stress", "unindexed"): ("stress", "unindexed"),
    **{("notch", k): ("notch", k) for k in ("depth_um", "root_radius_um", "opening_deg", "concentration")},
    ("candidates", "edge"): ("notch", "edges"),
    ("candidates", "edges"): ("notch", "edges"),
    **{("candidates", k): ("notch", k) for k in ("spacing_um", "window_um", "crack_sizes_um")},
    **{("objectives", k): ("notch", k) for k in ("weights", "method", "strong_barrier", "top_k", "target")},
    **{("uncertainty", k): ("notch", k) for k in ("samples", "orientation_noise_deg", "load_misalignment_deg",
                                                  "position_error_um", "seed")},
    **{("run", k): ("notch", k) for k in ("scheduler", "workers")},
    **{("forecast", f.name): ("forecast", f.name) for f in fields(ForecastOptions)},
    **{("growth", f.name): ("growth", f.name) for f in fields(GrowthOptions)},
    **{("compare", f.name): ("compare", f.name) for f in fields(CompareOptions)},
}
_PATH_KEYS = {("map", "path"), ("compare", "strain"), ("compare", "control_points"), ("compare", "crack_path"),
              ("compare", "growth_record")}


#: Accepted range of every number a study takes: (section, option) -> (low, high, integer).
#: Bounds keep a typing slip (``samples = 1e18``, a size in nm) from becoming a run that never
#: ends or a request for more memory than any machine has; each is far beyond practical use.
RANGES: dict[tuple[str, str], tuple[float, float, bool]] = {
    ("map", "step_um"): (1e-6, 1e6, False),
    ("grains", "min_grain_size"): (1, 10**6, True),
    ("load", "stress_amplitude_mpa"): (1e-3, 1e5, False),
    ("load", "stress_ratio"): (-10.0, 0.99, False),
    ("stress", "tol"): (1e-12, 0.1, False),
    ("notch", "spacing_um"): (1e-3, 1e6, False),
    ("notch", "depth_um"): (1e-3, 1e6, False),
    ("notch", "root_radius_um"): (1e-3, 1e6, False),
    ("notch", "opening_deg"): (0.0, 179.0, False),
    ("notch", "window_um"): (1e-3, 1e6, False),
    ("notch", "top_k"): (1, 1000, True),
    ("notch", "samples"): (0, 10_000, True),
    ("notch", "orientation_noise_deg"): (0.0, 90.0, False),
    ("notch", "load_misalignment_deg"): (0.0, 90.0, False),
    ("notch", "position_error_um"): (0.0, 1e6, False),
    ("notch", "seed"): (0, 2**63 - 1, True),
    ("notch", "workers"): (1, 1024, True),
    ("forecast", "candidates"): (1, 50, True),
    ("forecast", "horizon_um"): (1e-3, 1e6, False),
    ("forecast", "samples"): (0, 10_000, True),
    ("forecast", "seed"): (0, 2**63 - 1, True),
    ("forecast", "boundary_inclination_deg"): (0.0, 90.0, False),
    ("growth", "n_points"): (10, 10**6, True),
    ("growth", "strength_scatter"): (0.0, 10.0, False),
    ("compare", "notch"): (1, 50, True),
}


#: Keywords a study may pass to each reader of measured data (``[compare] *_reader`` tables).
READER_KEYS: dict[str, frozenset[str]] = {
    "strain_reader": frozenset({"columns", "length_unit", "value_unit", "quantity", "pixel_size_um", "grid_step",
                                "shear", "sidecar", "encoding", "delimiter"}),
    "points_reader": frozenset({"columns", "length_unit", "strain_length_unit", "pixel_size_um", "encoding",
                                "delimiter"}),
    "record_reader": frozenset({"columns", "length_unit", "cycles_unit", "encoding", "delimiter"}),
}


def _check_readers(c) -> None:
    """Refuse a reader table with an unknown keyword or a column mapping that is not NAME = COLUMN."""
    for name, allowed in READER_KEYS.items():
        table = getattr(c, name)
        if table is None:
            continue
        if not isinstance(table, dict):
            raise ParameterError(f"study: compare {name} should be a table of reader keywords "
                                 f"({', '.join(sorted(allowed))}); got {table!r}")
        extra = sorted(set(table) - allowed)
        if extra:
            raise ParameterError(f"study: compare {name} does not take {', '.join(extra)}; accepted: "
                                 f"{', '.join(sorted(allowed))}")
        cols = table.get("columns")
        if cols is not None and not (isinstance(cols, dict) and all(isinstance(v, str) for v in cols.values())):
            raise ParameterError(f"study: compare {name} columns should map slipnet's names to the file's column "
                                 f"names, e.g. {{exx = \"E_xx [%]\"}}; got {cols!r}")


def _check_ranges(opts) -> None:
    """Refuse any number outside :data:`RANGES`, naming the option, the limits and the value."""
    for (sec, key), (lo, hi, integer) in RANGES.items():
        v = getattr(getattr(opts, sec), key)
        if v is None:
            continue
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise ParameterError(f"study: {sec} {key} should be a number; got {v!r}")
        if integer and not float(v).is_integer():
            raise ParameterError(f"study: {sec} {key} should be a whole number between {lo:g} and {hi:g}; got {v!r}")
        if not (math.isfinite(float(v)) and lo <= v <= hi):
            raise ParameterError(f"study: {sec} {key} should lie between {lo:g} and {hi:g}; got {v!r}")


def _is_point(q) -> bool:
    return isinstance(q, list) and len(q) == 2 and all(isinstance(c, (int, float)) for c in q)


def _edges(value) -> tuple:
    """A side, a polyline, or a list of sides and polylines, as a tuple of edges."""
    if isinstance(value, str):
        return (value,)
    if isinstance(value, list) and value and all(_is_point(q) for q in value):
        return (tuple(tuple(float(c) for c in q) for q in value),)
    if isinstance(value, list) and value:
        out: list = []
        for e in value:
            out += list(_edges(e))
        return tuple(out)
    raise ParameterError(f"an edge should be a side name or a list of [x, y] points; got {value!r}")


@guarded_reader("study file", "check its TOML against the keys in the study-file documentation")
def read_study_file(path: str | os.PathLike) -> StudyOptions:
    """Read a TOML study file (see the module docstring), paths resolved against its folder.

    Raises
    ------
    InputFileError
        A missing or malformed file, an unknown section or key, a missing load axis or a named
        input file that does not exist.
    """
    p = Path(path)
    if not p.exists():
        raise InputFileError("study file not found; give the path of a TOML study file", path=str(p))
    checked_input(p, "study file")
    try:
        text = p.read_text(encoding="utf-8")
        check_nesting(text, "study file", path=p)
        data = tomllib.loads(text)
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise InputFileError(f"not a valid TOML study file ({err})", path=str(p)) from err
    sections = sorted({s for s, _ in _FILE_KEYS})
    values: dict[str, dict] = {}
    for sec, table in data.items():
        if sec not in sections:
            raise InputFileError(f"unknown section [{sec}]; accepted: {', '.join(sections)}", path=str(p))
        if not isinstance(table, dict):
            raise InputFileError(f"[{sec}] should be a table of keys", path=str(p))
        for key, v in table.items():
            if (sec, key) not in _FILE_KEYS:
                known = sorted(k for s, k in _FILE_KEYS if s == sec)
                raise InputFileError(f"unknown key {key!r} in [{sec}]; accepted: {', '.join(known)}", path=str(p))
            target = _FILE_KEYS[(sec, key)]
            if target in _PATH_KEYS and v is not None:
                full = (p.parent / str(v)).resolve()
                if not full.is_file():
                    raise InputFileError(f"the file {v!r} named in [{sec}] {key} does not exist ({full})",
                                         path=str(p))
                v = str(full)
            values.setdefault(target[0], {})[target[1]] = v
    if "axis" not in values.get("load", {}):
        raise InputFileError("[loading] axis is missing: give the load axis as three numbers in the map frame, "
                             "e.g. axis = [0, 1, 0]", path=str(p))
    try:
        return _build(values)
    except (TypeError, ValueError) as err:
        raise InputFileError(f"a value has the wrong type ({err})", path=str(p)) from err


def _build(values: dict[str, dict]) -> StudyOptions:
    base = StudyOptions()
    sections = {}
    for f in fields(StudyOptions):
        cur = getattr(base, f.name)
        given = dict(values.get(f.name, {}))
        for k, v in list(given.items()):
            if k == "edges":
                given[k] = _edges(v)
            elif k in ("axis", "crack_sizes_um"):
                given[k] = tuple(float(x) for x in (v if isinstance(v, list) else [v]))
            elif k == "target" and isinstance(v, dict) and "boundary" in v:
                given[k] = {**v, "boundary": tuple(int(b) for b in v["boundary"])}
        sections[f.name] = replace(cur, **given)
    return StudyOptions(**sections)


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v) if math.isfinite(v) else ("nan" if math.isnan(v) else ("inf" if v > 0 else "-inf"))
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{_toml_key(str(k))} = {_toml_value(x)}" for k, x in v.items()) + "}"
    raise ParameterError(f"cannot write {v!r} into a study file")


def _toml_key(key: str) -> str:
    """A TOML key: bare when it may be, else quoted (phase names may hold spaces or dots)."""
    if key and all(ch.isascii() and (ch.isalnum() or ch in "-_") for ch in key):
        return key
    return _toml_value(key)


def study_file_text(opts: StudyOptions, *, header: str = "") -> str:
    """The TOML study file recording every option of ``opts`` (paths absolute; unset keys left out)."""
    by_section: dict[str, list[str]] = {}
    for (sec, key), (part, name) in _FILE_KEYS.items():
        if (sec, key) == ("candidates", "edge"):
            continue
        v = getattr(getattr(opts, part), name)
        if v is None:
            continue
        by_section.setdefault(sec, []).append(f"{key} = {_toml_value(v)}")
    lines = [f"# {line}" for line in header.splitlines()] + ([""] if header else [])
    for sec in ("specimen", "cleanup", "loading", "stress", "notch", "candidates", "objectives", "uncertainty",
                "forecast", "growth", "compare", "run"):
        if sec in by_section:
            lines += [f"[{sec}]", *by_section[sec], ""]
    return "\n".join(lines)


def write_study_file(opts: StudyOptions, path: str | os.PathLike, *, header: str = "") -> Path:
    """Write :func:`study_file_text` to ``path`` (atomically); returns the path."""
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(study_file_text(opts, header=header), encoding="utf-8")
    return path
