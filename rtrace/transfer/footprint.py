"""Exact cell-to-pixel footprints for oblique views: quantities linear in path length, projected.

For any quantity that is a path integral of a per-cell constant, ``int q dl``
(the emission measure ``int n_e n_i dl``, the optical depth ``int alpha dl``,
the optically thin intensity ``int j dl``, or any per-cell weight), the mean
over pixel ``p``'s footprint is a sum over cells,

    mean_p int q dl = sum_c q_c K_{c,p},   K_{c,p} = (1/A_p) int_{pixel p} L_c(x) dA,

with ``L_c(x)`` the chord length (cm) through cell ``c`` of the ray through
image point ``x`` and ``A_p`` the pixel's area: ``K_{c,p}`` is the volume
of cell ``c`` inside pixel ``p``'s prism divided by the pixel's area, in
cm (common practice). No ray lattice is involved, so these pixels have no
quadrature error; only the interpolation of ``K`` (below) remains.

Geometry (that of ``tracer._ObliqueRoute``): grid axes renamed ``(a, b, c)``
with ``c`` most nearly along the line of sight, cells of ``(da, db, dc)`` cm,
cell ``(ia, ib, ic)`` spanning ``[ia da, (ia+1) da] x ...`` from the grid
corner. The point ``(x_a, x_b, x_c)`` projects onto the lattice-plane point
``(x_a - rho_a x_c, x_b - rho_b x_c)`` and that onto the pixel coordinates
``q0 + (u / h_a) e1 + (v / h_b) e2`` with ``q0 = p0 - (e1 + e2) / 2``; so
the shadow of cell ``(ia, ib, ic)`` is the shadow of the cell at the origin
moved by ``d = q0 + ia g_a + ib g_b + ic g_c`` with ``g_a = (da/h_a) e1``,
``g_b = (db/h_b) e2``, ``g_c = -dc (rho_a e1/h_a + rho_b e2/h_b)``, and
``K_{c,p} = K(d_c - (col, row))`` for one function ``K`` per view.

``K`` is tabulated once per view (:class:`Footprint`) on a tensor grid of
offsets whose nodes include every offset at which a pixel edge passes a
corner of the cell's shadow (where ``K`` may have a kink: faces seen
edge-on, shadow edges parallel to pixel edges). ``K`` is evaluated exactly
(:func:`footprint_kernels.exact_kernel`, about 2 microseconds a value) on a
coarse grid, refined by 4-point interpolation inside those intervals, and
stored as ``K`` or ``K^(1/3)``, whichever the check against exact values
finds better; :func:`project_cells` interpolates it bilinearly.

Accuracy: the table is checked against exact values at the midpoints of
4096 of its cells (:attr:`Footprint.accuracy`, largest error over max K)
and refined until that is at most :data:`ACCURACY_TARGET` (1e-4) or the
next table would exceed a node budget; ``tests/test_footprint.py`` finds
at most 6e-5 against an independent slab-method integration for generic
directions, lines of sight in or near a coordinate plane, north along a
grid axis, non-cubic cells and pixels of 0.1-8 cells. The one case known
to stop short is a line of sight in a coordinate plane with north *not*
along a grid axis and pixels far smaller than a cell (at 0.1 cell,
1e-4 to 4e-4). Totals are exact: each cell's weights are scaled to sum to
its volume over the pixel area.

Cost (2 cores, measured while other work shared them): a table takes
0.05-0.35 s for pixels of 0.5-8 cells, 0.1-0.4 s for 0.1-cell pixels (up to
1.1 s where a face is seen nearly edge-on and the table is refined);
projecting costs about 70 ns of CPU per non-zero cell whose shadow spans a
few pixels (a 256^3 grid onto 256^2 pixels: 1.0 s on 2 busy cores, about
0.6 s idle) and a few ns per zero cell (``benchmarks/bench_footprint.py``).
"""

import math

import numba
import numpy as np

from ..errors import InputError, PixelAccuracyWarning, warn_user
from . import footprint_kernels as _k

__all__ = ["Footprint", "project_cells", "project_blocks", "ACCURACY_TARGET"]

# Largest error of the interpolated kernel the table is built for, as a fraction of max K.
ACCURACY_TARGET = 1e-4
# Nodes per interval between two consecutive kink offsets, at least.
_MIN_PER_INTERVAL = 6
# Spacing of the exactly evaluated nodes (pixel units) as a fraction of the cell shadow's extent
# (at most 1 pixel), growing as extent**0.25 beyond one pixel, where K is flatter; see _axis.
_SPACING_FRACTION = 0.024
# Fine (interpolated) table steps per coarse (exactly evaluated) step.
_REFINE = 4
_BUCKETS_PER_NODE = 2
# A table short of ACCURACY_TARGET is rebuilt with steps this much finer, unless its exactly evaluated
# nodes would then exceed _MAX_EXACT_NODES (about 3 microseconds each).
_REFINE_STEP = 0.6
_MAX_EXACT_NODES = 300_000


class Footprint:
    """The cell-to-pixel footprint kernel ``K`` of one oblique view, tabulated.

    Build it with :meth:`from_route` (from the tracer's ``_ObliqueRoute``) or
    directly from the shadow vectors. Attributes (pixel units unless said):

    g_a, g_b, g_c : ndarray (2,)
        Shadow displacement per cell step along a, b, c.
    q0 : ndarray (2,)
        Shadow corner of cell (0, 0, 0).
    lscale : float
        ``dc / |l_c|`` (cm): the chord of a ray crossing a cell's depth.
    image_shape : (ny, nx)
    support : ((xlo, xhi), (ylo, yhi))
        Offsets ``delta = d - (col, row)`` outside which ``K`` is zero.
    xs, ys, table : ndarray
        The nodes and ``table[j, i] = K(xs[i], ys[j]) ** (1 / power)`` (K in cm).
    kmax : float
        Largest K (cm) on the exactly evaluated nodes.
    exact_nodes : int
        How many values of K were evaluated exactly (the build's cost).
    power : int
        The table holds ``K^(1/power)`` (3 or 1, see :meth:`_build`).
    accuracy : float
        Largest ``|K_interp - K| / max K`` found at the midpoints of the
        table's cells (the worst place of a bilinear interpolant), checked
        on up to 4096 of them when the table is built.
    relative_accuracy : float
        The same errors divided by ``max(K, 0.01 max K)``: how well small
        contributions (a bright cell barely touching a faint pixel) keep.

    Parameters
    ----------
    g_a, g_b, g_c, q0 : sequences of 2 floats
        As the attributes (pixel units, (column, row)).
    lscale : float
        ``dc / |l_c|`` in cm.
    image_shape : (ny, nx)
    check : bool
        Measure the table's error against exact values (and refine it to
        :data:`ACCURACY_TARGET`); False builds one table unchecked
        (``accuracy`` is then NaN).

    Warns
    -----
    PixelAccuracyWarning
        The table stopped more than 10 x :data:`ACCURACY_TARGET` short (its
        node budget reached).

    Raises
    ------
    InputError
        Non-finite vectors, ``g_a`` parallel to ``g_b``, ``lscale <= 0``.
    """

    def __init__(self, g_a, g_b, g_c, q0, lscale, image_shape, *, check=True):
        self.g_a, self.g_b, self.g_c = (np.asarray(v, float).reshape(2) for v in (g_a, g_b, g_c))
        self.q0 = np.asarray(q0, float).reshape(2)
        self.lscale = float(lscale)
        self.image_shape = tuple(int(n) for n in image_shape)
        det = self.g_a[0] * self.g_b[1] - self.g_a[1] * self.g_b[0]
        if not (
            np.all(np.isfinite(np.concatenate([self.g_a, self.g_b, self.g_c, self.q0])))
            and math.isfinite(det)
            and det != 0.0
            and self.lscale > 0.0
        ):
            raise InputError(
                "Footprint: the shadow vectors g_a, g_b must be finite and independent, and lscale positive"
            )
        self.g = np.concatenate([self.g_a, self.g_b, self.g_c])
        corners = np.array([[i, j, k] for i in (0, 1) for j in (0, 1) for k in (0, 1)], float)
        self.vertices = corners @ np.stack([self.g_a, self.g_b, self.g_c])  # shadow corners rel. d
        lo, hi = self.vertices.min(axis=0), self.vertices.max(axis=0)
        self.shadow = np.array([lo[0], hi[0], lo[1], hi[1]])
        self.support = ((-hi[0], 1.0 - lo[0]), (-hi[1], 1.0 - lo[1]))
        # the table: refined until its measured error meets ACCURACY_TARGET or the next one would be too big
        scale = 1.0
        while True:
            self._build(scale, check)
            if not check or self.accuracy <= ACCURACY_TARGET or self.exact_nodes / _REFINE_STEP**2 > _MAX_EXACT_NODES:
                break
            scale *= _REFINE_STEP
        if self.accuracy > 10 * ACCURACY_TARGET:
            warn_user(
                f"Footprint: the cell-to-pixel kernel of this view is tabulated only to "
                f"{self.accuracy:.1e} of its maximum (aimed at {ACCURACY_TARGET:.0e}); pixel values "
                f"built from it can be off by about that fraction of a cell's full contribution",
                PixelAccuracyWarning,
            )

    def _build(self, scale, check):
        """Tabulate K at node spacings ``scale`` times the default; keep the better of K and K^(1/3).

        Near the edge of its support K grows as the cube of the distance
        where a corner of the shadow enters the pixel (any direction with no
        face seen edge-on), so K^(1/3) is nearly linear there and small K
        keep their relative accuracy; where a face is seen edge-on K grows
        linearly or quadratically and K itself interpolates better. Both are
        checked against exact values and the one with the smaller error
        relative to ``max(K, 0.01 max K)`` is kept.
        """
        cx, self.xs, mx = self._axis(self.vertices[:, 0], scale)
        cy, self.ys, my = self._axis(self.vertices[:, 1], scale)
        coarse = np.zeros((len(cy), len(cx)))
        _k.kernel_table(cx, cy, self.g, self.lscale, coarse)
        self.exact_nodes = coarse.size
        self.kmax = float(coarse.max())
        self._bx, self._xinfo = _buckets(self.xs)
        self._by, self._yinfo = _buckets(self.ys)
        self._ixs, self._iys = 1.0 / np.diff(self.xs), 1.0 / np.diff(self.ys)
        best = None
        sample = self._sample() if check else None
        for power in (3, 1):
            self.power = power
            self.table = np.ascontiguousarray(my @ (np.cbrt(coarse) if power == 3 else coarse) @ mx.T)
            if sample is None:
                self.accuracy = self.relative_accuracy = float("nan")
                return
            got = self(sample[0], sample[1])
            err = np.abs(got - sample[2])
            found = (float(err.max() / self.kmax), float(np.max(err / np.maximum(sample[2], 0.01 * self.kmax))))
            if best is None or found[1] < best[1][1]:
                best = (power, found, self.table)
        self.power, (self.accuracy, self.relative_accuracy), self.table = best

    def _sample(self, n=4096, seed=0):
        """Midpoints of up to ``n`` random table cells (the worst places of a bilinear interpolant) and K there."""
        if self.kmax <= 0.0:
            return None
        rng = np.random.default_rng(seed)
        nx, ny = len(self.xs) - 1, len(self.ys) - 1
        cell = rng.choice(nx * ny, min(n, nx * ny), replace=False)
        iy, ix = np.divmod(cell, nx)
        mx = 0.5 * (self.xs[ix] + self.xs[ix + 1])
        my = 0.5 * (self.ys[iy] + self.ys[iy + 1])
        return mx, my, self.exact(mx, my)

    @classmethod
    def from_route(cls, route, **kw):
        """The footprint of ``tracer._ObliqueRoute`` ``route``.

        Uses its ``cell_abc``, ``h``, ``rho``, ``abs_lc``, ``e1``, ``e2``,
        ``p0`` and ``image_shape``; keyword arguments go to the constructor.
        """
        da, db, dc = (float(v) for v in route.cell_abc)
        h_a, h_b = route.h
        rho_a, rho_b = route.rho
        e1, e2 = np.asarray(route.e1, float), np.asarray(route.e2, float)
        g_a = da / h_a * e1
        g_b = db / h_b * e2
        g_c = -dc * (rho_a * e1 / h_a + rho_b * e2 / h_b)
        q0 = np.asarray(route.p0, float) - 0.5 * (e1 + e2)
        return cls(g_a, g_b, g_c, q0, dc / route.abs_lc, route.image_shape, **kw)

    def _axis(self, v, scale):
        """Coarse and fine offsets along one image axis, and the cubic map from coarse to fine values.

        The kink offsets ``-v`` and ``1 - v`` (a pixel edge through a corner
        of the shadow) cut the axis into intervals, each divided uniformly
        into at least ``_MIN_PER_INTERVAL`` coarse steps and ``_REFINE`` fine
        steps per coarse one. Returns ``(coarse, fine, M)`` with ``M`` (fine,
        coarse) the 4-point Lagrange interpolation inside each interval (never
        across a kink).
        """
        crit = np.unique(np.concatenate([-v, 1.0 - v]))
        extent = crit[-1] - crit[0]
        crit = crit[np.concatenate([[True], np.diff(crit) > 1e-12 * extent])]
        s = v.max() - v.min()
        h = scale * _SPACING_FRACTION * min(s, 1.0) * max(s, 1.0) ** 0.5
        coarse, fine = [crit[:1]], [crit[:1]]
        ncoarse = 1
        blocks = []
        for a, b in zip(crit[:-1], crit[1:], strict=True):
            n = max(_MIN_PER_INTERVAL, int(math.ceil((b - a) / h)))
            coarse.append(a + (b - a) * np.arange(1, n + 1) / n)
            k = np.arange(1, n * _REFINE + 1)
            fine.append(a + (b - a) * k / (n * _REFINE))
            u = k / _REFINE  # position in coarse steps
            j0 = np.clip(np.floor(u).astype(int) - 1, 0, n - 3)
            xi = u - j0
            w = np.stack(
                [
                    -(xi - 1) * (xi - 2) * (xi - 3) / 6,
                    xi * (xi - 2) * (xi - 3) / 2,
                    -xi * (xi - 1) * (xi - 3) / 2,
                    xi * (xi - 1) * (xi - 2) / 6,
                ],
                axis=1,
            )
            blocks.append((ncoarse - 1 + j0, w))
            ncoarse += n
        nfine = sum(len(f) for f in fine)
        m = np.zeros((nfine, ncoarse))
        m[0, 0] = 1.0
        r = 1
        for cols, w in blocks:
            idx = np.arange(r, r + len(cols))
            for t in range(4):
                m[idx, cols + t] += w[:, t]
            r += len(cols)
        coarse, fine = np.concatenate(coarse), np.concatenate(fine)
        coarse[-1] = fine[-1] = crit[-1]
        return coarse, fine, m

    def __call__(self, dx, dy):
        """Interpolated ``K`` (cm) at offsets ``dx``, ``dy`` (arrays of one shape); zero outside the support."""
        dx, dy = np.broadcast_arrays(np.asarray(dx, float), np.asarray(dy, float))
        out = np.zeros(dx.shape)
        ix = np.searchsorted(self.xs, dx.ravel(), side="right") - 1
        iy = np.searchsorted(self.ys, dy.ravel(), side="right") - 1
        ok = (ix >= 0) & (ix < len(self.xs) - 1) & (iy >= 0) & (iy < len(self.ys) - 1)
        ix, iy = np.clip(ix, 0, len(self.xs) - 2), np.clip(iy, 0, len(self.ys) - 2)
        fx = (dx.ravel() - self.xs[ix]) / (self.xs[ix + 1] - self.xs[ix])
        fy = (dy.ravel() - self.ys[iy]) / (self.ys[iy + 1] - self.ys[iy])
        t = self.table
        val = (1 - fy) * ((1 - fx) * t[iy, ix] + fx * t[iy, ix + 1]) + fy * (
            (1 - fx) * t[iy + 1, ix] + fx * t[iy + 1, ix + 1]
        )
        val = np.maximum(val, 0.0) ** self.power
        out.ravel()[:] = np.where(ok, val, 0.0)
        return out

    def exact(self, dx, dy):
        """``K`` (cm) at offsets ``dx``, ``dy`` evaluated exactly (slow: microseconds a point)."""
        dx, dy = np.broadcast_arrays(np.asarray(dx, float), np.asarray(dy, float))
        out = np.empty(dx.size)
        _exact_many(np.ascontiguousarray(dx.ravel()), np.ascontiguousarray(dy.ravel()), self.g, self.lscale, out)
        return out.reshape(dx.shape)

    def total(self):
        """``sum over pixels of K`` for a cell whose shadow is inside the image: ``|det(g_a, g_b)| lscale`` (cm).

        Equal to the cell's volume divided by the pixel area (cm^2), since
        ``|det(e1, e2)| = h_a h_b |l_c| / pix^2``.
        """
        return abs(self.g_a[0] * self.g_b[1] - self.g_a[1] * self.g_b[0]) * self.lscale


@numba.njit(cache=True)
def _exact_many(dx, dy, g, lscale, out):
    work = np.empty(96)
    for i in range(dx.shape[0]):
        out[i] = _k.exact_kernel(dx[i], dy[i], g, lscale, work)


def _buckets(nodes):
    """Uniform buckets over the nodes: bucket k -> largest node index at or below its start."""
    nb = _BUCKETS_PER_NODE * len(nodes)
    width = (nodes[-1] - nodes[0]) / nb
    starts = nodes[0] + width * np.arange(nb)
    idx = np.clip(np.searchsorted(nodes, starts, side="right") - 1, 0, len(nodes) - 2).astype(np.int64)
    return idx, np.array([nodes[0], 1.0 / width])


def project_cells(footprint, values, lo, hi, off, out):
    """Add the footprint means of ``int q dl`` of cells ``lo <= idx < hi`` to ``out``.

    Parameters
    ----------
    footprint : Footprint
    values : ndarray (nq, A, B, C), float32 or float64
        Per-cell quantities (per cm: n_e n_i for EM, alpha for tau, j for the
        thin intensity), axes in ``(a, b, c)`` order; may be a
        non-contiguous (transposed) view. Cell ``idx`` (global, ``(a, b, c)``
        order) is ``values[:, *(idx - off)]``.
    lo, hi, off : sequences of 3 ints, ``(a, b, c)`` order
    out : ndarray (nq, ny, nx) float64
        Receives ``sum_c values[q, c] K(d_c - (col, row))`` (units of
        ``values`` times cm) at every pixel a cell's shadow touches; the
        parts of shadows outside the image are dropped.

    Notes
    -----
    Cells whose values are all zero are skipped after one read. Threads
    take interleaved slabs of the first loop axis, each into its own image
    buffer (``numba.get_num_threads()`` buffers of ``out``'s size), summed
    at the end: no races, and the same sums for a given thread count. The
    loops run over the axes of ``values`` in memory order. Cost: one table
    lookup per column and per row the shadow spans, and one bilinear
    interpolation per pixel touched (see ``benchmarks/bench_footprint.py``).
    """
    values = np.asarray(values)
    if values.ndim != 4 or values.dtype not in (np.float32, np.float64):
        raise InputError(
            f"values: expected a float32 or float64 array (nq, A, B, C), got {values.dtype} of shape {values.shape}"
        )
    if (
        out.ndim != 3
        or out.shape[0] != values.shape[0]
        or out.shape[1:] != footprint.image_shape
        or out.dtype != np.float64
    ):
        raise InputError(
            f"out: expected float64 of shape {(values.shape[0],) + footprint.image_shape}, got {out.dtype} {out.shape}"
        )
    lo, hi, off = (np.asarray(x, np.int64).reshape(3) for x in (lo, hi, off))
    if np.any(lo - off < 0) or np.any(hi - off > np.asarray(values.shape[1:])):
        raise InputError(
            f"lo, hi: cells {lo.tolist()}..{hi.tolist()} are not all in values "
            f"(offset {off.tolist()}, shape {values.shape[1:]})"
        )
    if np.any(hi <= lo):
        return out
    gmat = np.stack([footprint.g_a, footprint.g_b, footprint.g_c])
    # loop over the axes in memory order (the innermost with the smallest stride)
    perm = np.argsort([-abs(s) for s in values.strides[1:]], kind="stable")
    vals = values.transpose(0, *(perm + 1))
    nchunk = max(1, min(numba.get_num_threads(), int(hi[perm[0]] - lo[perm[0]])))
    buf = np.zeros((nchunk,) + out.shape)
    fp = footprint
    _k.project(
        vals,
        lo[perm],
        hi[perm],
        off[perm],
        np.ascontiguousarray(gmat[perm]),
        fp.q0,
        fp.xs,
        fp.ys,
        fp._ixs,
        fp._iys,
        fp._bx,
        fp._by,
        fp._xinfo,
        fp._yinfo,
        fp.table,
        fp.power,
        fp.total(),
        fp.shadow,
        buf,
    )
    out += buf.sum(axis=0)
    return out


def project_blocks(footprint, values, where, out):
    """:func:`project_cells` for cells stored by blocks (the split's compact per-cell state).

    Parameters
    ----------
    footprint : Footprint
    values : ndarray (nblock, W, W, W, nq) float64
        ``values[s, i, j, k]`` belongs to cell ``where[s] * W + (i, j, k)``
        (``(a, b, c)`` order); cells beyond the grid must hold zeros.
    where : ndarray (nblock, 3) int64
        Block indices.
    out : ndarray (nq, ny, nx) float64
        Receives the footprint means, as in :func:`project_cells`.
    """
    values = np.asarray(values)
    if (
        values.ndim != 5
        or values.dtype != np.float64
        or out.shape != (values.shape[4],) + footprint.image_shape
        or out.dtype != np.float64
        or where.shape != (values.shape[0], 3)
    ):
        raise InputError(
            f"values/where/out: expected (nblock, W, W, W, nq) float64 values, (nblock, 3) block "
            f"indices and (nq, ny, nx) float64 out, got {values.shape} {values.dtype}, "
            f"{where.shape}, {out.shape} {out.dtype}"
        )
    if values.shape[0] == 0:
        return out
    gmat = np.stack([footprint.g_a, footprint.g_b, footprint.g_c])
    nchunk = max(1, min(numba.get_num_threads(), values.shape[0]))
    buf = np.zeros((nchunk,) + out.shape)
    fp = footprint
    _k.project_blocks(
        values,
        np.ascontiguousarray(where, np.int64),
        gmat,
        fp.q0,
        fp.xs,
        fp.ys,
        fp._ixs,
        fp._iys,
        fp._bx,
        fp._by,
        fp._xinfo,
        fp._yinfo,
        fp.table,
        fp.power,
        fp.total(),
        fp.shadow,
        buf,
    )
    out += buf.sum(axis=0)
    return out
