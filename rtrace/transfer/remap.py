"""Exact, flux-conserving remap of ray tubes onto image pixels.

Each ray stands for a tube whose cross-section, projected on the image plane,
is a parallelogram; the tubes of a ray lattice tile the image plane with no
gaps or overlaps. A pixel's value is the area-weighted mean of the tubes
covering it, with areas from exact convex-polygon clipping
(Sutherland & Hodgman 1974, "Reentrant polygon clipping", CACM 17, 32).
The sum over pixels of value x pixel area equals the sum over rays of
value x tube area exactly, whatever the pixel size or orientation.
"""

import numba
import numpy as np

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
def remap_parallelograms(cols, rows, e1, e2, values, out):
    """Accumulate ``values`` (nq, nray) of parallelogram tubes into ``out`` (nq, ny, nx).

    ``cols``, ``rows`` (nray,) are tube centres in pixel units (pixel ``(r, c)``
    spans ``[c, c+1) x [r, r+1)``); ``e1``, ``e2`` (2,) are the tube's edge
    vectors in pixel units (column, row). ``out`` receives the overlap area
    (in pixel areas) times the value, i.e. the footprint mean for fully
    covered pixels.
    """
    nq, ny, nx = out.shape
    ax = np.empty(12)
    ay = np.empty(12)
    bx = np.empty(12)
    by = np.empty(12)
    half_c = 0.5 * (abs(e1[0]) + abs(e2[0]))
    half_r = 0.5 * (abs(e1[1]) + abs(e2[1]))
    # tubes that are rectangles aligned with the pixels: overlaps are products of 1D overlaps
    aligned = (e1[1] == 0.0 and e2[0] == 0.0) or (e1[0] == 0.0 and e2[1] == 0.0)
    for r in range(cols.shape[0]):
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
        for iy in range(iy0, iy1 + 1):
            for ix in range(ix0, ix1 + 1):
                # the tube's parallelogram, corners in order
                ax[0] = c0 - 0.5 * e1[0] - 0.5 * e2[0]
                ay[0] = r0 - 0.5 * e1[1] - 0.5 * e2[1]
                ax[1] = ax[0] + e1[0]
                ay[1] = ay[0] + e1[1]
                ax[2] = ax[1] + e2[0]
                ay[2] = ay[1] + e2[1]
                ax[3] = ax[0] + e2[0]
                ay[3] = ay[0] + e2[1]
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
