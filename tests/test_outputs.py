"""Outputs never overwrite inputs or mix runs (issue 19, and the output part of issue 18).

Each case the issue measured is run here through the command line (``slipnet.cli.main``) or the
Python run context (:class:`slipnet.runs.OutputRun`): a refusal exits 2 with one line on stderr
and leaves every file as it was (checked by SHA-256 of the whole folder tree, hidden files too).
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import signal
import socket
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from slipnet import _files
from slipnet.cli import main
from slipnet.errors import OutputError, ParameterError, SlipnetError
from slipnet.io import write_map
from slipnet.reports.writer import write_json
from slipnet.runs import LOCK_NAME, MANIFEST_NAME, OutputRun, read_manifest, sha256_file
from slipnet.synthetic import make_specimen

ROOT = Path(__file__).resolve().parents[1]


def _tree(folder: Path) -> dict[str, str]:
    """Every file under ``folder`` (hidden ones too) → its SHA-256."""
    if not folder.exists():
        return {}
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def small_map():
    return make_specimen((24, 30), 2.0, grain_size_um=16.0, seed=3).omap


@pytest.fixture
def map_file(tmp_path, small_map):
    src = tmp_path / "in"
    src.mkdir()
    return write_map(small_map, src / "m.npz")


def _grains(map_file: Path, out: Path, *extra: str) -> int:
    return main(["grains", str(map_file), "--out", str(out), "--no-figures", *extra])


def _dead_pid() -> int:
    """The id of a process that has finished (so no live process has it, barring reuse)."""
    p = subprocess.Popen([sys.executable, "-c", "pass"])
    p.wait()
    assert not _files.pid_alive(p.pid)
    return p.pid


# --------------------------------------------------------------------------- outputs vs inputs
def test_compare_refuses_an_output_folder_holding_its_control_points(tmp_path, capsys):
    data = tmp_path / "D"
    data.mkdir()
    (data / "control_points.csv").write_text("strain_x_um,strain_y_um,map_x_um,map_y_um\n0,0,0,0\n")
    (data / "strain.txt").write_text("not read: the refusal comes first\n")
    before = _tree(data)
    code = main(["compare", str(data / "strain.txt"), "--control-points", str(data / "control_points.csv"),
                 "--out", str(data)])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert "should not hold an input of the run" in err and "Choose another output folder" in err
    assert _tree(data) == before


def test_save_graph_onto_the_map_is_refused_before_any_work(tmp_path, map_file, capsys):
    before = sha256_file(map_file)
    code = main(["forecast", str(map_file), "--save-graph", str(map_file), "--tip", "5", "20", "--load-axis",
                 "0", "1", "0", "--out", str(tmp_path / "fc")])
    err = capsys.readouterr().err
    assert code == 2 and "should not be an input of the run" in err
    assert sha256_file(map_file) == before
    assert not (tmp_path / "fc").exists()


def test_map_in_in_is_refused_also_through_a_symbolic_or_hard_link(tmp_path, map_file, capsys):
    before = sha256_file(map_file)
    sym = tmp_path / "sym.npz"
    sym.symlink_to(map_file)
    hard = tmp_path / "hard.npz"
    os.link(map_file, hard)
    for out in (map_file, sym, hard):
        assert main(["map", str(map_file), str(out)]) == 2
        assert "should not be an input of the run" in capsys.readouterr().err
    assert sha256_file(map_file) == before and sym.is_symlink()
    # a genuine conversion still works, and leaves no temporary file behind
    assert main(["map", str(map_file), str(tmp_path / "m.txt")]) == 0
    assert sorted(p.name for p in tmp_path.iterdir()) == ["hard.npz", "in", "m.txt", "sym.npz"]


def test_an_output_folder_inside_an_input_folder_is_refused(tmp_path, capsys):
    maps = tmp_path / "D"
    maps.mkdir()
    (maps / "a.txt").write_text("never read\n")
    study = tmp_path / "study.toml"
    study.write_text("[loading]\naxis = [1, 0, 0]\n")
    before = _tree(maps)
    for out in (maps, maps / "plans"):  # notch --batch D --out D broke the next batch run
        assert main(["notch", "--study", str(study), "--batch", str(maps), "--out", str(out)]) == 2
        err = capsys.readouterr().err
        assert "should not be an input of the run" in err or "should lie outside the input folder" in err
    assert _tree(maps) == before


def test_python_run_refuses_a_write_over_an_input(tmp_path):
    src = tmp_path / "table.json"
    write_json({"a": 1}, src)
    before = sha256_file(src)
    with pytest.raises(ParameterError, match="should not be an input"), \
            OutputRun(tmp_path / "out", inputs=[src], command="t") as run:
        write_json({"b": 2}, run.folder / "fine.json")
        write_json({"a": 2}, src)
    assert sha256_file(src) == before
    assert not (tmp_path / "out").exists()  # the run made the folder, and removed it with its file


# --------------------------------------------------------------------------- one run per folder
def test_a_second_run_with_other_options_is_refused_and_changes_nothing(tmp_path, map_file, capsys):
    out = tmp_path / "g"
    assert _grains(map_file, out) == 0
    first = _tree(out)
    assert MANIFEST_NAME in first and LOCK_NAME not in first
    capsys.readouterr()
    assert _grains(map_file, out, "--threshold", "5") == 2
    err = capsys.readouterr().err
    assert "should hold no other run" in err and "threshold" in err and "--overwrite" in err
    assert _tree(out) == first
    # another command into the same folder: refused too
    assert main(["slip", str(map_file), "--load-axis", "0", "1", "0", "--no-taylor", "--no-figures",
                 "--out", str(out)]) == 2
    assert "command 'grains'" in capsys.readouterr().err
    assert _tree(out) == first
    # the very same run again needs no flag and gives the same folder (one run's files)
    assert _grains(map_file, out) == 0
    again = _tree(out)
    assert set(again) == set(first)
    assert {k: v for k, v in again.items() if k.endswith(".csv")} == \
        {k: v for k, v in first.items() if k.endswith(".csv")}


def test_overwrite_replaces_the_earlier_run_whole(tmp_path, map_file):
    out = tmp_path / "g"
    assert main(["grains", str(map_file), "--out", str(out)]) == 0  # with figures
    assert (out / "grain_map.png").is_file()
    (out / "notes.txt").write_text("mine\n")  # a file of the user's: no run wrote it
    assert _grains(map_file, out, "--threshold", "5", "--overwrite") == 0
    assert not (out / "grain_map.png").exists()  # the earlier run's picture is gone with it
    assert (out / "notes.txt").read_text() == "mine\n"
    manifest = read_manifest(out)
    listed = {f["path"] for f in manifest["files"]}
    assert listed == set(_tree(out)) - {MANIFEST_NAME, "notes.txt"}
    assert manifest["options"]["threshold"] == 5.0 and manifest["replaced_run"]["command"] == "grains"


def test_a_file_no_run_recorded_is_not_replaced_without_overwrite(tmp_path, map_file, capsys):
    out = tmp_path / "g"
    out.mkdir()
    (out / "summary.md").write_text("the user's own summary\n")
    (out / "other.txt").write_text("left alone\n")
    before = _tree(out)
    assert _grains(map_file, out) == 2
    assert "got a file no slipnet run recorded there" in capsys.readouterr().err
    assert _tree(out) == before  # grains.csv etc. written before summary.md were removed again
    assert _grains(map_file, out, "--overwrite") == 0
    assert (out / "other.txt").read_text() == "left alone\n"
    assert "# " in (out / "summary.md").read_text()


_HOLDING_RUN = textwrap.dedent("""
    import sys
    from pathlib import Path
    from slipnet.reports.writer import write_json
    from slipnet.runs import OutputRun
    with OutputRun(Path(sys.argv[1]), command="python") as run:
        write_json({"x": 1}, run.folder / "x.json")
        print("ready", flush=True)
        sys.stdin.readline()  # hold the folder until told to finish
""")


def test_a_live_run_in_another_process_holds_its_folder(tmp_path, map_file, capsys):
    out = tmp_path / "g"
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    holder = subprocess.Popen([sys.executable, "-c", _HOLDING_RUN, str(out)], env=env, stdin=subprocess.PIPE,
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        before = _tree(out)
        assert json.loads((out / LOCK_NAME).read_text().splitlines()[0])["pid"] == holder.pid
        assert MANIFEST_NAME not in before  # no manifest while a run works in the folder
        for extra in ((), ("--overwrite",), ("--break-lock",)):  # no flag breaks a live run
            assert _grains(map_file, out, *extra) == 2
            assert "should not be in use" in capsys.readouterr().err
        assert _tree(out) == before
    finally:
        holder.communicate("\n", timeout=60)
    assert holder.returncode == 0
    assert set(_tree(out)) == {"x.json", MANIFEST_NAME}


def test_runs_do_not_nest():
    with OutputRun(None, command="t"), pytest.raises(ParameterError, match="inside another"), \
            OutputRun(None, command="t"):
        pass


# --------------------------------------------------------------------------- stale locks and leftovers
_KILLED_RUN = textwrap.dedent("""
    import os, signal, sys
    from pathlib import Path
    from slipnet._files import atomic_path
    from slipnet.reports.writer import write_json
    from slipnet.runs import OutputRun
    folder = Path(sys.argv[1])
    with OutputRun(folder, options={"k": 1}, command="t") as run:
        write_json({"version": 2}, folder / "a.json")     # replaces the earlier run's file
        write_json({"new": True}, folder / "sub" / "b.json")
        with atomic_path(folder / "big.npy") as tmp:
            tmp.write_bytes(b"x" * 100_000)
            os.kill(os.getpid(), signal.SIGKILL)           # killed mid-write, as by the OOM killer
""")


def test_the_next_run_rolls_back_a_killed_run_and_removes_its_part_file(tmp_path, capsys):
    folder = tmp_path / "out"
    with OutputRun(folder, options={"k": 1}, command="t"):
        write_json({"version": 1}, folder / "a.json")
    complete = _tree(folder)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.run([sys.executable, "-c", _KILLED_RUN, str(folder)], env=env, capture_output=True,
                          timeout=120, check=False)
    assert proc.returncode == -signal.SIGKILL
    names = {p.name for p in folder.rglob("*")}
    assert LOCK_NAME in names and any(n.endswith(".part") for n in names) and MANIFEST_NAME not in names
    said = []
    with OutputRun(folder, options={"k": 1}, command="t", echo=said.append) as run:
        # the killed run's a.json (version 2), sub/b.json and big.npy part file are gone; version 1 is back
        visible = {k: v for k, v in _tree(folder).items() if not Path(k).name.startswith(".")}
        assert visible == {k: v for k, v in complete.items() if k != MANIFEST_NAME}
        write_json({"version": 3}, run.folder / "a.json")
    text = "\n".join(said)
    # removed sub/b.json (big.npy never got past its part file); put back a.json v1 and the manifest it set aside
    assert "rolled back an interrupted run" in text and "removed 1 file(s)" in text and "restored 2 file(s)" in text
    assert "temporary file(s) left by interrupted runs" in text
    assert set(_tree(folder)) == {"a.json", MANIFEST_NAME}  # no .part, no .bak, no lock, no sub/
    assert json.loads((folder / "a.json").read_text()) == {"version": 3}


def test_a_leftover_part_file_is_removed_and_said_but_a_live_writer_is_left_alone(tmp_path, map_file, capsys):
    out = tmp_path / "g"
    out.mkdir()
    dead = out / f".grains.csv.slipnet-{_dead_pid()}-abc123.part"
    dead.write_bytes(b"\0" * 4096)
    live = out / ".boundaries.csv.slipnet-1-abc123.part"  # pid 1 is always alive
    live.write_bytes(b"\0")
    assert _grains(map_file, out) == 0
    assert "removed 1 temporary file(s) left by interrupted runs" in capsys.readouterr().out
    assert not dead.exists() and live.exists()


def test_a_killed_conversion_leaves_no_part_file_after_the_next_one(tmp_path, map_file, capsys):
    out = tmp_path / "big.npz"
    part = tmp_path / f".big.npz.slipnet-{_dead_pid()}-x1y2z3.part"
    part.write_bytes(b"\0" * 65536)  # what a killed `slipnet map IN big.npz` left
    assert main(["map", str(map_file), str(out)]) == 0
    assert "removed 1 temporary file(s)" in capsys.readouterr().out
    assert sorted(p.name for p in tmp_path.iterdir()) == ["big.npz", "in"]


def test_overwrite_keeps_an_earlier_output_the_user_changed(tmp_path):
    out = tmp_path / "out"
    with OutputRun(out, options={"v": 1}, command="t"):
        write_json({"a": 1}, out / "a.json")
        write_json({"b": 1}, out / "b.json")
    (out / "b.json").write_text('{"b": "edited by hand"}')
    said = []
    with OutputRun(out, options={"v": 2}, command="t", overwrite=True, echo=said.append):
        write_json({"a": 2}, out / "a.json")
    assert (out / "b.json").read_text() == '{"b": "edited by hand"}'
    assert any("changed since: b.json" in line for line in said)
    assert [f["path"] for f in read_manifest(out)["files"]] == ["a.json"]


def test_a_lock_from_another_machine_needs_break_lock(tmp_path, map_file, capsys):
    out = tmp_path / "g"
    out.mkdir()
    made = out / "grains.csv"
    made.write_text("half a run\n")
    header = {"op": "lock", "pid": 12345, "host": socket.gethostname() + "-elsewhere", "command": "grains",
              "started": "2020-01-01T00:00:00+00:00"}
    lock = out / LOCK_NAME
    lock.write_text(json.dumps(header) + "\n" + json.dumps({"op": "create", "path": str(made.resolve())}) + "\n")
    assert _grains(map_file, out) == 2
    err = capsys.readouterr().err
    assert "another machine" in err and "--break-lock" in err
    assert lock.exists() and made.read_text() == "half a run\n"
    assert _grains(map_file, out, "--break-lock") == 0
    assert "rolled back an interrupted run" in capsys.readouterr().out
    assert not lock.exists() and (out / MANIFEST_NAME).is_file()


def test_an_unreadable_lock_is_refused_until_broken(tmp_path, map_file, capsys):
    out = tmp_path / "g"
    out.mkdir()
    (out / LOCK_NAME).write_text("")
    assert _grains(map_file, out) == 2
    assert "names no run" in capsys.readouterr().err
    assert _grains(map_file, out, "--break-lock") == 0


# --------------------------------------------------------------------------- disk and permission failures
def _fail_replacing(monkeypatch, name: str, err: int) -> None:
    """Make the rename of ``name``'s finished temporary file fail with ``err`` (roll-backs still work)."""
    real = os.replace

    def replace(src, dst, *a, **k):
        if str(src).endswith(".part") and Path(dst).name == name:
            raise OSError(err, os.strerror(err), str(dst))
        return real(src, dst, *a, **k)

    monkeypatch.setattr(os, "replace", replace)


@pytest.mark.parametrize(("err", "words"), [(errno.ENOSPC, "the disk is full"),
                                            (errno.EROFS, "read-only or not writable")])
def test_a_full_or_read_only_disk_is_one_clear_line_and_the_folder_is_as_before(tmp_path, map_file, capsys,
                                                                                 monkeypatch, err, words):
    out = tmp_path / "g"
    assert main(["grains", str(map_file), "--out", str(out), "--threshold", "10", "--no-figures"]) == 0
    before = _tree(out)
    capsys.readouterr()
    _fail_replacing(monkeypatch, "grain_labels.npy", err)  # after the tables are already written
    code = _grains(map_file, out, "--overwrite")
    captured = capsys.readouterr()
    assert code == 2 and captured.err.count("\n") == 1 and "Traceback" not in captured.err
    assert words in captured.err and "grain_labels.npy" in captured.err
    assert _tree(out) == before  # the earlier complete run, byte for byte: no half-updated folder


def test_a_full_disk_while_writing_a_file_raises_output_error(tmp_path):
    def full(*_):
        raise OSError(errno.ENOSPC, "No space left on device")

    with pytest.raises(OutputError, match="the disk is full") as info, _files.atomic_path(tmp_path / "a.bin") as t:
        with open(t, "wb") as fh:
            fh.write(b"x")
        full()
    assert isinstance(info.value, OSError) and isinstance(info.value, SlipnetError)
    assert info.value.errno == errno.ENOSPC and info.value.filename == str(tmp_path / "a.bin")
    assert list(tmp_path.iterdir()) == []


def test_a_folder_where_the_lock_cannot_be_made_gives_output_error(tmp_path, map_file, capsys, monkeypatch):
    real = os.open

    def refuse(path, flags, *a, **k):
        if Path(path).name == LOCK_NAME:
            raise PermissionError(errno.EACCES, "Permission denied", str(path))
        return real(path, flags, *a, **k)

    monkeypatch.setattr(os, "open", refuse)
    assert _grains(map_file, tmp_path / "g") == 2
    assert "cannot take the run lock in" in capsys.readouterr().err
    assert not (tmp_path / "g").exists()


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0,
                    reason="permission bits do not stop root (the monkeypatched EROFS/EACCES cases cover it)")
def test_a_really_read_only_folder(tmp_path, map_file, capsys):
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    try:
        assert _grains(map_file, ro / "g") == 2
        assert "read-only or not writable" in capsys.readouterr().err
        assert list(ro.iterdir()) == []
    finally:
        ro.chmod(0o755)


def test_ctrl_c_and_sigterm_leave_the_folder_as_it_was(tmp_path, map_file, capsys, monkeypatch):
    import slipnet.reports.grains as report

    real = report.write_graphml
    out = tmp_path / "g"
    handler = signal.getsignal(signal.SIGTERM)

    def interrupted(graph, path):
        raise KeyboardInterrupt

    monkeypatch.setattr(report, "write_graphml", interrupted)
    assert _grains(map_file, out) == 130
    assert "left as it was" in capsys.readouterr().err
    assert not out.exists()

    def terminated(graph, path):
        real(graph, path)
        os.kill(os.getpid(), signal.SIGTERM)  # `kill PID`: the handler turns it into SystemExit

    monkeypatch.setattr(report, "write_graphml", terminated)
    with pytest.raises(SystemExit) as info:
        _grains(map_file, out)
    assert info.value.code == 128 + signal.SIGTERM
    assert not out.exists()
    assert signal.getsignal(signal.SIGTERM) == handler  # main() puts the previous handler back


# --------------------------------------------------------------------------- the manifest
def test_the_manifest_lists_inputs_options_and_files_with_their_hashes(tmp_path, map_file):
    out = tmp_path / "g"
    graph = tmp_path / "saved" / "graph.npz"
    assert main(["grains", str(map_file), "--out", str(out), "--no-figures", "--save-graph", str(graph)]) == 0
    m = read_manifest(out)
    from slipnet import __version__

    assert m["slipnet_version"] == __version__ and m["command"] == "grains"
    assert m["argv"][:2] == ["grains", str(map_file)] and m["options"]["no_figures"] is True
    assert m["started"] <= m["finished"]
    (inp,) = m["inputs"]
    assert inp["sha256"] == hashlib.sha256(map_file.read_bytes()).hexdigest()
    assert inp["size_bytes"] == map_file.stat().st_size
    listed = {f["path"]: f for f in m["files"]}
    assert set(listed) == (set(_tree(out)) - {MANIFEST_NAME}) | {str(graph.resolve())}
    for name, rec in listed.items():
        path = Path(name) if os.path.isabs(name) else out / name
        assert rec["sha256"] == sha256_file(path) and rec["size_bytes"] == path.stat().st_size


def test_a_failed_run_also_removes_its_file_outside_the_folder(tmp_path, map_file, monkeypatch):
    graph = tmp_path / "graph.npz"
    _fail_replacing(monkeypatch, "summary.md", errno.ENOSPC)
    assert main(["grains", str(map_file), "--out", str(tmp_path / "g"), "--save-graph", str(graph),
                 "--no-figures"]) == 2
    assert not graph.exists() and not (tmp_path / "g").exists()


def test_batch_maps_with_one_stem_get_a_folder_each_and_one_manifest(tmp_path, small_map):
    maps = tmp_path / "maps"
    maps.mkdir()
    write_map(small_map, maps / "map.npz")
    write_map(small_map, maps / "map.txt")
    study = tmp_path / "study.toml"
    study.write_text("[loading]\naxis = [1, 0, 0]\n[notch]\ndepth_um = 8\nroot_radius_um = 3\n"
                     "[candidates]\nedge = \"top\"\nspacing_um = 20\nwindow_um = 20\ncrack_sizes_um = [4]\n")
    out = tmp_path / "plans"
    assert main(["notch", "--study", str(study), "--batch", str(maps), "--out", str(out), "--no-figures"]) == 0
    for name in ("map.npz", "map.txt"):
        assert (out / name / "notch_plan.csv").is_file()
    listed = {f["path"] for f in read_manifest(out)["files"]}
    assert {"map.npz/notch_plan.csv", "map.txt/notch_plan.csv", "batch_best.csv"} <= listed
    assert {r["kind"] for r in read_manifest(out)["inputs"]} == {"file", "folder"}


# --------------------------------------------------------------------------- remote schedulers
def test_a_study_file_cannot_choose_a_remote_scheduler(tmp_path, map_file, capsys):
    study = tmp_path / "study.toml"
    study.write_text(f"[specimen]\nmap = \"{map_file.as_posix()}\"\n[loading]\naxis = [1, 0, 0]\n"
                     "[candidates]\nedge = \"top\"\nspacing_um = 20\n[run]\nscheduler = \"tcp://127.0.0.1:9\"\n")
    assert main(["notch", "--study", str(study), "--out", str(tmp_path / "p")]) == 2
    err = capsys.readouterr().err
    assert "never chooses a remote machine" in err and "--scheduler tcp://127.0.0.1:9" in err
    assert "connecting" not in err and not (tmp_path / "p").exists()
    from slipnet.notch import run_study

    with pytest.raises(ParameterError, match="never chooses a remote machine"):
        run_study(study)


def test_a_remote_scheduler_named_on_the_command_line_is_announced(tmp_path, map_file, capsys):
    # port 9 on the loopback: nothing listens there, so the connection fails at once
    assert main(["notch", str(map_file), "--side", "top", "--spacing", "20", "--depth", "8", "--root-radius", "3",
                 "--window", "20", "--crack-sizes", "4", "--load-axis", "1", "0", "0",
                 "--scheduler", "tcp://127.0.0.1:9", "--out", str(tmp_path / "p")]) == 2
    err = capsys.readouterr().err
    assert "connecting to the remote dask scheduler tcp://127.0.0.1:9 (trusted machines only" in err
    assert "could not reach the dask scheduler" in err
    assert not (tmp_path / "p").exists()


def test_python_callers_give_allow_remote_for_a_remote_scheduler(small_map):
    from slipnet.grains import build_grain_graph
    from slipnet.notch import plan_notch

    gg = build_grain_graph(small_map)
    kw = dict(spacing_um=20.0, depth_um=8.0, root_radius_um=3.0, window_um=20.0, crack_sizes_um=(4.0,))
    with pytest.raises(ParameterError, match="allow_remote=True"):
        plan_notch(gg, "top", (1, 0, 0), scheduler="tcp://127.0.0.1:9", **kw)


def test_remote_schedulers_are_documented_as_trusted_only(capsys):
    from slipnet.notch import sweep

    doc = (ROOT / "docs" / "outputs.md").read_text(encoding="utf-8")
    assert "trusted machines only" in doc.lower() and "unpickled" in doc
    assert "trusted machines only" in sweep.__doc__.replace("\n", " ")
    with pytest.raises(SystemExit):
        main(["notch", "--help"])
    assert "trusted machines only" in " ".join(capsys.readouterr().out.split())


def test_demo_refuses_a_folder_holding_a_demo_of_another_seed(tmp_path, capsys):
    # the demo folder had 98 grains in one table and 101 in another: two seeds mixed
    out = tmp_path / "demo"
    with OutputRun(out, options={"seed": 7, "quick": True}, command="demo"):
        write_json({"grains": 98}, out / "grains.json")
    before = _tree(out)
    assert main(["demo", "--quick", "--seed", "8", "--out", str(out)]) == 2  # refused before any work
    assert "with other options (seed)" in capsys.readouterr().err
    assert _tree(out) == before
