"""Crack-growth records: da/dN by the ASTM E647 secant and incremental polynomial methods, dips.

Public names are re-exported by :mod:`slipnet.compare`; import them from there.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import signal

from slipnet._checks import check_positive
from slipnet.errors import ParameterError


# ==================================================================================== growth records
def _check_record(a, n) -> tuple[np.ndarray, np.ndarray]:
    a = np.asarray(a, dtype=np.float64).ravel()
    n = np.asarray(n, dtype=np.float64).ravel()
    if a.shape != n.shape:
        raise ParameterError(f"a and n should have equal lengths; got {a.size} and {n.size}")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(n))):
        raise ParameterError("a and n should be finite (drop missing readings first)")
    if np.any(np.diff(n) <= 0):
        k = int(np.flatnonzero(np.diff(n) <= 0)[0])
        raise ParameterError(f"cycle counts n should increase strictly; n[{k + 1}] = {n[k + 1]} follows {n[k]}")
    return a, n


def dadn_secant(a, n) -> tuple[np.ndarray, np.ndarray]:
    """Crack growth rate by the secant (point-to-point) method of ASTM E647.

    Parameters
    ----------
    a : (m,) ndarray
        Crack length, µm.
    n : (m,) ndarray
        Cycle count at each reading, strictly increasing.

    Returns
    -------
    a_mid : (m − 1,) ndarray
        Mean crack length of each interval, µm.
    dadn : (m − 1,) ndarray
        (a_{i+1} − a_i)/(N_{i+1} − N_i), µm/cycle.
    """
    a, n = _check_record(a, n)
    if a.size < 2:
        raise ParameterError(f"the secant method needs at least 2 readings; got {a.size}")
    return 0.5 * (a[1:] + a[:-1]), np.diff(a) / np.diff(n)


def dadn_incremental_polynomial(a, n, points: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """Crack growth rate by the incremental polynomial method of ASTM E647 (seven points by default).

    For each reading i with ``points // 2`` readings on either side, a second-order polynomial
    â = b0 + b1·X + b2·X² is fitted by least squares over the window, with the scaled cycles
    X = (N − C1)/C2, C1 = ½(N_{i−k} + N_{i+k}), C2 = ½(N_{i+k} − N_{i−k}) (k = points // 2). The rate is
    the derivative at N_i: da/dN = b1/C2 + 2·b2·(N_i − C1)/C2², reported at the fitted length â_i.

    Parameters
    ----------
    a : (m,) ndarray
        Crack length, µm.
    n : (m,) ndarray
        Cycle count at each reading, strictly increasing.
    points : int
        Odd window size ≥ 3; ASTM E647 uses 7.

    Returns
    -------
    a_fit : (m − points + 1,) ndarray
        Fitted crack length â_i at the window centre, µm.
    dadn : (m − points + 1,) ndarray
        Rate at the window centre, µm/cycle.
    """
    a, n = _check_record(a, n)
    if int(points) != points or points < 3 or points % 2 == 0:
        raise ParameterError(f"points should be an odd integer >= 3; got {points!r}")
    points = int(points)
    if a.size < points:
        raise ParameterError(f"the incremental polynomial method needs at least {points} readings; got {a.size}")
    k = points // 2
    nw = np.lib.stride_tricks.sliding_window_view(n, points)
    aw = np.lib.stride_tricks.sliding_window_view(a, points)
    c1 = 0.5 * (nw[:, 0] + nw[:, -1])
    c2 = 0.5 * (nw[:, -1] - nw[:, 0])
    x = (nw - c1[:, None]) / c2[:, None]
    v = np.stack([np.ones_like(x), x, x * x], axis=-1)  # (w, points, 3)
    vtv = np.einsum("wpi,wpj->wij", v, v)
    vta = np.einsum("wpi,wp->wi", v, aw)
    b = np.linalg.solve(vtv, vta[..., None])[..., 0]
    xc = (nw[:, k] - c1) / c2
    a_fit = b[:, 0] + b[:, 1] * xc + b[:, 2] * xc * xc
    rate = b[:, 1] / c2 + 2.0 * b[:, 2] * (nw[:, k] - c1) / c2**2
    return a_fit, rate


def find_rate_dips(a_mid, dadn, *, prominence: float = 0.1) -> pd.DataFrame:
    """Local minima of a growth-rate record (dips), found as peaks of −log10(da/dN).

    Parameters
    ----------
    a_mid, dadn : (m,) ndarray
        Crack length (µm) and rate (µm/cycle). Rates ≤ 0 (arrest or scatter) are floored at a tenth
        of the smallest positive rate so they still count as deep dips.
    prominence : float
        Smallest dip prominence in decades of rate (``scipy.signal.find_peaks``).

    Returns
    -------
    DataFrame
        ``crack_length_um``, ``dadn_um_per_cycle``, ``prominence_decades``, sorted by crack length.
    """
    a = np.asarray(a_mid, float).ravel()
    r = np.asarray(dadn, float).ravel()
    if a.shape != r.shape:
        raise ParameterError("a_mid and dadn should have equal lengths")
    check_positive(prominence, "prominence")
    ok = np.isfinite(a) & np.isfinite(r)
    a, r = a[ok], r[ok]
    cols = ["crack_length_um", "dadn_um_per_cycle", "prominence_decades"]
    pos = r[r > 0]
    if pos.size == 0:
        return pd.DataFrame(columns=cols)
    floor = pos.min() / 10.0
    y = -np.log10(np.maximum(r, floor))
    idx, props = signal.find_peaks(y, prominence=prominence)
    return pd.DataFrame({"crack_length_um": a[idx], "dadn_um_per_cycle": r[idx],
                         "prominence_decades": props["prominences"]})
