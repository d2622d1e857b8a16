"""Baseline predictors the forecast must beat, each a plain field on the map grid.

* ``distance``: closeness to the crack tip, −r (the field a forecast with no microstructure gives);
* ``nominal_schmid``: each grain's largest effective Schmid factor under the uniform applied stress;
* ``local_schmid_grain``: grain means of the local effective Schmid factors of a plain periodic elastic
  solve of the map (no crack cut in; the old ``stress_field=`` input of the forecast);
* ``elastic_max_shear``: the largest effective resolved shear per point of that same plain solve.
"""

from __future__ import annotations

import numpy as np

__all__ = ["BASELINES", "baseline_fields"]

BASELINES = ("distance", "nominal_schmid", "local_schmid_grain", "elastic_max_shear")


def _effective(tau: np.ndarray, systems) -> np.ndarray:
    return np.abs(tau) / np.where(tau >= 0, systems.crss, systems.crss_reverse)


def baseline_fields(gg, tip, load_axis, *, stress_amplitude: float = 200.0, systems=None) -> dict[str, np.ndarray]:
    """The :data:`BASELINES` fields of a map, ``{name: (ny, nx)}`` (0 off the metal)."""
    from slipnet.crystal.slip_systems import schmid_factors
    from slipnet.stress import default_systems, grain_schmid_factors, local_resolved_shear, solve_elastic

    omap = gg.omap
    systems = default_systems(omap, systems)
    labels = np.asarray(gg.labels, np.int64)
    lab0 = np.maximum(labels, 0)
    ok = labels >= 0
    x, y = omap.coordinates()
    out = {"distance": -np.hypot(x - float(tip[0]), y - float(tip[1]))}
    mq = np.asarray(gg.mean_quats, float)
    good = np.all(np.isfinite(mq), axis=1)
    nom = np.zeros(mq.shape[0])
    if good.any():
        nom[good] = _effective(np.asarray(schmid_factors(mq[good], load_axis, systems)), systems).max(axis=1)
    out["nominal_schmid"] = np.where(ok, nom[lab0], 0.0)
    field = solve_elastic(omap, load_axis, float(stress_amplitude), unindexed="auto")
    loc = np.nan_to_num(_effective(np.nan_to_num(np.asarray(grain_schmid_factors(field, gg, systems))), systems))
    g = np.zeros(mq.shape[0])
    g[: loc.shape[0]] = loc.max(axis=1)[: mq.shape[0]]
    out["local_schmid_grain"] = np.where(ok, g[lab0], 0.0)
    tau = np.nan_to_num(local_resolved_shear(field, omap, systems))
    out["elastic_max_shear"] = np.where(ok & ~field.compliant, _effective(tau, systems).max(axis=2)
                                        / float(stress_amplitude), 0.0)
    return out
