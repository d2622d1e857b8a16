"""The objectives of one candidate notch: nominal values and Monte Carlo bands."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import replace

import numpy as np
import pandas as pd

from slipnet.crystal.perturb import perturb_sample
from slipnet.crystal.slip_systems import effective_schmid, schmid_factors, slip_systems
from slipnet.errors import SlipnetError
from slipnet.forecast.crack import forecast_crack
from slipnet.growth import GrowthParameters, simulate_growth
from slipnet.notch.kt import full_field_kt, notch_stress_factor, peterson_kt
from slipnet.notch.settings import OBJECTIVES, Candidate, PlanSettings

__all__ = ["evaluate_candidate"]


def _start_point(gg, root: np.ndarray, normal: np.ndarray) -> np.ndarray | None:
    """The first point on a grain (not on unindexed ground) going inwards from the root."""
    step = 0.5 * gg.omap.step
    d = np.arange(0, 40) * step
    pts = root[None, :] + d[:, None] * normal[None, :]
    lab = gg.grain_at(pts[:, 0], pts[:, 1])
    hit = np.flatnonzero(lab >= 0)
    return None if hit.size == 0 else pts[hit[0]]


def _objectives(gg, root, normal, load, s: PlanSettings, systems, kt: float, quats=None,
                all_sizes: bool = True) -> dict:
    """Nominal objectives of one notch root (one forecast, one growth run per crack size)."""

    out: dict = {"valid": False, "reason": ""}
    tip = _start_point(gg, root, normal)
    if tip is None:
        out["reason"] = "no grain at the notch root"
        return out
    g = gg if quats is None else replace(gg, mean_quats=quats)
    near = gg.grains_within(tip[0], tip[1], s.notch.root_radius_um) or [gg.grain_at(tip[0], tip[1])]
    mq = np.asarray(g.mean_quats)[np.asarray(near)]
    m_eff = effective_schmid(schmid_factors(mq, load, systems), systems)
    best = int(np.argmax(m_eff.max(axis=1)))
    out["root_grain"] = int(near[best])
    out["root_grains"] = " ".join(str(v) for v in near)
    out["root_schmid"] = float(m_eff.max())
    out["initiation_drive"] = float(m_eff.max()) * kt
    try:
        # the candidate notch is not cut into the map, so a stress solve would not see it: the map-only
        # forecast (the quick-sweep mode) and the hand-set resistance score the strengths below read
        fc = forecast_crack(g, tip, normal, load, horizon=s.window_um, stress_amplitude=s.stress_amplitude,
                            stress_ratio=s.stress_ratio, systems=systems, samples=0, mode="map",
                            barrier_model="weights", n_sites=0)
    except SlipnetError as err:
        out["reason"] = f"forecast failed: {err}"
        return out
    bar = fc.barriers
    on = bar[bar["on_path"].astype(bool) & (bar["distance_um"] <= s.window_um)] if len(bar) else bar
    strength = (on["barrier_score"] / on["relevance"].clip(lower=1e-12)).clip(upper=1.0) if len(on) else pd.Series([])
    out["barriers_in_window"] = len(on)
    out["barrier_strength_in_window"] = float(strength.sum()) if len(on) else 0.0
    strong = on["distance_um"][strength.to_numpy() >= s.strong_barrier] if len(on) else pd.Series([])
    out["first_barrier_um"] = float(strong.min()) if len(strong) else math.inf
    out["path_length_um"] = fc.length_um
    out["stop_reason"] = fc.stop_reason
    if s.target:
        out["target_offset_um"] = _target_offset(fc, s.target)
    # growth from each initial crack size, at the notch-magnified amplitude
    kw = dict(s.growth)
    sigma_f = float(kw.get("friction_stress", GrowthParameters().friction_stress))
    k = notch_stress_factor(kt, s.notch.depth_um, 0.5 * s.window_um)
    amp = min(s.stress_amplitude * k, 0.95 * sigma_f)
    out["effective_amplitude_mpa"] = amp
    length = fc.length_um
    arrested = False
    sizes = s.crack_sizes_um if all_sizes else s.crack_sizes_um[:1]
    for j, a0 in enumerate(sizes):
        key = f"log10_cycles_a{a0:g}"
        if length <= a0:
            out[key] = math.nan
            continue
        try:
            res = simulate_growth(fc, amp, initial_length=a0, final_length=min(s.window_um, length), n_points=300,
                                  samples=0, **kw)
        except SlipnetError as err:
            out["reason"] = f"growth failed: {err}"
            out[key] = math.nan
            continue
        cyc = float(res.profile["cycles"].iloc[-1])
        out[key] = math.log10(cyc) if math.isfinite(cyc) and cyc > 0 else math.inf
        if j == 0:
            arrested = math.isfinite(res.arrest_length_um)
            out["arrest_length_um"] = res.arrest_length_um
    out["log10_cycles_to_window"] = out.get(f"log10_cycles_a{s.crack_sizes_um[0]:g}", math.nan)
    out["arrest_probability"] = float(arrested)
    out["valid"] = True
    return out


def _target_offset(fc, target: Mapping) -> float:
    d = target["distance_um"]
    cr = fc.crossings
    if len(cr) == 0:
        return math.inf
    main = cr[cr["branch"] == 0] if "branch" in cr else cr
    if "boundary" in target:
        a, b = (int(v) for v in target["boundary"])
        ga, gb = main["grain_a"], main["grain_b"]
        hit = main[((ga == a) & (gb == b)) | ((ga == b) & (gb == a))]
    else:
        hit = main[main["grain_b"] == int(target["grain"])]
    if len(hit) == 0:
        path = fc.path
        if "grain" in target and len(path) and int(path["grain"].iloc[0]) == int(target["grain"]):
            return abs(0.0 - d)
        return math.inf
    return float(abs(hit["distance_um"].min() - d))


def evaluate_candidate(gg, cand: Candidate, s: PlanSettings, systems=None, *, sample_seed=None) -> dict:
    """Objectives of one candidate: nominal values, and Monte Carlo bands when ``s.samples > 0``.

    Parameters
    ----------
    gg
        The grain graph.
    cand
        The candidate.
    s
        The plan settings.
    systems
        Slip systems (default: those of the map's first phase).
    sample_seed
        Entropy for this candidate's samples (default derived from ``s.seed`` and the index), so
        results do not depend on the order or place in which candidates are evaluated.

    Returns
    -------
    dict
        One table row: candidate geometry, ``kt``, each objective, and with samples
        ``<objective>_p05`` / ``_p50`` / ``_p95`` plus ``arrest_probability`` from the samples;
        ``sample_scores`` (a list, used to rank per sample) is removed by :func:`plan_notch`.
    """
    if systems is None:
        systems = slip_systems(gg.omap.phases[0].structure)
    kt_chart = float(peterson_kt(s.notch.depth_um, s.notch.root_radius_um, s.notch.opening_deg))
    kt = full_field_kt(gg, cand, s) if s.concentration == "full_field" else kt_chart
    root = np.array([cand.root_x, cand.root_y])
    normal = np.array([cand.normal_x, cand.normal_y])
    load = np.asarray(s.load_axis, dtype=float)
    row = {"candidate": cand.index, "root_x_um": cand.root_x, "root_y_um": cand.root_y, "edge_x_um": cand.edge_x,
           "edge_y_um": cand.edge_y, "normal_x": cand.normal_x, "normal_y": cand.normal_y, "kt": kt,
           "kt_chart": kt_chart}
    row.update(_objectives(gg, root, normal, load, s, systems, kt))
    row["samples"] = []
    if s.samples and row["valid"]:
        ss = np.random.SeedSequence([int(s.seed), int(cand.index)] if sample_seed is None else sample_seed)
        rng = np.random.default_rng(ss)
        tangent = np.array([-normal[1], normal[0]])
        base_q = np.asarray(gg.mean_quats)
        for _ in range(s.samples):
            q, ld, dr = perturb_sample(rng, base_q, s.orientation_noise_deg, load, s.load_misalignment_deg, root,
                                       s.position_error_um)
            r = root + dr[0] * tangent + dr[1] * normal
            row["samples"].append(_objectives(gg, r, normal, ld, s, systems, kt, quats=q, all_sizes=False))
        samp = pd.DataFrame(row["samples"])
        ok = samp[samp["valid"]] if len(samp) else samp
        for name in OBJECTIVES:
            if name in ok and name != "arrest_probability":
                v = ok[name].to_numpy(dtype=float)
                v = v[~np.isnan(v)]
                if v.size:
                    # order statistics, not interpolation: a sample may be inf ("never reached")
                    q = np.quantile(v, [0.05, 0.5, 0.95], method="inverted_cdf")
                    row[f"{name}_p05"], row[f"{name}_p50"], row[f"{name}_p95"] = (float(x) for x in q)
        if len(ok):
            row["arrest_probability"] = float(ok["arrest_probability"].mean())
        row["valid_samples"] = len(ok)
    return row
