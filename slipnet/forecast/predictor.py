"""The fitted predictor: weights read from a shipped JSON file, and the probabilities they give.

The weights are fitted by :func:`slipnet.validation.fit_weights` on the training specimens of the
validation harness and shipped as ``slipnet/forecast/weights.json`` (plain JSON, never pickle) with
their provenance (seeds, ranges, reference settings, package version). Refit with
``slipnet validate --refit``.

Three models per forecast mode (``map``, ``elastic``, ``cyclic``), each a logistic regression on
standardised features (``z = (x − mean) / scale``; ``p = 1 / (1 + exp(−(b + w·z)))``):

``field``
    P(point is among the reference's top 10 % of accumulated slip within the horizon), from the
    point features of :mod:`slipnet.forecast.features`. This is the localisation field.
``sites``
    P(a hot reference point lies within the hit radius of a site), from the logit of the field at
    the site (Platt scaling of the field's peaks).
``barriers``
    P(the reference's accumulated slip drops by at least the drop threshold across the boundary),
    from the barrier features (:data:`BARRIER_FEATURES`).

Each model also carries bootstrap replicates of its coefficients (training specimens resampled
with replacement), which the Monte Carlo draws from to carry the fit's own uncertainty.

File format (``format`` = ``"slipnet-forecast-weights"``, ``format_version`` = 1)::

    {"format": ..., "format_version": 1, "provenance": {...},
     "hit_radius_um": ..., "site_separation_um": ..., "drop_radius_um": ..., "drop_threshold": ...,
     "models": {"<mode>": {"field": MODEL, "sites": MODEL, "barriers": MODEL}}}
    MODEL = {"features": [names], "mean": [...], "scale": [...], "coef": [...], "intercept": b,
             "bootstrap_coef": [[...], ...], "bootstrap_intercept": [...], "fit": {...}}
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from slipnet.errors import InputFileError, ParameterError

__all__ = ["BARRIER_FEATURES", "SITE_FEATURES", "WEIGHTS_FORMAT", "Model", "Weights", "default_weights_path",
           "load_weights"]

WEIGHTS_FORMAT = "slipnet-forecast-weights"
#: Features of the barrier model (per boundary crossing; see :func:`slipnet.forecast.barrier_features`).
BARRIER_FEATURES = ("field_drop", "tau_drop", "untransmitted", "twist", "schmid_drop", "boundary_class",
                    "residual_burgers", "log_distance")
#: Features of the site model.
SITE_FEATURES = ("field_logit",)


@dataclass(frozen=True)
class Model:
    """One logistic model: feature names, standardisation, coefficients and bootstrap replicates."""

    features: tuple[str, ...]
    mean: np.ndarray
    scale: np.ndarray
    coef: np.ndarray
    intercept: float
    bootstrap_coef: np.ndarray
    bootstrap_intercept: np.ndarray
    fit: dict

    @classmethod
    def from_dict(cls, d: dict, where: str) -> Model:
        try:
            feats = tuple(str(f) for f in d["features"])
            k = len(feats)
            mean = np.asarray(d["mean"], float).reshape(k)
            scale = np.asarray(d["scale"], float).reshape(k)
            coef = np.asarray(d["coef"], float).reshape(k)
            bc = np.asarray(d.get("bootstrap_coef", []), float).reshape(-1, k)
            bi = np.asarray(d.get("bootstrap_intercept", []), float).reshape(-1)
            b = float(d["intercept"])
        except (KeyError, TypeError, ValueError) as err:
            raise InputFileError(f"{where}: a model should have features, mean, scale, coef and intercept of matching "
                                 f"lengths ({err})") from err
        if np.any(scale <= 0) or not np.all(np.isfinite(np.concatenate([mean, scale, coef, [b]]))):
            raise InputFileError(f"{where}: scales should be > 0 and every number finite")
        if bc.shape[0] != bi.shape[0]:
            raise InputFileError(f"{where}: bootstrap_coef and bootstrap_intercept should have as many rows")
        return cls(feats, mean, scale, coef, b, bc, bi, dict(d.get("fit", {})))

    def as_dict(self) -> dict:
        return {"features": list(self.features), "mean": self.mean.tolist(), "scale": self.scale.tolist(),
                "coef": self.coef.tolist(), "intercept": self.intercept,
                "bootstrap_coef": self.bootstrap_coef.tolist(),
                "bootstrap_intercept": self.bootstrap_intercept.tolist(), "fit": self.fit}

    def logit(self, x: np.ndarray, replicate: int | None = None) -> np.ndarray:
        """Linear predictor of rows ``x`` (…, k); ``replicate`` picks a bootstrap coefficient set."""
        c, b = self.coef, self.intercept
        if replicate is not None and self.bootstrap_coef.shape[0]:
            r = int(replicate) % self.bootstrap_coef.shape[0]
            c, b = self.bootstrap_coef[r], float(self.bootstrap_intercept[r])
        z = (np.asarray(x, float) - self.mean) / self.scale
        return b + z @ c

    def probability(self, x: np.ndarray, replicate: int | None = None) -> np.ndarray:
        """Logistic probability of rows ``x``."""
        return 1.0 / (1.0 + np.exp(-np.clip(self.logit(x, replicate), -40.0, 40.0)))

    @property
    def n_replicates(self) -> int:
        return int(self.bootstrap_coef.shape[0])


@dataclass(frozen=True)
class Weights:
    """The fitted models of every mode, with the harness settings they were fitted under."""

    models: dict
    provenance: dict
    hit_radius_um: float
    site_separation_um: float
    drop_radius_um: float
    drop_threshold: float
    source: str

    def model(self, mode: str, kind: str) -> Model:
        try:
            return self.models[mode][kind]
        except KeyError as err:
            raise ParameterError(f"the weights file {self.source} has no {kind!r} model for mode {mode!r}; refit with "
                                 "`slipnet validate --refit` or choose one of the modes it has: "
                                 f"{sorted(self.models)}") from err

    @classmethod
    def from_dict(cls, d: dict, source: str = "<dict>") -> Weights:
        if not isinstance(d, dict) or d.get("format") != WEIGHTS_FORMAT:
            raise InputFileError(f"{source} should be a slipnet weights file (format {WEIGHTS_FORMAT!r}); got "
                                 f"format {d.get('format') if isinstance(d, dict) else type(d).__name__!r}")
        if int(d.get("format_version", 0)) != 1:
            raise InputFileError(f"{source}: format_version should be 1; got {d.get('format_version')!r}")
        models = {}
        for mode, kinds in dict(d.get("models", {})).items():
            models[str(mode)] = {str(k): Model.from_dict(v, f"{source} models.{mode}.{k}") for k, v in kinds.items()}
        try:
            return cls(models=models, provenance=dict(d.get("provenance", {})),
                       hit_radius_um=float(d["hit_radius_um"]), site_separation_um=float(d["site_separation_um"]),
                       drop_radius_um=float(d["drop_radius_um"]), drop_threshold=float(d["drop_threshold"]),
                       source=source)
        except (KeyError, TypeError, ValueError) as err:
            raise InputFileError(f"{source} should give hit_radius_um, site_separation_um, drop_radius_um and "
                                 f"drop_threshold ({err})") from err

    def as_dict(self) -> dict:
        return {"format": WEIGHTS_FORMAT, "format_version": 1, "provenance": self.provenance,
                "hit_radius_um": self.hit_radius_um, "site_separation_um": self.site_separation_um,
                "drop_radius_um": self.drop_radius_um, "drop_threshold": self.drop_threshold,
                "models": {m: {k: v.as_dict() for k, v in kinds.items()} for m, kinds in self.models.items()}}


def default_weights_path() -> Path:
    """The shipped weights file, ``slipnet/forecast/weights.json``."""
    return Path(__file__).with_name("weights.json")


_CACHE: dict = {}


def load_weights(source=None) -> Weights:
    """The fitted weights: a :class:`Weights` (returned as is), a JSON file path, or None (the shipped file)."""
    if isinstance(source, Weights):
        return source
    path = default_weights_path() if source is None else Path(os.fspath(source))
    key = (str(path), path.stat().st_mtime_ns if path.exists() else None)
    if key in _CACHE:
        return _CACHE[key]
    if not path.exists():
        raise InputFileError(f"weights file {path} not found; fit one with `slipnet validate --refit` or give "
                             "weights=PATH")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as err:
        raise InputFileError(f"weights file {path} is not readable JSON ({err})") from err
    w = Weights.from_dict(data, str(path))
    _CACHE.clear()
    _CACHE[key] = w
    return w
