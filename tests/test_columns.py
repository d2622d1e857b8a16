"""Every table the forecast, growth and notch steps produce has exactly the columns of :mod:`slipnet.columns`."""

from __future__ import annotations

import re

import pytest

from slipnet import columns
from slipnet.forecast import forecast_crack
from slipnet.grains import build_grain_graph
from slipnet.growth import simulate_growth
from slipnet.notch import plan_notch
from slipnet.synthetic import make_specimen

#: A column name with a unit carries it as a suffix; the rest are counts, ids, labels or dimensionless.
_SNAKE = re.compile(r"^[a-z][a-z0-9]*(_[a-z0-9]+)*$")


@pytest.fixture(scope="module")
def run():
    spec = make_specimen((70, 90), 2.0, grain_size_um=25.0, notch={"depth_um": 20.0, "root_radius_um": 4.0},
                         seed=3)
    gg = build_grain_graph(spec.omap)
    fc = forecast_crack(gg, spec.notch_root, spec.notch_direction, spec.load_axis, 120.0, samples=2, seed=1,
                        max_branches=2, branch_tol=0.5)
    growth = simulate_growth(fc, 200.0, samples=3, seed=2, n_points=200)
    plan = plan_notch(gg, "right", spec.load_axis, spacing_um=60.0, depth_um=20.0, root_radius_um=4.0,
                      window_um=60.0, crack_sizes_um=(5.0,))
    return fc, growth, plan


def test_every_schema_name_is_snake_case():
    for name in columns.__all__:
        for col in getattr(columns, name):
            assert _SNAKE.match(col), f"{name}: {col!r} is not snake_case"


def test_forecast_tables_follow_the_schemas(run):
    fc, _, _ = run
    assert tuple(fc.path.columns) == columns.FORECAST_PATH
    assert tuple(fc.alternatives.columns) == columns.FORECAST_ALTERNATIVES
    assert tuple(fc.crossings.columns) == columns.FORECAST_CROSSINGS
    # the fitted barrier columns follow the schema, then the Monte Carlo probabilities
    n_b = len(columns.FORECAST_BARRIERS)
    n_f = len(columns.FORECAST_BARRIER_FIT)
    assert tuple(fc.barriers.columns[:n_b]) == columns.FORECAST_BARRIERS
    assert tuple(fc.barriers.columns[n_b:n_b + n_f]) == columns.FORECAST_BARRIER_FIT
    assert set(fc.barriers.columns[n_b + n_f:]) == {"p_on_path", "p_top_k", "p_drop"}
    assert tuple(fc.sites.columns[:len(columns.FORECAST_SITES)]) == columns.FORECAST_SITES
    assert set(fc.sites.columns[len(columns.FORECAST_SITES):]) == {"p_present", "p_top_k", "p_hit"}
    assert tuple(fc.samples.columns) == columns.FORECAST_SAMPLES


def test_growth_tables_follow_the_schemas(run):
    _, growth, _ = run
    assert tuple(growth.profile.columns) == columns.GROWTH_PROFILE
    assert tuple(growth.barriers.columns) == columns.GROWTH_BARRIERS
    assert tuple(growth.dips.columns) == columns.GROWTH_DIPS
    assert tuple(growth.bands.columns) == columns.GROWTH_BANDS


def test_notch_plan_leads_with_the_schema(run):
    _, _, plan = run
    assert tuple(plan.table.columns[:4]) == columns.NOTCH_PLAN_LEADING
    assert all(_SNAKE.match(c) for c in plan.table.columns)
