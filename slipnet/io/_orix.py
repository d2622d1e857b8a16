"""Bridge between :class:`~slipnet.maps.OrientationMap` and orix's ``CrystalMap``.

orix keeps flat per-point arrays: ``x``/``y`` coordinates in ``scan_unit``, a ``Rotation`` per point
(lab → crystal, the same convention as slipnet), ``phase_id`` with −1 for not-indexed points, a
``PhaseList`` keyed by phase id, and a ``prop`` dict of per-point arrays. orix itself has no notion
of hexagonal grids, so the grid kind is worked out here from the coordinates.
"""

from __future__ import annotations

import math

import numpy as np

from slipnet.errors import InputFileError, ParameterError
from slipnet.io._grid import detect_grid, place_points
from slipnet.maps.orientation_map import GRIDS, OrientationMap, Phase

# Space group numbers of the two cubic structures slipnet models (International Tables A).
_SPACE_GROUP = {"bcc": 229, "fcc": 225}  # Im-3m, Fm-3m; common practice
_DEFAULT_LATTICE_NM = {"bcc": 0.2866, "fcc": 0.3591}  # α-Fe, γ-Fe near room temperature; from memory
_FCC_WORDS = ("fcc", "austenite", "gamma")
_UNIT_TO_UM = {"um": 1.0, "µm": 1.0, "μm": 1.0, "micron": 1.0, "nm": 1e-3, "mm": 1e3, "px": 1.0}


def to_orix(omap: OrientationMap):
    """Convert a map into an orix ``CrystalMap`` (coordinates in µm, quality in ``prop["quality"]``).

    Parameters
    ----------
    omap
        The map; its points become orix's flat, row-major arrays.

    Returns
    -------
    orix.crystal_map.CrystalMap
        ``x``, ``y`` in µm (``scan_unit="um"``); rotations equal to ``omap.quats`` (identity at
        unindexed points, which carry phase id −1); one orix phase per slipnet phase that has points,
        with space group Im-3m (bcc) or Fm-3m (fcc) and the lattice parameter in Å.

    Notes
    -----
    orix drops phases that no point uses, and has no place for ``name``, ``meta`` or the grid kind;
    :func:`from_orix` recovers the grid kind from the coordinates.
    """
    from diffpy.structure import Lattice, Structure
    from orix.crystal_map import CrystalMap, PhaseList
    from orix.crystal_map import Phase as OrixPhase
    from orix.quaternion import Rotation

    x, y = omap.coordinates()
    q = omap.quats.reshape(-1, 4).copy()
    q[~omap.indexed.ravel()] = (1.0, 0.0, 0.0, 0.0)
    colours = ("tab:blue", "tab:orange", "tab:green", "tab:red", "tab:purple", "tab:brown")
    plist = {}
    for k, p in enumerate(omap.phases):
        a = 10.0 * p.lattice_parameter_nm  # orix phases (diffpy lattices) are in Å
        plist[k] = OrixPhase(
            name=p.name,
            space_group=_SPACE_GROUP[p.structure],
            structure=Structure(lattice=Lattice(a, a, a, 90.0, 90.0, 90.0)),
            color=colours[k % len(colours)],
        )
    return CrystalMap(
        rotations=Rotation(q),
        phase_id=omap.phase.ravel().astype(int),
        x=x.ravel(),
        y=y.ravel(),
        phase_list=PhaseList(plist),
        prop={"quality": omap.quality.ravel().astype(np.float64)},
        scan_unit="um",
    )


def _structure_of(phase) -> tuple[str | None, str]:
    """slipnet structure of an orix phase (None if not cubic) and how it was decided."""
    sg = getattr(phase, "space_group", None)
    number = getattr(sg, "number", None)
    for structure, num in _SPACE_GROUP.items():
        if number == num:
            return structure, "space group"
    pg = getattr(phase, "point_group", None)
    proper = getattr(getattr(pg, "proper_subgroup", None), "name", None) if pg is not None else None
    if proper != "432":
        return None, "not cubic"
    name = str(phase.name).lower()
    if any(w in name for w in _FCC_WORDS):
        return "fcc", "guessed from the name"
    return "bcc", "guessed (cubic, no space group)"


def _lattice_nm(phase, structure: str) -> tuple[float, bool]:
    """Lattice parameter of an orix phase in nm, and whether it was known (else a default)."""
    try:
        a = float(phase.structure.lattice.a)
    except AttributeError:
        return _DEFAULT_LATTICE_NM[structure], False
    if 1.5 <= a <= 10.0:  # Å, as orix's readers store it; rounding undoes the ×10 of to_orix exactly
        return round(a / 10.0, 12), True
    if 0.15 <= a < 1.0:  # already nm
        return a, True
    return _DEFAULT_LATTICE_NM[structure], False  # e.g. diffpy's unit default lattice


def from_orix(
    xmap,
    *,
    step: float | None = None,
    grid: str | None = None,
    quality_prop: str | None = None,
    path: str | None = None,
) -> OrientationMap:
    """Build an :class:`OrientationMap` from an orix ``CrystalMap``.

    Parameters
    ----------
    xmap : orix.crystal_map.CrystalMap
        The crystal map (only its points "in data" are used).
    step
        Grid step in µm; worked out from the coordinates when ``None``.
    grid
        ``"square"`` or ``"hex"``; worked out from the coordinates when ``None`` (hex: rows
        ``step·√3/2`` apart, odd rows shifted by ``step/2``).
    quality_prop
        Name of the ``xmap.prop`` entry to use as per-point quality; ``None`` takes ``"quality"``
        if present, otherwise quality is 1 everywhere.
    path
        File name, for error messages only.

    Returns
    -------
    OrientationMap
        Orientations as recorded (apply a frame rotation separately), phases renumbered
        0..k−1 in order of orix phase id, points of non-cubic phases unindexed. ``meta`` records
        the orix phase ids, the quality source and any guesses made.

    Raises
    ------
    InputFileError
        Coordinates that do not form one complete uniform grid, or a missing ``quality_prop``.
    """
    _check_options(step, grid)
    n = int(xmap.size)
    if n == 0:
        raise InputFileError("the crystal map holds no points", path=path)
    meta: dict = {"source": "orix"}
    x, y = _coordinates_um(xmap, n, meta, path)
    if grid is None or step is None:
        try:
            g, s = detect_grid(x, y, step=step)
        except InputFileError as err:
            raise InputFileError(str(err), path=path) from err
        grid = grid or g
        step = step or s
    step = float(step)

    def where(k: int) -> tuple[str, None]:
        return f"point {k} of the crystal map", None

    place = place_points(x, y, step, grid, where=where, path=path)
    rot = np.asarray(xmap.rotations.data, dtype=np.float64)
    if rot.ndim == 3:  # several candidate rotations per point: the first is the best match
        rot = rot[:, 0, :]
    rot = rot.reshape(n, 4)
    phases, new_pid = _cubic_phases(xmap, n, meta, path)
    qual = _quality(xmap, n, quality_prop, meta, path)
    return _build_map(place, rot, new_pid, qual, step, grid, phases, meta)


def _check_options(step, grid) -> None:
    """Check the ``step`` and ``grid`` options of :func:`from_orix`."""
    if grid is not None and grid not in GRIDS:
        raise ParameterError(f"grid should be one of {', '.join(GRIDS)} or None; got {grid!r}")
    if step is not None and not (math.isfinite(float(step)) and float(step) > 0):
        raise ParameterError(f"step should be a positive number of µm or None; got {step!r}")


def _coordinates_um(xmap, n: int, meta: dict, path: str | None) -> tuple[np.ndarray, np.ndarray]:
    """The point coordinates in µm from orix's ``scan_unit`` (zeros where orix has none)."""
    unit = str(xmap.scan_unit or "px")
    scale = _UNIT_TO_UM.get(unit)
    if scale is None:
        raise InputFileError(
            f"scan unit {unit!r} is not a length slipnet knows; accepted: {', '.join(_UNIT_TO_UM)}", path=path
        )
    if unit == "px":
        meta["note_scan_unit"] = "orix scan unit was 'px'; coordinates taken as µm"
    x = xmap.x
    y = xmap.y
    x = np.zeros(n) if x is None else np.asarray(x, dtype=np.float64) * scale
    y = np.zeros(n) if y is None else np.asarray(y, dtype=np.float64) * scale
    return x, y


def _cubic_phases(xmap, n: int, meta: dict, path: str | None) -> tuple[list[Phase], np.ndarray]:
    """The cubic orix phases as slipnet phases (renumbered 0..k−1) and each point's new phase id (−1 for none)."""
    pid = np.asarray(xmap.phase_id, dtype=np.int64).reshape(n)
    phases: list[Phase] = []
    lookup: dict[int, int] = {}
    dropped, notes = [], []
    for orix_id, ph in xmap.phases:
        orix_id = int(orix_id)
        if orix_id < 0:
            continue
        structure, how = _structure_of(ph)
        if structure is None:
            dropped.append(f"{ph.name} (id {orix_id})")
            continue
        a_nm, known = _lattice_nm(ph, structure)
        if how != "space group":
            notes.append(f"{ph.name}: structure {structure} {how}")
        if not known:
            notes.append(f"{ph.name}: lattice parameter unknown, {a_nm} nm assumed")
        lookup[orix_id] = len(phases)
        name = " ".join(str(ph.name).replace(",", " ").split()) or f"phase{orix_id}"
        phases.append(Phase(name, structure, a_nm))
    if not phases:
        raise InputFileError(
            "the crystal map has no cubic (bcc/fcc) phase; slipnet models cubic phases only", path=path
        )
    table = np.full(int(max(pid.max(), max(lookup)) + 2), -1, dtype=np.int32)
    for orix_id, k in lookup.items():
        table[orix_id] = k
    new_pid = np.where(pid >= 0, table[np.clip(pid, -1, None)], -1).astype(np.int32)
    meta["orix_phase_ids"] = {str(o): k for o, k in lookup.items()}
    if dropped:
        meta["unindexed_non_cubic_phases"] = dropped
    if notes:
        meta["notes"] = notes
    return phases, new_pid


def _quality(xmap, n: int, quality_prop: str | None, meta: dict, path: str | None) -> np.ndarray:
    """Per-point quality from ``xmap.prop`` (``quality_prop``, else ``"quality"`` if present, else 1)."""
    props = list(xmap.prop.keys())
    if quality_prop is None:
        quality_prop = "quality" if "quality" in props else None
    if quality_prop is None:
        meta["quality_source"] = "none (set to 1)"
        return np.ones(n)
    if quality_prop not in props:
        raise InputFileError(
            f"the crystal map has no property {quality_prop!r}; it has {', '.join(props) or 'none'} "
            "(choose one with quality_prop=)",
            path=path,
            column=quality_prop,
        )
    meta["quality_source"] = quality_prop
    return np.asarray(xmap.prop[quality_prop], dtype=np.float64).reshape(n)


def _build_map(place, rot: np.ndarray, new_pid: np.ndarray, qual: np.ndarray, step: float, grid: str,
               phases: list[Phase], meta: dict) -> OrientationMap:
    """Scatter the flat points onto the grid: unit quaternions where indexed, NaN and phase −1 elsewhere."""
    ny, nx = place.shape
    indexed = (new_pid >= 0) & np.all(np.isfinite(rot), axis=1)
    norm = np.linalg.norm(rot, axis=1, keepdims=True)
    rot = np.where(indexed[:, None], rot / np.where(norm > 0, norm, 1.0), np.nan)
    quats = np.full((ny * nx, 4), np.nan)
    quats[place.flat] = rot
    phase = np.full(ny * nx, -1, np.int32)
    phase[place.flat] = np.where(indexed, new_pid, -1)
    quality = np.zeros(ny * nx)
    quality[place.flat] = np.where(np.isfinite(qual), qual, 0.0)
    ind = np.zeros(ny * nx, bool)
    ind[place.flat] = indexed
    return OrientationMap(
        quats=quats.reshape(ny, nx, 4),
        phase=phase.reshape(ny, nx),
        quality=quality.reshape(ny, nx),
        indexed=ind.reshape(ny, nx),
        step=step,
        grid=grid,
        phases=tuple(phases),
        origin=place.origin,
        name="",
        meta=meta,
    )
