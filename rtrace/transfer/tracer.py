"""Lay out the rays of a View through a Snapshot, run the kernels, composite the pieces.

Two routes give the same physics:

* **Line of sight along a grid axis**: every column of cells is one exact
  ray (the fields are constant across the column's footprint), traced over
  contiguous memory. Each column's square footprint is clipped onto the
  pixels (``remap``) for any pixel size and any rotation of north about the
  line of sight. Nothing aliases; the total flux is exact.
* **Any other direction**: parallel rays on a lattice that is commensurate
  with the grid on the two axes most nearly perpendicular to the line of
  sight (``supersample`` rays per cell, and at least one per pixel). All rays
  of one lattice phase cross cell boundaries at the same depths, so the
  Amanatides & Woo traversal is done once per layer of cells
  (``kernels.layer_segments``) and the rays are swept through the grid layer
  by layer (``kernels.trace_sheared``). Each ray stands for a parallelogram tube; tubes tile
  the image plane and are remapped onto pixels by exact clipping, so a
  pixel reports the mean over its footprint and the total flux is the
  lattice quadrature of the volume integral for any pixel size. Faces seen
  edge-on (directions in or near a coordinate plane) do not alias, because
  the lattice counts exactly ``supersample`` rays per cell across them.
  The grid may be split into bricks, traced independently and composited
  front to back (exact, see ``compositing``).
"""

import math

import astropy.units as u
import numpy as np

from ..errors import InputError
from ..physics.constants import ALPHA_FF_PREFACTOR, C, H, H_OVER_K
from ..physics.gaunt import log_temperature_table
from ..physics.planck import planck_cgs
from . import kernels
from .compositing import Segment, composite
from .remap import remap_parallelograms
from .result import Result

__all__ = ["trace", "FrequencyTables"]

_CMB_TEMPERATURE = 2.7255   # K, Fixsen (2009), ApJ 707, 916


class FrequencyTables:
    """Per-frequency constants the kernels need (all cgs)."""

    def __init__(self, nu_hz):
        self.nu = np.ascontiguousarray(nu_hz, float)
        self.hk = H_OVER_K * self.nu                          # h nu / k  (K)
        self.alpha_pref = ALPHA_FF_PREFACTOR / self.nu**3     # R&L 5.18b prefactor times nu^-3
        self.b_pref = 2.0 * H * self.nu**3 / C**2             # Planck prefactor 2 h nu^3 / c^2
        self.log_t0, dlog_t, self.gtab = log_temperature_table(self.nu)
        self.inv_dlog_t = 1.0 / dlog_t

    def args(self):
        return (self.log_t0, self.inv_dlog_t, self.gtab, self.hk, self.alpha_pref, self.b_pref)


def _frequencies(frequencies):
    q = u.Quantity(frequencies)
    if not q.unit.is_equivalent(u.Hz, equivalencies=u.spectral()):
        raise InputError(f"frequencies: expected a frequency (or wavelength), got unit '{q.unit}'")
    nu = np.atleast_1d(q.to_value(u.Hz, equivalencies=u.spectral())).astype(float)
    if nu.ndim != 1 or not np.all(np.isfinite(nu) & (nu > 0)):
        raise InputError("frequencies: must be a 1D sequence of finite positive values")
    return nu


def _background(background, nu):
    """Intensity (nfreq,) entering from the far side: None, 'cmb', a temperature or an intensity."""
    if background is None:
        return np.zeros_like(nu)
    if isinstance(background, str):
        if background.lower() != "cmb":
            raise InputError(f"background: unknown name '{background}' (use 'cmb', a temperature or an intensity)")
        return planck_cgs(nu, np.full_like(nu, _CMB_TEMPERATURE))
    q = u.Quantity(background)
    if q.unit.is_equivalent(u.K):
        return planck_cgs(nu, np.broadcast_to(q.to_value(u.K), nu.shape).astype(float))
    unit = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)
    if not q.unit.is_equivalent(unit):
        raise InputError(f"background: expected a temperature or a specific intensity, got '{q.unit}'")
    return np.broadcast_to(q.to_value(unit), nu.shape).astype(float)


def trace(snapshot, view, frequencies, *, background=None, supersample=1, brick_size=None):
    """Solve the transfer equation along the rays of ``view`` through ``snapshot``.

    Parameters
    ----------
    snapshot : `~rtrace.Snapshot`
    view : `~rtrace.View`
    frequencies : `~astropy.units.Quantity`
        Frequencies (or wavelengths) to image; all are traced in one traversal.
    background : None, "cmb", `~astropy.units.Quantity`, optional
        Intensity entering the grid from the far side: ``"cmb"`` (2.7255 K
        blackbody, Fixsen 2009), a blackbody temperature, or a specific
        intensity (scalar or one per frequency).
    supersample : int, optional
        Rays per smallest cell width for oblique views (default 1: rays are
        never farther apart than a cell). Axis-aligned views are exact and
        ignore it.
    brick_size : int, optional
        Split the grid into cubic bricks of this many cells per side for
        oblique views, traced independently and composited (same result).

    Returns
    -------
    `~rtrace.Result`
    """
    nu = _frequencies(frequencies)
    bg = _background(background, nu)
    if int(supersample) < 1:
        raise InputError(f"supersample: must be a positive integer, got {supersample}")
    tables = FrequencyTables(nu)
    center, pix = view.resolve(snapshot)
    if view.los_axis() is not None:
        seg, nrays = _trace_axis_aligned(snapshot, view, center, pix, tables, bg)
    else:
        seg, nrays = _trace_oblique(snapshot, view, center, pix, tables, bg, int(supersample), brick_size)
    provenance = dict(snapshot.provenance, checksum=snapshot.checksum(), view=view.describe(),
                      background="none" if background is None else str(background))
    return Result(seg.intensity, seg.tau, seg.em, nu, view, pix, center, provenance,
                  rays_per_pixel=nrays, background=bg)


def _splat(seg, bg, cols, rows, e1, e2, planes):
    """Add tubes (``seg``: (nfreq, nray) and (nray,)) onto ``planes`` (2 nfreq + 1, ny, nx).

    The planes hold, per pixel, the footprint mean of ``I - I_bg``, of tau and
    of EM; :func:`_planes_to_segment` adds the background back, so pixels no
    tube covers see the background alone.
    """
    delta = seg.intensity + bg[:, None] * np.expm1(-seg.tau)       # I_seg + I_bg e^{-tau} - I_bg
    values = np.ascontiguousarray(np.concatenate([delta, seg.tau, seg.em[None, :]]))
    remap_parallelograms(np.ascontiguousarray(cols, float), np.ascontiguousarray(rows, float),
                         np.asarray(e1, float), np.asarray(e2, float), values, planes)


def _planes_to_segment(planes, bg):
    nfreq = len(bg)
    return Segment(planes[:nfreq] + bg[:, None, None], planes[nfreq:2 * nfreq], planes[-1])


def _pixel_coordinates(points, center, view, pix):
    """Image-plane position (column, row), in pixel units, of points (..., 3) in cm."""
    ny, nx = view.shape
    rel = points - center
    return rel @ view.west / pix + nx / 2, rel @ view.north / pix + ny / 2


# -- axis-aligned route -------------------------------------------------------------------------

def _trace_axis_aligned(snap, view, center, pix, tables, bg):
    la, ls = view.los_axis()
    ne, ni, t = snap._ne, snap._ni, snap._t
    ds = float(snap.cell_size[la])
    forward = ls > 0
    nfreq = len(tables.nu)
    if la == 2:
        arrays, kern, trans = (ne, ni, t), kernels.trace_along_last_axis, (0, 1)
    elif la == 1:
        arrays, kern, trans = (ne, ni, t), kernels.trace_along_middle_axis, (0, 2)
    else:
        arrays, kern, trans = tuple(a.transpose(1, 0, 2) for a in (ne, ni, t)), kernels.trace_along_middle_axis, (1, 2)
    shape2 = (snap.shape[trans[0]], snap.shape[trans[1]])
    seg = Segment.empty(nfreq, shape2)
    kern(*arrays, ds, forward, *tables.args(), seg.intensity, seg.tau, seg.em)
    # each column is a tube with the cell's square footprint: clip it onto the pixels
    a, b = trans
    cell = snap.cell_size
    centers = np.zeros(shape2 + (3,))
    centers[..., a] = snap.origin[a] + (np.arange(shape2[0])[:, None] + 0.5) * cell[a]
    centers[..., b] = snap.origin[b] + (np.arange(shape2[1])[None, :] + 0.5) * cell[b]
    centers[..., la] = center[la]
    cols, rows = _pixel_coordinates(centers.reshape(-1, 3), center, view, pix)
    e1 = cell[a] * np.array([view.west[a], view.north[a]]) / pix
    e2 = cell[b] * np.array([view.west[b], view.north[b]]) / pix
    flat = Segment(seg.intensity.reshape(nfreq, -1), seg.tau.reshape(nfreq, -1), seg.em.ravel())
    planes = np.zeros((2 * nfreq + 1,) + view.shape)
    _splat(flat, bg, cols, rows, e1, e2, planes)
    return _planes_to_segment(planes, bg), 1


# -- oblique route ------------------------------------------------------------------------------

def _bricks(shape, brick_size, direction, cell):
    """Brick index bounds, ordered front to back (nearest the observer first)."""
    if brick_size is None:
        return [(np.zeros(3, np.int64), np.asarray(shape, np.int64))]
    b = int(brick_size)
    if b < 1:
        raise InputError(f"brick_size: must be a positive integer, got {brick_size}")
    starts = [range(0, n, b) for n in shape]
    out = []
    for i in starts[0]:
        for j in starts[1]:
            for k in starts[2]:
                lo = np.array([i, j, k], np.int64)
                out.append((lo, np.minimum(lo + b, shape).astype(np.int64)))
    # For parallel rays through a regular partition, decreasing depth of the brick
    # centres along the direction of travel is a valid front-to-back order.
    out.sort(key=lambda lh: -float(((lh[0] + lh[1]) * 0.5 * cell) @ direction))
    return out


def _lattice_range(lo, hi, spacing):
    """Integer lattice indices i with (i + 0.5) * spacing covering [lo, hi]."""
    return int(math.floor(lo / spacing - 0.5)), int(math.ceil(hi / spacing - 0.5))


def _trace_oblique(snap, view, center, pix, tables, bg, supersample, brick_size):
    ny, nx = view.shape
    cell = snap.cell_size
    los = np.asarray(view.los, float)
    c = int(np.argmax(np.abs(los)))
    a, b = [ax for ax in range(3) if ax != c]
    size = np.asarray(snap.shape) * cell
    # lattice in the plane x_c = 0 (grid coordinates): m rays per cell on axes a and b
    m_a = max(supersample, math.ceil(cell[a] / pix - 1e-9))
    m_b = max(supersample, math.ceil(cell[b] / pix - 1e-9))
    h_a, h_b = cell[a] / m_a, cell[b] / m_b
    rho_a, rho_b = los[a] / los[c], los[b] / los[c]
    shift_a, shift_b = rho_a * size[c], rho_b * size[c]     # drift of a ray across the grid's depth
    ia = _lattice_range(-max(shift_a, 0.0), size[a] - min(shift_a, 0.0), h_a)
    ib = _lattice_range(-max(shift_b, 0.0), size[b] - min(shift_b, 0.0), h_b)
    # pixel coordinates are affine in the sub-lattice indices: (col, row) = p0 + I e1 + J e2
    rel_center = center - snap.origin
    e1 = h_a * np.array([view.west[a], view.north[a]]) / pix
    e2 = h_b * np.array([view.west[b], view.north[b]]) / pix
    origin_pt = np.zeros(3)
    origin_pt[a], origin_pt[b] = 0.5 * h_a, 0.5 * h_b
    p0 = np.array(_pixel_coordinates(origin_pt, rel_center, view, pix))
    # keep only the part of the lattice whose tubes can touch the image
    inv = np.linalg.inv(np.column_stack([e1, e2]))
    margin = np.abs(e1) + np.abs(e2)
    corners = np.array([[-margin[0], -margin[1]], [nx + margin[0], -margin[1]],
                        [-margin[0], ny + margin[1]], [nx + margin[0], ny + margin[1]]])
    ij = (corners - p0) @ inv.T
    ia = (max(ia[0], int(math.floor(ij[:, 0].min()))), min(ia[1], int(math.ceil(ij[:, 0].max()))))
    ib = (max(ib[0], int(math.floor(ij[:, 1].min()))), min(ib[1], int(math.ceil(ij[:, 1].max()))))
    nfreq = len(tables.nu)
    planes = np.zeros((2 * nfreq + 1, ny, nx))
    if ia[1] < ia[0] or ib[1] < ib[0]:
        return _planes_to_segment(planes, bg), 0.0
    order = (a, b, c)
    arrays = tuple(arr.transpose(order) for arr in (snap._ne, snap._ni, snap._t))
    forward = bool(los[c] > 0)
    max_seg = 3 + math.ceil(abs(rho_a) * cell[c] / cell[a]) + math.ceil(abs(rho_b) * cell[c] / cell[b])
    bricks = [(lo[list(order)], hi[list(order)]) for lo, hi in _bricks(snap.shape, brick_size, los, cell)]
    n_traced = 0
    for pa in range(m_a):
        for pb in range(m_b):
            # this phase's rays: sub-lattice indices I = i m_a + pa, J = j m_b + pb
            i_lo, i_hi = -((pa - ia[0]) // m_a), (ia[1] - pa) // m_a
            j_lo, j_hi = -((pb - ib[0]) // m_b), (ib[1] - pb) // m_b
            n_i, n_j = i_hi - i_lo + 1, j_hi - j_lo + 1
            if n_i <= 0 or n_j <= 0:
                continue
            acc = None
            for lo, hi in bricks:
                segs = kernels.layer_segments((pa + 0.5) / m_a, (pb + 0.5) / m_b, rho_a, rho_b, cell[a], cell[b],
                                              cell[c], abs(los[c]), lo[2], hi[2], forward, max_seg)
                part = Segment.empty(nfreq, (1, n_i * n_j))
                kernels.trace_sheared(*arrays, lo, hi, lo[2], forward, i_lo, n_i, j_lo, n_j, *segs,
                                      *tables.args(), part.intensity, part.tau, part.em)
                acc = part if acc is None else composite(acc, part)
            big_i = (np.arange(i_lo, i_hi + 1) * m_a + pa)[:, None]
            big_j = (np.arange(j_lo, j_hi + 1) * m_b + pb)[None, :]
            cols = (p0[0] + big_i * e1[0] + big_j * e2[0]).ravel()
            rows = (p0[1] + big_i * e1[1] + big_j * e2[1]).ravel()
            _splat(Segment(acc.intensity[:, 0], acc.tau[:, 0], acc.em[0]), bg, cols, rows, e1, e2, planes)
            n_traced += n_i * n_j
    return _planes_to_segment(planes, bg), n_traced / (nx * ny)
