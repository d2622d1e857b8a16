"""Output runs: one run's files in one folder, never over its inputs, complete only with a manifest.

Every ``slipnet`` command writes inside an :class:`OutputRun`, and Python code can do the same::

    with OutputRun("plans", inputs=["map.npz"], options={"spacing_um": 20}, command="my-study") as run:
        write_plan(plan, gg, run.folder)

The run

* refuses an output folder or file that is, contains or lies inside one of its inputs (symbolic and
  hard links resolved), so nothing is ever written over or into what the run reads;
* holds a lock file (``.slipnet-run.lock``) in the folder while it runs, so two runs never mix
  their files in one folder: a second run is refused while the first is alive, and the lock of a
  run that was killed is found stale on the next run, which rolls that run's partial files back
  (a lock from another machine, which cannot be checked, needs ``break_lock=True`` /
  ``--break-lock``);
* refuses a folder that already holds a complete run of another command, other options or other
  inputs, unless ``overwrite=True`` (``--overwrite``): then the earlier run's files are replaced,
  and the ones this run does not write again are removed, but only once this run has succeeded;
  running the very same command again on the same inputs needs no flag;
* removes the temporary files (``.<name>.slipnet-<pid>-….part``) of killed runs, and says so;
* writes ``manifest.json`` last: the slipnet version, the command, its options, every input with
  its size and SHA-256, every file written with its size and SHA-256, and the start and end times.
  A folder is complete only when it holds a manifest, and no manifest is present while a run
  works in the folder;
* on any failure (a full disk, a read-only folder, an error in the computation, Ctrl-C) removes
  every file it wrote and puts back every file it replaced, leaving the folder as it was, and
  deletes nothing it did not write.

Writes are seen through :func:`slipnet._files.atomic_path`, which every writer uses; writes from
threads that do not share the run's :mod:`contextvars` context are not recorded.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import logging
import os
import secrets
import shutil
import socket
import sys
from collections.abc import Callable, Iterable, Mapping
from datetime import UTC, datetime
from pathlib import Path

from slipnet._files import ACTIVE_RUN, atomic_path, leftover_files, output_error, pid_alive, temporary_prefix
from slipnet.errors import InputFileError, ParameterError

__all__ = ["LOCK_NAME", "MANIFEST_NAME", "OutputRun", "read_manifest", "sha256_file"]

#: File name of the run manifest, written last into the output folder.
MANIFEST_NAME = "manifest.json"
#: File name of the lock (and journal) a run holds in its output folder while it runs.
LOCK_NAME = ".slipnet-run.lock"
MANIFEST_FORMAT = "slipnet-run-manifest"
MANIFEST_VERSION = 1
#: Options that only say how to treat the folder or the console; they do not make a run different.
_FOLDER_OPTIONS = frozenset({"overwrite", "break_lock", "out", "quiet"})

logger = logging.getLogger("slipnet")


def sha256_file(path: str | os.PathLike) -> str:
    """The SHA-256 hex digest of a file, read in 1 MiB blocks.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a.txt"
    >>> _ = p.write_bytes(b"abc")
    >>> sha256_file(p)[:16]
    'ba7816bf8f01cfea'
    """
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_manifest(folder: str | os.PathLike) -> dict:
    """The manifest of the complete run in ``folder``.

    Raises
    ------
    InputFileError
        When the folder holds no manifest (no run finished there) or it is not a slipnet manifest.
    """
    path = Path(folder) / MANIFEST_NAME
    if not path.is_file():
        raise InputFileError(f"no {MANIFEST_NAME} here, so no slipnet run finished in this folder; rerun the "
                             "command into it", path=str(path))
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as err:
        raise InputFileError(f"the run manifest should be JSON; got unreadable text ({err})", path=str(path)) from err
    if not isinstance(data, dict) or data.get("format") != MANIFEST_FORMAT:
        raise InputFileError(f"the run manifest should have format {MANIFEST_FORMAT!r}; got {data.get('format')!r}"
                             if isinstance(data, dict) else "the run manifest should be a JSON object",
                             path=str(path))
    return data


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds")


def _real(path: str | os.PathLike) -> Path:
    """Absolute, with every symbolic link resolved (the file itself need not exist)."""
    return Path(os.path.realpath(os.fspath(path)))


def _where(path: str | os.PathLike) -> Path:
    """The directory entry a rename onto ``path`` replaces: parent resolved, name kept."""
    p = Path(path)
    return _real(p.parent) / p.name


def _identity(path: Path) -> tuple[int, int] | None:
    try:
        st = os.stat(path)
    except OSError:
        return None
    return st.st_dev, st.st_ino


def _proc_start(pid: int) -> str | None:
    """Start time of process ``pid`` (Linux ``/proc``), to tell a reused pid from the lock holder."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = text.rpartition(")")[2].split()
    return fields[19] if len(fields) > 19 else None


def _plain(value):
    """``value`` as plain JSON data (paths, tuples, sets and numpy values converted)."""
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, set, frozenset)):
        items = [_plain(v) for v in value]
        return sorted(items, key=str) if isinstance(value, (set, frozenset)) else items
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if hasattr(value, "item"):  # numpy scalars
        with contextlib.suppress(TypeError, ValueError):
            return value.item()
    if hasattr(value, "tolist"):
        return value.tolist()
    return str(value)


class _Input:
    def __init__(self, path: str | os.PathLike) -> None:
        self.given = os.fspath(path)
        self.real = _real(path)
        self.is_dir = self.real.is_dir()
        self.identity = _identity(self.real)

    def record(self) -> dict:
        rec: dict = {"path": self.given, "resolved": str(self.real)}
        if self.is_dir:
            files = sorted(p for p in self.real.rglob("*") if p.is_file()
                           and not any(part.startswith(".") for part in p.relative_to(self.real).parts))
            rec["kind"] = "folder"
            rec["files"] = [{"path": p.relative_to(self.real).as_posix(), "size_bytes": p.stat().st_size,
                             "sha256": sha256_file(p)} for p in files]
        elif self.real.is_file():
            rec.update(kind="file", size_bytes=self.real.stat().st_size, sha256=sha256_file(self.real))
        else:
            rec["kind"] = "missing"
        return rec


class OutputRun:
    """A context for one run's outputs: checked against its inputs, locked, rolled back, listed.

    Parameters
    ----------
    folder
        The output folder (made if missing), or None for a run that writes only the files named
        in ``outputs`` (no lock, no manifest), like ``slipnet map IN OUT``.
    inputs
        Every file or folder the run reads (None entries are skipped). No output may be, contain
        or lie inside one of them.
    outputs
        Files the run will write outside the usual writers' names (e.g. ``--save-graph FILE``),
        checked before anything runs. Every other file is checked as it is written.
    options
        The run's options, recorded in the manifest and compared with an earlier run's.
    command
        The command's name (``"grains"``, ``"notch"``, …), recorded in the manifest.
    argv
        The command line, recorded in the manifest.
    keep
        Subfolders of ``folder`` holding a store the run reuses across runs (the study's step cache):
        their files are written as usual but are not the run's files (not in the manifest, not rolled
        back, never removed as an earlier run's leftovers).
    revise
        A complete earlier run of the same command may be replaced without ``overwrite`` even with
        other options or inputs (a study revised step by step); its files not written again are
        removed once this run succeeds, so the runs never mix.
    overwrite
        Replace a complete earlier run of another command/options/inputs in ``folder``, and files
        in it that no run recorded.
    break_lock
        Clear a lock that cannot be checked from this machine (a run on another host, or an
        unreadable lock) after rolling back the files its journal lists.
    echo
        Where to say what the run does to the folder (clean-ups, replacements); default: the
        ``slipnet`` logger.

    Attributes
    ----------
    files : dict
        Every file written so far: resolved path → the path as the writer named it.
    manifest_path : Path or None
        The manifest, once the run has finished.

    Raises
    ------
    ParameterError
        On entering: an output is, contains or lies inside an input; the folder is in use by a
        live run or locked by one that cannot be checked; it holds another complete run and
        ``overwrite`` is False. While running: a write over an input, or over a file in the folder
        that no run recorded (without ``overwrite``).
    OutputError
        The folder, a file, the lock or the manifest cannot be written (full disk, read-only or
        forbidden folder).

    Examples
    --------
    >>> import pathlib, tempfile
    >>> from slipnet.reports.writer import write_json
    >>> folder = pathlib.Path(tempfile.mkdtemp()) / "out"
    >>> with OutputRun(folder, options={"seed": 1}, command="example") as run:
    ...     _ = write_json({"a": 1}, run.folder / "a.json")
    >>> sorted(p.name for p in folder.iterdir())
    ['a.json', 'manifest.json']
    >>> [f["path"] for f in read_manifest(folder)["files"]]
    ['a.json']
    """

    def __init__(self, folder: str | os.PathLike | None, *, inputs: Iterable = (), outputs: Iterable = (),
                 options: Mapping | None = None, command: str = "python", argv: Iterable[str] | None = None,
                 overwrite: bool = False, break_lock: bool = False,
                 echo: Callable[[str], object] | None = None, keep: Iterable[str] = (),
                 revise: bool = False) -> None:
        self.folder = None if folder is None else Path(folder)
        self.keep = tuple(str(k) for k in keep)
        self.revise = bool(revise)
        self.command = str(command)
        self.options = _plain(dict(options or {}))
        self.argv = None if argv is None else [str(a) for a in argv]
        self.overwrite = bool(overwrite)
        self.break_lock = bool(break_lock)
        self._echo = echo
        self._inputs = [_Input(p) for p in inputs if p is not None]
        self._outputs = [Path(p) for p in outputs if p is not None]
        self.files: dict[Path, Path] = {}
        self.manifest_path: Path | None = None
        self._entries: list[dict] = []  # the journal: what to undo, in order
        self._touched: set[Path] = set()
        self._backups: dict[Path, Path] = {}
        self._old: dict | None = None
        self._old_files: dict[Path, dict] = {}
        self._input_records: list[dict] = []
        self._made_dirs: list[Path] = []
        self._lock_fd: int | None = None
        self._lock_path: Path | None = None
        self._token = None
        self.started: str | None = None

    # ------------------------------------------------------------------ checks
    def _say(self, message: str) -> None:
        if self._echo is None:
            logger.info(message)
        else:
            self._echo(message)

    def _check_output(self, path: Path, what: str = "output") -> None:
        """Refuse ``path`` if it is, contains or lies inside an input."""
        for real in {_where(path), _real(path)}:
            ident = _identity(real)
            for inp in self._inputs:
                if real == inp.real or (ident is not None and ident == inp.identity):
                    kind = "folder" if what == "the output folder" else "name"
                    raise ParameterError(
                        f"{what} {os.fspath(path)} should not be an input of the run; got the input "
                        f"{inp.given} itself. Choose another {kind}: slipnet never writes over or into what it "
                        "reads")
                if inp.real.is_relative_to(real):
                    raise ParameterError(
                        f"{what} {os.fspath(path)} should not hold an input of the run; got the input "
                        f"{inp.given} inside it. Choose another output folder, outside the inputs")
                if inp.is_dir and real.is_relative_to(inp.real):
                    raise ParameterError(
                        f"{what} {os.fspath(path)} should lie outside the input folder {inp.given}; got a path "
                        "inside it, where the next run would read it back as an input. Choose an output "
                        "folder elsewhere")

    def add_inputs(self, paths: Iterable) -> None:
        """Add inputs found while running (e.g. the map a study file names); checked like the others.

        Raises
        ------
        ParameterError
            When the output folder, a declared output or a file already written is, contains or
            lies inside one of them.
        """
        new = [_Input(p) for p in paths if p is not None]
        self._inputs.extend(new)
        if self.folder is not None:
            self._check_output(self.folder, "the output folder")
        for p in (*self._outputs, *self.files.values()):
            self._check_output(p)
        if self.started is not None:
            self._input_records.extend(inp.record() for inp in new)

    # ------------------------------------------------------------------ journal and folder
    def _journal(self, entry: dict) -> None:
        self._entries.append(entry)
        if self._lock_fd is not None:
            try:
                os.write(self._lock_fd, (json.dumps(entry) + "\n").encode("utf-8"))
            except OSError as err:
                raise output_error(err, self._lock_path, "record the run's progress in") from err

    def _mkdirs(self, folder: Path, *, journal: bool = True) -> list[Path]:
        """Make ``folder`` and its missing parents; returns the ones made (outermost first)."""
        missing = []
        p = _real(folder)
        while not p.exists():
            missing.append(p)
            p = p.parent
        made = []
        for d in reversed(missing):
            try:
                d.mkdir()
            except FileExistsError:
                continue
            except OSError as err:
                raise output_error(err, d, "create the folder") from err
            made.append(d)
            if journal:
                self._journal({"op": "mkdir", "path": str(d)})
        return made

    def _take_lock(self) -> None:
        assert self.folder is not None
        lock = _real(self.folder) / LOCK_NAME
        header = {"op": "lock", "pid": os.getpid(), "host": socket.gethostname(),
                  "proc_start": _proc_start(os.getpid()), "command": self.command, "started": self.started,
                  "made_dirs": [str(d) for d in self._made_dirs]}
        for attempt in range(2):
            try:
                fd = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_APPEND, 0o644)
            except FileExistsError:
                if attempt:
                    raise ParameterError(f"the output folder {self.folder} should be free; got a lock taken by "
                                         "another run a moment ago. Choose another output folder") from None
                self._clear_stale_lock(lock)
                continue
            except OSError as err:
                raise output_error(err, self.folder, "take the run lock in") from err
            self._lock_fd, self._lock_path = fd, lock
            self._journal(header)
            return

    def _clear_stale_lock(self, lock: Path) -> None:
        try:
            lines = lock.read_text(encoding="utf-8").splitlines()
            entries = [json.loads(line) for line in lines if line.strip()]
            header = entries[0] if entries and entries[0].get("op") == "lock" else None
        except (OSError, UnicodeDecodeError, json.JSONDecodeError):
            entries, header = [], None
        if header is None:
            if not self.break_lock:
                raise ParameterError(
                    f"the output folder {self.folder} should be free; got a lock file {lock} that names no run. "
                    "If no slipnet run is writing there, pass --break-lock (break_lock=True) or delete that file; "
                    "or choose another output folder")
            who = "an unknown run"
        else:
            pid = int(header.get("pid", -1))
            host = header.get("host")
            who = f"pid {pid} on {host}, '{header.get('command')}', started {header.get('started')}"
            same_host = host == socket.gethostname()
            now_start = _proc_start(pid) if same_host else None
            alive = same_host and pid_alive(pid) and (header.get("proc_start") is None or now_start is None
                                                     or now_start == header.get("proc_start"))
            if alive:
                raise ParameterError(
                    f"the output folder {self.folder} should not be in use; got a slipnet run still writing there "
                    f"({who}). Wait for it to finish, or choose another output folder")
            if not same_host and not self.break_lock:
                raise ParameterError(
                    f"the output folder {self.folder} should be free; got the lock of a slipnet run on another "
                    f"machine ({who}), which cannot be checked from here. If that run has stopped, pass "
                    "--break-lock (break_lock=True) to roll back its partial files and go on; or choose another "
                    "output folder")
        committed = any(e.get("op") == "commit" for e in entries)
        removed = restored = 0
        if not committed:
            removed, restored, problems = _undo(entries[1:] if header else entries)
            if problems:
                raise ParameterError(
                    f"the output folder {self.folder} holds the partial files of an interrupted run ({who}) that "
                    f"could not be rolled back ({'; '.join(problems)}); fix that, then delete {lock}")
        try:
            lock.unlink()
        except FileNotFoundError:
            pass
        except OSError as err:
            raise output_error(err, lock, "remove the stale run lock") from err
        if committed:
            self._say(f"cleared the lock of a finished run ({who}) in {self.folder}")
        else:
            self._say(f"rolled back an interrupted run ({who}) in {self.folder}: removed {removed} file(s) it had "
                      f"written, restored {restored} file(s) it had replaced")

    def _clean_leftovers(self) -> None:
        found = leftover_files(self.folder) if self.folder is not None else []
        for p in self._outputs:
            found += leftover_files(p.parent, recursive=False, name=p.name)
        found = sorted(set(found))
        if not found:
            return
        size = 0
        for p in found:
            with contextlib.suppress(OSError):
                size += p.stat().st_size
                p.unlink()
        names = ", ".join(p.name for p in found[:5]) + (", …" if len(found) > 5 else "")
        self._say(f"removed {len(found)} temporary file(s) left by interrupted runs ({size / 1e6:.1f} MB): {names}")

    def _read_previous(self) -> None:
        assert self.folder is not None
        path = _real(self.folder) / MANIFEST_NAME
        if not path.exists():
            return
        try:
            old = read_manifest(self.folder)
        except InputFileError:
            old = {}
        same = (old.get("command") == self.command and _run_options(old.get("options")) == _run_options(self.options)
                and _input_key(old.get("inputs")) == _input_key(self._input_records))
        what = (f"a complete '{old.get('command')}' run finished {old.get('finished')}" if old
                else f"an unreadable {MANIFEST_NAME}")
        revised = self.revise and old.get("command") == self.command
        if not same and not self.overwrite and not revised:
            raise ParameterError(
                f"the output folder {self.folder} should hold no other run; got {what}{_differences(old, self)}. "
                "Choose a new output folder, or pass --overwrite (overwrite=True) to replace that run: its files "
                "are removed and yours written only once this run succeeds")
        self._old = old
        for rec in old.get("files", []) if isinstance(old.get("files"), list) else []:
            rel = rec.get("path") if isinstance(rec, dict) else None
            if isinstance(rel, str) and not os.path.isabs(rel):
                self._old_files[_where(path.parent / rel)] = rec
        self._say(f"re-running the same '{self.command}' run in {self.folder}: its files are replaced" if same
                  else f"revising the earlier '{self.command}' run in {self.folder}: its files are replaced"
                  if revised else f"replacing {what} in {self.folder} (--overwrite)")
        self._set_aside(path)

    def _set_aside(self, where: Path, *, move: bool = True) -> Path:
        """Keep ``where`` under a backup name until the run ends (renamed away, or linked/copied)."""
        bak = where.parent / f"{temporary_prefix(where)}{secrets.token_hex(4)}.bak"
        self._journal({"op": "backup", "path": str(where), "backup": str(bak)})
        try:
            if move:
                os.replace(where, bak)
            else:
                try:
                    os.link(where, bak)
                except OSError:
                    shutil.copy2(where, bak)
        except OSError as err:
            raise output_error(err, where, "keep a copy of") from err
        self._backups[where] = bak
        self._touched.add(where)
        return bak

    # ------------------------------------------------------------------ hooks called by atomic_path
    def _kept(self, where: Path) -> bool:
        """True inside a ``keep`` subfolder: a store the run reuses, not one of the run's files."""
        if not self.keep or self.folder is None:
            return False
        folder = _real(self.folder)
        return any(where.is_relative_to(folder / k) for k in self.keep)

    def before_write(self, target: Path) -> None:
        """Check and prepare a write onto ``target`` (called by :func:`slipnet._files.atomic_path`)."""
        where = _where(target)
        self._check_output(target)
        if self._kept(where):
            where.parent.mkdir(parents=True, exist_ok=True)  # the store outlives the run: not journaled
            return
        if where in self._touched:
            return
        folder = None if self.folder is None else _real(self.folder)
        inside = folder is not None and where.is_relative_to(folder)
        if inside and where.parent == folder and where.name in (MANIFEST_NAME, LOCK_NAME):
            raise ParameterError(f"output {target} should not be named {where.name}; that name is the run's own. "
                                 "Give the file another name")
        if os.path.lexists(where):
            if inside and not self.overwrite and where not in self._old_files:
                raise ParameterError(
                    f"output {target} should be new, or a file of an earlier run in {self.folder}; got a file no "
                    "slipnet run recorded there. Choose an empty output folder, or pass --overwrite "
                    "(overwrite=True) to replace it")
            self._set_aside(where, move=False)
        else:
            self._mkdirs(where.parent)
            self._journal({"op": "create", "path": str(where)})
            self._touched.add(where)

    def after_write(self, target: Path) -> None:
        """Record that ``target`` is complete (called by :func:`slipnet._files.atomic_path`)."""
        where = _where(target)
        if self._kept(where):
            return
        self.files.pop(where, None)
        self.files[where] = Path(target)

    # ------------------------------------------------------------------ enter and exit
    def __enter__(self) -> OutputRun:
        if ACTIVE_RUN.get() is not None:
            raise ParameterError("an output run should not start inside another; got one already active "
                                 f"({ACTIVE_RUN.get().folder}). Finish it first")
        self.started = _now()
        if self.folder is not None:
            if self.folder.exists() and not self.folder.is_dir():
                raise ParameterError(f"the output folder should be a folder; got the file {self.folder}. "
                                     "Give a folder name")
            self._check_output(self.folder, "the output folder")
        for p in self._outputs:
            self._check_output(p)
        try:
            if self.folder is not None:
                self._made_dirs = self._mkdirs(self.folder, journal=False)
                self._take_lock()
            self._clean_leftovers()
            self._input_records = [inp.record() for inp in self._inputs]
            if self.folder is not None:
                self._read_previous()
        except BaseException:
            self._finish(rollback=True)
            raise
        self._token = ACTIVE_RUN.set(self)
        return self

    def __exit__(self, exc_type, exc, tb) -> bool:
        if self._token is not None:
            ACTIVE_RUN.reset(self._token)
            self._token = None
        if exc_type is None:
            try:
                self._commit()
            except BaseException:
                self._finish(rollback=True)
                raise
            self._finish(rollback=False)
        else:
            self._finish(rollback=True)
        return False

    def _commit(self) -> None:
        """Remove the earlier run's files not written again, then write the manifest (last)."""
        kept = []
        for where, rec in self._old_files.items():
            if where in self.files or not where.is_file() or where in self._backups:
                continue
            if rec.get("sha256") not in (None, sha256_file(where)):
                kept.append(where.name)  # changed since that run wrote it: not ours to delete
                continue
            self._set_aside(where)
        if kept:
            self._say(f"kept {len(kept)} file(s) of the earlier run that were changed since: {', '.join(kept)}")
        if self.folder is None:
            return
        folder = _real(self.folder)
        files = []
        for where in self.files:
            if not where.is_file():
                continue
            name = where.relative_to(folder).as_posix() if where.is_relative_to(folder) else str(where)
            files.append({"path": name, "size_bytes": where.stat().st_size, "sha256": sha256_file(where)})
        from slipnet import __version__

        manifest = {
            "format": MANIFEST_FORMAT, "version": MANIFEST_VERSION, "slipnet_version": __version__,
            "python": sys.version.split()[0], "command": self.command, "argv": self.argv,
            "options": self.options, "started": self.started, "finished": _now(),
            "inputs": self._input_records, "files": files,
            "replaced_run": None if self._old is None else {k: self._old.get(k) for k in
                                                              ("command", "started", "finished")},
        }
        target = folder / MANIFEST_NAME
        self._journal({"op": "create", "path": str(target)})
        with atomic_path(target) as tmp:
            tmp.write_text(json.dumps(manifest, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
        self._journal({"op": "commit"})
        self.manifest_path = target

    def _finish(self, *, rollback: bool) -> None:
        problems: list[str] = []
        if rollback:
            _, _, problems = _undo(self._entries)
        else:
            for bak in self._backups.values():
                with contextlib.suppress(OSError):
                    bak.unlink(missing_ok=True)
            # folders left empty by the earlier run's removed files
            for where in sorted(self._backups, key=lambda p: -len(p.parts)):
                _remove_empty_dirs(where.parent, self.folder)
        if self._lock_fd is not None:
            os.close(self._lock_fd)
            self._lock_fd = None
            if problems:
                self._say(f"could not roll back everything ({'; '.join(problems)}); the lock {self._lock_path} is "
                          "kept so the next run in this folder finishes the roll-back")
            else:
                with contextlib.suppress(OSError):
                    self._lock_path.unlink()
        if rollback:
            for d in reversed(self._made_dirs):
                with contextlib.suppress(OSError):
                    d.rmdir()


def _undo(entries: list[dict]) -> tuple[int, int, list[str]]:
    """Undo a run's journal, newest first: remove created files, restore replaced ones, drop new folders."""
    removed = restored = 0
    problems = []
    for e in reversed(entries):
        op, path = e.get("op"), e.get("path")
        try:
            if op == "create" and path and os.path.lexists(path):
                os.unlink(path)
                removed += 1
            elif op == "backup" and path and e.get("backup") and os.path.lexists(e["backup"]):
                if os.path.lexists(path) and os.path.samefile(e["backup"], path):
                    os.unlink(e["backup"])  # a hard link to the untouched file: rename would do nothing
                else:
                    os.replace(e["backup"], path)
                    restored += 1
            elif op == "mkdir" and path and os.path.isdir(path) and not os.listdir(path):
                os.rmdir(path)
        except OSError as err:
            problems.append(f"{path}: {err.strerror or err}")
    return removed, restored, problems


def _remove_empty_dirs(start: Path, folder: Path | None) -> None:
    if folder is None:
        return
    top = _real(folder)
    d = _real(start)
    while d != top and d.is_relative_to(top):
        try:
            d.rmdir()
        except OSError:
            return
        d = d.parent


def _run_options(options) -> dict:
    if not isinstance(options, dict):
        return {}
    return {k: v for k, v in _plain(options).items() if k not in _FOLDER_OPTIONS}


def _input_key(records) -> list:
    out = []
    for r in records or []:
        if not isinstance(r, dict):
            continue
        content = r.get("sha256") if r.get("kind") != "folder" else [(f.get("path"), f.get("sha256"))
                                                                    for f in r.get("files", [])]
        out.append((r.get("resolved"), r.get("kind"), json.dumps(content)))
    return sorted(out)


def _differences(old: dict, run: OutputRun) -> str:
    if not old:
        return ""
    if old.get("command") != run.command:
        return f" (command '{old.get('command')}', this run '{run.command}')"
    a, b = _run_options(old.get("options")), _run_options(run.options)
    keys = sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))
    if keys:
        return f" with other options ({', '.join(keys[:6])}{', …' if len(keys) > 6 else ''})"
    return " on other inputs (names or contents differ)"
