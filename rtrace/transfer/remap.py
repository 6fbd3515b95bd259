"""Exact, flux-conserving remap of ray tubes onto image pixels.

Each ray stands for a tube whose cross-section, projected on the image plane,
is a parallelogram; the tubes of a ray lattice tile the image plane with no
gaps or overlaps. A pixel's value is the area-weighted mean of the tubes
covering it, with areas from exact convex-polygon clipping
(Sutherland & Hodgman 1974, "Reentrant polygon clipping", CACM 17, 32).
The sum over pixels of value x pixel area equals the sum over rays of
value x tube area exactly, whatever the pixel size or orientation.
"""

import math

import numba
import numpy as np

from .tasks import run_tasks

__all__ = ["remap_parallelograms"]


@numba.njit(cache=True, inline="always")
def _clip(xs, ys, n, out_x, out_y, axis, bound, keep_greater):
    """Clip polygon (xs, ys)[:n] against x_axis >= bound (or <=); returns the new vertex count."""
    m = 0
    for k in range(n):
        k2 = (k + 1) % n
        p1 = xs[k] if axis == 0 else ys[k]
        p2 = xs[k2] if axis == 0 else ys[k2]
        in1 = p1 >= bound if keep_greater else p1 <= bound
        in2 = p2 >= bound if keep_greater else p2 <= bound
        if in1:
            out_x[m] = xs[k]
            out_y[m] = ys[k]
            m += 1
        if in1 != in2:
            t = (bound - p1) / (p2 - p1)
            out_x[m] = xs[k] + t * (xs[k2] - xs[k])
            out_y[m] = ys[k] + t * (ys[k2] - ys[k])
            m += 1
    return m


@numba.njit(cache=True)
def _add_tube(c0, r0, e1, e2, half_c, half_r, aligned, values, r, out, ax, ay, bx, by):
    """Add tube ``r`` (centre ``(c0, r0)``) to the pixels it overlaps."""
    nq, ny, nx = out.shape
    ix0 = max(int(np.floor(c0 - half_c)), 0)
    ix1 = min(int(np.floor(c0 + half_c)), nx - 1)
    iy0 = max(int(np.floor(r0 - half_r)), 0)
    iy1 = min(int(np.floor(r0 + half_r)), ny - 1)
    if aligned:
        for iy in range(iy0, iy1 + 1):
            oy = min(r0 + half_r, iy + 1.0) - max(r0 - half_r, float(iy))
            if oy <= 0.0:
                continue
            for ix in range(ix0, ix1 + 1):
                area = oy * (min(c0 + half_c, ix + 1.0) - max(c0 - half_c, float(ix)))
                if area > 0.0:
                    for q in range(nq):
                        out[q, iy, ix] += area * values[q, r]
        return
    x0 = c0 - 0.5 * e1[0] - 0.5 * e2[0]
    y0 = r0 - 0.5 * e1[1] - 0.5 * e2[1]
    for iy in range(iy0, iy1 + 1):
        for ix in range(ix0, ix1 + 1):
            # the tube's parallelogram, corners in order
            ax[0] = x0
            ay[0] = y0
            ax[1] = x0 + e1[0]
            ay[1] = y0 + e1[1]
            ax[2] = ax[1] + e2[0]
            ay[2] = ay[1] + e2[1]
            ax[3] = x0 + e2[0]
            ay[3] = y0 + e2[1]
            n = _clip(ax, ay, 4, bx, by, 0, float(ix), True)
            n = _clip(bx, by, n, ax, ay, 0, float(ix + 1), False)
            n = _clip(ax, ay, n, bx, by, 1, float(iy), True)
            n = _clip(bx, by, n, ax, ay, 1, float(iy + 1), False)
            if n < 3:
                continue
            area = 0.0
            for k in range(n):
                k2 = (k + 1) % n
                area += ax[k] * ay[k2] - ax[k2] * ay[k]
            area = abs(0.5 * area)
            if area > 0.0:
                for q in range(nq):
                    out[q, iy, ix] += area * values[q, r]


def remap_parallelograms(cols, rows, e1, e2, values, out):
    """Accumulate ``values`` (nq, nray) of parallelogram tubes into ``out`` (nq, ny, nx).

    ``cols``, ``rows`` (nray,) are tube centres in pixel units (pixel ``(r, c)``
    spans ``[c, c+1) x [r, r+1)``); ``e1``, ``e2`` (2,) are the tube's edge
    vectors in pixel units (column, row). ``out`` receives the overlap area
    (in pixel areas) times the value, i.e. the footprint mean for fully
    covered pixels.

    Threads work on bands of image rows at least one tube tall: a tube whose
    lowest row lies in band ``b`` touches bands ``b`` and ``b + 1`` only, so
    even bands are done in parallel, then odd ones, with no two threads ever
    adding to the same pixel. Bands depend only on the geometry, not on the
    thread count, so the sums are the same for any number of threads.
    """
    ny = out.shape[1]
    half_r = 0.5 * (abs(e1[1]) + abs(e2[1]))
    height = max(int(math.ceil(2.0 * half_r)) + 2, 8)
    n_band = (ny + height - 1) // height
    start, order = _band_order(cols, rows, e1, e2, out.shape[2], ny, height, n_band)
    # tubes that are rectangles aligned with the pixels: overlaps are products of 1D overlaps
    aligned = bool((e1[1] == 0.0 and e2[0] == 0.0) or (e1[0] == 0.0 and e2[1] == 0.0))
    for parity in range(2):
        run_tasks(_band_pass, (n_band - parity + 1) // 2, parity, start, order, cols, rows, e1, e2, aligned, values,
                  out)


def _band_order(cols, rows, e1, e2, nx, ny, height, n_band):
    """Stable sort of the tubes by band: ``(start, order)``, band ``b``'s tubes ``order[start[b]:start[b + 1]]``.

    Tubes wholly outside the image are dropped.
    """
    half_c = 0.5 * (abs(e1[0]) + abs(e2[0]))
    half_r = 0.5 * (abs(e1[1]) + abs(e2[1]))
    lo = np.floor(rows - half_r)
    keep = ~((np.floor(rows + half_r) < 0) | (lo > ny - 1) | (np.floor(cols + half_c) < 0)
             | (np.floor(cols - half_c) > nx - 1))
    idx = np.flatnonzero(keep)
    band = np.minimum(np.maximum(lo[idx], 0.0).astype(np.int64) // height, n_band - 1)
    order = idx[np.argsort(band, kind="stable")].astype(np.int64)
    start = np.zeros(n_band + 1, np.int64)
    start[1:] = np.cumsum(np.bincount(band, minlength=n_band))
    return start, order


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _band_pass(t_lo, t_hi, parity, start, order, cols, rows, e1, e2, aligned, values, out):
    """Bands ``b = 2 t + parity``, ``t_lo <= t < t_hi``, of :func:`remap_parallelograms` (one task of :func:`run_tasks`)."""
    half_c = 0.5 * (abs(e1[0]) + abs(e2[0]))
    half_r = 0.5 * (abs(e1[1]) + abs(e2[1]))
    ax = np.empty(12)
    ay = np.empty(12)
    bx = np.empty(12)
    by = np.empty(12)
    for t in range(t_lo, t_hi):
        b = 2 * t + parity
        for k in range(start[b], start[b + 1]):
            r = order[k]
            _add_tube(cols[r], rows[r], e1, e2, half_c, half_r, aligned, values, r, out, ax, ay, bx, by)


remap_parallelograms.dispatcher = _band_pass     # the compiled kernel of the band passes
