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

A worker lost while it holds bricks of an in-memory snapshot takes that
data with it (scattered data cannot be recomputed on the cluster): dask
cancels the tasks that need it. The client still holds the snapshot, so
the whole view is then traced again with its bricks scattered anew, with a
warning, up to ``ATTEMPTS`` times in all; after that a
:class:`~rtrace.errors.ConfigError` says what happened and what to do.
Tasks of a file-backed snapshot read their own bricks and dask reruns them
on another worker by itself.

dask is imported by the client the caller made; rtrace itself never imports
it, so rtrace works without dask installed.
"""

from concurrent.futures import CancelledError

from ..errors import ConfigError, warn_user
from .compositing import composite_patches

__all__ = ["trace_bricks", "ATTEMPTS"]

#: How many times a view is traced on the cluster before lost workers are reported as an error.
ATTEMPTS = 3


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

    Traced again from the start, with a warning, when the cluster cancels
    tasks because a worker holding their scattered data was lost (see the
    module notes).

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
    ConfigError
        If workers were lost in each of ``ATTEMPTS`` attempts.
    Exception
        Whatever a task raised.
    """
    for attempt in range(1, ATTEMPTS + 1):
        try:
            return _trace_once(client, route, source, order)
        except CancelledError as exc:  # dask's FutureCancelledError: "lost dependencies"
            reason = str(exc) or type(exc).__name__
            if attempt < ATTEMPTS:
                warn_user(
                    f"client: the dask cluster lost data of this view's bricks ({reason}); tracing the "
                    f"view again (attempt {attempt + 1} of {ATTEMPTS})",
                    UserWarning,
                )
    what = (
        "bricks of this in-memory snapshot (scattered data cannot be recomputed)"
        if not getattr(source, "portable", False)
        else "data of this view's tasks"
    )
    tries = f"{ATTEMPTS} attempt{'s' if ATTEMPTS != 1 else ''}"
    raise ConfigError(
        f"client: in each of {tries} the dask cluster lost a worker holding {what} (last: {reason}); "
        f"check that its workers stay up (memory limits, nanny restarts), or open the snapshot "
        f"from its file (rtrace.open_hdf5) so that any worker can re-read a lost brick"
    )


def _trace_once(client, route, source, order):
    """One attempt of :func:`trace_bricks`."""
    futures = []
    try:
        route_future = client.scatter(route, broadcast=True, hash=False)
        futures.append(route_future)
        level = []
        for lo, hi in order:
            if route.brick_rays(lo, hi) is None:
                continue  # no ray reaches this brick: nothing to read or trace
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
            paired = [
                client.submit(composite_patches, level[i], level[i + 1], pure=False)
                for i in range(0, len(level) - 1, 2)
            ]
            if len(level) % 2:
                paired.append(level[-1])
            futures.extend(paired)
            level = paired
        return level[0].result() if level else None
    finally:
        # release everything held on the workers, finished or not (and stop the rest after an error)
        client.cancel(futures)
