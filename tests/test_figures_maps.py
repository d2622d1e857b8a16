"""Tests of IPF colouring and the IPF map figure."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from slipnet.crystal import CUBIC_OPERATORS, quat_multiply, random_quats
from slipnet.errors import ParameterError
from slipnet.figures._common import save_figure
from slipnet.figures.maps import UNINDEXED_COLOR, ipf_colors, ipf_direction, plot_ipf_map, plot_scalar_map
from slipnet.maps import OrientationMap
from slipnet.synthetic import make_specimen


def _aligning(crystal_dir, sample_dir=(0.0, 0.0, 1.0)) -> np.ndarray:
    """Orientation g (w, x, y, z) with g · sample_dir = crystal_dir, built with scipy's Rotation."""
    c = np.asarray(crystal_dir, float)
    r, _ = Rotation.align_vectors([c / np.linalg.norm(c)], [np.asarray(sample_dir, float)])
    x, y, z, w = r.as_quat()
    return np.array([w, x, y, z])


@pytest.mark.parametrize(
    ("hkl", "rgb"),
    [((0, 0, 1), (1, 0, 0)), ((1, 0, 1), (0, 1, 0)), ((1, 1, 1), (0, 0, 1)),
     ((0, -1, 0), (1, 0, 0)), ((-1, 1, 0), (0, 1, 0)), ((1, -1, -1), (0, 0, 1))],
)
def test_standard_triangle_corners_are_red_green_blue(hkl, rgb):
    # trade convention (common practice): ⟨001⟩ red, ⟨101⟩ green, ⟨111⟩ blue
    q = _aligning(hkl)
    assert np.allclose(ipf_colors(q), rgb, atol=1e-6)


def test_sample_direction_is_honoured():
    # the identity orientation puts crystal [100] along sample x, so IPF-x is red, and so is IPF-y
    ident = np.array([1.0, 0.0, 0.0, 0.0])
    assert np.allclose(ipf_colors(ident, (1, 0, 0)), (1, 0, 0))
    q = _aligning((1, 1, 1), sample_dir=(0, 1, 0))
    assert np.allclose(ipf_colors(q, (0, 1, 0)), (0, 0, 1), atol=1e-6)
    with pytest.raises(ParameterError, match="direction"):
        ipf_colors(ident, (0, 0, 0))
    with pytest.raises(ParameterError, match="quats"):
        ipf_colors(np.zeros(3))


def test_reduced_direction_matches_orix_fundamental_sector():
    from orix.quaternion import Orientation, symmetry
    from orix.vector import Vector3d

    q = random_quats(5000, 3)
    for d in ((0, 0, 1), (1, 0, 0), (1, 2, 2)):
        v = Vector3d(np.asarray(d, float))
        # reference library: orix reduces sample vectors in the crystal frame into the Oh sector
        ref = (Orientation(q, symmetry.Oh) * v.unit).in_fundamental_sector(symmetry.Oh).unit.data
        assert np.abs(ipf_direction(q, d) - ref).max() < 1e-9


def test_colours_close_to_orix_key():
    from orix.plot import IPFColorKeyTSL
    from orix.quaternion import Orientation, symmetry
    from orix.vector import Vector3d

    q = random_quats(20000, 5)
    ref = IPFColorKeyTSL(symmetry.Oh, direction=Vector3d.zvector()).orientation2color(Orientation(q, symmetry.Oh))
    ours = ipf_colors(q)
    # colour schemes differ in detail (ours: non-negative corner weights; orix: its own key), but the
    # dominant hue and the overall colours agree (reference library: orix IPF colour key)
    assert np.mean(ref.argmax(axis=1) == ours.argmax(axis=1)) > 0.9
    assert np.abs(ref - ours).mean() < 0.06
    corners = np.array([_aligning(h) for h in ((0, 0, 1), (1, 0, 1), (1, 1, 1))])
    assert np.array_equal(
        IPFColorKeyTSL(symmetry.Oh).orientation2color(Orientation(corners, symmetry.Oh)).argmax(axis=1),
        ipf_colors(corners).argmax(axis=1),
    )


def test_colours_invariant_under_crystal_symmetry_and_nan_passes_through():
    q = random_quats(500, 8)
    base = ipf_colors(q, (0.3, -0.2, 0.9))
    for op in CUBIC_OPERATORS:
        assert np.allclose(ipf_colors(quat_multiply(op, q), (0.3, -0.2, 0.9)), base, atol=1e-9)
    qn = np.vstack([q[:2], np.full((1, 4), np.nan)])
    c = ipf_colors(qn)
    assert np.all(np.isnan(c[2])) and np.all(np.isfinite(c[:2]))
    assert ipf_colors(q.reshape(25, 20, 4)).shape == (25, 20, 3)
    assert base.min() >= 0 and base.max() <= 1


def test_plot_shows_ipf_colours_and_grey_unindexed(tmp_path):
    spec = make_specimen((40, 60), 2.0, grain_size_um=20.0, unindexed_fraction=0.05, seed=1)
    om = spec.omap
    ax = plot_ipf_map(om, labels=spec.truth_labels)
    img = np.asarray(ax.images[0].get_array())
    want = ipf_colors(om.quats)
    assert np.allclose(img[om.indexed], want[om.indexed])
    assert np.allclose(img[~om.indexed], UNINDEXED_COLOR)
    # µm axes: the image spans the map extent plus half a step each side
    left, right, bottom, top = ax.images[0].get_extent()
    assert left == pytest.approx(-1.0) and right == pytest.approx(59 * 2.0 + 1.0)
    assert top == pytest.approx(-1.0) and bottom == pytest.approx(39 * 2.0 + 1.0)  # y grows downwards
    assert ax.get_xlabel() == "x (µm)"
    assert any("µm" in t.get_text() for t in ax.texts)  # scale bar label
    save_figure(ax.figure, tmp_path / "ipf.png")
    assert (tmp_path / "ipf.png").stat().st_size > 5000


def test_plot_hex_map_places_shifted_rows_and_draws_polylines(tmp_path):
    q = np.tile(_aligning((0, 0, 1)), (3, 4, 1))
    om = OrientationMap(quats=q, phase=np.zeros((3, 4)), quality=np.ones((3, 4)), indexed=np.ones((3, 4), bool),
                        step=1.0, grid="hex")
    ax = plot_ipf_map(om, boundaries={0: [np.array([[0.0, 0.0], [1.0, 1.0]])]}, key=False)
    img = np.asarray(ax.images[0].get_array())
    # each point is two half-step pixels; odd rows start half a step later (white margin)
    assert img.shape == (3, 9, 3)
    assert np.allclose(img[0, :8], (1, 0, 0)) and np.allclose(img[0, 8], 1.0)
    assert np.allclose(img[1, 0], 1.0) and np.allclose(img[1, 1:], (1, 0, 0))
    left, right, _, _ = ax.images[0].get_extent()
    assert left == pytest.approx(-0.5) and right == pytest.approx(4.0)
    assert len(ax.collections) == 1
    save_figure(ax.figure, tmp_path / "hex.png")
    with pytest.raises(ParameterError, match="labels"):
        plot_ipf_map(om, labels=np.zeros((2, 2), int))


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_scalar_map_shows_values_masks_unindexed_and_checks_shape(tmp_path, grid):
    spec = make_specimen((30, 40), 1.0, grid=grid, grain_size_um=10.0, unindexed_fraction=0.05, seed=2)
    om = spec.omap
    ax = plot_scalar_map(om, om.quality, "quality (–)", labels=spec.truth_labels, title="quality")
    img = ax.images[0].get_array()
    if grid == "square":
        assert np.allclose(img[om.indexed], om.quality[om.indexed])
        assert np.all(img.mask[~om.indexed])
    else:
        assert img.shape == (30, 81)  # two half-step pixels per point plus the shifted-row margin
        assert np.allclose(img[0, 0:2], om.quality[0, 0]) if om.indexed[0, 0] else img.mask[0, 0]
    assert ax.figure.axes[-1].get_ylabel() == "quality (–)"  # colour bar carries the label and unit
    save_figure(ax.figure, tmp_path / "q.png")
    with pytest.raises(ParameterError, match="values"):
        plot_scalar_map(om, np.zeros((3, 3)), "x")
