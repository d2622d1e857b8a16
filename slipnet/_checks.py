"""Shared argument checks that raise :class:`~slipnet.errors.ParameterError` with clear messages."""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np

from slipnet.errors import ParameterError


def check_positive(value: float, name: str, *, allow_zero: bool = False) -> float:
    """Return ``float(value)`` or raise if it is not a finite positive number."""
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be a number; got {value!r}") from err
    if not math.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        bound = ">= 0" if allow_zero else "> 0"
        raise ParameterError(f"{name} should be a finite number {bound}; got {value!r}")
    return v


def check_range(value: float, name: str, lo: float, hi: float, *, inclusive: bool = True) -> float:
    """Return ``float(value)`` or raise if it is outside ``[lo, hi]`` (or ``(lo, hi)``)."""
    try:
        v = float(value)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be a number; got {value!r}") from err
    ok = (lo <= v <= hi) if inclusive else (lo < v < hi)
    if not math.isfinite(v) or not ok:
        br = ("[", "]") if inclusive else ("(", ")")
        raise ParameterError(f"{name} should lie in {br[0]}{lo}, {hi}{br[1]}; got {value!r}")
    return v


def check_choice(value: str, name: str, choices: Iterable[str]) -> str:
    """Return ``value`` (lower-cased) or raise if it is not one of ``choices``."""
    choices = tuple(choices)
    v = str(value).lower()
    if v not in choices:
        raise ParameterError(f"{name} should be one of {', '.join(map(repr, choices))}; got {value!r}")
    return v


def check_vector(value, name: str, size: int = 3) -> np.ndarray:
    """Return ``value`` as a unit float vector of length ``size``, refusing zero or NaN vectors."""
    try:
        v = np.asarray(value, dtype=float).reshape(-1)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be {size} numbers; got {value!r}") from err
    if v.size == 2 and size == 3:
        v = np.array([v[0], v[1], 0.0])
    if v.size != size or not np.all(np.isfinite(v)):
        raise ParameterError(f"{name} should be {size} finite numbers; got {value!r}")
    norm = float(np.linalg.norm(v))
    if norm < 1e-12:
        raise ParameterError(f"{name} should be a non-zero vector; got {value!r}")
    return v / norm
