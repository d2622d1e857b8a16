"""Read and write orientation maps: slipnet's text table, slipnet's bundle, and anything orix reads.

* **Text table** (``.txt``, ``.tsv``): one row per point with ``x_um y_um phi1_deg Phi_deg phi2_deg
  phase quality`` under a ``#`` header giving format, units, grid, step, size and the phase table.
  Specified in ``docs/map-format.md``.
* **Bundle** (``.npz``): compressed numpy archive without pickles; round-trips bit for bit.
* **orix**: :func:`to_orix` / :func:`from_orix` convert to and from ``orix.crystal_map.CrystalMap``,
  and :func:`read_map` hands every other file to ``orix.io.load``.

Malformed input raises :class:`~slipnet.errors.InputFileError` naming the file, line and column and
saying what would be accepted. Writes go through :func:`slipnet._files.atomic_path`, so a failed write
leaves nothing behind.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

import numpy as np

from slipnet._files import atomic_path
from slipnet._inputs import checked_input, guarded_reader
from slipnet.crystal.orientation import quat_from_axis_angle
from slipnet.errors import InputFileError, ParameterError
from slipnet.io._bundle import ZIP_MAGIC, read_bundle, write_bundle
from slipnet.io._orix import check_all_used, check_structures, from_orix, said_structure, to_orix
from slipnet.io._text import looks_like_text_table, read_text, write_text
from slipnet.maps.orientation_map import CUBIC_STRUCTURES, OrientationMap, Phase, apply_frame_rotation

__all__ = [
    "BUNDLE_SUFFIXES",
    "TEXT_SUFFIXES",
    "check_structures",
    "from_orix",
    "map_summary",
    "parse_frame_rotation",
    "read_map",
    "to_orix",
    "write_map",
]

TEXT_SUFFIXES = (".txt", ".tsv")
BUNDLE_SUFFIXES = (".npz",)
_SNIFF_BYTES = 65536


def parse_frame_rotation(rotation) -> np.ndarray:
    """A unit quaternion from a quaternion ``(w, x, y, z)`` or an ``(axis, angle_deg)`` pair.

    Parameters
    ----------
    rotation
        Either 4 numbers (normalised here), a pair ``(axis (3,), angle in degrees)``, e.g.
        ``((1, 0, 0), 180)`` for a sample frame turned over about x, or the same as text:
        ``"1,0,0@180"`` or ``"w,x,y,z"``.

    Returns
    -------
    (4,) ndarray
        The unit quaternion ``R`` with ``v_map = R · v_recorded``.
    """
    if isinstance(rotation, str):
        rotation = _rotation_from_text(rotation)
    if isinstance(rotation, Sequence) and not isinstance(rotation, str) and len(rotation) == 2:
        axis, angle = rotation
        ax = np.asarray(axis, dtype=np.float64).reshape(-1)
        if ax.size != 3 or not np.all(np.isfinite(ax)):
            raise ParameterError(f"frame_rotation axis should be 3 finite numbers; got {axis!r}")
        try:
            ang = float(angle)
        except (TypeError, ValueError) as err:
            raise ParameterError(f"frame_rotation angle should be a number of degrees; got {angle!r}") from err
        return quat_from_axis_angle(ax, ang)
    try:
        q = np.asarray(rotation, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError) as err:
        raise ParameterError(
            f"frame_rotation should be a quaternion (w, x, y, z) or an (axis, angle_deg) pair; got {rotation!r}"
        ) from err
    norm = float(np.linalg.norm(q)) if q.size == 4 and np.all(np.isfinite(q)) else 0.0
    if norm < 1e-12:
        raise ParameterError(
            "frame_rotation should be a non-zero quaternion (w, x, y, z) or an (axis, angle_deg) pair; "
            f"got {rotation!r}"
        )
    return q / norm


def _rotation_from_text(text: str):
    """``"1,0,0@180"`` → ``((1, 0, 0), 180)``; ``"w,x,y,z"`` → 4 numbers."""
    try:
        if "@" in text:
            axis, angle = text.split("@", 1)
            return tuple(float(v) for v in axis.split(",")), float(angle)
        return [float(v) for v in text.split(",")]
    except ValueError as err:
        raise ParameterError(
            f"frame rotation should read 'AXIS@DEGREES' (e.g. '1,0,0@180') or 'w,x,y,z'; got {text!r}"
        ) from err


def _sniff(path: Path) -> str:
    """'bundle', 'text', 'garbage', 'empty' or 'other' from the first bytes and the suffix."""
    with open(path, "rb") as fh:
        head = fh.read(_SNIFF_BYTES)
    if not head:
        return "empty"
    if head.startswith(ZIP_MAGIC):
        return "bundle"
    if looks_like_text_table(head):
        return "text"
    suffix = path.suffix.lower()
    if suffix in TEXT_SUFFIXES + BUNDLE_SUFFIXES:
        try:
            head.decode("utf-8")
            is_text = b"\x00" not in head
        except UnicodeDecodeError as err:
            # a multi-byte character cut at the end of the sniffed block is still text
            is_text = err.start >= len(head) - 3 and b"\x00" not in head
        if suffix in BUNDLE_SUFFIXES or not is_text:
            return "garbage"
        return "text"
    return "other"


@guarded_reader("orientation map", "check that orix or slipnet reads it (docs/map-format.md) and export it again")
def read_map(
    path: str | os.PathLike,
    *,
    frame_rotation=None,
    quality_prop: str | None = None,
    structures: dict | None = None,
    step_um: float | None = None,
) -> OrientationMap:
    """Read an orientation map from any supported file, recognised by content and extension.

    Parameters
    ----------
    path
        slipnet text table (starts with ``# slipnet-points``), slipnet bundle (``.npz``), or any
        file orix's loader reads (handed to ``orix.io.load`` and converted with :func:`from_orix`).
    frame_rotation
        Optional quaternion ``(w, x, y, z)`` or ``(axis, angle_deg)`` pair taking the recorded
        sample frame into slipnet's map frame; applied with
        :func:`slipnet.maps.apply_frame_rotation` and recorded in ``meta["frame_rotation"]``.
    quality_prop
        For orix-read files: the property used as quality; ``None`` applies the quality rule
        (:data:`slipnet.io._orix.QUALITY_RULES`, docs/map-format.md).
    structures
        ``{phase name or id: "bcc" | "fcc" | "other" | "ignore"}``: what a phase is, overriding
        what the file says or cannot say (ids are orix's phase ids, or the phase numbers of a
        slipnet table). Every entry must name a phase of the file.
    step_um
        Grid step in µm, for files read through orix: required when the scan unit is pixels
        (the coordinates are scaled so one step is ``step_um``); otherwise used to place the
        points instead of the step worked out from them. slipnet's own files state their step.

    Returns
    -------
    OrientationMap
        ``meta["decisions"]`` lists, in words, every choice the reader made (quality property,
        phase structures, units, short hex rows); the commands print them.

    Raises
    ------
    InputFileError
        Missing, empty, damaged or malformed file (naming file, line and column and the fix), a
        phase whose structure the file does not tell, a pixel scan without ``step_um``.
    ParameterError
        Bad ``structures``, ``step_um`` or ``frame_rotation``.
    """
    p = Path(path)
    if not p.exists():
        raise InputFileError("no such file; check the path", path=str(p))
    checked_input(p, "orientation map")
    rot = None if frame_rotation is None else parse_frame_rotation(frame_rotation)
    said = check_structures(structures)
    kind = _sniff(p)
    if kind == "empty":
        raise InputFileError(
            "the file is empty; write maps with slipnet.io.write_map or give a file orix can read", path=str(p)
        )
    if kind == "garbage":
        raise InputFileError(
            f"the content is not a slipnet map: a {p.suffix} file should be "
            + ("a slipnet bundle (zip archive)" if p.suffix.lower() in BUNDLE_SUFFIXES else "UTF-8 text")
            + " starting with '# slipnet-points 1'",
            path=str(p),
            line=1,
        )
    if kind in ("bundle", "text") and step_um is not None:
        raise ParameterError(
            f"step_um is for files read through orix (a pixel scan needs it); {p.name} is a slipnet "
            f"{kind}, which states its own step ({'step_um in its header' if kind == 'text' else 'stored'}): "
            "leave the step out"
        )
    if kind == "bundle":
        omap = read_bundle(p)
    elif kind == "text":
        try:
            omap = read_text(p)
        except UnicodeDecodeError as err:
            raise InputFileError(
                f"the text is not valid UTF-8 near byte {err.start}; save the table as UTF-8", path=str(p)
            ) from err
    else:
        omap = _read_with_orix(p, quality_prop, said, step_um)
    if kind in ("bundle", "text"):
        omap = _apply_structures(omap, said, str(p))
    if rot is not None:
        omap = apply_frame_rotation(omap, rot)
    return omap


def _apply_structures(omap: OrientationMap, said: dict[str, str], path: str) -> OrientationMap:
    """The phases of a slipnet file re-declared as ``said`` (renumbered bcc/fcc first; 'ignore' dropped)."""
    if not said:
        return omap
    used: set = set()
    names = [f"{p.name!r} (id {k})" for k, p in enumerate(omap.phases)]
    decisions = list((omap.meta or {}).get("decisions") or [])
    kept: list[tuple[int, Phase]] = []
    for k, ph in enumerate(omap.phases):
        choice = said_structure(said, ph.name, k, used)
        count = int(np.count_nonzero(omap.indexed & (omap.phase == k)))
        if choice is None:
            kept.append((k, ph))
        elif choice == "ignore":
            decisions.append(f"phase {ph.name} (id {k}): ignored as asked; its {count} points are unindexed")
        else:
            decisions.append(f"phase {ph.name} (id {k}): {choice}, as given (the file says {ph.structure})")
            kept.append((k, replace(ph, structure=choice)))
    check_all_used(said, used, names, path)
    kept.sort(key=lambda kp: (kp[1].structure not in CUBIC_STRUCTURES, kp[0]))
    if not kept or kept[0][1].structure not in CUBIC_STRUCTURES:
        raise InputFileError(
            "after the phases given, the map has no bcc or fcc phase left; slipnet analyses bcc/fcc phases only",
            path=path,
        )
    table = np.full(len(omap.phases) + 1, -1, dtype=np.int32)  # the last entry serves phase −1
    for new, (old, _) in enumerate(kept):
        table[old] = new
    phase = table[omap.phase]
    meta = dict(omap.meta)
    meta["decisions"] = decisions
    return replace(omap, phase=phase, indexed=omap.indexed & (phase >= 0), phases=tuple(p for _, p in kept),
                   meta=meta)


def _read_with_orix(p: Path, quality_prop: str | None, said: dict, step_um: float | None) -> OrientationMap:
    from orix import io as orix_io

    try:
        xmap = orix_io.load(str(p))
    except Exception as err:  # orix raises IOError, KeyError, ValueError... for unreadable files
        raise InputFileError(
            f"not a slipnet table or bundle, and orix's loader could not read it ({type(err).__name__}: {err}); "
            f"slipnet writes {', '.join(TEXT_SUFFIXES + BUNDLE_SUFFIXES)} and reads those plus the formats "
            "orix.io.load reads",
            path=str(p),
        ) from err
    omap = from_orix(xmap, quality_prop=quality_prop, structures=said, step=step_um, path=str(p))
    meta = dict(omap.meta)
    meta["source_file"] = p.name
    return replace(omap, name=p.stem, meta=meta)


def write_map(omap: OrientationMap, path: str | os.PathLike, *, overwrite: bool = True) -> Path:
    """Write ``omap`` in one of slipnet's formats, chosen by extension; atomically.

    Parameters
    ----------
    omap
        The map.
    path
        ``.txt`` / ``.tsv``: text table (angles printed to 1e-10°, positions to 1e-6 µm);
        ``.npz``: bundle (exact).
    overwrite
        Refuse to replace an existing file when False.

    Returns
    -------
    Path
        The path written.

    Raises
    ------
    ParameterError
        Unsupported extension, existing file with ``overwrite=False``, or non-JSON ``meta``.
    """
    if not isinstance(omap, OrientationMap):
        raise ParameterError(f"omap should be an OrientationMap; got {type(omap).__name__}")
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix in TEXT_SUFFIXES:
        writer = write_text
    elif suffix in BUNDLE_SUFFIXES:
        writer = write_bundle
    else:
        raise ParameterError(
            f"cannot write {p.name!r}: slipnet writes text tables ({', '.join(TEXT_SUFFIXES)}) and bundles "
            f"({', '.join(BUNDLE_SUFFIXES)}); for other formats use to_orix(omap) and orix.io.save"
        )
    with atomic_path(p, overwrite=overwrite) as tmp:
        writer(omap, tmp)
    return p


def map_summary(omap: OrientationMap) -> list[str]:
    """Human-readable summary lines: shape, grid, step, extent, phases and indexed fraction."""
    ny, nx = omap.shape
    x0, x1, y0, y1 = omap.extent
    n = ny * nx
    lines = [
        f"name: {omap.name or '(none)'}",
        f"shape: {ny} rows × {nx} columns ({n} points)",
        f"grid: {omap.grid}, step {omap.step:g} µm, row spacing {omap.row_spacing:.6g} µm",
        f"extent: x {x0:g}..{x1:g} µm, y {y0:g}..{y1:g} µm",
        f"indexed: {int(omap.indexed.sum())} points ({100.0 * omap.indexed.mean():.2f} %)",
        "phases:",
    ]
    counts = np.bincount(omap.phase[omap.indexed].ravel(), minlength=len(omap.phases))
    point_groups = (omap.meta or {}).get("phase_point_groups") or {}
    for k, ph in enumerate(omap.phases):
        if ph.structure in CUBIC_STRUCTURES:
            what = f"{ph.structure}, a = {ph.lattice_parameter_nm:g} nm"
        else:
            pg = point_groups.get(ph.name)
            what = "other" + (f", point group {pg}" if pg else "") + ": shown, not analysed for slip"
        lines.append(f"  {k}: {ph.name} ({what}), {int(counts[k])} points ({100.0 * counts[k] / n:.2f} %)")
    quality = (omap.meta or {}).get("quality")
    if isinstance(quality, dict):
        lines.append(f"quality: {quality.get('property') or 'none (1 at every point)'}"
                     + (f" ({quality.get('kind')}, {quality.get('rule')})" if quality.get("property") else ""))
    if omap.meta.get("frame_rotation") is not None:
        lines.append(f"frame rotation applied: {omap.meta['frame_rotation']}")
    decisions = (omap.meta or {}).get("decisions") or []
    if decisions:
        lines.append("decisions of the reader:")
        lines += [f"  - {d}" for d in decisions]
    return lines
