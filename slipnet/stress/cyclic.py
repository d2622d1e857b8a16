"""Cyclic crystal plasticity on the orientation map: implicit full-field solve, FIPs and slip bands.

Constitutive model (small strain, per point, crystal frame)
-----------------------------------------------------------
* Stress ``σ = C : (ε − ε_p)``, plastic strain rate ``ε̇_p = Σ_α γ̇_α P_α``, ``P_α = sym(d_α ⊗ n_α)``.
* Flow rule, power law (Hutchinson 1976, Proc. R. Soc. Lond. A 348:101):
  ``γ̇_α = γ̇₀ |(τ_α − χ_α)/g_α|ⁿ sign(τ_α − χ_α)``; g_α times the catalogue's reverse-sense
  ratio when ``τ_α − χ_α < 0`` (the BCC {112} twinning / anti-twinning asymmetry).
* Kinematic hardening per system, Armstrong–Frederick (Armstrong & Frederick 1966, CEGB report
  RD/B/N731; reviewed by Chaboche 1989, Int. J. Plast. 5:247): ``χ̇_α = c γ̇_α − d χ_α |γ̇_α|``.
* Isotropic hardening, Voce type with a latent matrix (the crystal form of Méric & Cailletaud
  1991, J. Eng. Mater. Technol. 113:162, from memory) plus an optional linear term:
  ``g_α = τ₀_α + Σ_β h_αβ [Q (1 − exp(−b v_β)) + θ v_β]``, v_β the accumulated slip of system β,
  ``h_αβ = q + (1 − q) δ_αβ`` (latent ratio q).
* Optional boundary layer: within ``boundary_width_um`` of another grain, ``τ₀_α`` rises by
  ``boundary_strength_mpa · (1 − max_β m′_αβ)`` with m′ the Luster–Morris factor between system α
  and the systems β of the grain across (after the slip-penetration resistance of Ma, Roters &
  Raabe 2006, Acta Mater. 54:2169 — from memory, not checked here).

Integration: backward Euler per point solved by Newton's method with the consistent tangent
(:mod:`slipnet.stress._cyclic_kernels`), inside the spectral Newton–Krylov load stepping of
:mod:`slipnet.stress._cyclic_solver` (stress or mixed strain control); increments per half cycle are
adapted to the largest slip increment and cut back when a Newton step fails.

Fatigue indicator (Fatemi & Socie 1988, Fatigue Fract. Eng. Mater. Struct. 11:149, in its
crystal-plasticity form): ``FIP_α = (Δγ_α/2) (1 + k σ_n,α^max / σ_y)`` with Δγ_α the slip range of
system α over the last cycle and σ_n,α^max the largest normal stress on its plane during that
cycle; averaged over slip bands (Castelluccio & McDowell 2014, Mater. Sci. Eng. A 598:34, from
memory).
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from slipnet._checks import check_choice, check_positive, check_range, check_vector
from slipnet.crystal.orientation import nearest_equivalent
from slipnet.errors import ParameterError
from slipnet.maps.orientation_map import OrientationMap
from slipnet.stress import _cyclic_bands as _bands
from slipnet.stress import _cyclic_kernels as _ck
from slipnet.stress import _cyclic_solver as _solver
from slipnet.stress._threads import _numba_threads, _workers
from slipnet.stress.constants import from_mandel, to_mandel, voigt_reuss_hill
from slipnet.stress.elastic import SCHEMES, UNINDEXED_MODES, _prepare, assumptions_text
from slipnet.stress.local import default_systems

__all__ = ["BAND_COLUMNS", "GRAIN_RESPONSE_COLUMNS", "HISTORY_COLUMNS", "CyclicField", "CyclicMaterial",
           "cyclic_assumptions", "solve_cyclic", "solve_monotonic"]

#: Taylor factor of an untextured cubic polycrystal for {111}<110> / pencil glide, about 3.06
#: (Taylor 1938, J. Inst. Met. 62:307; from memory): the default σ_y is this times τ₀.
RANDOM_TAYLOR_FACTOR = 3.06
#: Columns of :attr:`CyclicField.history` (one row per increment), of :attr:`CyclicField.bands` and
#: of :attr:`CyclicField.grain_response` (snake_case, units as suffixes).
HISTORY_COLUMNS = ("increment", "cycle", "segment", "time_s", "stress_mpa", "strain", "plastic_strain",
                   "max_slip_increment", "newton_iterations", "cg_iterations")
BAND_COLUMNS = _bands.BAND_COLUMNS
GRAIN_RESPONSE_COLUMNS = _bands.GRAIN_RESPONSE_COLUMNS
#: Map edges that can be declared free surfaces or given an elastic buffer, and the width of the
#: compliant gap or isotropic elastic layer added beyond each (points).
EDGES = ("left", "right", "top", "bottom")
EDGE_PAD = 4
#: Fatemi–Socie normal-stress sensitivity k; 0.5 is the value commonly used in
#: crystal-plasticity FIP studies (e.g. Castelluccio & McDowell 2014; from memory).
DEFAULT_FIP_K = 0.5


@dataclass(frozen=True)
class CyclicMaterial:
    """Slip-system parameters of the cyclic model (MPa, 1/s, dimensionless).

    The defaults are a plausible ferritic steel at room temperature, chosen to give
    localisation and a stabilised loop within a few cycles, not fitted to a test: set your own.

    Parameters
    ----------
    crss_mpa
        Initial critical resolved shear stress τ₀, MPa, times each system's relative CRSS.
    rate_exponent
        Power-law exponent n, in [2, 200].
    reference_rate
        Reference slip rate γ̇₀, 1/s.
    voce_mpa, voce_rate
        Voce saturation increase Q (MPa) and rate b of the isotropic hardening.
    linear_hardening_mpa
        Linear isotropic hardening θ, MPa (per unit slip).
    latent_ratio
        Latent hardening ratio q (1: isotropic coupling; 1.0–1.4 common practice).
    backstress_modulus_mpa, backstress_recovery
        Armstrong–Frederick c (MPa) and d (–); the backstress saturates at c/d.
    """

    crss_mpa: float = 90.0
    rate_exponent: float = 20.0
    reference_rate: float = 1e-3
    voce_mpa: float = 30.0
    voce_rate: float = 30.0
    linear_hardening_mpa: float = 0.0
    latent_ratio: float = 1.4
    backstress_modulus_mpa: float = 15000.0
    backstress_recovery: float = 300.0

    def __post_init__(self) -> None:
        check_positive(self.crss_mpa, "crss_mpa")
        check_range(self.rate_exponent, "rate_exponent", 2.0, 200.0)
        check_positive(self.reference_rate, "reference_rate")
        check_positive(self.voce_mpa, "voce_mpa", allow_zero=True)
        check_positive(self.voce_rate, "voce_rate", allow_zero=True)
        check_positive(self.linear_hardening_mpa, "linear_hardening_mpa", allow_zero=True)
        check_positive(self.latent_ratio, "latent_ratio", allow_zero=True)
        check_positive(self.backstress_modulus_mpa, "backstress_modulus_mpa", allow_zero=True)
        check_positive(self.backstress_recovery, "backstress_recovery", allow_zero=True)

    def as_dict(self) -> dict:
        """The parameters as a plain dict."""
        return {k: float(getattr(self, k)) for k in self.__dataclass_fields__}


def cyclic_assumptions(scheme: str = "rotated", compliant_ratio: float = 1e-3, grid: str = "square",
                       unindexed: str = "auto", crack: bool = False, boundary: bool = False,
                       free_edges: tuple = (), buffer_edges: tuple = ()) -> str:
    """The statement every output of :func:`solve_cyclic` prints."""
    text = assumptions_text(scheme, compliant_ratio, grid, plastic=True, unindexed=unindexed)
    if free_edges:
        text += (f" The {', '.join(free_edges)} map edge(s) are free surfaces (a compliant gap of {EDGE_PAD} points "
                 "is added beyond them, so the periodic copy does not touch them).")
    if buffer_edges:
        text += (f" Beyond the {', '.join(buffer_edges)} map edge(s) an isotropic elastic buffer ({EDGE_PAD} points, "
                 "Hill average of the main phase) separates the map from its periodic copy.")
    text += (" Small strain, no lattice rotation; rate-dependent slip (power law) with Armstrong–Frederick "
             "backstress and Voce isotropic hardening per system, integrated by backward Euler; only the main "
             "phase slips (other phases elastic).")
    if crack:
        text += " The crack is a traction-free slit one grid cell wide (compliant points); its tip field is " \
                "mesh dependent (the crack-tip peak does not converge under grid refinement)."
    if boundary:
        text += " A boundary layer raises each system's resistance by strength × (1 − best m′ to the grain across)."
    return text


@dataclass(frozen=True, eq=False)
class CyclicField:
    """Result of :func:`solve_cyclic` (or :func:`solve_monotonic`).

    Attributes
    ----------
    accumulated_slip : (ny, nx) ndarray
        ``Σ_α ∫|γ̇_α| dt`` over the whole history (dimensionless).
    slip_range : (ny, nx) ndarray
        Largest slip range ``max_α Δγ_α`` over the last cycle (over the whole ramp for a monotonic run).
    fip : (ny, nx) ndarray
        Largest Fatemi–Socie FIP over the systems per point (0 at compliant points).
    bands : pandas.DataFrame
        Ranked slip bands: ``rank``, ``grain``, ``system``, ``label``, ``family``, ``band``, ``n_points``,
        ``fip_mean``, ``slip_range_mean``, ``x_um``, ``y_um`` (centroid), ``trace_angle_deg``, ``width_um``,
        ``area_um2``.
    history : pandas.DataFrame
        One row per increment: ``increment``, ``cycle`` (0 = first loading), ``segment`` (``ramp``,
        ``unload``, ``reload``), ``time_s``, ``stress_mpa`` and ``strain`` (mean along the load
        axis: the macroscopic hysteresis loop, means over the periodic cell including any free gap or
        buffer added beyond the edges), ``plastic_strain``, ``max_slip_increment``,
        ``newton_iterations``, ``cg_iterations``.
    settings : dict
        The inputs and solver totals.
    assumptions : str
        The modelling assumptions; every output prints them.
    grain_response : pandas.DataFrame
        Per grain: ``grain``, ``n_points``, ``accumulated_slip_mean``, ``slip_range_mean``,
        ``plastic_strain_axial``, ``ratchet_strain_per_cycle``, ``response`` (``elastic shakedown``,
        ``plastic shakedown`` or ``ratcheting``).
    slip : (ny, nx, ns) ndarray
        Signed slip per system at the end.
    system_accumulated_slip : (ny, nx, ns) ndarray
        Accumulated slip ``∫|γ̇_α| dt`` per system.
    system_slip_range, system_fip, peak_backstress : (ny, nx, ns) ndarray
        Per system: last-cycle slip range, FIP, and the backstress χ at the final (peak) load, MPa.
    peak_stress, plastic_strain : (ny, nx, 3, 3) ndarray
        Stress (MPa) and plastic strain at the final (peak) load, map frame.
    labels : (ny, nx) int ndarray
        Grain ids used for the bands (−1: none).
    compliant, crack_mask : (ny, nx) bool ndarray
        Compliant points (notch, holes, crack) and the crack slit alone.
    boundary_partner : (ny, nx) int ndarray
        The grain across for points in the boundary layer, −1 elsewhere.
    systems
        The slip systems (``SlipSystems``).
    omap : OrientationMap
        The map solved on (orientations as their cubic equivalents nearest each grain mean).
    load_axis : (3,) ndarray
    """

    accumulated_slip: np.ndarray
    slip_range: np.ndarray
    fip: np.ndarray
    bands: pd.DataFrame
    history: pd.DataFrame
    settings: dict
    assumptions: str
    grain_response: pd.DataFrame
    slip: np.ndarray
    system_accumulated_slip: np.ndarray
    system_slip_range: np.ndarray
    system_fip: np.ndarray
    peak_backstress: np.ndarray
    peak_stress: np.ndarray
    plastic_strain: np.ndarray
    labels: np.ndarray
    compliant: np.ndarray
    crack_mask: np.ndarray
    boundary_partner: np.ndarray
    systems: object
    omap: OrientationMap
    load_axis: np.ndarray

    @property
    def shape(self) -> tuple[int, int]:
        """``(ny, nx)``."""
        return self.fip.shape

    def last_cycle(self) -> pd.DataFrame:
        """History rows of the last cycle (the stabilised hysteresis loop when shaken down)."""
        h = self.history
        return h[h["cycle"] == h["cycle"].max()].reset_index(drop=True)

    def top_fraction(self, values: str = "fip", fraction: float = 0.1) -> np.ndarray:
        """Boolean ``(ny, nx)`` mask of the solid points in the top ``fraction`` of ``fip``,
        ``accumulated_slip`` or ``slip_range``."""
        name = check_choice(values, "values", ("fip", "accumulated_slip", "slip_range"))
        f = check_range(fraction, "fraction", 0.0, 1.0, inclusive=False)
        v = getattr(self, name)
        solid = ~self.compliant
        cut = np.quantile(v[solid], 1.0 - f)
        return solid & (v >= cut) & (v > 0)


# ---------------------------------------------------------------------------- checks
def _count(value, name: str, low: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
        raise ParameterError(f"{name} should be an integer >= {low}; got {value!r}")
    return int(value)


def _amplitudes(stress_amplitude, strain_amplitude, ratio) -> tuple[str, float, float, float]:
    if (stress_amplitude is None) == (strain_amplitude is None):
        raise ParameterError("give exactly one of stress_amplitude (MPa) and strain_amplitude; got "
                             f"stress_amplitude={stress_amplitude!r}, strain_amplitude={strain_amplitude!r}")
    control = "stress" if stress_amplitude is not None else "strain"
    name = "stress_amplitude" if control == "stress" else "strain_amplitude"
    raw = stress_amplitude if control == "stress" else strain_amplitude
    try:
        amp = float(raw)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be a positive number; got {raw!r}") from err
    if not (math.isfinite(amp) and amp > 0):
        raise ParameterError(f"{name} should be a positive number (half the load range); got {raw!r}")
    try:
        r = float(ratio)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"ratio should be a number < 1 (R = min/max load); got {ratio!r}") from err
    if not (math.isfinite(r) and r < 1.0):
        raise ParameterError(f"ratio should be a finite number < 1 (R = min/max load; R >= 1 has no tensile peak "
                             f"or no range); got {ratio!r}")
    top = 2.0 * amp / (1.0 - r)
    return control, amp, top, r * top


def _tol(tol) -> float:
    try:
        t = float(tol)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"tol should be a number in (0, 1); got {tol!r}") from err
    if not (math.isfinite(t) and 0.0 < t < 1.0):
        raise ParameterError(f"tol should lie in (0, 1) (a normalised residual, e.g. 1e-5); got {tol!r}")
    return t


# ---------------------------------------------------------------------------- set-up
def _grains(omap: OrientationMap, grains):
    if grains is None:
        from slipnet.grains import build_grain_graph

        grains = build_grain_graph(omap)
    labels = np.asarray(getattr(grains, "labels", None))
    mq = np.asarray(getattr(grains, "mean_quats", None), dtype=float)
    if labels.shape != omap.shape or mq.ndim != 2 or mq.shape[1] != 4:
        raise ParameterError("grains should be a GrainGraph of this map (labels of shape "
                             f"{omap.shape} and mean_quats (n, 4)); got labels {labels.shape}, mean_quats {mq.shape}")
    return labels.astype(np.int64), mq


def _aligned(omap: OrientationMap, labels: np.ndarray, mq: np.ndarray) -> OrientationMap:
    """Each point as its cubic equivalent nearest its grain mean (same physics; system indices
    then mean the same system throughout a grain)."""
    q = np.array(omap.quats, dtype=float)
    sel = (labels >= 0) & omap.indexed
    if sel.any():
        ref = mq[labels[sel]]
        ok = np.all(np.isfinite(ref), axis=1)
        flat = q.reshape(-1, 4)
        idx = np.flatnonzero(sel.ravel())[ok]
        flat[idx] = nearest_equivalent(flat[idx], ref[ok])
    return replace(omap, quats=q)


def _problem(omap, axis, systems, mat: CyclicMaterial, constants, ratio_c, unindexed, scheme, nthreads,
             crack_pts, labels, mq, boundary_width, boundary_strength, pad_kind):
    c, q, ph, soft, consts = _prepare(omap, constants, ratio_c, unindexed)
    ny, nx = omap.shape
    n = ny * nx
    soft = soft.copy()
    cmask = np.zeros((ny, nx), bool)
    if crack_pts is not None:
        cmask = _bands.crack_mask(crack_pts, omap)
    forced = cmask | (pad_kind == 1)
    buffer = pad_kind == 2
    if forced.any() or buffer.any():
        main = int(np.bincount(ph[ph >= 0]).argmax()) if (ph >= 0).any() else 0
        vrh = voigt_reuss_hill(consts[main])
        lam = vrh["bulk_gpa"] - 2.0 * vrh["shear_hill_gpa"] / 3.0
        soft_c = np.zeros((6, 6))
        soft_c[:3, :3] = lam
        soft_c[np.arange(6), np.arange(6)] += 2.0 * vrh["shear_hill_gpa"]
        c[forced.reshape(n)] = ratio_c * soft_c * 1000.0
        c[buffer.reshape(n)] = soft_c * 1000.0
        ph = np.where((forced | buffer).reshape(n), -1, ph)
        soft |= forced
        if soft.all():
            raise ParameterError("the crack leaves no solid point; give a shorter crack")
    structure = systems.structure
    plastic_phases = [i for i, p in enumerate(omap.phases) if p.structure == structure]
    pmap = -np.ones(len(omap.phases), np.int64)
    for k, i in enumerate(plastic_phases):
        pmap[i] = k
    pidx = np.where(ph >= 0, pmap[np.maximum(ph, 0)], -1).astype(np.int64)
    nrm = np.asarray(systems.normals, float)
    drc = np.asarray(systems.directions, float)
    schmid = np.ascontiguousarray(to_mandel(0.5 * (drc[:, :, None] * nrm[:, None, :]
                                                   + nrm[:, :, None] * drc[:, None, :])))
    plane_nn = np.ascontiguousarray(to_mandel(nrm[:, :, None] * nrm[:, None, :]))
    cc = np.stack([consts[i].mandel() * 1000.0 for i in plastic_phases]) if plastic_phases else np.zeros((1, 6, 6))
    cp = np.ascontiguousarray(np.einsum("kab,sb->ksa", cc, schmid))
    amat = np.ascontiguousarray(np.einsum("ksa,ta->kst", cp, schmid))
    ns = len(nrm)
    hmat = mat.latent_ratio + (1.0 - mat.latent_ratio) * np.eye(ns)
    rel = np.asarray(systems.crss, float)
    rev = np.asarray(systems.crss_reverse, float) / rel
    tau0 = np.repeat((mat.crss_mpa * rel)[None, :], n, axis=0)
    partner = -np.ones((ny, nx), np.int64)
    if boundary_width > 0 and boundary_strength > 0:
        gn, gd = _bands.grain_frames(mq, systems)
        extra, partner = _bands.boundary_layer(labels, ~soft & omap.indexed, omap, gn, gd, boundary_width,
                                               boundary_strength)
        tau0 += extra.reshape(n, ns)
    qrot = np.empty((n, 6, 6))
    _ck.rotations(q, qrot)
    x, y = omap.coordinates()
    prob = _solver.Problem(
        shape=(ny, nx), spacing=(omap.row_spacing, omap.step), scheme=scheme, workers=nthreads,
        c_el=np.ascontiguousarray(c), qrot=qrot, pidx=pidx, cc=np.ascontiguousarray(cc), cp=cp, amat=amat,
        schmid=schmid, plane_nn=plane_nn, hmat=np.ascontiguousarray(hmat), rev=np.ascontiguousarray(rev),
        tau0=np.ascontiguousarray(tau0), axis6=to_mandel(np.outer(axis, axis)),
        xy=np.stack([x.reshape(n), y.reshape(n)], axis=1), labels=labels.reshape(n),
    )
    return prob, soft, cmask, partner


def _edges(edges, name: str) -> tuple:
    if edges is None:
        return ()
    items = [edges] if isinstance(edges, str) else list(edges)
    out = []
    for e in items:
        e = check_choice(e, name, EDGES)
        if e not in out:
            out.append(e)
    return tuple(out)


def _padded(omap: OrientationMap, labels: np.ndarray, free: tuple, buffer: tuple):
    """The map with :data:`EDGE_PAD` unindexed points beyond each free or buffered edge (origin kept
    in the map frame), and the pad kind per point (0 map, 1 free gap, 2 elastic buffer; corners
    take the left/right kind)."""
    ny, nx = omap.shape
    edges = free + buffer
    pad = {e: (EDGE_PAD if e in edges else 0) for e in EDGES}
    if not edges:
        return omap, labels, np.zeros((ny, nx), np.int8), (0, 0)
    kind = {e: (1 if e in free else 2 if e in buffer else 0) for e in EDGES}
    widths = ((pad["top"], pad["bottom"]), (pad["left"], pad["right"]))
    q = np.pad(np.asarray(omap.quats), (*widths, (0, 0)), constant_values=np.nan)
    ph = np.pad(np.asarray(omap.phase), widths, constant_values=-1)
    qual = np.pad(np.asarray(omap.quality), widths, constant_values=0.0)
    ind = np.pad(np.asarray(omap.indexed), widths, constant_values=False)
    lab = np.pad(labels, widths, constant_values=-1)
    mask = np.pad(np.zeros((ny, nx), np.int8), widths,
                  constant_values=((kind["top"], kind["bottom"]), (kind["left"], kind["right"])))
    x0, y0 = omap.origin
    origin = (x0 - pad["left"] * omap.step, y0 - pad["top"] * omap.row_spacing)
    big = replace(omap, quats=q, phase=ph, quality=qual, indexed=ind, origin=origin)
    return big, lab, mask, (pad["top"], pad["left"])


def _crop(out, prob, soft, cmask, partner, big: tuple, corner: tuple, shape: tuple):
    nyp, nxp = big
    r0, c0 = corner
    ny, nx = shape

    def rows(a):  # (N, ...) → cropped (n, ...)
        return np.ascontiguousarray(a.reshape(nyp, nxp, *a.shape[1:])[r0:r0 + ny, c0:c0 + nx]
                                    .reshape(ny * nx, *a.shape[1:]))

    def cols(a):  # (6, N)
        return np.ascontiguousarray(rows(a.T).T)

    out = replace(out, eps=cols(out.eps), sig=cols(out.sig), ep=cols(out.ep), gam=rows(out.gam), v=rows(out.v),
                  x=rows(out.x), gmin=rows(out.gmin), gmax=rows(out.gmax), snmax=rows(out.snmax),
                  cycle_ends=[{**c, "ep_axial": rows(c["ep_axial"]), "acc": rows(c["acc"])} for c in out.cycle_ends])
    prob = replace(prob, pidx=rows(prob.pidx), qrot=rows(prob.qrot))
    sl = (slice(r0, r0 + ny), slice(c0, c0 + nx))
    return out, prob, soft[sl], cmask[sl], partner[sl]


def _schedule(top: float, bottom: float, cycles: int) -> list:
    segs = [_solver.Segment(0, "ramp", 0.0, top)]
    for k in range(1, cycles + 1):
        segs.append(_solver.Segment(k, "unload", top, bottom))
        segs.append(_solver.Segment(k, "reload", bottom, top))
    return segs


def _printer(progress, total_cycles: int):
    if progress is None or progress is False:
        return None
    if callable(progress):
        return progress
    state = {"key": None}

    def show(row: dict) -> None:
        key = (row["cycle"], row["segment"])
        if key != state["key"]:
            state["key"] = key
            print(f"cyclic: cycle {row['cycle']}/{total_cycles} {row['segment']}", flush=True)
        print(f"  increment {row['increment']}: stress {row['stress_mpa']:.1f} MPa, "
              f"strain {row['strain']:.3e}, {row['newton_iterations']} Newton / {row['cg_iterations']} CG "
              "iterations", flush=True)

    return show


# ---------------------------------------------------------------------------- public solvers
def solve_cyclic(
    omap: OrientationMap,
    load_axis,
    *,
    stress_amplitude: float | None = None,
    strain_amplitude: float | None = None,
    ratio: float = -1.0,
    cycles: int = 3,
    frequency_hz: float = 1.0,
    crack=None,
    free_edges=(),
    buffer_edges=(),
    grains=None,
    material: CyclicMaterial | None = None,
    systems=None,
    boundary_width_um: float = 0.0,
    boundary_strength_mpa: float = 50.0,
    fip_k: float = DEFAULT_FIP_K,
    yield_stress_mpa: float | None = None,
    band_width_um: float | None = None,
    band_min_points: int = 3,
    tol: float = 1e-5,
    max_iter: int = 3000,
    max_newton: int = 12,
    max_local: int = 40,
    max_slip_increment: float = 5e-4,
    min_increments: int = 6,
    max_cutbacks: int = 8,
    rate_floor: float = 1e-3,
    constants=None,
    compliant_ratio: float = 1e-3,
    unindexed: str = "auto",
    scheme: str = "rotated",
    workers: int | None = None,
    progress: bool | Callable[[dict], None] | None = None,
) -> CyclicField:
    """Cyclic crystal plasticity of a periodic columnar polycrystal under uniaxial load.

    The load rises from zero to its maximum (cycle 0, "first loading"), then each of ``cycles``
    cycles goes maximum → minimum → maximum (triangular wave of frequency ``frequency_hz``).

    Parameters
    ----------
    omap
        The orientation map (one point = one column of material). Unindexed points and a notch
        are a compliant phase as in :func:`slipnet.stress.solve_elastic`.
    load_axis : (3,) array_like
        Uniaxial load axis, map frame (a 2-vector means in-plane).
    stress_amplitude
        Stress amplitude σ_a = (σ_max − σ_min)/2, MPa (stress control). Give this or ``strain_amplitude``.
    strain_amplitude
        Amplitude of the mean axial strain (mixed control: the other mean stresses are zero).
    ratio
        Load ratio R = min/max, < 1 (−1 fully reversed, 0 pulsating, 0.1 …).
    cycles
        Number of full cycles after the first loading, ≥ 1.
    frequency_hz
        Loading frequency, Hz (the model is rate dependent).
    crack : (k, 2) array_like, optional
        Crack polyline, µm map frame, vertices from the mouth (e.g. the notch root) to the tip (last
        vertex); cut in as a traction-free slit one cell wide.
    free_edges
        Map edges (``"left"``, ``"right"``, ``"top"``, ``"bottom"``) that are free surfaces of the
        specimen, e.g. the edge an edge notch is cut into: a compliant gap is added beyond them, so
        the periodic cell does not join them to the opposite edge (otherwise the notch mouth meets
        the opposite edge and its corners raise a spurious concentration there).
    buffer_edges
        Map edges beyond which an isotropic elastic buffer (Hill average, no slip) is added, so grains
        at an edge across the load meet a neutral medium instead of the unrelated grains of the
        opposite edge (common practice for non-periodic maps in periodic solvers).
    grains
        A ``GrainGraph`` of the map (labels and mean orientations, used for bands and the boundary
        layer); built with a 15° threshold if None.
    material
        :class:`CyclicMaterial` (defaults if None).
    systems
        Slip systems (default: the catalogue's default for the main phase, BCC {110}+{112}; pass
        ``slip_systems("bcc", "all")`` for {123} as well).
    boundary_width_um, boundary_strength_mpa
        Boundary layer width (µm, 0: none) and the largest resistance rise (MPa, for m′ = 0).
    fip_k, yield_stress_mpa
        Fatemi–Socie k (default 0.5) and σ_y, MPa (default 3.06 × τ₀, the random-texture Taylor
        factor times the CRSS).
    band_width_um, band_min_points
        Slip band width (default 3 map steps) and the fewest points a band needs.
    tol
        Normalised equilibrium residual of each increment.
    max_iter, max_newton, max_local
        Most CG iterations per linear solve, global Newton iterations per increment, local Newton
        iterations per point.
    max_slip_increment
        Target largest slip increment per load increment (steps adapt to it).
    min_increments
        Fewest increments per half cycle (and for the first loading).
    max_cutbacks
        Most successive cut-backs of one increment before :class:`NumericalError`.
    rate_floor
        Slip rates below this fraction of the reference rate γ̇₀ are neglected (such systems stay
        inactive; with n = 20 and 1e-3 these are systems below about 0.71 of their flow stress).
    constants, compliant_ratio, unindexed, scheme, workers
        As in :func:`slipnet.stress.solve_elastic` (``unindexed`` default ``"auto"``).
    progress
        True to print one line per increment, or a callable receiving each history row (dict).

    Returns
    -------
    CyclicField

    Raises
    ------
    ParameterError
        Bad arguments (negative amplitude, R ≥ 1, zero cycles, a crack outside the map, …).
    NumericalError
        A Newton step that does not converge after ``max_cutbacks`` cut-backs; the message says in
        which cycle, increment, time and load, and at which point. Nothing is returned or written.

    Notes
    -----
    Backward Euler is first order in time: halving ``max_slip_increment`` (5e-4 → 2.5e-4) changes
    grain-mean accumulated slip by about 1.5 % on a notched 100² cell, refining the grid 100² → 200²
    by about 3 % (tests); the peak at a crack tip does not converge under grid refinement (a slit
    one cell wide is a mesh-dependent singularity). Matching an explicit solver to 2 % on a
    monotonic ramp needs about 2.5e-5. Cost per increment: a few global Newton iterations, each one
    per-point update (numba, parallel over points) and one CG solve; measured on a shared two-core
    machine (``benchmarks/bench_cyclic.py``), 3 cycles at ±170 MPa on a notched 128² map take about
    9 s (≈ 95 elastic solves), 256² about 30 s and 512² about 110 s at 1.4 GiB peak memory.
    Inputs are plain objects and there is no module state, so calls can run in Dask workers.
    """
    control, amp, top, bottom = _amplitudes(stress_amplitude, strain_amplitude, ratio)
    n_cycles = _count(cycles, "cycles")
    freq = check_positive(frequency_hz, "frequency_hz")
    segments = _schedule(top, bottom, n_cycles)
    rate = 2.0 * (top - bottom) * freq
    return _solve(omap, load_axis, control, segments, rate, amp, top, bottom, crack, (free_edges, buffer_edges),
                  grains, material,
                  systems, boundary_width_um, boundary_strength_mpa, fip_k, yield_stress_mpa, band_width_um,
                  band_min_points, tol, max_iter, max_newton, max_local, max_slip_increment, min_increments,
                  max_cutbacks, rate_floor, constants, compliant_ratio, unindexed, scheme, workers, progress,
                  {"ratio": float(ratio), "cycles": n_cycles, "frequency_hz": freq})


def solve_monotonic(
    omap: OrientationMap,
    load_axis,
    stress: float,
    *,
    load_time_s: float = 10.0,
    control: str = "stress",
    crack=None,
    free_edges=(),
    buffer_edges=(),
    grains=None,
    material: CyclicMaterial | None = None,
    systems=None,
    boundary_width_um: float = 0.0,
    boundary_strength_mpa: float = 50.0,
    tol: float = 1e-5,
    max_iter: int = 3000,
    max_newton: int = 12,
    max_local: int = 40,
    max_slip_increment: float = 5e-4,
    min_increments: int = 6,
    max_cutbacks: int = 8,
    rate_floor: float = 1e-3,
    constants=None,
    compliant_ratio: float = 1e-3,
    unindexed: str = "auto",
    scheme: str = "rotated",
    workers: int | None = None,
    progress: bool | Callable[[dict], None] | None = None,
) -> CyclicField:
    """Monotonic special case of :func:`solve_cyclic`: a linear ramp from 0 to ``stress`` in ``load_time_s``.

    ``stress`` is the final uniaxial stress (MPa) with ``control="stress"``, or the final mean axial
    strain with ``control="strain"``. The slip range and FIP then refer to the ramp. Other
    parameters as in :func:`solve_cyclic`.
    """
    control = check_choice(control, "control", ("stress", "strain"))
    try:
        top = float(stress)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"stress should be a finite non-zero number; got {stress!r}") from err
    if not math.isfinite(top) or top == 0.0:
        raise ParameterError(f"stress should be a finite non-zero number; got {stress!r}")
    t_load = check_positive(load_time_s, "load_time_s")
    segments = [_solver.Segment(0, "ramp", 0.0, top)]
    return _solve(omap, load_axis, control, segments, abs(top) / t_load, abs(top), top, 0.0, crack,
                  (free_edges, buffer_edges),
                  grains, material,
                  systems, boundary_width_um, boundary_strength_mpa, DEFAULT_FIP_K, None, None, 3, tol, max_iter,
                  max_newton, max_local, max_slip_increment, min_increments, max_cutbacks, rate_floor, constants,
                  compliant_ratio, unindexed, scheme, workers, progress, {"load_time_s": t_load, "cycles": 0})


def _solve(omap, load_axis, control, segments, rate, amp, top, bottom, crack, edge_spec, grains, material, systems,
           boundary_width_um, boundary_strength_mpa, fip_k, yield_stress_mpa, band_width_um, band_min_points, tol,
           max_iter, max_newton, max_local, max_slip_increment, min_increments, max_cutbacks, rate_floor, constants,
           compliant_ratio, unindexed, scheme, workers, progress, extra) -> CyclicField:
    if not isinstance(omap, OrientationMap):
        raise ParameterError(f"omap should be an OrientationMap; got {type(omap).__name__}")
    axis = check_vector(load_axis, "load_axis")
    mat = CyclicMaterial() if material is None else material
    if not isinstance(mat, CyclicMaterial):
        raise ParameterError(f"material should be a CyclicMaterial; got {type(mat).__name__}")
    tol = _tol(tol)
    numer = _solver.Numerics(
        tol=tol, max_iter=_count(max_iter, "max_iter"), max_newton=_count(max_newton, "max_newton"),
        max_local=_count(max_local, "max_local"),
        slip_target=check_range(max_slip_increment, "max_slip_increment", 1e-7, 0.05),
        min_increments=_count(min_increments, "min_increments"), rate_floor=check_range(rate_floor, "rate_floor",
                                                                                        1e-16, 0.1),
        max_cutbacks=_count(max_cutbacks, "max_cutbacks", 0), nblocks=1)
    bw = check_positive(boundary_width_um, "boundary_width_um", allow_zero=True)
    bs = check_positive(boundary_strength_mpa, "boundary_strength_mpa", allow_zero=True)
    k_fs = check_positive(fip_k, "fip_k", allow_zero=True)
    sy = RANDOM_TAYLOR_FACTOR * mat.crss_mpa if yield_stress_mpa is None else check_positive(yield_stress_mpa,
                                                                                             "yield_stress_mpa")
    wband = 3.0 * omap.step if band_width_um is None else check_positive(band_width_um, "band_width_um")
    mpts = _count(band_min_points, "band_min_points")
    ratio_c = check_range(compliant_ratio, "compliant_ratio", 0.0, 1.0)
    if ratio_c <= 0.0:
        raise ParameterError("compliant_ratio should be > 0 (a zero-stiffness phase is singular); "
                             f"got {compliant_ratio!r}")
    scheme = check_choice(scheme, "scheme", SCHEMES)
    unindexed = check_choice(unindexed, "unindexed", UNINDEXED_MODES)
    crack_pts = None if crack is None else _bands.crack_polyline(crack, omap)
    edges = _edges(edge_spec[0], "free_edges")
    buffers = _edges(edge_spec[1], "buffer_edges")
    if set(edges) & set(buffers):
        raise ParameterError(f"an edge should be free or buffered, not both; got free {edges}, buffer {buffers}")
    for e in edges:
        normal = np.array([1.0, 0.0, 0.0]) if e in ("left", "right") else np.array([0.0, 1.0, 0.0])
        if abs(float(normal @ axis)) > 0.5:
            raise ParameterError(f"free_edges should be edges along the load (the load cannot pass a free surface); "
                                 f"got {e!r} with load axis ({axis[0]:.2f}, {axis[1]:.2f}, {axis[2]:.2f})")
    systems = default_systems(omap, systems)
    labels, mq = _grains(omap, grains)
    omap_a = _aligned(omap, labels, mq)
    ny, nx = omap.shape
    n = ny * nx
    omap_p, labels_p, pad_kind, (r0, c0) = _padded(omap_a, labels, edges, buffers)
    nyp, nxp = omap_p.shape
    nthreads = _workers(workers, nyp * nxp)
    # the per-point update is heavy work per point: threaded from a few thousand points on (the FFTs
    # and CG keep the elastic solver's policy)
    numer.point_threads = (max(1, min(os.cpu_count() or 1, 2)) if n >= 4096 else 1) if workers is None else nthreads
    numer.nblocks = max(1, min(nyp * nxp, 64 * numer.point_threads))
    with _numba_threads(nthreads):
        prob, soft, cmask, partner = _problem(omap_p, axis, systems, mat, constants, ratio_c, unindexed, scheme,
                                              nthreads, crack_pts, labels_p, mq, bw, bs, pad_kind)
        if control == "stress":
            scale = max(abs(top), abs(bottom))
        else:
            lcl = prob.axis6 @ prob.c_el.mean(axis=0) @ prob.axis6
            scale = float(lcl) * max(abs(top), abs(bottom))
        last = max(s.cycle for s in segments)
        out = _solver.integrate(prob, segments, rate, control, scale, mat.as_dict(), numer, last,
                                _printer(progress, last))
    if edges or buffers:  # back to the map's own points
        out, prob, soft, cmask, partner = _crop(out, prob, soft, cmask, partner, (nyp, nxp), (r0, c0), (ny, nx))
    ns = prob.schmid.shape[0]
    solid_plastic = prob.pidx >= 0
    if last == 0:  # monotonic: the range is that of the ramp
        srange = np.abs(out.gam)
        snmax = np.zeros_like(srange)
        _ck_normal_max(out.sig, prob, snmax)
    else:
        srange = out.gmax - out.gmin
        snmax = np.where(np.isfinite(out.snmax), out.snmax, 0.0)
    srange[~solid_plastic] = 0.0
    fip_sys = 0.5 * srange * (1.0 + k_fs * snmax / sy)
    fip_sys[~solid_plastic] = 0.0
    acc = out.v.sum(axis=1)
    valid = (~soft).reshape(n) & solid_plastic
    bands = _bands.slip_bands(labels, valid.reshape(ny, nx), omap_a, mq, systems, fip_sys, srange, wband, mpts)
    resp = _bands.grain_response(labels, valid.reshape(ny, nx), out.cycle_ends, srange.max(axis=1), acc,
                                 elastic_floor=max(1e-12, 10.0 * numer.rate_floor * mat.reference_rate
                                                   * abs(segments[-1].end - segments[-1].start) / rate),
                                 ratchet_fraction=0.1)
    history = pd.DataFrame(out.rows, columns=list(HISTORY_COLUMNS))
    settings = {
        "control": control, "amplitude": amp, "max_load": top, "min_load": bottom, "load_axis": axis.tolist(),
        **extra, "material": mat.as_dict(), "n_systems": ns, "fip_k": k_fs, "yield_stress_mpa": sy,
        "band_width_um": wband, "boundary_width_um": bw, "boundary_strength_mpa": bs,
        "free_edges": list(edges), "buffer_edges": list(buffers),
        "crack_um": None if crack_pts is None else crack_pts.tolist(),
        "crack_tip_um": None if crack_pts is None else crack_pts[-1].tolist(),
        "tol": tol, "max_slip_increment": numer.slip_target, "min_increments": numer.min_increments,
        "scheme": scheme, "unindexed": unindexed, "compliant_ratio": ratio_c,
        "increments": out.totals["increments"], "newton_iterations": out.totals["newton"],
        "cg_iterations": out.totals["cg"], "cutbacks": out.totals["cutbacks"],
    }
    assumptions = cyclic_assumptions(scheme, ratio_c, omap.grid, unindexed, crack_pts is not None,
                                     bw > 0 and bs > 0, edges, buffers)
    return CyclicField(
        accumulated_slip=acc.reshape(ny, nx),
        slip_range=srange.max(axis=1).reshape(ny, nx),
        fip=fip_sys.max(axis=1).reshape(ny, nx),
        bands=bands,
        history=history,
        settings=settings,
        assumptions=assumptions,
        grain_response=resp,
        slip=out.gam.reshape(ny, nx, ns),
        system_accumulated_slip=out.v.reshape(ny, nx, ns),
        system_slip_range=srange.reshape(ny, nx, ns),
        system_fip=fip_sys.reshape(ny, nx, ns),
        peak_backstress=out.x.reshape(ny, nx, ns),
        peak_stress=from_mandel(out.sig.T.reshape(ny, nx, 6)),
        plastic_strain=from_mandel(out.ep.T.reshape(ny, nx, 6)),
        labels=labels,
        compliant=soft,
        crack_mask=cmask,
        boundary_partner=partner,
        systems=systems,
        omap=omap_a,
        load_axis=axis,
    )


def _ck_normal_max(sig: np.ndarray, prob, out: np.ndarray) -> None:
    """Normal stress on each system's plane at the final state (the monotonic 'maximum')."""
    sc = np.einsum("pab,bp->pa", prob.qrot, sig)
    out[:] = sc @ prob.plane_nn.T
