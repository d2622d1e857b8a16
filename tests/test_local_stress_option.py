"""Local-stress option of the slip tables, transmission and the slip / forecast / growth CLI.

The local factors come from :func:`slipnet.stress.grain_schmid_factors` (grain means of τ / applied
stress of a full-field elastic solve). Checks: on a polycrystal they replace the uniform-stress
factors exactly and differ from them (elastic anisotropy of iron); on a single crystal they equal
the uniform Schmid factors; the CLI flags run end to end and the summaries print the assumptions.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from slipnet.cli import main
from slipnet.crystal import effective_schmid, schmid_factors, slip_systems
from slipnet.errors import ParameterError
from slipnet.grains import build_grain_graph
from slipnet.io import write_map
from slipnet.maps import OrientationMap
from slipnet.reports.slip import write_slip
from slipnet.slip import (
    LOCAL_SOURCE,
    grain_schmid_table,
    local_grain_factors,
    slip_activity,
    slip_trace_table,
    transmission_table,
)
from slipnet.stress import grain_schmid_factors, solve_elastic

LOAD = np.array([1.0, 0.0, 0.0])


def _three_grain_map() -> OrientationMap:
    """Three vertical bands: cube, cube turned 45° about x, and a general orientation."""
    ny, nx = 16, 24
    eul = np.zeros((ny, nx, 3))
    eul[:, nx // 3: 2 * nx // 3] = (0.0, 45.0, 0.0)
    eul[:, 2 * nx // 3:] = (30.0, 54.7, 45.0)
    return OrientationMap.from_euler(eul, 1.0)


@pytest.fixture(scope="module")
def poly():
    omap = _three_grain_map()
    gg = build_grain_graph(omap)
    field = solve_elastic(omap, LOAD, 100.0, 1e-8)
    return gg, field, slip_systems("bcc")


def test_local_tables_use_exactly_the_grain_schmid_factors(poly):
    gg, field, sy = poly
    assert gg.n_grains == 3
    local = grain_schmid_factors(field, gg, sy)
    np.testing.assert_array_equal(local_grain_factors(gg, LOAD, sy, field), local)
    t = grain_schmid_table(gg, LOAD, sy, stress_field=field)
    np.testing.assert_array_equal(t["schmid_max"].to_numpy(), np.abs(local).max(axis=1))
    eff = effective_schmid(local, sy)
    np.testing.assert_array_equal(t["effective_max"].to_numpy(), eff.max(axis=1))
    assert (t["factor_source"] == LOCAL_SOURCE).all()
    # same table as handing the factors in by hand
    by_hand = grain_schmid_table(gg, LOAD, sy, factors=local)
    pd.testing.assert_frame_equal(t.drop(columns="factor_source"), by_hand)
    tr = slip_trace_table(gg, LOAD, sy, stress_field=field)
    np.testing.assert_array_equal(tr["effective_schmid"].to_numpy(),
                                  eff[tr["grain"].to_numpy(), tr["system"].to_numpy()])
    assert (tr.loc[tr["rank"] == 1, "effective_schmid"].to_numpy() == eff.max(axis=1)).all()


def test_local_factors_differ_from_uniform_where_anisotropy_matters(poly):
    # Iron is elastically anisotropic (Zener ratio about 2.4; Hirth & Lothe 1982, Theory of
    # Dislocations, Wiley): neighbouring grains of different orientation carry different local
    # stresses, so the grain-mean local factors depart from the uniform (n·l)(d·l) (common practice).
    gg, field, sy = poly
    uni = grain_schmid_table(gg, LOAD, sy)
    loc = grain_schmid_table(gg, LOAD, sy, stress_field=field)
    diff = np.abs(loc["schmid_max"].to_numpy() - uni["schmid_max"].to_numpy())
    assert diff.max() > 5e-3
    assert "factor_source" not in uni.columns  # the default (uniform) table is unchanged


def test_transmission_with_stress_field_equals_given_factors(poly):
    gg, field, sy = poly
    local = grain_schmid_factors(field, gg, sy)
    a = transmission_table(gg, LOAD, sy, stress_field=field)
    b = transmission_table(gg, LOAD, sy, factors=local)
    u = transmission_table(gg, LOAD, sy)
    assert (a["factor_source"] == LOCAL_SOURCE).all() and "factor_source" not in u.columns
    pd.testing.assert_frame_equal(a.drop(columns="factor_source"), b)
    assert not np.allclose(a["transmission_score"], u["transmission_score"], equal_nan=True)


def test_single_crystal_local_equals_uniform_schmid():
    # A homogeneous single crystal under a uniform applied stress carries exactly that stress
    # everywhere (Moulinec & Suquet 1998, Comput. Methods Appl. Mech. Engrg. 157:69, homogeneous
    # check; common practice), so τ / σ is the Schmid factor (n·l)(d·l) (Schmid & Boas 1935,
    # Kristallplastizität, Springer; from memory).
    eul = np.broadcast_to(np.array([20.0, 35.0, 60.0]), (10, 12, 3)).copy()
    omap = OrientationMap.from_euler(eul, 1.0)
    gg = build_grain_graph(omap)
    sy = slip_systems("bcc")
    field = solve_elastic(omap, LOAD, 100.0, 1e-10)
    local = local_grain_factors(gg, LOAD, sy, field)
    uniform = schmid_factors(gg.mean_quats, LOAD, sy)
    np.testing.assert_allclose(local, uniform, atol=1e-9)
    a = grain_schmid_table(gg, LOAD, sy, stress_field=field).drop(columns="factor_source")
    pd.testing.assert_frame_equal(a, grain_schmid_table(gg, LOAD, sy), atol=1e-9)


def test_errors_name_the_parameter(poly):
    gg, field, sy = poly
    with pytest.raises(ParameterError, match="either factors or stress_field"):
        grain_schmid_table(gg, LOAD, sy, factors=np.zeros((3, len(sy))), stress_field=field)
    with pytest.raises(ParameterError, match=r"load_axis .* should be the load axis the stress field"):
        slip_trace_table(gg, (0.0, 1.0, 0.0), sy, stress_field=field)
    with pytest.raises(ParameterError, match=r"stress_field should be a slipnet\.stress\.StressField"):
        transmission_table(gg, LOAD, sy, stress_field=object())
    # reversing a uniaxial load axis gives the same factors: accepted
    np.testing.assert_array_equal(local_grain_factors(gg, -LOAD, sy, field), grain_schmid_factors(field, gg, sy))


def test_write_slip_outputs_states_local_factors(poly, tmp_path):
    gg, field, sy = poly
    act = slip_activity(gg, LOAD, sy, taylor=False, stress_field=field)
    write_slip(act, gg, tmp_path / "loc")
    text = (tmp_path / "loc" / "summary.md").read_text(encoding="utf-8")
    assert "LOCAL Schmid factors" in text and field.assumptions in text
    saved = pd.read_csv(tmp_path / "loc" / "grains_slip.csv")
    assert (saved["factor_source"] == LOCAL_SOURCE).all()
    assert (act.transmission["factor_source"] == LOCAL_SOURCE).all()
    write_slip(slip_activity(gg, LOAD, sy, taylor=False), gg, tmp_path / "uni")
    text = (tmp_path / "uni" / "summary.md").read_text(encoding="utf-8")
    assert "uniform uniaxial" in text and "LOCAL" not in text


def test_cli_local_stress_flags_end_to_end(tmp_path, capsys):
    omap = _three_grain_map()
    path = write_map(omap, tmp_path / "three.npz")
    assumptions = solve_elastic(omap, (0.0, 1.0, 0.0), 200.0).assumptions

    assert main(["slip", str(path), "--out", str(tmp_path / "slip"), "--no-taylor", "--load-axis", "0", "1", "0",
                 "--local-stress", "--local-stress-mpa", "200", "--stress-tol", "1e-7"]) == 0
    text = (tmp_path / "slip" / "summary.md").read_text(encoding="utf-8")
    assert "LOCAL Schmid factors" in text and assumptions in text
    assert (pd.read_csv(tmp_path / "slip" / "slip_traces.csv")["factor_source"] == LOCAL_SOURCE).all()

    fc_args = ["forecast", str(path), "--tip", "0.5", "8.0", "--direction", "1", "0", "--horizon", "20",
               "--stress", "200", "--load-axis", "0", "1", "0"]
    assert main([*fc_args, "--out", str(tmp_path / "fc"), "--local-stress"]) == 0
    settings = json.loads((tmp_path / "fc" / "forecast_settings.json").read_text(encoding="utf-8"))
    assert settings["stress_field"] is True and settings["stress_assumptions"] == assumptions
    assert assumptions in (tmp_path / "fc" / "summary.md").read_text(encoding="utf-8")
    assert main([*fc_args, "--out", str(tmp_path / "fc_uniform"), "--mode", "map"]) == 0  # uniform stress: no solve
    a = pd.read_csv(tmp_path / "fc" / "forecast_path.csv")
    b = pd.read_csv(tmp_path / "fc_uniform" / "forecast_path.csv")
    assert not np.allclose(a["effective_schmid"].iloc[0], b["effective_schmid"].iloc[0])
    # the saved path carries the local effective factors of the grain and system it follows
    gg = build_grain_graph(omap)
    eff = effective_schmid(grain_schmid_factors(solve_elastic(omap, (0.0, 1.0, 0.0), 200.0), gg), slip_systems("bcc"))
    st1 = a[a["stage"] == "I"]
    assert len(st1) > 0
    np.testing.assert_allclose(st1["effective_schmid"], eff[st1["grain"], st1["system"]], rtol=1e-9)

    assert main(["growth", "--forecast", str(tmp_path / "fc"), "--out", str(tmp_path / "gr"), "--no-figures",
                 "--profile-points", "200", "--local-stress"]) == 0
    assert assumptions in (tmp_path / "gr" / "summary.md").read_text(encoding="utf-8")
    capsys.readouterr()
    # a forecast made with uniform factors is refused, naming the flag
    assert main(["growth", "--forecast", str(tmp_path / "fc_uniform"), "--out", str(tmp_path / "gr2"),
                 "--no-figures", "--local-stress"]) == 2
    assert "--local-stress" in capsys.readouterr().err
