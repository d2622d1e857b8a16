"""Short-crack growth along a forecast path: where the rate should dip, stall or arrest.

The model is the strip-yield crack with a plastic zone of Bilby, Cottrell & Swinden (1963), blocked
at grain boundaries as in Navarro & de los Rios (1988): the zone ahead of the tip stops at the next
barrier until the stress it concentrates on a source beyond that barrier reaches a critical value,
then jumps on. The growth rate is a power law of the crack tip sliding displacement (CTSD). Every
equation, its source and each added assumption is written out in ``docs/growth-model.md``.

Lengths are µm measured along the path from its start (the notch root or crack origin), stresses
are MPa, rates are µm per cycle.

Public entries
--------------
plastic_zone_ratio, sliding_displacement, GrowthPath, GrowthParameters, path_from_forecast,
path_from_tables, barrier_strengths, crossing_lengths, threshold_amplitudes, zone_state,
simulate_growth, growth_profile, predicted_dips, life_amplitude, calibrate, write_growth.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy import integrate, optimize
from scipy import stats as sps

from ._checks import check_positive, check_range
from .errors import NumericalError, ParameterError

__all__ = [
    "CalibrationResult",
    "GrowthParameters",
    "GrowthPath",
    "GrowthResult",
    "barrier_strengths",
    "calibrate",
    "crossing_lengths",
    "growth_profile",
    "life_amplitude",
    "path_from_forecast",
    "path_from_tables",
    "plastic_zone_ratio",
    "predicted_dips",
    "simulate_growth",
    "sliding_displacement",
    "threshold_amplitudes",
    "write_growth",
    "zone_state",
]

#: Zone states written in the ``zone_state`` column.
BLOCKED = "blocked"
SPREADING = "spreading"
ARRESTED = "arrested"


# --------------------------------------------------------------------------------------------
# Strip-yield pieces
# --------------------------------------------------------------------------------------------


def _as_stress(stress, name: str = "stress") -> np.ndarray:
    try:
        s = np.asarray(stress, dtype=float)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be a number or array of numbers (MPa); got {stress!r}") from err
    if not np.all(np.isfinite(s)):
        raise ParameterError(f"{name} should be finite (MPa); got {stress!r}")
    if np.any(s < 0):
        raise ParameterError(f"{name} should be >= 0 MPa (an amplitude); got a negative value {s.min():g}")
    return s


def plastic_zone_ratio(stress, friction_stress: float) -> np.ndarray | float:
    """Unblocked strip-yield ratio n = a/c = cos(πσ / (2σ_f)).

    Bilby, Cottrell & Swinden (1963), Proc. R. Soc. A 272:304: a crack of half-length ``a`` with a
    slip band (plastic zone) to ``c`` resisting slip with friction stress σ_f is in equilibrium
    under the applied stress σ when the stress singularity at ``c`` vanishes.

    Parameters
    ----------
    stress
        Applied stress σ (MPa), scalar or array of any shape, 0 ≤ σ < σ_f.
    friction_stress
        Friction stress σ_f (MPa), > 0.

    Returns
    -------
    float or ndarray
        n in (0, 1], same shape as ``stress``.

    Raises
    ------
    ParameterError
        Negative stress, or σ ≥ σ_f (the zone would grow without bound: general yield).
    """
    sf = check_positive(friction_stress, "friction_stress")
    s = _as_stress(stress)
    if np.any(s >= sf):
        raise ParameterError(
            f"stress should be below friction_stress={sf:g} MPa (n = cos(πσ/2σ_f) is undefined at general "
            f"yield); got {s.max():g} MPa"
        )
    n = np.cos(0.5 * np.pi * s / sf)
    return float(n) if n.ndim == 0 else n


def sliding_displacement(
    crack_length,
    zone_end,
    stress,
    friction_stress: float,
    *,
    shear_modulus: float = 82.0,
    poisson_ratio: float = 0.29,
) -> np.ndarray:
    """Crack tip sliding displacement φ (µm) of a strip-yield crack whose zone ends at ``zone_end``.

    φ = (2(1−ν)/G) · c · [ (2σ_f/π) n ln(1/n) + (σ − (2σ_f/π) arccos n) √(1 − n²) ],  n = a/c.

    The first term is the Bilby–Cottrell–Swinden (1963) / Dugdale tip displacement of a zone in
    equilibrium; the second adds the slip of the unbalanced stress σ − (2σ_f/π) arccos n carried by
    a zone blocked at a barrier (Navarro & de los Rios 1988 structure). The constant was derived
    here by superposing the two solutions (see ``docs/growth-model.md``), edge dislocations assumed.

    Parameters
    ----------
    crack_length, zone_end
        a and c (µm), broadcastable arrays, 0 < a ≤ c.
    stress
        Applied stress amplitude σ (MPa).
    friction_stress
        σ_f (MPa).
    shear_modulus
        G (GPa).
    poisson_ratio
        ν.

    Returns
    -------
    ndarray
        φ (µm), broadcast shape of the inputs; 0 where a = c.
    """
    a = np.asarray(crack_length, dtype=float)
    c = np.asarray(zone_end, dtype=float)
    s = _as_stress(stress)
    sf = check_positive(friction_stress, "friction_stress")
    g = check_positive(shear_modulus, "shear_modulus") * 1e3  # GPa → MPa
    nu = check_range(poisson_ratio, "poisson_ratio", -1.0, 0.5, inclusive=False)
    if np.any(a <= 0) or np.any(c < a):
        raise ParameterError("crack_length should be > 0 µm and zone_end >= crack_length")
    n = np.clip(a / c, 1e-300, 1.0)
    unbalanced = s - (2.0 * sf / np.pi) * np.arccos(n)
    with np.errstate(divide="ignore", invalid="ignore"):
        nlog = np.where(n < 1.0, -n * np.log(n), 0.0)
    phi = (2.0 * (1.0 - nu) / g) * c * ((2.0 * sf / np.pi) * nlog + unbalanced * np.sqrt(np.clip(1.0 - n * n, 0, None)))
    return np.clip(phi, 0.0, None)


# --------------------------------------------------------------------------------------------
# The path and the parameters
# --------------------------------------------------------------------------------------------


def _float_array(value, name: str, size: int | None, default: float | None = None) -> np.ndarray:
    if value is None:
        if default is None or size is None:
            raise ParameterError(f"{name} is required")
        return np.full(size, float(default))
    try:
        arr = np.asarray(value, dtype=float).reshape(-1)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be numbers; got {value!r}") from err
    if size is not None and arr.size != size:
        raise ParameterError(f"{name} should have {size} values; got {arr.size}")
    return arr


@dataclass(frozen=True, eq=False)
class GrowthPath:
    """A crack path reduced to what the growth model needs.

    Grain ``k`` spans ``[barrier_positions_um[k-1], barrier_positions_um[k])`` along the path (grain 0
    starts at the path start, the last grain runs to ``length_um``).

    Attributes
    ----------
    barrier_positions_um
        (k,) distances of the barriers (grain boundaries) from the path start, µm, increasing, > 0.
    grain_factors
        (k+1,) orientation factor of each grain along the path (Schmid-type: larger = easier slip).
        Only ratios matter; all ones means no orientation effect.
    m_prime
        (k,) |m′| slip transmission factor of each barrier in [0, 1] (1 = perfect transmission).
    twist_deg
        (k,) twist angle of the crack plane across each barrier (degrees, Zhai, Wilkinson & Martin 2000).
    length_um
        Total path length, µm (≥ last barrier).
    grains
        (k+1,) grain ids along the path (−1 unknown).
    boundary_ids
        (k,) boundary ids (−1 unknown).
    polyline
        Optional (p, 3) array of (s_um, x_um, y_um) points along the path on the map, s increasing.
    strength_scale
        (k,) extra multiplier of each barrier's critical stress (1 by default; Monte Carlo draws use it).
    """

    barrier_positions_um: np.ndarray
    grain_factors: np.ndarray
    m_prime: np.ndarray
    twist_deg: np.ndarray
    length_um: float
    grains: np.ndarray = field(default=None)  # type: ignore[assignment]
    boundary_ids: np.ndarray = field(default=None)  # type: ignore[assignment]
    polyline: np.ndarray | None = None
    strength_scale: np.ndarray = field(default=None)  # type: ignore[assignment]

    def __post_init__(self) -> None:
        d = _float_array(self.barrier_positions_um, "barrier_positions_um", None)
        k = d.size
        if k and (not np.all(np.isfinite(d)) or d[0] <= 0 or np.any(np.diff(d) <= 0)):
            raise ParameterError("barrier_positions_um should be finite, > 0 µm and strictly increasing")
        gf = _float_array(self.grain_factors, "grain_factors", k + 1)
        if not np.all(np.isfinite(gf)) or np.any(gf <= 0):
            raise ParameterError("grain_factors should be finite and > 0 (Schmid-type orientation factors)")
        mp = _float_array(self.m_prime, "m_prime", k)
        mp = np.where(np.isfinite(mp), mp, 1.0)
        if np.any(mp < -1e-9) or np.any(mp > 1 + 1e-9):
            raise ParameterError("m_prime should lie in [0, 1] (|m′|)")
        tw = _float_array(self.twist_deg, "twist_deg", k)
        tw = np.where(np.isfinite(tw), tw, 0.0)
        length = float(self.length_um)
        if not math.isfinite(length) or length <= 0 or (k and length < d[-1]):
            raise ParameterError(f"length_um should be > 0 and >= the last barrier position; got {self.length_um!r}")
        grains = np.full(k + 1, -1, dtype=np.int64) if self.grains is None else np.asarray(self.grains, np.int64)
        bids = np.full(k, -1, dtype=np.int64) if self.boundary_ids is None else np.asarray(self.boundary_ids, np.int64)
        if grains.shape != (k + 1,) or bids.shape != (k,):
            raise ParameterError(f"grains should have {k + 1} ids and boundary_ids {k}")
        scale = np.ones(k) if self.strength_scale is None else _float_array(self.strength_scale, "strength_scale", k)
        if np.any(~np.isfinite(scale)) or np.any(scale <= 0):
            raise ParameterError("strength_scale should be finite and > 0")
        poly = None
        if self.polyline is not None:
            poly = np.asarray(self.polyline, dtype=float)
            if poly.ndim != 2 or poly.shape[1] != 3 or poly.shape[0] < 2:
                raise ParameterError("polyline should be a (p, 3) array of (s_um, x_um, y_um) with p >= 2")
        for name, val in (("barrier_positions_um", d), ("grain_factors", gf), ("m_prime", np.clip(mp, 0, 1)),
                          ("twist_deg", tw), ("length_um", length), ("grains", grains), ("boundary_ids", bids),
                          ("polyline", poly), ("strength_scale", scale)):
            object.__setattr__(self, name, val)

    @classmethod
    def from_barriers(
        cls,
        positions_um,
        *,
        grain_factors=None,
        m_prime=None,
        twist_deg=None,
        length_um: float | None = None,
    ) -> GrowthPath:
        """A hand-built path: barrier positions (µm) and optional per-grain / per-barrier factors.

        Missing factors default to neutral values (grain factors 1, |m′| = 1, twist 0°); the length
        defaults to 1.5 × the last barrier position (or 100 µm without barriers).
        """
        d = _float_array(positions_um, "positions_um", None)
        k = d.size
        if length_um is None:
            length_um = 1.5 * float(d[-1]) if k else 100.0
        return cls(
            barrier_positions_um=d,
            grain_factors=_float_array(grain_factors, "grain_factors", k + 1, 1.0),
            m_prime=_float_array(m_prime, "m_prime", k, 1.0),
            twist_deg=_float_array(twist_deg, "twist_deg", k, 0.0),
            length_um=float(length_um),
        )

    @classmethod
    def from_table(cls, table: pd.DataFrame, *, first_grain_factor: float = 1.0,
                   length_um: float | None = None, source: str = "barrier table") -> GrowthPath:
        """A path from a barrier table: one row per barrier.

        Columns: ``position_um`` (required), optional ``grain_factor`` (orientation factor of the grain
        entered past the barrier), ``m_prime``, ``twist_deg``. Rows are sorted by position.
        """
        if "position_um" not in table.columns:
            raise ParameterError(f"{source} should have a 'position_um' column; got columns {list(table.columns)}")
        t = table.sort_values("position_um").reset_index(drop=True)

        def col(name, default):
            return t[name].to_numpy(float) if name in t.columns else np.full(len(t), default)

        gf = np.concatenate([[check_positive(first_grain_factor, "first_grain_factor")], col("grain_factor", 1.0)])
        return cls.from_barriers(t["position_um"].to_numpy(float), grain_factors=gf, m_prime=col("m_prime", 1.0),
                                 twist_deg=col("twist_deg", 0.0), length_um=length_um)

    @property
    def n_barriers(self) -> int:
        """Number of barriers along the path."""
        return int(self.barrier_positions_um.size)

    def table(self) -> pd.DataFrame:
        """The barriers as a DataFrame (one row per barrier)."""
        return pd.DataFrame({
            "barrier": np.arange(self.n_barriers),
            "position_um": self.barrier_positions_um,
            "boundary_id": self.boundary_ids,
            "grain_before": self.grains[:-1],
            "grain_after": self.grains[1:],
            "grain_factor_before": self.grain_factors[:-1],
            "grain_factor_after": self.grain_factors[1:],
            "m_prime": self.m_prime,
            "twist_deg": self.twist_deg,
        })

    def locate(self, s_um) -> tuple[np.ndarray, np.ndarray]:
        """Map positions (x, y) in µm of distances ``s_um`` along the path (needs ``polyline``)."""
        if self.polyline is None:
            raise ParameterError("this path has no map coordinates (polyline is None)")
        s = np.asarray(s_um, dtype=float)
        p = self.polyline
        return np.interp(s, p[:, 0], p[:, 1]), np.interp(s, p[:, 0], p[:, 2])


@dataclass(frozen=True)
class GrowthParameters:
    """Constants of the growth model (defaults are illustrative, for a ferritic steel; calibrate them).

    Attributes
    ----------
    friction_stress
        σ_f, friction stress of the strip-yield zone (MPa, in applied-stress-amplitude units).
    coefficient
        C in da/dN = C φ^m (µm/cycle per µm^m).
    exponent
        m in da/dN = C φ^m.
    barrier_stress
        S_c, stress on a source beyond a neutral barrier (|m′| = 1, no twist, equal orientation factors)
        needed to start slip there (MPa).
    source_distance
        r₀, distance of that source beyond the barrier (µm).
    shear_modulus
        G (GPa); α-iron about 82 GPa (from memory).
    poisson_ratio
        ν; iron about 0.29 (from memory).
    transmission_weight
        k_m: critical stress multiplied by 1 + k_m(1 − |m′|) + k_α sin(twist) (our coupling).
    twist_weight
        k_α of the same coupling.
    """

    friction_stress: float = 400.0
    coefficient: float = 0.05
    exponent: float = 1.5
    barrier_stress: float = 500.0
    source_distance: float = 1.0
    shear_modulus: float = 82.0
    poisson_ratio: float = 0.29
    transmission_weight: float = 0.5
    twist_weight: float = 0.5

    def __post_init__(self) -> None:
        for name in ("friction_stress", "coefficient", "exponent", "barrier_stress", "source_distance",
                     "shear_modulus"):
            object.__setattr__(self, name, check_positive(getattr(self, name), name))
        for name in ("transmission_weight", "twist_weight"):
            object.__setattr__(self, name, check_positive(getattr(self, name), name, allow_zero=True))
        object.__setattr__(self, "poisson_ratio",
                           check_range(self.poisson_ratio, "poisson_ratio", -1.0, 0.5, inclusive=False))


def _params(params: GrowthParameters | None, **overrides) -> GrowthParameters:
    base = params if params is not None else GrowthParameters()
    given = {k: v for k, v in overrides.items() if v is not None}
    return replace(base, **given) if given else base


def _check_amplitude(stress_amplitude: float, p: GrowthParameters) -> float:
    s = _as_stress(stress_amplitude, "stress_amplitude")
    if s.ndim != 0:
        raise ParameterError("stress_amplitude should be a single number (MPa)")
    s = float(s)
    if s <= 0:
        raise ParameterError(f"stress_amplitude should be > 0 MPa; got {s:g}")
    if s >= p.friction_stress:
        raise ParameterError(
            f"stress_amplitude should be below friction_stress={p.friction_stress:g} MPa (the strip-yield "
            f"zone is unbounded at σ ≥ σ_f); got {s:g} MPa"
        )
    return s


# --------------------------------------------------------------------------------------------
# Barriers
# --------------------------------------------------------------------------------------------


def barrier_strengths(path: GrowthPath, params: GrowthParameters | None = None) -> np.ndarray:
    """Critical stress S_c,k (MPa) on the source beyond each barrier.

    S_c,k = S_c · (f₀ / f_{k+1}) · (1 + k_m (1 − |m′_k|) + k_α sin α_k) · scale_k

    with f the grain orientation factors (Schmid-type; the ratio follows the m_i/m_1 weighting of
    Navarro & de los Rios 1988, written for Schmid rather than Taylor-type factors), |m′| of
    Luster & Morris (1995) and the twist α of Zhai, Wilkinson & Martin (2000). The linear coupling to
    |m′| and sin α is our own assumption.

    Returns
    -------
    ndarray
        (k,) MPa.
    """
    p = _params(params)
    f = path.grain_factors
    weight = 1.0 + p.transmission_weight * (1.0 - path.m_prime) + p.twist_weight * np.abs(
        np.sin(np.radians(path.twist_deg)))
    return p.barrier_stress * (f[0] / f[1:]) * weight * path.strength_scale


def threshold_amplitudes(path: GrowthPath, params: GrowthParameters | None = None) -> np.ndarray:
    """Stress amplitude (MPa) below which a crack that reaches barrier k arrests there.

    With the zone blocked at c = d_k, the stress on the source at r₀ beyond it is, to leading order,
    S = (σ − (2σ_f/π) arccos n) √(c / 2r₀) (Navarro & de los Rios 1988). It is largest as the tip
    reaches the barrier (n → 1, arccos n → 0), so slip can cross only if σ √(d_k/2r₀) ≥ S_c,k:

        σ_th,k = S_c,k √(2 r₀ / d_k)

    (for equal barriers, the 1/√i fall with grain number i of Navarro & de los Rios 1988). The
    condition is linear in σ, so no numerical root-finding is needed. The amplitude that lets a crack
    pass barriers 0..k is ``np.maximum.accumulate`` of this.

    Returns
    -------
    ndarray
        (k,) MPa.
    """
    p = _params(params)
    return barrier_strengths(path, p) * np.sqrt(2.0 * p.source_distance / path.barrier_positions_um)


def crossing_lengths(path: GrowthPath, stress_amplitude: float, params: GrowthParameters | None = None) -> np.ndarray:
    """Crack length (µm) at which slip crosses each barrier; ``inf`` where the crack arrests first.

    Blocked at d_k, slip crosses when σ − (2σ_f/π) arccos(a/d_k) ≥ σ_th,k, i.e. at
    a_k = d_k cos(π(σ − σ_th,k)/(2σ_f)). A barrier can only be reached once the earlier ones are
    crossed, so the crossing lengths are the running maximum; after the first arrest all are ``inf``.

    Returns
    -------
    ndarray
        (k,) µm, nondecreasing.
    """
    p = _params(params)
    s = _check_amplitude(stress_amplitude, p)
    d = path.barrier_positions_um
    sth = threshold_amplitudes(path, p)
    with np.errstate(invalid="ignore"):
        root = d * np.cos(0.5 * np.pi * (s - sth) / p.friction_stress)
    root = np.where(s >= sth, root, np.inf)
    return np.maximum.accumulate(root) if root.size else root


def zone_state(
    path: GrowthPath,
    crack_length,
    stress_amplitude: float,
    params: GrowthParameters | None = None,
    *,
    crossings: np.ndarray | None = None,
) -> dict[str, np.ndarray]:
    """Where the plastic zone ends for each crack length, and the resulting CTSD and rate.

    Parameters
    ----------
    path
        The path.
    crack_length
        (p,) crack lengths a along the path (µm), > 0.
    stress_amplitude
        σ (MPa).
    params
        Model constants.
    crossings
        Precomputed :func:`crossing_lengths` (optional).

    Returns
    -------
    dict
        ``zone_end`` (p,) µm, ``n_ratio`` (p,), ``blocked`` (p,) bool, ``barrier`` (p,) int index of
        the blocking barrier (−1 when spreading), ``grain_index`` (p,) index of the grain holding the tip,
        ``ctsd`` (p,) µm, ``dadn`` (p,) µm/cycle, ``arrested`` (p,) bool (tip at or past an arrest barrier).
    """
    p = _params(params)
    s = _check_amplitude(stress_amplitude, p)
    a = np.asarray(crack_length, dtype=float).reshape(-1)
    if a.size == 0 or np.any(~np.isfinite(a)) or np.any(a <= 0):
        raise ParameterError("crack_length should be finite and > 0 µm")
    d = path.barrier_positions_um
    x = crossing_lengths(path, s, p) if crossings is None else crossings
    c_eq = a / plastic_zone_ratio(s, p.friction_stress)
    # first barrier the free zone would not reach, and first barrier not yet crossed: both indices are
    # ≥ the grain holding the tip because every barrier behind the tip is at < a < c_eq and crossed.
    k_free = np.searchsorted(d, c_eq, side="left")
    k_block = np.searchsorted(x, a, side="right")
    blocked = k_block < k_free
    kb = np.minimum(k_block, max(d.size - 1, 0))
    zone_end = np.where(blocked, d[kb] if d.size else c_eq, c_eq)
    arrest_at = np.flatnonzero(~np.isfinite(x))
    arrested = a >= d[arrest_at[0]] if arrest_at.size else np.zeros(a.shape, bool)
    zone_end = np.where(arrested, a, np.maximum(zone_end, a))
    ctsd = sliding_displacement(a, zone_end, s, p.friction_stress, shear_modulus=p.shear_modulus,
                                poisson_ratio=p.poisson_ratio)
    ctsd = np.where(arrested, 0.0, ctsd)
    return {
        "zone_end": zone_end,
        "n_ratio": a / zone_end,
        "blocked": blocked | arrested,
        "barrier": np.where(blocked | arrested, np.where(arrested, arrest_at[0] if arrest_at.size else -1, k_block),
                            -1),
        "grain_index": np.searchsorted(d, a, side="right"),
        "ctsd": ctsd,
        "dadn": p.coefficient * ctsd**p.exponent,
        "arrested": arrested,
    }


# --------------------------------------------------------------------------------------------
# Profiles
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class GrowthResult:
    """Everything :func:`simulate_growth` computed.

    Attributes
    ----------
    profile
        DataFrame, one row per crack length: ``crack_length`` (µm along the path), ``cycles`` (inf
        after arrest), ``dadn`` (µm/cycle), ``ctsd_um``, ``zone_end_um``, ``n_ratio``, ``zone_state``
        ("spreading" | "blocked" | "arrested"), ``barrier`` (index of the blocking barrier or −1),
        ``grain`` (grain id, or the grain index along the path when ids are unknown), ``arrested``.
    barriers
        DataFrame per barrier: ``barrier``, ``position_um``, ``critical_stress_mpa``,
        ``threshold_amplitude_mpa``, ``pass_amplitude_mpa`` (needed to pass it and all before),
        ``crossing_length_um`` (inf where arrested), ``dip_length_um``, ``dip_depth``, ``arrest`` and
        the path factors.
    dips
        :func:`predicted_dips` of the profile.
    bands
        DataFrame of Monte Carlo bands on the same crack lengths (``cycles_p05``, ``cycles_p50``,
        ``cycles_p95``, ``dadn_p05``, ``dadn_p50``, ``dadn_p95``) or None.
    path
        The :class:`GrowthPath` used.
    params
        The :class:`GrowthParameters` used.
    stress_amplitude
        σ (MPa).
    arrest_length_um
        Crack length where the crack arrests (inf when it reaches ``final_length``).
    """

    profile: pd.DataFrame
    barriers: pd.DataFrame
    dips: pd.DataFrame
    bands: pd.DataFrame | None
    path: GrowthPath
    params: GrowthParameters
    stress_amplitude: float
    arrest_length_um: float
    notes: tuple[str, ...] = ()


def _grid(path: GrowthPath, a0: float, a1: float, n_points: int, x: np.ndarray) -> np.ndarray:
    # even spacing, plus geometric spacing for short cracks, where 1/(da/dN) ∝ a^(-m) is steep
    base = np.concatenate([np.linspace(a0, a1, n_points), np.geomspace(a0, a1, max(n_points // 4, 10))])
    d = path.barrier_positions_um
    xf = x[np.isfinite(x)]
    # the crossing is a jump in zone size: put a point on each side so the jump is sharp
    extra = [xf, xf * (1 - 1e-9), d * (1 - 1e-6), d * (1 + 1e-6)]
    # a blocked tip close to its barrier slows as √(1 − a/c): 1/(da/dN) peaks sharply just before the
    # crossing (or the arrest barrier), so cluster points geometrically towards those ends
    ends = np.concatenate([xf, d[~np.isfinite(x)][:1]])
    if ends.size:
        prev = np.concatenate([[a0], d])[np.searchsorted(d, ends, side="left")]
        span = np.maximum(ends - prev, 0.0)
        frac = np.geomspace(1e-7, 1.0, 48)
        extra.append((ends[:, None] - span[:, None] * frac[None, :]).ravel())
    extra = np.concatenate(extra)
    extra = extra[(extra > a0) & (extra < a1)]
    return np.unique(np.concatenate([base, extra]))


def _integrate_cycles(a: np.ndarray, dadn: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore"):
        inv = np.where(dadn > 0, 1.0 / dadn, np.inf)
    finite = np.isfinite(inv)
    n = np.full(a.shape, np.inf)
    # integrate only up to the first point where the rate vanishes: beyond it the crack never goes
    stop = int(np.argmin(finite)) if not finite.all() else a.size
    if stop > 0:
        n[:stop] = integrate.cumulative_trapezoid(inv[:stop], a[:stop], initial=0.0)
    return n


def _profile_frame(path: GrowthPath, a: np.ndarray, st: dict, cycles: np.ndarray) -> pd.DataFrame:
    gidx = np.where(st["arrested"], np.maximum(st["barrier"], 0), st["grain_index"])
    grain = np.where(path.grains[gidx] >= 0, path.grains[gidx], gidx)
    state = np.where(st["arrested"], ARRESTED, np.where(st["blocked"], BLOCKED, SPREADING))
    return pd.DataFrame({
        "crack_length": a,
        "cycles": cycles,
        "dadn": st["dadn"],
        "ctsd_um": st["ctsd"],
        "zone_end_um": st["zone_end"],
        "n_ratio": st["n_ratio"],
        "zone_state": state,
        "barrier": st["barrier"].astype(np.int64),
        "grain": grain.astype(np.int64),
        "arrested": st["arrested"],
    })


def _run(path: GrowthPath, s: float, p: GrowthParameters, a0: float, a1: float, n_points: int):
    x = crossing_lengths(path, s, p)
    a = _grid(path, a0, a1, n_points, x)
    st = zone_state(path, a, s, p, crossings=x)
    cycles = _integrate_cycles(a, st["dadn"])
    return a, st, cycles, x


def _resolve_path(forecast_or_path, **kw) -> GrowthPath:
    kw = {k: v for k, v in kw.items() if v is not None}
    if isinstance(forecast_or_path, GrowthPath):
        return forecast_or_path
    if hasattr(forecast_or_path, "path"):
        return path_from_forecast(forecast_or_path, **kw)
    raise ParameterError(
        f"forecast_or_path should be a GrowthPath or a CrackForecast; got {type(forecast_or_path).__name__}"
    )


def simulate_growth(
    forecast_or_path,
    stress_amplitude: float,
    *,
    params: GrowthParameters | None = None,
    friction_stress: float | None = None,
    coefficient: float | None = None,
    exponent: float | None = None,
    barrier_stress: float | None = None,
    initial_length: float | None = None,
    final_length: float | None = None,
    n_points: int = 2000,
    samples: int | None = None,
    strength_scatter: float = 0.2,
    seed: int = 0,
    stress_field=None,
    grain_graph=None,
    systems=None,
) -> GrowthResult:
    """Grow a crack along a path: rate and cycles versus crack length, crossings, dips and arrest.

    Parameters
    ----------
    forecast_or_path
        A :class:`GrowthPath` or a ``CrackForecast`` (converted with :func:`path_from_forecast`).
    stress_amplitude
        σ_a = Δσ/2 (MPa), 0 < σ_a < σ_f. The model uses the amplitude throughout; the mean stress
        (stress ratio) is not modelled.
    params
        Model constants; the keyword constants below override single fields.
    friction_stress, coefficient, exponent, barrier_stress
        See :class:`GrowthParameters`.
    initial_length
        First crack length a₀ (µm), default 10 % of the first barrier position (or of the path length).
    final_length
        Last crack length (µm), default the path length.
    n_points
        Crack lengths on the evenly spaced grid (crossing points are added).
    samples
        Monte Carlo draws for the bands. ``None``: follow the forecast's Monte Carlo: its per-sample
        paths when it carries them, else as many barrier-strength draws as it has samples (its seed),
        else none. An integer > 0: that many log-normal barrier-strength draws.
    strength_scatter
        Log-normal σ of the barrier strength draws.
    seed
        Seed of those draws.
    stress_field, grain_graph, systems
        With a forecast: take the grain orientation factors from the local stress field instead of the
        forecast's uniform-stress Schmid factors (see :func:`path_from_forecast`).

    Returns
    -------
    GrowthResult
    """
    path = _resolve_path(forecast_or_path, stress_field=stress_field, grain_graph=grain_graph, systems=systems)
    p = _params(params, friction_stress=friction_stress, coefficient=coefficient, exponent=exponent,
                barrier_stress=barrier_stress)
    s = _check_amplitude(stress_amplitude, p)
    d = path.barrier_positions_um
    a1 = path.length_um if final_length is None else check_positive(final_length, "final_length")
    a0 = (0.1 * (d[0] if d.size else a1)) if initial_length is None else check_positive(initial_length,
                                                                                         "initial_length")
    if a0 >= a1:
        raise ParameterError(f"initial_length should be below final_length={a1:g} µm; got {a0:g} µm")
    if int(n_points) < 10:
        raise ParameterError(f"n_points should be >= 10; got {n_points!r}")
    a, st, cycles, x = _run(path, s, p, a0, a1, int(n_points))
    profile = _profile_frame(path, a, st, cycles)
    if not np.all(np.diff(cycles[np.isfinite(cycles)]) >= 0):
        raise NumericalError("integrated cycles are not monotone; check the growth constants")

    dips = predicted_dips(profile)
    sth = threshold_amplitudes(path, p)
    table = path.table()
    table["critical_stress_mpa"] = barrier_strengths(path, p)
    table["threshold_amplitude_mpa"] = sth
    table["pass_amplitude_mpa"] = np.maximum.accumulate(sth) if sth.size else sth
    table["crossing_length_um"] = x
    table["arrest"] = ~np.isfinite(x) & (np.arange(x.size) == (np.argmax(~np.isfinite(x)) if x.size else 0))
    table["dip_length_um"] = np.nan
    table["dip_depth"] = np.nan
    if len(dips):
        idx = dips["barrier"].to_numpy()
        table.loc[idx, "dip_length_um"] = dips["crack_length"].to_numpy()
        table.loc[idx, "dip_depth"] = dips["depth"].to_numpy()
    arrest = np.flatnonzero(~np.isfinite(x))
    arrest_len = float(d[arrest[0]]) if arrest.size and d[arrest[0]] <= a1 else math.inf

    notes: list[str] = []
    bands = None
    sample_paths = _sample_paths(forecast_or_path, path, samples, strength_scatter, seed, notes)
    if sample_paths:
        bands = _bands(sample_paths, s, p, a)
    return GrowthResult(profile=profile, barriers=table, dips=dips, bands=bands, path=path, params=p,
                        stress_amplitude=s, arrest_length_um=arrest_len, notes=tuple(notes))


def growth_profile(
    forecast_or_path,
    stress_amplitude: float,
    *,
    friction_stress: float | None = None,
    coefficient: float | None = None,
    exponent: float | None = None,
    initial_length: float | None = None,
    final_length: float | None = None,
    n_points: int = 2000,
    **kwargs: Any,
) -> pd.DataFrame:
    """Growth-rate profile along a forecast path (the ``profile`` of :func:`simulate_growth`).

    Returns
    -------
    DataFrame
        ``crack_length`` (µm along the path from its start, the strip-yield half-length a),
        ``cycles`` (counts from ``initial_length``; ``inf`` once arrested), ``dadn`` (µm/cycle),
        ``grain``, ``zone_state``, ``n_ratio``, ``barrier``, ``ctsd_um``, ``zone_end_um``, ``arrested``.
    """
    return simulate_growth(forecast_or_path, stress_amplitude, friction_stress=friction_stress,
                           coefficient=coefficient, exponent=exponent, initial_length=initial_length,
                           final_length=final_length, n_points=n_points, samples=0, **kwargs).profile


def predicted_dips(profile_or_result) -> pd.DataFrame:
    """Rate dips before each barrier the zone was blocked at.

    For each barrier k the zone was blocked at, the dip is the lowest rate after the rate's peak while
    blocked there (the rate falls as the tip nears the barrier, Navarro & de los Rios 1988); its
    ``depth`` is that rate divided by the rate just after slip crosses k (a ratio < 1; 0 where the
    crack arrests at k). Barriers still blocking at the end of the profile are left out.

    Parameters
    ----------
    profile_or_result
        A profile DataFrame (from :func:`growth_profile`) or a :class:`GrowthResult`.

    Returns
    -------
    DataFrame
        ``barrier`` (index), ``crack_length`` (µm at the dip minimum), ``dadn_min``, ``dadn_peak``
        (highest rate while blocked), ``dadn_after`` (µm/cycle), ``depth``, ``crossing_length_um``
        (inf when arrested), ``arrest`` (bool).
    """
    prof = profile_or_result.profile if isinstance(profile_or_result, GrowthResult) else profile_or_result
    need = {"crack_length", "dadn", "barrier", "zone_state"}
    if not need.issubset(prof.columns):
        raise ParameterError(f"profile should have columns {sorted(need)}; got {list(prof.columns)}")
    a = prof["crack_length"].to_numpy(float)
    r = prof["dadn"].to_numpy(float)
    b = prof["barrier"].to_numpy(np.int64)
    state = prof["zone_state"].to_numpy()
    pos = np.arange(a.size)
    blk = pd.DataFrame({"barrier": b, "dadn": r, "pos": pos})[(b >= 0) & (state == BLOCKED)]
    rows = []
    if len(blk):
        grp = blk.groupby("barrier", sort=True)
        # the CTSD of a blocked zone is unimodal in n = a/c: past its peak the rate falls until slip
        # crosses, so the dip minimum is the lowest rate after the peak (the last blocked point)
        peak_pos = blk.loc[grp["dadn"].idxmax(), ["barrier", "pos"]].set_index("barrier")["pos"]
        tail = blk[blk["pos"].to_numpy() >= peak_pos.reindex(blk["barrier"]).to_numpy()]
        min_pos = tail.loc[tail.groupby("barrier")["dadn"].idxmin(), ["barrier", "pos"]].set_index("barrier")["pos"]
        last_pos = grp["pos"].max()
        arrested_k = set(np.unique(b[(b >= 0) & (state == ARRESTED)]).tolist())
        for k in last_pos.index:  # per barrier: O(1) work each
            last, i_min, i_peak = int(last_pos[k]), int(min_pos[k]), int(peak_pos[k])
            arrest = int(k) in arrested_k
            if arrest:
                after, cross, depth = 0.0, math.inf, 0.0
            elif last + 1 >= a.size:
                continue  # the profile ends while still blocked: no crossing seen, no dip to report
            else:
                after, cross = r[last + 1], a[last + 1]
                depth = r[i_min] / after if after > 0 else math.nan
            rows.append({"barrier": int(k), "crack_length": a[i_min], "dadn_min": r[i_min], "dadn_peak": r[i_peak],
                         "dadn_after": after, "depth": depth, "crossing_length_um": cross, "arrest": arrest})
    cols = ["barrier", "crack_length", "dadn_min", "dadn_peak", "dadn_after", "depth", "crossing_length_um", "arrest"]
    return pd.DataFrame(rows, columns=cols)


# --------------------------------------------------------------------------------------------
# Uncertainty bands
# --------------------------------------------------------------------------------------------


def _sample_paths(source, path: GrowthPath, samples, scatter: float, seed: int, notes: list) -> list[GrowthPath]:
    if samples is not None and int(samples) < 0:
        raise ParameterError(f"samples should be >= 0; got {samples!r}")
    if samples is None or samples == 0:
        if samples is None and not isinstance(source, GrowthPath):
            paths = _forecast_sample_paths(source)
            if paths:
                notes.append(f"bands from {len(paths)} forecast Monte Carlo paths")
                return paths
            table = getattr(source, "samples", None)
            if isinstance(table, pd.DataFrame) and len(table):
                # the forecast keeps per-sample summaries, not paths: draw as many barrier-strength samples
                settings = getattr(source, "settings", None) or {}
                return _sample_paths(path, path, len(table), scatter, int(settings.get("seed", seed)), notes)
        return []
    scatter = check_positive(scatter, "strength_scatter", allow_zero=True)
    rng = np.random.default_rng(seed)
    k = path.n_barriers
    draws = rng.lognormal(0.0, scatter, size=(int(samples), k))
    notes.append(f"bands from {int(samples)} log-normal barrier-strength draws (σ_ln = {scatter:g}, seed {seed})")
    return [replace(path, strength_scale=path.strength_scale * draws[i]) for i in range(int(samples))]


def _forecast_sample_paths(forecast) -> list[GrowthPath]:
    """Per-sample paths carried by ``forecast.samples`` (a list of forecasts or path tables), if any."""
    samples = getattr(forecast, "samples", None)
    if samples is None:
        return []
    items = None
    if isinstance(samples, (list, tuple)):
        items = samples
    elif isinstance(samples, dict) and isinstance(samples.get("paths"), (list, tuple)):
        items = samples["paths"]
    if not items:
        return []
    out = []
    for item in items:
        try:
            if hasattr(item, "path"):
                out.append(path_from_forecast(item))
            elif isinstance(item, pd.DataFrame):
                out.append(path_from_tables(item, getattr(forecast, "barriers", None)))
        except ParameterError:
            continue  # a sample whose path is empty: it adds no band
    return out


def _bands(paths: list[GrowthPath], s: float, p: GrowthParameters, a: np.ndarray) -> pd.DataFrame:
    cyc = np.empty((len(paths), a.size))
    rate = np.empty((len(paths), a.size))
    for i, sp in enumerate(paths):  # one vectorised model run per sample
        dense = np.unique(np.concatenate([a, _grid(sp, a[0], a[-1], a.size, crossing_lengths(sp, s, p))]))
        st = zone_state(sp, dense, s, p)
        nd = _integrate_cycles(dense, st["dadn"])
        idx = np.searchsorted(dense, a)
        cyc[i] = nd[idx]
        rate[i] = st["dadn"][idx]
    out = {"crack_length": a}
    for q in (5, 50, 95):
        # "inverted_cdf" picks sample values, so arrested (inf) samples never produce NaN
        out[f"cycles_p{q:02d}"] = np.percentile(cyc, q, axis=0, method="inverted_cdf")
        out[f"dadn_p{q:02d}"] = np.percentile(rate, q, axis=0, method="inverted_cdf")
    return pd.DataFrame(out)


# --------------------------------------------------------------------------------------------
# From the forecast
# --------------------------------------------------------------------------------------------


def _match_transmission(table: pd.DataFrame | None, grains: np.ndarray, positions: np.ndarray, offset: float,
                        from_col: str, into_col: str, mp: np.ndarray, tw: np.ndarray, bid: np.ndarray,
                        done: np.ndarray) -> None:
    """Fill |m′|, twist and boundary id of the path barriers from a crossing or barrier table."""
    if table is None or len(table) == 0 or from_col not in table.columns or into_col not in table.columns:
        return
    ga = table[from_col].to_numpy(np.int64)
    gb = table[into_col].to_numpy(np.int64)
    dist = table["distance_um"].to_numpy(float) + offset if "distance_um" in table.columns else None
    for i in np.flatnonzero(~done):  # per barrier on the path: tens at most
        g0, g1 = grains[i], grains[i + 1]
        m = np.flatnonzero(((ga == g0) & (gb == g1)) | ((ga == g1) & (gb == g0)))
        if m.size == 0:
            continue
        if dist is not None:
            m = m[np.argsort(np.abs(np.nan_to_num(dist[m], nan=np.inf) - positions[i]), kind="stable")]
        row = table.iloc[int(m[0])]
        mp[i] = float(row["m_prime"]) if "m_prime" in table.columns else 1.0
        tw[i] = float(row["twist_deg"]) if "twist_deg" in table.columns else 0.0
        bid[i] = int(row["boundary_id"]) if "boundary_id" in table.columns else -1
        done[i] = True


def path_from_tables(path_table: pd.DataFrame, barrier_table: pd.DataFrame | None = None, *,
                     crossings: pd.DataFrame | None = None, offset_um: float = 0.0,
                     source: str = "path table") -> GrowthPath:
    """A :class:`GrowthPath` from a forecast path table (and optionally its crossing / barrier tables).

    Parameters
    ----------
    path_table
        One row per straight segment with columns ``grain``, ``x0``, ``y0``, ``x1``, ``y1`` (µm),
        ``length_um``, ``s_start_um`` and ``schmid`` (the ``CrackForecast.path`` contract).
    barrier_table
        ``CrackForecast.barriers``: ``grain_a``, ``grain_b``, ``m_prime``, ``twist_deg``,
        ``distance_um``, ``boundary_id``, ``on_path``.
    crossings
        ``CrackForecast.crossings`` (preferred: one row per crossing of the main path, ``branch`` 0):
        ``grain_a`` (from), ``grain_b`` (into), ``m_prime``, ``twist_deg``, ``distance_um``.
    offset_um
        Crack already present behind the path start (µm): every position is shifted by it, so the
        crack length is the whole length (the forecast's ``initial_crack_um``).
    source
        Name used in error messages.

    Notes
    -----
    Barrier positions are the path distances where the grain changes; grain factors are the
    length-weighted ``schmid`` of each grain's segments. |m′|, twist and boundary id are matched by
    grain pair (nearest distance first), from the crossings, then the barriers; an unmatched
    barrier gets neutral transmission (|m′| = 1, twist 0).
    """
    need = {"grain", "x0", "y0", "x1", "y1", "length_um", "s_start_um", "schmid"}
    if path_table is None or len(path_table) == 0:
        raise ParameterError(f"{source} is empty: the forecast found no path to grow a crack along")
    missing = need - set(path_table.columns)
    if missing:
        raise ParameterError(f"{source} should have columns {sorted(need)}; missing {sorted(missing)}")
    offset = check_positive(offset_um, "offset_um", allow_zero=True)
    t = path_table.sort_values("s_start_um").reset_index(drop=True)
    grain = t["grain"].to_numpy(np.int64)
    s0 = t["s_start_um"].to_numpy(float) + offset
    ln = t["length_um"].to_numpy(float)
    schmid = np.abs(t["schmid"].to_numpy(float))
    change = np.flatnonzero(grain[1:] != grain[:-1]) + 1
    starts = np.concatenate([[0], change])
    ends = np.concatenate([change, [len(t)]])
    positions = s0[change]
    grains = grain[starts]
    # length-weighted orientation factor of each grain's segments (per grain on the path: tens)
    gf = np.array([np.average(np.nan_to_num(schmid[i:j]), weights=np.maximum(ln[i:j], 1e-12))
                   for i, j in zip(starts, ends, strict=True)])
    if not np.any(gf > 0):
        gf = np.ones_like(gf)
    gf = np.maximum(gf, 1e-3)  # a grain with no resolved shear: very hard, never infinitely so
    k = positions.size
    mp, tw = np.ones(k), np.zeros(k)
    bid = np.full(k, -1, dtype=np.int64)
    done = np.zeros(k, dtype=bool)
    if crossings is not None and len(crossings) and "branch" in crossings.columns:
        crossings = crossings[crossings["branch"] == 0]
    _match_transmission(crossings, grains, positions, offset, "grain_a", "grain_b", mp, tw, bid, done)
    if barrier_table is not None and len(barrier_table) and "on_path" in barrier_table.columns:
        barrier_table = barrier_table[barrier_table["on_path"].astype(bool)]
    _match_transmission(barrier_table, grains, positions, offset, "grain_a", "grain_b", mp, tw, bid, done)
    total = float(s0[-1] + ln[-1])
    poly_s = np.concatenate([s0, [total]])
    poly_x = np.concatenate([t["x0"].to_numpy(float), [float(t["x1"].iloc[-1])]])
    poly_y = np.concatenate([t["y0"].to_numpy(float), [float(t["y1"].iloc[-1])]])
    keep = np.concatenate([[True], np.diff(poly_s) > 0])
    return GrowthPath(barrier_positions_um=positions, grain_factors=gf, m_prime=np.clip(np.nan_to_num(mp, nan=1.0),
                      0, 1), twist_deg=np.nan_to_num(tw), length_um=total, grains=grains, boundary_ids=bid,
                      polyline=np.column_stack([poly_s, poly_x, poly_y])[keep])


def path_from_forecast(forecast, *, offset_um: float | None = None, stress_field=None, grain_graph=None,
                       systems=None) -> GrowthPath:
    """A :class:`GrowthPath` from a ``CrackForecast`` (its ``.path``, ``.crossings``, ``.barriers``).

    Parameters
    ----------
    forecast
        The forecast.
    offset_um
        Crack length already behind the forecast tip (µm); default the forecast's
        ``settings["initial_crack_um"]`` (0 for a notch root).
    stress_field
        Optional ``StressField``: the grain factors then come from the local grain Schmid factors
        (``slipnet.stress.grain_schmid_factors``) of the system the path follows in each grain
        (the largest over systems in stage II) instead of the forecast's ``schmid`` column.
    grain_graph
        The ``GrainGraph`` of the map (needed with ``stress_field``).
    systems
        The slip systems the forecast used (default catalogue when None; relative CRSS divide the
        local factors as in the effective Schmid factor).

    See :func:`path_from_tables` for how the tables are read.
    """
    if not hasattr(forecast, "path"):
        raise ParameterError(f"forecast should be a CrackForecast with a .path table; got {type(forecast).__name__}")
    if offset_um is None:
        settings = getattr(forecast, "settings", None) or {}
        offset_um = float(settings.get("initial_crack_um", 0.0) or 0.0)
    table = forecast.path
    if stress_field is not None:
        table = _local_factors(table, stress_field, grain_graph, systems)
    return path_from_tables(table, getattr(forecast, "barriers", None),
                            crossings=getattr(forecast, "crossings", None), offset_um=offset_um,
                            source="forecast.path")


def _local_factors(table: pd.DataFrame, stress_field, grain_graph, systems) -> pd.DataFrame:
    """The path table with ``schmid`` replaced by local effective Schmid factors from a stress field."""
    if grain_graph is None:
        raise ParameterError("grain_graph should be given with stress_field (the local factors are grain means)")
    if "system" not in table.columns:
        raise ParameterError("forecast.path should have a 'system' column to use local Schmid factors")
    from .stress import grain_schmid_factors

    local = np.abs(np.asarray(grain_schmid_factors(stress_field, grain_graph, systems), dtype=float))
    crss = np.asarray(getattr(systems, "crss", np.ones(local.shape[1])), dtype=float)
    eff = np.nan_to_num(local / crss[None, :])
    g = table["grain"].to_numpy(np.int64)
    sysi = table["system"].to_numpy(np.int64)
    ok = (g >= 0) & (g < eff.shape[0])
    gi = np.where(ok, g, 0)
    on_sys = eff[gi, np.clip(sysi, 0, eff.shape[1] - 1)]
    best = eff[gi].max(axis=1)
    out = table.copy()
    out["schmid"] = np.where(ok, np.where(sysi >= 0, on_sys, best), table["schmid"].to_numpy(float))
    return out


def life_amplitude(
    path: GrowthPath,
    cycles: float,
    *,
    params: GrowthParameters | None = None,
    initial_length: float | None = None,
    final_length: float | None = None,
    n_points: int = 1000,
    rtol: float = 1e-6,
) -> float:
    """Stress amplitude (MPa) at which the crack grows from ``initial_length`` to ``final_length`` in
    ``cycles`` cycles: a finite-life fatigue strength of the mapped path.

    The cycles to reach ``final_length`` fall monotonically with the amplitude, so the root of
    ln N(σ) − ln N_target is bracketed by ``scipy.optimize.brentq`` between the amplitude needed to
    pass every barrier up to ``final_length`` (the microstructural fatigue limit, eq. 7 of
    ``docs/growth-model.md``) and σ_f. When even just above that limit the crack needs fewer cycles
    than asked (possible for m < 2, where the approach to a barrier takes finite time), the limit
    itself is returned: below it the crack arrests.

    Parameters
    ----------
    path
        The path.
    cycles
        Target life N (cycles), > 0.
    params
        Model constants.
    initial_length, final_length
        Crack lengths (µm); defaults as in :func:`simulate_growth`.
    n_points
        Crack lengths per model run.
    rtol
        Relative tolerance on the amplitude.

    Returns
    -------
    float
        σ_a (MPa).
    """
    p = _params(params)
    target = check_positive(cycles, "cycles")
    d = path.barrier_positions_um
    a1 = path.length_um if final_length is None else check_positive(final_length, "final_length")
    a0 = (0.1 * (d[0] if d.size else a1)) if initial_length is None else check_positive(initial_length,
                                                                                        "initial_length")
    if a0 >= a1:
        raise ParameterError(f"initial_length should be below final_length={a1:g} µm; got {a0:g} µm")
    th = threshold_amplitudes(path, p)[d < a1]
    lo = max(float(th.max()) if th.size else 0.0, 1e-9 * p.friction_stress) * (1 + 1e-9)
    hi = p.friction_stress * (1 - 1e-9)
    if lo >= hi:
        raise ParameterError(f"the barriers need {lo:g} MPa, not below friction_stress={p.friction_stress:g} MPa: "
                             "raise friction_stress or lower barrier_stress")

    def log_excess(sigma: float) -> float:
        _a, _st, cyc, _x = _run(path, sigma, p, a0, a1, int(n_points))
        n_end = cyc[-1]
        # an arrest (rounding right at the limit) counts as "far too many cycles": the sign is what brentq needs
        return 1e3 if not math.isfinite(n_end) else math.log(max(n_end, 1e-300)) - math.log(target)

    if log_excess(lo) <= 0:
        return lo
    if log_excess(hi) >= 0:
        raise NumericalError(f"even at σ_f = {p.friction_stress:g} MPa the crack needs more than {target:g} cycles")
    return float(optimize.brentq(log_excess, lo, hi, rtol=rtol))


# --------------------------------------------------------------------------------------------
# Calibration
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class CalibrationResult:
    """Fitted constants with confidence intervals.

    Attributes
    ----------
    params
        The fitted :class:`GrowthParameters`.
    table
        DataFrame: ``parameter``, ``value``, ``low``, ``high`` (confidence interval), ``std_log``.
    covariance
        (3, 3) covariance of (ln σ_f, ln C, ln m): s² (JᵀJ)⁻¹.
    residual_rms
        RMS of the cycle residuals (counts).
    success
        Optimiser success flag.
    message
        Optimiser message.
    """

    params: GrowthParameters
    table: pd.DataFrame
    covariance: np.ndarray
    residual_rms: float
    success: bool
    message: str


def _model_cycles(path: GrowthPath, s: float, p: GrowthParameters, a_rec: np.ndarray, n_points: int) -> np.ndarray:
    x = crossing_lengths(path, s, p)
    a_all = np.unique(np.concatenate([_grid(path, a_rec[0], a_rec[-1], n_points, x), a_rec]))
    st = zone_state(path, a_all, s, p, crossings=x)
    cyc = _integrate_cycles(a_all, st["dadn"])
    return cyc[np.searchsorted(a_all, a_rec)]


def calibrate(
    record_a_um,
    record_n_cycles,
    path: GrowthPath,
    stress_amplitude: float,
    *,
    initial: GrowthParameters | None = None,
    confidence: float = 0.95,
    n_points: int = 800,
) -> CalibrationResult:
    """Fit friction stress, coefficient and exponent to a measured crack-length record.

    Least squares (``scipy.optimize.least_squares``) on θ = (ln σ_f, ln C, ln m); the residuals are
    model minus measured cycles to reach each recorded length, counted from the first record point.
    Confidence intervals from the Jacobian: cov(θ) = s² (JᵀJ)⁻¹, s² = RSS/(n − 3), intervals
    exp(θ ± t·√diag) (Student t, n − 3 degrees of freedom).

    Parameters
    ----------
    record_a_um
        (n,) crack lengths along the path (µm), increasing, n ≥ 4.
    record_n_cycles
        (n,) cycles at those lengths.
    path
        The path the crack grew along.
    stress_amplitude
        σ_a of the test (MPa).
    initial
        Starting constants (defaults: :class:`GrowthParameters`); σ_f is kept above σ_a.
    confidence
        Confidence level of the intervals.
    n_points
        Crack-length grid of each model run.

    Returns
    -------
    CalibrationResult
    """
    a = np.asarray(record_a_um, dtype=float).reshape(-1)
    nc = np.asarray(record_n_cycles, dtype=float).reshape(-1)
    if a.size != nc.size or a.size < 4:
        raise ParameterError(f"record_a_um and record_n_cycles should have the same length >= 4; got {a.size}, "
                             f"{nc.size}")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(nc))) or np.any(a <= 0) or np.any(np.diff(a) <= 0):
        raise ParameterError("record_a_um should be finite, > 0 µm and strictly increasing; cycles finite")
    conf = check_range(confidence, "confidence", 0.0, 1.0, inclusive=False)
    p0 = initial if initial is not None else GrowthParameters()
    s = _as_stress(stress_amplitude, "stress_amplitude")
    s = float(s)
    sf0 = max(p0.friction_stress, 1.05 * s)
    theta0 = np.log([sf0, p0.coefficient, p0.exponent])
    lo = np.array([math.log(s * 1.0001), -np.inf, math.log(0.05)])
    hi = np.array([np.inf, np.inf, math.log(20.0)])
    theta0 = np.clip(theta0, lo + 1e-6, hi - 1e-6)
    n_rel = nc - nc[0]
    scale = max(float(np.max(np.abs(n_rel))), 1.0)
    penalty = 10.0

    def residuals(theta: np.ndarray) -> np.ndarray:
        sf, cc, m = np.exp(theta)
        pp = replace(p0, friction_stress=sf, coefficient=cc, exponent=m)
        model = _model_cycles(path, s, pp, a, n_points)
        r = (model - n_rel) / scale
        return np.where(np.isfinite(r), r, penalty)

    fit = optimize.least_squares(residuals, theta0, bounds=(lo, hi), x_scale="jac", method="trf")
    sf, cc, m = np.exp(fit.x)
    pfit = replace(p0, friction_stress=sf, coefficient=cc, exponent=m)
    dof = max(a.size - 3, 1)
    rss = float(np.sum(fit.fun**2))
    s2 = rss / dof
    jtj = fit.jac.T @ fit.jac
    try:
        cov = s2 * np.linalg.inv(jtj)
    except np.linalg.LinAlgError:
        cov = np.full((3, 3), np.inf)
    sd = np.sqrt(np.clip(np.diag(cov), 0, None))
    t = float(sps.t.ppf(0.5 + conf / 2.0, dof))
    table = pd.DataFrame({
        "parameter": ["friction_stress_mpa", "coefficient", "exponent"],
        "value": [sf, cc, m],
        "low": np.exp(fit.x - t * sd),
        "high": np.exp(fit.x + t * sd),
        "std_log": sd,
    })
    return CalibrationResult(params=pfit, table=table, covariance=cov,
                             residual_rms=math.sqrt(rss / a.size) * scale, success=bool(fit.success),
                             message=str(fit.message))


# --------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------


def write_growth(result: GrowthResult, folder, gg=None, *, figures: bool = True,
                 calibration: CalibrationResult | None = None, title: str = "Short-crack growth prediction") -> dict:
    """Write the growth tables (CSV), settings (JSON), pictures and a summary carrying the caution.

    Files: ``growth_profile.csv``, ``growth_barriers.csv``, ``growth_dips.csv``, ``growth_bands.csv``
    (with bands), ``growth_calibration.csv`` (with a calibration), ``growth_settings.json``, the
    pictures of :func:`slipnet.figures.growth.save_growth_figures` and ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    import json
    from dataclasses import asdict
    from pathlib import Path

    from ._files import atomic_path
    from .report import write_summary, write_table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = {
        "profile": write_table(result.profile, folder / "growth_profile.csv"),
        "barriers": write_table(result.barriers, folder / "growth_barriers.csv"),
        "dips": write_table(result.dips, folder / "growth_dips.csv"),
    }
    if result.bands is not None:
        out["bands"] = write_table(result.bands, folder / "growth_bands.csv")
    if calibration is not None:
        out["calibration"] = write_table(calibration.table, folder / "growth_calibration.csv")
    settings = {"stress_amplitude_mpa": result.stress_amplitude, **asdict(result.params),
                "arrest_length_um": result.arrest_length_um, "notes": list(result.notes)}
    with atomic_path(folder / "growth_settings.json") as tmp:
        tmp.write_text(json.dumps(settings, indent=1, default=str), encoding="utf-8")
    out["settings"] = folder / "growth_settings.json"
    if figures:
        from .figures.growth import save_growth_figures

        out.update(save_growth_figures(result, folder, gg))
    prof = result.profile
    fin = prof.loc[np.isfinite(prof["cycles"]), "cycles"]
    p = result.params
    lines = [
        f"Stress amplitude σ_a = {result.stress_amplitude:g} MPa; friction stress σ_f = {p.friction_stress:g} MPa; "
        f"da/dN = {p.coefficient:g} · φ^{p.exponent:g} (µm/cycle, φ in µm).",
        f"Barrier critical stress S_c = {p.barrier_stress:g} MPa at r₀ = {p.source_distance:g} µm; coupling "
        f"1 + {p.transmission_weight:g}(1 − |m′|) + {p.twist_weight:g} sin(twist).",
        f"Path: {result.path.n_barriers} barriers over {result.path.length_um:.1f} µm.",
        (f"The crack arrests at {result.arrest_length_um:.1f} µm (barrier strength exceeds what the blocked zone "
         f"can deliver); cycles are infinite beyond." if math.isfinite(result.arrest_length_um)
         else f"No arrest up to {prof['crack_length'].iloc[-1]:.1f} µm; {fin.iloc[-1]:.3g} cycles from "
              f"{prof['crack_length'].iloc[0]:.2f} µm."),
        f"Amplitude needed to pass every barrier on the path: "
        f"{float(result.barriers['threshold_amplitude_mpa'].max()) if len(result.barriers) else 0.0:.1f} MPa "
        "(microstructural fatigue-limit estimate).",
        f"Predicted dips: {len(result.dips)} (growth_dips.csv: crack length of each minimum, depth = minimum rate "
        "/ rate just after crossing).",
        *[f"Note: {n}" for n in result.notes],
        "",
        "The model (Bilby, Cottrell & Swinden 1963 strip-yield zone blocked at grain boundaries as in Navarro & "
        "de los Rios 1988) and every added assumption are described in docs/growth-model.md. The constants are "
        "illustrative until calibrated against a growth record of the material.",
    ]
    if calibration is not None:
        lines += ["", "Calibration (95 % intervals):"]
        lines += [f"- {r.parameter}: {r.value:.4g} [{r.low:.4g}, {r.high:.4g}]" for r in calibration.table.itertuples()]
    out["summary"] = write_summary(folder, title, lines)
    return out
