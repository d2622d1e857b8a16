"""Tests of slipnet.study and ``slipnet study``: one study on a map, its cache, its report, its errors."""

from __future__ import annotations

import dataclasses
import re
from dataclasses import replace
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from slipnet.cautions import CAUTION
from slipnet.cli import main
from slipnet.errors import InputFileError, ParameterError
from slipnet.reports.html import column_header, format_cell
from slipnet.reports.html_study import SECTIONS
from slipnet.study import (
    ForecastOptions,
    GrainOptions,
    GrowthOptions,
    LoadOptions,
    MapOptions,
    NotchOptions,
    StudyOptions,
    load_object,
    read_study_file,
    run_study,
    save_object,
    study_file_text,
)
from slipnet.synthetic import make_specimen

orix_io = pytest.importorskip("orix.io")

ROOT = Path(__file__).resolve().parents[1]
#: A small study: every option that sets the cost, kept small.
SMALL = ["--side", "right", "--load-axis", "0", "1", "0", "--spacing", "30", "--depth", "20", "--root-radius", "4",
         "--window", "60", "--horizon", "80", "--samples", "4", "--candidates", "3", "--growth-points", "300",
         "--seed", "1"]


class _Cells(HTMLParser):
    """Text of every table cell and every img src of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.cells: list[str] = []
        self.images: list[str] = []
        self.ids: list[str] = []
        self._in = False

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag in ("td", "th"):
            self._in = True
            self.cells.append("")
        if tag == "img":
            self.images.append(a.get("src", ""))
        if "id" in a:
            self.ids.append(a["id"])

    def handle_endtag(self, tag):
        if tag in ("td", "th"):
            self._in = False

    def handle_data(self, data):
        if self._in:
            self.cells[-1] += data


def _parse(html: str) -> _Cells:
    p = _Cells()
    p.feed(html)
    return p


@pytest.fixture(scope="module")
def orix_map(tmp_path_factory) -> Path:
    """A synthetic map written by orix's own writer (its HDF5 format), stripped as a lab file may
    come: no quality property, phases with a point group but no space group."""
    from slipnet.io import to_orix

    spec = make_specimen((70, 90), 2.0, grain_size_um=25.0, seed=3, load_axis=(0.0, 1.0, 0.0))
    xmap = to_orix(spec.omap)
    for name in list(xmap.prop.keys()):
        del xmap.prop[name]
    for _, phase in xmap.phases:
        phase.space_group = None
        phase.point_group = "m-3m"
    path = tmp_path_factory.mktemp("map") / "coupon.h5"
    orix_io.save(str(path), xmap, overwrite=True)
    return path


@pytest.fixture(scope="module")
def study(orix_map, tmp_path_factory):
    """``slipnet study`` run once on the orix map; (output folder, captured stderr)."""
    out = tmp_path_factory.mktemp("study") / "out"
    import contextlib
    import io

    err = io.StringIO()
    with contextlib.redirect_stderr(err):
        rc = main(["study", str(orix_map), *SMALL, "--out", str(out)])
    assert rc == 0
    return out, err.getvalue()


def _tables(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted((folder / "tables").glob("*.csv")) if p.name != "steps.csv"}


def test_report_holds_every_section_real_numbers_and_the_recommendation(study):
    out, _ = study
    html = (out / "report.html").read_text(encoding="utf-8")
    page = _parse(html)
    for anchor, title in SECTIONS:
        assert anchor in page.ids, anchor
        assert title in html, title
    assert CAUTION in html
    # every table cell is a real number or a word: no NaN or infinity reaches the report
    bad = [c for c in page.cells if re.search(r"\b(nan|inf|infinity)\b", c, re.I)]
    assert not bad, bad[:5]
    numbers = [c for c in page.cells if re.fullmatch(r"-?\d+(\.\d+)?(e[+-]?\d+)?", c.strip())]
    assert len(numbers) > 200
    # pictures are embedded, nothing loads from elsewhere, no script
    assert page.images and all(src.startswith("data:image/png;base64,") for src in page.images)
    assert "<script" not in html and "http://" not in html and "https://" not in html
    cand = pd.read_csv(out / "tables" / "candidates.csv")
    assert list(cand["notch"]) == ["N1", "N2", "N3"]
    best = cand.iloc[0]
    assert f"Cut the notch N1: from ({best['edge_x_um']:.0f}, {best['edge_y_um']:.0f}) µm" in html
    assert f"root lies at ({best['root_x_um']:.0f}, {best['root_y_um']:.0f}) µm" in html
    # the forecast starts at that notch's root
    path = pd.read_csv(out / "tables" / "N1_path.csv")
    assert (path["x0_um"].iloc[0], path["y0_um"].iloc[0]) == pytest.approx((best["root_x_um"], best["root_y_um"]))
    # one name per boundary: the barrier table's B-labels are the forecast's boundary ids
    bars = pd.read_csv(out / "tables" / "N1_barriers.csv")
    assert list(bars["boundary"]) == [f"B{b}" for b in bars["boundary_id"]]
    for label in bars["boundary"]:
        assert f">{label}<" in html


def test_warnings_are_printed_and_collected_at_the_top(study):
    out, err = study
    html = (out / "report.html").read_text(encoding="utf-8")
    # the file has no quality property and no space group: both guesses are told and reported
    assert "quality was set to 1" in err and "guessed" in err
    warn_section = html.split('id="warnings"')[1].split("</section>")[0]
    assert "quality was set to 1" in warn_section and "guessed" in warn_section
    assert html.index('id="warnings"') < html.index('id="answer"')
    summary = (out / "summary.md").read_text(encoding="utf-8")
    assert "| notch | root_x_um |" in summary and CAUTION in summary


def test_study_file_reruns_the_same_study_and_reuses_every_step(study, tmp_path):
    out, _ = study
    before = _tables(out)
    again = tmp_path / "again"
    assert main(["study", "--study", str(out / "study.toml"), "--out", str(out), "--quiet"]) == 0
    log = pd.read_csv(out / "steps.csv")
    assert set(log["status"]) == {"reused"}
    assert _tables(out) == before
    # a fresh folder computes everything again and gets the same tables
    assert main(["study", "--study", str(out / "study.toml"), "--out", str(again), "--quiet"]) == 0
    assert set(pd.read_csv(again / "steps.csv")["status"]) == {"computed"}
    assert _tables(again) == before


def test_changing_growth_options_does_not_rebuild_the_grains(orix_map, tmp_path):
    out = tmp_path / "o"
    assert main(["study", str(orix_map), *SMALL, "--out", str(out), "--quiet"]) == 0
    assert main(["study", str(orix_map), *SMALL, "--growth-points", "400", "--out", str(out), "--quiet"]) == 0
    log = pd.read_csv(out / "steps.csv").set_index("step")["status"]
    assert log[["map", "grains", "slip", "stress", "notch", "forecast-N1"]].eq("reused").all()
    assert log[["growth-N1", "growth-N2", "growth-N3"]].eq("computed").all()
    # a growth constant also enters the notch plan's cycles objective: the plan is ranked again, the grains stay
    assert main(["study", str(orix_map), *SMALL, "--friction-stress", "300", "--out", str(out), "--quiet"]) == 0
    log = pd.read_csv(out / "steps.csv").set_index("step")["status"]
    assert log["grains"] == "reused" and log["map"] == "reused" and log["notch"] == "computed"
    assert len(list((out / ".cache").glob("grains-*.npz"))) == 1


def _opts(map_path, **parts) -> StudyOptions:
    base = StudyOptions(map=MapOptions(path=str(map_path)), load=LoadOptions(axis=(0.0, 1.0, 0.0)),
                        notch=NotchOptions(edges=("right",), spacing_um=30.0, depth_um=20.0, root_radius_um=4.0,
                                           window_um=60.0),
                        forecast=ForecastOptions(candidates=2, horizon_um=80.0, samples=0),
                        growth=GrowthOptions(n_points=200))
    return replace(base, **parts)


def _nothing_half_written(out: Path) -> None:
    assert not (out / "report.html").exists()
    assert not list(out.rglob("*.part"))


def test_bad_input_stops_at_the_step_naming_file_and_fix(orix_map, tmp_path):
    bad = tmp_path / "broken.txt"
    bad.write_text("# not a map\n1 2 3\n", encoding="utf-8")
    with pytest.raises(InputFileError, match=r"step 'map' \(map file .*broken\.txt\).*run the study again"):
        run_study(_opts(bad), tmp_path / "a")
    _nothing_half_written(tmp_path / "a")
    with pytest.raises(ParameterError, match=r"step 'grains'.*threshold"):
        run_study(_opts(orix_map, grains=GrainOptions(threshold_deg=-5.0)), tmp_path / "b")
    _nothing_half_written(tmp_path / "b")
    with pytest.raises(ParameterError, match=r"step 'notch'.*depth"):
        run_study(_opts(orix_map, notch=NotchOptions(edges=("right",), depth_um=500.0, root_radius_um=4.0)),
                  tmp_path / "c")
    _nothing_half_written(tmp_path / "c")
    strain = tmp_path / "strain.npz"
    strain.write_bytes(b"not an archive")
    from slipnet.study import CompareOptions

    with pytest.raises(InputFileError, match=r"step 'compare' \(strain file .*strain\.npz\)"):
        run_study(_opts(orix_map, compare=CompareOptions(strain=str(strain))), tmp_path / "d")
    _nothing_half_written(tmp_path / "d")
    # the earlier steps were stored complete and are reused by the fixed run
    assert list((tmp_path / "d" / ".cache").glob("grains-*.npz"))


def test_missing_choices_are_refused_before_any_work(orix_map, tmp_path, capsys):
    with pytest.raises(ParameterError, match="load axis"):
        run_study(_opts(orix_map, load=LoadOptions()), tmp_path / "x")
    assert main(["study", str(orix_map), "--side", "right", "--out", str(tmp_path / "y")]) == 2
    assert "--load-axis" in capsys.readouterr().err
    assert main(["study", str(orix_map), "--load-axis", "0", "1", "0", "--out", str(tmp_path / "y")]) == 2
    assert "--side" in capsys.readouterr().err
    assert not (tmp_path / "y").exists() and not (tmp_path / "x").exists()


def test_study_file_round_trip_and_old_notch_study_files(tmp_path, orix_map):
    opts = _opts(orix_map, notch=NotchOptions(edges=("right", ((100.0, 10.0), (100.0, 120.0))), weights={
        "initiation_drive": 1.0, "barrier_strength_in_window": 0.5}, target={"boundary": (3, 4), "distance_um": 20.0}))
    p = tmp_path / "s.toml"
    p.write_text(study_file_text(opts), encoding="utf-8")
    assert read_study_file(p) == opts
    # a notch study file of 'slipnet notch --study' is a study file too (its map put beside it here)
    text = (ROOT / "examples" / "notch" / "study.toml").read_text(encoding="utf-8")
    (tmp_path / "coupon.h5").write_bytes(Path(orix_map).read_bytes())
    (tmp_path / "old.toml").write_text(re.sub(r'map = ".*"', 'map = "coupon.h5"', text), encoding="utf-8")
    old = read_study_file(tmp_path / "old.toml")
    assert old.map.path == str((tmp_path / "coupon.h5").resolve())
    assert old.load.axis == (0.0, 1.0, 0.0) and old.load.stress_amplitude_mpa == 220
    bad = tmp_path / "bad.toml"
    bad.write_text('[specimen]\nmap = "nowhere.h5"\n[loading]\naxis = [0, 1, 0]\n', encoding="utf-8")
    with pytest.raises(InputFileError, match=r"nowhere\.h5.*does not exist"):
        read_study_file(bad)
    bad.write_text('[forecast]\ncandidate = 3\n[loading]\naxis = [0, 1, 0]\n', encoding="utf-8")
    with pytest.raises(InputFileError, match="unknown key 'candidate' in \\[forecast\\]"):
        read_study_file(bad)


def test_store_round_trips_containers_bit_for_bit(tmp_path):
    from slipnet.forecast import forecast_crack
    from slipnet.grains import build_grain_graph
    from slipnet.growth import simulate_growth

    spec = make_specimen((50, 60), 2.0, grain_size_um=20.0, seed=4)
    gg = build_grain_graph(spec.omap)
    fc = forecast_crack(gg, (4.0, 50.0), (1.0, 0.0), (0.0, 1.0, 0.0), 80.0, samples=3, seed=2)
    res = simulate_growth(fc, 200.0, n_points=100)
    for obj in (spec.omap, fc, res):
        back = load_object(save_object(obj, tmp_path / "x.npz"))
        assert type(back) is type(obj)
    back = load_object(save_object(fc, tmp_path / "f.npz"))
    for name in ("path", "barriers", "sites", "crossings", "samples"):
        pd.testing.assert_frame_equal(getattr(back, name), getattr(fc, name), check_exact=True)
    assert np.array_equal(back.field, fc.field) and back.settings == fc.settings
    back = load_object(save_object(res, tmp_path / "g.npz"))
    pd.testing.assert_frame_equal(back.profile, res.profile, check_exact=True)
    assert back.params == res.params and np.array_equal(back.path.barrier_positions_um, res.path.barrier_positions_um)
    # files of another kind are refused, and nothing a file says can name a class to build
    (tmp_path / "bad.npz").write_bytes(b"junk")
    with pytest.raises(InputFileError, match="cannot read the stored step"):
        load_object(tmp_path / "bad.npz")
    np.savez(tmp_path / "evil.npz", __tree__=np.array('{"format": "slipnet-store-1", "tree": {"object": "Popen", '
                                                      '"fields": {}}}'))
    with pytest.raises(InputFileError, match="unknown container 'Popen'"):
        load_object(tmp_path / "evil.npz")
    with pytest.raises(ParameterError, match="cannot save a object"):
        save_object(object(), tmp_path / "o.npz")


def test_headers_carry_units_and_cells_never_show_nan():
    assert column_header("distance_from_root_um") == "distance from root (µm)"
    assert column_header("site_score_mpa_um") == "site score (MPa·µm)"
    assert column_header("dadn_min_um_per_cycle") == "dadn min (µm/cycle)"
    assert column_header("barrier_score", np.float64) == "barrier score (–)"
    assert column_header("grain", object) == "grain"
    assert format_cell(float("nan")) == ("—", False)
    assert format_cell(float("inf")) == ("not reached", False)
    assert format_cell(0.123456) == ("0.1235", True)


def test_demo_is_the_study_on_the_synthetic_coupon(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--quick", "--out", str(out), "--quiet"]) == 0
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "SYNTHETIC" in html and CAUTION in html and "Coupon KV-7" in html
    assert "Scores of the forecast" in html  # the comparison ran, against the invented measurements
    assert (out / "input" / "measured_strain_synthetic.npz").is_file()
    from slipnet.io import read_map
    from slipnet.synthetic import demo_specimen

    back, made = read_map(out / "input" / "specimen.npz"), demo_specimen(quick=True).omap
    assert np.array_equal(back.indexed, made.indexed)
    assert np.allclose(back.quats[back.indexed], made.quats[made.indexed])
    cand = pd.read_csv(out / "tables" / "candidates.csv")
    # every candidate lies on the right edge, where the study plans the notch
    assert np.allclose(cand["edge_x_um"], cand["edge_x_um"].max()) and cand["edge_x_um"].max() > 700
    log = pd.read_csv(out / "steps.csv").set_index("step")["status"]
    assert log["grains"] == "reused" and log["compare"] == "computed"  # the second pass only adds the comparison
    assert "recommended notch N1" in capsys.readouterr().out


@pytest.mark.parametrize("command", ["map", "grains"])
def test_every_command_that_reads_a_map_prints_what_the_reader_guessed(orix_map, tmp_path, capsys, command):
    # issue 15 item 4: the warnings the study collects are printed by the single-step commands too
    args = ["--info"] if command == "map" else ["--out", str(tmp_path / "out"), "--no-figures"]
    rc = main([command, str(orix_map), *args])
    assert rc == 0
    err = capsys.readouterr().err
    assert "warning [map]: the file has no quality property: quality was set to 1" in err
    assert "guessed" in err


@pytest.mark.parametrize(("part", "message"), [
    ({"forecast": ForecastOptions(samples=10**18)},
     r"forecast samples should lie between 0 and 10000; got 1000000000000000000"),
    ({"notch": NotchOptions(edges=("right",), root_radius_um=float("nan"))},
     r"notch root_radius_um should lie between"),
    ({"growth": GrowthOptions(n_points=2.5)}, r"growth n_points should be a whole number between 10 and 1e\+06"),
    ({"load": LoadOptions(axis=(0.0, 1.0, 0.0), stress_amplitude_mpa=1e9)}, r"load stress_amplitude_mpa .* 100000"),
])
def test_every_study_number_is_range_checked_before_any_work(orix_map, tmp_path, part, message):
    # issue 18 item 2: a typing slip in a study file stops at once, naming the option and its limits
    with pytest.raises(ParameterError, match=message):
        run_study(_opts(orix_map, **part), tmp_path / "out")
    assert not (tmp_path / "out").exists()


def test_a_study_file_with_a_huge_count_is_refused(orix_map, tmp_path):
    text = study_file_text(_opts(orix_map)).replace("samples = 0", "samples = 1000000000000000000", 1)
    path = tmp_path / "study.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ParameterError, match=r"samples should lie between 0 and 10000"):
        read_study_file(path).check()


def test_short_path_warning_names_what_it_falls_short_of():
    from types import SimpleNamespace

    from slipnet.study.steps import forecast_warnings

    said = []
    fc = SimpleNamespace(length_um=40.0, stop_reason="map_edge")
    forecast_warnings("N1", fc, 200.0, lambda step, msg: said.append((step, msg)))
    forecast_warnings("", fc, 150.0, lambda step, msg: said.append((step, msg)), reach="horizon (--horizon)")
    assert "200 µm observation window" in said[0][1] and said[0][0] == "forecast N1"
    assert "150 µm horizon (--horizon)" in said[1][1] and "observation" not in said[1][1]
    said.clear()
    forecast_warnings("", SimpleNamespace(length_um=250.0, stop_reason="map_edge"), 200.0,
                      lambda step, msg: said.append(msg))
    assert said == []


def test_lab_file_reader_options_reach_the_readers_and_the_study_file(orix_map, tmp_path, monkeypatch):
    import slipnet.study.steps as steps
    from slipnet.cli import build_parser
    from slipnet.cli.study import options_from_args
    from slipnet.errors import ParameterError
    from slipnet.study import read_study_file, write_study_file

    strain = tmp_path / "lab.csv"
    strain.write_text("x [mm],y [mm],exx [%],eyy [%],exy [%]\n0,0,0.1,0.2,0.3\n")
    args = build_parser().parse_args([
        "study", str(orix_map), "--side", "right", "--load-axis", "0", "1", "0", "--strain", str(strain),
        "--strain-length-unit", "mm", "--strain-value-unit", "%", "--strain-column", "exx=E_xx",
        "--encoding", "cp1252", "--record-cycles-unit", "kcycles"])
    opts = options_from_args(args)
    assert opts.compare.strain_reader == {"columns": {"exx": "E_xx"}, "length_unit": "mm", "value_unit": "%",
                                          "encoding": "cp1252"}
    assert opts.compare.points_reader == {"encoding": "cp1252"}
    assert opts.compare.record_reader == {"cycles_unit": "kcycles", "encoding": "cp1252"}
    again = read_study_file(write_study_file(opts, tmp_path / "study.toml"))
    assert again.compare.strain_reader == opts.compare.strain_reader
    assert again.compare.record_reader == opts.compare.record_reader

    seen = {}

    class Stop(Exception):
        pass

    def fake_read_strain(path, **kwargs):
        seen.update(kwargs)
        raise Stop

    monkeypatch.setattr(steps, "read_strain", fake_read_strain)
    with pytest.raises(Stop):
        _call_compare(steps, opts)
    assert seen == opts.compare.strain_reader

    bad = dataclasses.replace(opts, compare=dataclasses.replace(opts.compare, strain_reader={"lenght_unit": "mm"}))
    with pytest.raises(ParameterError, match="does not take lenght_unit; accepted: columns"):
        bad.check()


def _call_compare(steps, opts):
    from types import SimpleNamespace

    gg = SimpleNamespace(omap=SimpleNamespace(step=1.0))
    return steps.step_compare(gg, None, opts, lambda *a: None)
