"""Notice when numba compiles kernels, so that a first run does not look hung.

The kernels are ``numba.njit(cache=True)``: the first call of each with new
argument types compiles it (seconds each, tens of seconds for a whole run)
and stores the machine code in the package's ``__pycache__``; later runs
load it in milliseconds. :func:`watch_compilation` tells the user when that
first-time compilation starts and how long it took.

It listens to numba's ``"numba:compile"`` event, which numba raises only
when it actually compiles, after a miss of its on-disk cache (a cache load
raises no event), so the notice appears exactly when a kernel is compiled
and never on a warm cache. Compilation in other processes (dask workers)
is not seen.
"""

import threading
import time
from contextlib import contextmanager

from numba.core import event as _event

__all__ = ["watch_compilation", "COMPILING_MESSAGE"]

COMPILING_MESSAGE = "compiling kernels (first run only)"


class _Listener(_event.Listener):
    """Adds up the wall time of outermost compilations in this thread; calls ``on_first`` at the first."""

    def __init__(self, on_first):
        self.on_first = on_first
        self.thread = threading.get_ident()
        self.depth = 0
        self.start = 0.0
        self.seconds = 0.0
        self.count = 0
        self.kernel = ""
        self.kernels = []

    def on_start(self, event):
        if threading.get_ident() != self.thread:
            return
        self.depth += 1
        if self.depth == 1:
            if self.count == 0 and self.on_first is not None:
                self.on_first()
            self.kernel = _kernel_name(event.data)
            self.start = time.perf_counter()

    def on_end(self, event):
        if threading.get_ident() != self.thread or self.depth == 0:
            return
        self.depth -= 1
        if self.depth == 0:
            seconds = time.perf_counter() - self.start
            self.seconds += seconds
            self.count += 1
            self.kernels.append((self.kernel, seconds))


def _kernel_name(data):
    """``module.function`` of the dispatcher a ``"numba:compile"`` event is about (``"?"`` if it says none)."""
    func = getattr((data or {}).get("dispatcher"), "py_func", None)
    if func is None:
        return "?"
    return f"{func.__module__}.{func.__qualname__}"


class Compilation:
    """What :func:`watch_compilation` saw: ``count`` kernels compiled in ``seconds`` (wall time).

    ``kernels`` lists them in the order compiled, ``(name, seconds)`` with
    ``name`` the kernel's ``module.function`` (a kernel compiled inside
    another's compilation is part of that one's seconds and not listed).
    """

    def __init__(self):
        self.count = 0
        self.seconds = 0.0
        self.kernels = []


@contextmanager
def watch_compilation(say=None):
    """Report numba compilation that happens inside the ``with`` block.

    Parameters
    ----------
    say : callable, optional
        ``say(message)``: called with :data:`COMPILING_MESSAGE` when the
        first kernel of the block starts compiling, and once more at the end
        of the block with the number of kernels compiled and the time taken.
        Not called at all when nothing is compiled (numba's cache was warm).

    Yields
    ------
    Compilation
        Filled in when the block ends: ``count``, ``seconds`` and ``kernels``.
    """
    seen = Compilation()
    listener = _Listener((lambda: say(COMPILING_MESSAGE + " ...")) if say is not None else None)
    with _event.install_listener("numba:compile", listener):
        try:
            yield seen
        finally:
            seen.count, seen.seconds, seen.kernels = listener.count, listener.seconds, list(listener.kernels)
    if say is not None and seen.count:
        say(
            f"{COMPILING_MESSAGE}: {seen.count} compiled in {seen.seconds:.1f} s; "
            f"numba keeps them in its cache for later runs"
        )
