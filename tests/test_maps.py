"""The orientation map container: geometry, validation, cropping, frame rotation."""

import math

import numpy as np
import pytest
from orix.quaternion import Orientation, Rotation
from orix.vector import Vector3d

from slipnet.crystal import quat_from_axis_angle, quat_rotate, random_quats
from slipnet.errors import ParameterError
from slipnet.maps import OrientationMap, Phase, apply_frame_rotation


def _map(ny=4, nx=5, grid="square", step=0.5):
    q = random_quats(ny * nx, seed=1).reshape(ny, nx, 4)
    ind = np.ones((ny, nx), bool)
    ind[0, 0] = False
    return OrientationMap(q, np.zeros((ny, nx), int), np.ones((ny, nx)), ind, step, grid=grid)


def test_square_and_hex_coordinates():
    m = _map()
    x, y = m.coordinates()
    assert x[2, 3] == 1.5 and y[2, 3] == 1.0
    h = _map(grid="hex", step=2.0)
    x, y = h.coordinates()
    # Hex convention: odd rows shifted by half a step, rows step*sqrt(3)/2 apart.
    assert x[1, 0] == 1.0 and math.isclose(y[1, 0], math.sqrt(3))
    assert x[2, 0] == 0.0
    assert math.isclose(h.point_area, 4.0 * math.sqrt(3) / 2)
    # Each hex point's six neighbours are exactly one step away (common practice).
    d = np.hypot(x[1, 1] - x[0, [1, 2]], y[1, 1] - y[0, [1, 2]])
    np.testing.assert_allclose(d, 2.0)


def test_index_of_round_trips_on_both_grids():
    for grid in ("square", "hex"):
        m = _map(6, 7, grid=grid, step=1.3)
        x, y = m.coordinates()
        i, j = m.index_of(x + 0.1, y - 0.1)
        np.testing.assert_array_equal(i, np.indices(m.shape)[0])
        np.testing.assert_array_equal(j, np.indices(m.shape)[1])
        assert m.index_of(-10.0, 0.0) == (-1, -1)
    # Ragged hex border: left of the first (shifted) point of an odd row, the nearest in-grid point
    # is that row's first point, not "outside".
    h = _map(4, 5, grid="hex", step=1.0)
    assert h.index_of(0.05, 0.8) == (1, 0)
    assert h.index_of(4.9, 0.0) == (0, 4)


def test_unindexed_points_carry_nan_and_minus_one():
    m = _map()
    assert np.isnan(m.quats[0, 0]).all() and m.phase[0, 0] == -1
    assert np.isnan(m.euler()[0, 0]).all()
    assert not m.quats.flags.writeable


def test_crop_and_select():
    m = _map(6, 8)
    c = m.crop(1.0, 2.0, 0.5, 1.5)
    assert c.shape == (3, 3) and c.origin == (1.0, 0.5)
    np.testing.assert_array_equal(c.quats[1, 1], m.quats[2, 3])
    h = _map(6, 8, grid="hex")
    ch = h.crop(0.0, 10.0, 0.3, 10.0)  # first row inside is row 1 (odd)
    assert ch.origin[1] == 0.0  # rounded down to an even (unshifted) row
    with pytest.raises(ParameterError, match="holds no point"):
        m.crop(50, 60, 50, 60)
    s = m.select(np.zeros(m.shape, bool))
    assert not s.indexed.any()


def test_frame_rotation_matches_orix():
    # Reference: orix. Re-expressing orientations in a sample frame rotated by R is g' = g R^-1.
    m = _map()
    r = quat_from_axis_angle([1, 0, 0], 180.0)
    m2 = apply_frame_rotation(m, r)
    good = m.indexed
    ref = (Orientation(m.quats[good]) * Rotation(r).inv()).data
    ref = np.where(ref[:, :1] < 0, -ref, ref)
    np.testing.assert_allclose(m2.quats[good], ref, atol=1e-12)
    # A sample vector v in the old frame is R v in the new one; both give the same crystal vector.
    v = np.array([0.3, -0.2, 0.9])
    old = quat_rotate(m.quats[good], v)
    new = quat_rotate(m2.quats[good], (Rotation(r) * Vector3d(v)).data[0])
    np.testing.assert_allclose(old, new, atol=1e-12)
    assert m2.meta["frame_rotation"] == pytest.approx(list(r))


def test_validation_errors():
    q = random_quats(4, seed=2).reshape(2, 2, 4)
    ok = dict(phase=np.zeros((2, 2), int), quality=np.ones((2, 2)), indexed=np.ones((2, 2), bool))
    with pytest.raises(ParameterError, match="step"):
        OrientationMap(q, step=0.0, **ok)
    with pytest.raises(ParameterError, match="grid"):
        OrientationMap(q, step=1.0, grid="triangle", **ok)
    with pytest.raises(ParameterError, match="empty"):
        OrientationMap(np.zeros((0, 3, 4)), np.zeros((0, 3)), np.zeros((0, 3)), np.zeros((0, 3), bool), 1.0)
    with pytest.raises(ParameterError, match="unit quaternions"):
        OrientationMap(q * 2, step=1.0, **ok)
    with pytest.raises(ParameterError, match="phase indices"):
        OrientationMap(q, step=1.0, phase=np.full((2, 2), 3), quality=ok["quality"], indexed=ok["indexed"])
    with pytest.raises(ParameterError, match="structure"):
        Phase("x", "hcp")
    with pytest.raises(ParameterError, match="shape"):
        OrientationMap(q, step=1.0, phase=np.zeros((3, 2), int), quality=ok["quality"], indexed=ok["indexed"])
