"""Cubic elastic constants per phase and the Mandel (6-vector) notation of symmetric tensors.

Constants in GPa; stresses in MPa elsewhere. The iron and austenite values and their sources are
in the docstrings of :data:`IRON_CONSTANTS` and :data:`AUSTENITE_CONSTANTS`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from slipnet._checks import check_vector
from slipnet.errors import ParameterError
from slipnet.stress import _kernels as _k
from slipnet.stress._threads import _numba_threads, _workers

__all__ = ["AUSTENITE_CONSTANTS", "DEFAULT_CONSTANTS", "IRON_CONSTANTS", "CubicConstants", "directional_modulus",
           "from_mandel", "rotate_stiffness", "to_mandel", "voigt_reuss_hill"]

_SQ2 = math.sqrt(2.0)

# ---------------------------------------------------------------------------- elastic constants
@dataclass(frozen=True)
class CubicConstants:
    """Cubic single-crystal elastic constants in GPa (crystal frame, Voigt indices).

    Parameters
    ----------
    c11, c12, c44
        Elastic constants in GPa. Positive definiteness (``C11 > |C12|``, ``C11 + 2 C12 > 0``,
        ``C44 > 0``) is checked.
    name
        Label for reports.
    source
        Where the values come from.
    """

    c11: float
    c12: float
    c44: float
    name: str = ""
    source: str = ""

    def __post_init__(self) -> None:
        for nm in ("c11", "c12", "c44"):
            v = getattr(self, nm)
            try:
                fv = float(v)
            except (TypeError, ValueError) as err:
                raise ParameterError(f"{nm} should be a number in GPa; got {v!r}") from err
            if not math.isfinite(fv):
                raise ParameterError(f"{nm} should be a finite number in GPa; got {v!r}")
            object.__setattr__(self, nm, fv)
        if not (self.c11 - self.c12 > 0 and self.c11 + 2 * self.c12 > 0 and self.c44 > 0):
            raise ParameterError(
                "cubic elastic constants should be positive definite (C11 > C12, C11 + 2·C12 > 0, C44 > 0); "
                f"got C11={self.c11}, C12={self.c12}, C44={self.c44} GPa (zero or negative stiffness is singular)"
            )

    @property
    def anisotropy(self) -> float:
        """Zener ratio ``2 C44 / (C11 − C12)`` (1 for an isotropic crystal)."""
        return 2.0 * self.c44 / (self.c11 - self.c12)

    def mandel(self) -> np.ndarray:
        """The ``(6, 6)`` stiffness in Mandel notation, GPa (shear block is ``2·C44``)."""
        c = np.zeros((6, 6))
        c[:3, :3] = self.c12
        c[np.arange(3), np.arange(3)] = self.c11
        c[3, 3] = c[4, 4] = c[5, 5] = 2.0 * self.c44
        return c

    def tensor(self) -> np.ndarray:
        """The ``(3, 3, 3, 3)`` stiffness tensor C_ijkl in GPa (crystal frame)."""
        d = np.eye(3)
        c = (self.c12 * np.einsum("ij,kl->ijkl", d, d)
             + self.c44 * (np.einsum("ik,jl->ijkl", d, d) + np.einsum("il,jk->ijkl", d, d)))
        for i in range(3):
            c[i, i, i, i] = self.c11
        return c


#: α-iron (ferrite) at room temperature. The values as quoted from Simmons & Wang (1971), *Single
#: Crystal Elastic Constants and Calculated Aggregate Properties: A Handbook*, MIT Press (after
#: Rayne & Chandrasekhar 1961) — from memory, not re-checked against the book here.
IRON_CONSTANTS = CubicConstants(
    231.4, 134.7, 116.4, "alpha-iron",
    "Simmons & Wang (1971) handbook, after Rayne & Chandrasekhar (1961); from memory",
)


#: Austenite (AISI 304-type stainless steel monocrystal), Ledbetter (1984), Phys. Status Solidi A
#: 85:89 — from memory, not re-checked against the paper here.
AUSTENITE_CONSTANTS = CubicConstants(
    209.0, 133.0, 121.0, "austenite",
    "Ledbetter (1984) Phys. Status Solidi A 85:89, AISI 304 monocrystal; from memory",
)


DEFAULT_CONSTANTS = {"bcc": IRON_CONSTANTS, "fcc": AUSTENITE_CONSTANTS}


def to_mandel(t) -> np.ndarray:
    """Symmetric tensors ``(..., 3, 3)`` → Mandel 6-vectors ``(..., 6)`` (√2 on shears)."""
    t = np.asarray(t, dtype=np.float64)
    if t.shape[-2:] != (3, 3):
        raise ParameterError(f"tensors should have shape (..., 3, 3); got {t.shape}")
    return np.stack([t[..., 0, 0], t[..., 1, 1], t[..., 2, 2],
                     _SQ2 * t[..., 1, 2], _SQ2 * t[..., 0, 2], _SQ2 * t[..., 0, 1]], axis=-1)


def from_mandel(m) -> np.ndarray:
    """Mandel 6-vectors ``(..., 6)`` → symmetric tensors ``(..., 3, 3)``."""
    m = np.asarray(m, dtype=np.float64)
    if m.shape[-1] != 6:
        raise ParameterError(f"Mandel vectors should have 6 components on the last axis; got {m.shape}")
    out = np.empty((*m.shape[:-1], 3, 3))
    for a, (i, j) in enumerate(_k.MANDEL_PAIRS):
        v = m[..., a] if i == j else m[..., a] / _SQ2
        out[..., i, j] = v
        out[..., j, i] = v
    return out


def rotate_stiffness(constants: CubicConstants, quats) -> np.ndarray:
    """Sample-frame stiffness of crystals with orientations ``quats``, Mandel ``(..., 6, 6)`` GPa.

    With ``v_crystal = g · v_sample``: ``C^s_ijkl = g_pi g_qj g_rk g_sl C^c_pqrs``.

    Parameters
    ----------
    constants
        Crystal-frame cubic constants.
    quats : (..., 4) array_like
        Unit quaternions sample → crystal.
    """
    q = np.asarray(quats, dtype=np.float64)
    if q.shape[-1:] != (4,):
        raise ParameterError(f"quats should have shape (..., 4); got {q.shape}")
    lead = q.shape[:-1]
    rows = np.ascontiguousarray(q.reshape(-1, 4))
    if not np.all(np.isfinite(rows)):
        raise ParameterError("quats should be finite (unindexed points carry no stiffness)")
    out = np.empty((rows.shape[0], 6, 6))
    with _numba_threads(_workers(None, rows.shape[0])):
            _k.stiffness_field(rows, np.zeros(rows.shape[0], np.int64), constants.mandel()[None], np.zeros((6, 6)),
                           _k.MANDEL_PAIRS, out)
    return out.reshape(*lead, 6, 6)


def directional_modulus(constants: CubicConstants, direction) -> float:
    """Young's modulus (GPa) of a cubic crystal along a crystal direction.

    ``1/E = S11 − 2 (S11 − S12 − S44/2)(l1² l2² + l2² l3² + l3² l1²)`` (Nye 1957, *Physical
    Properties of Crystals*, Clarendon Press), with the compliances from the stiffnesses.
    """
    u = check_vector(direction, "direction")
    s = np.linalg.inv(np.array([[constants.c11, constants.c12, constants.c12],
                                [constants.c12, constants.c11, constants.c12],
                                [constants.c12, constants.c12, constants.c11]]))
    s11, s12, s44 = s[0, 0], s[0, 1], 1.0 / constants.c44
    j = u[0] ** 2 * u[1] ** 2 + u[1] ** 2 * u[2] ** 2 + u[2] ** 2 * u[0] ** 2
    return float(1.0 / (s11 - 2.0 * (s11 - s12 - 0.5 * s44) * j))


def voigt_reuss_hill(constants: CubicConstants) -> dict[str, float]:
    """Voigt, Reuss and Hill bulk, shear and Young's moduli (GPa) of an untextured aggregate.

    Cubic formulas (Hill 1952, Proc. Phys. Soc. A 65:349): ``K = (C11 + 2C12)/3``,
    ``G_V = (C11 − C12 + 3C44)/5``, ``G_R = 5(C11 − C12)C44 / (4C44 + 3(C11 − C12))``,
    ``E = 9KG/(3K + G)``; Hill is the mean of Voigt and Reuss shear moduli.
    """
    c11, c12, c44 = constants.c11, constants.c12, constants.c44
    k = (c11 + 2 * c12) / 3.0
    gv = (c11 - c12 + 3 * c44) / 5.0
    gr = 5 * (c11 - c12) * c44 / (4 * c44 + 3 * (c11 - c12))
    gh = 0.5 * (gv + gr)

    def young(g: float) -> float:
        return 9 * k * g / (3 * k + g)

    return {"bulk_gpa": k, "shear_voigt_gpa": gv, "shear_reuss_gpa": gr, "shear_hill_gpa": gh,
            "young_voigt_gpa": young(gv), "young_reuss_gpa": young(gr), "young_hill_gpa": young(gh)}


def _isotropic_mandel(bulk: float, shear: float) -> np.ndarray:
    lam = bulk - 2.0 * shear / 3.0
    c = np.zeros((6, 6))
    c[:3, :3] = lam
    c[np.arange(6), np.arange(6)] += 2.0 * shear
    return c
