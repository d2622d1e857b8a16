"""Notch placement planner: rank candidate notch positions along a specimen edge.

For each candidate position along an edge, a notch of the given shape is (virtually) cut normal
to the edge; at its root slipnet estimates the stress concentration, finds the grains there,
forecasts the crack path (:func:`slipnet.forecast.forecast_crack`) and its growth
(:func:`slipnet.growth.simulate_growth`), and measures the objectives the user cares about. A
Monte Carlo over orientation noise, load misalignment and machining position error turns every
objective into a band and a probability. Candidates are ranked by a weighted score or as a
Pareto set. The sweep runs on Dask (:mod:`slipnet.notch.sweep`).

Objectives (column names; the sign of a weight says whether larger is better)
------------------------------------------------------------------------------
``initiation_drive``
    Largest critical-stress-weighted (effective) Schmid factor among the grains within one root
    radius of the notch root, times the notch stress concentration factor K_t.
``first_barrier_um``
    Path distance from the root to the first strong barrier (intrinsic barrier strength — the
    forecast's barrier score without its distance relevance — at least ``strong_barrier``);
    ``inf`` when none lies within the observation window.
``barriers_in_window``
    Number of boundaries the forecast path crosses within the observation window.
``barrier_strength_in_window``
    Sum of the intrinsic strengths of those boundaries.
``log10_cycles_to_window``
    log₁₀ of the predicted cycles for the crack to grow from the initial crack size to the end
    of the window (``inf`` when it arrests first).
``arrest_probability``
    Share of the Monte Carlo samples in which the crack arrests inside the window (the nominal
    run gives 0 or 1 without samples).
``target_offset_um``
    |path distance to a chosen boundary (or to the entry into a chosen grain) − the wanted
    distance|; ``inf`` when the path does not reach it within the window.

Notes
-----
With ``concentration="full_field"`` K_t comes instead from an anisotropic elastic solve of the
map with the notch cut in (:func:`full_field_kt`). By default, the stress concentration of a U- or
V-shaped edge notch uses the semi-infinite-plate fit of
Peterson's charts (Pilkey & Pilkey 2008, *Peterson's Stress Concentration Factors*, 3rd ed.,
Wiley, chart 2.2: K_t = 0.855 + 2.21 √(t/r) for 1 ≤ t/r ≤ 361 — from memory), with V notches
of opening angle ≤ 90° taken equal to the U notch (same charts, the angle matters little below
90°) and a linear fall to K_t = 1 at 180° above that (our assumption). A crack growing from the
root sees the notch field only within the notch-affected zone: the growth model is run with the
constant amplitude σ·k with k = min(K_t, √((t + a)/a)) at a = half the window (the smaller of
the short-crack and long-crack driving forces, Dowling 1979, Fatigue Eng. Mater. Struct.
2:129; Smith & Miller 1978, Int. J. Mech. Sci. 20:201), capped below the friction stress.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from slipnet.errors import ParameterError
from slipnet.maps.notch import NotchShape
from slipnet.notch.candidates import candidate_positions
from slipnet.notch.ranking import finish_plan
from slipnet.notch.settings import DEFAULT_WEIGHTS, NotchPlan, PlanSettings
from slipnet.notch.sweep import SweepPool, run_sweep

__all__ = ["plan_notch"]


def plan_notch(
    gg,
    edge,
    load_axis,
    *,
    spacing_um: float = 20.0,
    stress_amplitude: float = 200.0,
    stress_ratio: float = -1.0,
    depth_um: float = 50.0,
    root_radius_um: float = 10.0,
    opening_deg: float = 0.0,
    window_um: float = 200.0,
    crack_sizes_um: Sequence[float] = (5.0, 20.0),
    objectives: Mapping[str, float] | None = None,
    method: str = "weighted",
    target: Mapping | None = None,
    strong_barrier: float = 0.5,
    samples: int = 0,
    orientation_noise_deg: float = 1.5,
    load_misalignment_deg: float = 2.0,
    position_error_um: float = 5.0,
    top_k: int = 3,
    seed: int = 0,
    systems=None,
    growth: Mapping | None = None,
    concentration: str = "peterson",
    scheduler: str = "synchronous",
    workers: int | None = None,
    progress: bool = False,
    allow_remote: bool = False,
    pool: SweepPool | None = None,
) -> NotchPlan:
    """Rank candidate notch positions along a specimen edge.

    Parameters
    ----------
    gg : GrainGraph
        From :func:`slipnet.grains.build_grain_graph`.
    edge : (k, 2) array_like or str
        The specimen edge as two or more (x, y) points in µm, or a map side
        (``"left"``, ``"right"``, ``"top"``, ``"bottom"``).
    load_axis : (3,) array_like
        Uniaxial load axis in the map frame.
    spacing_um
        Distance between candidates along the edge, µm.
    stress_amplitude, stress_ratio
        Nominal stress amplitude (MPa) and R.
    depth_um, root_radius_um, opening_deg
        Notch shape (:class:`NotchShape`).
    window_um
        Observation window along the crack path, µm.
    crack_sizes_um
        Initial crack sizes, µm.
    objectives
        Objective → weight (see the module docstring); default
        ``{"initiation_drive": 1, "barrier_strength_in_window": 1}``.
    method
        ``"weighted"`` or ``"pareto"``.
    target
        For ``target_offset_um``: ``{"boundary": (a, b), "distance_um": d}`` or
        ``{"grain": g, "distance_um": d}``.
    strong_barrier
        Intrinsic barrier strength that counts as strong.
    samples, orientation_noise_deg, load_misalignment_deg, position_error_um, top_k, seed
        Monte Carlo per candidate; with samples the table gains ``*_p05/_p50/_p95`` bands,
        ``arrest_probability`` from the samples and ``p_top_k`` (share of samples in which the
        candidate ranks in the top ``top_k``).
    systems
        Slip systems (default: those of the map's first phase).
    growth
        Extra keyword arguments of :func:`slipnet.growth.simulate_growth`.
    concentration
        ``"peterson"`` (chart fit, default) or ``"full_field"``: K_t from an anisotropic elastic
        solve of the map with each candidate's notch cut in (:func:`full_field_kt`; one solve per
        candidate, seconds each). ``kt_chart`` always holds the chart value for comparison.
    scheduler, workers, progress
        Dask scheduler for the sweep: ``"synchronous"`` (default), ``"threads"``,
        ``"processes"`` or the address of a running ``dask.distributed`` scheduler
        (``"tcp://host:port"``); number of local workers; show a progress bar.
        The same seed gives the same table on every scheduler.
    allow_remote
        Consent to use a remote scheduler address (refused without it). Trusted machines only:
        its workers run the tasks and their results are unpickled here
        (:mod:`slipnet.notch.sweep`).
    pool
        A :class:`~slipnet.notch.sweep.SweepPool` kept open for several plans (its worker
        processes and the graph sent to them are reused); ``scheduler``, ``workers`` and
        ``allow_remote`` are then the pool's.

    Returns
    -------
    NotchPlan
        ``table``: one row per candidate, best first: ``root_x_um``, ``root_y_um`` (notch root),
        ``rank``, ``plan_score``, each objective's column, ``term_*`` / ``weight_*`` columns, ``kt``, the edge
        point and normal, the root grains, ``valid`` and ``reason``; ``settings``: the inputs.

    Examples
    --------
    >>> from slipnet.synthetic import make_specimen
    >>> from slipnet.grains import build_grain_graph
    >>> spec = make_specimen((60, 80), 2.0, grain_size_um=30.0, seed=1)
    >>> gg = build_grain_graph(spec.omap)
    >>> plan = plan_notch(gg, "left", (1, 0, 0), spacing_um=30.0, depth_um=10.0, root_radius_um=5.0,
    ...                   window_um=60.0, crack_sizes_um=(5.0,))
    >>> list(plan.table.columns[:4])
    ['root_x_um', 'root_y_um', 'rank', 'plan_score']
    """
    s = PlanSettings(
        load_axis=tuple(np.asarray(load_axis, dtype=float).ravel()),
        stress_amplitude=stress_amplitude,
        stress_ratio=stress_ratio,
        notch=NotchShape(depth_um, root_radius_um, opening_deg),
        window_um=window_um,
        crack_sizes_um=tuple(np.atleast_1d(crack_sizes_um)),
        strong_barrier=strong_barrier,
        weights=dict(DEFAULT_WEIGHTS if objectives is None else objectives),
        target=target,
        samples=samples,
        orientation_noise_deg=orientation_noise_deg,
        load_misalignment_deg=load_misalignment_deg,
        position_error_um=position_error_um,
        seed=seed,
        growth=dict(growth or {}),
        concentration=concentration,
    )
    if int(top_k) < 1:
        raise ParameterError(f"top_k should be >= 1; got {top_k!r}")
    if method not in ("weighted", "pareto"):
        raise ParameterError(f"method should be 'weighted' or 'pareto'; got {method!r}")
    cands = candidate_positions(gg, edge, spacing_um, s.notch)
    rows = run_sweep(gg, cands, s, systems=systems, scheduler=scheduler, workers=workers,
                     progress=progress, allow_remote=allow_remote, pool=pool)
    return finish_plan(rows, s, method=method, top_k=top_k)
