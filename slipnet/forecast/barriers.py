"""Barrier ranking: a resistance score per boundary that shows every term and weight."""

from __future__ import annotations

import numpy as np
import pandas as pd

from slipnet.columns import FORECAST_BARRIERS
from slipnet.errors import ParameterError
from slipnet.forecast.types import CLASS_FACTORS, BarrierWeights

__all__ = ["rank_barriers"]


def rank_barriers(
    crossings: pd.DataFrame,
    weights: BarrierWeights | None = None,
    *,
    decay_length_um: float = np.inf,
    class_factors: dict[str, float] | None = None,
) -> pd.DataFrame:
    """Rank boundary crossings by a resistance score that shows every term and weight.

    Parameters
    ----------
    crossings
        Crossing rows as in :attr:`CrackForecast.crossings` (at least ``boundary_id``,
        ``grain_a``, ``grain_b``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``schmid_in``,
        ``schmid_out``, ``boundary_class``, ``distance_um``; ``branch`` 0 marks the main path).
    weights
        Term weights (:class:`BarrierWeights`).
    decay_length_um
        Relevance decay length: ``relevance = exp(−distance_um / decay_length_um)``; ``inf``
        ranks by the terms alone.
    class_factors
        Barrier factor per boundary class (default :data:`CLASS_FACTORS`).

    Returns
    -------
    DataFrame
        One row per boundary (the main-path crossing when the boundary is on it, else its first
        crossing by an alternative), sorted by ``barrier_score`` (descending), ``rank`` from 1.

    Notes
    -----
    ``barrier_score = relevance · Σ_k w_k·term_k / Σ_k w_k`` with ``term_twist = α/90°``,
    ``term_transmission = 1 − |m′|``, ``term_class`` from the boundary class and
    ``term_schmid_drop = max(0, m_eff,in − m_eff,out)/0.5``; every term lies in [0, 1].
    A boundary between identical orientations has twist 0, |m′| = 1 and no Schmid drop, so only
    its class term (sub-grain: 0.1) remains: the weakest possible barrier.
    """
    w = weights or BarrierWeights()
    cf = CLASS_FACTORS if class_factors is None else class_factors
    decay_length_um = _check_decay(decay_length_um)
    cols = list(FORECAST_BARRIERS)
    if crossings is None or len(crossings) == 0:
        return pd.DataFrame({c: pd.Series(dtype=object if c in ("boundary_class", "branches") else float)
                             for c in cols})
    n = len(crossings)
    col = {c: crossings[c].to_numpy() for c in crossings.columns}
    branch = np.asarray(col["branch"], dtype=np.int64) if "branch" in col else np.zeros(n, np.int64)
    ga, gb = col["grain_a"].astype(int), col["grain_b"].astype(int)
    # one id per boundary (unordered grain pair), numbered in array passes
    _, _, key, n_keys, idx, on_path = _boundary_rows(ga, gb, branch, col["distance_um"])
    mis = col.get("misorientation_deg", np.full(n, np.nan))
    out = pd.DataFrame({
        "boundary_id": col["boundary_id"][idx].astype(int),
        "grain_a": ga[idx], "grain_b": gb[idx],
        "twist_deg": col["twist_deg"][idx].astype(float), "tilt_deg": col["tilt_deg"][idx].astype(float),
        "m_prime": col["m_prime"][idx].astype(float), "distance_um": col["distance_um"][idx].astype(float),
        "on_path": on_path[key[idx]],
        "boundary_class": col["boundary_class"][idx].astype(str),
        "misorientation_deg": mis[idx].astype(float),
        "schmid_in": col["schmid_in"][idx].astype(float), "schmid_out": col["schmid_out"][idx].astype(float),
        "x_um": col["x_um"][idx].astype(float), "y_um": col["y_um"][idx].astype(float),
        "branches": _branch_lists(key, branch, n_keys)[key[idx]],
    })
    which, classes = pd.factorize(out["boundary_class"])  # the few distinct classes, looked up once each
    t_class = np.array([_class_factor(str(c), cf) for c in classes], dtype=float)[which]
    t_twist, t_trans, t_drop, relevance, score = barrier_scores(
        out["twist_deg"].to_numpy(float), out["m_prime"].to_numpy(float), out["schmid_in"].to_numpy(float),
        out["schmid_out"].to_numpy(float), t_class, out["distance_um"].to_numpy(float), w, decay_length_um)
    out["term_twist"] = t_twist
    out["term_transmission"] = t_trans
    out["term_class"] = t_class
    out["term_schmid_drop"] = t_drop
    out["relevance"] = relevance
    out["weight_twist"] = w.twist
    out["weight_transmission"] = w.transmission
    out["weight_class"] = w.boundary_class
    out["weight_schmid_drop"] = w.schmid_drop
    out["barrier_score"] = score
    out = out.sort_values(["barrier_score", "distance_um"], ascending=[False, True], kind="stable")
    out = out.reset_index(drop=True)
    out["rank"] = np.arange(1, len(out) + 1)
    return out[cols]


def barrier_scores(twist_deg: np.ndarray, m_prime: np.ndarray, schmid_in: np.ndarray, schmid_out: np.ndarray,
                   term_class: np.ndarray, distance_um: np.ndarray, weights: BarrierWeights, decay_length_um: float):
    """The terms, relevance and score of each barrier: the formula of :func:`rank_barriers` in one place.

    Parameters
    ----------
    twist_deg, m_prime, schmid_in, schmid_out
        Per barrier: twist angle (degrees), |m′| and the effective Schmid factors in and out.
    term_class
        Per barrier, the class factor (:data:`CLASS_FACTORS`).
    distance_um
        Per barrier, distance along the path (µm).
    weights
        Term weights; their sum must be positive.
    decay_length_um
        Relevance decay length (µm, checked by the caller; ``inf`` for no decay).

    Returns
    -------
    term_twist, term_transmission, term_schmid_drop, relevance, barrier_score : ndarray
        Each in [0, 1].

    Raises
    ------
    ParameterError
        If the weights do not sum to a positive number.

    Examples
    --------
    >>> one = np.ones(1)
    >>> barrier_scores(45.0 * one, 0.5 * one, 0.4 * one, 0.3 * one, one, 0 * one, BarrierWeights(), np.inf)[4]
    array([0.53333333])
    """
    w = weights
    wsum = w.twist + w.transmission + w.boundary_class + w.schmid_drop
    if not wsum > 0:
        raise ParameterError(f"barrier weights should have a positive sum (raise at least one weight); got {w}")
    t_twist = np.clip(twist_deg / 90.0, 0.0, 1.0)
    t_trans = np.clip(1.0 - m_prime, 0.0, 1.0)
    t_drop = np.clip((schmid_in - schmid_out) / _MAX_SCHMID, 0.0, 1.0)
    relevance = np.exp(-distance_um / decay_length_um)
    raw = (w.twist * t_twist + w.transmission * t_trans + w.boundary_class * term_class
           + w.schmid_drop * t_drop) / wsum
    return t_twist, t_trans, t_drop, relevance, relevance * raw


def _boundary_rows(ga: np.ndarray, gb: np.ndarray, branch: np.ndarray, dist: np.ndarray):
    """One id per boundary (unordered grain pair) and the crossing row that stands for it.

    The row is the boundary's main-path crossing if any, else its first alternative crossing (main
    path first, then by distance); boundaries come in the order their chosen rows come. Returns
    ``lo, hi, key, n_keys, idx, on_path``: the ordered pair and boundary id of every crossing, the
    number of boundaries, the chosen rows and whether each boundary lies on the main path.
    """
    lo, hi = np.minimum(ga, gb).astype(np.int64), np.maximum(ga, gb).astype(np.int64)
    _, key = np.unique((lo - lo.min()) * (hi.max() - hi.min() + 1) + (hi - hi.min()), return_inverse=True)
    key = key.reshape(-1)
    n_keys = int(key.max()) + 1
    order = np.lexsort((dist, branch))
    _, first_pos = np.unique(key[order], return_index=True)
    idx = order[np.sort(first_pos)]
    on_path = np.zeros(n_keys, dtype=bool)
    on_path[key[branch == 0]] = True
    return lo, hi, key, n_keys, idx, on_path


_MAX_SCHMID = 0.5  # largest possible Schmid factor: normalises the Schmid terms to [0, 1]


def _branch_lists(key: np.ndarray, branch: np.ndarray, n_keys: int) -> np.ndarray:
    """Per boundary id, its distinct branches ascending as ``"0;2;5"`` (object array, n_keys).

    Built slot by slot (the k-th branch of every boundary at once), so the loops run over branch
    numbers and the most branches one boundary has, never over boundaries.
    """
    span = int(branch.max() - branch.min()) + 1
    code = np.unique(key * span + (branch - branch.min()))  # sorted by boundary, then branch
    names = np.array([str(v) for v in range(int(branch.min()), int(branch.max()) + 1)], dtype=object)
    k, b = code // span, names[code % span]
    start = np.searchsorted(k, np.arange(n_keys))
    slot = np.arange(k.size) - start[k]
    text = np.empty(n_keys, dtype=object)
    text[k[slot == 0]] = b[slot == 0]
    for j in range(1, int(slot.max()) + 1 if slot.size else 0):
        at = slot == j
        text[k[at]] = text[k[at]] + ";" + b[at]
    return text


def _check_decay(value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"decay_length_um should be a number > 0 (inf allowed); got {value!r}") from err
    if not v > 0:  # NaN fails too
        raise ParameterError(f"decay_length_um should be a number > 0 (inf allowed); got {value!r}")
    return v


def _class_factor(cls: str, factors: dict[str, float]) -> float:
    if cls in factors:
        return float(factors[cls])
    if cls.startswith("sigma"):
        return float(factors.get("csl", 0.8))
    return float(factors.get("high_angle", 1.0))
