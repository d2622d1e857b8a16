"""Notch study files (TOML): everything a notch plan needs, so it can be re-run exactly.

See ``examples/notch/study.toml``. Sections and keys (units in the key names)::

    [specimen]     map (path, relative to the study file), threshold_deg, min_grain_size, and how
                   to read the map: frame_rotation, quality_prop, structures, step_um (read_map keywords)
    [loading]      axis (3 numbers, map frame; required), stress_amplitude_mpa, stress_ratio
    [notch]        depth_um, root_radius_um, opening_deg, concentration ("peterson" | "full_field")
    [candidates]   edge ("left" | "right" | "top" | "bottom" or [[x, y], ...] in µm), spacing_um,
                   window_um, crack_sizes_um (list)
    [objectives]   weights (table objective = weight), method ("weighted" | "pareto"),
                   strong_barrier, top_k, target ({boundary = [a, b], distance_um = d} or
                   {grain = g, distance_um = d})
    [uncertainty]  samples, orientation_noise_deg, load_misalignment_deg, position_error_um, seed
    [growth]       any keyword of slipnet.growth.simulate_growth (friction_stress, coefficient, ...)
    [run]          scheduler ("synchronous" | "threads" | "processes" | "tcp://host:port"), workers
"""

from __future__ import annotations

import os
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from slipnet._inputs import check_nesting, checked_input, guarded_reader
from slipnet.errors import InputFileError

__all__ = ["Study", "read_study"]

_STUDY_KEYS = {
    "specimen": {"map", "threshold_deg", "min_grain_size", "frame_rotation", "quality_prop", "structures",
                 "step_um"},
    "loading": {"axis", "stress_amplitude_mpa", "stress_ratio"},
    "notch": {"depth_um", "root_radius_um", "opening_deg", "concentration"},
    "candidates": {"edge", "spacing_um", "window_um", "crack_sizes_um"},
    "objectives": {"weights", "method", "strong_barrier", "top_k", "target"},
    "uncertainty": {"samples", "orientation_noise_deg", "load_misalignment_deg", "position_error_um", "seed"},
    "growth": None,  # passed through to simulate_growth
    "run": {"scheduler", "workers"},
}


@dataclass(frozen=True)
class Study:
    """A parsed study file: the map to read (and how), how to build grains, and the plan keywords."""

    path: Path
    map_path: Path | None
    grain_options: dict
    plan_options: dict
    map_options: dict = field(default_factory=dict)

    def with_map(self, map_path: Path) -> Study:
        """The same study on another specimen map (batch mode)."""
        return Study(self.path, Path(map_path), self.grain_options, self.plan_options, self.map_options)


@guarded_reader("study file", "check its TOML against the keys listed in the study-file documentation")
def read_study(path: str | os.PathLike) -> Study:
    """Read and check a TOML study file (see the module docstring for its keys).

    Raises
    ------
    InputFileError
        For a missing or malformed file, an unknown section or key, or a missing map file.
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
    for sec, val in data.items():
        if sec not in _STUDY_KEYS:
            raise InputFileError(f"unknown section [{sec}]; accepted: {', '.join(_STUDY_KEYS)}", path=str(p))
        if not isinstance(val, dict):
            raise InputFileError(f"[{sec}] should be a table of keys", path=str(p))
        allowed = _STUDY_KEYS[sec]
        if allowed is not None:
            extra = sorted(set(val) - allowed)
            if extra:
                raise InputFileError(
                    f"unknown key(s) {', '.join(extra)} in [{sec}]; accepted: {', '.join(sorted(allowed))}",
                    path=str(p))
    spec = data.get("specimen", {})
    map_path = None
    if "map" in spec:
        map_path = (p.parent / spec["map"]).resolve()
        if not map_path.is_file():
            raise InputFileError(f"the map {spec['map']!r} named in [specimen] does not exist ({map_path})",
                                 path=str(p))
    grain_options = {k: spec[k] for k in ("threshold_deg", "min_grain_size") if k in spec}
    map_options = {k: spec[k] for k in ("frame_rotation", "quality_prop", "structures", "step_um") if k in spec}
    load = data.get("loading", {})
    notch = data.get("notch", {})
    cand = data.get("candidates", {})
    obj = data.get("objectives", {})
    unc = data.get("uncertainty", {})
    run = data.get("run", {})
    opts: dict = {}
    if "axis" not in load:
        raise InputFileError("[loading] axis is missing: give the load axis as three numbers in the map frame, "
                             "e.g. axis = [0, 1, 0]", path=str(p))
    opts["load_axis"] = tuple(load["axis"])
    for src, dst in (("stress_amplitude_mpa", "stress_amplitude"), ("stress_ratio", "stress_ratio")):
        if src in load:
            opts[dst] = load[src]
    opts.update(notch)
    opts.update(cand)
    if "weights" in obj:
        opts["objectives"] = dict(obj["weights"])
    for k in ("method", "strong_barrier", "top_k"):
        if k in obj:
            opts[k] = obj[k]
    if "target" in obj:
        t = dict(obj["target"])
        if "boundary" in t:
            t["boundary"] = tuple(int(v) for v in t["boundary"])
        opts["target"] = t
    opts.update(unc)
    if "growth" in data:
        opts["growth"] = dict(data["growth"])
    opts.update(run)
    if isinstance(opts.get("edge"), list):
        opts["edge"] = np.asarray(opts["edge"], dtype=float)
    return Study(p, map_path, grain_options, opts, map_options)
