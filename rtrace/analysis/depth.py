"""Where along the line of sight the emission comes from: tau = 1 depths and contribution functions.

Both march single rays through the pixel centres from the observer's side
of the grid with the Amanatides & Woo (1987) traversal (exact path lengths
per cell; :mod:`rtrace.transfer.rays`), using the same per-cell absorption
coefficient (Rybicki & Lightman 1979, eq. 5.18b, with the tabulated Gaunt
factor) and source function ``B_nu(T_e)`` as the tracer.

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

import astropy.units as u
import numpy as np

from ..errors import InputError
from ..physics.constants import PC
from ..transfer.rays import ray_segments, tau_unity_depths

__all__ = ["tau_unity_depth", "contribution", "RayContribution", "pixel_rays"]


def _snapshot_of(result):
    snap = getattr(result, "snapshot", None)
    if snap is None:
        raise InputError("result: this Result does not carry its snapshot (it was not made by rtrace.trace)")
    if getattr(snap, "is_amr", False):
        raise InputError("result: tau = 1 depths and contribution functions are not available for AMR snapshots")
    if not getattr(snap, "in_memory", True):
        raise InputError(
            "result: tau = 1 depths and contribution functions march rays through the fields in "
            "memory, and this snapshot is file-backed (open_hdf5); read it, or a sub-volume of it, "
            "with rtrace.io.hdf5.read_hdf5 and trace that"
        )
    return snap


def _fields(snap):
    """``(n_e, ion term, T_e)`` as stored (cgs arrays in the snapshot's dtype, views, no copies)."""
    return (
        snap.electron_density.to_value(u.cm**-3),
        snap.ion_density.to_value(u.cm**-3),
        snap.temperature.to_value(u.K),
    )


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
    ne, ni, temp = _fields(snap)
    out = tau_unity_depths(ne, ni, temp, snap.cell_size, starts, direction, tables)
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
    depth, ds, cells = ray_segments(
        starts[row * nx + col], direction, np.asarray(snap.shape, np.int64), np.asarray(snap.cell_size, float)
    )
    nu = result.frequencies.to_value(u.Hz)[:, None]
    x, y, z = cells.T
    ne, ni, temp = _fields(snap)
    t = temp[x, y, z].astype(float)[None, :]
    ne = ne[x, y, z].astype(float)[None, :]
    ni = ni[x, y, z].astype(float)[None, :]
    dtau = absorption_cgs(nu, t, ne, ni) * ds[None, :]  # R&L 5.18b
    tau_front = np.cumsum(dtau, axis=1) - dtau
    contrib = planck_cgs(nu, t) * -np.expm1(-dtau) * np.exp(-tau_front)
    return RayContribution(depth, ds, cells, contrib, tau_front, nu[:, 0])
