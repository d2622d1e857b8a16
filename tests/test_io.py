"""Tests of slipnet.io: our text table and bundle, the orix bridge, and malformed-input errors."""

from __future__ import annotations

import math
import os
import time
from pathlib import Path

import numpy as np
import pytest

from slipnet.crystal import quat_rotate
from slipnet.errors import InputFileError, ParameterError
from slipnet.io import from_orix, map_summary, parse_frame_rotation, read_map, to_orix, write_map
from slipnet.maps import OrientationMap
from slipnet.maps.orientation_map import AUSTENITE, FERRITE

orix = pytest.importorskip("orix")
from orix.quaternion import Orientation, Rotation  # noqa: E402
from orix.quaternion.symmetry import O  # noqa: E402

GRIDS = ("square", "hex")
# Header of a two-phase table: magic, units, grid, step, nx, ny, name, 2 phase lines, meta, columns.
FIRST_DATA_LINE = 12


def make_map(grid: str = "square", shape=(6, 9), seed: int = 0, step: float = 0.5) -> OrientationMap:
    """A two-phase map with unindexed points and random orientations (seeded)."""
    rng = np.random.default_rng(seed)
    euler = rng.uniform([0.0, 0.0, 0.0], [360.0, 180.0, 360.0], (*shape, 3))
    phase = (rng.random(shape) < 0.35).astype(np.int32)
    indexed = rng.random(shape) > 0.12
    indexed[0, 0] = False
    phase[0, 1], phase[0, 2] = 0, 1  # both phases present
    indexed[0, 1] = indexed[0, 2] = True
    return OrientationMap.from_euler(
        euler,
        step,
        grid=grid,
        phase=phase,
        quality=rng.uniform(0.0, 1.0, shape),
        indexed=indexed,
        phases=(FERRITE, AUSTENITE),
        origin=(3.25, -1.5),
        name="two phase test",
    )


def same_rotation_error(qa: np.ndarray, qb: np.ndarray) -> float:
    """Largest |qa − qb| over indexed rows, allowing the q ≡ −q sign freedom."""
    d = np.minimum(np.abs(qa - qb).max(axis=-1), np.abs(qa + qb).max(axis=-1))
    return float(np.nanmax(d))


def assert_same_map(a: OrientationMap, b: OrientationMap, *, tol: float, origin_tol: float = 1e-6) -> None:
    assert a.shape == b.shape
    assert a.grid == b.grid
    assert a.step == b.step
    assert a.phases == b.phases
    np.testing.assert_array_equal(a.indexed, b.indexed)
    np.testing.assert_array_equal(a.phase, b.phase)
    np.testing.assert_allclose(a.quality, b.quality, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(a.origin, b.origin, atol=origin_tol)
    assert same_rotation_error(a.quats[a.indexed], b.quats[b.indexed]) <= tol


# ------------------------------------------------------------------------------------ round trips
@pytest.mark.parametrize("grid", GRIDS)
def test_text_round_trip_within_print_precision(tmp_path, grid):
    omap = make_map(grid)
    path = write_map(omap, tmp_path / "m.txt")
    back = read_map(path)
    # angles are printed to 1e-10°, so quaternions agree far below 1e-9
    assert_same_map(omap, back, tol=1e-9)
    assert back.name == omap.name
    assert np.all(np.isnan(back.quats[~back.indexed]))


@pytest.mark.parametrize("grid", GRIDS)
def test_text_rows_in_any_order(tmp_path, grid):
    omap = make_map(grid, seed=3)
    path = write_map(omap, tmp_path / "m.tsv")
    lines = path.read_text(encoding="utf-8").splitlines()
    head, rows = lines[: FIRST_DATA_LINE - 1], lines[FIRST_DATA_LINE - 1 :]
    order = np.random.default_rng(1).permutation(len(rows))
    path.write_text("\n".join(head + [rows[k] for k in order]) + "\n", encoding="utf-8")
    assert_same_map(omap, read_map(path), tol=1e-9)


def test_text_columns_in_any_order_and_blank_lines(tmp_path):
    omap = make_map("square", shape=(3, 4))
    path = write_map(omap, tmp_path / "m.txt")
    lines = path.read_text(encoding="utf-8").splitlines()
    perm = [6, 5, 0, 1, 4, 3, 2]
    cols = lines[FIRST_DATA_LINE - 2].split("\t")
    out = [*lines[: FIRST_DATA_LINE - 2], "  ".join(cols[k] for k in perm)]
    for row in lines[FIRST_DATA_LINE - 1 :]:
        f = row.split("\t")
        out += [" ".join(f[k] for k in perm), ""]
    path.write_text("\n".join(out), encoding="utf-8")
    assert_same_map(omap, read_map(path), tol=1e-9)


@pytest.mark.parametrize("grid", GRIDS)
def test_bundle_round_trip_is_bit_identical(tmp_path, grid):
    omap = make_map(grid, seed=5)
    omap = OrientationMap(
        quats=omap.quats,
        phase=omap.phase,
        quality=omap.quality,
        indexed=omap.indexed,
        step=0.1 + 0.2,  # not exactly representable in decimal: must survive unchanged
        grid=grid,
        phases=omap.phases,
        origin=(1.0 / 3.0, -2.0 / 7.0),
        name="bündle",
        meta={"frame_rotation": [0.0, 1.0, 0.0, 0.0], "note": "x"},
    )
    path = write_map(omap, tmp_path / "m.npz")
    back = read_map(path)
    for attr in ("quats", "phase", "quality", "indexed"):
        a, b = getattr(omap, attr), getattr(back, attr)
        assert a.dtype == b.dtype and a.shape == b.shape
        assert a.tobytes() == b.tobytes(), attr
    assert back.step == omap.step and back.origin == omap.origin
    assert back.phases == omap.phases and back.name == omap.name and back.meta == omap.meta
    # no pickles inside: plain numpy loads every entry with pickles refused
    with np.load(path, allow_pickle=False) as npz:
        assert all(npz[k].dtype != object for k in npz.files)


@pytest.mark.parametrize("grid", GRIDS)
def test_orix_round_trip_loses_nothing(grid):
    omap = make_map(grid, seed=7)
    xmap = to_orix(omap)
    # orix's own Euler conversion (Bunge, lab -> crystal) of our angles gives our rotations
    euler = np.deg2rad(omap.euler()[omap.indexed])
    ref = Rotation.from_euler(euler)
    got = xmap.rotations[xmap.is_indexed]
    ang = got.angle_with(ref, degrees=True)  # orix (Johnstone et al. 2020, orix), no symmetry
    assert np.max(ang) < 1e-5
    assert np.array_equal(xmap.phase_id, omap.phase.ravel())
    np.testing.assert_allclose(xmap.x, omap.coordinates()[0].ravel())
    back = from_orix(xmap)
    assert_same_map(omap, back, tol=1e-15, origin_tol=1e-12)
    assert back.meta["quality_source"] == "quality"
    # and our Euler angles of the result agree with orix's conversion back to Euler angles
    e_orix = Orientation(xmap.rotations[xmap.is_indexed]).to_euler(degrees=True)
    q_ours = back.quats[back.indexed]
    q_from_orix = Rotation.from_euler(np.deg2rad(e_orix)).data
    assert same_rotation_error(q_ours, q_from_orix) < 1e-9


def test_from_orix_renumbers_phase_ids_and_picks_quality_prop():
    omap = make_map("square", shape=(4, 5), seed=2)
    xmap = to_orix(omap)
    from orix.crystal_map import CrystalMap

    pid = np.where(xmap.phase_id >= 0, xmap.phase_id + 1, -1)  # orix files often number phases from 1
    plist = xmap.phases.deepcopy()
    plist._dict = {(k + 1 if k >= 0 else k): v for k, v in plist._dict.items()}
    xm2 = CrystalMap(
        xmap.rotations,
        phase_id=pid,
        x=xmap.x,
        y=xmap.y,
        phase_list=plist,
        prop={"contrast": 2.0 * omap.quality.ravel()},
        scan_unit="um",
    )
    back = from_orix(xm2, quality_prop="contrast")
    np.testing.assert_array_equal(back.phase, omap.phase)
    np.testing.assert_allclose(back.quality, 2.0 * omap.quality)
    assert back.meta["orix_phase_ids"] == {"1": 0, "2": 1}
    with pytest.raises(InputFileError, match=r"no property 'quality'.*contrast"):
        from_orix(xm2, quality_prop="quality")


def test_from_orix_refuses_irregular_coordinates():
    omap = make_map("square", shape=(4, 5), seed=2)
    xmap = to_orix(omap)
    from orix.crystal_map import CrystalMap

    x = xmap.x.copy()
    x[7] += 0.2  # 0.4 step off its node
    bad = CrystalMap(xmap.rotations, phase_id=xmap.phase_id, x=x, y=xmap.y, phase_list=xmap.phases, scan_unit="um")
    with pytest.raises(InputFileError, match=r"point 7 of the crystal map has x = .* not on row 1"):
        from_orix(bad)


@pytest.mark.parametrize("grid", GRIDS)
def test_orix_written_file_is_read_through_orix_loader(tmp_path, grid):
    import orix.io

    omap = make_map(grid, seed=11)
    path = tmp_path / "written_by_orix.h5"
    orix.io.save(str(path), to_orix(omap), overwrite=True)
    back = read_map(path, quality_prop="quality")
    assert back.grid == grid  # worked out from orix's coordinates
    assert_same_map(omap, back, tol=1e-12, origin_tol=1e-9)
    assert back.meta["source_file"] == path.name


def test_frame_rotation_on_load_matches_orix_composition(tmp_path):
    omap = make_map("square", seed=13)
    path = write_map(omap, tmp_path / "m.npz")
    turned = read_map(path, frame_rotation=((1.0, 0.0, 0.0), 180.0))
    # orix (Johnstone et al. 2020): new orientation = O · R⁻¹ with R the 180° turn about x
    r = Rotation.from_axes_angles([1.0, 0.0, 0.0], np.pi)
    o = Orientation(omap.quats[omap.indexed], symmetry=O)
    expected = (o * ~r).data
    assert same_rotation_error(turned.quats[turned.indexed], expected) < 1e-12
    # turning the sample over about x sends sample +z to −z: the crystal sees the old −z as new +z
    z = np.array([0.0, 0.0, 1.0])
    np.testing.assert_allclose(
        quat_rotate(turned.quats[turned.indexed], z), quat_rotate(omap.quats[omap.indexed], -z), atol=1e-12
    )
    assert np.allclose(np.abs(turned.meta["frame_rotation"]), [0.0, 1.0, 0.0, 0.0])


def test_frame_rotation_as_quaternion_distinguishes_direction(tmp_path):
    omap = make_map("hex", seed=17)
    path = write_map(omap, tmp_path / "m.txt")
    q90z = np.array([math.cos(math.pi / 4), 0.0, 0.0, math.sin(math.pi / 4)])
    turned = read_map(path, frame_rotation=q90z)
    r = Rotation(q90z)
    o = Orientation(omap.quats[omap.indexed], symmetry=O)
    # orix (Johnstone et al. 2020) composition O · R⁻¹; O · R would be 180° away for a 90° turn
    assert same_rotation_error(turned.quats[turned.indexed], (o * ~r).data) < 1e-9
    assert same_rotation_error(turned.quats[turned.indexed], (o * r).data) > 0.1


def test_parse_frame_rotation_refuses_bad_input():
    with pytest.raises(ParameterError, match="frame_rotation axis should be 3"):
        parse_frame_rotation(((1.0, 0.0), 90.0))
    with pytest.raises(ParameterError, match="non-zero quaternion"):
        parse_frame_rotation([0.0, 0.0, 0.0, 0.0])


# ------------------------------------------------------------------------------------ malformed input
def _table(tmp_path, name="m.txt", shape=(3, 4), grid="square"):
    omap = make_map(grid, shape=shape, seed=21)
    path = write_map(omap, tmp_path / name)
    return path, path.read_text(encoding="utf-8").splitlines()


def _rewrite(path, lines):
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def _check_raises(path, match):
    before = sorted(os.listdir(path.parent))
    with pytest.raises(InputFileError, match=match) as info:
        read_map(path)
    assert str(path) in str(info.value)  # the message names the file
    assert sorted(os.listdir(path.parent)) == before  # and nothing was written
    return info.value


def test_missing_column(tmp_path):
    path, lines = _table(tmp_path)
    k = FIRST_DATA_LINE - 2
    lines[k] = lines[k].replace("\tquality", "")
    lines[k + 1 :] = [r.rsplit("\t", 1)[0] for r in lines[k + 1 :]]
    _rewrite(path, lines)
    err = _check_raises(path, r"line 11, column 'quality': column 'quality' is missing")
    assert err.column == "quality"


def test_unknown_column(tmp_path):
    path, lines = _table(tmp_path)
    lines[FIRST_DATA_LINE - 2] = lines[FIRST_DATA_LINE - 2].replace("Phi_deg", "PHI")
    _rewrite(path, lines)
    _check_raises(path, r"line 11, column 'PHI': unknown column 'PHI'; the columns are x_um")


def test_non_uniform_grid(tmp_path):
    path, lines = _table(tmp_path)
    f = lines[FIRST_DATA_LINE + 4].split("\t")  # row 1, column 1 of a 3×4 map (line 17)
    f[0] = f"{float(f[0]) + 0.13:.6f}"
    lines[FIRST_DATA_LINE + 4] = "\t".join(f)
    _rewrite(path, lines)
    _check_raises(path, r"line 17, column 'x_um': data row 6 has x = .* not on row 1 of a square grid")


def test_non_uniform_rows(tmp_path):
    path, lines = _table(tmp_path, grid="hex")
    f = lines[FIRST_DATA_LINE].split("\t")
    f[1] = f"{float(f[1]) + 0.2:.6f}"
    lines[FIRST_DATA_LINE] = "\t".join(f)
    _rewrite(path, lines)
    _check_raises(path, r"line 13, column 'y_um': .*not on a hex grid")


def test_partial_grid(tmp_path):
    path, lines = _table(tmp_path)
    del lines[FIRST_DATA_LINE + 5]  # row 1, column 2
    _rewrite(path, lines)
    _check_raises(path, r"partial grid: 1 of 12 points are missing, the first at row 1, column 2.*phase -1")


def test_duplicated_point(tmp_path):
    path, lines = _table(tmp_path)
    lines.append(lines[FIRST_DATA_LINE + 2])
    _rewrite(path, lines)
    _check_raises(path, r"line 24: data row 13 .* repeats a point")


def test_point_outside_declared_size(tmp_path):
    path, lines = _table(tmp_path)
    lines = [ln.replace("# nx = 4", "# nx = 3") for ln in lines]
    _rewrite(path, lines)
    _check_raises(path, r"line 15: .*outside the declared 3 rows × 3 columns")


def test_nan_value(tmp_path):
    path, lines = _table(tmp_path)
    f = lines[FIRST_DATA_LINE + 1].split("\t")
    f[2] = "nan"
    lines[FIRST_DATA_LINE + 1] = "\t".join(f)
    _rewrite(path, lines)
    _check_raises(path, r"line 14, column 'phi1_deg': value nan is not a finite number")


@pytest.mark.parametrize(("col", "value", "limit"), [(3, "180.5", "180"), (2, "-12", "360"), (4, "361", "360")])
def test_angle_out_of_range(tmp_path, col, value, limit):
    path, lines = _table(tmp_path)
    f = lines[FIRST_DATA_LINE + 1].split("\t")  # an indexed point of phase 0
    assert f[5] != "-1"
    f[col] = value
    lines[FIRST_DATA_LINE + 1] = "\t".join(f)
    _rewrite(path, lines)
    name = ("phi1_deg", "Phi_deg", "phi2_deg")[col - 2]
    _check_raises(path, rf"line 14, column '{name}': angle {float(value)!r}° lies outside \[0, {limit}\]")


def test_radians_looking_file(tmp_path):
    omap = make_map("square", shape=(5, 5), seed=4)
    # the same angles in radians, now claimed as degrees: every angle at most 2π
    rad = OrientationMap.from_euler(np.deg2rad(omap.euler()), 1.0, indexed=omap.indexed)
    path = write_map(rad, tmp_path / "r.txt")
    _check_raises(path, r"looks like radians.*multiply the angle columns by 180/π")


def test_unknown_phase(tmp_path):
    path, lines = _table(tmp_path)
    f = lines[FIRST_DATA_LINE + 3].split("\t")
    f[5] = "2"
    lines[FIRST_DATA_LINE + 3] = "\t".join(f)
    _rewrite(path, lines)
    _check_raises(path, r"line 16, column 'phase': unknown phase 2.0; phases are the whole numbers 0..1")


def test_not_a_number_and_wrong_field_count(tmp_path):
    path, lines = _table(tmp_path)
    good = list(lines)
    f = lines[FIRST_DATA_LINE + 2].split("\t")
    f[6] = "high"
    lines[FIRST_DATA_LINE + 2] = "\t".join(f)
    _rewrite(path, lines)
    _check_raises(path, r"line 15, column 'quality': 'high' is not a number")
    good[FIRST_DATA_LINE] += "\t7"
    _rewrite(path, good)
    _check_raises(path, r"line 13: expected 7 values .* found 8")


def test_header_problems(tmp_path):
    path, lines = _table(tmp_path)
    _rewrite(path, [ln for ln in lines if not ln.startswith("# grid")])
    _check_raises(path, r"lacks '# grid = \.\.\.'")
    _rewrite(path, [ln.replace("# step_um", "# stride") for ln in lines])
    _check_raises(path, r"line 4: unknown header key 'stride'; accepted keys are units, grid, step_um")
    _rewrite(path, [ln.replace("fcc", "hcp") for ln in lines])
    _check_raises(path, r"line 9: header 'phase 1'.*STRUCTURE one of bcc, fcc")
    _rewrite(path, [ln.replace("# grid = square", "# grid = triangle") for ln in lines])
    _check_raises(path, r"line 3: header 'grid': grid should be one of square, hex")
    _rewrite(path, ["x_um y_um", *lines[1:]])
    _check_raises(path, r"line 1: the first line should be '# slipnet-points 1'")
    _rewrite(path, lines[: FIRST_DATA_LINE - 1])
    _check_raises(path, r"header but no data rows")


def test_empty_file_and_binary_garbage(tmp_path):
    empty = tmp_path / "e.txt"
    empty.write_bytes(b"")
    _check_raises(empty, r"the file is empty")
    garbage = np.random.default_rng(0).integers(0, 256, 4096, dtype=np.uint8).tobytes()
    for name, match in [
        ("g.txt", r"line 1: the content is not a slipnet map: a .txt file should be UTF-8 text"),
        ("g.npz", r"should be a slipnet bundle"),
        ("g.bin", r"orix's loader could not read it"),
    ]:
        p = tmp_path / name
        p.write_bytes(garbage)
        _check_raises(p, match)
    with pytest.raises(InputFileError, match="no such file"):
        read_map(tmp_path / "absent.txt")


def test_damaged_or_foreign_bundle(tmp_path):
    omap = make_map("square", shape=(3, 3))
    path = write_map(omap, tmp_path / "m.npz")
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    _check_raises(path, r"cannot read the bundle")
    with open(tmp_path / "other.npz", "wb") as fh:
        np.savez(fh, a=np.zeros(3))
    _check_raises(tmp_path / "other.npz", r"not a slipnet bundle \(no 'bundle_format' entry\)")
    full = dict(np.load(write_map(omap, tmp_path / "n.npz"), allow_pickle=False))
    del full["quality"]
    with open(tmp_path / "n.npz", "wb") as fh:
        np.savez_compressed(fh, **full)
    _check_raises(tmp_path / "n.npz", r"column 'quality': the bundle lacks the entry 'quality'")


def test_write_map_refuses_other_extensions_and_writes_nothing(tmp_path):
    omap = make_map("square", shape=(3, 3))
    with pytest.raises(ParameterError, match=r"slipnet writes text tables \(\.txt, \.tsv\) and bundles \(\.npz\)"):
        write_map(omap, tmp_path / "m.h5")
    bad_meta = OrientationMap(
        omap.quats, omap.phase, omap.quality, omap.indexed, omap.step, phases=omap.phases, meta={"f": object()}
    )
    for name in ("m.txt", "m.npz"):
        with pytest.raises(ParameterError, match="JSON-compatible"):
            write_map(bad_meta, tmp_path / name)
    assert os.listdir(tmp_path) == []
    write_map(omap, tmp_path / "m.npz")
    with pytest.raises(ParameterError, match="exists"):
        write_map(omap, tmp_path / "m.npz", overwrite=False)


def test_map_summary_and_cli(tmp_path, capsys):
    from slipnet.cli import main

    omap = make_map("hex", shape=(4, 6), seed=9)
    src = write_map(omap, tmp_path / "m.npz")
    lines = map_summary(omap)
    assert "shape: 4 rows × 6 columns (24 points)" in lines
    assert main(["map", str(src), "--info"]) == 0
    out = capsys.readouterr().out
    assert "grid: hex, step 0.5 µm" in out
    assert f"indexed: {int(omap.indexed.sum())} points" in out
    assert main(["map", str(src), str(tmp_path / "m.txt"), "--frame-rotation", "1,0,0@180"]) == 0
    back = read_map(tmp_path / "m.txt")
    assert np.allclose(np.abs(back.meta["frame_rotation"]), [0.0, 1.0, 0.0, 0.0])
    # a malformed input makes the command fail without writing the output
    (tmp_path / "bad.txt").write_text("# slipnet-points 1\n", encoding="utf-8")
    assert main(["map", str(tmp_path / "bad.txt"), str(tmp_path / "out.npz")]) == 2
    assert "the file ends before the column line" in capsys.readouterr().err
    assert not (tmp_path / "out.npz").exists()


@pytest.mark.slow
def test_million_point_map_reads_and_writes_in_seconds(tmp_path):
    rng = np.random.default_rng(0)
    shape = (1000, 1000)
    omap = OrientationMap.from_euler(
        rng.uniform([0.0, 0.0, 0.0], [360.0, 180.0, 360.0], (*shape, 3)),
        0.2,
        grid="hex",
        indexed=rng.random(shape) > 0.05,
        quality=rng.random(shape),
    )
    t0 = time.perf_counter()
    for name in ("big.txt", "big.npz"):
        back = read_map(write_map(omap, tmp_path / name))
        assert back.shape == shape
    # seconds, not minutes (generous bound for a shared machine)
    assert time.perf_counter() - t0 < 90.0


def test_format_document_example_reads(tmp_path):
    import pathlib
    import re

    doc = pathlib.Path(__file__).resolve().parents[1] / "docs" / "map-format.md"
    block = re.search(r"```\n(# slipnet-points.*?)```", doc.read_text(encoding="utf-8"), re.S).group(1)
    path = tmp_path / "example.txt"
    path.write_text(block, encoding="utf-8")
    omap = read_map(path)
    assert omap.shape == (2, 3) and omap.grid == "square" and omap.step == 0.5
    assert omap.name == "coupon 4, notch root"
    assert not omap.indexed[0, 2] and omap.phase[1, 0] == 1
    np.testing.assert_allclose(omap.euler()[0, 1], [12.7, 45.1, 79.8], atol=1e-9)


@pytest.mark.parametrize(("grid", "shape"), [("square", (3, 300)), ("hex", (4, 300)), ("hex", (5, 1))])
def test_from_orix_recovers_step_from_rounded_coordinates(grid, shape):
    from orix.crystal_map import CrystalMap

    omap = OrientationMap.from_euler(np.zeros((*shape, 3)), 0.1, grid=grid)
    xmap = to_orix(omap)
    # float32 coordinates, as some files store them: 0.1 µm is not representable
    x32 = xmap.x.astype(np.float32) if xmap.x is not None else np.zeros(xmap.size, np.float32)
    y32 = xmap.y.astype(np.float32)
    xm = CrystalMap(xmap.rotations, phase_id=xmap.phase_id, x=x32, y=y32, phase_list=xmap.phases, scan_unit="um")
    back = from_orix(xm)
    assert back.grid == grid and back.shape == shape
    assert back.step == pytest.approx(0.1, rel=1e-6)


def _readers():
    from slipnet.io import read_csv_table, read_grain_graph, read_map, read_strain
    from slipnet.io.study import read_study
    from slipnet.study import read_study_file

    return {
        "map": read_map, "strain": read_strain, "graph": read_grain_graph, "study": read_study,
        "study file": read_study_file, "table": lambda p: read_csv_table(p, ("x_um",), "sites"),
    }


@pytest.mark.parametrize("reader", ["map", "strain", "graph", "study", "study file", "table"])
@pytest.mark.parametrize("kind", ["folder", "fifo", "device"])
def test_readers_refuse_folders_pipes_and_devices_at_once(tmp_path, reader, kind):
    # issue 18 item 1: a folder, a named pipe or /dev/zero given as a file is refused before it is
    # opened (a FIFO would block the read, /dev/zero would never end); an alarm turns a hang into a failure
    import os
    import signal

    if kind == "folder":
        path, word = tmp_path / "a_folder.npz", "folder"
        path.mkdir()
    elif kind == "fifo":
        if not hasattr(os, "mkfifo"):
            pytest.skip("no named pipes on this platform")
        path, word = tmp_path / "pipe.txt", "FIFO"
        os.mkfifo(path)
    else:
        path, word = Path("/dev/zero"), "device"
        if not path.exists():
            pytest.skip("no /dev/zero on this platform")
    old = signal.signal(signal.SIGALRM, lambda *a: pytest.fail(f"{reader} reader hung on a {kind}"))
    signal.alarm(20)
    try:
        with pytest.raises(InputFileError, match=word):
            _readers()[reader](path)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def test_a_text_map_declaring_an_impossible_grid_is_refused_before_allocating(tmp_path):
    # issue 18 item 1: the grid a text map declares (nx, ny in its header) is checked against the
    # memory budget before anything of that size is allocated (a far-off point is refused as
    # outside the declared grid before that)
    from slipnet.synthetic import make_specimen

    src = tmp_path / "small.txt"
    write_map(make_specimen((3, 4), 1.0, grain_size_um=2.0, seed=1).omap, src)
    lines = src.read_text(encoding="utf-8").splitlines()
    lines = [("# nx = 100000000" if ln.startswith("# nx =") else "# ny = 1000000" if ln.startswith("# ny =")
              else ln) for ln in lines]
    bomb = tmp_path / "bomb.txt"
    bomb.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.raises(InputFileError, match="memory budget"):
        read_map(bomb)


def _npz_bomb(path: Path, members: tuple[str, ...]) -> Path:
    """An .npz whose members declare (10⁶, 10⁶, 4) float64 arrays (32 TB) in a few bytes each."""
    import io
    import zipfile

    from numpy.lib import format as npy

    with zipfile.ZipFile(path, "w") as zf:
        for name in members:
            buf = io.BytesIO()
            npy.write_array_header_1_0(buf, {"descr": "<f8", "fortran_order": False, "shape": (10**6, 10**6, 4)})
            zf.writestr(f"{name}.npy", buf.getvalue() + b"\0" * 64)
    return path


@pytest.mark.parametrize("reader", ["map", "strain", "graph"])
def test_npz_bombs_are_refused_from_their_headers_before_loading(tmp_path, reader):
    # issue 18 item 1: the shapes an archive declares are checked against the memory budget before
    # numpy allocates them (a MemoryError or a hang before)
    from slipnet.io import read_grain_graph, read_strain

    bomb = _npz_bomb(tmp_path / "bomb.npz", ("quats", "header", "graph_meta", "bundle_format"))
    read = {"map": read_map, "strain": read_strain, "graph": read_grain_graph}[reader]
    with pytest.raises(InputFileError, match=r"memory budget.*SLIPNET_MEMORY_BUDGET") as err:
        read(bomb)
    assert "(1000000, 1000000, 4)" in str(err.value)
