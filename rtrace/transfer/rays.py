"""Single rays through a regular grid: the cells a line crosses, and where its optical depth reaches 1.

The per-ray counterpart of the tracer's sweeps, for diagnostics that follow one ray at a time
(:mod:`rtrace.analysis.depth`). The traversal is Amanatides & Woo (1987), "A fast voxel traversal
algorithm for ray tracing", Eurographics '87: exact path lengths per cell. The optical depth uses the
tracer's own per-cell absorption coefficient (Rybicki & Lightman 1979, eq. 5.18b, with the tabulated
Gaunt factor; :mod:`rtrace.transfer.kernels`), so the two agree cell for cell.

Positions are in cm relative to the grid's lower corner; ``cell`` is the cell size per axis (cm).
"""

import math

import numba
import numpy as np
from numba import prange

from .kernels import _helium3_share, _opacity_and_source, _table_position

__all__ = ["walk_cells", "ray_segments", "tau_unity_depths"]


@numba.njit(cache=True)
def walk_cells(start, direction, shape, cell, seg_t, seg_ds, seg_idx):
    """Cell segments of the line ``start + t direction`` inside the grid, in order of increasing t.

    A numba function (callable from Python and from other numba functions).

    Parameters
    ----------
    start, direction : ndarray (3,)
        A point of the line (cm, relative to the grid's lower corner) and its direction.
    shape : ndarray (3,) of int64
        Grid shape.
    cell : ndarray (3,)
        Cell size per axis (cm).
    seg_t, seg_ds : ndarray (nmax,)
        Filled with each segment's entry parameter ``t`` and path length (cm, for a unit ``direction``).
    seg_idx : ndarray (nmax, 3) of int64
        Filled with each segment's cell index. ``nmax = sum(shape) + 4`` holds any line.

    Returns
    -------
    count : int
        Number of segments filled (0 if the line misses the grid).
    t_entry : float
        Parameter ``t`` where the line enters the grid.
    """
    t0, t1 = -1e300, 1e300
    for ax in range(3):
        size = shape[ax] * cell[ax]
        if direction[ax] != 0.0:
            ta = (0.0 - start[ax]) / direction[ax]
            tb = (size - start[ax]) / direction[ax]
            t0 = max(t0, min(ta, tb))
            t1 = min(t1, max(ta, tb))
        elif start[ax] < 0.0 or start[ax] >= size:
            return 0, 0.0
    if not t1 > t0:
        return 0, 0.0
    idx = np.empty(3, np.int64)
    step = np.empty(3, np.int64)
    tmax = np.empty(3)
    tdelta = np.empty(3)
    tm = t0 + 1e-9 * (t1 - t0)  # a point just inside the grid, for the first cell
    for ax in range(3):
        p = start[ax] + tm * direction[ax]
        i = int(math.floor(p / cell[ax]))
        idx[ax] = min(max(i, 0), shape[ax] - 1)
        if direction[ax] > 0.0:
            step[ax] = 1
            tmax[ax] = ((idx[ax] + 1) * cell[ax] - start[ax]) / direction[ax]
            tdelta[ax] = cell[ax] / direction[ax]
        elif direction[ax] < 0.0:
            step[ax] = -1
            tmax[ax] = (idx[ax] * cell[ax] - start[ax]) / direction[ax]
            tdelta[ax] = -cell[ax] / direction[ax]
        else:
            step[ax] = 0
            tmax[ax] = 1e300
            tdelta[ax] = 1e300
    t = t0
    n = 0
    while n < seg_t.shape[0]:
        ax = 0
        if tmax[1] < tmax[ax]:
            ax = 1
        if tmax[2] < tmax[ax]:
            ax = 2
        t_next = min(tmax[ax], t1)
        if t_next > t:
            seg_t[n] = t
            seg_ds[n] = t_next - t
            seg_idx[n, 0], seg_idx[n, 1], seg_idx[n, 2] = idx[0], idx[1], idx[2]
            n += 1
        t = t_next
        if t >= t1:
            break
        idx[ax] += step[ax]
        if idx[ax] < 0 or idx[ax] >= shape[ax]:
            break
        tmax[ax] += tdelta[ax]
    return n, t0


@numba.njit(cache=True)
def ray_segments(start, direction, shape, cell):
    """The cells one line crosses, in order (a numba function, callable from Python).

    Parameters are those of :func:`walk_cells`.

    Returns
    -------
    depth : ndarray (n,)
        Distance from the grid's entry point to each segment's near edge (cm, for a unit ``direction``).
    ds : ndarray (n,)
        Path length in each cell (cm).
    cells : ndarray (n, 3) of int64
        Index of each cell crossed.
    """
    nmax = shape[0] + shape[1] + shape[2] + 4
    seg_t = np.empty(nmax)
    seg_ds = np.empty(nmax)
    seg_idx = np.empty((nmax, 3), np.int64)
    n, t0 = walk_cells(start, direction, shape, cell, seg_t, seg_ds, seg_idx)
    return seg_t[:n] - t0, seg_ds[:n], seg_idx[:n]


def tau_unity_depths(ne, ni, temp, cell, starts, direction, tables):
    """Depth along each ray, from where it enters the grid, at which its optical depth reaches 1.

    Within a cell the coefficients are constant, so tau grows linearly and the crossing point is
    exact: ``s = s_in + (1 - tau_in) / alpha``.

    Parameters
    ----------
    ne, ni, temp : ndarray (nx, ny, nz)
        Electron density, ion term ``sum Z^2 n_i`` (cm-3) and electron temperature (K).
    cell : ndarray (3,)
        Cell size per axis (cm).
    starts : ndarray (nray, 3)
        A point of each ray (cm, relative to the grid's lower corner).
    direction : ndarray (3,)
        The rays' common unit direction.
    tables : `rtrace.transfer.tracer.FrequencyTables`
        The frequencies' tables, as the tracer builds them.

    Returns
    -------
    ndarray (nfreq, nray)
        Depth in cm; NaN where the ray's total optical depth stays below 1 or it misses the grid.
    """
    out = np.empty((tables.nu.shape[0], starts.shape[0]))
    _tau_unity(
        ne,
        ni,
        temp,
        np.asarray(cell, float),
        np.ascontiguousarray(starts, float),
        np.ascontiguousarray(direction, float),
        *tables.args(),
        out,
    )
    return out


@numba.njit(cache=True, parallel=True)
def _tau_unity(ne, ni, temp, cell, starts, direction, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, em_ions, out):
    """``out`` (nfreq, nray): depth (cm) from the grid's observer-side boundary to tau = 1; NaN if never."""
    shape = np.array(ne.shape, np.int64)
    nf = hk.shape[0]
    nmax = shape[0] + shape[1] + shape[2] + 4
    for r in prange(starts.shape[0]):
        seg_t = np.empty(nmax)
        seg_ds = np.empty(nmax)
        seg_idx = np.empty((nmax, 3), np.int64)
        tau = np.zeros(nf)
        for f in range(nf):
            out[f, r] = np.nan
        n, t0 = walk_cells(starts[r], direction, shape, cell, seg_t, seg_ds, seg_idx)
        left = nf
        for g in range(n):
            x, y, z = seg_idx[g, 0], seg_idx[g, 1], seg_idx[g, 2]
            ne_c, ni_c = float(ne[x, y, z]), float(ni[x, y, z])
            nn = ne_c * ni_c
            if nn <= 0.0:
                continue
            share = _helium3_share(ne_c, ni_c)
            t = float(temp[x, y, z])
            it, wt = _table_position(t, log_t0, inv_dlog_t, gtab.shape[2])
            inv_t = 1.0 / t
            a0 = nn * math.sqrt(inv_t)
            for f in range(nf):
                if not math.isnan(out[f, r]):
                    continue
                kappa, _ = _opacity_and_source(f, t, inv_t, it, wt, share, gtab, hk, alpha_pref, b_pref)
                alpha = a0 * kappa
                dtau = alpha * seg_ds[g]
                if tau[f] + dtau >= 1.0:
                    out[f, r] = (seg_t[g] - t0) + (1.0 - tau[f]) / alpha
                    left -= 1
                else:
                    tau[f] += dtau
            if left == 0:
                break
