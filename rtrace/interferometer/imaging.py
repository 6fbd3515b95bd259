"""From visibilities to images: imaging weights, the dirty image and the dirty beam.

Weights (natural weights are 1 per sample here: equal integration time and
system noise on every baseline):

* ``natural``: ``w_k = 1``. Best point-source sensitivity; the many short
  spacings dominate, so the beam is broad (common practice).
* ``uniform``: ``w_k = 1 / W(cell_k)``, with ``W`` the sum of natural weights
  in the uv cell holding sample ``k``; every occupied cell counts the same,
  which sharpens the beam and lowers the sidelobes at a cost in sensitivity
  (common practice). The cell is that of the discrete Fourier grid of the
  image, ``du = 1 / (nx * pixel)``, ``dv = 1 / (ny * pixel)`` (common
  practice: one cell per inverse field of view).
* ``robust``: Briggs's weighting, ``w_k = 1 / (1 + W(cell_k) f^2)`` with
  ``f^2 = (5 * 10^-R)^2 / (sum_cells W^2 / sum_k 1)`` and robustness ``R``
  (Briggs 1995, PhD thesis, New Mexico Institute of Mining and Technology,
  ch. 3; from memory, equation number not checked). ``R -> +inf`` tends
  to natural, ``R -> -inf`` to uniform; ``R = 0`` lies between.

Images are computed by an exact direct transform on the image's own pixel
grid, the inverse of :mod:`rtrace.interferometer.sampling`:

    I_D(l, m) = sum_k w_k Re[V_k exp(+2 pi i (u_k l + v_k m))] / sum_k w_k

summed over the Hermitian half of the samples (each ``(u, v)`` stands for
itself and ``(-u, -v)``, whose visibility is the complex conjugate, so the
sum over both is twice the real part over one half; the weights of a pair
are equal because the weighting cells are symmetric about the origin). The
dirty beam is the same sum with ``V = 1``, evaluated at all pixel offsets
``(-ny .. ny - 1, -nx .. nx - 1)`` so that it can be shifted to any pixel of
the image in CLEAN; its centre is at index ``(ny, nx)`` and equals 1. Being
direct sums, neither has aliasing or a gridding-kernel correction, and the
dirty image equals the model convolved with the dirty beam to rounding.
Each image costs ``nvis * npix`` multiply-adds in two real BLAS matrix
products per block of samples.
"""

import math

import numpy as np

from ..errors import InputError

__all__ = ["WEIGHTINGS", "imaging_weights", "dirty_image", "dirty_beam", "uniform_cell"]

WEIGHTINGS = ("natural", "uniform", "robust")

_CHUNK_ELEMENTS = 1 << 21


def uniform_cell(shape, pixel_scale_rad):
    """Uv cell ``(du, dv)`` in wavelengths: one inverse field of view (``1 / (n * pixel)``)."""
    ny, nx = shape
    return 1.0 / (nx * pixel_scale_rad), 1.0 / (ny * pixel_scale_rad)


def imaging_weights(uu, vv, weighting, cell, robust=0.0, natural=None):
    """Imaging weights of every sample.

    Parameters
    ----------
    uu, vv : ndarray (nvis,)
        Sample coordinates (wavelengths); pass the Hermitian-complete set
        (both ``(u, v)`` and ``(-u, -v)``) so the cell densities count both.
    weighting : {"natural", "uniform", "robust"}
    cell : (float, float)
        Weighting cell ``(du, dv)`` in wavelengths.
    robust : float
        Briggs robustness ``R`` (robust weighting only).
    natural : ndarray (nvis,), optional
        Natural weights (``1 / sigma^2``); default 1.

    Returns
    -------
    ndarray (nvis,)
        Weights, not normalised.
    """
    uu = np.asarray(uu, float)
    vv = np.asarray(vv, float)
    nat = np.ones_like(uu) if natural is None else np.asarray(natural, float)
    if weighting == "natural":
        return nat.copy()
    if weighting not in WEIGHTINGS:
        raise InputError(f"weighting: expected one of {', '.join(WEIGHTINGS)}, got {weighting!r}")
    du, dv = cell
    # np.rint is symmetric (rint(-x) = -rint(x)), so (u, v) and (-u, -v) land in mirrored cells
    iu = np.rint(uu / du).astype(np.int64)
    iv = np.rint(vv / dv).astype(np.int64)
    _, inverse = np.unique(np.stack([iu, iv], axis=1), axis=0, return_inverse=True)
    inverse = inverse.reshape(-1)
    density = np.bincount(inverse, weights=nat)  # W per occupied cell
    w_cell = density[inverse]  # W(cell_k) for each sample
    if weighting == "uniform":
        return nat / w_cell
    # Briggs (1995), from memory: f^2 = (5 10^-R)^2 / (sum_cells W^2 / sum_k w_k)
    f2 = (5.0 * 10.0 ** (-float(robust))) ** 2 / (np.sum(density**2) / np.sum(nat))
    return nat / (1.0 + w_cell * f2)


def _inverse_dft(coeffs, uu, vv, l, m):
    """``Re sum_k c_k exp(+2 pi i (u_k l_c + v_k m_r))`` on the (m, l) grid: (len(m), len(l))."""
    out = np.zeros((len(m), len(l)))
    step = max(64, _CHUNK_ELEMENTS // (len(l) + len(m)))
    for a in range(0, len(uu), step):
        sl = slice(a, min(len(uu), a + step))
        p = coeffs[sl, None] * np.exp(2j * math.pi * np.outer(vv[sl], m))  # (k, ny)
        phase_l = 2.0 * math.pi * np.outer(uu[sl], l)  # (k, nx)
        # Re[p e^{i phi}] = Re(p) cos(phi) - Im(p) sin(phi): two real matrix products
        out += p.real.T @ np.cos(phase_l) - p.imag.T @ np.sin(phase_l)
    return out


def dirty_image(vis, weights, uu, vv, l, m):
    """Dirty image (ny, nx) of the Hermitian half of the samples, in Jy per dirty beam.

    Parameters
    ----------
    vis : ndarray (nvis,) complex
        Visibilities (Jy) of the half set.
    weights : ndarray (nvis,)
        Imaging weights of the half set.
    uu, vv : ndarray (nvis,)
        Coordinates (wavelengths).
    l, m : ndarray
        Direction cosines of the columns and rows (radians).
    """
    w = np.asarray(weights, float)
    return _inverse_dft(w * np.asarray(vis, complex), uu, vv, l, m) / w.sum()


def dirty_beam(weights, uu, vv, shape, pixel_scale_rad):
    """Dirty beam (2 ny, 2 nx), peak 1 at index (ny, nx), at every pixel offset.

    Row offset ``dr`` is toward north, column offset ``dc`` toward west, as
    on the images: index ``[ny + dr, nx + dc]``.
    """
    ny, nx = shape
    w = np.asarray(weights, float)
    dl = -np.arange(-nx, nx) * pixel_scale_rad  # column offsets: l grows toward east
    dm = np.arange(-ny, ny) * pixel_scale_rad
    return _inverse_dft(w.astype(complex), uu, vv, dl, dm) / w.sum()
