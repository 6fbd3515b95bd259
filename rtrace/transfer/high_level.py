"""The public trace: :func:`trace` runs the tracer (:mod:`rtrace.transfer.tracer`) and returns a `~rtrace.Result`.

The tracer lays out the rays and returns plain images; this module, one layer above it, wraps them in
the Result users handle (so that the tracer does not depend on the product type and its conveniences).
"""

from .result import Result
from .tracer import DEFAULT_TOLERANCE, trace_images

__all__ = ["trace"]


def trace(
    snapshot,
    view,
    frequencies,
    *,
    background=None,
    supersample=None,
    tolerance=DEFAULT_TOLERANCE,
    brick_size=None,
    max_memory=None,
    client=None,
    absorption=True,
    emission_measure="electrons",
):
    """Solve the transfer equation along the rays of ``view`` through ``snapshot``.

    Parameters
    ----------
    snapshot : `~rtrace.Snapshot`
        In memory, or file-backed (:func:`rtrace.open_hdf5`).
    view : `~rtrace.View`
    frequencies : `~astropy.units.Quantity`
        Frequencies (or wavelengths) to image; all are traced in one traversal.
    background : None, "cmb", `~astropy.units.Quantity`, optional
        Intensity entering the grid from the far side: ``"cmb"`` (2.7255 K
        blackbody, Fixsen 2009), a blackbody temperature, or a specific
        intensity (scalar or one per frequency).
    supersample : int, optional
        Rays per cell width for oblique views, fixed: an explicit override of
        ``tolerance`` (no refinement, no error estimate). ``supersample=1``
        is the fastest oblique trace (one lattice, as before ``tolerance``
        existed); its pixels can be off by several percent where the gas
        has cell-scale structure (far more on faint edges). Axis-aligned
        views are exact and ignore it. Must be an int (2.5 is refused, not
        truncated).
    tolerance : float or None, optional
        Relative error allowed per pixel on oblique views, default
        :data:`DEFAULT_TOLERANCE` (1e-2), for pixels at least
        :data:`PIXEL_FLOOR` (1e-3) of the image's peak, in the intensity at
        every frequency. On an in-memory uniform grid traced whole (no
        ``brick_size``, ``max_memory`` or ``client``) the view is split
        (:mod:`rtrace.transfer.oblique_split`): the optical depth and the
        emission measure are exact projections of the cells onto the
        pixels, and so is the part of the intensity linear in the cells'
        path lengths (all of it for optically thin gas); the ray lattice
        only integrates the remainder, refined (2, 4, ... rays per cell
        side, up to :data:`MAX_SUPERSAMPLE`) in blocks of pixels where its
        estimated error exceeds ``tolerance``. Optically thick pixels on
        the silhouette of thick cells converge slowly (about linearly in
        the ray spacing), so 1e-2 may not be reached by the cap there; a
        warning says so. On other routes (bricks, dask, AMR, file-backed
        grids) an explicit ``tolerance`` doubles the whole lattice until
        two successive images agree, about four times the previous trace
        per doubling; with the default there, or where the split's
        per-cell state (``8 (3 nfreq + 1)`` bytes per cell of the blocks
        holding emitting gas; frequencies are taken in groups that fit)
        does not fit in memory even for one frequency, one lattice of 1 ray
        per cell is traced instead and a :class:`PixelAccuracyWarning` says
        so. ``None``: one lattice, no estimate (the fastest oblique trace). The estimate reached is in
        :attr:`Result.pixel_error`, provenance and FITS headers. Ignored
        when ``supersample`` is given and on axis-aligned views (exact).
    brick_size : int, optional
        Trace the grid in cubic bricks of this many cells per side, each on
        its own sub-array, composited front to back (same result to rounding).
    max_memory : `~astropy.units.Quantity` or str, optional
        Bound on the tracer's working set (bytes: ``2 * u.GB``, ``"150 MB"``):
        one brick's three fields, the per-ray segment state and the images.
        The largest cubic brick that fits is used (with ``brick_size``, that
        size is checked against the bound instead). With ``client`` the bound
        applies to each task. The snapshot's own in-memory arrays are not
        counted, nor what the C allocator keeps of freed memory (with
        glibc, the resident size can exceed the bound by a few tens of MB).
    client : `dask.distributed.Client`, optional
        Trace the bricks as dask tasks and composite them on the workers;
        only the final per-ray result comes back. A file-backed snapshot is
        read by the tasks themselves (each gets the path and its index
        range); an in-memory one sends each brick once.
    absorption : bool, optional
        False: the same emission with no absorption (``I = I_bg + int j_nu ds``,
        tau = 0): the optically thin reference for full/unabsorbed ratios
        (see :attr:`Result.unabsorbed_intensity`). Traced as the limit of
        opacity scaled by ``1e-30`` at fixed emissivity, whose relative
        error is ``1e-30 tau``.
    emission_measure : {"electrons", "ion_term"}, optional
        What :attr:`Result.emission_measure` integrates: ``"electrons"``
        (default), ``int n_e^2 dl``, the observers' definition; ``"ion_term"``,
        ``int n_e sum_i Z_i^2 n_i dl``, the product free-free emission
        scales with (1.17 times the former for Y = 0.28 helium fully doubly
        ionized). The two agree where the ion term equals ``n_e`` (hydrogen,
        singly ionized helium). The choice is recorded in
        :attr:`Result.em_definition` and in FITS headers (``EMDEF``).

    Returns
    -------
    `~rtrace.Result`

    Warns
    -----
    PixelAccuracyWarning
        An oblique view stopped refining (lattice cap or memory) before its
        pixels met ``tolerance``; the message gives the estimate reached.
    PhysicsRangeWarning
        The lowest frequency is near (within a factor 2) or below the
        plasma frequency of some cells (the count and the highest plasma
        frequency are given); free-free transfer is not meaningful there.

    Raises
    ------
    InputError
        Bad frequencies, background, supersample, tolerance, brick_size or client; a
        ``max_memory`` smaller than one minimal brick plus the per-ray
        state and images (the message gives the minimum); per-ray state and
        images (``npix``, frequencies, ``supersample``) larger than the
        machine's available memory (see :mod:`rtrace.memory`), checked
        before any ray is traced.

    Notes
    -----
    An in-memory snapshot with none of ``brick_size``, ``max_memory`` and
    ``client`` is traced over its whole arrays at once (fastest). A
    file-backed one is always traced in bricks (``bricks.DEFAULT_BRICK``
    cells per side unless told otherwise), each brick read once per call.
    """
    return Result.from_images(
        trace_images(
            snapshot,
            view,
            frequencies,
            background=background,
            supersample=supersample,
            tolerance=tolerance,
            brick_size=brick_size,
            max_memory=max_memory,
            client=client,
            absorption=absorption,
            emission_measure=emission_measure,
        )
    )
