"""Bricks: how the grid is cut into index boxes, in which order they are traced, and what they cost.

A brick is a box of cells ``lo <= (i, j, k) < hi`` (global indices). A route
traces each brick on the brick's own arrays and returns a
:class:`~rtrace.transfer.compositing.Patch`; patches composite front to back
(exact, see ``compositing``). The fields come from a *source*: any object
with ``shape``, ``dtype``, ``bytes_per_cell``, ``scratch_bytes``,
``portable`` and ``read(lo, hi) -> (n_e, ion term, T_e)`` (contiguous arrays
of shape ``hi - lo``, cgs). :class:`ArraySource` serves in-memory snapshots;
:class:`rtrace.io.lazy.HDF5Source` reads a file.

Order (:func:`front_to_back`): bricks are listed lexicographically over the
brick indices, each axis run against the direction of travel, with the axis
most nearly parallel to the rays innermost. This is a valid front-to-back
order for every ray: a ray travelling along ``los`` that visits brick A and
then brick B has, on each axis, B's brick index >= A's where ``los`` is
positive, <= where negative and equal where zero, so B precedes A in this
order. (Brick centres sorted by depth would do too, but then consecutive
bricks are far apart on the sky; here each column of bricks along the line
of sight is contiguous, which keeps pairwise composites small.)
"""

import math

import astropy.units as u
import numpy as np

from ..errors import InputError

__all__ = [
    "partition",
    "front_to_back",
    "parse_memory",
    "check_brick_size",
    "choose_brick_edge",
    "MIN_BRICK",
    "DEFAULT_BRICK",
]

#: Smallest brick edge (cells) the memory planner will use: below this the per-brick
#: bookkeeping (one kernel launch and one Amanatides & Woo layer table per brick and
#: lattice phase, one hyperslab read per field) costs more than the cells.
MIN_BRICK = 8
#: Brick edge (cells) for file-backed snapshots when neither brick_size nor max_memory is
#: given: three float32 fields of 128^3 cells are 24 MiB.
DEFAULT_BRICK = 128


def check_brick_size(brick_size):
    """Validated brick edge in cells (a positive integer)."""
    try:
        b = int(brick_size)
    except (TypeError, ValueError):
        raise InputError(f"brick_size: expected a positive integer, got {brick_size!r}") from None
    if b < 1 or b != brick_size:
        raise InputError(f"brick_size: must be a positive integer, got {brick_size}")
    return b


def parse_memory(value):
    """A memory budget as bytes (int) from a Quantity of bytes or a string like ``"2 GB"``.

    ``"MB"``/``"GB"`` are decimal (10^6, 10^9 bytes), ``"MiB"``/``"GiB"`` binary,
    as in astropy.
    """
    if isinstance(value, str):
        try:
            # astropy parses "2 GB", "150MB", "1.5 GiB"; a bare number comes out dimensionless
            value = u.Quantity(value.strip())
        except (TypeError, ValueError) as exc:
            raise InputError(f"max_memory: cannot read {value!r} ({exc})") from None
    if not isinstance(value, u.Quantity):
        raise InputError(
            f"max_memory: expected a Quantity of bytes (e.g. 2 * u.GB) or a string such as '2 GB', got {value!r}"
        )
    if not value.unit.is_equivalent(u.byte) or value.ndim != 0:
        raise InputError(f"max_memory: expected one amount of memory in bytes, got {value!r}")
    nbytes = float(value.to_value(u.byte))
    if not (math.isfinite(nbytes) and nbytes > 0):
        raise InputError(f"max_memory: must be finite and positive, got {value!r}")
    return int(nbytes)


def partition(shape, edge):
    """Brick bounds ``(lo, hi)`` (int64 arrays (3,)) of cubic bricks of ``edge`` cells, by index."""
    counts = [math.ceil(n / edge) for n in shape]
    out = {}
    for i in range(counts[0]):
        for j in range(counts[1]):
            for k in range(counts[2]):
                lo = np.array([i, j, k], np.int64) * edge
                out[(i, j, k)] = (lo, np.minimum(lo + edge, shape).astype(np.int64))
    return out, counts


def front_to_back(shape, edge, los):
    """Bricks of ``edge`` cells covering ``shape``, nearest the observer first (see module notes)."""
    bricks, counts = partition(shape, edge)
    los = np.asarray(los, float)
    inner = int(np.argmax(np.abs(los)))
    axes = [ax for ax in range(3) if ax != inner] + [inner]

    def run(ax):
        # rays travel along los and the observer is at +infinity along it: the front is
        # the high-index end of an axis where los > 0
        r = range(counts[ax])
        return r[::-1] if los[ax] > 0 else r

    order = []
    for p in run(axes[0]):
        for q in run(axes[1]):
            for r in run(axes[2]):
                idx = [0, 0, 0]
                idx[axes[0]], idx[axes[1]], idx[axes[2]] = p, q, r
                order.append(bricks[tuple(idx)])
    return order


def _mb(nbytes):
    return f"{nbytes / 1e6:.3g} MB"


def choose_brick_edge(shape, budget, working_set, what):
    """Largest cubic brick edge whose working set fits ``budget`` bytes.

    Parameters
    ----------
    shape : tuple of int
        Grid shape.
    budget : int
        Bytes allowed.
    working_set : callable
        ``working_set(edge) -> bytes``, non-decreasing in ``edge``.
    what : str
        What the minimum covers, for the error message.

    Raises
    ------
    InputError
        If even a brick of :data:`MIN_BRICK` cells (or the whole grid, if
        smaller) does not fit; the message gives the minimum.
    """
    lo_edge = min(MIN_BRICK, max(shape))
    hi_edge = max(shape)
    need = working_set(lo_edge)
    if need > budget:
        raise InputError(
            f"max_memory: {_mb(budget)} is too small; this trace needs at least {_mb(need)} "
            f"({what}, with bricks of {lo_edge}^3 cells)"
        )
    # working_set is monotone: bisect for the largest edge that fits
    while lo_edge < hi_edge:
        mid = (lo_edge + hi_edge + 1) // 2
        if working_set(mid) <= budget:
            lo_edge = mid
        else:
            hi_edge = mid - 1
    return lo_edge
