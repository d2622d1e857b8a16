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
    branch = col.get("branch", np.zeros(n, int))
    ga, gb = col["grain_a"].astype(int), col["grain_b"].astype(int)
    keys = [(min(a, b), max(a, b)) for a, b in zip(ga, gb, strict=True)]
    # one row per boundary: its main-path crossing if any, else the first alternative crossing
    first: dict = {}
    seen: dict = {}
    for i in np.lexsort((col["distance_um"], branch)):
        k = keys[i]
        seen.setdefault(k, set()).add(int(branch[i]))
        first.setdefault(k, i)
    idx = np.array(list(first.values()), dtype=int)
    mis = col.get("misorientation_deg", np.full(n, np.nan))
    out = pd.DataFrame({
        "boundary_id": col["boundary_id"][idx].astype(int),
        "grain_a": ga[idx], "grain_b": gb[idx],
        "twist_deg": col["twist_deg"][idx].astype(float), "tilt_deg": col["tilt_deg"][idx].astype(float),
        "m_prime": col["m_prime"][idx].astype(float), "distance_um": col["distance_um"][idx].astype(float),
        "on_path": [0 in seen[keys[i]] for i in idx],
        "boundary_class": col["boundary_class"][idx].astype(str),
        "misorientation_deg": mis[idx].astype(float),
        "schmid_in": col["schmid_in"][idx].astype(float), "schmid_out": col["schmid_out"][idx].astype(float),
        "x_um": col["x_um"][idx].astype(float), "y_um": col["y_um"][idx].astype(float),
        "branches": [";".join(str(b) for b in sorted(seen[keys[i]])) for i in idx],
    })
    out["term_twist"] = np.clip(out["twist_deg"].to_numpy() / 90.0, 0.0, 1.0)
    out["term_transmission"] = np.clip(1.0 - out["m_prime"].to_numpy(), 0.0, 1.0)
    out["term_class"] = [_class_factor(c, cf) for c in out["boundary_class"]]
    out["term_schmid_drop"] = np.clip((out["schmid_in"].to_numpy() - out["schmid_out"].to_numpy()) / _MAX_SCHMID,
                                      0.0, 1.0)
    out["relevance"] = np.exp(-out["distance_um"] / decay_length_um)
    out["weight_twist"] = w.twist
    out["weight_transmission"] = w.transmission
    out["weight_class"] = w.boundary_class
    out["weight_schmid_drop"] = w.schmid_drop
    wsum = w.twist + w.transmission + w.boundary_class + w.schmid_drop
    if wsum <= 0:
        raise ParameterError(f"barrier weights should have a positive sum; got {w}")
    raw = (w.twist * out["term_twist"] + w.transmission * out["term_transmission"]
           + w.boundary_class * out["term_class"] + w.schmid_drop * out["term_schmid_drop"]) / wsum
    out["barrier_score"] = out["relevance"] * raw
    out = out.sort_values(["barrier_score", "distance_um"], ascending=[False, True], kind="stable")
    out = out.reset_index(drop=True)
    out["rank"] = np.arange(1, len(out) + 1)
    return out[cols]


_MAX_SCHMID = 0.5  # largest possible Schmid factor: normalises the Schmid terms to [0, 1]


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
