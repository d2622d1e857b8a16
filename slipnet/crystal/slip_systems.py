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
from dataclasses import dataclass

import numpy as np

from slipnet._checks import check_choice, check_positive, check_vector
from slipnet.crystal import _slip_kernels as _k
from slipnet.errors import NumericalError, ParameterError
from slipnet.sized_kernels import kernel_input

__all__ = [
    "BURGERS_LENGTH",
    "DEFAULT_FAMILIES",
    "FAMILIES",
    "TWIN_FAMILY",
    "SlipSystems",
    "check_systems",
    "effective_schmid",
    "plane_inclinations",
    "plane_label",
    "point_schmid_maps",
    "resolved_shear",
    "schmid_factors",
    "schmid_summary",
    "slip_systems",
    "slip_trace_angles",
    "taylor_factor",
    "trace_geometry",
]


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


def plane_label(hkl) -> str:
    """The one spelling of a slip-plane label: ``(1-10)`` (Miller indices, minus signs, no spaces).

    Examples
    --------
    >>> plane_label([1, -1, 0])
    '(1-10)'
    """
    return _miller(np.rint(np.asarray(hkl, dtype=float)).astype(int), "()")


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


def check_systems(systems) -> SlipSystems:
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
    return kernel_input(systems.normals.T), kernel_input(systems.directions.T)


def _contig(q: np.ndarray) -> np.ndarray:
    return kernel_input(q)


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
    systems = check_systems(systems)
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
    systems = check_systems(systems)
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
    systems = check_systems(systems)
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
    systems = check_systems(systems)
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
    systems = check_systems(systems)
    q, lead = _quat_rows(quats)
    s = _check_stress(stress)
    if s.ndim == 2:
        s = s[None]
    else:
        s = s.reshape(-1, 3, 3)
        if s.shape[0] != q.shape[0]:
            raise ParameterError(f"stress should be one tensor or one per orientation ({q.shape[0]}); got {s.shape[0]}")
    out = np.empty((q.shape[0], len(systems)))
    _k.resolved_shear_rows(_contig(q), kernel_input(s), kernel_input(systems.normals),
                           kernel_input(systems.directions), out)
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
    return trace_geometry(quats, systems)[0]


def plane_inclinations(quats, systems: SlipSystems) -> np.ndarray:
    """Angle between each slip plane and the map surface, degrees in [0, 90] (90 = perpendicular)."""
    return trace_geometry(quats, systems)[1]


def trace_geometry(quats, systems):
    systems = check_systems(systems)
    q, lead = _quat_rows(quats)
    ang = np.empty((q.shape[0], len(systems)))
    inc = np.empty_like(ang)
    _k.trace_rows(_contig(q), kernel_input(systems.normals), ang, inc)
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
    from slipnet.crystal.orientation import matrix_from_quat

    systems = check_systems(systems)
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
