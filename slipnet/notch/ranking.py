"""Ranking evaluated candidates: normalised objectives, weighted scores, Pareto fronts."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from slipnet.columns import NOTCH_PLAN_LEADING
from slipnet.errors import ParameterError
from slipnet.notch.settings import NotchPlan, PlanSettings

__all__ = ["finish_plan", "pareto_ranks", "rank_candidates"]


def _normalised(table: pd.DataFrame, weights: Mapping[str, float]) -> pd.DataFrame:
    """Each weighted objective mapped to [0, 1], 1 = best in the direction its weight's sign asks for."""
    out = pd.DataFrame(index=table.index)
    for name, w in weights.items():
        if w == 0 or name not in table:
            continue
        v = table[name].to_numpy(dtype=float).copy()
        finite = np.isfinite(v)
        if finite.any():
            lo, hi = v[finite].min(), v[finite].max()
            # inf means "never reached": the worst value in the larger-is-better sense of a distance
            v = np.where(np.isposinf(v), hi + (hi - lo if hi > lo else 1.0), v)
            v = np.where(np.isneginf(v) | np.isnan(v), lo - (hi - lo if hi > lo else 1.0), v)
            lo, hi = v.min(), v.max()
            z = (v - lo) / (hi - lo) if hi > lo else np.full(v.shape, 0.5)
        else:
            z = np.full(v.shape, 0.5)
        out[name] = z if w > 0 else 1.0 - z
    return out


def pareto_ranks(values: np.ndarray, larger_better: Sequence[bool]) -> np.ndarray:
    """Non-dominated sorting: rank 1 for the Pareto set, 2 for the next front, and so on.

    Parameters
    ----------
    values : (n, k) ndarray
        Objective values (NaN counts as worst).
    larger_better : k booleans
        Direction of each objective.

    Returns
    -------
    (n,) int ndarray

    Notes
    -----
    O(k·n²) comparisons, vectorised; fine for the hundreds of candidates of a plan.
    """
    v = np.asarray(values, dtype=float).copy()
    if v.ndim != 2:
        raise ParameterError(f"values should be a (n, k) array; got shape {v.shape}")
    sign = np.where(np.asarray(larger_better, dtype=bool), 1.0, -1.0)
    v = v * sign
    v = np.where(np.isnan(v), -np.inf, v)
    ge = np.all(v[:, None, :] >= v[None, :, :], axis=2)
    gt = np.any(v[:, None, :] > v[None, :, :], axis=2)
    dominates = ge & gt  # [i, j]: i dominates j
    ranks = np.zeros(len(v), dtype=int)
    left = np.ones(len(v), dtype=bool)
    r = 0
    while left.any():
        r += 1
        dominated = (dominates[left][:, left]).any(axis=0)
        front = np.flatnonzero(left)[~dominated]
        ranks[front] = r
        left[front] = False
    return ranks


def rank_candidates(table: pd.DataFrame, weights: Mapping[str, float], *, method: str = "weighted") -> pd.DataFrame:
    """Add ``plan_score``, the ``term_<objective>`` columns and ``rank`` (1 = best) to a candidate table.

    ``method="weighted"``: plan_score = Σ |w| · normalised objective / Σ |w| (each objective mapped to
    [0, 1] over the candidates, 1 = best). ``method="pareto"``: ``rank`` is the Pareto front number
    (ties share a rank) and ``plan_score`` the weighted score, used to order within a front.
    """
    if method not in ("weighted", "pareto"):
        raise ParameterError(f"method should be 'weighted' or 'pareto'; got {method!r}")
    t = table.copy()
    valid = t["valid"].to_numpy(dtype=bool) if "valid" in t else np.ones(len(t), bool)
    z = _normalised(t[valid], weights)
    wsum = sum(abs(w) for n, w in weights.items() if n in z)
    t["plan_score"] = np.nan
    for name in z:
        t[f"term_{name}"] = np.nan
        t.loc[valid, f"term_{name}"] = z[name].to_numpy()
        add = abs(weights[name]) * z[name].to_numpy() / wsum
        t.loc[valid, "plan_score"] = t.loc[valid, "plan_score"].fillna(0.0) + add
        t[f"weight_{name}"] = weights[name]
    if method == "weighted":
        order = t["plan_score"].rank(ascending=False, method="min", na_option="bottom")
        t["rank"] = order.astype(int)
    else:
        names = [n for n in weights if n in t and weights[n] != 0]
        ranks = np.full(len(t), len(t) + 1)
        if valid.any():
            ranks[valid] = pareto_ranks(t.loc[valid, names].to_numpy(dtype=float), [weights[n] > 0 for n in names])
        t["pareto_front"] = ranks
        t["rank"] = ranks
    return t.sort_values(["rank", "plan_score"], ascending=[True, False], kind="stable").reset_index(drop=True)


def _sample_top_probability(rows: list[dict], weights: Mapping[str, float], top_k: int) -> np.ndarray:
    """Share of Monte Carlo samples in which each candidate ranks within the top k."""
    n_s = min((len(r["samples"]) for r in rows), default=0)
    hits = np.zeros(len(rows))
    if n_s == 0:
        return np.full(len(rows), np.nan)
    for k in range(n_s):
        t = pd.DataFrame([r["samples"][k] for r in rows])
        if "valid" not in t or not t["valid"].any():
            continue
        ranked = rank_candidates(t.assign(_i=np.arange(len(rows))), weights)
        best = ranked.loc[ranked["rank"] <= top_k, "_i"].to_numpy(dtype=int)
        hits[best] += 1
    return hits / n_s


def finish_plan(rows: list[dict], s: PlanSettings, *, method: str = "weighted", top_k: int = 3) -> NotchPlan:
    """Rank evaluated candidate rows (from :func:`evaluate_candidate`) into the plan table."""
    p_top = _sample_top_probability(rows, s.weights, int(top_k)) if s.samples else None
    table = pd.DataFrame([{k: v for k, v in r.items() if k != "samples"} for r in rows])
    if p_top is not None:
        table["p_top_k"] = p_top
    ranked = rank_candidates(table, s.weights, method=method)
    front = list(NOTCH_PLAN_LEADING)
    ranked = ranked[front + [c for c in ranked.columns if c not in front]]
    notes = []
    ratio = s.notch.depth_um / s.notch.root_radius_um
    if not 1.0 <= ratio <= 361.0:
        notes.append(f"depth/root radius = {ratio:g} lies outside the 1–361 range of the K_t chart fit")
    if s.concentration == "full_field":
        notes.append("K_t from full-field solves: linear anisotropic elasticity, grains as columns through the "
                     "thickness, periodic cell with a compliant margin beyond the notched edge (a free surface)")
    load = np.asarray(s.load_axis)
    inplane = math.hypot(load[0], load[1])
    if len(table) and inplane > 1e-9:
        cos = np.abs(table["normal_x"] * load[0] + table["normal_y"] * load[1]) / inplane
        if np.any(cos > math.cos(math.radians(45.0))):
            notes.append("some notches run within 45° of the in-plane load axis: they would not open in mode I; "
                         "notch an edge across the load")
    return NotchPlan(ranked, s, method, int(top_k), tuple(notes))
