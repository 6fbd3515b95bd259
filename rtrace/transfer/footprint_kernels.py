"""Numba kernels of the cell-to-pixel footprint projector (see :mod:`rtrace.transfer.footprint`).

Pixel units throughout: pixel ``(col, row)`` covers ``[col, col+1) x [row, row+1)``.
The shadow of a cell on the image is the set ``d + a g_a + b g_b + t g_c``
for ``a, b, t`` in ``[0, 1]``; ``g = (g_a, g_b, g_c)`` is packed as
``(gax, gay, gbx, gby, gcx, gcy)``.

The footprint kernel of a cell whose shadow corner ``d`` sits at offset
``delta = d - (col, row)`` from a pixel is, with ``L`` the chord length
(cm) of the ray through an image point and ``lscale = dc / |l_c|`` the
longest chord along the depth axis,

    K(delta) = lscale * int_0^1 area(P(delta + t g_c) & [0,1]^2) dt,

``P(z)`` the parallelogram ``z + a g_a + b g_b``: the volume of the cell
inside the pixel's prism divided by the pixel's area (the cell's slice at
depth ``t`` projects onto ``P``; common practice). The area of the overlap
of two convex polygons moving by a translation is piecewise quadratic in
the translation, its pieces changing only where a vertex of one crosses an
edge line of the other; :func:`exact_kernel` cuts ``[0, 1]`` at those
crossings and integrates each piece with Simpson's rule, which is exact
for quadratics, so ``K`` is exact to rounding. The overlap areas come from
convex-polygon clipping (Sutherland & Hodgman 1974, CACM 17, 32), the
remap's :func:`remap._box_overlap`: its clipping code written once (a loop
over the box's sides) and its vertex buffers in one scratch array indexed
in place, so that the table costs numba less to compile (issue 14: 2.3 ->
1.6 CPU-s) and nothing per call of :func:`_overlap` but plain floats and
two arrays.
"""

import math

import numba
import numpy as np
from numba import prange

from .remap import _box_overlap
from .tasks import run_tasks

__all__ = ["exact_kernel", "kernel_table", "project"]

# Relative margin by which a vertex may miss an edge and still count as crossing it (break points that
# change nothing cost one more Simpson piece and no accuracy).
_MARGIN = 1e-9


@numba.njit(cache=True)
def _overlap(zx, zy, g, poly):
    """Area of the parallelogram ``z + a g_a + b g_b`` (a, b in [0, 1]) inside the unit square.

    ``poly`` is scratch space of 48 float64 (see :func:`remap._box_overlap`).
    """
    ax0 = zx
    ay0 = zy
    ax1 = zx + g[0]
    ay1 = zy + g[1]
    ax2 = ax1 + g[2]
    ay2 = ay1 + g[3]
    ax3 = zx + g[2]
    ay3 = zy + g[3]
    xmin = min(min(ax0, ax1), min(ax2, ax3))
    xmax = max(max(ax0, ax1), max(ax2, ax3))
    ymin = min(min(ay0, ay1), min(ay2, ay3))
    ymax = max(max(ay0, ay1), max(ay2, ay3))
    if xmax <= 0.0 or xmin >= 1.0 or ymax <= 0.0 or ymin >= 1.0:
        return 0.0
    poly[0] = ax0
    poly[1] = ax1
    poly[2] = ax2
    poly[3] = ax3
    poly[12] = ay0
    poly[13] = ay1
    poly[14] = ay2
    poly[15] = ay3
    # clip only against the sides the parallelogram crosses
    sides = int(xmin < 0.0) | (int(xmax > 1.0) << 1) | (int(ymin < 0.0) << 2) | (int(ymax > 1.0) << 3)
    return _box_overlap(poly, 0.0, 1.0, 0.0, 1.0, sides)


@numba.njit(cache=True)
def exact_kernel(dx, dy, g, lscale, work):
    """``K(delta)`` (cm) for the shadow offset ``delta = (dx, dy)``, exact to rounding.

    ``work`` is scratch space of at least 96 float64 (one per thread).
    """
    poly = work[0:48]
    ts = work[48:96]
    gax, gay, gbx, gby, gcx, gcy = g[0], g[1], g[2], g[3], g[4], g[5]
    n = 0
    ts[n] = 0.0
    n += 1
    ts[n] = 1.0
    n += 1
    # a vertex of the moving parallelogram crosses an edge of the pixel (only crossings inside the edge
    # change the overlap's shape; a small margin keeps grazing ones)
    lo_m, hi_m = -_MARGIN, 1.0 + _MARGIN
    for v in range(4):
        vx = dx + (gax if v == 1 or v == 2 else 0.0) + (gbx if v >= 2 else 0.0)
        vy = dy + (gay if v == 1 or v == 2 else 0.0) + (gby if v >= 2 else 0.0)
        for axis in range(2):  # the pixel's edges x = e, then y = e
            along, across = (vx, vy) if axis == 0 else (vy, vx)
            g_along, g_across = (gcx, gcy) if axis == 0 else (gcy, gcx)
            if g_along != 0.0:
                for e in range(2):
                    t = (e - along) / g_along
                    o = across + t * g_across
                    if lo_m <= o <= hi_m and 0.0 < t < 1.0:
                        ts[n] = t
                        n += 1
    # a corner of the pixel crosses an edge of the parallelogram: cross(u, c - delta - w - t g_c) = 0,
    # inside the edge: 0 <= (c - delta - w - t g_c) . u / |u|^2 <= 1
    for e in range(2):
        ux, uy = (gax, gay) if e == 0 else (gbx, gby)
        wx, wy = (gbx, gby) if e == 0 else (gax, gay)
        den = ux * gcy - uy * gcx
        if den == 0.0:
            continue
        uu = 1.0 / (ux * ux + uy * uy)
        for s in range(2):
            ox = dx + s * wx
            oy = dy + s * wy
            for cx in range(2):
                for cy in range(2):
                    t = (ux * (cy - oy) - uy * (cx - ox)) / den
                    along = ((cx - ox - t * gcx) * ux + (cy - oy - t * gcy) * uy) * uu
                    if lo_m <= along <= hi_m and 0.0 < t < 1.0:
                        ts[n] = t
                        n += 1
    # insertion sort of the break points
    for i in range(1, n):
        t = ts[i]
        j = i - 1
        while j >= 0 and ts[j] > t:
            ts[j + 1] = ts[j]
            j -= 1
        ts[j + 1] = t
    total = 0.0
    a = 0.0
    fa = _overlap(dx, dy, g, poly)
    for i in range(1, n):
        b = ts[i]
        if b <= a:
            continue
        m = 0.5 * (a + b)
        fm = _overlap(dx + m * gcx, dy + m * gcy, g, poly)
        fb = _overlap(dx + b * gcx, dy + b * gcy, g, poly)
        total += (b - a) * (fa + 4.0 * fm + fb) / 6.0
        a = b
        fa = fb
    return lscale * total


@numba.njit(cache=True)
def kernel_table(xs, ys, g, lscale, out):
    """``out[j, i] = K(xs[i], ys[j])``, exact (:func:`exact_kernel`)."""
    for j in prange(ys.shape[0]):
        work = np.empty(96)
        for i in range(xs.shape[0]):
            out[j, i] = exact_kernel(xs[i], ys[j], g, lscale, work)


@numba.njit(cache=True, inline="always")
def _locate(x, nodes, inv_step, bucket, x0, inv_bw):
    """Index ``i`` with ``nodes[i] <= x < nodes[i+1]`` and the fraction, or -1 outside the nodes.

    ``bucket[k]`` is the largest ``i`` with ``nodes[i] <= x0 + k / inv_bw``, so
    the scan that follows is short (buckets are finer than most node steps).
    """
    n = nodes.shape[0]
    if not (nodes[0] <= x < nodes[n - 1]):
        return -1, 0.0
    i = bucket[min(int((x - x0) * inv_bw), bucket.shape[0] - 1)]
    i += int(nodes[i + 1] <= x)  # buckets are finer than most node steps: one step, no branch
    while nodes[i + 1] <= x:
        i += 1
    return i, (x - nodes[i]) * inv_step[i]


@numba.njit(cache=True, parallel=True)
def project(values, lo, hi, off, gmat, q0, xs, ys, ixs, iys, bx, by, xinfo, yinfo, table, power, total, shadow, out):
    """Add ``sum_c values[q, c] K(d_c - (col, row))`` over cells ``lo <= idx < hi`` into ``out[t]``.

    ``values`` (nq, n0, n1, n2) holds cell ``idx`` at ``idx - off``; the shadow corner of
    cell ``idx`` is ``q0 + sum_k idx[k] gmat[k]``. ``out`` (nchunk, nq, ny, nx): chunk ``t``
    takes the slabs ``idx[0] = lo[0] + t, lo[0] + t + nchunk, ...``, so no two threads add
    to the same buffer; the caller sums the buffers. ``table`` holds ``K^(1/power)`` (power 1 or
    3) at nodes ``xs`` x ``ys``. Each cell's interpolated weights over all the pixels its shadow
    touches (inside the image or not) are scaled to sum to ``total`` (the exact sum of K), so
    every cell adds exactly its volume over the pixel area. ``shadow`` = (xmin, xmax, ymin, ymax)
    of a cell's shadow relative to its corner. Cells whose values are all zero are skipped.
    """
    nchunk, nq = out.shape[0], out.shape[1]
    g00, g01, g10, g11, g20, g21 = gmat[0, 0], gmat[0, 1], gmat[1, 0], gmat[1, 1], gmat[2, 0], gmat[2, 1]
    xmin, xmax, ymin, ymax = shadow[0], shadow[1], shadow[2], shadow[3]
    ncol = int(math.ceil(xmax - xmin)) + 2
    nrow = int(math.ceil(ymax - ymin)) + 2
    for t in prange(nchunk):
        buf = out[t]
        ci = np.empty(ncol, np.int64)
        cf = np.empty(ncol)
        cc = np.empty(ncol, np.int64)
        ri = np.empty(nrow, np.int64)
        rf = np.empty(nrow)
        rr = np.empty(nrow, np.int64)
        wgt = np.empty((nrow, ncol))
        val = np.empty(nq)
        for i0 in range(lo[0] + t, hi[0], nchunk):
            for i1 in range(lo[1], hi[1]):
                base_x = q0[0] + i0 * g00 + i1 * g10
                base_y = q0[1] + i0 * g01 + i1 * g11
                for i2 in range(lo[2], hi[2]):
                    nonzero = False
                    for q in range(nq):
                        val[q] = values[q, i0 - off[0], i1 - off[1], i2 - off[2]]
                        if val[q] != 0.0:
                            nonzero = True
                    if not nonzero:
                        continue
                    _add_cell(
                        base_x + i2 * g20,
                        base_y + i2 * g21,
                        val,
                        buf,
                        xs,
                        ys,
                        ixs,
                        iys,
                        bx,
                        by,
                        xinfo,
                        yinfo,
                        table,
                        power,
                        total,
                        shadow,
                        ci,
                        cf,
                        cc,
                        ri,
                        rf,
                        rr,
                        wgt,
                    )


@numba.njit(cache=True, inline="always")
def _add_cell(
    dx, dy, val, buf, xs, ys, ixs, iys, bx, by, xinfo, yinfo, table, power, total, shadow, ci, cf, cc, ri, rf, rr, wgt
):
    """Add one cell's ``val[q] K(d - (col, row))`` (shadow corner ``d = (dx, dy)``) to ``buf`` (see :func:`project`)."""
    nq, ny, nx = buf.shape
    xmin, xmax, ymin, ymax = shadow[0], shadow[1], shadow[2], shadow[3]
    c_lo = int(math.floor(dx + xmin))
    c_hi = int(math.floor(dx + xmax))
    r_lo = int(math.floor(dy + ymin))
    r_hi = int(math.floor(dy + ymax))
    if c_hi < 0 or c_lo > nx - 1 or r_hi < 0 or r_lo > ny - 1:
        return
    m = 0
    for col in range(c_lo, c_hi + 1):
        i, f = _locate(dx - col, xs, ixs, bx, xinfo[0], xinfo[1])
        if i >= 0:
            ci[m] = i
            cf[m] = f
            cc[m] = col
            m += 1
    k = 0
    for row in range(r_lo, r_hi + 1):
        j, f = _locate(dy - row, ys, iys, by, yinfo[0], yinfo[1])
        if j >= 0:
            ri[k] = j
            rf[k] = f
            rr[k] = row
            k += 1
    wsum = 0.0
    for a in range(k):
        j = ri[a]
        fy = rf[a]
        for b in range(m):
            i = ci[b]
            fx = cf[b]
            w = (1.0 - fy) * ((1.0 - fx) * table[j, i] + fx * table[j, i + 1]) + fy * (
                (1.0 - fx) * table[j + 1, i] + fx * table[j + 1, i + 1]
            )
            if w > 0.0:
                if power == 3:
                    w = w * w * w
            else:
                w = 0.0
            wgt[a, b] = w
            wsum += w
    if not wsum > 0.0:
        return
    scale = total / wsum
    for a in range(k):
        row = rr[a]
        if row < 0 or row >= ny:
            continue
        for b in range(m):
            col = cc[b]
            w = wgt[a, b]
            if col < 0 or col >= nx or w == 0.0:
                continue
            w *= scale
            for q in range(nq):
                buf[q, row, col] += w * val[q]


def project_blocks(values, where, gmat, q0, xs, ys, ixs, iys, bx, by, xinfo, yinfo, table, power, total, shadow, out):
    """:func:`project` of cells stored by blocks: ``values[s, i, j, k, q]`` is cell ``where[s] * W + (i, j, k)``.

    ``W = values.shape[1]`` cells per block side (cells beyond the grid hold
    zeros and are skipped, as are all cells whose values are all zero);
    ``out`` (nchunk, nq, ny, nx): chunk ``t`` takes blocks ``t, t + nchunk, ...``.
    """
    run_tasks(
        _project_block_chunks,
        out.shape[0],
        values,
        where,
        gmat,
        q0,
        xs,
        ys,
        ixs,
        iys,
        bx,
        by,
        xinfo,
        yinfo,
        table,
        int(power),
        float(total),
        shadow,
        out,
    )


@numba.njit(cache=True, error_model="numpy", nogil=True)
def _project_block_chunks(
    t_lo, t_hi, values, where, gmat, q0, xs, ys, ixs, iys, bx, by, xinfo, yinfo, table, power, total, shadow, out
):
    """Chunks ``t_lo <= t < t_hi`` of :func:`project_blocks` (one task of :func:`run_tasks`)."""
    nchunk, nq = out.shape[0], out.shape[1]
    nw = values.shape[1]
    g00, g01, g10, g11, g20, g21 = gmat[0, 0], gmat[0, 1], gmat[1, 0], gmat[1, 1], gmat[2, 0], gmat[2, 1]
    ncol = int(math.ceil(shadow[1] - shadow[0])) + 2
    nrow = int(math.ceil(shadow[3] - shadow[2])) + 2
    ny, nx = out.shape[2], out.shape[3]
    xmin, xmax, ymin, ymax = shadow[0], shadow[1], shadow[2], shadow[3]
    n_xs, n_ys, n_bx, n_by = xs.shape[0], ys.shape[0], bx.shape[0], by.shape[0]
    x_0, x_ibw, y_0, y_ibw = xinfo[0], xinfo[1], yinfo[0], yinfo[1]
    for t in range(t_lo, t_hi):
        buf = out[t]
        ci = np.empty(ncol, np.int64)
        cf = np.empty(ncol)
        cc = np.empty(ncol, np.int64)
        ri = np.empty(nrow, np.int64)
        rf = np.empty(nrow)
        rr = np.empty(nrow, np.int64)
        wgt = np.empty((nrow, ncol))
        val = np.empty(nq)
        for s in range(t, values.shape[0], nchunk):
            for i in range(nw):
                i0 = where[s, 0] * nw + i
                for j in range(nw):
                    i1 = where[s, 1] * nw + j
                    base_x = q0[0] + i0 * g00 + i1 * g10
                    base_y = q0[1] + i0 * g01 + i1 * g11
                    for k in range(nw):
                        i2 = where[s, 2] * nw + k
                        nonzero = False
                        for q in range(nq):
                            val[q] = values[s, i, j, k, q]
                            if val[q] != 0.0:
                                nonzero = True
                        if not nonzero:
                            continue
                        # _add_cell and _locate written out with the same operations in the same order: a per-cell
                        # call of a helper taking arrays costs an atomic reference-count update per array
                        # (kernels module docstring), four times this loop's time
                        dx = base_x + i2 * g20
                        dy = base_y + i2 * g21
                        c_lo = int(math.floor(dx + xmin))
                        c_hi = int(math.floor(dx + xmax))
                        r_lo = int(math.floor(dy + ymin))
                        r_hi = int(math.floor(dy + ymax))
                        if c_hi < 0 or c_lo > nx - 1 or r_hi < 0 or r_lo > ny - 1:
                            continue
                        m = 0
                        for col in range(c_lo, c_hi + 1):
                            x = dx - col
                            if not (xs[0] <= x < xs[n_xs - 1]):
                                continue
                            ii = bx[min(int((x - x_0) * x_ibw), n_bx - 1)]
                            ii += int(xs[ii + 1] <= x)
                            while xs[ii + 1] <= x:
                                ii += 1
                            ci[m] = ii
                            cf[m] = (x - xs[ii]) * ixs[ii]
                            cc[m] = col
                            m += 1
                        kk = 0
                        for row in range(r_lo, r_hi + 1):
                            y = dy - row
                            if not (ys[0] <= y < ys[n_ys - 1]):
                                continue
                            jj = by[min(int((y - y_0) * y_ibw), n_by - 1)]
                            jj += int(ys[jj + 1] <= y)
                            while ys[jj + 1] <= y:
                                jj += 1
                            ri[kk] = jj
                            rf[kk] = (y - ys[jj]) * iys[jj]
                            rr[kk] = row
                            kk += 1
                        wsum = 0.0
                        for a in range(kk):
                            jt = ri[a]
                            fy = rf[a]
                            for b in range(m):
                                it = ci[b]
                                fx = cf[b]
                                w = (1.0 - fy) * ((1.0 - fx) * table[jt, it] + fx * table[jt, it + 1]) + fy * (
                                    (1.0 - fx) * table[jt + 1, it] + fx * table[jt + 1, it + 1]
                                )
                                if w > 0.0:
                                    if power == 3:
                                        w = w * w * w
                                else:
                                    w = 0.0
                                wgt[a, b] = w
                                wsum += w
                        if not wsum > 0.0:
                            continue
                        scale = total / wsum
                        for a in range(kk):
                            row = rr[a]
                            if row < 0 or row >= ny:
                                continue
                            for b in range(m):
                                col = cc[b]
                                w = wgt[a, b]
                                if col < 0 or col >= nx or w == 0.0:
                                    continue
                                w *= scale
                                for q in range(nq):
                                    buf[q, row, col] += w * val[q]


project_blocks.dispatcher = _project_block_chunks  # the compiled kernel (its signatures, for the warm-up's checks)
