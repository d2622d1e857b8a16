"""The reference of the harness: slipnet's own cyclic crystal-plasticity solve on each case.

The reference is :func:`slipnet.stress.solve_cyclic` with the boundary layer on, the notched edge a
free surface and an isotropic elastic buffer beyond the edges across the load (so neither edge seam
shows false hot spots). It is slipnet's own slow model, not an experiment: scores against it measure
how well the fast forecast reproduces the slow model (a consistency test), not how well either
predicts a real specimen.

Results are cached as ``.npz`` files (plain arrays, no pickle) keyed by a hash of the case, the
reference settings and the package version, so refitting or rescoring never repeats a solve.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from slipnet._files import atomic_path
from slipnet.errors import InputFileError, ParameterError

__all__ = ["ReferenceField", "ReferenceSettings", "default_cache_dir", "run_reference"]

#: Bump when the reference set-up changes, so old cache entries are not reused.
REFERENCE_VERSION = 1
#: The statement every output of the harness carries.
REFERENCE_STATEMENT = (
    "The reference is slipnet's own cyclic crystal-plasticity model (slipnet.stress.solve_cyclic) run on "
    "synthetic specimens: these scores are a consistency test between a fast and a slow model, not a "
    "validation against experiments."
)


@dataclass(frozen=True)
class ReferenceSettings:
    """Settings of the reference solve (see :func:`slipnet.stress.solve_cyclic`).

    ``boundary_width_um`` None means one map step. The elastic buffer goes beyond the edges across
    the load (top and bottom for a load near y).
    """

    cycles: int = 3
    boundary_width_um: float | None = None
    boundary_strength_mpa: float = 50.0
    max_slip_increment: float = 5e-4
    buffer_across_load: bool = True

    def as_dict(self) -> dict:
        """The settings, JSON-safe."""
        return asdict(self)


@dataclass(frozen=True, eq=False)
class ReferenceField:
    """The reference fields of one case (map grid, ``(ny, nx)`` each).

    Attributes
    ----------
    accumulated_slip, fip
        Accumulated slip Σ∫|γ̇| and the largest-system Fatemi–Socie FIP of the last cycle.
    compliant, crack_mask
        Compliant points (notch, crack, holes) and the crack slit alone.
    labels
        Grain labels used by the solve.
    seconds
        Wall time of the solve (0 when read from the cache... the time it took when it ran).
    key
        The cache key.
    """

    accumulated_slip: np.ndarray
    fip: np.ndarray
    compliant: np.ndarray
    crack_mask: np.ndarray
    labels: np.ndarray
    seconds: float
    key: str


def default_cache_dir() -> Path:
    """``$SLIPNET_CACHE_DIR/validation`` or ``<user cache>/slipnet/validation``."""
    base = os.environ.get("SLIPNET_CACHE_DIR")
    if base:
        return Path(base) / "validation"
    xdg = os.environ.get("XDG_CACHE_HOME")
    return (Path(xdg) if xdg else Path.home() / ".cache") / "slipnet" / "validation"


def _key(case, settings: ReferenceSettings) -> str:
    from slipnet import __version__

    blob = json.dumps({"case": case.as_dict(), "settings": settings.as_dict(), "version": __version__,
                       "reference_version": REFERENCE_VERSION}, sort_keys=True)
    return hashlib.sha256(blob.encode()).hexdigest()[:20]


def _edges(case) -> tuple[tuple[str, ...], tuple[str, ...]]:
    load = np.asarray(case.load_axis, dtype=float)
    free = (case.notch_side,)
    across = ("top", "bottom") if abs(load[1]) >= abs(load[0]) else ("left", "right")
    return free, tuple(e for e in across if e not in free)


def run_reference(built, settings: ReferenceSettings | None = None, *, cache_dir: str | os.PathLike | None = None,
                  use_cache: bool = True) -> ReferenceField:
    """Solve the reference of a built case (:func:`slipnet.validation.build_case`), or read it from the cache.

    Parameters
    ----------
    built
        A :class:`~slipnet.validation.cases.BuiltCase`.
    settings
        :class:`ReferenceSettings` (defaults if None).
    cache_dir
        Folder of the cache (default :func:`default_cache_dir`); ``use_cache=False`` always solves
        and writes nothing.
    """
    from slipnet.stress import solve_cyclic

    s = settings or ReferenceSettings()
    if not isinstance(s, ReferenceSettings):
        raise ParameterError(f"settings should be a ReferenceSettings; got {type(s).__name__}")
    case = built.case
    key = _key(case, s)
    folder = Path(cache_dir) if cache_dir is not None else default_cache_dir()
    path = folder / f"reference-{case.seed}-{key}.npz"
    if use_cache and path.exists():
        try:
            with np.load(path, allow_pickle=False) as z:
                return ReferenceField(accumulated_slip=z["accumulated_slip"], fip=z["fip"],
                                      compliant=z["compliant"].astype(bool), crack_mask=z["crack_mask"].astype(bool),
                                      labels=z["labels"], seconds=float(z["seconds"]), key=key)
        except (OSError, KeyError, ValueError) as err:
            raise InputFileError(f"cached reference {path} is unreadable ({err}); delete it to solve again") from err
    free, buffer = _edges(case)
    width = case.step_um if s.boundary_width_um is None else float(s.boundary_width_um)
    t0 = time.perf_counter()
    res = solve_cyclic(built.specimen.omap, case.load_axis, stress_amplitude=case.stress_amplitude_mpa,
                       ratio=case.ratio, cycles=s.cycles, crack=built.crack_um, free_edges=free,
                       buffer_edges=buffer if s.buffer_across_load else (), grains=built.gg,
                       boundary_width_um=width, boundary_strength_mpa=s.boundary_strength_mpa,
                       max_slip_increment=s.max_slip_increment)
    secs = time.perf_counter() - t0
    ref = ReferenceField(accumulated_slip=np.asarray(res.accumulated_slip, float), fip=np.asarray(res.fip, float),
                         compliant=np.asarray(res.compliant, bool), crack_mask=np.asarray(res.crack_mask, bool),
                         labels=np.asarray(res.labels, np.int64), seconds=secs, key=key)
    if use_cache:
        with atomic_path(path) as tmp:
            with open(tmp, "wb") as fh:
                np.savez_compressed(fh, accumulated_slip=ref.accumulated_slip, fip=ref.fip, compliant=ref.compliant,
                                    crack_mask=ref.crack_mask, labels=ref.labels, seconds=secs)
    return ref
