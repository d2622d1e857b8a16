"""Slip systems of cubic crystals, Schmid factors, resolved shear, surface slip traces, Taylor factors.

Notation
--------
======  ===========================================================================
g       orientation, sample → crystal (``v_c = g v_s``), quaternion (w, x, y, z)
n       slip-plane unit normal, crystal frame
d       slip-direction unit vector, crystal frame
l       load axis, unit, sample (map) frame; ``l_c = g l`` in the crystal frame
m       signed Schmid factor ``(n·l_c)(d·l_c)``; |m| ≤ 0.5
τ       resolved shear stress ``d · (g σ gᵀ) n`` (MPa); positive τ shears the material on
        the +n side of the plane along +d
======  ===========================================================================

Catalogue
---------
BCC: ``{110}<111>`` (12 systems), ``{112}<111>`` (12), ``{123}<111>`` (24); FCC: ``{111}<110>`` (12).
The systems are generated from the family indices by the cubic symmetry: every distinct plane
(one of ±n) paired with every distinct direction (one of ±d) lying in it, one sense per system;
the signed factor carries the sense.

For ``{112}<111>`` the sense is fixed so that **positive τ is the twinning sense**: a shear of
1/√2 in that sense carries the BCC lattice onto its mirror image across the plane (the BCC
deformation twin, Christian & Mahajan 1995, Prog. Mater. Sci. 39:1, "Deformation twinning"),
i.e. each successive {112} layer moves by a/6⟨111⟩, whereas the opposite (anti-twinning) sense
would need a/3⟨111⟩ per layer. With the index ``k`` of the ``2`` in the plane indices, the
twinning sense is ``n_k d_k > 0``: for example ``(-1-12)[111]`` and ``(112)[-1-11]``. The
test suite re-derives this from the lattice. The twinning / anti-twinning asymmetry of
screw-dislocation glide in BCC metals (Vitek 1974; Duesbery & Vitek 1998, Acta Mater.
46:1481) is weighted by ``twinning_asymmetry`` = CRSS(anti-twinning) / CRSS(twinning).

Relative critical resolved shear stress (defaults)
-------------------------------------------------
All families default to 1.0 and ``twinning_asymmetry`` to 1.0. For α-iron at room temperature,
slip is commonly treated as "pencil glide" on any plane containing ⟨111⟩, and crystal-plasticity
models of ferrite commonly give {110} and {112} equal strength (common practice); the
asymmetry becomes large only well below room temperature. Users set their own values with
``crss={"{112}<111>": 1.05}`` and ``twinning_asymmetry=...``.
"""

from __future__ import annotations

import itertools
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from . import _slip_kernels as _k
from ._checks import check_choice, check_positive, check_vector
from .errors import NumericalError, ParameterError

__all__ = [
    "FAMILIES",
    "SlipSystems",
    "effective_schmid",
    "grain_schmid_table",
    "local_grain_factors",
    "plane_inclinations",
    "point_schmid_maps",
    "resolved_shear",
    "schmid_factors",
    "schmid_summary",
    "slip_systems",
    "slip_trace_angles",
    "slip_trace_table",
    "taylor_factor",
    "write_slip_outputs",
]

#: ``factor_source`` value of tables made with local factors from a stress field.
LOCAL_SOURCE = "local stress field"

#: Slip families known per structure: label → (plane indices, direction indices).
FAMILIES: dict[str, dict[str, tuple[tuple[int, int, int], tuple[int, int, int]]]] = {
    "bcc": {
        "{110}<111>": ((1, 1, 0), (1, 1, 1)),
        "{112}<111>": ((1, 1, 2), (1, 1, 1)),
        "{123}<111>": ((1, 2, 3), (1, 1, 1)),
    },
    "fcc": {
        "{111}<110>": ((1, 1, 1), (1, 1, 0)),
    },
}
#: Families used when none are named.
DEFAULT_FAMILIES: dict[str, tuple[str, ...]] = {
    "bcc": ("{110}<111>", "{112}<111>"),
    "fcc": ("{111}<110>",),
}
#: Burgers vector length in units of the lattice parameter: a/2⟨111⟩ (BCC), a/2⟨110⟩ (FCC).
BURGERS_LENGTH: dict[str, float] = {"bcc": np.sqrt(3.0) / 2.0, "fcc": 1.0 / np.sqrt(2.0)}
TWIN_FAMILY = "{112}<111>"

_CHUNK = 1 << 20


def _variants(hkl: tuple[int, int, int]) -> np.ndarray:
    """Distinct cubic variants of ``hkl`` up to sign (first non-zero index positive), sorted."""
    out = set()
    for perm in itertools.permutations(hkl):
        for signs in itertools.product((1, -1), repeat=3):
            v = tuple(int(p * s) for p, s in zip(perm, signs, strict=True))
            first = next(x for x in v if x != 0)
            if first < 0:
                v = tuple(-x for x in v)
            out.add(v)
    return np.array(sorted(out, reverse=True), dtype=np.int64)


def _miller(v, brackets: str) -> str:
    return brackets[0] + "".join(str(int(x)) for x in v) + brackets[1]


def _family_systems(family: str, plane: tuple, direction: tuple) -> tuple[np.ndarray, np.ndarray]:
    planes = _variants(plane)
    dirs = _variants(direction)
    ns, ds = [], []
    for p in planes:
        for d in dirs:
            if int(p @ d) != 0:
                continue
            if family == TWIN_FAMILY:
                k = int(np.argmax(np.abs(p)))
                if p[k] * d[k] < 0:
                    d = -d
            ns.append(p)
            ds.append(d)
    return np.array(ns, dtype=np.int64), np.array(ds, dtype=np.int64)


def _unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


@dataclass(frozen=True, eq=False)
class SlipSystems:
    """A set of slip systems of one cubic structure.

    Attributes
    ----------
    structure : str
        ``"bcc"`` or ``"fcc"``.
    normals, directions : (n_sys, 3) ndarray
        Unit plane normals and slip directions, crystal frame.
    plane_hkl, direction_uvw : (n_sys, 3) int ndarray
        Miller indices of the same.
    families : (n_sys,) ndarray of str
        Family label per system, e.g. ``"{110}<111>"``.
    labels : (n_sys,) ndarray of str
        System label, e.g. ``"(01-1)[111]"``.
    crss : (n_sys,) ndarray
        Relative critical resolved shear stress for positive τ (the twinning sense for {112}).
    crss_reverse : (n_sys,) ndarray
        Relative critical resolved shear stress for negative τ (equal to ``crss`` except {112}).
    planes, directions_distinct : (n_p, 3), (n_d, 3) ndarray
        The distinct unit plane normals and directions; ``plane_index`` / ``direction_index``
        (n_sys,) point into them (two systems on one plane share a surface trace).
    burgers_length : float
        Burgers vector length in lattice parameters (√3/2 BCC, 1/√2 FCC).
    """

    structure: str
    normals: np.ndarray
    directions: np.ndarray
    plane_hkl: np.ndarray
    direction_uvw: np.ndarray
    families: np.ndarray
    labels: np.ndarray
    crss: np.ndarray
    crss_reverse: np.ndarray
    planes: np.ndarray
    directions_distinct: np.ndarray
    plane_index: np.ndarray
    direction_index: np.ndarray
    burgers_length: float

    def __len__(self) -> int:
        return int(self.normals.shape[0])

    @property
    def family_names(self) -> tuple[str, ...]:
        """The families present, in catalogue order."""
        return tuple(dict.fromkeys(self.families.tolist()))

    @property
    def max_effective(self) -> float:
        """Largest possible effective Schmid factor, ``0.5 / min(crss)``."""
        return float(0.5 / min(self.crss.min(), self.crss_reverse.min()))


def slip_systems(structure: str = "bcc", families=None, crss: dict | None = None, *,
                 twinning_asymmetry: float = 1.0) -> SlipSystems:
    """Build a slip-system catalogue.

    Parameters
    ----------
    structure
        ``"bcc"`` or ``"fcc"``.
    families
        A family label or a sequence of them (see :data:`FAMILIES`); ``"all"`` for every family
        of the structure; ``None`` for the defaults (BCC ``{110}<111>`` + ``{112}<111>``, FCC
        ``{111}<110>``).
    crss
        Relative critical resolved shear stress per family label, e.g. ``{"{112}<111>": 1.1}``;
        families not named get 1.0.
    twinning_asymmetry
        CRSS in the anti-twinning sense divided by CRSS in the twinning sense, for
        ``{112}<111>`` only (1.0 = symmetric).

    Returns
    -------
    SlipSystems

    Raises
    ------
    ParameterError
        Unknown structure or family, non-positive CRSS.

    Examples
    --------
    >>> s = slip_systems("bcc", ["{110}<111>", "{112}<111>", "{123}<111>"])
    >>> len(s), s.labels[0]
    (48, '(110)[1-11]')
    """
    structure = check_choice(structure, "structure", tuple(FAMILIES))
    known = FAMILIES[structure]
    if families is None:
        names = list(DEFAULT_FAMILIES[structure])
    elif isinstance(families, str):
        names = list(known) if families.lower() == "all" else [families]
    else:
        names = list(families)
    if not names:
        raise ParameterError("families should name at least one slip family")
    for f in names:
        if f not in known:
            raise ParameterError(
                f"slip family {f!r} is unknown for {structure}; accepted: {', '.join(known)} (or 'all')"
            )
    names = [f for f in known if f in names]  # catalogue order, no repeats
    crss = dict(crss or {})
    for f, v in crss.items():
        if f not in known:
            raise ParameterError(f"crss names family {f!r}, unknown for {structure}; accepted: {', '.join(known)}")
        check_positive(v, f"crss[{f!r}]")
    asym = check_positive(twinning_asymmetry, "twinning_asymmetry")
    ns_, ds_, fam, lab, c_pos, c_neg = [], [], [], [], [], []
    for f in names:
        n, d = _family_systems(f, *known[f])
        value = float(crss.get(f, 1.0))
        ns_.append(n)
        ds_.append(d)
        fam += [f] * len(n)
        lab += [_miller(a, "()") + _miller(b, "[]") for a, b in zip(n, d, strict=True)]
        c_pos.append(np.full(len(n), value))
        c_neg.append(np.full(len(n), value * (asym if f == TWIN_FAMILY else 1.0)))
    hkl = np.concatenate(ns_)
    uvw = np.concatenate(ds_)
    normals = _unit(hkl.astype(float))
    directions = _unit(uvw.astype(float))
    p_keys, p_idx = np.unique(hkl, axis=0, return_inverse=True)
    d_keys, d_idx = np.unique(uvw * np.where(uvw[:, :1] < 0, -1, 1), axis=0, return_inverse=True)
    arrays = dict(
        normals=normals, directions=directions, plane_hkl=hkl, direction_uvw=uvw,
        families=np.array(fam, dtype=object), labels=np.array(lab, dtype=object),
        crss=np.concatenate(c_pos), crss_reverse=np.concatenate(c_neg),
        planes=_unit(p_keys.astype(float)), directions_distinct=_unit(d_keys.astype(float)),
        plane_index=p_idx.reshape(-1).astype(np.int64), direction_index=d_idx.reshape(-1).astype(np.int64),
    )
    for v in arrays.values():
        v.setflags(write=False)
    return SlipSystems(structure=structure, burgers_length=float(BURGERS_LENGTH[structure]), **arrays)


def _check_systems(systems) -> SlipSystems:
    if not isinstance(systems, SlipSystems):
        raise ParameterError(f"systems should be a SlipSystems from slip_systems(); got {type(systems).__name__}")
    return systems


def _quat_rows(quats) -> tuple[np.ndarray, tuple[int, ...]]:
    q = np.asarray(quats)
    if q.ndim == 0 or q.shape[-1] != 4:
        raise ParameterError(f"quats should have 4 components (w, x, y, z) on the last axis; got shape {q.shape}")
    lead = q.shape[:-1]
    return q.reshape(-1, 4), lead


def _chunks(n: int, chunk: int):
    for s in range(0, n, chunk):
        yield slice(s, min(n, s + chunk))


def _components_first(systems: SlipSystems) -> tuple[np.ndarray, np.ndarray]:
    """(3, n_sys) copies of the normals and directions: contiguous along systems for the kernels."""
    return np.ascontiguousarray(systems.normals.T), np.ascontiguousarray(systems.directions.T)


def _contig(q: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(q, dtype=np.float64)


def schmid_factors(quats, load_axis, systems: SlipSystems, *, dtype=np.float64, out: np.ndarray | None = None,
                   chunk_size: int = _CHUNK) -> np.ndarray:
    """Signed Schmid factors ``m = (n·l_c)(d·l_c)`` for a uniaxial load.

    Parameters
    ----------
    quats : (..., 4) array_like
        Orientations (sample → crystal); NaN rows (unindexed points) give NaN factors.
    load_axis : (3,) array_like
        Load axis in the map frame (any direction, also out of the surface plane; a 2-vector
        means in-plane). Normalised here.
    systems
        From :func:`slip_systems`.
    dtype
        ``np.float64`` or ``np.float32`` (halves the memory of the result).
    out : (n, n_sys) ndarray, optional
        Preallocated result (e.g. a memory map) of the given dtype.
    chunk_size
        Rows converted per kernel call: the input copy is bounded by this, not by ``n``.

    Returns
    -------
    (..., n_sys) ndarray
        Signed factors, |m| ≤ 0.5. For per-point maps of 10⁷ points prefer
        :func:`schmid_summary`, which stores no (n, n_sys) array.

    Notes
    -----
    Cost: about 11·n·n_sys flops, one pass over the output.
    """
    systems = _check_systems(systems)
    load = check_vector(load_axis, "load_axis")
    q, lead = _quat_rows(quats)
    dtype = np.dtype(dtype)
    if dtype not in (np.float32, np.float64):
        raise ParameterError(f"dtype should be float32 or float64; got {dtype}")
    ns = len(systems)
    if out is None:
        out = np.empty((q.shape[0], ns), dtype=dtype)
    elif out.shape != (q.shape[0], ns) or out.dtype != dtype or not out.flags.c_contiguous:
        raise ParameterError(f"out should be a C-contiguous {dtype} array of shape {(q.shape[0], ns)}; got "
                             f"{out.dtype} {out.shape}")
    nt, dt = _components_first(systems)
    for sl in _chunks(q.shape[0], int(chunk_size)):
        _k.schmid_rows(_contig(q[sl]), load, nt, dt, out[sl])
    return out.reshape(*lead, ns)


def schmid_summary(quats, load_axis, systems: SlipSystems, *, chunk_size: int = _CHUNK) -> dict[str, np.ndarray]:
    """Per-orientation summary of the Schmid factors without storing them all.

    Parameters
    ----------
    quats : (..., 4) array_like
        Orientations; NaN rows give NaN / −1.
    load_axis : (3,) array_like
        Load axis, map frame.
    systems
        From :func:`slip_systems`.

    Returns
    -------
    dict of (...) ndarrays
        ``schmid_max`` largest |m|; ``system_max`` its index; ``sense_max`` the sign of that m
        (+1 / −1; for {112} +1 is the twinning sense); ``schmid_second`` the runner-up |m| over
        the other systems and ``system_second``; ``second_to_max_ratio``; ``effective_max``
        largest |m| / relative CRSS (sense-dependent for {112}) and ``system_effective``.
    """
    systems = _check_systems(systems)
    load = check_vector(load_axis, "load_axis")
    q, lead = _quat_rows(quats)
    n = q.shape[0]
    res = {
        "schmid_max": np.empty(n), "system_max": np.empty(n, np.int64), "schmid_second": np.empty(n),
        "system_second": np.empty(n, np.int64), "effective_max": np.empty(n),
        "system_effective": np.empty(n, np.int64), "sense_max": np.empty(n, np.int8),
    }
    nt, dt = _components_first(systems)
    for sl in _chunks(n, int(chunk_size)):
        _k.schmid_summary_rows(
            _contig(q[sl]), load, nt, dt, 1.0 / systems.crss, 1.0 / systems.crss_reverse,
            res["schmid_max"][sl], res["system_max"][sl], res["schmid_second"][sl], res["system_second"][sl],
            res["effective_max"][sl], res["system_effective"][sl], res["sense_max"][sl],
        )
    with np.errstate(divide="ignore", invalid="ignore"):
        res["second_to_max_ratio"] = np.where(res["schmid_max"] > 0, res["schmid_second"] / res["schmid_max"], np.nan)
    return {k: v.reshape(lead) for k, v in res.items()}


def point_schmid_maps(omap, load_axis, systems: SlipSystems | None = None) -> dict[str, np.ndarray]:
    """Per-point Schmid summary maps of an orientation map (see :func:`schmid_summary`).

    Unindexed points and points of a phase with another crystal structure than ``systems`` get
    NaN (indices −1).

    Parameters
    ----------
    omap
        :class:`slipnet.maps.OrientationMap`.
    load_axis : (3,) array_like
        Map frame.
    systems
        Default: the default families of the structure of the map's first phase.

    Returns
    -------
    dict of (ny, nx) ndarrays
        Keys as :func:`schmid_summary`.
    """
    if systems is None:
        systems = slip_systems(omap.phases[0].structure)
    systems = _check_systems(systems)
    same = np.array([p.structure == systems.structure for p in omap.phases] + [False])
    keep = omap.indexed & same[omap.phase]
    q = np.where(keep[..., None], omap.quats, np.nan)
    return schmid_summary(q, load_axis, systems)


def effective_schmid(factors, systems: SlipSystems) -> np.ndarray:
    """Critical-stress-weighted factors ``|m| / crss`` (crss of the sense of m for {112}).

    Parameters
    ----------
    factors : (..., n_sys) array_like
        Signed Schmid factors (or resolved shear stresses) from :func:`schmid_factors`.
    systems
        The same catalogue.

    Returns
    -------
    (..., n_sys) ndarray
        Non-negative; the system with the largest value yields first under a uniform stress.
    """
    systems = _check_systems(systems)
    f = np.asarray(factors, dtype=float)
    if f.shape[-1:] != (len(systems),):
        raise ParameterError(f"factors should have {len(systems)} systems on the last axis; got shape {f.shape}")
    return np.abs(f) / np.where(f >= 0, systems.crss, systems.crss_reverse)


def _check_stress(stress) -> np.ndarray:
    s = np.asarray(stress, dtype=float)
    if s.shape[-2:] != (3, 3):
        raise ParameterError(f"stress should be a (3, 3) or (n, 3, 3) tensor in MPa; got shape {s.shape}")
    if not np.all(np.isfinite(s)):
        raise ParameterError("stress should hold finite numbers (MPa); got NaN or infinity")
    asym = np.abs(s - np.swapaxes(s, -1, -2)).max(initial=0.0)
    scale = max(np.abs(s).max(initial=0.0), 1e-300)
    if asym > 1e-8 * scale:
        raise ParameterError(
            f"stress should be a symmetric tensor (σ_ij = σ_ji); largest |σ_ij − σ_ji| is {asym:.3g} MPa"
        )
    return s


def resolved_shear(quats, stress, systems: SlipSystems) -> np.ndarray:
    """Signed resolved shear stress ``τ = d · (g σ gᵀ) n`` on every system.

    Parameters
    ----------
    quats : (..., 4) array_like
        Orientations; NaN rows give NaN.
    stress : (3, 3) or (..., 3, 3) array_like
        Symmetric stress tensor(s) in the sample frame, MPa; one shared or one per orientation.
    systems
        From :func:`slip_systems`.

    Returns
    -------
    (..., n_sys) ndarray
        MPa. For ``σ = s l⊗l`` this equals ``s`` times :func:`schmid_factors`.
    """
    systems = _check_systems(systems)
    q, lead = _quat_rows(quats)
    s = _check_stress(stress)
    if s.ndim == 2:
        s = s[None]
    else:
        s = s.reshape(-1, 3, 3)
        if s.shape[0] != q.shape[0]:
            raise ParameterError(f"stress should be one tensor or one per orientation ({q.shape[0]}); got {s.shape[0]}")
    out = np.empty((q.shape[0], len(systems)))
    _k.resolved_shear_rows(_contig(q), np.ascontiguousarray(s), systems.normals, systems.directions, out)
    return out.reshape(*lead, len(systems))


def slip_trace_angles(quats, systems: SlipSystems) -> np.ndarray:
    """Angle of the surface trace of each slip plane, degrees in [0, 180) from +x towards +y.

    The trace is ``t = n_s × z`` with ``n_s = gᵀ n`` the plane normal in the map frame; a plane
    parallel to the surface has no trace (NaN).

    Parameters
    ----------
    quats : (..., 4) array_like
    systems

    Returns
    -------
    (..., n_sys) ndarray
        Degrees.
    """
    return _traces(quats, systems)[0]


def plane_inclinations(quats, systems: SlipSystems) -> np.ndarray:
    """Angle between each slip plane and the map surface, degrees in [0, 90] (90 = perpendicular)."""
    return _traces(quats, systems)[1]


def _traces(quats, systems):
    systems = _check_systems(systems)
    q, lead = _quat_rows(quats)
    ang = np.empty((q.shape[0], len(systems)))
    inc = np.empty_like(ang)
    _k.trace_rows(_contig(q), systems.normals, ang, inc)
    return np.rad2deg(ang).reshape(*lead, -1), np.rad2deg(inc).reshape(*lead, -1)


# ---------------------------------------------------------------------------------------- Taylor
def _taylor_one(gc: np.ndarray, bases: np.ndarray, cost: np.ndarray, eps: np.ndarray) -> float:
    from scipy.optimize import linprog

    e = gc @ eps @ gc.T
    b = np.array([e[0, 0], e[1, 1], e[0, 1], e[0, 2], e[1, 2]])
    a = np.hstack([bases, -bases])
    res = linprog(cost, A_eq=a, b_eq=b, bounds=(0, None), method="highs")
    if res.status != 0:
        raise NumericalError(f"Taylor linear programme failed: {res.message}")
    return float(res.fun)


def taylor_factor(quats, load_axis, systems: SlipSystems, *, decimals: int = 6) -> np.ndarray:
    """Taylor factor for uniaxial tension along ``load_axis`` (full constraints).

    Solves, per orientation, the linear programme of Taylor (1938) / Bishop & Hill (1951):
    minimise ``Σ_s crss⁺_s γ⁺_s + crss⁻_s γ⁻_s`` with γ = γ⁺ − γ⁻, γ± ≥ 0, such that
    ``Σ_s γ_s sym(d_s ⊗ n_s) = g ε gᵀ`` for the incompressible strain
    ``ε = 3/2 l⊗l − 1/2 I`` (5 independent components: ε11, ε22, ε12, ε13, ε23). With unit
    CRSS this is the classical ``M = Σ|γ| / ε``.

    Parameters
    ----------
    quats : (..., 4) array_like
        Orientations (NaN rows give NaN). Identical orientations (to ``decimals``) are solved once.
    load_axis : (3,) array_like
        Map frame.
    systems
        Must span the 5-dimensional deviatoric strain space (every catalogue family does).

    Returns
    -------
    (...) ndarray
        Taylor factor (–).

    Notes
    -----
    One scipy ``linprog`` (HiGHS) per distinct orientation, about 1 ms each: fine for grains, not
    meant for per-point maps.
    """
    from .orientation import matrix_from_quat

    systems = _check_systems(systems)
    load = check_vector(load_axis, "load_axis")
    q, lead = _quat_rows(quats)
    q = np.asarray(q, dtype=float)
    ok = np.all(np.isfinite(q), axis=1)
    out = np.full(q.shape[0], np.nan)
    if ok.any():
        key = np.round(q[ok], decimals)
        uniq, inv = np.unique(key, axis=0, return_inverse=True)
        g = matrix_from_quat(uniq / np.linalg.norm(uniq, axis=1, keepdims=True))
        p = 0.5 * (systems.directions[:, :, None] * systems.normals[:, None, :]
                   + systems.normals[:, :, None] * systems.directions[:, None, :])
        bases = np.stack([p[:, 0, 0], p[:, 1, 1], p[:, 0, 1], p[:, 0, 2], p[:, 1, 2]])
        cost = np.concatenate([systems.crss, systems.crss_reverse])
        eps = 1.5 * np.outer(load, load) - 0.5 * np.eye(3)
        vals = np.array([_taylor_one(gi, bases, cost, eps) for gi in g])
        out[ok] = vals[inv.reshape(-1)]
    return out.reshape(lead)


# ---------------------------------------------------------------------------------------- tables
def _grain_quats(gg) -> np.ndarray:
    q = np.asarray(gg.mean_quats, dtype=float)
    if q.ndim != 2 or q.shape[1] != 4:
        raise ParameterError(f"gg.mean_quats should have shape (n_grains, 4); got {q.shape}")
    return q


def _structure_mask(gg, systems: SlipSystems) -> np.ndarray:
    """True for grains whose phase has the structure of ``systems``."""
    n = _grain_quats(gg).shape[0]
    phases = gg.omap.phases
    ok = np.ones(n, bool)
    for g, data in gg.graph.nodes(data=True):
        ph = int(data.get("phase", 0))
        if 0 <= ph < len(phases) and 0 <= int(g) < n:
            ok[int(g)] = phases[ph].structure == systems.structure
    return ok


def grain_quats_for(gg, systems: SlipSystems) -> np.ndarray:
    """Grain mean orientations, NaN for grains of another crystal structure than ``systems``."""
    q = _grain_quats(gg).copy()
    q[~_structure_mask(gg, systems)] = np.nan
    return q


def local_grain_factors(gg, load_axis, systems: SlipSystems, stress_field) -> np.ndarray:
    """Per-grain local signed Schmid factors from a full-field stress solution.

    The grain means of ``τ / σ_applied`` from :func:`slipnet.stress.grain_schmid_factors`, laid
    out like the uniform-stress factors of :func:`grain_quats_for` (NaN rows for grains of another
    structure than ``systems``, or with no solid point).

    Parameters
    ----------
    gg
        The :class:`slipnet.grains.GrainGraph` of the map the field was solved on.
    load_axis : (3,) array_like
        Map frame; must be parallel (or anti-parallel) to ``stress_field.load_axis``.
    systems
        Catalogue.
    stress_field
        A :class:`slipnet.stress.StressField` on ``gg.omap``.

    Returns
    -------
    (n_grains, n_sys) ndarray
        Dimensionless signed local Schmid factors.
    """
    from .stress import grain_schmid_factors

    systems = _check_systems(systems)
    load = check_vector(load_axis, "load_axis")
    field_axis = getattr(stress_field, "load_axis", None)
    if field_axis is None or not hasattr(stress_field, "assumptions"):
        raise ParameterError(f"stress_field should be a slipnet.stress.StressField; got {type(stress_field).__name__}")
    # a uniaxial load and its reverse give the same factors; any other axis is a different load case
    if abs(float(np.dot(load, check_vector(field_axis, "stress_field.load_axis")))) < 1.0 - 1e-9:
        raise ParameterError(
            f"load_axis {np.round(load, 4).tolist()} should be the load axis the stress field was solved for "
            f"({np.round(np.asarray(field_axis, float), 4).tolist()})")
    local = np.asarray(grain_schmid_factors(stress_field, gg, systems), dtype=float)
    n = _grain_quats(gg).shape[0]
    f = np.full((n, len(systems)), np.nan)
    k = min(n, local.shape[0])
    f[:k] = local[:k]
    f[~_structure_mask(gg, systems)] = np.nan
    return f


def _factors_or_local(gg, load_axis, systems, factors, stress_field):
    """``factors`` unchanged, or the local factors of ``stress_field`` (not both)."""
    if stress_field is None:
        return factors
    if factors is not None:
        raise ParameterError("give either factors or stress_field, not both")
    return local_grain_factors(gg, load_axis, systems, stress_field)


def grain_schmid_table(gg, load_axis, systems: SlipSystems, *, factors=None, taylor: bool = False,
                       stress_field=None) -> pd.DataFrame:
    """One row per grain: largest Schmid factor and its system, runner-up, ratio, effective factor.

    Parameters
    ----------
    gg
        A :class:`slipnet.grains.GrainGraph` (uses ``mean_quats`` and node ``phase``).
    load_axis : (3,) array_like
        Map frame.
    systems
        Catalogue; grains of another structure get NaN.
    factors : (n_grains, n_sys) array_like, optional
        Signed factors to use instead of the uniform-stress ones (e.g. local factors from
        :func:`slipnet.stress.grain_schmid_factors`).
    taylor
        Add a ``taylor_factor`` column (one LP per grain; always for the uniform uniaxial load).
    stress_field
        A :class:`slipnet.stress.StressField`: use its local grain factors
        (:func:`local_grain_factors`) instead of the uniform-stress ones; not with ``factors``.

    Returns
    -------
    DataFrame
        Columns ``grain``, ``schmid_max``, ``system_max``, ``label_max``, ``family_max``,
        ``sense_max`` (+1/−1; +1 twinning sense for {112}), ``schmid_second``, ``system_second``,
        ``label_second``, ``second_to_max_ratio``, ``effective_max``, ``system_effective``,
        ``label_effective`` (all factors dimensionless), optionally ``taylor_factor``; with
        ``stress_field`` also ``factor_source`` = ``"local stress field"``.
    """
    systems = _check_systems(systems)
    q = grain_quats_for(gg, systems)
    factors = _factors_or_local(gg, load_axis, systems, factors, stress_field)
    if factors is None:
        f = schmid_factors(q, load_axis, systems)
    else:
        f = np.asarray(factors, dtype=float)
        if f.shape != (q.shape[0], len(systems)):
            raise ParameterError(f"factors should have shape {(q.shape[0], len(systems))}; got {f.shape}")
    s = _summary_from_factors(f, systems)
    lab = np.append(systems.labels, "")
    fam = np.append(systems.families, "")
    t = pd.DataFrame({"grain": np.arange(q.shape[0])})
    t["schmid_max"] = s["schmid_max"]
    t["system_max"] = s["system_max"]
    t["label_max"] = lab[s["system_max"]]
    t["family_max"] = fam[s["system_max"]]
    t["sense_max"] = s["sense_max"]
    t["schmid_second"] = s["schmid_second"]
    t["system_second"] = s["system_second"]
    t["label_second"] = lab[s["system_second"]]
    t["second_to_max_ratio"] = s["second_to_max_ratio"]
    t["effective_max"] = s["effective_max"]
    t["system_effective"] = s["system_effective"]
    t["label_effective"] = lab[s["system_effective"]]
    if taylor:
        t["taylor_factor"] = taylor_factor(q, load_axis, systems)
    if stress_field is not None:
        t["factor_source"] = LOCAL_SOURCE
    return t


def _summary_from_factors(f: np.ndarray, systems: SlipSystems) -> dict[str, np.ndarray]:
    ok = np.all(np.isfinite(f), axis=1)
    a = np.abs(np.where(ok[:, None], f, 0.0))
    order = np.argsort(-a, axis=1, kind="stable")
    rows = np.arange(f.shape[0])
    i1, i2 = order[:, 0], order[:, 1] if f.shape[1] > 1 else order[:, 0]
    eff = effective_schmid(np.where(ok[:, None], f, 0.0), systems)
    ie = np.argmax(eff, axis=1)
    m1, m2 = a[rows, i1], a[rows, i2]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(m1 > 0, m2 / m1, np.nan)
    out = {
        "schmid_max": m1, "system_max": i1, "schmid_second": m2, "system_second": i2,
        "second_to_max_ratio": ratio, "effective_max": eff[rows, ie], "system_effective": ie,
        "sense_max": np.where(f[rows, i1] >= 0, 1, -1),
    }
    for k in out:
        if out[k].dtype.kind == "f":
            out[k] = np.where(ok, out[k], np.nan)
        else:
            out[k] = np.where(ok, out[k], -1)
    out["sense_max"] = np.where(ok, out["sense_max"], 0)
    return out


def slip_trace_table(gg, load_axis, systems: SlipSystems, *, n_planes: int = 2, factors=None,
                     stress_field=None) -> pd.DataFrame:
    """Surface traces of the most-stressed slip planes of every grain.

    For each grain the systems are ranked by effective Schmid factor and the first ``n_planes``
    systems on *distinct* planes are kept (two systems on one plane share a trace). ``factors``
    ((n_grains, n_sys) signed) or ``stress_field`` (local factors, :func:`local_grain_factors`)
    replace the uniform-stress factors in the ranking.

    Returns
    -------
    DataFrame
        Columns ``grain``, ``rank`` (1 = most stressed), ``system``, ``label``, ``family``,
        ``effective_schmid``, ``trace_angle_deg`` ([0, 180) from +x towards +y; NaN if the plane
        is parallel to the surface), ``inclination_deg`` (plane to surface, 90 = perpendicular),
        ``centroid_x_um``, ``centroid_y_um``; with ``stress_field`` also ``factor_source``.
    """
    systems = _check_systems(systems)
    if int(n_planes) < 1:
        raise ParameterError(f"n_planes should be >= 1; got {n_planes}")
    q = grain_quats_for(gg, systems)
    factors = _factors_or_local(gg, load_axis, systems, factors, stress_field)
    f = schmid_factors(q, load_axis, systems) if factors is None else np.asarray(factors, dtype=float)
    ok = np.all(np.isfinite(f), axis=1)
    eff = effective_schmid(np.where(ok[:, None], f, 0.0), systems)
    order = np.argsort(-eff, axis=1, kind="stable")
    plane_of = systems.plane_index[order]
    ang, inc = _traces(q, systems)
    rows = np.arange(q.shape[0])
    chosen = np.zeros_like(order, dtype=bool)
    picks = []
    for _ in range(min(int(n_planes), len(systems.planes))):
        # first system in ranked order whose plane is not yet taken
        taken = np.zeros_like(order, dtype=bool)
        for prev in picks:
            taken |= plane_of == plane_of[rows, prev][:, None]
        pos = np.argmax(~taken & ~chosen, axis=1)
        chosen[rows, pos] = True
        picks.append(pos)
    node = dict(gg.graph.nodes(data=True))
    cx = np.array([float(node.get(g, {}).get("centroid_x_um", np.nan)) for g in rows])
    cy = np.array([float(node.get(g, {}).get("centroid_y_um", np.nan)) for g in rows])
    parts = []
    for r, pos in enumerate(picks, start=1):
        s = order[rows, pos]
        parts.append(pd.DataFrame({
            "grain": rows, "rank": r, "system": s, "label": systems.labels[s], "family": systems.families[s],
            "effective_schmid": np.where(ok, eff[rows, s], np.nan),
            "trace_angle_deg": ang[rows, s], "inclination_deg": inc[rows, s],
            "centroid_x_um": cx, "centroid_y_um": cy,
        })[ok])
    out = pd.concat(parts, ignore_index=True).sort_values(["grain", "rank"], ignore_index=True)
    if stress_field is not None:
        out["factor_source"] = LOCAL_SOURCE
    return out


def write_slip_outputs(gg, load_axis, folder: str | os.PathLike, *, systems: SlipSystems | None = None,
                       inclination_deg: float = 90.0, taylor: bool = True, factors=None,
                       title: str = "slip activity", stress_field=None) -> dict:
    """Annotate the grain graph and write the slip tables, pictures and a summary into ``folder``.

    With ``stress_field`` (a :class:`slipnet.stress.StressField` solved on ``gg.omap`` for this
    load axis) every table uses the local grain Schmid factors (:func:`local_grain_factors`)
    instead of the uniform-stress ones, and the summary states so and prints the field's
    modelling assumptions. ``factors`` gives caller-computed factors instead (not both).

    Writes ``grains_slip.csv``, ``slip_traces.csv``, ``transmission.csv``, ``systems.csv``,
    ``schmid_map.png``, ``transmission_map.png``, ``slip_traces.png`` and ``summary.md``
    (with the caution text).

    Returns
    -------
    dict
        ``systems``, ``grain_table``, ``trace_table``, ``transmission_table`` and ``files``.
    """
    from .figures import slip as figs
    from .report import write_summary, write_table
    from .transmission import annotate_transmission

    load = check_vector(load_axis, "load_axis")
    if systems is None:
        structures = [p.structure for p in gg.omap.phases]
        systems = slip_systems(structures[0] if structures else "bcc")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    given = factors is not None
    factors = _factors_or_local(gg, load, systems, factors, stress_field)  # solved once for all three tables
    grain_table = grain_schmid_table(gg, load, systems, factors=factors, taylor=taylor)
    traces = slip_trace_table(gg, load, systems, factors=factors)
    trans = annotate_transmission(gg, load, systems, inclination_deg=inclination_deg, factors=factors)
    if stress_field is not None:
        for t in (grain_table, traces, trans):
            t["factor_source"] = LOCAL_SOURCE
    for g, row in grain_table.set_index("grain").iterrows():
        if g in gg.graph:
            gg.graph.nodes[g]["schmid_max"] = float(row["schmid_max"])
            gg.graph.nodes[g]["effective_schmid_max"] = float(row["effective_max"])
            gg.graph.nodes[g]["slip_system"] = int(row["system_effective"])
    sys_table = pd.DataFrame({
        "system": np.arange(len(systems)), "label": systems.labels, "family": systems.families,
        "crss_relative": systems.crss, "crss_reverse_relative": systems.crss_reverse,
    })
    files = [
        write_table(grain_table, folder / "grains_slip.csv"),
        write_table(traces, folder / "slip_traces.csv"),
        write_table(trans, folder / "transmission.csv"),
        write_table(sys_table, folder / "systems.csv"),
        figs.plot_schmid_map(gg, grain_table["schmid_max"].to_numpy(), folder / "schmid_map.png"),
        figs.plot_transmission(gg, trans, folder / "transmission_map.png"),
        figs.plot_slip_traces(gg, traces, folder / "slip_traces.png",
                              background=grain_table["effective_max"].to_numpy()),
    ]
    ok = np.isfinite(grain_table["schmid_max"])
    lines = [
        f"Load axis (map frame): ({load[0]:.3f}, {load[1]:.3f}, {load[2]:.3f}).",
        f"Structure {systems.structure}; families {', '.join(systems.family_names)} ({len(systems)} systems); "
        f"relative CRSS per system in systems.csv.",
        f"Grains analysed: {int(ok.sum())} of {len(grain_table)} (others have another crystal structure).",
        f"Largest Schmid factor: mean {np.nanmean(grain_table['schmid_max']):.3f}, "
        f"range {np.nanmin(grain_table['schmid_max']):.3f}–{np.nanmax(grain_table['schmid_max']):.3f}."
        if ok.any() else "No grain of this structure.",
    ]
    if taylor and ok.any():
        mean_taylor = np.nanmean(grain_table["taylor_factor"])
        lines.append(f"Mean Taylor factor (uniaxial, full constraints): {mean_taylor:.3f}.")
    if stress_field is not None:
        lines += [
            f"Stress: LOCAL Schmid factors (grain means of τ / applied stress) from a full-field solve, "
            f"applied {stress_field.applied_stress:g} MPa, {stress_field.iterations} iterations, residual "
            f"{stress_field.residual:.2e}; used for the Schmid, trace and transmission tables "
            "(factor_source column). The Taylor factor stays the uniform uniaxial one.",
            f"Local stress assumptions: {stress_field.assumptions}",
        ]
    else:
        lines.append("Stress: per-grain local Schmid factors given by the caller (e.g. from the full-field solve)."
                     if given else "Stress: uniform uniaxial along the load axis in every grain.")
    lines += [
        f"Shen factor: boundary plane ASSUMED to contain the surface trace of the boundary, inclined "
        f"{inclination_deg:g}° to the surface (90° = perpendicular); the true plane is not known from a surface map.",
        "Transmission score A→B: max over outgoing systems j of |m′(i*, j)| · effective Schmid_B(j) / "
        f"{systems.max_effective:.3g}, with i* the most-stressed system of A (see slipnet.transmission).",
    ]
    files.append(write_summary(folder, title, lines))
    return {"systems": systems, "grain_table": grain_table, "trace_table": traces,
            "transmission_table": trans, "files": files}
