"""Monte Carlo uncertainty of a crack forecast: how often each barrier and site comes back.

Called by :func:`slipnet.forecast.forecast_crack` when ``samples > 0``. Each sample perturbs the
grain mean orientations (a rotation of normal-distributed angle about a uniformly random axis),
the load axis (rotation about a random perpendicular axis), the tip position (Gaussian, µm) and
every score weight (log-normal), then repeats the deterministic forecast without the field.
Per nominal barrier it reports the fraction of samples whose main path crosses it (``p_on_path``)
and in which it ranks within the top k (``p_top_k``); per nominal site (grain, blocking grain)
the fraction in which it appears (``p_present``) and ranks within the top k (``p_top_k``).
Samples draw from one ``numpy.random.Generator`` seeded once, in a fixed order, so the same seed
gives the same numbers.
"""

from __future__ import annotations

from dataclasses import fields, replace

import numpy as np
import pandas as pd

from slipnet.crystal.perturb import perturb_sample
from slipnet.forecast._core import _start_grain
from slipnet.forecast._run import run_forecast_pass

__all__ = ["monte_carlo"]


def _jitter(wobj, sigma: float, rng: np.random.Generator):
    vals = {f.name: getattr(wobj, f.name) for f in fields(wobj)}
    fac = np.exp(rng.normal(0.0, sigma, size=len(vals))) if sigma > 0 else np.ones(len(vals))
    return replace(wobj, **{k: float(v * f) for (k, v), f in zip(vals.items(), fac, strict=True)})


def _pair(a, b) -> tuple[int, int]:
    return (min(int(a), int(b)), max(int(a), int(b)))


def monte_carlo(fc, geo, planes, quats, load, schmid, tip, opts, *, samples: int, seed: int, noise, top_k: int,
                amplitude: float, decay: float, bw, cf, site_radius: float | None = None):
    """Repeat the forecast under perturbed inputs; return ``fc`` with probabilities and ``samples``.

    The arguments are the prepared inputs of :func:`slipnet.forecast.forecast_crack`. A perturbed
    tip falling outside the map or on an unindexed point is put back at the nominal tip (counted
    in the ``tip_reset`` column).
    """
    rng = np.random.default_rng(seed)
    bar_keys = [_pair(a, b) for a, b in zip(fc.barriers["grain_a"], fc.barriers["grain_b"], strict=True)]
    site_keys = [(int(a), int(b)) for a, b in zip(fc.sites["grain"], fc.sites["blocking_grain"], strict=True)]
    on_path = dict.fromkeys(bar_keys, 0)
    bar_top = dict.fromkeys(bar_keys, 0)
    site_in = dict.fromkeys(site_keys, 0)
    site_top = dict.fromkeys(site_keys, 0)
    rows = []
    for s in range(samples):
        q, ld, dt = perturb_sample(rng, quats, noise.orientation_deg, load, noise.load_deg, tip, noise.tip_um)
        if schmid is not None:  # local factors come from a solve at the nominal load: no misalignment
            ld = load
        t = tip + dt
        pw = _jitter(opts.pw, noise.weights, rng)
        bws = _jitter(bw, noise.weights, rng)
        reset = geo.label_at(t[0], t[1]) < 0
        if reset:
            t = tip.copy()
        g0 = _start_grain(geo, t, opts.d_ref)
        o = replace(opts, pw=pw)
        res = run_forecast_pass(geo, planes, q, ld, schmid, t, g0, o, amplitude=amplitude, decay=decay, bw=bws, cf=cf,
                    want_field=False, sigma_um=1.0, site_radius=site_radius)
        b = res["barriers"]
        keys = [_pair(a, c) for a, c in zip(b["grain_a"], b["grain_b"], strict=True)]
        for k, onp, rk in zip(keys, b["on_path"], b["rank"], strict=True):
            if k in on_path:
                on_path[k] += bool(onp)
                bar_top[k] += bool(rk <= top_k)
        st = res["sites"]
        for a, c, rk in zip(st["grain"], st["blocking_grain"], st["rank"], strict=True):
            k = (int(a), int(c))
            if k in site_in:
                site_in[k] += 1
                site_top[k] += bool(rk <= top_k)
        path = res["path"]
        rows.append({
            "sample": s, "tip_x_um": float(t[0]), "tip_y_um": float(t[1]), "tip_reset": bool(reset),
            "load_x": float(ld[0]), "load_y": float(ld[1]), "load_z": float(ld[2]),
            "path_length_um": float(path["length_um"].sum()), "n_crossings": int((res["crossings"].get(
                "branch", pd.Series(dtype=int)) == 0).sum()) if len(res["crossings"]) else 0,
            "stop_reason": res["stop"],
            "top_barrier_id": int(b["boundary_id"].iloc[0]) if len(b) else -1,
            "end_x_um": float(path["x1_um"].iloc[-1]) if len(path) else float(t[0]),
            "end_y_um": float(path["y1_um"].iloc[-1]) if len(path) else float(t[1]),
        })
    n = float(samples)
    barriers = fc.barriers.copy()
    barriers["p_on_path"] = [on_path[k] / n for k in bar_keys]
    barriers["p_top_k"] = [bar_top[k] / n for k in bar_keys]
    sites = fc.sites.copy()
    sites["p_present"] = [site_in[k] / n for k in site_keys]
    sites["p_top_k"] = [site_top[k] / n for k in site_keys]
    return replace(fc, barriers=barriers, sites=sites, samples=pd.DataFrame(rows))
