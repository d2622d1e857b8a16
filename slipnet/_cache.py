"""Where numba keeps slipnet's compiled kernels: a user cache folder, not the installed package.

numba's ``cache=True`` writes next to the source file by default (``__pycache__`` inside the
installed package), which a system-wide or read-only install cannot take and which mixes build
products into the package. :func:`use_user_numba_cache` points ``NUMBA_CACHE_DIR`` at
``<user cache dir>/slipnet/numba`` instead, unless the user has set it. It must run before numba
is first imported (numba reads the variable then); ``slipnet/__init__.py`` calls it, and runs
before any submodule. Nothing here imports numba.
"""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["numba_cache_dir", "use_user_numba_cache"]


def numba_cache_dir() -> Path:
    """``<user cache dir>/slipnet/numba``.

    The user cache dir is ``platformdirs.user_cache_dir("slipnet")`` when platformdirs is
    installed (``$XDG_CACHE_HOME/slipnet`` or ``~/.cache/slipnet`` on Linux,
    ``~/Library/Caches/slipnet`` on macOS, ``%LOCALAPPDATA%\\slipnet\\Cache`` on Windows), else
    ``$XDG_CACHE_HOME/slipnet`` when that variable is set and not blank, else ``~/.cache/slipnet``.
    """
    try:
        from platformdirs import user_cache_dir
    except ImportError:
        base = os.environ.get("XDG_CACHE_HOME", "")
        root = base if base.strip() else os.path.expanduser("~/.cache")  # what platformdirs does on Linux
        return Path(root) / "slipnet" / "numba"
    return Path(user_cache_dir("slipnet", appauthor=False)) / "numba"


def use_user_numba_cache() -> None:
    """Set ``NUMBA_CACHE_DIR`` to :func:`numba_cache_dir` unless it is already set (and not empty).

    An empty value counts as unset, as numba itself treats it. numba creates the folder when it
    first writes a kernel, and falls back to its own locations if the folder cannot be written.
    """
    if os.environ.get("NUMBA_CACHE_DIR"):
        return
    os.environ["NUMBA_CACHE_DIR"] = str(numba_cache_dir())
