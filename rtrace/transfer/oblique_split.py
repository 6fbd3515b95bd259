"""Oblique images as an exact cell projection plus a lattice remainder (see :mod:`.linearized`).

For an in-memory grid seen along an oblique direction, :func:`split_trace`
returns pixel footprint means of

* the optical depth and the emission measure: linear in the cells' path
  lengths, hence exact projections of the per-cell ``alpha_nu`` and EM
  weight (``n_e^2``, or ``n_e x ion term``) (:mod:`.footprint`);
* the intensity: the exact projection of the cells' mean sensitivities
  ``W_c`` (:func:`linearized.sensitivity_pass`) plus the ray lattice's
  quadrature of the remainder ``R = I - sum_c W_c L_c``, which is zero for
  optically thin gas and second order otherwise.

With a ``tolerance``, the remainder's quadrature error is estimated per
pixel (:func:`phase_estimate` on the first lattice: from its sub-lattices
of twice the ray spacing), and blocks of pixels
(:data:`FIRST_TILE`, :data:`TILE`) holding one above it are traced again on finer lattices,
the estimate there being the change from the previous lattice. Only the
rays whose tubes touch those blocks are traced (:func:`needed_rays`), all
of a lattice in one call ordered by cell column (:func:`traced_remainders`).

Per-cell state (``alpha``, ``S``, ``W`` per frequency and the EM weight,
float64) is kept only for the 8^3 blocks holding emitting gas
(:func:`cell_sensitivities`, :func:`split_state_bytes`): 8 (3 nfreq + 1)
bytes per cell of those blocks, about 1 GB for a fully emitting 256^3 grid
at 2 frequencies, 150 MB for the demo scenario (16% of its blocks emit).
"""

import numpy as np

from ..errors import InputError
from ..memory import check_memory, split_cell_bytes, trace_ray_bytes
from . import kernels, linearized
from .compositing import Segment
from .remap import remap_parallelograms


class SplitImages:
    """Pixel planes of one split trace (all ``(…, ny, nx)`` float64).

    ``delta``: ``I - I_bg`` per frequency; ``tau``; ``em``; ``error``: the
    estimated absolute error of ``delta`` per frequency; ``rays``: lattice
    rays per pixel.
    """

    def __init__(self, delta, tau, em, error, rays):
        self.delta, self.tau, self.em, self.error, self.rays = delta, tau, em, error, rays

    def segment(self, bg):
        """The images as a `Segment` with the background ``bg`` (per frequency) let in from behind."""
        return Segment(self.delta + bg[:, None, None], self.tau, self.em)


def lattice_phases(m, i_first, i_last, j_first, j_last):
    """Every phase of a lattice of ``m = (m_a, m_b)`` rays per cell side with its rays in a rectangle.

    The rectangle holds sub-lattice indices ``i_first..i_last`` x ``j_first..j_last``;
    phase ``(pa, pb)`` has the rays ``I = i m_a + pa``, ``J = j m_b + pb`` for
    ``i_lo <= i < i_lo + n_i``, ``j_lo <= j < j_lo + n_j``, at ``rows``, ``cols``
    (strided slices) of the rectangle. Yields ``(pa, pb, i_lo, n_i, j_lo, n_j, rows, cols)``.
    """
    m_a, m_b = m
    for pa in range(m_a):
        i_lo, i_hi = -((pa - i_first) // m_a), (i_last - pa) // m_a
        n_i = i_hi - i_lo + 1
        if n_i <= 0:
            continue
        for pb in range(m_b):
            j_lo, j_hi = -((pb - j_first) // m_b), (j_last - pb) // m_b
            n_j = j_hi - j_lo + 1
            if n_j <= 0:
                continue
            r = i_lo * m_a + pa - i_first
            q = j_lo * m_b + pb - j_first
            rows = slice(r, r + (n_i - 1) * m_a + 1, m_a)
            cols = slice(q, q + (n_j - 1) * m_b + 1, m_b)
            yield pa, pb, i_lo, n_i, j_lo, n_j, rows, cols


def _layer_segments(route, pa, pb, nk):
    (m_a, m_b), (rho_a, rho_b) = route.m, route.rho
    cell_a, cell_b, cell_c = route.cell_abc
    return kernels.layer_segments(
        (pa + 0.5) / m_a,
        (pb + 0.5) / m_b,
        rho_a,
        rho_b,
        cell_a,
        cell_b,
        cell_c,
        route.abs_lc,
        0,
        nk,
        route.forward,
        route.max_seg,
    )


def split_state_bytes(blocks, nfreq):
    """Bytes of the split's per-cell state for ``blocks`` (:meth:`Snapshot.emitting_blocks`) and ``nfreq`` frequencies.

    The float64 ``alpha``, sensitivity and source per frequency and the
    emission-measure weight of every cell of the emitting 8^3 blocks
    (:func:`cell_sensitivities`; :func:`rtrace.memory.split_cell_bytes` of
    those cells); the images and rays come on top, as for
    any trace. A caller can compare it with :func:`rtrace.memory.available_memory`
    before choosing the split.
    """
    return split_cell_bytes(int(np.count_nonzero(blocks)) << (3 * kernels.BLOCK_SHIFT), nfreq)


def cell_sensitivities(route, cells, blocks, seg, bg):
    """Per-cell quantities of the split, in the route's axis order, stored for the emitting blocks only.

    Returns ``(stack, source, slots, where)``: ``stack`` ``(nblock, W, W, W,
    2 nfreq + 1)`` holds ``alpha_nu`` (``[..., :nfreq]``), the mean
    sensitivity ``W`` (``[..., nfreq:2 nfreq]``) and ``n_e x ion term``
    (``[..., -1]``), the quantities projected onto the pixels in one pass;
    ``source`` is ``S_nu`` ``(nblock, W, W, W, nfreq)``; block ``s`` holds
    the ``W^3`` cells from ``where[s] * W`` and ``slots`` maps block indices
    to ``s`` (-1: no emitting gas; :func:`linearized.block_slots`).
    ``cells`` = ``(n_e x ion term, T, ratio)`` with ``ratio`` = ``n_e / ion
    term`` or None where they are equal
    (:func:`rtrace.transfer.cell_cache.ratio_of`): the He III share and the
    emission measure's ``n_e^2`` weight (the last plane then holds that weight);
    ``blocks`` (:func:`kernels.emitting_blocks`); all in the route's axis order;
    ``seg``: the traced rays (``(nfreq, nI, nJ)`` intensity without
    background and optical depth) of this route's lattice.
    """
    nn_abc, t_abc = cells[:2]
    ratio_abc = cells[2] if len(cells) > 2 else None
    nf = route.nfreq
    slots, where = linearized.block_slots(blocks)
    nw = 1 << kernels.BLOCK_SHIFT
    shape = (where.shape[0], nw, nw, nw)
    check_memory(
        split_state_bytes(blocks, nf),
        field="tolerance",
        what=f"the per-cell coefficients of {nf} frequencies on {where.shape[0] * nw**3} cells "
        f"({where.shape[0]} blocks of {nw}^3 holding emitting gas)",
        hint="trace without tolerance, or in bricks (brick_size or max_memory), or fewer frequencies",
    )
    stack = np.zeros(shape + (2 * nf + 1,))
    source = np.zeros(shape + (nf,))
    alpha, w = stack[..., :nf], stack[..., nf : 2 * nf]
    em_ratio = ratio_abc is not None and not route.tables.em_ions
    linearized.cell_coefficient_grids(
        nn_abc, t_abc, *route.tables.args(), where, alpha, source, stack[..., -1], ratio_abc, em_ratio
    )
    m_a, m_b = route.m
    weight = route.abs_lc / (route.cell_abc[2] * m_a * m_b)
    i_first, i_last = route.ia
    j_first, j_last = route.ib
    for pa, pb, i_lo, n_i, j_lo, n_j, rows, cols in lattice_phases(route.m, i_first, i_last, j_first, j_last):
        count, da, db, ds = _layer_segments(route, pa, pb, nn_abc.shape[2])
        ray_i = np.ascontiguousarray(seg.intensity[:, rows, cols]).reshape(nf, -1)
        ray_t = np.ascontiguousarray(seg.tau[:, rows, cols]).reshape(nf, -1)
        linearized.sensitivity_pass(
            alpha, source, slots, 0, route.forward, i_lo, n_i, j_lo, n_j, count, da, db, ds, ray_i, ray_t, bg, weight, w
        )
    return stack, source, slots, where


def remainders(route, w, slots, nk, seg, bg):
    """``R - I_bg = I + I_bg (e^-tau - 1) - sum_c W_c L_c`` on every ray of the route (``(nfreq, nI, nJ)``).

    ``w``: the compact sensitivities, ``slots`` their blocks, ``nk`` the
    grid's depth in cells. The background is left out (as in the tracer's
    images) so that pixels no tube covers, off the grid's shadow, read zero.
    """
    nf = route.nfreq
    out = seg.intensity + bg[:, None, None] * np.expm1(-seg.tau)
    i_first, i_last = route.ia
    j_first, j_last = route.ib
    for pa, pb, i_lo, n_i, j_lo, n_j, rows, cols in lattice_phases(route.m, i_first, i_last, j_first, j_last):
        count, da, db, ds = _layer_segments(route, pa, pb, nk)
        linear = np.zeros((nf, n_i * n_j))
        linearized.remainder_pass(w, slots, 0, route.forward, i_lo, n_i, j_lo, n_j, count, da, db, ds, linear)
        out[:, rows, cols] -= linear.reshape(nf, n_i, n_j)
    return out


def needed_rays(route, pixels):
    """Sub-lattice indices ``(I, J)`` (int64 arrays) of the route's rays whose tubes may touch ``pixels``.

    ``pixels`` is a ``(ny, nx)`` bool mask: the rays that a footprint mean
    over each of those pixels needs (:func:`linearized.mark_rays`).
    """
    rows, cols = np.nonzero(pixels)
    mask = np.zeros(tuple(route.ray_shape), bool)
    if mask.size and rows.size:
        e1, e2 = np.asarray(route.e1, float), np.asarray(route.e2, float)
        inv = np.ascontiguousarray(np.linalg.inv(np.column_stack([e1, e2])))
        linearized.mark_rays(
            rows.astype(float),
            cols.astype(float),
            np.asarray(route.p0, float),
            e1,
            e2,
            inv,
            route.ia[0],
            route.ib[0],
            mask,
        )
    big_i, big_j = np.nonzero(mask)
    return big_i + route.ia[0], big_j + route.ib[0]


def traced_remainders(route, big_i, big_j, alpha, source, w, slots, nk, bg):
    """:func:`remainders` of the route's rays ``(I, J)`` (``(nfreq, nray)``), traced on the per-cell coefficients.

    One kernel call for all the rays, ordered so that those sharing a cell column are traced together.
    """
    nf = route.nfreq
    m_a, m_b = route.m
    tables = [_layer_segments(route, pa, pb, nk) for pa in range(m_a) for pb in range(m_b)]
    count, da, db, ds = (np.stack([t[q] for t in tables]) for q in range(4))
    phase = (big_i % m_a) * m_b + big_j % m_b
    ray_a, ray_b = big_i // m_a, big_j // m_b
    order = np.lexsort((phase, ray_b, ray_a))  # by cell column, then phase: rays sharing cells together
    rem = np.zeros((nf, big_i.size))
    linearized.remainder_trace(
        alpha, source, w, slots, 0, route.forward, ray_a[order], ray_b[order], phase[order], count, da, db, ds, bg, rem
    )
    out = np.empty_like(rem)
    out[:, order] = rem
    return out


def remap_ray_list(route, big_i, big_j, values):
    """Footprint means over the pixels of ``values`` ``(nq, nray)`` of the rays ``(I, J)`` (tubes clipped exactly).

    Exact only on pixels all of whose rays are listed (:func:`needed_rays`).
    """
    ny, nx = route.image_shape
    planes = np.zeros((values.shape[0], ny, nx))
    e1, e2, p0 = np.asarray(route.e1, float), np.asarray(route.e2, float), route.p0
    cols = p0[0] + big_i * e1[0] + big_j * e2[0]
    rows = p0[1] + big_i * e1[1] + big_j * e2[1]
    # tubes wholly inside one pixel add their whole area there (no clipping needed)
    half_c, half_r = 0.5 * (abs(e1[0]) + abs(e2[0])), 0.5 * (abs(e1[1]) + abs(e2[1]))
    ix, iy = np.floor(cols - half_c), np.floor(rows - half_r)
    inside = (
        (ix == np.floor(cols + half_c))
        & (iy == np.floor(rows + half_r))
        & (ix >= 0)
        & (ix < nx)
        & (iy >= 0)
        & (iy < ny)
    )
    if inside.any():
        flat = (iy[inside] * nx + ix[inside]).astype(np.int64)
        area = abs(e1[0] * e2[1] - e1[1] * e2[0])
        for q in range(values.shape[0]):
            planes[q] += np.bincount(flat, weights=area * values[q, inside], minlength=ny * nx).reshape(ny, nx)
    rest = ~inside
    remap_parallelograms(
        np.ascontiguousarray(cols[rest]),
        np.ascontiguousarray(rows[rest]),
        e1,
        e2,
        np.ascontiguousarray(values[:, rest]),
        planes,
    )
    return planes


def remap_rays(route, values):
    """Footprint means over the pixels of per-ray ``values`` ``(nq, nI, nJ)`` (tubes clipped exactly)."""
    ny, nx = route.image_shape
    planes = np.zeros((values.shape[0], ny, nx))
    big_i = (route.ia[0] + np.arange(route.ray_shape[0]))[:, None]
    big_j = (route.ib[0] + np.arange(route.ray_shape[1]))[None, :]
    e1, e2, p0 = route.e1, route.e2, route.p0
    cols = np.ascontiguousarray((p0[0] + big_i * e1[0] + big_j * e2[0]).ravel(), float)
    rows = np.ascontiguousarray((p0[1] + big_i * e1[1] + big_j * e2[1]).ravel(), float)
    flat = np.ascontiguousarray(values.reshape(values.shape[0], -1))
    remap_parallelograms(cols, rows, np.asarray(e1, float), np.asarray(e2, float), flat, planes)
    return planes


def local_bound(route, rem):
    """Per pixel, an estimate of the remainder's quadrature error on this lattice (``(nfreq, ny, nx)``).

    A pixel's lattice value is a mean of nearby rays' remainders, each
    standing for its tube, where the true remainder varies between the
    values of neighbouring rays; so the error is at most about twice the
    largest ``|R|`` among a ray and its eight neighbours. That bound is far
    from tight: on the lognormal grids of ``tests/test_pixel_accuracy.py``
    (three directions, pixels of 1.6 and 4 cells, an optically thick and a
    thin frequency) it exceeded the measured error of every pixel by a
    factor 9 to 70 at one ray per cell. :data:`BOUND_FRACTION` of it is
    used (still at least twice the measured error there), remapped like
    the values. Cheap, and small wherever the gas is optically thin (R ~ 0),
    so those pixels need no finer lattice. No longer used by :func:`split_trace`
    (:func:`phase_estimate` is several times tighter on optically thick
    gas); kept as the conservative alternative.
    """
    big = _neighbourhood_max(np.abs(rem))
    return remap_rays(route, 2.0 * BOUND_FRACTION * big)


def phase_estimate(route, rem, lattice):
    """Per pixel, an estimate of the remainder's quadrature error on this lattice, from its coarser sub-lattices.

    The rays ``(I, J)`` of the lattice split by the parities of ``I`` and
    ``J`` into four lattices of twice the spacing, each of which tiles the
    image plane on its own (tubes ``2 e1`` x ``2 e2`` about its rays). Each
    gives a footprint mean of the remainder (``rem``, ``(nfreq, nI, nJ)``),
    and where the lattice quadrature converges at least linearly with the
    ray spacing its difference from the full lattice's value (``lattice``,
    :func:`remap_rays` of ``rem``) is at least the full lattice's own error.
    The estimate is :data:`PHASE_FACTOR` times the largest of the four
    differences. Unlike
    :func:`local_bound`, it is small where the remainder is large but
    smooth on the scale of a pixel (an optically thick region seen through
    uniform gas), which is most of the thick pixels of a real map.

    Calibration (measured, not a proof; ratios of the largest difference to
    the first lattice's measured error, over pixels above 1e-2 of the peak
    whose error exceeds 2e-3): on the lognormal grids of
    ``tests/test_pixel_accuracy.py`` against the brute-force reference (three
    directions, both frequencies), at least 2.5 for pixels of 1.6 and 4
    cells (median 15-40) and 0.75 for pixels of 0.5 cell (0.49 at the thin
    frequency, where the split is exact and the reference's 16 x 16 sub-rays
    are what is off); at 256^3 against the same trace refined to 1e-2
    (``benchmarks/bench_accuracy.py``'s view, over pixels whose error exceeds
    1e-3), at least 1.7 on the demo scenario (median 5.8) and 0.61 on the
    fully emitting grid (below 1 in 8 of about 10^4 pixels, 1st percentile
    1.2). Hence :data:`PHASE_FACTOR` = 2. The old estimate (:func:`local_bound`)
    was 18-470 times the error on the demo and sent 1893 of its 2076 bright
    pixels to the next lattice; this one sends 301 (the fully emitting grid:
    7888 -> 3745 of 9952). ``test_first_lattice_estimate_covers_each_pixel``
    checks it pixel by pixel against the reference.
    """
    ny, nx = route.image_shape
    nf, n_i, n_j = rem.shape
    e1, e2, p0 = np.asarray(route.e1, float), np.asarray(route.e2, float), np.asarray(route.p0, float)
    worst = np.zeros((nf, ny, nx))
    for pa in range(2):
        for pb in range(2):
            big_i = (route.ia[0] + np.arange(pa, n_i, 2))[:, None]
            big_j = (route.ib[0] + np.arange(pb, n_j, 2))[None, :]
            cols = np.ascontiguousarray((p0[0] + big_i * e1[0] + big_j * e2[0]).ravel(), float)
            rows = np.ascontiguousarray((p0[1] + big_i * e1[1] + big_j * e2[1]).ravel(), float)
            coarse = np.zeros((nf, ny, nx))
            remap_parallelograms(
                cols, rows, 2.0 * e1, 2.0 * e2, np.ascontiguousarray(rem[:, pa::2, pb::2].reshape(nf, -1)), coarse
            )
            np.maximum(worst, np.abs(coarse - lattice), out=worst)
    return PHASE_FACTOR * worst


def _neighbourhood_max(planes):
    """Largest value of each pixel and its eight neighbours (``(nq, ny, nx)``)."""
    big = planes.copy()
    for axis in (1, 2):
        shifted = big.copy()
        lo = [slice(None)] * 3
        hi = [slice(None)] * 3
        lo[axis], hi[axis] = slice(1, None), slice(None, -1)
        np.maximum(shifted[tuple(lo)], big[tuple(hi)], out=shifted[tuple(lo)])
        np.maximum(shifted[tuple(hi)], big[tuple(lo)], out=shifted[tuple(hi)])
        big = shifted
    return big


# Fraction of the local bound taken as the first lattice's error estimate (see local_bound).
BOUND_FRACTION = 0.25
# The first lattice's error estimate is this times the largest difference between it and its four
# sub-lattices of twice the spacing (phase_estimate): 1 where the quadrature error halves per halving
# of the spacing; 2 covers the smallest ratios of difference to measured error found (0.61-0.75, see there).
PHASE_FACTOR = 2.0
# Pixels per side of the blocks refined on their own at 2 rays per cell side; halved with each
# further doubling (the pixels left to refine are fewer and each costs four times more), down to MIN_TILE.
TILE = 16
MIN_TILE = 2
# ... but at most this many at the first refinement: with phase_estimate few, scattered pixels of the first
# lattice fail, and 16^2 blocks round them up to most of an optically thick region (the demo scenario at
# 256^3: 3072 pixels refined for 301 failing, 1344 with 8^2 blocks). The blocks are then 8, 8, 4, 2 pixels
# per side at 2, 4, 8, 16 rays per cell side; 8, 4, 2, 2 or 16, 4, 2, 2 let the change-based estimate on
# tests/test_pixel_accuracy.py's lognormal grids fall below the measured error (0.049 against 0.054).
FIRST_TILE = 8
# The estimate on a refined block is this times the change from the previous lattice: the finer
# lattice's error when the error halves per doubling, three times it when it falls fourfold (the
# remainder is smooth between cell edges).
ESTIMATE_FACTOR = 1.0


def _failing(error, value, floor, tolerance):
    """Pixels (``(ny, nx)`` bool) above ``floor`` of their peak whose ``error / |value|`` exceeds ``tolerance``."""
    out = np.zeros(value.shape[1:], bool)
    if tolerance is None:
        return out
    for e, v in zip(error, value, strict=True):
        size = np.abs(v)
        peak = size.max() if size.size else 0.0
        if peak > 0.0:
            out |= (size >= floor * peak) & (e > tolerance * size)
    return out


def _tiles(mask, tile):
    """The union (``(ny, nx)`` bool) of the blocks of ``tile`` pixels per side holding at least one True of ``mask``."""
    ny, nx = mask.shape
    nby, nbx = -(-ny // tile), -(-nx // tile)
    padded = np.zeros((nby * tile, nbx * tile), bool)
    padded[:ny, :nx] = mask
    hit = padded.reshape(nby, tile, nbx, tile).any(axis=(1, 3))
    return np.repeat(np.repeat(hit, tile, axis=0), tile, axis=1)[:ny, :nx]


def _relative(error, value, floor):
    """Largest ``error / |value|`` over pixels with ``|value| >= floor * max |value|`` (0 for a blank image)."""
    worst = 0.0
    for e, v in zip(error, value, strict=True):
        size = np.abs(v)
        peak = size.max() if size.size else 0.0
        if peak > 0.0:
            bright = size >= floor * peak
            worst = max(worst, float(np.max(e[bright] / size[bright])))
    return worst


def split_trace(make_route, trace_rays, cells, bg, *, tolerance, floor, max_supersample, thin_scale=None):
    """Images of an oblique view by the split, refining the remainder's lattice to ``tolerance``.

    ``make_route(m)`` gives the oblique route with ``m`` rays per cell side;
    ``trace_rays(route)`` its traced rays (a Segment ``(nfreq, nI, nJ)``,
    intensity without background); ``cells`` = ``(n_e x ion term, T,
    emitting blocks, ratio)`` in grid order (:meth:`Snapshot.emitting_blocks`;
    ``ratio``: :func:`rtrace.transfer.cell_cache.ratio_of`, may be None).
    With ``tolerance`` None one lattice (m = 1) is used.
    ``thin_scale``: the opacity scale of an absorption-free trace (then
    the background is left out of the sensitivities and the images are
    divided by it). Returns ``(SplitImages, m, relative estimate, converged, stopped)``,
    ``stopped`` saying why refinement ended with pixels still above the
    tolerance (the cap, or the next lattice's rays not fitting in memory), else None.
    """
    from .footprint import Footprint, project_blocks

    route = make_route(1)
    m = max(route.m)  # pixels smaller than a cell get more than one ray per cell side
    order = route.order
    nn_abc, t_abc, blocks, ratio_abc = (None if c is None else c.transpose(order) for c in cells)
    cells_abc = (nn_abc, t_abc, ratio_abc)
    seg = trace_rays(route)
    bg_rays = np.zeros_like(bg) if thin_scale is not None else bg
    stack, source, slots, where = cell_sensitivities(route, cells_abc, blocks, seg, bg_rays)
    nk = nn_abc.shape[2]
    nf = route.nfreq
    alpha, w = stack[..., :nf], stack[..., nf : 2 * nf]
    ny, nx = route.image_shape
    projected = np.zeros((2 * nf + 1, ny, nx))
    project_blocks(Footprint.from_route(route), stack, where, projected)
    tau, proj_w, em = projected[:nf], projected[nf : 2 * nf], projected[2 * nf :]
    scale = 1.0 if thin_scale is None else 1.0 / thin_scale
    rem = remainders(route, w, slots, nk, seg, bg_rays)
    lattice = remap_rays(route, rem)
    error = phase_estimate(route, rem, lattice)
    rays = float(route.ray_count)
    del seg, rem

    def current():
        return (proj_w + lattice) * scale

    failing = _failing(error * scale, current(), floor, tolerance)
    stopped = None
    while tolerance is not None and failing.any():
        if 2 * m > max_supersample:
            stopped = f"the cap of {max_supersample} rays per cell side was reached"
            break
        fine = make_route(2 * m)  # the lattice's geometry; only the tiles' rays are traced
        tiles = _tiles(failing, max(MIN_TILE, min(FIRST_TILE, TILE * 2 // max(fine.m))))
        big_i, big_j = needed_rays(fine, tiles)
        try:
            check_memory(
                trace_ray_bytes(nf, big_i.size),
                field="tolerance",
                what=(f"the {big_i.size} rays of {max(fine.m)} per cell side refining {int(tiles.sum())} pixels"),
                hint="pass a larger tolerance, a coarser npix or fewer frequencies",
            )
        except InputError:  # the finer lattice's rays would not fit: keep this one
            stopped = f"the {big_i.size} rays of the next lattice ({max(fine.m)} per cell side) would not fit in memory"
            break
        m = max(fine.m)
        rem = traced_remainders(fine, big_i, big_j, alpha, source, w, slots, nk, bg_rays)
        block = remap_ray_list(fine, big_i, big_j, rem)
        error[:, tiles] = ESTIMATE_FACTOR * np.abs(block[:, tiles] - lattice[:, tiles])
        lattice[:, tiles] = block[:, tiles]
        rays += big_i.size
        del rem, block
        failing = _failing(error * scale, current(), floor, tolerance)
    delta = current()
    error = error * scale
    estimate = _relative(error, delta, floor)
    converged = tolerance is not None and estimate <= tolerance
    if thin_scale is not None:
        tau[...] = 0.0
    images = SplitImages(delta, tau, em[0], error, rays / (nx * ny))
    del stack, source
    return images, m, estimate, converged, stopped
