"""Local stresses from a full-field anisotropic elastic solve on the orientation map grid.

Method
------
The map is taken as one periodic cell of a columnar polycrystal: every grain runs straight
through the thickness, so all fields depend on (x, y) only while stress and strain keep all
nine components (generalized plane strain). The strain is ``ε = E + sym ∇u`` with a macroscopic
strain E (all six components free) and a periodic displacement u(x, y). The applied load is a
macroscopic uniaxial stress ``Σ = σ l ⊗ l`` along the unit load axis l; every other macroscopic
stress component is zero (stress control of all six components).

The equilibrium problem is solved in Fourier space (Moulinec & Suquet 1998, Comput. Methods
Appl. Mech. Eng. 157:69) in its Galerkin / projection form solved by conjugate gradients
(Zeman et al. 2010, J. Comput. Phys. 229:8065; de Geus et al. 2017, Comput. Methods Appl. Mech.
Eng. 318:412), which needs no reference medium. The projection G maps a symmetric tensor field
onto compatible strains; its zero frequency is kept (identity), so the unknown field carries the
macroscopic strain and the linear system ``G(C : ε) = Σ`` states both local equilibrium (the
non-zero frequencies of the stress are divergence free) and ``⟨σ⟩ = Σ`` at once. The operator is
symmetric positive definite on compatible fields, so plain CG applies.

Discretisation: ``scheme="rotated"`` (default) uses the finite-difference wave vectors of the
rotated scheme (Willot 2015, C. R. Mécanique 343:232), which avoids Fourier ringing and converges
much faster around near-empty points; ``scheme="fourier"`` uses the continuous wave vectors of
Moulinec & Suquet. Hexagonal maps are treated as a rectangular grid with the row spacing.

Convergence: the normalised equilibrium residual ``‖Σ − G(σ)‖ / ‖Σ‖`` (root-mean-square over
the points, Frobenius norm per point). Its non-zero frequencies are the part of the stress that
is not in equilibrium, its mean the error on the applied load. The result is returned only when
the true residual (recomputed, not the CG recurrence) is below ``tol``; otherwise
:class:`~slipnet.errors.NumericalError`.

Elastic constants are per phase, cubic, in GPa. Unindexed points (and a notch, which a map
records as unindexed) become a very compliant isotropic phase, ``compliant_ratio`` times the
isotropic (Hill) stiffness of the main phase.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import scipy.fft

from slipnet._checks import check_choice, check_range, check_vector
from slipnet.errors import NumericalError, ParameterError
from slipnet.maps.orientation_map import OrientationMap
from slipnet.stress import _kernels as _k
from slipnet.stress._threads import _numba_threads, _workers
from slipnet.stress.constants import (
    DEFAULT_CONSTANTS,
    CubicConstants,
    _isotropic_mandel,
    from_mandel,
    to_mandel,
    voigt_reuss_hill,
)

__all__ = ["StressField", "assumptions_text", "solve_elastic"]

SCHEMES = ("rotated", "fourier")
UNINDEXED_MODES = ("compliant", "nearest", "auto")
#: With ``unindexed="auto"``, unindexed clusters of at least this many points (or touching the map
#: edge) are holes / the notch (compliant); smaller ones are badly indexed metal (nearest orientation).
HOLE_MIN_POINTS = 25
_SQ2 = math.sqrt(2.0)


















# ---------------------------------------------------------------------------- result container
def assumptions_text(scheme: str = "rotated", compliant_ratio: float = 1e-3, grid: str = "square",
                     plastic: bool = False, unindexed: str = "compliant") -> str:
    """The statement every output made from a :class:`StressField` prints."""
    model = ("linear elasticity plus rate-dependent crystal plasticity (small strain)" if plastic
             else "linear elasticity only (no plasticity)")
    text = (f"Local stresses assume {model}; grains as columns through the thickness (generalized plane "
            "strain, nothing varies with depth); the map repeated periodically in x and y (periodic cell, "
            "so edges see copies of the opposite edge); "
            + {"compliant": "unindexed points and the notch",
               "auto": "the notch and unindexed clusters (small specks take the nearest orientation)",
               "nearest": "no point (unindexed points take the nearest orientation)"}[unindexed]
            + f" as a very compliant isotropic phase ({compliant_ratio:g} x the matrix stiffness); "
            f"spectral solve, {scheme} scheme.")
    if grid == "hex":
        text += " Hexagonal grid treated as a rectangular grid with the row spacing."
    return text


@dataclass(frozen=True, eq=False)
class StressField:
    """A full-field stress solution on an orientation map.

    Attributes
    ----------
    stress : (ny, nx, 3, 3) ndarray
        Cauchy stress in the map frame, MPa (symmetric).
    strain : (ny, nx, 3, 3) ndarray
        Small (total) strain, dimensionless.
    iterations : int
        Conjugate-gradient iterations (operator applications) used.
    residual : float
        Final normalised equilibrium residual (recomputed after convergence).
    applied_stress : float
        Macroscopic uniaxial stress σ along the load axis, MPa.
    load_axis : (3,) ndarray
        Unit load axis in the map frame.
    macro_strain : (3, 3) ndarray
        Macroscopic (mean) strain.
    assumptions : str
        The modelling assumptions; every output using the field prints them.
    omap : OrientationMap
        The map solved on.
    compliant : (ny, nx) bool ndarray
        Points given the compliant phase (unindexed points, notch).
    tol : float
        Requested tolerance.
    scheme : str
        Discretisation scheme.
    """

    stress: np.ndarray
    strain: np.ndarray
    iterations: int
    residual: float
    applied_stress: float
    load_axis: np.ndarray
    macro_strain: np.ndarray
    assumptions: str
    omap: OrientationMap
    compliant: np.ndarray
    tol: float = 1e-6
    scheme: str = "rotated"
    meta: dict = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, int]:
        """``(ny, nx)``."""
        return self.stress.shape[:2]

    @property
    def applied_tensor(self) -> np.ndarray:
        """The applied macroscopic stress ``σ l ⊗ l``, (3, 3) MPa."""
        return self.applied_stress * np.outer(self.load_axis, self.load_axis)

    def normal_stress(self, axis=None) -> np.ndarray:
        """Normal stress ``a · σ · a`` (MPa) along unit ``axis`` (default: the load axis), (ny, nx)."""
        a = self.load_axis if axis is None else check_vector(axis, "axis")
        return np.einsum("i,...ij,j->...", a, self.stress, a)

    def von_mises(self) -> np.ndarray:
        """von Mises equivalent stress, (ny, nx) MPa."""
        s = self.stress
        dev = s - np.trace(s, axis1=-2, axis2=-1)[..., None, None] * np.eye(3) / 3.0
        return np.sqrt(1.5 * np.einsum("...ij,...ij->...", dev, dev))

    @property
    def apparent_modulus(self) -> float:
        """Apparent Young's modulus of the cell along the load axis, ``σ / (l·E·l)`` in GPa."""
        e = float(self.load_axis @ self.macro_strain @ self.load_axis)
        return self.applied_stress / e / 1000.0








def _frequencies(ny: int, nx: int, hy: float, hx: float, scheme: str) -> tuple[np.ndarray, np.ndarray]:
    """Unit wave directions ``(2, ny, nx//2+1)`` complex and kind flags (0 project, 1 keep, 2 drop)."""
    ty = 2.0 * np.pi * np.fft.fftfreq(ny)[:, None]
    tx = 2.0 * np.pi * np.fft.rfftfreq(nx)[None, :]
    if scheme == "fourier":
        k1 = np.broadcast_to(tx / hx, (ny, tx.shape[1])).astype(complex)
        k2 = np.broadcast_to(ty / hy, (ny, tx.shape[1])).astype(complex)
    else:
        ex, ey = np.exp(1j * tx), np.exp(1j * ty)
        k1 = (ex - 1.0) * (ey + 1.0) / hx
        k2 = (ey - 1.0) * (ex + 1.0) / hy
    norm = np.sqrt(np.abs(k1) ** 2 + np.abs(k2) ** 2)
    kind = np.zeros(norm.shape, np.int8)
    tiny = norm < 1e-10 * norm.max() if norm.max() > 0 else np.ones(norm.shape, bool)
    kind[tiny] = 2
    if scheme == "fourier":
        # Continuous wave vectors are not periodic: on an even grid a Nyquist frequency has no sign,
        # so a mode on a Nyquist row/column paired with a non-zero, non-Nyquist other component gets
        # a projection that is not the conjugate of its partner's, breaking the Hermitian symmetry of
        # the operator (and CG). Drop those and the corner; keep (0, N/2) and (N/2, 0), which laminates need.
        row_nyq = np.zeros(ny, bool)
        col_nyq = np.zeros(tx.shape[1], bool)
        if ny % 2 == 0:
            row_nyq[ny // 2] = True
        if nx % 2 == 0:
            col_nyq[-1] = True
        row_plain = ~row_nyq & (np.arange(ny) != 0)
        col_plain = ~col_nyq & (np.arange(tx.shape[1]) != 0)
        kind[row_nyq[:, None] & col_plain[None, :]] = 2
        kind[row_plain[:, None] & col_nyq[None, :]] = 2
        kind[row_nyq[:, None] & col_nyq[None, :]] = 2  # (N/2, N/2): direction (1, 1) or (1, −1)?
    kind[0, 0] = 1
    safe = np.where(tiny, 1.0, norm)
    kvec = np.ascontiguousarray(np.stack([k1 / safe, k2 / safe]))
    return kvec, kind


class _Spectral:
    """The discretised operator ``ε ↦ G(C : ε)`` on one map, with a CG solver (internal)."""

    def __init__(self, stiffness: np.ndarray, shape: tuple[int, int], spacing: tuple[float, float],
                 scheme: str, workers: int) -> None:
        self.c = stiffness  # (N, 6, 6) MPa
        self.shape = shape
        self.n = shape[0] * shape[1]
        self.kvec, self.kind = _frequencies(shape[0], shape[1], spacing[0], spacing[1], scheme)
        self.workers = workers
        self._sig = np.empty((6, self.n))

    def project(self, field: np.ndarray) -> np.ndarray:
        ny, nx = self.shape
        spec = scipy.fft.rfftn(field.reshape(6, ny, nx), axes=(1, 2), workers=self.workers)
        _k.project(spec, self.kvec, self.kind)
        return scipy.fft.irfftn(spec, s=(ny, nx), axes=(1, 2), workers=self.workers).reshape(6, self.n)

    def apply(self, eps: np.ndarray) -> np.ndarray:
        _k.apply_stiffness(self.c, eps, self._sig)
        return self.project(self._sig)

    def stress(self, eps: np.ndarray, eigen: np.ndarray | None = None) -> np.ndarray:
        out = np.empty_like(eps)
        if eigen is None:
            _k.apply_stiffness(self.c, eps, out)
        else:
            _k.apply_stiffness_eigen(self.c, eps, eigen, out)
        return out

    def solve(self, b: np.ndarray, x: np.ndarray, scale: float, tol: float, max_iter: int) -> tuple[int, float]:
        """CG on ``G(C:x) = b`` in place on ``x``; returns (iterations, true residual).

        ``scale`` is the norm the residual is divided by (the applied stress, MPa).
        """
        n = self.n
        its = 0
        while True:
            r = b - self.apply(x)
            rr = _k.dot(r, r)
            res = math.sqrt(rr / n) / scale
            if not math.isfinite(res):
                raise NumericalError("the stress solve produced non-finite values; check the elastic constants "
                                     "and the compliant-phase ratio")
            if res <= tol:
                return its, res
            if its >= max_iter:
                raise NumericalError(
                    f"the stress solve did not converge: residual {res:.3g} > tol {tol:g} after {its} iterations "
                    f"(max_iter={max_iter}); raise max_iter, relax tol or raise compliant_ratio"
                )
            p = np.zeros_like(r)
            beta = 0.0
            while its < max_iter:
                # three passes per iteration: p = r + βp with C p and p·Cp; FFT, project, inverse FFT;
                # the x and r updates with the new r·r
                pap = _k.direction_stiffness(self.c, p, r, beta, self._sig)
                ap = self.project(self._sig)
                its += 1
                if not (pap > 0.0 and math.isfinite(pap)):
                    raise NumericalError(
                        f"the stress operator is not positive definite (p·Ap = {pap:.3g} at iteration {its}); "
                        "the stiffness field is singular or not finite"
                    )
                alpha = rr / pap
                rr_new = _k.cg_update(x, r, p, ap, alpha)
                if math.sqrt(rr_new / n) / scale <= 0.5 * tol:
                    break
                beta = rr_new / rr
                rr = rr_new
            # loop back: recompute the true residual (the CG recurrence drifts in round-off)


def _phase_constants(omap: OrientationMap, constants) -> list[CubicConstants | None]:
    out = []
    for i, ph in enumerate(omap.phases):
        c = None
        if ph.structure not in DEFAULT_CONSTANTS:
            out.append(None)  # a phase slipnet does not analyse ('other'): its points are solved as unindexed
            continue
        if constants is None:
            c = DEFAULT_CONSTANTS[ph.structure]
        elif isinstance(constants, CubicConstants):
            c = constants
        elif isinstance(constants, dict):
            c = constants.get(ph.name, constants.get(ph.structure, constants.get(i)))
            if c is None:
                c = DEFAULT_CONSTANTS[ph.structure]
        else:
            seq = list(constants)
            if len(seq) != len(omap.phases):
                raise ParameterError(f"constants should give one CubicConstants per phase ({len(omap.phases)}); "
                                     f"got {len(seq)}")
            c = seq[i]
        if not isinstance(c, CubicConstants):
            raise ParameterError(f"constants for phase {ph.name!r} should be CubicConstants; got {c!r}")
        out.append(c)
    return out


def _prepare(omap: OrientationMap, constants, compliant_ratio: float, unindexed: str
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list[CubicConstants]]:
    """Per-point stiffness (N, 6, 6) in MPa, quats (N, 4) used, phase index, compliant mask."""
    if not isinstance(omap, OrientationMap):
        raise ParameterError(f"omap should be an OrientationMap; got {type(omap).__name__}")
    consts = _phase_constants(omap, constants)
    indexed = np.asarray(omap.indexed)
    if not indexed.any():
        raise ParameterError("the map has no indexed point: every point would be the compliant phase, "
                             "a zero-stiffness (singular) cell; give a map with indexed points")
    quats = np.array(omap.quats, dtype=np.float64)
    phase = np.array(omap.phase, dtype=np.int64)
    soft = ~indexed
    no_constants = np.array([c is None for c in consts] + [False])
    soft = soft | no_constants[np.asarray(omap.phase)]
    if unindexed != "compliant" and soft.any():
        from scipy import ndimage

        fill = soft.copy()
        if unindexed == "auto":
            lab, n_lab = ndimage.label(soft)
            sizes = np.bincount(lab.ravel(), minlength=n_lab + 1)
            edge = np.unique(np.concatenate([lab[0], lab[-1], lab[:, 0], lab[:, -1]]))
            hole = sizes >= HOLE_MIN_POINTS
            hole[edge] = True
            hole[0] = False
            fill = soft & ~hole[lab]
        idx = ndimage.distance_transform_edt(soft, return_distances=False, return_indices=True)
        quats = np.where(fill[..., None], quats[idx[0], idx[1]], quats)
        phase = np.where(fill, phase[idx[0], idx[1]], phase)
        soft = soft & ~fill
    main = int(np.bincount(phase[~soft].ravel()).argmax())
    vrh = voigt_reuss_hill(consts[main])
    soft_c = compliant_ratio * _isotropic_mandel(vrh["bulk_gpa"], vrh["shear_hill_gpa"])
    consts = [consts[main] if c is None else c for c in consts]  # placeholders only: no point uses them
    crystal = np.stack([c.mandel() for c in consts])
    n = quats.shape[0] * quats.shape[1]
    ph = np.where(soft, -1, phase).reshape(n)
    q = np.ascontiguousarray(np.where(soft[..., None], 0.0, quats).reshape(n, 4))
    q[ph < 0, 0] = 1.0
    c = np.empty((n, 6, 6))
    _k.stiffness_field(q, ph, crystal * 1000.0, soft_c * 1000.0, _k.MANDEL_PAIRS, c)
    return c, q, ph, soft, consts


def _check_common(load_axis, stress, tol, max_iter, compliant_ratio, scheme, unindexed):
    axis = check_vector(load_axis, "load_axis")
    try:
        sig = float(stress)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"stress should be a number in MPa; got {stress!r}") from err
    if not math.isfinite(sig) or sig == 0.0:
        raise ParameterError(f"stress should be a finite non-zero number in MPa; got {stress!r}")
    try:
        t = float(tol)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"tol should be a number in (0, 1); got {tol!r}") from err
    if not (math.isfinite(t) and 0.0 < t < 1.0):
        raise ParameterError(f"tol should lie in (0, 1) (a normalised residual, e.g. 1e-6); got {tol!r}")
    if isinstance(max_iter, bool) or not isinstance(max_iter, int | np.integer) or max_iter < 1:
        raise ParameterError(f"max_iter should be a positive integer; got {max_iter!r}")
    ratio = check_range(compliant_ratio, "compliant_ratio", 0.0, 1.0)
    if ratio <= 0.0:
        raise ParameterError("compliant_ratio should be > 0 (a zero-stiffness phase makes the problem singular); "
                             f"got {compliant_ratio!r}")
    scheme = check_choice(scheme, "scheme", SCHEMES)
    unindexed = check_choice(unindexed, "unindexed", UNINDEXED_MODES)
    return axis, sig, t, int(max_iter), ratio, scheme, unindexed


def solve_elastic(
    omap: OrientationMap,
    load_axis,
    stress: float = 100.0,
    tol: float = 1e-6,
    *,
    max_iter: int = 1000,
    constants=None,
    compliant_ratio: float = 1e-3,
    unindexed: str = "compliant",
    scheme: str = "rotated",
    workers: int | None = None,
) -> StressField:
    """Solve for the local elastic stress in a periodic columnar polycrystal under uniaxial load.

    Parameters
    ----------
    omap
        The orientation map; one grid point is one column of material.
    load_axis : (3,) array_like
        Load axis in the map frame (a 2-vector means in-plane); normalised.
    stress
        Macroscopic uniaxial stress σ along the load axis, MPa (negative: compression). All
        other macroscopic stress components are zero.
    tol
        Normalised equilibrium residual to reach, in (0, 1).
    max_iter
        Most conjugate-gradient iterations before :class:`NumericalError`.
    constants
        ``None`` (defaults per structure: :data:`IRON_CONSTANTS` for bcc,
        :data:`AUSTENITE_CONSTANTS` for fcc), one :class:`CubicConstants` for every phase, a
        sequence with one per phase, or a dict keyed by phase name, structure or index.
    compliant_ratio
        Stiffness of the compliant phase (unindexed points, notch) relative to the isotropic
        Hill stiffness of the main phase, in (0, 1].
    unindexed
        ``"compliant"`` (unindexed points are the compliant phase: right for a notch or holes),
        ``"nearest"`` (take the orientation of the nearest indexed point: right for scattered
        badly indexed points in dense metal) or ``"auto"`` (clusters of at least
        :data:`HOLE_MIN_POINTS` points or touching the map edge are compliant, smaller ones nearest).
    scheme
        ``"rotated"`` (finite-difference wave vectors of Willot 2015) or ``"fourier"``.
    workers
        FFT threads (default: up to 2).

    Returns
    -------
    StressField

    Raises
    ------
    ParameterError
        Bad arguments, a map with no indexed point, non-positive-definite constants.
    NumericalError
        Not converged within ``max_iter`` or non-finite values.
    """
    axis, sig, tol, max_iter, ratio, scheme, unindexed = _check_common(
        load_axis, stress, tol, max_iter, compliant_ratio, scheme, unindexed)
    ny, nx = omap.shape
    nthreads = _workers(workers, ny * nx)
    with _numba_threads(nthreads):
        c, _q, _ph, soft, _consts = _prepare(omap, constants, ratio, unindexed)
        op = _Spectral(c, (ny, nx), (omap.row_spacing, omap.step), scheme, nthreads)
        sig_macro = to_mandel(sig * np.outer(axis, axis))
        b = np.repeat(sig_macro[:, None], op.n, axis=1)
        # start from the uniform strain of the Voigt-average medium: compatible, and close
        x = np.repeat(np.linalg.solve(c.mean(axis=0), sig_macro)[:, None], op.n, axis=1)
        its, res = op.solve(b, x, abs(sig), tol, max_iter)
        s = op.stress(x)
    return StressField(
        stress=from_mandel(s.T.reshape(ny, nx, 6)),
        strain=from_mandel(x.T.reshape(ny, nx, 6)),
        iterations=its,
        residual=res,
        applied_stress=sig,
        load_axis=axis,
        macro_strain=from_mandel(x.mean(axis=1)),
        assumptions=assumptions_text(scheme, ratio, omap.grid, unindexed=unindexed),
        omap=omap,
        compliant=soft,
        tol=tol,
        scheme=scheme,
    )
