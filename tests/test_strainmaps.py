"""Measured strain input: strain from displacements, invariants, our file formats and their errors."""

from __future__ import annotations

import json

import numpy as np
import pytest
import tifffile
from hypothesis import given, settings
from hypothesis import strategies as st

from slipnet.errors import InputFileError, ParameterError
from slipnet.io import read_strain, write_strain
from slipnet.maps import StrainSeries, equivalent_strain, max_shear_strain, strain_from_displacement
from slipnet.maps.strain import displacement_gradient

STEP = 0.5


def _grid(ny=12, nx=15, step=STEP):
    i, j = np.indices((ny, nx), dtype=float)
    return j * step, i * step


def _affine_field(h, ny=12, nx=15):
    x, y = _grid(ny, nx)
    return h[0, 0] * x + h[0, 1] * y + 0.3, h[1, 0] * x + h[1, 1] * y - 0.1


# ------------------------------------------------------------------ homogeneous deformation
@pytest.mark.parametrize("window", [None, 3, 5])
def test_homogeneous_gradient_gives_exact_small_strain(window):
    h = np.array([[0.012, -0.004], [0.007, -0.003]])
    u, v = _affine_field(h)
    exx, eyy, exy = strain_from_displacement(u, v, STEP, window=window)
    # small strain ε = ½(H + Hᵀ) (Malvern 1969, Introduction to the Mechanics of a Continuous Medium, §4.2)
    assert np.allclose(exx, h[0, 0], atol=1e-13, rtol=0)
    assert np.allclose(eyy, h[1, 1], atol=1e-13, rtol=0)
    assert np.allclose(exy, 0.5 * (h[0, 1] + h[1, 0]), atol=1e-13, rtol=0)


@settings(max_examples=25, deadline=None)
@given(st.lists(st.floats(-0.4, 0.4), min_size=4, max_size=4))
def test_homogeneous_gradient_gives_exact_green_lagrange(vals):
    h = np.array(vals).reshape(2, 2)
    u, v = _affine_field(h, 6, 7)
    exx, eyy, exy = strain_from_displacement(u, v, STEP, method="green-lagrange")
    f = np.eye(2) + h
    # E = ½(FᵀF − I) (Holzapfel 2000, Nonlinear Solid Mechanics, eq. 2.67)
    e = 0.5 * (f.T @ f - np.eye(2))
    assert np.allclose(exx, e[0, 0], atol=1e-12)
    assert np.allclose(eyy, e[1, 1], atol=1e-12)
    assert np.allclose(exy, e[0, 1], atol=1e-12)


def _rotation_field(theta):
    x, y = _grid()
    c, s = np.cos(theta), np.sin(theta)
    return (c - 1) * x - s * y, s * x + (c - 1) * y


@pytest.mark.parametrize("theta_deg", [0.5, 5.0, 30.0, 90.0])
def test_rigid_rotation_gives_zero_green_lagrange_strain(theta_deg):
    u, v = _rotation_field(np.radians(theta_deg))
    # a rigid rotation has FᵀF = I, so E = 0 exactly (Holzapfel 2000, §2.5)
    for e in strain_from_displacement(u, v, STEP, method="green-lagrange"):
        assert np.max(np.abs(e)) < 1e-13


def test_rigid_rotation_small_strain_vanishes_only_to_second_order():
    ratios = []
    for theta in (1e-1, 1e-2, 1e-3):
        u, v = _rotation_field(theta)
        exx, _eyy, exy = strain_from_displacement(u, v, STEP)
        # small strain of a rotation: ε_xx = ε_yy = cos θ − 1 ≈ −θ²/2, ε_xy = 0 (Malvern 1969, §4.3)
        assert np.allclose(exx, np.cos(theta) - 1, atol=1e-14)
        assert np.allclose(exy, 0.0, atol=1e-14)
        ratios.append(float(np.mean(exx)) / theta**2)
    # second-order behaviour: ε_xx / θ² → −½ as θ → 0, never zero for θ ≠ 0
    assert ratios[-1] == pytest.approx(-0.5, rel=1e-5)
    assert abs(ratios[0] + 0.5) > abs(ratios[-1] + 0.5)


def test_central_differences_exact_for_quadratic_field_inside():
    x, y = _grid()
    u = 0.01 * x**2 + 0.002 * x * y
    v = np.zeros_like(u)
    ux, uy, _vx, _vy = displacement_gradient(u, v, STEP)
    # second-order central differences are exact for quadratics (common practice)
    assert np.allclose(ux[1:-1, 1:-1], (0.02 * x + 0.002 * y)[1:-1, 1:-1], atol=1e-13)
    assert np.allclose(uy[1:-1, 1:-1], (0.002 * x)[1:-1, 1:-1], atol=1e-13)


def test_plane_fit_matches_lstsq_reference_and_excludes_masked_points():
    rng = np.random.default_rng(3)
    x, y = _grid(10, 11)
    u = 0.01 * x + rng.normal(0, 0.01, x.shape)
    v = -0.004 * y + rng.normal(0, 0.01, x.shape)
    u[4, 5] = np.nan
    u[2, 2] = np.nan
    ux, uy, _, _ = displacement_gradient(u, v, STEP, window=5)
    assert np.isnan(ux[4, 5]) and np.isnan(ux[2, 2])
    # slow reference: numpy least squares over each window's valid points
    for i, j in [(4, 4), (0, 0), (9, 10), (3, 6)]:
        sl = (slice(max(i - 2, 0), i + 3), slice(max(j - 2, 0), j + 3))
        ok = np.isfinite(u[sl])
        a = np.stack([np.ones(ok.sum()), x[sl][ok], y[sl][ok]], 1)
        coef = np.linalg.lstsq(a, u[sl][ok], rcond=None)[0]
        assert ux[i, j] == pytest.approx(coef[1], abs=1e-10)
        assert uy[i, j] == pytest.approx(coef[2], abs=1e-10)


def test_nan_never_leaks_beyond_its_neighbours():
    u, v = _affine_field(np.array([[0.01, 0], [0, 0.01]]))
    u[5, 5] = np.nan
    exx, _, _ = strain_from_displacement(u, v, STEP)
    bad = np.isnan(exx)
    # central differences in x and y use the missing point: the 5-point cross around it, nothing else
    cross = np.zeros_like(bad)
    cross[[5, 5, 5, 4, 6], [4, 5, 6, 5, 5]] = True
    assert np.array_equal(bad, cross)
    exx_w, _, _ = strain_from_displacement(u, v, STEP, window=3)
    assert np.isnan(exx_w).sum() == 1  # the plane fit simply skips it


def test_plane_fit_refuses_a_window_with_collinear_points():
    u, v = _affine_field(np.array([[0.01, 0], [0, 0.01]]), 5, 5)
    u[[0, 1, 3, 4], :] = np.nan  # only row 2 left: no slope across rows
    exx, _, _ = strain_from_displacement(u, v, STEP, window=3)
    assert np.all(np.isnan(exx))


def test_max_shear_and_equivalent_strain_definitions():
    rng = np.random.default_rng(1)
    exx, eyy, exy = rng.normal(0, 0.01, (3, 50))
    tens = np.stack([np.stack([exx, exy], -1), np.stack([exy, eyy], -1)], -2)
    ev = np.linalg.eigvalsh(tens)
    # Mohr's circle radius = half the difference of principal strains (Timoshenko & Goodier 1970, §9)
    assert np.allclose(max_shear_strain(exx, eyy, exy), 0.5 * (ev[:, 1] - ev[:, 0]), atol=1e-15)
    # von Mises equivalent strain: uniaxial plastic strain e with lateral −e/2 gives e (Hill 1950,
    # The Mathematical Theory of Plasticity, ch. II); pure tensor shear ε_xy gives 2ε_xy/√3
    assert equivalent_strain(0.02, -0.01, 0.0) == pytest.approx(0.02)
    assert equivalent_strain(0.0, 0.0, 0.015) == pytest.approx(2 * 0.015 / np.sqrt(3))
    assert np.isnan(max_shear_strain(np.nan, 0.0, 0.0))


def test_strain_from_displacement_errors():
    u, v = _affine_field(np.eye(2) * 0.01)
    with pytest.raises(ParameterError, match="share one grid"):
        strain_from_displacement(u, v[:, :-1], STEP)
    with pytest.raises(ParameterError, match="method"):
        strain_from_displacement(u, v, STEP, method="log")
    with pytest.raises(ParameterError, match="window"):
        strain_from_displacement(u, v, STEP, window=4)
    with pytest.raises(ParameterError, match="step"):
        strain_from_displacement(u, v, 0.0)
    with pytest.raises(ParameterError, match="infinite"):
        strain_from_displacement(np.where(u == u.max(), np.inf, u), v, STEP)


# ---------------------------------------------------------------------------------- files
def _series(quantity="displacement"):
    rng = np.random.default_rng(5)
    shape = (2, 6, 8)
    names = ("u", "v") if quantity == "displacement" else ("exx", "eyy", "exy")
    comps = {c: rng.normal(0, 0.01, shape) for c in names}
    comps[names[0]][1, 2, 3] = np.nan
    return StrainSeries(quantity, comps, 0.25, (1.5, -2.0), [1000.0, 5000.0], "cycles", "test", {"who": "tests"})


@pytest.mark.parametrize("suffix", ["txt", "npz", "tif"])
@pytest.mark.parametrize("quantity", ["displacement", "strain"])
def test_round_trip(tmp_path, suffix, quantity):
    s = _series(quantity)
    p = write_strain(s, tmp_path / f"field.{suffix}")
    r = read_strain(p)
    assert r.quantity == quantity and r.shape == s.shape and r.step == s.step and r.origin == s.origin
    assert np.array_equal(r.steps, s.steps) and r.meta == s.meta
    for c in s.components:
        assert np.allclose(r.components[c], s.components[c], equal_nan=True, rtol=1e-9, atol=0)
    assert np.array_equal(r.valid, s.valid)


def test_tiff_page_order_and_description_as_documented(tmp_path):
    s = _series()
    p = write_strain(s, tmp_path / "field.tif")
    pages = tifffile.imread(p)  # read by the general library, no slipnet code
    assert pages.shape == (4, 6, 8)
    # documented order: step-major, components in order u, v (docs/strain-format.md)
    assert np.allclose(pages[3], s.components["v"][1])
    assert np.allclose(pages[1], s.components["v"][0])
    with tifffile.TiffFile(p) as tif:
        desc = json.loads(tif.pages[2].description)
    assert desc["page_component"] == "u" and desc["page_step"] == 1 and desc["length_unit"] == "um"


def test_text_units_are_converted(tmp_path):
    s = _series()
    p = write_strain(s, tmp_path / "f.txt")
    text = p.read_text().replace("# length_unit: um", "# length_unit: mm").replace("# value_unit: um",
                                                                                   "# value_unit: nm")
    p.write_text(text)
    r = read_strain(p)
    assert r.step == pytest.approx(250.0)  # 0.25 mm
    assert np.allclose(r.components["u"], s.components["u"] * 1e-3, equal_nan=True)


def test_text_missing_column(tmp_path):
    p = write_strain(_series(), tmp_path / "f.txt")
    lines = p.read_text().splitlines()
    out = [ln if ln.startswith("#") else ",".join(ln.split(",")[:-1]) for ln in lines]
    p.write_text("\n".join(out))
    with pytest.raises(InputFileError, match="column 'v'"):
        read_strain(p)


def test_text_point_off_grid(tmp_path):
    p = write_strain(_series(), tmp_path / "f.txt")
    p.write_text(p.read_text().replace("step=0.25", "step=0.3"))
    with pytest.raises(InputFileError, match="not on the stated grid"):
        read_strain(p)


def test_text_units_that_do_not_match_the_quantity(tmp_path):
    p = write_strain(_series(), tmp_path / "f.txt")
    p.write_text(p.read_text().replace("# value_unit: um", "# value_unit: %"))
    with pytest.raises(InputFileError, match="does not match quantity 'displacement'"):
        read_strain(p)
    p.write_text(p.read_text().replace("# value_unit: %", "# value_unit: um").replace("length_unit: um",
                                                                                      "length_unit: inch"))
    with pytest.raises(InputFileError, match="length_unit"):
        read_strain(p)


def test_text_missing_header(tmp_path):
    p = tmp_path / "f.txt"
    p.write_text("step,x,y,u,v\n0,0,0,0,0\n")
    with pytest.raises(InputFileError, match="header"):
        read_strain(p)


def test_npz_unequal_grids_and_pickles_refused(tmp_path):
    s = _series()
    p = write_strain(s, tmp_path / "f.npz")
    with np.load(p) as d:
        arrays = {k: d[k] for k in d.files}
    arrays["v"] = arrays["v"][:, :, :-1]
    np.savez(tmp_path / "bad.npz", **arrays)
    with pytest.raises(InputFileError, match="grid"):
        read_strain(tmp_path / "bad.npz")
    np.savez(tmp_path / "pickled.npz", header=np.array([{"a": 1}], dtype=object), u=arrays["u"])
    with pytest.raises(InputFileError, match="pickled"):
        read_strain(tmp_path / "pickled.npz")


def test_tiff_page_with_other_units(tmp_path):
    s = _series()
    with tifffile.TiffWriter(tmp_path / "f.tif") as tif:
        for k, (c, unit) in enumerate([("u", "um"), ("v", "mm")]):
            head = {"quantity": "displacement", "length_unit": "um", "value_unit": unit, "nx": 8, "ny": 6,
                    "step": 0.25, "steps": [0.0], "page_component": c, "page_step": 0}
            tif.write(s.components[c][0], description=json.dumps(head), metadata=None)
            del k
    with pytest.raises(InputFileError, match="page 1 states value_unit"):
        read_strain(tmp_path / "f.tif")


def test_series_validation():
    with pytest.raises(ParameterError, match="share one grid"):
        StrainSeries("displacement", {"u": np.zeros((3, 4)), "v": np.zeros((3, 5))}, 1.0)
    with pytest.raises(ParameterError, match="missing"):
        StrainSeries("strain", {"exx": np.zeros((3, 4))}, 1.0)
    with pytest.raises(ParameterError, match="steps"):
        StrainSeries("displacement", {"u": np.zeros((3, 4)), "v": np.zeros((3, 4))}, 1.0, steps=[1, 2])
    with pytest.raises(InputFileError, match="no such file"):
        read_strain("/nonexistent/strain.npz")


def test_series_strain_and_shear_of_a_step():
    x, y = _grid(6, 7)
    u = np.stack([0.01 * x, 0.02 * x])
    v = np.stack([-0.01 * y, -0.02 * y])
    s = StrainSeries("displacement", {"u": u, "v": v}, STEP, steps=[10, 20])
    # uniaxial-type state ε_xx = −ε_yy = e gives γ_max = e (Mohr's circle; common practice)
    assert np.allclose(s.max_shear(0), 0.01)
    assert np.allclose(s.max_shear(), 0.02)
    assert s.strain().quantity == "strain"
    with pytest.raises(ParameterError, match="step should be an index"):
        s.max_shear(5)
