"""The validation standing of the predictor: the held-out table, the targets and the calibration, as JSON.

``slipnet/validation/standing.json`` is written by ``slipnet validate --ship`` from a harness run on the
held-out seeds and read by reports that cite it (:func:`read_standing`). Format
(``format`` = ``"slipnet-validation-standing"``, ``format_version`` = 1)::

    {
      "format": "slipnet-validation-standing", "format_version": 1,
      "statement": "<the reference is slipnet's own model: a consistency test, not a validation ...>",
      "caution": "<slipnet.cautions.CAUTION>",
      "provenance": {"run_on": "YYYY-MM-DD", "slipnet_version": ..., "held_out_seeds": [...],
                     "training_seeds": [...], "weights_fitted_on": ..., "modes": [...], "samples": ...,
                     "ranges": {...}, "reference": {...}, "harness": {...}},
      "table": [{"predictor": "forecast:elastic", "metric": "auc_slip", "mean": 0.9, "sd": 0.03, "n": 12}, ...],
      "targets": [{"id": "field_auc_slip", "text": "...", "predictor": ..., "metric": ..., "value": ...,
                   "threshold": ..., "comparison": ">=", "met": true}, ...],
      "calibration": [{"predictor": "forecast:elastic", "kind": "site", "source": "monte_carlo", "n": ...,
                       "brier": ..., "brier_base_rate": ..., "event_rate": ..., "mean_probability": ...,
                       "bins": [{"p_low": 0.0, "p_high": 0.1, "n": ..., "mean_probability": ...,
                                 "event_rate": ...}, ...]}, ...],
      "timings_s": {"predictor": mean seconds per specimen, ..., "reference": mean seconds}
    }

Predictors are ``forecast:<mode>`` and ``baseline:<name>``; metrics are
:data:`slipnet.validation.METRICS`. A target is met when ``value comparison threshold`` holds (a missing
value is not met).
"""

from __future__ import annotations

import datetime
import json
import os
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet._files import atomic_path
from slipnet.cautions import CAUTION
from slipnet.errors import InputFileError
from slipnet.validation.reference import REFERENCE_STATEMENT

__all__ = ["STANDING_FORMAT", "default_standing_path", "read_standing", "reliability", "standing", "write_standing"]

STANDING_FORMAT = "slipnet-validation-standing"


def default_standing_path() -> Path:
    """The shipped standing file, ``slipnet/validation/standing.json``."""
    return Path(__file__).with_name("standing.json")


def reliability(p, event, bins: int = 10) -> dict:
    """Brier score and reliability-diagram bins of probabilities ``p`` against 0/1 ``event``.

    Brier (1950), Monthly Weather Review 78:1: mean of (p − o)²; the base-rate Brier is that of
    forecasting the observed event rate every time (a forecast with skill scores below it).
    """
    p = np.asarray(p, float)
    o = np.asarray(event, float)
    if p.size == 0:
        return {"n": 0, "brier": float("nan"), "brier_base_rate": float("nan"), "event_rate": float("nan"),
                "mean_probability": float("nan"), "bins": []}
    rate = float(o.mean())
    edges = np.linspace(0.0, 1.0, bins + 1)
    k = np.clip(np.digitize(p, edges[1:-1]), 0, bins - 1)
    out = []
    for b in range(bins):
        m = k == b
        if m.any():
            out.append({"p_low": float(edges[b]), "p_high": float(edges[b + 1]), "n": int(m.sum()),
                        "mean_probability": float(p[m].mean()), "event_rate": float(o[m].mean())})
    return {"n": int(p.size), "brier": float(np.mean((p - o) ** 2)), "brier_base_rate": float(np.mean((rate - o) ** 2)),
            "event_rate": rate, "mean_probability": float(p.mean()), "bins": out}


def _mean(summary: pd.DataFrame, predictor: str, metric: str) -> float:
    row = summary[(summary["predictor"] == predictor) & (summary["metric"] == metric)]
    return float(row["mean"].iloc[0]) if len(row) else float("nan")


def _targets(summary: pd.DataFrame, modes) -> list[dict]:
    base = sorted(p for p in summary["predictor"].unique() if p.startswith("baseline:"))
    out = []

    def add(tid, text, predictor, metric, value, threshold):
        ok = bool(np.isfinite(value) and value >= threshold)
        out.append({"id": tid, "text": text, "predictor": predictor, "metric": metric, "value": float(value),
                    "threshold": float(threshold), "comparison": ">=", "met": ok})

    if "elastic" in modes:
        fe = "forecast:elastic"
        for metric in ("auc_slip", "auc_fip"):
            add(f"field_{metric}", f"localisation field {metric} >= 0.85 (elastic mode)", fe, metric,
                _mean(summary, fe, metric), 0.85)
            for b in base:
                add(f"field_{metric}_vs_{b.split(':')[1]}", f"elastic {metric} above {b} by >= 0.05", fe,
                    f"{metric} - {b}", _mean(summary, fe, metric) - _mean(summary, b, metric), 0.05)
        add("grain_rho", "per-grain Spearman rho >= 0.7 (elastic)", fe, "grain_rho",
            _mean(summary, fe, "grain_rho"), 0.7)
        add("site_hit_rate", "top-5 site hit rate >= 0.7 (elastic)", fe, "site_hit_rate",
            _mean(summary, fe, "site_hit_rate"), 0.7)
        add("barrier_rho", "barrier ranking Spearman rho >= 0.5 against the reference slip drop (elastic)", fe,
            "barrier_rho", _mean(summary, fe, "barrier_rho"), 0.5)
    if "map" in modes:
        fm = "forecast:map"
        for metric in ("auc_slip", "auc_fip"):
            for b in ("baseline:distance", "baseline:nominal_schmid"):
                if b in base:
                    add(f"map_{metric}_vs_{b.split(':')[1]}", f"map-only {metric} above {b} by >= 0.05", fm,
                        f"{metric} - {b}", _mean(summary, fm, metric) - _mean(summary, b, metric), 0.05)
    return out


def standing(result) -> dict:
    """The standing dict (module docstring) of a :class:`~slipnet.validation.ValidationResult`."""
    from slipnet import __version__

    s = result.settings
    calib = []
    c = result.calibration
    for (mode, kind, source), g in c.groupby(["mode", "kind", "source"], sort=True):
        calib.append({"predictor": f"forecast:{mode}", "kind": kind, "source": source,
                      **reliability(g["probability"], g["event"])})
    timings = result.scores.groupby("predictor")["seconds"].mean().to_dict()
    if "reference_seconds" in result.cases.columns:
        timings["reference"] = float(result.cases["reference_seconds"].mean())
    fitted_on = s.get("weights_fitted_on")
    return {
        "format": STANDING_FORMAT, "format_version": 1, "statement": REFERENCE_STATEMENT, "caution": CAUTION,
        "provenance": {"run_on": datetime.date.today().isoformat(), "slipnet_version": __version__,
                       "held_out_seeds": s["seeds"], "training_seeds": s.get("weights_training_seeds"),
                       "weights_fitted_on": fitted_on, "modes": s["modes"], "samples": s["samples"],
                       "mc_seed": s["mc_seed"], "ranges": s["ranges"], "reference": s["reference"],
                       "harness": s["harness"]},
        "table": result.summary.to_dict(orient="records"),
        "targets": _targets(result.summary, s["modes"]),
        "calibration": calib,
        "timings_s": {k: float(v) for k, v in timings.items()},
    }


def write_standing(result_or_dict, path: str | os.PathLike | None = None) -> Path:
    """Write the standing JSON (default: the shipped ``slipnet/validation/standing.json``), atomically."""
    data = result_or_dict if isinstance(result_or_dict, dict) else standing(result_or_dict)
    target = Path(default_standing_path() if path is None else path)
    with atomic_path(target) as tmp:
        tmp.write_text(json.dumps(data, indent=1, default=float) + "\n", encoding="utf-8")
    return target


def read_standing(path: str | os.PathLike | None = None) -> dict:
    """The standing dict from ``path`` (default: the shipped file); checks the format.

    Raises
    ------
    InputFileError
        A missing file, not JSON, or not a standing file of format version 1.
    """
    p = Path(default_standing_path() if path is None else path)
    try:
        data = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as err:
        raise InputFileError(f"standing file {p} is not readable JSON ({err}); run `slipnet validate --ship`") from err
    if not isinstance(data, dict) or data.get("format") != STANDING_FORMAT or data.get("format_version") != 1:
        raise InputFileError(f"{p} should be a {STANDING_FORMAT} file of format_version 1")
    return data
