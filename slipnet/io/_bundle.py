"""slipnet's binary map bundle ("slipnet-bundle", version 1): a compressed ``.npz`` without pickles.

Every entry is a plain numeric or fixed-width unicode array, so ``numpy.load(..., allow_pickle=False)``
opens it and the arrays come back bit for bit. Entries:

``bundle_format`` (str), ``bundle_version`` (int), ``quats`` (ny, nx, 4) float64, ``phase`` (ny, nx)
int32, ``quality`` (ny, nx) float64, ``indexed`` (ny, nx) bool, ``step_um`` float64, ``grid`` str,
``origin_um`` (2,) float64, ``phase_names`` / ``phase_structures`` (k,) str, ``phase_lattice_nm``
(k,) float64, ``name`` str, ``meta_json`` str (JSON object).
"""

from __future__ import annotations

import json
import os
import zipfile
from pathlib import Path

import numpy as np

from slipnet._inputs import check_npz_sizes, guarded_reader, loads_json
from slipnet.errors import InputFileError, ParameterError
from slipnet.io._text import json_default
from slipnet.maps.orientation_map import OrientationMap, Phase

FORMAT_NAME = "slipnet-bundle"
FORMAT_VERSION = 1
KEYS = (
    "bundle_format",
    "bundle_version",
    "quats",
    "phase",
    "quality",
    "indexed",
    "step_um",
    "grid",
    "origin_um",
    "phase_names",
    "phase_structures",
    "phase_lattice_nm",
    "name",
    "meta_json",
)
ZIP_MAGIC = b"PK\x03\x04"


def map_arrays(omap: OrientationMap) -> dict[str, np.ndarray]:
    """The bundle entries of ``omap``: plain arrays only (also used inside saved grain graphs)."""
    try:
        meta = json.dumps(omap.meta, ensure_ascii=False, default=json_default)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"map meta should hold JSON-compatible values only; {err}") from err
    arrays = {
        "bundle_format": np.array(FORMAT_NAME),
        "bundle_version": np.array(FORMAT_VERSION, dtype=np.int64),
        "quats": np.ascontiguousarray(omap.quats, dtype=np.float64),
        "phase": np.ascontiguousarray(omap.phase, dtype=np.int32),
        "quality": np.ascontiguousarray(omap.quality, dtype=np.float64),
        "indexed": np.ascontiguousarray(omap.indexed, dtype=bool),
        "step_um": np.array(omap.step, dtype=np.float64),
        "grid": np.array(omap.grid),
        "origin_um": np.array(omap.origin, dtype=np.float64),
        "phase_names": np.array([p.name for p in omap.phases], dtype=str),
        "phase_structures": np.array([p.structure for p in omap.phases], dtype=str),
        "phase_lattice_nm": np.array([p.lattice_parameter_nm for p in omap.phases], dtype=np.float64),
        "name": np.array(str(omap.name)),
        "meta_json": np.array(meta),
    }
    return arrays


def write_bundle(omap: OrientationMap, tmp: Path) -> None:
    """Write ``omap`` as a slipnet bundle into the (temporary) path ``tmp``."""
    arrays = map_arrays(omap)
    # A file object, not a name: numpy would append ".npz" to the temporary name.
    with open(tmp, "wb") as fh:
        np.savez_compressed(fh, **arrays)


@guarded_reader("map bundle", "write bundles with slipnet.io.write_map")
def read_bundle(path: str | os.PathLike) -> OrientationMap:
    """Read a slipnet bundle; raise :class:`InputFileError` when it is not one or is damaged."""
    path = str(path)
    check_npz_sizes(path, "map bundle")
    try:
        # our own file handle: numpy leaves its handle open when the archive is damaged
        with open(path, "rb") as fh, np.load(fh, allow_pickle=False) as npz:
            names = set(npz.files)
            if "bundle_format" not in names:
                raise InputFileError(
                    "this .npz archive is not a slipnet bundle (no 'bundle_format' entry); write bundles with "
                    "slipnet.io.write_map",
                    path=path,
                )
            fmt = str(npz["bundle_format"])
            if fmt != FORMAT_NAME:
                raise InputFileError(f"bundle_format should be {FORMAT_NAME!r}; got {fmt!r}", path=path)
            version = int(npz["bundle_version"]) if "bundle_version" in names else -1
            if version != FORMAT_VERSION:
                raise InputFileError(
                    f"unsupported bundle version {version}; this slipnet reads version {FORMAT_VERSION}", path=path
                )
            missing = [k for k in KEYS if k not in names]
            if missing:
                raise InputFileError(
                    f"the bundle lacks the entry {missing[0]!r} (needs {', '.join(KEYS)}); re-write it with "
                    "slipnet.io.write_map",
                    path=path,
                    column=missing[0],
                )
            d = {k: npz[k] for k in KEYS}
    except InputFileError:
        raise
    except (zipfile.BadZipFile, OSError, ValueError, EOFError, KeyError) as err:
        raise InputFileError(
            f"cannot read the bundle ({type(err).__name__}: {err}); the file is damaged or not a slipnet bundle",
            path=path,
        ) from err
    return map_from_arrays(d, path)


def map_from_arrays(d, path: str) -> OrientationMap:
    """The map held by bundle entries ``d`` (a mapping of :data:`KEYS`); errors name ``path``."""
    try:
        meta = loads_json(str(d["meta_json"]), "bundle metadata", path=path)
        if not isinstance(meta, dict):
            raise ValueError("meta_json is not a JSON object")
        phases = tuple(
            Phase(str(n), str(s), float(a))
            for n, s, a in zip(d["phase_names"], d["phase_structures"], d["phase_lattice_nm"], strict=True)
        )
        return OrientationMap(
            quats=d["quats"],
            phase=d["phase"],
            quality=d["quality"],
            indexed=d["indexed"],
            step=float(d["step_um"]),
            grid=str(d["grid"]),
            phases=phases,
            origin=(float(d["origin_um"][0]), float(d["origin_um"][1])),
            name=str(d["name"]),
            meta=meta,
        )
    except (ParameterError, ValueError, TypeError, IndexError) as err:
        raise InputFileError(f"the bundle's contents are inconsistent: {err}", path=path) from err
