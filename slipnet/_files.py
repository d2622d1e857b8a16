"""Write outputs safely: to a temporary name beside the target, renamed when complete."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, overwrite: bool = True) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` only if the block succeeds.

    A failure inside the block removes the temporary file and leaves any existing ``path``
    untouched, so an interrupted write never leaves a half-written output.

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
    if target.exists() and not overwrite:
        from slipnet.errors import ParameterError

        raise ParameterError(f"output {target} exists; choose another name or allow overwriting")
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        # mkstemp makes the file private (0600); give it the usual permissions of a new file
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp_path, 0o666 & ~umask)
        os.replace(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()
