"""Run a numba kernel over a range of tasks on several threads, without numba's ``parallel=True``.

A kernel written as ``worker(lo, hi, *args)`` (``@numba.njit(nogil=True)``,
doing tasks ``lo <= task < hi``) is called from a small pool of Python
threads, each taking chunks of the range in turn: the kernel releases the GIL,
so the threads run on separate cores. This does what a ``prange`` loop does,
but the kernel is compiled by numba's ordinary pipeline: ``parallel=True``
makes numba type a kernel's loop body twice, run its array-analysis and fusion
passes over it and build and optimise a separate gufunc, which costs several
times the compile time of the body itself (issue 14: the tracer's kernels
compiled in about a minute on first use, three quarters of it in that
machinery).

``relax_layout=True`` compiles and calls one specialisation whose arrays
are typed with numba's any-layout ``'A'`` (strides read at run time), so a
contiguous array and a transposed view of one share compiled code instead of
compiling twice.

The number of threads is ``numba.get_num_threads()`` (so
``numba.set_num_threads`` and ``NUMBA_NUM_THREADS`` apply as they do to
``prange``).
"""

import functools
import inspect
import itertools
import os
import threading
from collections import deque
from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np

__all__ = ["any_layout", "entry_point", "run_tasks"]

_CHUNKS_PER_THREAD = 4  # chunks a range is cut into per thread (load balance against call overhead)
_pool = None
_pool_pid = None
_lock = threading.Lock()


def _executor():
    """The module's thread pool (made again in a forked child process, where the parent's threads do not exist)."""
    global _pool, _pool_pid
    with _lock:
        if _pool is None or _pool_pid != os.getpid():
            _pool = ThreadPoolExecutor(
                max_workers=max(1, numba.config.NUMBA_NUM_THREADS - 1), thread_name_prefix="rtrace-kernel"
            )
            _pool_pid = os.getpid()
        return _pool


def _relaxed(ty):
    """``ty`` with any array layout relaxed to ``'A'`` (dtype, dimensions and flags kept)."""
    if isinstance(ty, numba.types.Array) and ty.layout != "A":
        return ty.copy(layout="A")
    return ty


def _fingerprint(a):
    """What numba's type of ``a`` depends on, cheaply (array layout aside)."""
    if isinstance(a, np.ndarray):
        return (a.dtype.str, a.ndim, a.flags.writeable, a.flags.aligned)
    return type(a)


_entries = {}  # (id of the dispatcher, argument fingerprints) -> compiled any-layout function


def entry_point(kernel, args, relax_layout=False):
    """The compiled function of numba dispatcher ``kernel`` for ``args`` (compiled, or loaded from cache, if new).

    With ``relax_layout`` the arrays of ``args`` are typed ``'A'`` (see the
    module docstring); the returned function accepts any layout then.
    """
    if relax_layout:
        key = (id(kernel), tuple(_fingerprint(a) for a in args))
        fn = _entries.get(key)
        if fn is None:
            fn = _entries[key] = _entry_point(kernel, args, relax_layout)
        return fn
    return _entry_point(kernel, args, relax_layout)


def _entry_point(kernel, args, relax_layout):
    types = tuple(numba.typeof(a) for a in args)
    if relax_layout:
        types = tuple(_relaxed(t) for t in types)
    cres = kernel.overloads.get(types)
    if cres is None:
        kernel.compile(types)  # numba's on-disk cache first; raises numba:compile only when it compiles
        cres = kernel.overloads[types]
    return cres.entry_point


def run_tasks(kernel, n, *args, relax_layout=False):
    """Call ``kernel(lo, hi, *args)`` over ``0 <= task < n`` in chunks on ``numba.get_num_threads()`` threads.

    ``kernel`` must be a ``nogil`` numba dispatcher whose chunks touch
    disjoint output; the chunks are contiguous ranges taken in turn by the
    threads (this thread is one of them), so uneven tasks balance. Returns
    when every chunk is done; an exception in any chunk is raised here.
    """
    if n <= 0:
        return
    fn = entry_point(kernel, (0, n) + args, relax_layout)
    threads = min(numba.get_num_threads(), n)
    if threads <= 1:
        fn(0, n, *args)
        return
    nchunk = min(n, _CHUNKS_PER_THREAD * threads)
    bounds = [n * c // nchunk for c in range(nchunk + 1)]
    queue = deque(itertools.pairwise(bounds))

    def runner():
        while True:
            try:
                lo, hi = queue.popleft()
            except IndexError:
                return
            fn(lo, hi, *args)

    futures = [_executor().submit(runner) for _ in range(threads - 1)]
    try:
        runner()
    except BaseException:
        queue.clear()  # the other threads stop after their current chunk
        raise
    finally:
        for f in futures:
            f.result()


def any_layout(kernel):
    """Decorator (outside ``numba.njit``): call ``kernel`` through one any-layout specialisation per dtype set.

    A contiguous array and a transposed view of one then share compiled code
    (:func:`entry_point` with ``relax_layout=True``) instead of compiling twice.
    The wrapped numba dispatcher stays available as ``.dispatcher``.
    """
    signature = inspect.signature(kernel.py_func)

    @functools.wraps(kernel.py_func)
    def call(*args, **kwargs):
        bound = signature.bind(*args, **kwargs)
        bound.apply_defaults()  # omitted arguments are passed as their defaults: one specialisation
        return entry_point(kernel, bound.args, relax_layout=True)(*bound.args)

    call.dispatcher = kernel
    return call
