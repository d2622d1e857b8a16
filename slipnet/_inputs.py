"""Guard every read: regular files only, bounded sizes, allocations within a memory budget.

Every reader in :mod:`slipnet.io` opens its file through :func:`checked_input` and checks each
array a file *declares* (a shape, a grid extent, a count) with :func:`check_allocation` before it
allocates anything. A FIFO, a device (``/dev/zero``) or a folder given as a file is refused at
once instead of hanging or failing deep inside a library; a file larger than the size limit, or a
declared array larger than the memory budget, is refused with the numbers and the option that
raises the limit.

The limits come from, in order: the keyword given to the reader, the environment variables
``SLIPNET_MAX_INPUT_BYTES`` and ``SLIPNET_MEMORY_BUDGET`` (bytes; a suffix k, M, G or T is
accepted), and the defaults below. The default memory budget is half of the machine's physical
memory (common practice: leave room for the copies a computation makes of its inputs).
"""

from __future__ import annotations

import functools
import json
import os
import re
import stat
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TypeVar

from slipnet.errors import InputFileError, ParameterError

__all__ = ["DEFAULT_MAX_INPUT_BYTES", "MAX_NESTING", "check_allocation", "check_nesting", "check_npz_sizes",
           "checked_input", "guarded_reader", "loads_json", "max_input_bytes", "memory_budget", "parse_bytes",
           "reading"]

#: Default largest input file, in bytes (64 GiB): far above any map a laboratory exports, small
#: enough to stop an endless stream such as a device read through a symbolic link.
DEFAULT_MAX_INPUT_BYTES = 64 * 2**30

_SUFFIX = {"": 1, "k": 2**10, "m": 2**20, "g": 2**30, "t": 2**40}


def parse_bytes(text: str | int | float, what: str = "size") -> int:
    """A byte count from ``text``: a number with an optional suffix k, M, G or T (powers of 1024).

    Examples
    --------
    >>> parse_bytes("8G")
    8589934592
    >>> parse_bytes(1024)
    1024
    """
    if isinstance(text, (int, float)) and not isinstance(text, bool):
        value = float(text)
    else:
        s = str(text).strip().lower().removesuffix("ib").removesuffix("b")
        suffix = s[-1:] if s[-1:] in _SUFFIX and s[-1:] != "" else ""
        number = s[:-1] if suffix else s
        try:
            value = float(number) * _SUFFIX[suffix]
        except ValueError:
            raise ParameterError(f"{what} {text!r} is not a byte count; give a number with an optional "
                                 "suffix k, M, G or T, e.g. 16G") from None
    if not value > 0 or value != value or value == float("inf"):
        raise ParameterError(f"{what} {text!r} must be a positive, finite byte count, e.g. 16G")
    return int(value)


def _physical_memory() -> int:
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):  # not on every platform
        return 8 * 2**30


def memory_budget(budget: int | str | None = None) -> int:
    """The largest array, in bytes, a reader may allocate from what a file declares.

    Parameters
    ----------
    budget
        A byte count or text such as ``"16G"``; None takes ``SLIPNET_MEMORY_BUDGET`` or half the
        machine's physical memory.
    """
    if budget is not None:
        return parse_bytes(budget, "memory budget")
    env = os.environ.get("SLIPNET_MEMORY_BUDGET")
    if env:
        return parse_bytes(env, "SLIPNET_MEMORY_BUDGET")
    return _physical_memory() // 2


def max_input_bytes(limit: int | str | None = None) -> int:
    """The largest input file, in bytes, a reader accepts (see the module notes)."""
    if limit is not None:
        return parse_bytes(limit, "input size limit")
    env = os.environ.get("SLIPNET_MAX_INPUT_BYTES")
    if env:
        return parse_bytes(env, "SLIPNET_MAX_INPUT_BYTES")
    return DEFAULT_MAX_INPUT_BYTES


def _human(n: float) -> str:
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if abs(n) < 1024 or unit == "PiB":
            return f"{n:.0f} {unit}" if unit == "bytes" else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} PiB"  # pragma: no cover


def checked_input(path: str | os.PathLike, what: str = "input file", *,
                  max_bytes: int | str | None = None, allow_folder: bool = False) -> Path:
    """``path`` as a :class:`~pathlib.Path` once it is known to be a readable regular file.

    Parameters
    ----------
    path
        The file to read.
    what
        What the file is, for the message (e.g. ``"orientation map"``).
    max_bytes
        Largest accepted size (bytes or text such as ``"100G"``); None takes the default
        (:func:`max_input_bytes`).
    allow_folder
        Accept a folder (for formats stored as a folder).

    Raises
    ------
    InputFileError
        The path is missing, a folder, a FIFO, a device or socket, unreadable, or too large.

    Examples
    --------
    >>> checked_input("/dev/zero", "orientation map")
    Traceback (most recent call last):
    ...
    slipnet.errors.InputFileError: file /dev/zero: the orientation map is a device, not a regular file; ...
    """
    p = Path(path)
    try:
        st = p.stat()
    except FileNotFoundError:
        raise InputFileError(f"the {what} does not exist; check the path and the current folder",
                             path=str(p)) from None
    except (OSError, ValueError) as err:
        raise InputFileError(f"the {what} cannot be read ({err}); check the path and its permissions",
                             path=str(p)) from err
    mode = st.st_mode
    if stat.S_ISDIR(mode):
        if allow_folder:
            return p
        raise InputFileError(f"the {what} is a folder, not a file; give the path of the file inside it",
                             path=str(p))
    if not stat.S_ISREG(mode):
        kind = ("a FIFO (named pipe)" if stat.S_ISFIFO(mode) else "a socket" if stat.S_ISSOCK(mode)
                else "a device")
        raise InputFileError(f"the {what} is {kind}, not a regular file; slipnet reads only regular files "
                             "(copy the data to a file first)", path=str(p))
    limit = max_input_bytes(max_bytes)
    if st.st_size > limit:
        raise InputFileError(f"the {what} is {_human(st.st_size)}, over the input size limit of {_human(limit)}; "
                             "if the file is genuine, raise the limit with SLIPNET_MAX_INPUT_BYTES (e.g. 200G)",
                             path=str(p))
    if not os.access(p, os.R_OK):
        raise InputFileError(f"the {what} is not readable by this user; change its permissions", path=str(p))
    return p


def check_allocation(n_items: float, itemsize: int, what: str, *, path: str | os.PathLike | None = None,
                     budget: int | str | None = None) -> int:
    """Refuse to allocate ``n_items`` × ``itemsize`` bytes declared by a file when over the budget.

    Parameters
    ----------
    n_items
        Number of elements the file declares (may be a float from a product of declared sizes,
        so that an overflowing product is still caught).
    itemsize
        Bytes per element (e.g. 8 for float64); include every array of that size the reader makes.
    what
        What is being allocated, for the message (e.g. ``"a 4000 × 2000000 point grid"``).
    path
        The file that declared it.
    budget
        Memory budget (see :func:`memory_budget`).

    Returns
    -------
    int
        ``n_items`` as an int, once accepted.

    Raises
    ------
    InputFileError
        The count is negative or not finite, or the bytes exceed the budget.

    Examples
    --------
    >>> check_allocation(1e6, 8, "a strain field")
    1000000
    >>> check_allocation(1e15, 8, "a strain field", budget="1G")
    Traceback (most recent call last):
    ...
    slipnet.errors.InputFileError: the file declares a strain field of 7.1 PiB, over the memory budget ...
    """
    where = None if path is None else str(path)
    try:
        n = float(n_items)
    except (TypeError, ValueError, OverflowError):
        n = float("inf")
    if n != n or n < 0:
        raise InputFileError(f"the file declares {what} with an impossible size ({n_items}); the file is damaged "
                             "or not in the format named", path=where)
    limit = memory_budget(budget)
    need = n * float(itemsize)
    if need > limit:
        raise InputFileError(f"the file declares {what} of {_human(need)}, over the memory budget of "
                             f"{_human(limit)}; check the step and units the file declares (a step in mm "
                             "read as µm makes a grid 10⁶ times too large), or, if the size is genuine, raise "
                             "the budget with SLIPNET_MEMORY_BUDGET (e.g. 64G)", path=where)
    return int(n)


def check_npz_sizes(path: str | os.PathLike, what: str = "npz archive", *,
                    budget: int | str | None = None) -> None:
    """Refuse an ``.npz`` archive whose arrays declare more memory than the budget, before loading.

    Every member's ``.npy`` header (shape and dtype) is read from the zip without reading its data,
    so an archive that declares a huge array in a few bytes (an "npz bomb") is refused with the
    numbers instead of failing in the allocation. Members that are not arrays, or headers that
    cannot be read, are left to the loader, which reports them.

    Raises
    ------
    InputFileError
        The declared arrays together exceed the memory budget (see :func:`memory_budget`).
    """
    import zipfile

    import numpy as np
    from numpy.lib import format as npy

    total, count, big_n, big = 0.0, 0, -1.0, ("", ())
    try:
        with zipfile.ZipFile(path) as zf:
            for info in zf.infolist():
                if not info.filename.endswith(".npy"):
                    continue
                with zf.open(info) as fh:
                    try:
                        version = npy.read_magic(fh)
                        reader = {(1, 0): npy.read_array_header_1_0, (2, 0): npy.read_array_header_2_0}.get(version)
                        if reader is None:
                            continue
                        shape, _, dtype = reader(fh)
                    except Exception:  # an unreadable header is left to the loader
                        continue
                n = float(np.prod([float(s) for s in shape])) if shape else 1.0
                total += n * max(int(dtype.itemsize), 1)
                count += 1
                if n > big_n:
                    big_n, big = n, (info.filename[:-4], tuple(int(s) for s in shape))
    except Exception:  # a zip too damaged to list (any library error): the loader names it
        return
    check_allocation(total, 1, f"{count} arrays (the largest, {big[0]!r}, of shape {big[1]}) in the {what}",
                     path=path, budget=budget)


#: Deepest nesting of brackets accepted in a JSON or TOML text read from a file. Our own files
#: nest at most four levels; the bound keeps a crafted "[[[[…" from exhausting Python's stack.
MAX_NESTING = 64

_QUOTED = re.compile(r'"(?:[^"\\\n]|\\.)*"' + r"|'[^'\n]*'")


def check_nesting(text: str, what: str, *, path: str | os.PathLike | None = None,
                  limit: int = MAX_NESTING) -> None:
    """Refuse a JSON or TOML ``text`` whose brackets nest deeper than ``limit``, before parsing it.

    Quoted strings are skipped, so brackets inside values do not count.

    Raises
    ------
    InputFileError
        The text nests deeper than ``limit`` levels.

    Examples
    --------
    >>> check_nesting('{"a": [1, "[[["]}', "header")
    >>> check_nesting("[" * 100 + "]" * 100, "header")
    Traceback (most recent call last):
    ...
    slipnet.errors.InputFileError: the header nests brackets 100 levels deep, more than the 64 ...
    """
    if text.count("[") + text.count("{") <= limit:
        return
    import numpy as np

    bare = _QUOTED.sub("", text)
    codes = np.frombuffer(bare.encode("utf-8", "replace"), dtype=np.uint8)
    step = np.zeros(codes.shape, dtype=np.int32)
    step[(codes == ord("[")) | (codes == ord("{"))] = 1
    step[(codes == ord("]")) | (codes == ord("}"))] = -1
    depth = int(np.cumsum(step).max(initial=0))
    if depth > limit:
        raise InputFileError(f"the {what} nests brackets {depth} levels deep, more than the {limit} slipnet reads; "
                             "the file is damaged or was not written for slipnet",
                             path=None if path is None else str(path))


def loads_json(text: str, what: str, *, path: str | os.PathLike | None = None):
    """``json.loads(text)`` with bounded nesting; a malformed text raises :class:`InputFileError`.

    Examples
    --------
    >>> loads_json('{"step": 0.5}', "header")
    {'step': 0.5}
    """
    check_nesting(text, what, path=path)
    try:
        return json.loads(text)
    except (ValueError, RecursionError) as err:
        raise InputFileError(f"the {what} is not valid JSON ({err}); the file is damaged or was not written "
                             "for slipnet", path=None if path is None else str(path)) from err


@contextmanager
def reading(path: str | os.PathLike, what: str, fix: str = "check that it is the file you meant and export "
            "it again") -> Iterator[None]:
    """Turn any library failure while reading ``path`` into :class:`InputFileError`.

    The project's own errors pass through unchanged. Anything else a library raises on a damaged
    or unexpected file (a bad zip, a truncated TIFF, a decoding error, a recursion or memory
    error, an index out of range in a malformed table) becomes an :class:`InputFileError` naming
    the file, the library's complaint and ``fix``; the original is kept as ``__cause__``.

    Examples
    --------
    >>> with reading("m.npz", "map bundle"):
    ...     raise EOFError("truncated")
    Traceback (most recent call last):
    ...
    slipnet.errors.InputFileError: file m.npz: the map bundle could not be read (EOFError: truncated); ...
    """
    from slipnet.errors import SlipnetError

    try:
        yield
    except SlipnetError:
        raise
    except RecursionError as err:
        raise InputFileError(f"the {what} nests too deeply to read (RecursionError); the file is damaged or was "
                             "not written for this reader", path=str(path)) from err
    except MemoryError as err:
        raise InputFileError(f"the {what} needs more memory than this machine has (MemoryError); check the sizes, "
                             "step and units it declares, or read it on a larger machine", path=str(path)) from err
    except Exception as err:  # every library failure becomes the project's error
        detail = str(err).strip().splitlines()[0][:200] if str(err).strip() else "no detail"
        raise InputFileError(f"the {what} could not be read ({type(err).__name__}: {detail}); the file is damaged "
                             f"or not in the format its name says: {fix}", path=str(path)) from err


_F = TypeVar("_F", bound=Callable)


def guarded_reader(what: str, fix: str | None = None) -> Callable[[_F], _F]:
    """Decorate a reader whose first argument is a path so that it raises only the project's errors.

    See :func:`reading`. The wrapped function keeps its name, signature and docstring.
    """
    def wrap(fn: _F) -> _F:
        @functools.wraps(fn)
        def reader(path, *args, **kwargs):
            with reading(path, what, *(() if fix is None else (fix,))):
                return fn(path, *args, **kwargs)
        return reader  # type: ignore[return-value]
    return wrap
