"""Fuzz every reader and the command line: damaged files raise only the project's errors.

Each reader gets a valid file of its own format, written by slipnet (or by orix's writer), and
Hypothesis damages it: bytes flipped, the file cut short, bytes inserted, lines duplicated or
dropped, a number replaced by a hostile one (huge, negative, NaN, a deep bracket), or the whole
file replaced by random bytes. Whatever comes back must be a result or a
:class:`~slipnet.errors.SlipnetError` — never a library's exception — within a time limit. The
command-line cases also check that a refused run leaves no file behind.

The CI budget is small and derandomised (profile ``ci`` in ``conftest.py``). The longer search
is ``python3 benchmarks/fuzz_readers.py`` (``--examples N`` per reader, random examples), which
runs these same tests with a wider budget outside CI.
"""

from __future__ import annotations

import contextlib
import dataclasses
import gc
import io
import json
import os
import re
import signal
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis import strategies as st

from slipnet.errors import SlipnetError
from slipnet.io import (
    read_control_points,
    read_grain_graph,
    read_growth_record,
    read_map,
    read_measured_path,
    read_strain,
    read_study,
    write_grain_graph,
    write_map,
    write_strain,
)
from slipnet.maps import OrientationMap, StrainSeries
from slipnet.maps.orientation_map import AUSTENITE, FERRITE
from slipnet.study.options import StudyOptions, read_study_file, write_study_file

#: Damaged files per reader in one run: small and derandomised in CI; benchmarks/fuzz_readers.py
#: raises it (``SLIPNET_FUZZ_EXAMPLES``) for a longer search.
FUZZ_EXAMPLES = int(os.environ.get("SLIPNET_FUZZ_EXAMPLES", "10"))

#: A read that takes longer than this on a file of a few kB hangs (seconds).
TIME_LIMIT_S = 20

HOSTILE = (b"1e308", b"-1", b"-0", b"99999999999999999999", b"nan", b"inf", b"0", b"1e-320", b"[[[[[[[[[[[[",
           b"\xff\xfe", b"", b"\x00", b"{" * 200, b'"', b"1,2,3", b"\t", b"mm", b"%")


class _Hang(Exception):
    pass


@contextlib.contextmanager
def _time_limit(seconds: int):
    def stop(signum, frame):
        raise _Hang(f"no answer within {seconds} s")

    previous = signal.signal(signal.SIGALRM, stop)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


# ------------------------------------------------------------------------------------ damage
@st.composite
def damaged(draw, original: bytes) -> bytes:
    """``original`` with one to three kinds of damage applied (see the module notes)."""
    b = bytearray(original)
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(["flip", "cut", "insert", "lines", "number", "random"]))
        n = len(b)
        if kind == "flip" and n:
            for pos in draw(st.lists(st.integers(0, n - 1), min_size=1, max_size=16)):
                b[pos] = draw(st.integers(0, 255))
        elif kind == "cut":
            b = b[: draw(st.integers(0, n))]
        elif kind == "insert":
            pos = draw(st.integers(0, n))
            b[pos:pos] = draw(st.binary(min_size=1, max_size=64))
        elif kind == "lines":
            lines = bytes(b).split(b"\n")
            i = draw(st.integers(0, len(lines) - 1))
            if draw(st.booleans()):
                lines.insert(draw(st.integers(0, len(lines))), lines[i])
            else:
                lines.pop(i)
            b = bytearray(b"\n".join(lines))
        elif kind == "number":
            numbers = list(re.finditer(rb"-?\d+(\.\d+)?([eE][-+]?\d+)?", bytes(b)))
            if numbers:
                m = numbers[draw(st.integers(0, len(numbers) - 1))]
                b[m.start():m.end()] = draw(st.sampled_from(HOSTILE))
        else:
            b = bytearray(draw(st.binary(min_size=0, max_size=512)))
    return bytes(b)


def _read_expecting_only_our_errors(reader: Callable, path: Path, data: bytes) -> None:
    """Read ``data`` from ``path``: only our errors, no hang, and no file left open by the reader."""
    path.write_bytes(data)
    # Warnings are recorded, not raised: a file a failed read leaves open warns only when it is
    # collected, which would otherwise land in a later example. Collecting here pins it on this one.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            with _time_limit(TIME_LIMIT_S):
                reader(path)
        except SlipnetError:
            pass
        except _Hang:
            pytest.fail(f"{reader.__name__} hung on a damaged file (over {TIME_LIMIT_S} s)")
        finally:
            gc.collect(1)  # young generations only: a full collection costs ~1 s late in a long session
    leaks = [str(w.message) for w in caught if issubclass(w.category, ResourceWarning)]
    assert not leaks, f"{reader.__name__} left a file open: {leaks[0]}"


# ------------------------------------------------------------------------------------ valid files
def _small_map() -> OrientationMap:
    rng = np.random.default_rng(3)
    shape = (6, 8)
    phase = (rng.random(shape) < 0.3).astype(np.int32)
    phase[0, :2] = (0, 1)
    return OrientationMap.from_euler(rng.uniform([0, 0, 0], [360, 180, 360], (*shape, 3)), 0.5, phase=phase,
                                     quality=rng.uniform(0, 1, shape), indexed=rng.random(shape) > 0.1,
                                     phases=(FERRITE, AUSTENITE), origin=(1.0, -2.0), name="fuzz seed")


def _grain_map() -> OrientationMap:
    """Four grains: the smallest map that gives a graph with boundaries and junctions."""
    shape = (12, 12)
    euler = np.zeros((*shape, 3))
    euler[:6, 6:] = (40.0, 30.0, 10.0)
    euler[6:, :6] = (80.0, 50.0, 20.0)
    euler[6:, 6:] = (120.0, 20.0, 60.0)
    return OrientationMap.from_euler(euler, 1.0, name="fuzz grains")


def _strain_series() -> StrainSeries:
    rng = np.random.default_rng(5)
    comps = {c: rng.normal(0.0, 0.01, (2, 5, 6)) for c in ("exx", "eyy", "exy")}
    return StrainSeries("strain", comps, 0.5, (0.0, 0.0), [1000.0, 4000.0], "cycles", "fuzz", {"who": "tests"})


class _Seeds(dict):
    """The seed files; a short repr, because Hypothesis prints a failing example's arguments.

    ``beside[case]`` holds files written undamaged beside the damaged one (suffix: bytes), such
    as a TIFF stack's sidecar.
    """

    def __init__(self) -> None:
        super().__init__()
        self.beside: dict[str, dict[str, bytes]] = {}

    def __repr__(self) -> str:
        return f"<{len(self)} fuzz seed files>"


def _read_mat_in_mm(path):
    """A MATLAB file holds no units: they are given, as a user would."""
    return read_strain(path, length_unit="mm", value_unit="%")


def _read_stack_beside(path):
    """The TIFF stack beside a (damaged) sidecar ``path``."""
    return read_strain(Path(path).with_suffix(".tif"), sidecar=path)


@pytest.fixture(scope="module")
def seeds(tmp_path_factory) -> dict[str, tuple[Callable, bytes]]:
    """One valid file per reader and format: ``{case: (reader, bytes)}``."""
    folder = tmp_path_factory.mktemp("fuzz-seeds")
    omap = _small_map()
    out: dict[str, tuple[Callable, bytes]] = _Seeds()
    for suffix in (".txt", ".npz"):
        out[f"map{suffix}"] = (read_map, write_map(omap, folder / f"map{suffix}").read_bytes())
    orix_io = pytest.importorskip("orix.io")
    from slipnet.io import to_orix

    orix_io.save(str(folder / "map.h5"), to_orix(omap), overwrite=True)
    out["map.h5"] = (read_map, (folder / "map.h5").read_bytes())
    for suffix in (".txt", ".npz", ".tif"):
        out[f"strain{suffix}"] = (read_strain, write_strain(_strain_series(), folder / f"s{suffix}").read_bytes())
    lab_rows = ["Correlation export", "x [mm], y [mm], E_xx [%], E_yy [%], E_xy [%]"]
    lab_rows += [f"{j * 0.005!r}, {i * 0.005!r}, 0.{i}{j}1, -0.{j}2, 0.0{i}" for i in range(4) for j in range(5)]
    out["strain_lab.csv"] = (read_strain, ("\n".join(lab_rows) + "\n").encode())
    import h5py
    import scipy.io as sio
    import tifffile

    fields = {c: np.random.default_rng(k).normal(0.0, 0.4, (4, 5)) for k, c in enumerate(("exx", "eyy", "exy"))}
    sio.savemat(folder / "dic.mat", {"x": np.arange(5) * 0.005, "y": np.arange(4) * 0.005, **fields})
    out["strain.mat"] = (_read_mat_in_mm, (folder / "dic.mat").read_bytes())
    with h5py.File(folder / "dic.h5", "w") as fh:
        fh.attrs["length_unit"] = "mm"
        fh.attrs["step"] = 0.005
        for c, a in fields.items():
            fh.create_dataset(f"fields/{c}", data=a[None]).attrs["units"] = "%"
    out["strain_plain.h5"] = (read_strain, (folder / "dic.h5").read_bytes())
    with tifffile.TiffWriter(folder / "stack.tif") as tif:
        for c in ("exx", "eyy", "exy"):
            tif.write(fields[c])
    sidecar = json.dumps({"quantity": "strain", "components": ["exx", "eyy", "exy"], "step": 0.005,
                          "length_unit": "mm", "value_unit": "%"}).encode()
    out["strain_stack.tif"] = (read_strain, (folder / "stack.tif").read_bytes())
    out.beside["strain_stack.tif"] = {".json": sidecar}
    out["stack_sidecar.json"] = (_read_stack_beside, sidecar)
    out.beside["stack_sidecar.json"] = {".tif": (folder / "stack.tif").read_bytes()}
    out["control_points.csv"] = (read_control_points, b"strain_x_um,strain_y_um,map_x_um,map_y_um\n"
                                 b"0,0,1.5,2\n10,0,11.5,2\n0,10,1.5,12\n10,10,11.5,12\n")
    out["growth_record.csv"] = (read_growth_record, b"cycles,crack_length_um\n0,10\n1000,12.5\n2000,16\n4000,30\n")
    out["crack_path.csv"] = (read_measured_path, b"x_um,y_um\n0,0\n1.5,2\n3,4.5\n6,5\n")
    from slipnet.grains import build_grain_graph

    out["graph.npz"] = (read_grain_graph,
                        write_grain_graph(build_grain_graph(_grain_map()), folder / "g.npz").read_bytes())
    write_map(omap, folder / "plan-map.npz")
    out["notch_study.toml"] = (read_study, b"[specimen]\nmap = 'plan-map.npz'\n[loading]\naxis = [0, 1, 0]\n"
                               b"[candidates]\nedge = 'right'\nspacing_um = 2.0\n[uncertainty]\nseed = 2\n")
    base = StudyOptions()
    opts = dataclasses.replace(base, map=dataclasses.replace(base.map, path=str(folder / "plan-map.npz")))
    out["study.toml"] = (read_study_file, write_study_file(opts, folder / "study.toml").read_bytes())
    return out


CASES = ("map.txt", "map.npz", "map.h5", "strain.txt", "strain.npz", "strain.tif", "strain_lab.csv", "strain.mat",
         "strain_plain.h5", "strain_stack.tif", "stack_sidecar.json", "control_points.csv",
         "growth_record.csv", "crack_path.csv", "graph.npz", "notch_study.toml", "study.toml")

# Module-scoped seeds and a per-test folder are reused across examples on purpose: each example
# writes its own file over the last one.
# The explain phase (line tracing) is left out: it is slow on readers and adds nothing to "only our errors".
_FUZZ = dict(phases=[Phase.explicit, Phase.reuse, Phase.generate, Phase.shrink],
             suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow,
                                    HealthCheck.data_too_large])


def _fuzz_one(seeds, tmp_path, case: str, data) -> None:
    reader, original = seeds[case]
    if case.endswith(".toml"):
        # study files name their map relative to themselves: damage them beside it
        target = Path(tmp_path) / case
        (Path(tmp_path) / "plan-map.npz").write_bytes(seeds["map.npz"][1])
    else:
        target = Path(tmp_path) / f"damaged-{case}"
    for suffix, content in seeds.beside.get(case, {}).items():
        target.with_suffix(suffix).write_bytes(content)
    _read_expecting_only_our_errors(reader, target, data.draw(damaged(original)))


def test_every_seed_file_reads(seeds, tmp_path):
    # The undamaged seeds must read, or the fuzzing below would only ever see refusals.
    for case in CASES:
        reader, original = seeds[case]
        target = tmp_path / (case if case.endswith(".toml") else f"seed-{case}")
        target.write_bytes(original)
        for suffix, content in seeds.beside.get(case, {}).items():
            target.with_suffix(suffix).write_bytes(content)
        if case.endswith(".toml"):
            (tmp_path / "plan-map.npz").write_bytes(seeds["map.npz"][1])
        reader(target)


@pytest.mark.parametrize("case", CASES)
@settings(max_examples=FUZZ_EXAMPLES, **_FUZZ)
@given(data=st.data())
def test_damaged_files_raise_only_our_errors(seeds, tmp_path, case, data):
    _fuzz_one(seeds, tmp_path, case, data)


# ------------------------------------------------------------------------------------ hostile csv
@st.composite
def csv_mutation(draw, header: list[str], rows: list[list[str]]) -> str:
    """A CSV table with its header and cells rearranged, dropped or replaced."""
    header = list(header)
    rows = [list(r) for r in rows]
    for _ in range(draw(st.integers(1, 4))):
        kind = draw(st.sampled_from(["rename", "drop_col", "swap_cols", "cell", "ragged", "sep", "blank"]))
        if kind == "rename" and header:
            header[draw(st.integers(0, len(header) - 1))] = draw(st.text(max_size=12))
        elif kind == "drop_col" and len(header) > 1:
            j = draw(st.integers(0, len(header) - 1))
            header.pop(j)
            for r in rows:
                if j < len(r):
                    r.pop(j)
        elif kind == "swap_cols" and len(header) > 1:
            i, j = draw(st.integers(0, len(header) - 1)), draw(st.integers(0, len(header) - 1))
            header[i], header[j] = header[j], header[i]
        elif kind == "cell" and rows:
            r = rows[draw(st.integers(0, len(rows) - 1))]
            if r:
                r[draw(st.integers(0, len(r) - 1))] = draw(st.sampled_from(
                    ["", "nan", "inf", "-inf", "1e400", "x", "1,5", "0x10", "１２", "-0"]) | st.text(max_size=8))
        elif kind == "ragged" and rows:
            rows[draw(st.integers(0, len(rows) - 1))].append("7")
        elif kind == "sep":
            sep = draw(st.sampled_from([";", "\t", " ", "|"]))
            return "\n".join(sep.join(x) for x in [header, *rows]) + "\n"
        else:
            rows = rows[: draw(st.integers(0, len(rows)))]
    return "\n".join(",".join(x) for x in [header, *rows]) + "\n"


TABLES = {
    "control_points": (read_control_points, ["strain_x_um", "strain_y_um", "map_x_um", "map_y_um"],
                       [["0", "0", "1", "1"], ["10", "0", "11", "1"], ["0", "10", "1", "11"],
                        ["10", "10", "11", "11"]]),
    "growth_record": (read_growth_record, ["cycles", "crack_length_um"],
                      [["0", "10"], ["1000", "12"], ["2000", "16"], ["4000", "30"]]),
    "crack_path": (read_measured_path, ["x_um", "y_um"], [["0", "0"], ["1", "2"], ["3", "4"]]),
}


@pytest.mark.parametrize("name", sorted(TABLES))
@settings(max_examples=25, **_FUZZ)
@given(data=st.data())
def test_mutated_csv_tables_raise_only_our_errors(tmp_path, name, data):
    reader, header, rows = TABLES[name]
    text = data.draw(csv_mutation(header, rows))
    _read_expecting_only_our_errors(reader, Path(tmp_path) / f"{name}.csv", text.encode("utf-8"))


# ------------------------------------------------------------------------------------ command line
def _run_cli(argv: list[str]) -> tuple[int, str]:
    from slipnet.cli import main

    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()), _time_limit(TIME_LIMIT_S * 3):
        try:
            code = main(argv)
        except SystemExit as stop:  # argparse refusals
            code = int(stop.code or 0)
    return code, err.getvalue()


@pytest.mark.parametrize("command", ["map", "grains"])
@settings(max_examples=5, **_FUZZ)
@given(data=st.data())
def test_cli_on_damaged_maps_explains_and_leaves_nothing(seeds, tmp_path, command, data):
    suffix = data.draw(st.sampled_from([".txt", ".npz", ".h5"]))
    src = Path(tmp_path) / f"in{suffix}"
    src.write_bytes(data.draw(damaged(seeds[f"map{suffix}"][1])))
    out = Path(tmp_path) / "out"
    if out.exists():
        for f in sorted(out.rglob("*"), reverse=True):
            f.unlink() if f.is_file() else f.rmdir()
        out.rmdir()
    argv = ["map", str(src), str(out / "m.npz")] if command == "map" else ["grains", str(src), "--out", str(out)]
    if command == "map":
        out.mkdir()
    code, stderr = _run_cli(argv)
    assert "Traceback" not in stderr
    assert code in (0, 2), stderr
    if code == 2:
        assert stderr.strip(), "a refused run says why"
        left = [p.name for p in out.rglob("*") if p.is_file()] if out.exists() else []
        assert left == [], f"a refused run left {left}"


def test_fuzz_finds_library_errors_without_the_guard(tmp_path, monkeypatch):
    # The fuzz check must be able to fail: a reader that lets a library error out is caught.
    def leaky(path):
        pd.read_csv(path, encoding="ascii")

    with pytest.raises(UnicodeDecodeError):
        _read_expecting_only_our_errors(leaky, tmp_path / "x.csv", b"a,b\n\xff,1\n")


# ------------------------------------------------------------------------------------ one test per failure class
def test_deeply_nested_json_in_a_bundle_is_refused_before_parsing(tmp_path):
    omap = _small_map()
    path = write_map(omap, tmp_path / "m.npz")
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    arrays["meta_json"] = np.array("[" * 50_000 + "]" * 50_000)
    with open(path, "wb") as fh:
        np.savez_compressed(fh, **arrays)
    with pytest.raises(SlipnetError, match="nests brackets 50000 levels deep"):
        read_map(path)


def test_deeply_nested_toml_study_file_is_refused(tmp_path):
    path = tmp_path / "study.toml"
    path.write_text("[specimen]\nmap = 'm.npz'\n[loading]\naxis = " + "[" * 5000 + "]" * 5000 + "\n")
    with pytest.raises(SlipnetError, match="nests brackets"):
        read_study_file(path)
    with pytest.raises(SlipnetError, match="nests brackets"):
        read_study(path)


@pytest.mark.parametrize("case", ["map.npz", "strain.npz", "graph.npz", "strain.tif", "map.h5"])
@pytest.mark.parametrize("keep", [0.0, 0.1, 0.5, 0.9])
def test_truncated_binary_files_name_the_file(seeds, tmp_path, case, keep):
    reader, original = seeds[case]
    path = tmp_path / f"cut-{case}"
    path.write_bytes(original[: int(len(original) * keep)])
    with pytest.raises(SlipnetError) as info:
        reader(path)
    assert str(path) in str(info.value)
