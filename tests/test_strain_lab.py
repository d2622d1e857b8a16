"""Strain maps, control points and crack records as laboratories export them, and the sanity checks
that stop or warn with the numbers (issue 16 items 2-3; issue 18's TIFF page-size check)."""

from __future__ import annotations

import json
import struct
import sys
from pathlib import Path

import h5py
import numpy as np
import pandas as pd
import pytest
import scipy.io as sio
import tifffile
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from slipnet.compare import compare_forecast, fit_transform
from slipnet.compare.registration import check_registration
from slipnet.errors import InputFileError, ParameterError, SlipnetError
from slipnet.growth import GrowthPath, calibrate
from slipnet.io import read_control_points, read_growth_record, read_strain, write_strain
from slipnet.maps import StrainSeries

NY, NX = 4, 6
STEP_MM = 0.005  # 5 µm


def _fields():
    """exx, eyy, exy in percent on a 4 × 6 grid, with one point missing."""
    rng = np.random.default_rng(3)
    f = {c: rng.normal(0.0, 0.4, (NY, NX)) for c in ("exx", "eyy", "exy")}
    f["exx"][1, 2] = np.nan
    for c in ("eyy", "exy"):
        f[c][1, 2] = np.nan
    return f


def _lab_csv(path: Path, f: dict, *, header="x [mm], y [mm], E_xx [%], E_yy [%], E_xy [%]", sep=", ",
             encoding="utf-8", preamble=("Correlation export", "Subset 21 px, step 5 px")) -> Path:
    rows = [*preamble, header]
    for i in range(NY):
        for j in range(NX):
            if np.isnan(f["exx"][i, j]):
                continue  # lab exports leave out points that failed to correlate
            vals = (repr(j * STEP_MM), repr(i * STEP_MM), repr(float(f["exx"][i, j])), repr(float(f["eyy"][i, j])),
                    repr(float(f["exy"][i, j])))
            rows.append(sep.join(vals))
    path.write_bytes(("\n".join(rows) + "\n").encode(encoding))
    return path


def _expected(f: dict) -> dict:
    return {c: (f[c] * 1e-2)[None] for c in f}


def _same(series: StrainSeries, f: dict) -> None:
    exp = _expected(f)
    assert series.quantity == "strain" and series.shape == (NY, NX)
    assert series.step == pytest.approx(5.0, rel=1e-12) and series.origin == (0.0, 0.0)
    for c in exp:
        assert np.allclose(series.components[c], exp[c], rtol=1e-13, atol=0, equal_nan=True)


# ----------------------------------------------------------------------------------- lab CSV
def test_lab_csv_with_brackets_and_a_mapping_reads_in_um_and_fractions(tmp_path):
    f = _fields()
    p = _lab_csv(tmp_path / "dic.csv", f, header="X pos [mm], Y pos [mm], strain A [%], strain B [%], strain C [%]")
    s = read_strain(p, columns={"x": "X pos", "y": "Y pos [mm]", "exx": "strain A", "eyy": "strain B",
                                "exy": "#5"})
    _same(s, f)
    # 5 µm from the 0.005 mm spacing; 0.4 % is 0.004: converted, not copied
    assert s.components["exx"][0, 0, 0] == pytest.approx(f["exx"][0, 0] / 100)
    assert s.meta["reader"]["units"]["x"] == "mm" and s.meta["reader"]["missing_points"] == 1
    assert s.meta["reader"]["columns"]["exy"] == "strain C [%]"
    # the aliases find E_xx without a mapping; semicolons and decimal commas as well
    _same(read_strain(_lab_csv(tmp_path / "auto.csv", f)), f)
    eu = tmp_path / "eu.txt"
    semi = _lab_csv(tmp_path / "tmp.csv", f, sep=";", header="x [mm];y [mm];E_xx [%];E_yy [%];E_xy [%]")
    eu.write_text(semi.read_text().replace(".", ","), encoding="utf-8")
    _same(read_strain(eu), f)


def test_lab_csv_without_units_names_the_option(tmp_path):
    p = _lab_csv(tmp_path / "dic.csv", _fields(), header="x, y, exx, eyy, exy")
    with pytest.raises(InputFileError, match=r"no length unit.*length_unit='mm'.*--strain-length-unit"):
        read_strain(p)
    with pytest.raises(InputFileError, match=r"states no unit.*value_unit='%'.*--strain-value-unit"):
        read_strain(p, length_unit="mm")
    _same(read_strain(p, length_unit="mm", value_unit="%"), _fields())
    # the old refusal of a headerless table still names the header
    q = tmp_path / "f.txt"
    q.write_text("step,x,y,u,v\n0,0,0,0,0\n")
    with pytest.raises(InputFileError, match="header"):
        read_strain(q)


def test_units_given_win_over_a_wrong_header_and_are_noted(tmp_path):
    f = _fields()
    p = _lab_csv(tmp_path / "dic.csv", f, header="x [um], y [um], exx [%], eyy [%], exy [%]")
    s = read_strain(p, length_unit="mm")
    _same(s, f)
    assert any("says [um]" in n for n in s.meta["notes"])


def test_pixels_need_a_pixel_size(tmp_path):
    f = _fields()
    p = tmp_path / "px.csv"
    p.write_text(_lab_csv(tmp_path / "t.csv", f).read_text().replace("[mm]", "[px]"))
    with pytest.raises(InputFileError, match=r"pixel size.*pixel_size_um=.*--strain-pixel-size"):
        read_strain(p)
    s = read_strain(p, pixel_size_um=1000.0)  # 0.005 px × 1000 µm/px = 5 µm
    _same(s, f)


def test_engineering_shear_is_halved(tmp_path):
    f = _fields()
    s = read_strain(_lab_csv(tmp_path / "dic.csv", f), shear="engineering")
    assert np.allclose(s.components["exy"], 0.5 * _expected(f)["exy"], equal_nan=True)


def test_latin1_csv_is_detected_or_refused_cleanly(tmp_path):
    f = _fields()
    p = _lab_csv(tmp_path / "l1.csv", f, header="x [µm], y [µm], exx [%], eyy [%], exy [%]", encoding="latin-1",
                 preamble=("Probe: Stahl, Oberfläche poliert",))
    s = read_strain(p, length_unit="mm")  # positions were written in mm
    _same(s, f)
    assert any("not UTF-8" in n and "cp1252" in n for n in s.meta["notes"])
    assert read_strain(p, length_unit="mm", encoding="latin-1").meta.get("notes", []) == [
        "column 'x [µm]' says [µm] but length_unit='mm' was given: read as mm",
        "column 'y [µm]' says [µm] but length_unit='mm' was given: read as mm"]
    with pytest.raises(InputFileError, match=r"line 1.*not utf-8 text.*encoding='cp1252'.*--encoding"):
        read_strain(p, encoding="utf-8")


def test_stray_point_or_mixed_units_refused_before_the_grid_is_made(tmp_path):
    f = _fields()
    p = _lab_csv(tmp_path / "dic.csv", f)
    p.write_text(p.read_text() + "5.0, 0.0, 0.1, 0.1, 0.1\n")  # one row in µm among rows in mm
    with pytest.raises(InputFileError, match=r"fill only .* %.*stray point"):
        read_strain(p)


def test_a_strain_file_in_mm_labelled_um_is_refused_before_allocating(tmp_path, monkeypatch):
    # our text header: the lab converted the extent to µm but left the step in mm, so the grid line
    # declares 10⁶ times the points; the reader must refuse from the header, before parsing or allocating
    s = StrainSeries("strain", {c: np.zeros((3, 4)) for c in ("exx", "eyy", "exy")}, 5.0)
    p = write_strain(s, tmp_path / "f.txt")
    p.write_text(p.read_text().replace("nx=4 ny=3 step=5.0", "nx=4000000 ny=3000000 step=0.005"))

    def no_parse(*a, **k):  # pragma: no cover - reached only if the check came too late
        raise AssertionError("the table was parsed before the declared grid was checked")

    monkeypatch.setattr(pd, "read_csv", no_parse)
    with pytest.raises(InputFileError, match=r"grid of 3000000 × 4000000.*memory budget.*mm read as µm"):
        read_strain(p, budget="1G")


# ----------------------------------------------------------------------------------- MATLAB, HDF5, TIFF
def _mat73(path: Path, arrays: dict) -> Path:
    """A v7.3-style MAT file written through h5py: 512-byte MATLAB header, column-major datasets."""
    with h5py.File(path, "w", userblock_size=512) as fh:
        for k, v in arrays.items():
            a = np.asarray(v, dtype=np.float64)
            a = a.reshape(1, -1) if a.ndim == 1 else a  # MATLAB keeps vectors 1 × n
            d = fh.create_dataset(k, data=a.T)  # MATLAB is column-major: HDF5 sees the dims reversed
            d.attrs["MATLAB_class"] = np.bytes_("double")
    with open(path, "r+b") as fh:
        fh.write(b"MATLAB 7.3 MAT-file, Platform: GLNXA64, Created by slipnet tests HDF5 schema 1.00 .".ljust(116))
    return path


def test_same_data_from_csv_mat_hdf5_and_tiff_give_identical_arrays(tmp_path):
    f = _fields()
    csv = read_strain(_lab_csv(tmp_path / "dic.csv", f))
    x, y = np.arange(NX) * STEP_MM, np.arange(NY) * STEP_MM
    sio.savemat(tmp_path / "v5.mat", {"dic": {"X": x, "Y": y, "exx": f["exx"], "eyy": f["eyy"], "exy": f["exy"]}})
    mat5 = read_strain(tmp_path / "v5.mat", columns={"x": "dic.X", "y": "dic.Y"}, length_unit="mm", value_unit="%")
    mat73 = read_strain(_mat73(tmp_path / "v73.mat", {"x": x, "y": y, **f}), length_unit="mm", value_unit="%")
    with h5py.File(tmp_path / "plain.h5", "w") as fh:
        fh.attrs["length_unit"] = "mm"
        fh.attrs["step"] = STEP_MM
        for c, a in f.items():
            fh.create_dataset(f"fields/{c}", data=a[None]).attrs["units"] = "%"
    h5 = read_strain(tmp_path / "plain.h5")
    with tifffile.TiffWriter(tmp_path / "stack.tif") as tif:
        for c in ("exy", "exx", "eyy"):
            tif.write(f[c].astype(np.float64))
    (tmp_path / "stack.json").write_text(json.dumps({"quantity": "strain", "components": ["exy", "exx", "eyy"],
                                                     "step": STEP_MM, "length_unit": "mm", "value_unit": "%"}))
    tif_json = read_strain(tmp_path / "stack.tif")
    (tmp_path / "stack2.toml").write_text('quantity = "strain"\ncomponents = ["exy", "exx", "eyy"]\n'
                                          f'step = {STEP_MM}\nlength_unit = "mm"\nvalue_unit = "%"\n')
    (tmp_path / "stack2.tif").write_bytes((tmp_path / "stack.tif").read_bytes())
    tif_toml = read_strain(tmp_path / "stack2.tif")
    _same(mat5, f)
    for other in (mat73, h5, tif_json, tif_toml):
        assert other.shape == mat5.shape and other.step == mat5.step and other.origin == mat5.origin
        for c in ("exx", "eyy", "exy"):
            assert np.array_equal(other.components[c], mat5.components[c], equal_nan=True)
            assert np.array_equal(csv.components[c], mat5.components[c], equal_nan=True)


def test_mat_stack_of_steps_and_missing_units(tmp_path):
    f = _fields()
    stack = {c: np.stack([f[c], 2 * f[c]], axis=-1) for c in f}  # MATLAB's ny × nx × steps
    sio.savemat(tmp_path / "steps.mat", {**stack, "cycles": np.array([1000.0, 5000.0])})
    with pytest.raises(InputFileError, match=r"no x, y coordinates.*grid_step=.*--strain-grid-step"):
        read_strain(tmp_path / "steps.mat", value_unit="%")
    with pytest.raises(InputFileError, match=r"length unit.*length_unit='um'.*--strain-length-unit"):
        read_strain(tmp_path / "steps.mat", value_unit="%", grid_step=5.0)
    s = read_strain(tmp_path / "steps.mat", value_unit="%", grid_step=5.0, length_unit="um")
    assert s.n_steps == 2 and s.steps.tolist() == [1000.0, 5000.0]
    assert np.allclose(s.components["exx"][1], 2 * f["exx"] / 100, equal_nan=True)


def test_mat_file_not_text_never_ends_in_a_decode_traceback(tmp_path):
    sio.savemat(tmp_path / "a.mat", {"exx": np.zeros((3, 3))})
    renamed = tmp_path / "a.csv"  # a MATLAB file with the wrong suffix is still read as MATLAB
    renamed.write_bytes((tmp_path / "a.mat").read_bytes())
    with pytest.raises(InputFileError, match=r"no complete set of components.*columns=.*--strain-column"):
        read_strain(renamed)
    junk = tmp_path / "junk.csv"
    junk.write_bytes(b"\x00\x01\x02binary\xff\xfe\x00\x00" * 50)
    with pytest.raises(InputFileError, match="binary data, not text"):
        read_strain(junk)


def test_plain_tiff_without_sidecar_says_what_it_needs(tmp_path):
    tifffile.imwrite(tmp_path / "s.tif", np.zeros((3, 4, 5), np.float32), photometric="minisblack")
    with pytest.raises(InputFileError, match=r"plain TIFF stack \(3 page.*sidecar s\.json.*quantity='strain'"):
        read_strain(tmp_path / "s.tif")
    (tmp_path / "s.json").write_text(json.dumps({"quantity": "strain", "step": 1, "lenght_unit": "um"}))
    with pytest.raises(InputFileError, match=r"unknown sidecar keys \['lenght_unit'\]"):
        read_strain(tmp_path / "s.tif")
    (tmp_path / "s.json").write_text("{not json")
    with pytest.raises(InputFileError, match="not valid JSON"):
        read_strain(tmp_path / "s.tif")


def _patch_tiff_size(path: Path, width: int, height: int) -> None:
    """Rewrite ImageWidth and ImageLength of the first IFD of a little-endian classic TIFF."""
    raw = bytearray(path.read_bytes())
    assert raw[:4] == b"II*\x00"
    ifd = struct.unpack_from("<I", raw, 4)[0]
    n = struct.unpack_from("<H", raw, ifd)[0]
    for k in range(n):
        at = ifd + 2 + 12 * k
        tag, typ = struct.unpack_from("<HH", raw, at)
        if tag in (256, 257):
            value = width if tag == 256 else height
            struct.pack_into("<HHI", raw, at, tag, 4, 1)  # LONG, count 1
            struct.pack_into("<I", raw, at + 8, value)
            del typ
    path.write_bytes(bytes(raw))


def test_tiff_declared_page_size_checked_before_reading_pixels(tmp_path):
    p = tmp_path / "bomb.tif"
    tifffile.imwrite(p, np.zeros((8, 8), np.float64))
    _patch_tiff_size(p, 60000, 60000)  # 60000² float64 = 27 GiB declared by 64 bytes of pixels
    (tmp_path / "bomb.json").write_text(json.dumps({"quantity": "strain", "components": ["exx"]}))
    with pytest.raises(InputFileError, match=r"page 0, of shape \(60000, 60000\).*memory budget"):
        read_strain(p, budget="1G")


def test_damaged_tiff_gives_the_projects_error(tmp_path):
    good = write_strain(StrainSeries("strain", {c: np.ones((5, 6)) for c in ("exx", "eyy", "exy")}, 1.0),
                        tmp_path / "ok.tif")
    raw = good.read_bytes()
    for name, data in (("cut.tif", raw[: len(raw) // 3]), ("head.tif", raw[:10]),
                       ("ifd.tif", raw[:4] + b"\xff\xff\xff\x7f" + raw[8:])):
        (tmp_path / name).write_bytes(data)
        with pytest.raises(InputFileError) as info:
            read_strain(tmp_path / name)
        assert "TiffFileError" not in type(info.value).__name__ and str(tmp_path / name) in str(info.value)


# ----------------------------------------------------------------------------------- tables
def test_control_points_in_any_names_and_units(tmp_path):
    p = tmp_path / "cp.txt"
    p.write_text("mark\tDIC x [px]\tDIC y [px]\tEBSD x [mm]\tEBSD y [mm]\nA\t10\t20\t0,1\t0,2\nB\t30\t20\t0,3\t0,2\n"
                 "C\t10\t50\t0,1\t0,5\n", encoding="utf-8")
    cols = {"strain_x": "DIC x", "strain_y": "DIC y", "map_x": "EBSD x", "map_y": "EBSD y"}
    src, dst = read_control_points(p, columns=cols, pixel_size_um=2.0)
    assert src.tolist() == [[20.0, 40.0], [60.0, 40.0], [20.0, 100.0]]
    assert dst.tolist() == [[100.0, 200.0], [300.0, 200.0], [100.0, 500.0]]
    with pytest.raises(InputFileError, match=r"pixel size.*--strain-pixel-size"):
        read_control_points(p, columns=cols)
    with pytest.raises(InputFileError, match=r"maps 'map_x' to 'EBSD z'.*columns found"):
        read_control_points(p, columns={**cols, "map_x": "EBSD z"})


def test_growth_records_in_kilocycles_and_mm(tmp_path):
    p = tmp_path / "rec.csv"
    p.write_text("Specimen 7, R = 0.1\nN [x1000];a [mm]\n10;0,020\n20;0,031\n30;0,045\n", encoding="utf-8")
    r = read_growth_record(p)
    assert r["cycles"].tolist() == [10000.0, 20000.0, 30000.0]
    assert r["crack_length_um"].tolist() == pytest.approx([20.0, 31.0, 45.0])
    q = tmp_path / "rec2.csv"
    q.write_text("kcycles,length\n1,5\n2,7\n")
    notes: list = []
    r2 = read_growth_record(q, length_unit="um", notes=notes)
    assert r2["cycles"].tolist() == [1000.0, 2000.0]
    with pytest.raises(InputFileError, match=r"states no length unit.*--record-length-unit"):
        read_growth_record(q)
    q.write_text("cycles,crack_length_um\n100,5\n50,6\n")
    with pytest.raises(InputFileError, match=r"line 3.*cycles should increase"):
        read_growth_record(q)
    q.write_text("cycles,crack_length_mm\n100,0.005\n200,0.006\n")
    notes = []
    read_growth_record(q, length_unit="um", notes=notes)
    assert any("reach only 0.006 µm" in n and "length_unit='mm'" in n for n in notes)


def test_cli_growth_calibration_that_fails_is_said_and_not_used(tmp_path, capsys):
    from slipnet.cli import main

    bars = tmp_path / "bars.csv"
    pd.DataFrame({"position_um": [20.0, 45.0, 70.0, 100.0, 130.0]}).to_csv(bars, index=False)
    rec = tmp_path / "rec.csv"
    rec.write_text("N [kcycles],a [um]\n" + "\n".join(f"{10 * k},{a:.1f}" for k, a in
                                                        enumerate(np.linspace(3, 190, 12))) + "\n")
    rc = main(["growth", "--barriers", str(bars), "--length", "200", "--stress-amplitude", "60", "--record", str(rec),
               "--no-figures", "--out", str(tmp_path / "out")])
    assert rc == 0
    err = capsys.readouterr().err
    assert "did not converge" in err and "stops between" in err and "starting constants" in err


def test_calibration_failure_is_not_reported_as_success():
    path = GrowthPath.from_barriers([20.0, 45.0, 70.0, 100.0, 130.0], length_um=200.0)
    a, n = np.linspace(3, 190, 12), np.linspace(0, 1e5, 12)
    # at 60 MPa the crack arrests at the first barrier for any constants: nothing to fit
    fit = calibrate(a, n, path, 60.0)
    assert not fit.success and "stops between 3 and 20 µm" in fit.message
    assert fit.table[["low", "high"]].isna().all().all()  # no [0, inf] intervals posing as results
    # a record of constant rate: the exponent runs to the edge of its range
    fit = calibrate(a, n, path, 250.0)
    assert not fit.success and "exponent at the lower end of its range" in fit.message


# ----------------------------------------------------------------------------------- registration checks
def _scenario():
    sys.path.insert(0, str(Path(__file__).parent))
    from test_compare import _scenario as scenario

    return scenario()


def test_strain_field_off_the_map_stops_with_the_extents():
    gg, forecast, sm = _scenario()
    off = fit_transform(sm.strain_points, sm.map_points + 500.0, "affine")
    with pytest.raises(ParameterError, match=r"no measured strain point falls on the map.*x 50\d.*the map covers "
                       r"x 0…79 µm.*swapped"):
        compare_forecast(sm.series, forecast=forecast, gg=gg, transform=off, window=5)


def test_partial_overlap_residual_and_step_checks():
    gg, forecast, sm = _scenario()
    # a field shifted half off the map: the comparison goes on and says how much lies on it
    half = fit_transform(sm.strain_points, sm.map_points + np.array([70.0, 0.0]), "affine")
    comp = compare_forecast(sm.series, forecast=forecast, gg=gg, transform=half, window=5)
    assert any("(9 %) fall on the map" in w for w in comp.warnings)
    # one mark matched wrongly: residual of several map steps warns, tens of steps stop
    dst = sm.map_points.copy()
    dst[0] += [15.0, 0.0]  # RMS 3.4 µm over five points
    warn = compare_forecast(sm.series, forecast=forecast, gg=gg, window=5,
                            transform=fit_transform(sm.strain_points, dst, "affine"))
    assert any("RMS residual" in w and "map steps" in w for w in warn.warnings)
    dst[0] += [200.0, 0.0]
    with pytest.raises(ParameterError, match=r"RMS residual .* map steps.*worst, point \d"):
        compare_forecast(sm.series, forecast=forecast, gg=gg, window=5,
                         transform=fit_transform(sm.strain_points, dst, "affine"))
    # a step 1000× off the map's (µm read as nm) stops, 40× warns
    tiny = StrainSeries("strain", {c: np.zeros((4, 4)) for c in ("exx", "eyy", "exy")}, 0.001)
    with pytest.raises(ParameterError, match=r"1/1000 of the map's step 1 µm.*--strain-length-unit"):
        check_registration(tiny, None, map_step=1.0)
    coarse = StrainSeries("strain", {c: np.zeros((4, 4)) for c in ("exx", "eyy", "exy")}, 40.0)
    assert any("40 ×" in w for w in check_registration(coarse, None, map_step=1.0))


def test_cli_compare_reads_a_lab_csv_and_stops_off_the_map(tmp_path, capsys):
    from slipnet.cli import main
    from slipnet.io import write_map
    from slipnet.maps import OrientationMap

    _, forecast, sm = _scenario()
    s = sm.series.strain(window=5)
    x, y = s.coordinates()
    # the measured strain as a lab writes it: mm, percent, its own names, semicolons
    table = pd.DataFrame({"X (mm)": x.ravel() / 1000, "Y (mm)": y.ravel() / 1000,
                          "Exx (%)": 100 * s.components["exx"][-1].ravel(),
                          "Eyy (%)": 100 * s.components["eyy"][-1].ravel(),
                          "Shear (%)": 100 * s.components["exy"][-1].ravel()})
    table.to_csv(tmp_path / "dic.csv", sep=";", index=False, na_rep="")
    pd.DataFrame({"dic x [mm]": sm.strain_points[:, 0] / 1000, "dic y [mm]": sm.strain_points[:, 1] / 1000,
                  "ebsd x [um]": sm.map_points[:, 0], "ebsd y [um]": sm.map_points[:, 1]}).to_csv(
        tmp_path / "cp.csv", index=False)
    q = np.zeros((60, 80, 4))
    q[..., 0] = 1.0
    write_map(OrientationMap(q, np.zeros((60, 80), int), np.ones((60, 80)), np.ones((60, 80), bool), 1.0),
              tmp_path / "map.npz")
    forecast.sites.to_csv(tmp_path / "sites.csv", index=False)
    args = ["compare", str(tmp_path / "dic.csv"), "--strain-column", "exy=Shear", "--control-points",
            str(tmp_path / "cp.csv"), "--map", str(tmp_path / "map.npz"), "--sites", str(tmp_path / "sites.csv"),
            "--no-figures"]
    assert main([*args, "--out", str(tmp_path / "out")]) == 0
    out = capsys.readouterr().out
    assert "RMS residual" in out and "sites_f1" in out
    # the same control points with the map columns in mm by mistake: the field lands off the map
    pd.DataFrame({"dic x [mm]": sm.strain_points[:, 0] / 1000, "dic y [mm]": sm.strain_points[:, 1] / 1000,
                  "ebsd x [mm]": sm.map_points[:, 0], "ebsd y [mm]": sm.map_points[:, 1]}).to_csv(
        tmp_path / "cp_mm.csv", index=False)
    args[5] = str(tmp_path / "cp_mm.csv")
    assert main([*args, "--out", str(tmp_path / "out2")]) == 2
    err = capsys.readouterr().err
    assert "registration scales" in err or "falls on the map" in err or "map's step" in err
    assert "Traceback" not in err


# ----------------------------------------------------------------------------------- fuzz
@settings(max_examples=60, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.binary(max_size=600), suffix=st.sampled_from([".csv", ".txt", ".mat", ".h5", ".tif", ".npz"]))
def test_random_bytes_give_only_the_projects_errors(tmp_path, data, suffix):
    p = tmp_path / f"fuzz{suffix}"
    p.write_bytes(data)
    for reader in (read_strain, read_control_points, read_growth_record):
        try:
            reader(p)
        except SlipnetError:
            pass


@settings(max_examples=80, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(cut=st.integers(0, 400), junk=st.text(max_size=8), at=st.integers(0, 400))
def test_mutated_lab_csv_gives_a_series_or_the_projects_error(tmp_path, cut, junk, at):
    text = _lab_csv(tmp_path / "base.csv", _fields()).read_text()
    text = text[:at] + junk + text[at:]
    text = text[:cut] + text[cut + 3:]
    p = tmp_path / "mut.csv"
    p.write_text(text, encoding="utf-8")
    try:
        s = read_strain(p)
    except SlipnetError:
        return
    assert isinstance(s, StrainSeries)


# ----------------------------------------------------------------------------------- the documented examples
def _doc_files(tmp_path: Path) -> dict[str, Path]:
    doc = (Path(__file__).resolve().parents[1] / "docs" / "own-data.md").read_text(encoding="utf-8")
    out = {}
    for part in doc.split("<!-- file: ")[1:]:
        name, rest = part.split(" -->", 1)
        body = rest.split("```\n", 1)[1].split("```", 1)[0]
        (tmp_path / name).write_text(body, encoding="utf-8")
        out[name] = tmp_path / name
    return out


def test_documented_examples_read_as_the_page_says(tmp_path):
    files = _doc_files(tmp_path)
    s = read_strain(files["dic_export.csv"], columns={"exy": "Shear XY"})
    assert s.step == pytest.approx(5.0) and s.shape == (2, 3) and np.isnan(s.components["exx"][0, 1, 2])
    assert s.components["exx"][0, 0, 0] == pytest.approx(0.00112)
    src, dst = read_control_points(files["marks.csv"], columns={"strain_x": "DIC x", "strain_y": "DIC y",
                                                                "map_x": "EBSD x", "map_y": "EBSD y"},
                                   pixel_size_um=0.2)
    assert src[0].tolist() == pytest.approx([22.4, 17.4]) and dst[0].tolist() == pytest.approx([21.5, 18.0])
    r = read_growth_record(files["record.txt"])
    assert r["cycles"].tolist() == [10000.0, 20000.0, 35000.0, 50000.0]
    assert r["crack_length_um"].iloc[[0, -1]].tolist() == pytest.approx([21.2, 61.1])
    pages = np.arange(6 * 3 * 4, dtype=np.float64).reshape(6, 3, 4)
    for side in ("stack.json", "stack.toml"):
        stack = tmp_path / f"{Path(side).stem}_{Path(side).suffix[1:]}.tif"
        tifffile.imwrite(stack, pages, photometric="minisblack")
        t = read_strain(stack, sidecar=files[side])
        assert t.n_steps == 2 and t.steps.tolist() == [10000.0, 50000.0] and t.step == pytest.approx(5.0)
        assert np.allclose(t.components["eyy"][1], pages[4] / 100, rtol=1e-15, atol=0)  # step 1, 2nd component
