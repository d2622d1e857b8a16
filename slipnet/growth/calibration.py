"""Fitting the growth model to a measured crack-length record, and the finite-life amplitude of a path.

:func:`calibrate` fits σ_f, C and m of :class:`slipnet.growth.GrowthParameters` by least squares on
the cycles to reach each recorded length; :func:`life_amplitude` inverts the model for the stress
amplitude that gives a target life. Both run the model of :mod:`slipnet.growth` (equations in
``docs/growth-model.md``). Every public name here is also importable from :mod:`slipnet.growth`.

Public entries
--------------
life_amplitude, calibrate, CalibrationResult.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from scipy import optimize
from scipy import stats as sps

from slipnet._checks import check_positive, check_range
from slipnet.errors import NumericalError, ParameterError
from slipnet.growth.model import _grid, _integrate_cycles, _run
from slipnet.growth.path import GrowthPath
from slipnet.growth.strip_yield import GrowthParameters, _as_stress, _params
from slipnet.growth.zones import crossing_lengths, threshold_amplitudes, zone_state

__all__ = ["CalibrationResult", "calibrate", "life_amplitude"]


# --------------------------------------------------------------------------------------------
# Finite-life amplitude
# --------------------------------------------------------------------------------------------


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
        Crack lengths (µm); defaults as in :func:`slipnet.growth.simulate_growth`.
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
        The fitted :class:`slipnet.growth.GrowthParameters`.
    table
        DataFrame: ``parameter``, ``value``, ``low``, ``high`` (confidence interval), ``std_log``.
    covariance
        (3, 3) covariance of (ln σ_f, ln C, ln m): s² (JᵀJ)⁻¹.
    residual_rms
        RMS of the cycle residuals (counts).
    success
        True only when the fit converged to constants the record determines: the optimiser
        succeeded, the model reaches every recorded length, no constant sits at the edge of its
        range and every confidence interval is finite.
    message
        The optimiser's message, and, when ``success`` is False, what went wrong with the numbers
        and the likely fix.
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
        Starting constants (defaults: :class:`slipnet.growth.GrowthParameters`); σ_f is kept above σ_a.
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
    with np.errstate(invalid="ignore"):
        sd = np.sqrt(np.clip(np.diag(cov), 0, None))
    t = float(sps.t.ppf(0.5 + conf / 2.0, dof))
    with np.errstate(over="ignore", invalid="ignore"):
        low, high = np.exp(fit.x - t * sd), np.exp(fit.x + t * sd)
    bounded = np.isfinite(sd) & (low > 0) & np.isfinite(high)
    names = ["friction_stress_mpa", "coefficient", "exponent"]
    table = pd.DataFrame({
        "parameter": names,
        "value": [sf, cc, m],
        "low": np.where(bounded, low, np.nan),
        "high": np.where(bounded, high, np.nan),
        "std_log": sd,
    })
    problems = _diagnose(fit, path, s, pfit, a, n_points, lo, hi, bounded, names)
    message = str(fit.message)
    if problems:
        message = (f"{message}; " if fit.success else f"{message} (the optimiser stopped without converging); ") + \
            "; ".join(problems)
    return CalibrationResult(params=pfit, table=table, covariance=cov,
                             residual_rms=math.sqrt(rss / a.size) * scale, success=bool(fit.success) and not problems,
                             message=message)


def _diagnose(fit, path: GrowthPath, s: float, pfit: GrowthParameters, a: np.ndarray, n_points: int,
              lo: np.ndarray, hi: np.ndarray, bounded: np.ndarray, names: list[str]) -> list[str]:
    """What makes a finished fit unreliable, each with the numbers and the likely fix (empty: none)."""
    problems = []
    model = _model_cycles(path, s, pfit, a, n_points)
    stuck = ~np.isfinite(model)
    if stuck.any():
        k = int(np.flatnonzero(stuck)[0])
        before = f"{a[k - 1]:.4g}" if k > 0 else f"{a[0]:.4g}"
        problems.append(
            f"at σ_a = {s:g} MPa the model crack stops between {before} and {a[k]:.4g} µm (the record reaches "
            f"{a[-1]:.4g} µm) with the constants reached, so the record gives the fit nothing to follow: check the "
            "stress amplitude, that the record's lengths are in µm along this path, or start from a lower barrier "
            "stress or a higher friction stress (--barrier-stress, --friction-stress)")
    at_lo = [bool(np.isfinite(lo[i]) and abs(fit.x[i] - lo[i]) <= 1e-3) for i in range(3)]
    at_hi = [bool(np.isfinite(hi[i]) and abs(fit.x[i] - hi[i]) <= 1e-3) for i in range(3)]
    edge = [f"{names[i]} at the {'lower' if at_lo[i] else 'upper'} end of its range ({math.exp(fit.x[i]):.4g})"
            for i in range(3) if at_lo[i] or at_hi[i]]
    if edge:
        problems.append(f"{', '.join(edge)}: the model's form does not follow the record (a record of constant rate, "
                        "or lengths in another unit, does this)")
    loose = [names[i] for i in range(3) if not bounded[i]]
    if loose and not stuck.any():
        problems.append(f"the record does not determine {', '.join(loose)} (unbounded confidence intervals): give "
                        "more readings across the barriers, or fix those constants from another test")
    return problems
