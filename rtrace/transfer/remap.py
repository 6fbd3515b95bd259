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


@numba.njit(cache=True, error_model="numpy", inline="always")
def _box_overlap(poly, x0, x1, y0, y1, sides):
    """Area of the convex quadrilateral in ``poly`` inside the box ``[x0, x1] x [y0, y1]``.

    ``poly`` (48 float64) holds two vertex buffers of 12 points, buffer
    ``b``'s x at ``poly[24 b : 24 b + 12]`` and y at ``poly[24 b + 12 : 24 b + 24]``;
    the quadrilateral's corners, in order, are in buffer 0 (both buffers are
    overwritten). It is clipped against each side of the box whose bit is set
    in ``sides`` (1: x >= x0, 2: x <= x1, 4: y >= y0, 8: y <= y1; a side the
    quadrilateral lies wholly inside may be left out, which changes nothing),
    the vertices going from one buffer to the other. The clipping code
    appears once, in a loop over the sides, and the buffers are picked by
    index, not by swapping array variables (each swap of an array costs
    atomic reference counts in a per-pixel loop): numba's compile time grows
    with the code it is given (issue 14). Bit for bit the four clips it replaces.
    """
    n = 4
    src = 0
    for side in range(4):
        if not (sides >> side) & 1:
            continue
        keep_greater = (side & 1) == 0
        bound = x0 if side == 0 else (x1 if side == 1 else (y0 if side == 2 else y1))
        sx = 24 * src
        sy = sx + 12
        dx = 24 - sx
        dy = dx + 12
        sp = sx if side < 2 else sy  # the coordinate this side tests
        m = 0
        for k in range(n):
            k2 = (k + 1) % n
            p1 = poly[sp + k]
            p2 = poly[sp + k2]
            in1 = p1 >= bound if keep_greater else p1 <= bound
            in2 = p2 >= bound if keep_greater else p2 <= bound
            if in1:
                poly[dx + m] = poly[sx + k]
                poly[dy + m] = poly[sy + k]
                m += 1
            if in1 != in2:
                t = (bound - p1) / (p2 - p1)
                poly[dx + m] = poly[sx + k] + t * (poly[sx + k2] - poly[sx + k])
                poly[dy + m] = poly[sy + k] + t * (poly[sy + k2] - poly[sy + k])
                m += 1
        n = m
        src = 1 - src
    if n < 3:
        return 0.0
    sx = 24 * src
    sy = sx + 12
    area = 0.0
    for k in range(n):
        k2 = (k + 1) % n
        area += poly[sx + k] * poly[sy + k2] - poly[sx + k2] * poly[sy + k]
    return abs(0.5 * area)


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
        run_tasks(
            _band_pass, (n_band - parity + 1) // 2, parity, start, order, cols, rows, e1, e2, aligned, values, out
        )


def _band_order(cols, rows, e1, e2, nx, ny, height, n_band):
    """Stable sort of the tubes by band: ``(start, order)``, band ``b``'s tubes ``order[start[b]:start[b + 1]]``.

    Tubes wholly outside the image are dropped.
    """
    half_c = 0.5 * (abs(e1[0]) + abs(e2[0]))
    half_r = 0.5 * (abs(e1[1]) + abs(e2[1]))
    lo = np.floor(rows - half_r)
    keep = ~(
        (np.floor(rows + half_r) < 0)
        | (lo > ny - 1)
        | (np.floor(cols + half_c) < 0)
        | (np.floor(cols - half_c) > nx - 1)
    )
    idx = np.flatnonzero(keep)
    band = np.minimum(np.maximum(lo[idx], 0.0).astype(np.int64) // height, n_band - 1)
    order = idx[np.argsort(band, kind="stable")].astype(np.int64)
    start = np.zeros(n_band + 1, np.int64)
    start[1:] = np.cumsum(np.bincount(band, minlength=n_band))
    return start, order


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _band_pass(t_lo, t_hi, parity, start, order, cols, rows, e1, e2, aligned, values, out):
    """Bands ``b = 2 t + parity``, ``t_lo <= t < t_hi``, of :func:`remap_parallelograms` (one task of run_tasks)."""
    half_c = 0.5 * (abs(e1[0]) + abs(e2[0]))
    half_r = 0.5 * (abs(e1[1]) + abs(e2[1]))
    nq, ny, nx = out.shape
    ex1, ey1, ex2, ey2 = e1[0], e1[1], e2[0], e2[1]
    poly = np.empty(48)
    for t in range(t_lo, t_hi):
        b = 2 * t + parity
        for k in range(start[b], start[b + 1]):
            # tube r (centre (c0, r0)) added to the pixels it overlaps; written out here rather than called per
            # tube: a helper is one more function for numba to compile, and its array arguments cost atomic
            # reference counts per call (kernels module docstring)
            r = order[k]
            c0 = cols[r]
            r0 = rows[r]
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
                continue
            x0 = c0 - 0.5 * ex1 - 0.5 * ex2
            y0 = r0 - 0.5 * ey1 - 0.5 * ey2
            # the tube's parallelogram, corners in order (poly: see _box_overlap), and its bounding box
            xa, ya = x0 + ex1, y0 + ey1
            xb, yb = xa + ex2, ya + ey2
            xc, yc = x0 + ex2, y0 + ey2
            xmin = min(min(x0, xa), min(xb, xc))
            xmax = max(max(x0, xa), max(xb, xc))
            ymin = min(min(y0, ya), min(yb, yc))
            ymax = max(max(y0, ya), max(yb, yc))
            for iy in range(iy0, iy1 + 1):
                for ix in range(ix0, ix1 + 1):
                    poly[0] = x0
                    poly[12] = y0
                    poly[1] = xa
                    poly[13] = ya
                    poly[2] = xb
                    poly[14] = yb
                    poly[3] = xc
                    poly[15] = yc
                    # clip only against the pixel's sides the tube crosses
                    sides = (
                        int(xmin < ix)
                        | (int(xmax > ix + 1.0) << 1)
                        | (int(ymin < iy) << 2)
                        | (int(ymax > iy + 1.0) << 3)
                    )
                    area = _box_overlap(poly, float(ix), float(ix + 1), float(iy), float(iy + 1), sides)
                    if area > 0.0:
                        for q in range(nq):
                            out[q, iy, ix] += area * values[q, r]


remap_parallelograms.dispatcher = _band_pass  # the compiled kernel of the band passes
