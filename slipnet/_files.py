"""Write outputs safely: to a temporary name beside the target, renamed when complete.

Every file slipnet writes goes through :func:`atomic_path`. The temporary name carries the
writing process's id (``.<name>.slipnet-<pid>-<random>.part``), so a later run can tell the
leftover of a killed process (:func:`leftover_files`) from a file another live process is still
writing. A failure of the operating system (full disk, read-only or forbidden folder) becomes an
:class:`~slipnet.errors.OutputError` that names the path and the fix; the temporary file is
removed and an existing target is left untouched.

When a :class:`slipnet.runs.OutputRun` is active, :func:`atomic_path` also reports every write
to it (through :data:`ACTIVE_RUN`), so the run can refuse a write over one of its inputs, keep
what it replaced for a roll-back, and list the file in its manifest.
"""

from __future__ import annotations

import contextlib
import contextvars
import errno as _errno
import os
import re
import tempfile
from collections.abc import Iterator
from pathlib import Path

from slipnet.errors import OutputError, ParameterError, SlipnetError

__all__ = ["ACTIVE_RUN", "LEFTOVER_PATTERN", "atomic_path", "leftover_files", "output_error", "pid_alive",
           "temporary_prefix"]

#: The output run in force in this context (a :class:`slipnet.runs.OutputRun`), or None.
ACTIVE_RUN: contextvars.ContextVar = contextvars.ContextVar("slipnet_output_run", default=None)

#: Name of a temporary (``.part``) or backup (``.bak``) file made by :func:`atomic_path` or an
#: output run: the target's name, the writing process id, a random part and the kind.
LEFTOVER_PATTERN = re.compile(r"^\.(?P<name>.+)\.slipnet-(?P<pid>\d+)-[A-Za-z0-9_]+\.(?P<kind>part|bak)$")

_FULL = {_errno.ENOSPC, _errno.EDQUOT, _errno.EFBIG}
_DENIED = {_errno.EACCES, _errno.EPERM, _errno.EROFS}


def temporary_prefix(target: Path) -> str:
    """The start of the temporary and backup names of ``target`` written by this process."""
    return f".{target.name}.slipnet-{os.getpid()}-"


def output_error(err: OSError, path: str | os.PathLike, doing: str = "write") -> OutputError:
    """The project's error for an operating-system failure to ``doing`` ``path``, naming the fix.

    Parameters
    ----------
    err
        The operating system's error.
    path
        The file or folder that could not be written.
    doing
        What was being done, e.g. ``"write"`` or ``"create the folder"``.

    Examples
    --------
    >>> import errno
    >>> err = output_error(OSError(errno.ENOSPC, "No space left on device"), "out/grains.csv")
    >>> str(err).split(";")[0]
    'cannot write out/grains.csv: the disk is full (No space left on device)'
    >>> err.errno == errno.ENOSPC
    True
    """
    reason = err.strerror or str(err)
    if err.errno in _FULL:
        fix = f"the disk is full ({reason}); free some space or choose another output folder"
    elif err.errno in _DENIED:
        fix = (f"the folder is read-only or not writable by this user ({reason}); choose a writable output "
               "folder or change its permissions")
    else:
        fix = f"{reason}; check the path and the disk, or choose another output folder"
    return OutputError(f"cannot {doing} {os.fspath(path)}: {fix}; nothing was half-written",
                       errno=err.errno, filename=os.fspath(path))


def pid_alive(pid: int) -> bool:
    """Whether a process with id ``pid`` exists on this machine (True when it cannot be told)."""
    if pid <= 0:
        return False
    if os.name == "nt":  # signal 0 is not a probe there
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    return True


def leftover_files(folder: str | os.PathLike, *, recursive: bool = True, name: str | None = None) -> list[Path]:
    """Temporary and backup files left in ``folder`` by slipnet processes that no longer run.

    Parameters
    ----------
    folder
        Where to look.
    recursive
        Look in sub-folders too.
    name
        Only the leftovers of this target file name.

    Returns
    -------
    list of Path
        Sorted. Files of a live process (another run still writing) are not included.
    """
    root = Path(folder)
    if not root.is_dir():
        return []
    found = root.rglob(".*slipnet-*") if recursive else root.glob(".*slipnet-*")
    out = []
    for p in found:
        m = LEFTOVER_PATTERN.match(p.name)
        if m is None or (name is not None and m["name"] != name) or not p.is_file():
            continue
        if int(m["pid"]) == os.getpid() or not pid_alive(int(m["pid"])):
            out.append(p)
    return sorted(out)


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = True) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` only if the block succeeds.

    A failure inside the block removes the temporary file and leaves any existing ``path``
    untouched, so an interrupted write never leaves a half-written output. An operating-system
    failure (full disk, read-only or forbidden folder) is raised as
    :class:`~slipnet.errors.OutputError` naming the path and the fix.

    Parameters
    ----------
    path
        The file to write.
    overwrite
        Refuse an existing ``path`` when False.

    Raises
    ------
    ParameterError
        ``path`` exists and ``overwrite`` is False, or the active output run refuses the path
        (it is one of the run's inputs).
    OutputError
        The folder cannot be made, or the file cannot be written or renamed.

    Examples
    --------
    >>> import pathlib, tempfile
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("done")
    >>> target.read_text()
    'done'
    """
    target = Path(path)
    if not overwrite and target.exists():
        raise ParameterError(f"output {target} should be a new file (overwriting is off); got one that exists; "
                             "choose another name or allow overwriting")
    run = ACTIVE_RUN.get()
    if run is not None:
        run.before_write(target)
    else:
        try:
            target.parent.mkdir(parents=True, exist_ok=True)
        except OSError as err:
            raise output_error(err, target.parent, "create the folder") from err
    try:
        fd, tmp = tempfile.mkstemp(prefix=temporary_prefix(target), suffix=".part", dir=target.parent)
    except OSError as err:
        raise output_error(err, target) from err
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        try:
            yield tmp_path
        except OSError as err:
            if isinstance(err, SlipnetError):
                raise
            raise output_error(err, target) from err
        try:
            # mkstemp makes the file private (0600); give it the usual permissions of a new file
            umask = os.umask(0)
            os.umask(umask)
            os.chmod(tmp_path, 0o666 & ~umask)
            os.replace(tmp_path, target)
        except OSError as err:
            raise output_error(err, target) from err
    finally:
        with contextlib.suppress(OSError):
            tmp_path.unlink(missing_ok=True)
    if run is not None:
        run.after_write(target)
