"""Trace bricks as dask tasks and composite them on the workers.

Used by :func:`rtrace.trace` when it is given ``client=`` (a
``dask.distributed.Client``). Each brick becomes one task that returns the
:class:`~rtrace.transfer.compositing.Patch` of the rays reaching the brick:

* for a file-backed snapshot the task gets the source (path, dataset names,
  units, ionization model: a few hundred bytes) and its index range, opens
  the file and reads its own brick; no field data passes through the client;
* for an in-memory snapshot the client reads each brick and scatters it
  once.

The patches are then combined pairwise in a tree of tasks, each combining
two neighbours of the front-to-back brick order (nearer one in front).
:func:`~rtrace.transfer.compositing.composite_patches` is associative, so any
such grouping equals the sequential front-to-back sum up to rounding. The
client gathers only the root: the per-ray result of the whole grid. If any
task raises (after whatever retries dask is configured to make), the
exception propagates from :func:`trace_bricks` and no image is made.

dask is imported by the client the caller made; rtrace itself never imports
it, so rtrace works without dask installed.
"""

from .transfer.compositing import composite_patches

__all__ = ["trace_bricks"]


class _BrickData:
    """One brick's arrays, scattered as a single object (a bare tuple would be split up)."""

    def __init__(self, arrays):
        self.arrays = arrays


def _trace_read(route, source, lo, hi):
    """Task: read one brick from a portable source (a file) and trace it."""
    return route.trace_brick(lo, hi, source.read(lo, hi), lo)


def _trace_given(route, data, lo, hi):
    """Task: trace one brick whose arrays were sent by the client."""
    return route.trace_brick(lo, hi, data.arrays, lo)


def trace_bricks(client, route, source, order):
    """Trace ``order``'s bricks on ``client``'s workers; return the composited Patch (or None).

    Parameters
    ----------
    client : dask.distributed.Client
    route : tracer route
        The view's ray layout (``brick_rays``, ``trace_brick``); sent once to every worker.
    source : brick source
        ``source.portable`` true: tasks read their own bricks from it.
    order : list of (lo, hi)
        Bricks, nearest the observer first.

    Returns
    -------
    `~rtrace.transfer.compositing.Patch` or None
        None when no ray reaches any brick.

    Raises
    ------
    Exception
        Whatever a task raised.
    """
    futures = []
    try:
        route_future = client.scatter(route, broadcast=True, hash=False)
        futures.append(route_future)
        level = []
        for lo, hi in order:
            if route.brick_rays(lo, hi) is None:
                continue           # no ray reaches this brick: nothing to read or trace
            if getattr(source, "portable", False):
                fut = client.submit(_trace_read, route_future, source, lo, hi, pure=False)
            else:
                data = client.scatter(_BrickData(source.read(lo, hi)), hash=False)
                futures.append(data)
                fut = client.submit(_trace_given, route_future, data, lo, hi, pure=False)
            level.append(fut)
        futures.extend(level)
        # pairwise tree, neighbours in front-to-back order: composite is associative
        while len(level) > 1:
            paired = [client.submit(composite_patches, level[i], level[i + 1], pure=False)
                      for i in range(0, len(level) - 1, 2)]
            if len(level) % 2:
                paired.append(level[-1])
            futures.extend(paired)
            level = paired
        return level[0].result() if level else None
    finally:
        # release everything held on the workers, finished or not (and stop the rest after an error)
        client.cancel(futures)
