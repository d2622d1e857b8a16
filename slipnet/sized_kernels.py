"""Row kernels compiled serial first, with a ``parallel=True`` copy compiled only when a call is large.

numba needs two to three times longer to compile a ``parallel=True`` kernel than the same loop
serial (the parfor passes and the threaded wrapper), and on the maps of a first look (10⁴–10⁵
points, 10²–10⁴ grains or boundaries) a row loop of these kernels takes milliseconds either way.
:func:`sized_kernel` makes both from one function whose outer loop is ``nb.prange``: the serial
dispatcher (``prange`` runs as ``range``) serves calls below ``threshold`` rows, the parallel one
the larger calls, and each is compiled the first time it is needed. Only kernels whose rows are
independent of each other (no sum or other reduction across rows) may be wrapped, so both give the
same numbers bit for bit (``tests/test_sized_kernels.py`` checks every wrapped kernel); a reduction
across rows sums in another order in parallel and stays a plain ``parallel=True`` kernel.

The parallel copy is a second Python function object with the qualified name ``<name>_parallel``,
so numba keeps its compiled code in a cache file of its own (numba's cache key does not include
the ``parallel`` option).

:func:`kernel_input` gives every input array of a kernel call one type (C-contiguous, the given
dtype, read-only): numba compiles one specialisation per combination of dtypes, layouts and
read-only flags it is called with, so an array that arrives writeable from one caller and read-only
(a frozen container's field) from another would otherwise be compiled for twice.
"""

from __future__ import annotations

import functools
import types
from collections.abc import Callable

import numba as nb
import numpy as np

__all__ = ["PARALLEL_ROWS", "SizedKernel", "kernel_input", "sized_kernel"]

#: Rows from which a wrapped kernel runs threaded: a 450 × 450 map. Below it the serial loop takes a
#: few milliseconds (quick and full demo maps have 3·10⁴ and 1.2·10⁵ points).
PARALLEL_ROWS = 200_000


class SizedKernel:
    """A serial numba kernel and its ``parallel=True`` copy, chosen per call by the number of rows.

    Parameters
    ----------
    fn
        The kernel's Python function; its outer loop is ``nb.prange`` and its rows are independent.
    threshold
        Calls with at least this many rows use the parallel copy.
    rows
        ``rows(*args) -> int``; default: ``args[0].shape[0]``.
    options
        Further ``nb.njit`` options for both (``fastmath``, ``nogil``...); ``cache=True`` always.

    Attributes
    ----------
    serial, parallel
        The two numba dispatchers (``parallel`` compiled on its first use).
    py_func
        ``fn`` itself, as on a numba dispatcher.
    """

    def __init__(self, fn: Callable, threshold: int = PARALLEL_ROWS, rows: Callable[..., int] | None = None,
                 **options) -> None:
        self.py_func = fn
        self.threshold = int(threshold)
        self._rows = rows
        self.serial = nb.njit(cache=True, **options)(fn)
        twin = types.FunctionType(fn.__code__, fn.__globals__, fn.__name__ + "_parallel", fn.__defaults__,
                                  fn.__closure__)
        twin.__qualname__ = fn.__qualname__ + "_parallel"
        twin.__module__ = fn.__module__
        twin.__doc__ = fn.__doc__
        self.parallel = nb.njit(cache=True, parallel=True, **options)(twin)
        functools.update_wrapper(self, fn)

    def __call__(self, *args):
        n = args[0].shape[0] if self._rows is None else self._rows(*args)
        return (self.parallel if n >= self.threshold else self.serial)(*args)


def sized_kernel(threshold: int = PARALLEL_ROWS, rows: Callable[..., int] | None = None,
                 **options) -> Callable[[Callable], SizedKernel]:
    """Decorator: ``fn`` as a :class:`SizedKernel` (serial below ``threshold`` rows, parallel above).

    Parameters
    ----------
    threshold
        Rows from which the parallel copy runs.
    rows
        Number of rows of a call, from its arguments; default ``args[0].shape[0]``.
    options
        ``nb.njit`` options shared by both copies.

    Returns
    -------
    callable
        The decorator.

    Examples
    --------
    The quaternion product rows of :mod:`slipnet.crystal.orientation_kernels`:

    >>> from slipnet.crystal.orientation_kernels import quat_multiply_rows
    >>> quat_multiply_rows.threshold == PARALLEL_ROWS
    True
    >>> a = np.array([[0.0, 1.0, 0.0, 0.0]])
    >>> out = np.empty((1, 4))
    >>> quat_multiply_rows(a, a, out)  # one row: the serial copy
    >>> out.tolist()
    [[-1.0, 0.0, 0.0, 0.0]]
    """
    return lambda fn: SizedKernel(fn, threshold, rows, **options)


def kernel_input(a, dtype=np.float64) -> np.ndarray:
    """``a`` as a C-contiguous read-only array of ``dtype``, for a kernel's input (no copy if it is one already).

    Parameters
    ----------
    a : array_like
        The input.
    dtype
        The dtype the kernel is compiled for.

    Returns
    -------
    ndarray
        A read-only view (the caller's array keeps its own flag).

    Examples
    --------
    >>> x = np.arange(3.0)
    >>> v = kernel_input(x)
    >>> v.flags.writeable, x.flags.writeable, np.shares_memory(v, x)
    (False, True, True)
    """
    v = np.ascontiguousarray(a, dtype=dtype).view()
    v.flags.writeable = False
    return v
