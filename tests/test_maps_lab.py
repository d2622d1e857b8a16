"""Orientation maps as laboratories export them (issue 16, item 1): the quality property, phases
told by their symmetry and lattice, pixel scans and hex scans with short rows.

Every file read here is written by orix's own writers (each one orix can write) or by hand in
slipnet's text format; nothing here parses a vendor format.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from slipnet.cli import build_parser, main
from slipnet.errors import InputFileError, ParameterError
from slipnet.io import map_summary, read_map, write_map
from slipnet.io.maps import check_structures

orix = pytest.importorskip("orix")
import orix.io as orix_io  # noqa: E402
from diffpy.structure import Atom, Lattice, Structure  # noqa: E402
from orix.crystal_map import CrystalMap, PhaseList  # noqa: E402
from orix.crystal_map import Phase as OrixPhase  # noqa: E402
from orix.io.plugins import plugin_list  # noqa: E402
from orix.quaternion import Rotation  # noqa: E402

#: The file extension of every format orix can write (its plugins that write), found at run time.
ORIX_WRITERS = [p.file_extensions[0] for p in plugin_list if getattr(p, "writes", False)]
SQRT3_2 = math.sqrt(3.0) / 2.0


def cubic(a: float) -> Structure:
    return Structure(lattice=Lattice(a, a, a, 90.0, 90.0, 90.0))


def orthorhombic() -> Structure:
    """Cementite's cell, Å (Fe3C, space group Pnma; from memory)."""
    return Structure(lattice=Lattice(5.09, 6.74, 4.53, 90.0, 90.0, 90.0))


def lab_map(shape=(6, 7), step=0.7, seed=0, *, phases=None, props=None, scan_unit="um", pid=None) -> CrystalMap:
    """A crystal map as a lab file may hold it: orix phase ids from 1, a confidence index, an image quality."""
    rng = np.random.default_rng(seed)
    ny, nx = shape
    n = ny * nx
    y, x = np.indices(shape).reshape(2, -1) * step
    if phases is None:
        phases = {
            1: OrixPhase("ferrite", space_group=229, structure=cubic(2.866)),
            2: OrixPhase("austenite", space_group=225, structure=cubic(3.591)),
            3: OrixPhase("cementite", space_group=62, structure=orthorhombic()),
        }
    if pid is None:
        ids = sorted(phases)
        pid = np.asarray(ids)[rng.integers(0, len(ids), n)]
        pid[: len(ids)] = ids  # every phase has points
        pid[-3:] = -1  # and some points are not indexed
    if props is None:
        props = {"ci": np.round(rng.uniform(0.02, 0.98, n), 4), "iq": np.round(rng.uniform(500, 3000, n), 1)}
    return CrystalMap(Rotation.random(n), phase_id=pid, x=x, y=y, phase_list=PhaseList(phases), prop=props,
                      scan_unit=scan_unit)


# ------------------------------------------------------------------------ files written by orix
@pytest.mark.parametrize("ext", ORIX_WRITERS)
def test_every_orix_writer_round_trips_quality_phases_and_step(tmp_path, ext):
    xmap = lab_map()
    path = tmp_path / f"lab.{ext}"
    orix_io.save(str(path), xmap, overwrite=True)
    omap = read_map(path)
    assert omap.shape == (6, 7) and omap.grid == "square"
    assert omap.step == pytest.approx(0.7, abs=1e-9)
    assert [(p.name, p.structure) for p in omap.phases] == [
        ("ferrite", "bcc"), ("austenite", "fcc"), ("cementite", "other")]
    assert omap.phases[0].lattice_parameter_nm == pytest.approx(0.2866)
    assert omap.phases[1].lattice_parameter_nm == pytest.approx(0.3591)
    # every point keeps its phase (names compared: a writer may renumber the ids)
    names = {1: "ferrite", 2: "austenite", 3: "cementite"}
    want = np.array([names.get(int(k), "") for k in xmap.phase_id]).reshape(6, 7)
    got = np.array([omap.phases[k].name if k >= 0 else "" for k in omap.phase.ravel()]).reshape(6, 7)
    assert np.array_equal(got, want)
    assert np.array_equal(omap.indexed, want != "")
    # the quality is the confidence index (first in the rule), as recorded; 5 decimals in text writers
    ci = xmap.prop["ci"].reshape(6, 7)
    assert np.allclose(omap.quality[omap.indexed], ci[omap.indexed], atol=1e-5)
    assert omap.meta["quality"]["property"] == "ci"
    # orientations as recorded (text writers print Euler angles to 1e-5 rad)
    q = Rotation(xmap.rotations.data).data.reshape(6, 7, 4)
    d = np.minimum(np.abs(omap.quats - q).max(-1), np.abs(omap.quats + q).max(-1))
    assert float(d[omap.indexed].max()) < 1e-4
    # each decision is recorded in the map's metadata
    decisions = omap.meta["decisions"]
    assert any("quality from property 'ci'" in d for d in decisions)
    for name in ("ferrite", "austenite", "cementite"):
        assert any(d.startswith(f"phase {name} ") for d in decisions), name


@pytest.mark.parametrize("ext", ORIX_WRITERS)
def test_slipnet_map_through_every_orix_writer_keeps_its_quality(tmp_path, ext):
    from slipnet.io import to_orix
    from slipnet.synthetic import make_specimen

    spec = make_specimen((12, 15), 1.5, grain_size_um=6.0, seed=4, load_axis=(0.0, 1.0, 0.0))
    rng = np.random.default_rng(1)
    omap = spec.omap
    xmap = to_orix(omap)
    # a writer that knows only its own columns gets slipnet's quality as its confidence index
    xmap.prop["ci"] = np.round(rng.uniform(0.05, 0.95, xmap.size), 5)
    path = tmp_path / f"spec.{ext}"
    orix_io.save(str(path), xmap, overwrite=True)
    back = read_map(path, quality_prop="ci")
    assert back.shape == omap.shape and back.step == pytest.approx(omap.step, abs=1e-9)
    assert [p.structure for p in back.phases] == [p.structure for p in omap.phases]
    assert np.array_equal(back.indexed, omap.indexed)
    ci = xmap.prop["ci"].reshape(omap.shape)
    assert np.allclose(back.quality[omap.indexed], ci[omap.indexed], atol=1e-5)


# ------------------------------------------------------------------------ the quality rule
def test_quality_rule_order_and_each_kind(tmp_path):
    rng = np.random.default_rng(3)
    n = 42
    ci = rng.uniform(0.0, 1.0, n)
    iq = rng.uniform(100.0, 4000.0, n)
    bc = rng.integers(20, 250, n).astype(float)
    mad = rng.uniform(0.1, 2.0, n)
    phases = {0: OrixPhase("ferrite", space_group=229, structure=cubic(2.87))}
    pid = np.zeros(n, int)

    def read(props, **kw):
        path = tmp_path / "q.h5"
        orix_io.save(str(path), lab_map(phases=phases, pid=pid, props=props), overwrite=True)
        return read_map(path, **kw)

    # a confidence index comes first, as recorded
    om = read({"iq": iq, "ci": ci})
    assert om.meta["quality"]["property"] == "ci" and np.allclose(om.quality.ravel(), ci)
    # image quality and band contrast: divided by their largest value
    om = read({"iq": iq, "fit": mad})
    assert om.meta["quality"]["property"] == "iq" and np.allclose(om.quality.ravel(), iq / iq.max())
    om = read({"BC": bc, "MAD": mad})
    assert om.meta["quality"]["property"] == "BC" and np.allclose(om.quality.ravel(), bc / bc.max())
    # a mean angular deviation alone: inverted, the best fit highest
    om = read({"MAD": mad})
    assert np.allclose(om.quality.ravel(), 1.0 - mad / mad.max())
    assert "inverted" in om.meta["quality"]["rule"]
    # a confidence index that is the same everywhere (a writer's zeros) says nothing: skipped
    om = read({"ci": np.zeros(n), "iq": iq})
    assert om.meta["quality"]["property"] == "iq"
    assert any("ci (the same value at every indexed point)" in d for d in om.meta["decisions"])
    # the caller's choice wins; a property with an unknown name is used as recorded
    om = read({"ci": ci, "iq": iq}, quality_prop="iq")
    assert om.meta["quality"]["property"] == "iq" and "as asked" in om.meta["decisions"][-1]
    om = read({"ci": ci, "sharpness": 2.0 * iq}, quality_prop="sharpness")
    assert np.allclose(om.quality.ravel(), 2.0 * iq)
    # no property at all: quality 1, and the reader says so
    om = read({})
    assert np.all(om.quality == 1.0)
    assert any("quality was set to 1" in d and "--quality-prop" in d for d in om.meta["decisions"])


def test_min_quality_now_leaves_out_the_poor_points(tmp_path):
    from slipnet.grains import build_grain_graph

    xmap = lab_map(shape=(10, 12), phases={0: OrixPhase("ferrite", space_group=229, structure=cubic(2.87))},
                   pid=np.zeros(120, int))
    path = tmp_path / "q.h5"
    orix_io.save(str(path), xmap, overwrite=True)
    omap = read_map(path)
    poor = int(np.count_nonzero(xmap.prop["ci"] < 0.3))
    assert poor > 10
    gg = build_grain_graph(omap, threshold_deg=15.0, min_quality=0.3)
    assert int(np.count_nonzero(gg.labels < 0)) == poor


def test_every_command_that_reads_a_map_takes_the_map_options():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.__class__.__name__ == "_SubParsersAction")
    readers = []
    for name, p in sub.choices.items():
        opts = {s for a in p._actions for s in a.option_strings}
        if "--frame-rotation" in opts:  # the map-reading parent
            readers.append(name)
            assert {"--quality-prop", "--phase", "--step-um"} <= opts, name
    assert {"map", "grains", "slip", "stress", "forecast", "notch", "study"} <= set(readers)


def test_a_missing_quality_property_names_the_option_not_a_keyword(tmp_path, capsys):
    path = tmp_path / "q.h5"
    orix_io.save(str(path), lab_map(), overwrite=True)
    assert main(["map", str(path), "--info", "--quality-prop", "contrast"]) == 2
    err = capsys.readouterr().err
    assert "no property 'contrast'" in err and "ci, iq" in err and "--quality-prop NAME" in err
    assert re.search(r"\bquality_prop\b", err) is None  # the option, not a Python keyword
    assert main(["map", str(path), "--info", "--quality-prop", "iq"]) == 0
    out, err = capsys.readouterr()
    assert "quality: iq (image quality" in out
    assert "warning [map]: quality from property 'iq' (image quality) as asked" in err


# ------------------------------------------------------------------------ hexagonal scans
def _hex_points(ny: int, nx: int, step: float, short_parity: int = 1):
    """Point positions of a hex scan whose rows of one parity (from 0) hold one point fewer.

    The positions follow the hex layout orix keeps for such a scan: orix has no hex grid of its
    own, its readers keep each point's x, y as the file gives them (orix 0.15,
    ``orix.io.plugins``; Johnstone et al., orix), and a hex scan puts rows step·√3/2 apart with
    every second row shifted by step/2 and one point shorter (common practice).
    """
    xs, ys = [], []
    for i in range(ny):
        shift = 0.5 * step if i % 2 else 0.0
        count = nx - 1 if i % 2 == short_parity else nx
        for j in range(count):
            xs.append(j * step + shift)
            ys.append(i * step * SQRT3_2)
    return np.array(xs), np.array(ys)


def _hex_table(path, x, y, euler, nx, ny, step):
    lines = ["# slipnet-points 1", "# grid = hex", f"# step_um = {step!r}", f"# nx = {nx}", f"# ny = {ny}",
             "# phase 0 = ferrite bcc 0.2866", "x_um\ty_um\tphi1_deg\tPhi_deg\tphi2_deg\tphase\tquality"]
    for k in range(x.size):
        lines.append(f"{x[k]:.6f}\t{y[k]:.6f}\t{euler[k, 0]:.6f}\t{euler[k, 1]:.6f}\t{euler[k, 2]:.6f}\t0\t0.5")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


@pytest.mark.parametrize("short_parity", [1, 0])
def test_hex_text_map_with_short_rows_has_every_point_in_place(tmp_path, short_parity):
    ny, nx, step = 7, 6, 1.5
    x, y = _hex_points(ny, nx, step, short_parity)
    rng = np.random.default_rng(5)
    euler = np.column_stack([rng.uniform(0, 360, x.size), rng.uniform(0, 180, x.size), rng.uniform(0, 360, x.size)])
    path = tmp_path / "hex.txt"
    _hex_table(path, x, y, euler, nx, ny, step)
    omap = read_map(path)
    assert omap.shape == (ny, nx) and omap.grid == "hex" and omap.step == step
    # every point of the file sits at its own grid node, with its own orientation
    i, j = omap.index_of(x, y)
    assert np.all(i >= 0) and len(set(zip(i.tolist(), j.tolist(), strict=True))) == x.size
    gx, gy = omap.coordinates()
    assert np.allclose(gx[i, j], x, atol=1e-6) and np.allclose(gy[i, j], y, atol=1e-6)
    assert np.allclose(omap.euler()[i, j], euler, atol=1e-5)
    # the nodes past the end of the short rows are the only unindexed ones
    short = np.arange(short_parity, ny, 2)
    assert int(omap.indexed.sum()) == x.size == ny * nx - short.size
    assert not omap.indexed[short, nx - 1].any()
    assert any("one point shorter" in d for d in omap.meta["decisions"])
    # the same points in an orix crystal map, through orix's HDF5 writer, land on the same nodes
    xmap = CrystalMap(Rotation.from_euler(np.deg2rad(euler)), phase_id=np.zeros(x.size, int), x=x, y=y,
                      phase_list=PhaseList({0: OrixPhase("ferrite", space_group=229, structure=cubic(2.866))}),
                      prop={"quality": np.full(x.size, 0.5)}, scan_unit="um")
    h5 = tmp_path / "hex.h5"
    orix_io.save(str(h5), xmap, overwrite=True)
    via_orix = read_map(h5)
    assert via_orix.shape == omap.shape and via_orix.grid == "hex"
    assert np.array_equal(via_orix.indexed, omap.indexed)
    assert np.allclose(via_orix.quats[omap.indexed], omap.quats[omap.indexed], atol=1e-9)


def test_hex_map_missing_any_other_point_is_still_a_partial_grid(tmp_path):
    ny, nx, step = 5, 6, 1.0
    x, y = _hex_points(ny, nx, step)
    keep = np.ones(x.size, bool)
    keep[8] = False  # an inner point of row 1
    euler = np.full((x.size, 3), 10.0)
    path = tmp_path / "hex.txt"
    _hex_table(path, x[keep], y[keep], euler[keep], nx, ny, step)
    with pytest.raises(InputFileError, match=r"partial grid: 3 of 30 points are missing"):
        read_map(path)


# ------------------------------------------------------------------------ phases
def _one_phase_file(tmp_path, phase: OrixPhase, n=20):
    path = tmp_path / "phase.h5"
    xmap = lab_map(shape=(4, 5), phases={1: phase}, pid=np.ones(n, int))
    orix_io.save(str(path), xmap, overwrite=True)
    return path


def test_structure_comes_from_symmetry_and_lattice_never_from_the_name(tmp_path):
    # point group m-3m, no space group: the lattice parameter tells fcc from bcc, whatever the name says
    om = read_map(_one_phase_file(tmp_path, OrixPhase("ferrite", point_group="m-3m", structure=cubic(3.59))))
    assert om.phases[0].structure == "fcc"
    assert "a = 3.59 Å" in om.meta["decisions"][0] and "--phase 'ferrite=bcc'" in om.meta["decisions"][0]
    om = read_map(_one_phase_file(tmp_path, OrixPhase("austenite", point_group="m-3m", structure=cubic(2.87))))
    assert om.phases[0].structure == "bcc"
    # listed atom sites decide without a guess
    fcc_atoms = Structure(atoms=[Atom("Ni", xyz) for xyz in ((0, 0, 0), (0, .5, .5), (.5, 0, .5), (.5, .5, 0))],
                          lattice=Lattice(3.3, 3.3, 3.3, 90, 90, 90))
    om = read_map(_one_phase_file(tmp_path, OrixPhase("alloy", point_group="m-3m", structure=fcc_atoms)))
    assert om.phases[0].structure == "fcc" and "atom sites" in om.meta["decisions"][0]
    # between the two families nothing is guessed: the error names the fix
    with pytest.raises(InputFileError, match=r"a = 3.4 Å lies between.*--phase 'alloy=bcc'"):
        read_map(_one_phase_file(tmp_path, OrixPhase("alloy", point_group="m-3m", structure=cubic(3.4))))


def test_a_phase_without_symmetry_is_refused_until_the_caller_says_what_it_is(tmp_path, capsys):
    path = _one_phase_file(tmp_path, OrixPhase("Fe", structure=cubic(2.87)))
    with pytest.raises(InputFileError, match=r"phase 'Fe' \(id 1, 20 points\): the file gives it no space group and "
                       r"no point group.*--phase 'Fe=bcc'"):
        read_map(path)
    om = read_map(path, structures={"Fe": "bcc"})
    assert om.phases[0].structure == "bcc" and "as given" in om.meta["decisions"][0]
    assert read_map(path, structures={"1": "fcc"}).phases[0].structure == "fcc"  # by orix's phase id
    assert main(["map", str(path), "--info", "--phase", "fe=bcc"]) == 0  # names match ignoring case
    out, err = capsys.readouterr()
    assert "0: Fe (bcc, a = 0.287 nm), 20 points" in out and "warning [map]: phase Fe (id 1): bcc, as given" in err
    with pytest.raises(InputFileError, match=r"structures names phase 'Cu', which the file does not have; its "
                       r"phases are 'Fe' \(id 1\)"):
        read_map(path, structures={"Cu": "fcc"})
    with pytest.raises(ParameterError, match=r"phase 'Fe' should be one of bcc, fcc, other, ignore; got 'hcp'"):
        read_map(path, structures={"Fe": "hcp"})
    assert main(["map", str(path), "--info", "--phase", "Fe"]) == 2
    assert "--phase should be NAME=STRUCTURE" in capsys.readouterr().err


def test_a_non_cubic_phase_is_kept_counted_and_left_out_of_slip(tmp_path):
    from slipnet.grains import build_grain_graph
    from slipnet.slip import slip_activity
    from slipnet.stress import solve_elastic

    rng = np.random.default_rng(8)
    ny, nx = 16, 18
    # a ferrite matrix of a few grains with a cementite particle in the middle
    pid = np.ones((ny, nx), int)
    pid[6:10, 7:12] = 2
    grain = (np.indices((ny, nx))[1] * 3 // nx).ravel()
    rot = Rotation.random(3).data[grain]
    rot[pid.ravel() == 2] = Rotation.random(1).data[0]
    phases = {1: OrixPhase("ferrite", space_group=229, structure=cubic(2.866)),
              2: OrixPhase("cementite", space_group=62, structure=orthorhombic())}
    y, x = np.indices((ny, nx)).reshape(2, -1) * 1.0
    xmap = CrystalMap(Rotation(rot), phase_id=pid.ravel(), x=x, y=y, phase_list=PhaseList(phases),
                      prop={"ci": rng.uniform(0.5, 1.0, ny * nx)}, scan_unit="um")
    path = tmp_path / "particle.h5"
    orix_io.save(str(path), xmap, overwrite=True)
    omap = read_map(path)
    assert [p.structure for p in omap.phases] == ["bcc", "other"]
    assert int(np.count_nonzero(omap.indexed & (omap.phase == 1))) == 20  # kept, not unindexed
    summary = "\n".join(map_summary(omap))
    assert "1: cementite (other, point group mmm: shown, not analysed for slip), 20 points" in summary
    # grains: the particle is a grain of its own phase; slip: its Schmid factors are NaN
    gg = build_grain_graph(omap, threshold_deg=10.0)
    act = slip_activity(gg, (0.0, 1.0, 0.0))
    table = act.grains.set_index("grain")
    phase_of = {int(g): int(d["phase"]) for g, d in gg.graph.nodes(data=True)}
    particle = [g for g, ph in phase_of.items() if ph == 1]
    matrix = [g for g, ph in phase_of.items() if ph == 0]
    assert len(particle) == 1 and len(matrix) == 3
    assert table.loc[particle, "schmid_max"].isna().all()
    assert table.loc[matrix, "schmid_max"].notna().all()
    # the elastic solve treats the particle like unindexed points (no constants for it)
    field = solve_elastic(omap, (0.0, 1.0, 0.0), stress=100.0, tol=1e-4)
    assert np.array_equal(field.compliant, omap.phase == 1)
    # 'ignore' leaves its points unindexed instead; a text copy keeps the phase and the decisions
    ignored = read_map(path, structures={"cementite": "ignore"})
    assert [p.name for p in ignored.phases] == ["ferrite"] and int(ignored.indexed.sum()) == ny * nx - 20
    back = read_map(write_map(omap, tmp_path / "particle.txt"))
    assert back.phases == omap.phases and back.meta["decisions"] == omap.meta["decisions"]
    assert np.array_equal(back.phase, omap.phase)


def test_phases_of_a_slipnet_table_can_be_said_too(tmp_path):
    from slipnet.maps import OrientationMap
    from slipnet.maps.orientation_map import AUSTENITE, FERRITE

    rng = np.random.default_rng(2)
    euler = rng.uniform([0, 0, 0], [360, 180, 360], (4, 5, 3))
    phase = np.zeros((4, 5), np.int32)
    phase[:, 3:] = 1
    omap = OrientationMap.from_euler(euler, 1.0, phase=phase, phases=(FERRITE, AUSTENITE))
    path = write_map(omap, tmp_path / "two.txt")
    om = read_map(path, structures={"ferrite": "ignore"})
    assert [p.name for p in om.phases] == ["austenite"]
    assert np.array_equal(om.indexed, phase == 1) and np.all(om.phase[om.indexed] == 0)
    om = read_map(path, structures={"0": "other"})  # the first phase becomes 'other': it moves after austenite
    assert [(p.name, p.structure) for p in om.phases] == [("austenite", "fcc"), ("ferrite", "other")]
    assert np.array_equal(om.phase, np.where(phase == 1, 0, 1))
    with pytest.raises(ParameterError, match=r"step_um is for files read through orix"):
        read_map(path, step_um=1.0)


# ------------------------------------------------------------------------ pixel scans
def test_a_pixel_scan_needs_the_step_in_micrometres(tmp_path, capsys):
    xmap = lab_map(shape=(5, 6), step=1.0, scan_unit="px")
    path = tmp_path / "pixels.h5"
    orix_io.save(str(path), xmap, overwrite=True)
    with pytest.raises(InputFileError, match=r"scan unit is px \(pixels\).*--step-um UM"):
        read_map(path)
    om = read_map(path, step_um=0.25)
    assert om.step == 0.25 and om.extent == pytest.approx((0.0, 1.25, 0.0, 1.0))
    assert any("scan unit px" in d and "0.25 µm" in d for d in om.meta["decisions"])
    assert main(["map", str(path), "--info"]) == 2
    assert "--step-um" in capsys.readouterr().err
    assert main(["map", str(path), "--info", "--step-um", "0.25"]) == 0
    assert "step 0.25 µm" in capsys.readouterr().out


# ------------------------------------------------------------------------ the study says it too
def test_study_options_carry_phases_and_step(tmp_path):
    from slipnet.cli.study import options_from_args
    from slipnet.study import read_study_file, write_study_file

    path = tmp_path / "pixels.h5"
    orix_io.save(str(path), lab_map(scan_unit="px", step=1.0), overwrite=True)
    args = build_parser().parse_args(["study", str(path), "--side", "left", "--load-axis", "0", "1", "0",
                                      "--phase", "Iron fcc=fcc", "--phase", "cementite=ignore", "--step-um", "0.5"])
    opts = options_from_args(args)
    assert opts.map.structures == {"Iron fcc": "fcc", "cementite": "ignore"} and opts.map.step_um == 0.5
    study = write_study_file(opts, tmp_path / "study.toml")
    assert 'structures = {"Iron fcc" = "fcc", cementite = "ignore"}' in study.read_text(encoding="utf-8")
    again = read_study_file(study)
    assert again.map == opts.map
    from dataclasses import replace

    with pytest.raises(ParameterError, match=r"should be one of bcc, fcc, other, ignore"):
        replace(opts, map=replace(opts.map, structures={"x": "hcp"})).check()
    assert check_structures(None) == {}
