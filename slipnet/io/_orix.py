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
from slipnet.io._grid import detect_grid, place_points, short_rows_note
from slipnet.maps.orientation_map import CUBIC_STRUCTURES, GRIDS, OrientationMap, Phase

__all__ = ["QUALITY_RULES", "STRUCTURE_CHOICES", "check_structures", "from_orix", "to_orix"]

#: What a caller may say a phase is: a structure slipnet analyses, 'other' (kept, shown and counted,
#: left out of slip analysis) or 'ignore' (its points left unindexed).
STRUCTURE_CHOICES = (*CUBIC_STRUCTURES, "other", "ignore")

# Space group numbers of the two cubic structures slipnet models (International Tables A).
_SPACE_GROUP = {"bcc": 229, "fcc": 225}  # Im-3m, Fm-3m; common practice
_DEFAULT_LATTICE_NM = {"bcc": 0.2866, "fcc": 0.3591}  # α-Fe, γ-Fe near room temperature; from memory
_UNKNOWN_LATTICE_NM = 0.1  # an 'other' phase without a lattice: the number is kept, never used
# Cubic metals with point group m-3m and no atoms listed: bcc metals of engineering alloys have
# a <= 3.31 Å (Fe 2.87, Cr 2.88, V 3.03, Mo 3.15, W 3.16, β-Ti 3.28, Nb and Ta 3.30) and fcc ones
# a >= 3.52 Å (Ni 3.52, Co 3.54, γ-Fe 3.59, Cu 3.61, Al 4.05); from memory. Between the two limits
# nothing is guessed.
_BCC_MAX_A = 3.35
_FCC_MIN_A = 3.45
# The atom sites (fractions of the cubic cell) of one element that make a bcc or an fcc lattice.
_CELL_SITES = {
    "bcc": {(0.0, 0.0, 0.0), (0.5, 0.5, 0.5)},
    "fcc": {(0.0, 0.0, 0.0), (0.0, 0.5, 0.5), (0.5, 0.0, 0.5), (0.5, 0.5, 0.0)},
}
_UNIT_TO_UM = {"um": 1.0, "µm": 1.0, "μm": 1.0, "micron": 1.0, "nm": 1e-3, "mm": 1e3, "px": 1.0, "pixel": 1.0}
_PIXELS = ("px", "pixel")


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
        with space group Im-3m (bcc) or Fm-3m (fcc) and the lattice parameter in Å; an 'other'
        phase carries the point group recorded in ``meta["phase_point_groups"]`` (else ``1``).

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
    # an 'other' phase goes out with the point group it was read with ('1', no symmetry, if unknown)
    point_groups = dict((omap.meta or {}).get("phase_point_groups") or {})
    colours = ("tab:blue", "tab:orange", "tab:green", "tab:red", "tab:purple", "tab:brown")
    plist = {}
    for k, p in enumerate(omap.phases):
        a = 10.0 * p.lattice_parameter_nm  # orix phases (diffpy lattices) are in Å
        symmetry = ({"space_group": _SPACE_GROUP[p.structure]} if p.structure in _SPACE_GROUP
                    else {"point_group": point_groups.get(p.name, "1")})
        plist[k] = OrixPhase(
            name=p.name,
            structure=Structure(lattice=Lattice(a, a, a, 90.0, 90.0, 90.0)),
            color=colours[k % len(colours)],
            **symmetry,
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


def check_structures(structures) -> dict[str, str]:
    """``structures`` as ``{key: choice}`` with keys as text and choices from :data:`STRUCTURE_CHOICES`.

    Parameters
    ----------
    structures : dict or None
        ``{phase name or phase id: "bcc" | "fcc" | "other" | "ignore"}``.

    Returns
    -------
    dict
        Empty for ``None``.

    Raises
    ------
    ParameterError
        Not a mapping, or a choice that is not one of :data:`STRUCTURE_CHOICES`.
    """
    if structures is None:
        return {}
    if not isinstance(structures, dict):
        raise ParameterError(
            f"structures should map phase names or ids to one of {', '.join(STRUCTURE_CHOICES)}, "
            f"e.g. {{'austenite': 'fcc'}}; got {structures!r}"
        )
    out: dict[str, str] = {}
    for key, value in structures.items():
        choice = str(value).strip().lower()
        if choice not in STRUCTURE_CHOICES:
            raise ParameterError(
                f"the structure given for phase {key!r} should be one of {', '.join(STRUCTURE_CHOICES)}; got {value!r}"
            )
        out[str(key).strip()] = choice
    return out


def said_structure(structures: dict[str, str], name: str, phase_id: int, used: set) -> str | None:
    """The structure the caller gave for a phase (by id, then name, then name ignoring case), or None."""
    for key in (str(phase_id), name):
        if key in structures:
            used.add(key)
            return structures[key]
    for key, choice in structures.items():
        if key.casefold() == name.casefold():
            used.add(key)
            return choice
    return None


def check_all_used(structures: dict[str, str], used: set, present: list[str], path: str | None) -> None:
    """Refuse a ``structures`` entry that names no phase of the file (a typing slip would go unnoticed)."""
    unused = [k for k in structures if k not in used]
    if unused:
        raise InputFileError(
            f"structures names phase {unused[0]!r}, which the file does not have; its phases are "
            f"{', '.join(present)} (name a phase by its name or its id)",
            path=path,
        )


def _symmetry(ph) -> tuple[int | None, str | None, str | None, str | None]:
    """(space group number, its symbol, point group name, proper point group name) of an orix phase."""
    sg = getattr(ph, "space_group", None)
    number = getattr(sg, "number", None)
    symbol = getattr(sg, "short_name", None) if sg is not None else None
    pg = getattr(ph, "point_group", None)
    pg_name = getattr(pg, "name", None) if pg is not None else None
    proper = getattr(getattr(pg, "proper_subgroup", None), "name", None) if pg is not None else None
    return (None if number is None else int(number)), symbol, pg_name, proper


def _lattice_abc(ph) -> tuple[float, ...] | None:
    """``(a, b, c, α, β, γ)`` (Å, degrees) of an orix phase, None where diffpy's unit default stands."""
    try:
        abc = tuple(float(v) for v in ph.structure.lattice.abcABG())
    except (AttributeError, TypeError, ValueError):
        return None
    if not all(math.isfinite(v) for v in abc) or abc[:3] == (1.0, 1.0, 1.0):
        return None  # diffpy's default lattice: the file gave none
    return abc


def _is_cubic_lattice(abc) -> bool:
    a, b, c, al, be, ga = abc
    return abs(b - a) <= 1e-3 * a and abs(c - a) <= 1e-3 * a and all(abs(t - 90.0) <= 0.05 for t in (al, be, ga))


def _structure_from_atoms(ph) -> str | None:
    """'bcc' or 'fcc' when the phase lists the atoms of one element on exactly those sites, else None."""
    try:
        atoms = list(ph.structure)
    except TypeError:
        return None
    if not atoms or len({str(getattr(at, "element", "")) for at in atoms}) != 1:
        return None
    xyz = np.round(np.mod([np.asarray(at.xyz, dtype=float) for at in atoms], 1.0), 4) % 1.0
    sites = {tuple(v) for v in xyz.tolist()}
    for structure, cell in _CELL_SITES.items():
        if sites == cell and len(atoms) == len(cell):
            return structure
    return None


def decide_structure(ph, orix_id: int, said: str | None) -> tuple[str, str, bool]:
    """The slipnet structure of an orix phase, the reason in words, and whether it was a guess.

    The order of evidence (docs/map-format.md): what the caller said; the space group
    (Im-3m bcc, Fm-3m fcc, any other 'other'); the point group (non-cubic, or cubic without
    the rotations of 432: 'other'); for the cubic point groups with 432, the atoms if the file
    lists them, else the lattice parameter. The name is never evidence. ``"?"`` when nothing tells.
    """
    number, symbol, pg, proper = _symmetry(ph)
    if said is not None:
        return said, "as given", False
    if number is not None:
        for structure, num in _SPACE_GROUP.items():
            if number == num:
                return structure, f"from space group {symbol} (no. {number})", False
        return "other", f"as space group {symbol} (no. {number}) is neither Im-3m (bcc) nor Fm-3m (fcc)", False
    if pg is None:
        return "?", "the file gives it no space group and no point group", False
    if proper != "432":
        return "other", f"as point group {pg} is not that of a cubic bcc/fcc crystal (m-3m or 432)", False
    from_atoms = _structure_from_atoms(ph)
    if from_atoms is not None:
        return from_atoms, f"from point group {pg} and the {from_atoms} atom sites listed", False
    abc = _lattice_abc(ph)
    if abc is None or not _is_cubic_lattice(abc):
        return "?", f"point group {pg} fits bcc and fcc alike and the file gives no cubic lattice parameter", False
    a = abc[0]
    if a <= _BCC_MAX_A:
        return "bcc", (f"guessed from point group {pg} and a = {a:g} Å (bcc metals have a <= {_BCC_MAX_A:g} Å, "
                       f"fcc metals a >= {_FCC_MIN_A:g} Å)"), True
    if a >= _FCC_MIN_A:
        return "fcc", (f"guessed from point group {pg} and a = {a:g} Å (fcc metals have a >= {_FCC_MIN_A:g} Å, "
                       f"bcc metals a <= {_BCC_MAX_A:g} Å)"), True
    return "?", f"point group {pg} fits bcc and fcc alike and a = {a:g} Å lies between the two families", False


def lattice_nm(ph, structure: str) -> tuple[float, bool]:
    """Lattice parameter ``a`` of an orix phase in nm, and whether the file gave it (else a default)."""
    abc = _lattice_abc(ph)
    default = _DEFAULT_LATTICE_NM.get(structure, _UNKNOWN_LATTICE_NM)
    if abc is None:
        return default, False
    a = abc[0]
    if 1.5 <= a <= 20.0:  # Å, as orix's readers store it; rounding undoes the ×10 of to_orix exactly
        return round(a / 10.0, 12), True
    if 0.15 <= a < 1.5:  # already nm
        return a, True
    return default, False


def from_orix(
    xmap,
    *,
    step: float | None = None,
    grid: str | None = None,
    quality_prop: str | None = None,
    structures: dict | None = None,
    path: str | None = None,
) -> OrientationMap:
    """Build an :class:`OrientationMap` from an orix ``CrystalMap``.

    Parameters
    ----------
    xmap : orix.crystal_map.CrystalMap
        The crystal map (only its points "in data" are used).
    step
        Grid step in µm; worked out from the coordinates when ``None``. Required when orix's scan
        unit is ``"px"``: the coordinates are then scaled so that one grid step is ``step`` µm.
    grid
        ``"square"`` or ``"hex"``; worked out from the coordinates when ``None`` (hex: rows
        ``step·√3/2`` apart, odd rows shifted by ``step/2``).
    quality_prop
        Name of the ``xmap.prop`` entry to use as per-point quality; ``None`` applies the rule
        of :data:`QUALITY_RULES` (first property present that varies over the indexed points).
    structures
        ``{phase name or orix phase id: "bcc" | "fcc" | "other" | "ignore"}``: what a phase is,
        where the file does not say (or says wrong). ``"other"`` keeps the phase as a phase slipnet
        shows and counts but leaves out of slip analysis; ``"ignore"`` leaves its points unindexed.
    path
        File name, for error messages only.

    Returns
    -------
    OrientationMap
        Orientations as recorded (apply a frame rotation separately), phases renumbered
        0..k−1 (bcc/fcc phases first, in order of orix phase id, then the 'other' ones).
        ``meta["decisions"]`` lists every choice the reader made in words (printed by the
        commands); ``meta["quality"]``, ``meta["phases_read"]`` and ``meta["orix_phase_ids"]``
        record the same as data.

    Raises
    ------
    InputFileError
        Coordinates that do not form one complete uniform grid, a missing ``quality_prop``, a
        phase whose structure the file does not tell, a pixel scan without ``step``.
    ParameterError
        Bad ``step``, ``grid`` or ``structures``.
    """
    _check_options(step, grid)
    said = check_structures(structures)
    n = int(xmap.size)
    if n == 0:
        raise InputFileError("the crystal map holds no points", path=path)
    decisions: list[str] = []
    meta: dict = {"source": "orix", "decisions": decisions}
    x, y, step = _coordinates_um(xmap, n, step, grid, decisions, path)
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
    if place.filled:
        decisions.append(short_rows_note(place))
    meta["scan_step_um"] = step
    rot = np.asarray(xmap.rotations.data, dtype=np.float64)
    if rot.ndim == 3:  # several candidate rotations per point: the first is the best match
        rot = rot[:, 0, :]
    rot = rot.reshape(n, 4)
    phases, new_pid = _phases(xmap, n, said, meta, decisions, path)
    indexed = (new_pid >= 0) & np.all(np.isfinite(rot), axis=1)
    qual = _quality(xmap, n, quality_prop, indexed, meta, decisions, path)
    return _build_map(place, rot, new_pid, qual, step, grid, phases, meta)


def _check_options(step, grid) -> None:
    """Check the ``step`` and ``grid`` options of :func:`from_orix`."""
    if grid is not None and grid not in GRIDS:
        raise ParameterError(f"grid should be one of {', '.join(GRIDS)} or None; got {grid!r}")
    if step is not None:
        try:
            ok = math.isfinite(float(step)) and float(step) > 0
        except (TypeError, ValueError):
            ok = False
        if not ok:
            raise ParameterError(f"step should be a positive number of µm or None; got {step!r}")


def _coordinates_um(xmap, n: int, step, grid, decisions: list, path: str | None):
    """The point coordinates in µm from orix's ``scan_unit``, and the step (scaled for a pixel scan)."""
    unit = str(xmap.scan_unit or "px").strip()
    if unit.lower() not in _UNIT_TO_UM and unit not in _UNIT_TO_UM:
        raise InputFileError(
            f"scan unit {unit!r} is not a length slipnet knows; accepted: {', '.join(_UNIT_TO_UM)} "
            "(px with the step in µm given)",
            path=path,
        )
    scale = _UNIT_TO_UM.get(unit, _UNIT_TO_UM.get(unit.lower()))
    x = xmap.x
    y = xmap.y
    x = np.zeros(n) if x is None else np.asarray(x, dtype=np.float64) * scale
    y = np.zeros(n) if y is None else np.asarray(y, dtype=np.float64) * scale
    if unit.lower() not in _PIXELS:
        if unit not in ("um", "µm", "μm"):
            decisions.append(f"coordinates in {unit} converted to µm (× {scale:g})")
        return x, y, step
    if step is None:
        raise InputFileError(
            "the scan unit is px (pixels), so the file does not say how far apart its points are; give the grid "
            "step in µm (--step-um UM on the command line, step_um under [specimen] in a study file)",
            path=path,
        )
    try:
        _, step_px = detect_grid(x, y)
    except InputFileError as err:
        raise InputFileError(str(err), path=path) from err
    factor = float(step) / step_px
    decisions.append(f"scan unit px: one grid step ({step_px:g} px) taken as {float(step):g} µm as given, "
                     f"coordinates scaled by {factor:g} µm/px")
    return x * factor, y * factor, float(step)


def _phases(xmap, n: int, said: dict, meta: dict, decisions: list, path: str | None
            ) -> tuple[list[Phase], np.ndarray]:
    """slipnet phases for the orix phases (bcc/fcc first, then 'other'), and each point's new phase id."""
    pid = np.asarray(xmap.phase_id, dtype=np.int64).reshape(n)
    present = np.unique(pid[pid >= 0])
    used: set = set()
    names: list[str] = []
    chosen = []
    unknown: InputFileError | None = None
    for orix_id, ph in xmap.phases:
        orix_id = int(orix_id)
        if orix_id < 0:
            continue
        name = " ".join(str(ph.name).replace(",", " ").split()) or f"phase{orix_id}"
        names.append(f"{name!r} (id {orix_id})")
        structure, how, guessed = decide_structure(ph, orix_id, said_structure(said, name, orix_id, used))
        count = int(np.count_nonzero(pid == orix_id))
        if structure == "?":
            if orix_id in present and unknown is None:  # a phase no point uses needs no structure
                unknown = InputFileError(
                    f"phase {name!r} (id {orix_id}, {count} points): {how}, so slipnet cannot tell its structure; "
                    f"say what it is with --phase '{name}=bcc' (or fcc, other for a phase to show but not analyse, "
                    "ignore to leave its points unindexed); the name is never taken as evidence",
                    path=path,
                )
            continue
        chosen.append((orix_id, ph, name, structure, how, guessed, count))
    check_all_used(said, used, names, path)  # a misspelt phase first: it may be the one meant
    if unknown is not None:
        raise unknown
    # bcc/fcc phases first: later steps take the structure of the first phase for the map
    chosen.sort(key=lambda c: (c[3] not in CUBIC_STRUCTURES, c[0]))
    phases: list[Phase] = []
    lookup: dict[int, int] = {}
    read: list[dict] = []
    point_groups: dict[str, str] = {}
    for orix_id, ph, name, structure, how, guessed, count in chosen:
        _, symbol, pg, _ = _symmetry(ph)
        entry = {"orix_id": orix_id, "name": name, "structure": structure, "how": how, "guessed": guessed,
                 "space_group": symbol, "point_group": pg, "points": count}
        read.append(entry)
        if structure == "ignore":
            decisions.append(f"phase {name} (id {orix_id}): ignored as asked; its {count} points are unindexed")
            continue
        a_nm, known = lattice_nm(ph, structure)
        entry["lattice_nm"] = a_nm
        text = f"phase {name} (id {orix_id}): {structure}, {how}"
        if structure == "other":
            text += (f"; kept as its own phase ({count} points: shown and counted, left out of slip analysis, "
                     "treated like unindexed points by the elastic solve); say --phase "
                     f"'{name}=bcc' (or fcc) if slipnet should analyse it")
            if pg:
                point_groups[name] = pg
        elif guessed:
            other = "fcc" if structure == "bcc" else "bcc"
            text += f"; if that is wrong, say --phase '{name}={other}'"
        if structure in CUBIC_STRUCTURES and not known:
            text += f"; the file gives no lattice parameter, {a_nm} nm assumed"
        decisions.append(text)
        lookup[orix_id] = len(phases)
        phases.append(Phase(name, structure, a_nm))
    if not any(p.structure in CUBIC_STRUCTURES for p in phases):
        raise InputFileError(
            f"the crystal map has no bcc or fcc phase (its phases: {', '.join(names) or 'none'}); slipnet analyses "
            "cubic bcc/fcc phases only: say which phase is one with --phase 'NAME=bcc' (or fcc)",
            path=path,
        )
    table = np.full(int(max(int(pid.max()), max(lookup)) + 2), -1, dtype=np.int32)
    for orix_id, k in lookup.items():
        table[orix_id] = k
    new_pid = np.where(pid >= 0, table[np.clip(pid, -1, None)], -1).astype(np.int32)
    meta["orix_phase_ids"] = {str(o): k for o, k in lookup.items()}
    meta["phases_read"] = read
    if point_groups:
        meta["phase_point_groups"] = point_groups
    return phases, new_pid


#: The quality rule: ``(kind, property names (compared ignoring case and '_'), how the values map to quality)``,
#: tried in this order; the first property present that varies over the indexed points is used.
QUALITY_RULES: tuple[tuple[str, tuple[str, ...], str], ...] = (
    ("slipnet quality", ("quality",), "raw"),
    ("confidence index", ("ci", "confidenceindex"), "clip"),
    ("image quality", ("iq", "imagequality"), "max"),
    ("band contrast", ("bc", "bandcontrast"), "max"),
    ("band slope", ("bs", "bandslope"), "max"),
    ("pattern quality", ("pq", "patternquality"), "max"),
    ("mean angular deviation", ("mad", "meanangulardeviation"), "invert"),
    ("pattern fit", ("fit", "patternfit"), "invert"),
)
_RULE_WORDS = {
    "raw": "as recorded",
    "clip": "as recorded, negative values (the not-indexed mark) set to 0",
    "max": "divided by its largest value over the indexed points (1 = the best pattern of the map)",
    "invert": "inverted, 1 − value / its largest value over the indexed points (lower deviation = higher quality)",
}


def _plain(name: str) -> str:
    return "".join(ch for ch in str(name).lower() if ch.isalnum())


def _prop_values(xmap, key: str, n: int) -> np.ndarray:
    v = np.asarray(xmap.prop[key], dtype=np.float64)
    if v.ndim == 2 and v.shape[0] == n:  # one value per candidate match: the first is the best
        v = v[:, 0]
    return v.reshape(n)


def _quality(xmap, n: int, quality_prop: str | None, indexed: np.ndarray, meta: dict, decisions: list,
             path: str | None) -> np.ndarray:
    """Per-point quality by :data:`QUALITY_RULES` (or from ``quality_prop``); the choice recorded."""
    props = [str(k) for k in xmap.prop.keys()]
    kinds = {_plain(alias): (kind, how) for kind, aliases, how in QUALITY_RULES for alias in aliases}
    skipped: list[str] = []
    if quality_prop is not None:
        key = quality_prop if quality_prop in props else next(
            (p for p in props if _plain(p) == _plain(quality_prop)), None)
        if key is None:
            raise InputFileError(
                f"the crystal map has no property {quality_prop!r}; it has {', '.join(props) or 'none'} "
                "(choose one of those with --quality-prop NAME)",
                path=path,
                column=str(quality_prop),
            )
        kind, how = kinds.get(_plain(key), ("chosen property", "raw"))
        values = _prop_values(xmap, key, n)
        chosen = "as asked"
    else:
        key = None
        for _kind, aliases, _how in QUALITY_RULES:
            for p in props:
                if _plain(p) not in aliases:
                    continue
                values = _prop_values(xmap, p, n)
                good = values[indexed & np.isfinite(values)]
                if good.size and float(good.max()) > float(good.min()):
                    key = p
                    break
                skipped.append(f"{p} (the same value at every indexed point)")
            if key is not None:
                break
        if key is not None:
            kind, how = kinds[_plain(key)]
            values = _prop_values(xmap, key, n)
        chosen = "by the quality rule"
    if key is None:
        meta["quality_source"] = "none (set to 1)"
        meta["quality"] = {"property": None, "properties": props, "skipped": skipped}
        decisions.append(
            "the file has no quality property: quality was set to 1 at every point, so --min-quality removes "
            f"nothing (properties present: {', '.join(props) or 'none'}, none of them a quality slipnet knows"
            + (f" that varies; skipped {', '.join(skipped)}" if skipped else "")
            + "; choose one with --quality-prop NAME)"
        )
        return np.ones(n)
    good = values[indexed & np.isfinite(values)]
    lo = float(good.min()) if good.size else math.nan
    hi = float(good.max()) if good.size else math.nan
    if how == "clip":
        q = np.clip(values, 0.0, None)
    elif how in ("max", "invert") and good.size and hi > 0:
        q = values / hi if how == "max" else 1.0 - values / hi
        q = np.clip(q, 0.0, 1.0)
    else:
        q = values
    q = np.where(np.isfinite(q), q, 0.0)
    meta["quality_source"] = key
    meta["quality"] = {"property": key, "kind": kind, "rule": _RULE_WORDS[how], "raw_min": lo, "raw_max": hi,
                       "properties": props, "skipped": skipped}
    others = [p for p in props if p != key]
    decisions.append(
        f"quality from property {key!r} ({kind}) {chosen}: {_RULE_WORDS[how]}; recorded range {lo:.6g}..{hi:.6g}"
        + (f"; skipped {', '.join(skipped)}" if skipped else "")
        + (f"; other properties: {', '.join(others)} (choose with --quality-prop NAME)" if others else "")
    )
    return q


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
