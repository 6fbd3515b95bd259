"""Where along the line of sight the emission comes from: tau = 1 depths and contribution functions.

Both march single rays through the pixel centres from the observer's side
of the grid with the Amanatides & Woo (1987) traversal (exact path lengths
per cell), using the same per-cell absorption coefficient (Rybicki &
Lightman 1979, eq. 5.18b, with the tabulated Gaunt factor) and source
function ``B_nu(T_e)`` as the tracer.

* ``tau = 1`` depth: distance from the observer-side boundary of the grid to
  the point where the optical depth accumulated from the observer first
  reaches 1. Within a cell the coefficients are constant, so tau grows
  linearly and the crossing point is exact: ``s = s_in + (1 - tau_in) / alpha``.
* Contribution function: each cell segment ``k`` (ordered from the
  observer) adds ``dI_k = S_k (1 - e^{-dtau_k}) e^{-tau_k}`` to the emergent
  intensity, ``tau_k`` being the optical depth in front of it; the ``dI_k``
  sum to the emergent intensity of the ray (formal solution of the transfer
  equation, R&L eq. 1.29).

These are single rays through pixel centres, not footprint means: for
pixels much larger than the cells they describe the central ray only.
"""

import math

import astropy.units as u
import numba
import numpy as np
from numba import prange

from ..errors import InputError
from ..physics.constants import PC
from ..transfer.kernels import _helium3_share, _opacity_and_source, _table_position

__all__ = ["tau_unity_depth", "contribution", "RayContribution", "pixel_rays"]


@numba.njit(cache=True)
def _walk(start, direction, shape, cell, seg_t, seg_ds, seg_idx):
    """Cell segments of the line ``start + t direction`` inside the grid, in order of increasing t.

    ``start`` is relative to the grid's lower corner (cm); fills
    ``seg_t`` (entry parameter), ``seg_ds`` (path length, cm) and
    ``seg_idx`` (cell index) and returns ``(count, t_entry)``.
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
    tm = t0 + 1e-9 * (t1 - t0)          # a point just inside the grid, for the first cell
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


@numba.njit(cache=True, parallel=True)
def _tau_unity(ne, ni, temp, cell, starts, direction, log_t0, inv_dlog_t, gtab, hk, alpha_pref, b_pref, em_ions,
               out):
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
        n, t0 = _walk(starts[r], direction, shape, cell, seg_t, seg_ds, seg_idx)
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


@numba.njit(cache=True)
def _one_ray(start, direction, shape, cell):
    nmax = shape[0] + shape[1] + shape[2] + 4
    seg_t = np.empty(nmax)
    seg_ds = np.empty(nmax)
    seg_idx = np.empty((nmax, 3), np.int64)
    n, t0 = _walk(start, direction, shape, cell, seg_t, seg_ds, seg_idx)
    return seg_t[:n] - t0, seg_ds[:n], seg_idx[:n]


def _snapshot_of(result):
    snap = getattr(result, "_snapshot", None)
    if snap is None:
        raise InputError("result: this Result does not carry its snapshot (it was not made by rtrace.trace)")
    if getattr(snap, "is_amr", False):
        raise InputError("result: tau = 1 depths and contribution functions are not available for AMR snapshots")
    if not getattr(snap, "in_memory", True):
        raise InputError("result: tau = 1 depths and contribution functions march rays through the fields in "
                         "memory, and this snapshot is file-backed (open_hdf5); read it, or a sub-volume of it, "
                         "with rtrace.io.hdf5.read_hdf5 and trace that")
    return snap


def pixel_rays(result, snapshot):
    """Start points (ny*nx, 3) (cm, relative to the grid corner) and direction of the pixel-centre rays.

    The rays run from the observer into the grid (direction ``-los``).
    """
    view = result.view
    nf, ny, nx = result.shape
    pix = result.pixel_size.to_value(u.cm)
    center = result.center.to_value(u.cm) - np.asarray(snapshot.origin, float)
    west, north, los = (np.asarray(v, float) for v in (view.west, view.north, view.los))
    cols = (np.arange(nx) + 0.5 - nx / 2.0) * pix
    rows = (np.arange(ny) + 0.5 - ny / 2.0) * pix
    pts = center + rows[:, None, None] * north + cols[None, :, None] * west
    return np.ascontiguousarray(pts.reshape(-1, 3)), np.ascontiguousarray(-los)


def tau_unity_depth(result):
    """Depth (pc) along each pixel-centre ray, from the observer-side grid boundary, where tau reaches 1.

    Returns
    -------
    `~astropy.units.Quantity` (nfreq, ny, nx)
        NaN where the ray's total optical depth stays below 1 (or misses the grid).
    """
    from ..transfer.tracer import FrequencyTables
    snap = _snapshot_of(result)
    nf, ny, nx = result.shape
    starts, direction = pixel_rays(result, snap)
    tables = FrequencyTables(result.frequencies.to_value(u.Hz))
    out = np.empty((nf, ny * nx))
    _tau_unity(snap._ne, snap._ni, snap._t, np.asarray(snap.cell_size, float), starts, direction,
               *tables.args(), out)
    return u.Quantity(out.reshape(nf, ny, nx) / PC, u.pc)


class RayContribution:
    """Where the emergent intensity of one ray comes from.

    Attributes
    ----------
    depth : Quantity (nseg,)
        Distance of each cell segment's midpoint from the observer-side grid boundary (pc).
    path_length : Quantity (nseg,)
        Segment lengths (pc).
    cells : ndarray (nseg, 3)
        Grid indices of the cells crossed, observer first.
    contribution : Quantity (nfreq, nseg)
        ``dI_k = S_k (1 - e^{-dtau_k}) e^{-tau_k}`` (erg s-1 cm-2 Hz-1 sr-1).
    tau_front : ndarray (nfreq, nseg)
        Optical depth between the observer and each segment's near edge.
    intensity : Quantity (nfreq,)
        Their sum: the emergent intensity of the ray with nothing behind the grid.
    frequencies : Quantity (nfreq,)
    """

    def __init__(self, depth_cm, ds_cm, cells, contrib, tau_front, nu):
        self.depth = u.Quantity((depth_cm + 0.5 * ds_cm) / PC, u.pc)
        self.path_length = u.Quantity(ds_cm / PC, u.pc)
        self.cells = cells
        unit = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)
        self.contribution = u.Quantity(contrib, unit)
        self.tau_front = tau_front
        self.intensity = u.Quantity(contrib.sum(axis=1), unit)
        self.frequencies = u.Quantity(nu, u.Hz)

    def cumulative_fraction(self):
        """Fraction of the emergent intensity from the observer down to each segment (nfreq, nseg)."""
        c = np.cumsum(self.contribution.value, axis=1)
        with np.errstate(invalid="ignore", divide="ignore"):
            return c / c[:, -1:]


def contribution(result, pixel):
    """Contribution function along the ray through the centre of ``pixel`` = ``(column, row)``."""
    from ..physics.freefree import absorption_cgs
    from ..physics.planck import planck_cgs
    snap = _snapshot_of(result)
    nf, ny, nx = result.shape
    col, row = (int(v) for v in pixel)
    if not (0 <= col < nx and 0 <= row < ny):
        raise InputError(f"pixel: (column, row) = {pixel} is outside the {nx}x{ny} image")
    starts, direction = pixel_rays(result, snap)
    depth, ds, cells = _one_ray(starts[row * nx + col], direction, np.asarray(snap.shape, np.int64),
                                np.asarray(snap.cell_size, float))
    nu = result.frequencies.to_value(u.Hz)[:, None]
    x, y, z = cells.T
    t = snap._t[x, y, z].astype(float)[None, :]
    ne = snap._ne[x, y, z].astype(float)[None, :]
    ni = snap._ni[x, y, z].astype(float)[None, :]
    dtau = absorption_cgs(nu, t, ne, ni) * ds[None, :]         # R&L 5.18b
    tau_front = np.cumsum(dtau, axis=1) - dtau
    contrib = planck_cgs(nu, t) * -np.expm1(-dtau) * np.exp(-tau_front)
    return RayContribution(depth, ds, cells, contrib, tau_front, nu[:, 0])
