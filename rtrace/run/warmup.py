"""Compile the transfer kernels into numba's on-disk cache, so that a first run starts at once.

``python -m rtrace.run.warmup`` (run by ``make`` when it installs the package)
traces a tiny invented grid along every route a job takes with the
package's default field type (float32): lines of sight along each grid
axis, an oblique view in and out of the grid's memory order (with and
without a ``tolerance``, so the exact-projection split and its block
refinement too), one frequency and several. numba stores the machine code
in the package's ``__pycache__``; runs after it load that in a second or
two instead of compiling for tens of seconds. Kernels used only by other
work (photoionization by sources, tabulated ionization rates, tau = 1
depths, CLEAN) still compile on their first use, and so do a snapshot made
with ``dtype=np.float64`` and, in oblique views, gas with He III (the ion
term above ``n_e``: the oblique kernels then read one more field); a run
says so when it happens.

numba keys its cache on each source file's modification time: after
editing a kernel module, run the warm-up again (or let the first run
compile).
"""

import sys
import time

import astropy.units as u
import numpy as np

__all__ = ["warm_up", "main"]

# Lines of sight that together reach every route and memory layout of the tracer:
# along the last, middle and first grid axes (the first is a transposed, non-contiguous view
# of the arrays), and oblique with the rays closest to the last axis (contiguous) and to the
# first axis (transposed).
_DIRECTIONS = ((0, 0, 1), (0, 1, 0), (1, 0, 0), (0, 0.6, 0.8), (0.8, 0.6, 0))
# Oblique views are traced again with these tolerances: the default one (the split route) and a tight
# one, at which the warm-up grid's sharp edge makes the split refine blocks (its refinement kernel).
_TOLERANCES = (1e-2, 1e-4)


def _grid(n=12):
    """A small ionized sphere in empty space (invented; float32 like any default snapshot)."""
    from ..snapshot import Snapshot

    x = (np.arange(n) + 0.5) / n - 0.5
    r = np.sqrt(x[:, None, None] ** 2 + x[None, :, None] ** 2 + x[None, None, :] ** 2)
    ne = np.where(r < 0.35, 100.0, 0.0)
    temp = np.full_like(ne, 1.0e4)
    return Snapshot.from_arrays(
        temperature=temp * u.K, electron_density=ne * u.cm**-3, cell_size=0.01 * u.pc, source="rtrace.run.warmup"
    )


def warm_up(say=None):
    """Compile (or load from numba's cache) every transfer kernel a default job uses.

    Parameters
    ----------
    say : callable, optional
        ``say(message)``, told what is being compiled and how long it took.

    Returns
    -------
    Compilation
        How many kernels were compiled and the seconds it took (0 when the
        cache was already warm); see :func:`rtrace.compiling.watch_compilation`.
    """
    from ..compiling import watch_compilation
    from ..transfer import View, trace

    snap = _grid()
    several, one = [1.0, 10.0, 100.0] * u.GHz, [5.0] * u.GHz
    with watch_compilation(say) as seen:
        for los in _DIRECTIONS:
            north = (1, 0, 0) if abs(los[0]) < 0.5 else (0, 0, 1)
            view = View(los=los, north=north, npix=8, width=0.15 * u.pc, distance=1 * u.kpc)
            oblique = max(abs(c) for c in los) < 1.0
            for nu in (several, one):
                trace(snap, view, nu, background="cmb")
                if oblique:
                    # the split route (exact cell projection plus the lattice remainder) at the accuracy a
                    # default trace asks for, and at one tight enough that blocks are refined
                    for tolerance in _TOLERANCES:
                        trace(snap, view, nu, background="cmb", tolerance=tolerance)
    return seen


def main(argv=None):
    """``python -m rtrace.run.warmup``: compile the kernels; prints what it did. Exit status 0."""
    t0 = time.perf_counter()
    seen = warm_up(lambda message: print(f"rtrace warm-up: {message}", flush=True))
    if not seen.count:
        print(
            f"rtrace warm-up: kernels already compiled (loaded from numba's cache in {time.perf_counter() - t0:.1f} s)"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
