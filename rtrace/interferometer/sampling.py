"""What the baselines measure: the model image's Fourier transform at the (u, v) samples.

The visibility of a sky brightness ``I(l, m)`` on a baseline ``(u, v)`` (in
wavelengths), for a field small enough that the ``w`` term can be dropped, is

    V(u, v) = integral A(l, m) I(l, m) exp(-2 pi i (u l + v m)) dl dm

(Thompson, Moran & Swenson 2017, ch. 3, the two-dimensional form of the
van Cittert-Zernike relation, from memory), with ``A`` the primary-beam
power pattern and ``(l, m)`` direction cosines toward east and north from
the phase centre (the image centre).

How it is computed here
-----------------------
The model is the traced image in Jy per pixel, each pixel a point source at
its centre, so the integral is the sum ``V_k = sum_{r,c} S[r, c]
exp(-2 pi i (u_k l_c + v_k m_r))``, evaluated **exactly** (a direct Fourier
transform, no gridding and no interpolation). Pixels lie on a regular grid,
so the phase factor separates into a column part and a row part:
``V_k = sum_r exp(-2 pi i v_k m_r) (S @ E^T)[r, k]`` with
``E[k, c] = exp(-2 pi i u_k l_c)``. The heavy step is one complex matrix
product of ``ny * nx * nvis`` multiply-adds done by BLAS, in chunks of
visibilities so the phase tables stay small; a 256^2 image with 35 000
visibilities takes about a second. The only errors are float64 rounding of
phases up to ``2 pi |u| l`` (relative 1e-16 of a phase of at most a few
thousand radians here), so the predicted visibilities are exact for the
pixelated model. Treating each pixel as a point is the usual pixel model of
synthesis imaging; the transform of the pixel's own top-hat shape (a sinc
of ``u * pixel``) is left out, which is consistent with the imaging, where
each pixel is again a point sample.

Neglected: the ``w`` term (non-coplanar baselines; its phase at the image
edge, ``pi w (l^2 + m^2)``, is reported by :func:`w_term_phase`), bandwidth
and time-average smearing (monochromatic, instantaneous samples) and the
curvature of the sky beyond the orthographic (SIN) projection the images
already use.
"""

import math

import numpy as np
from scipy.special import j1

from ..errors import InputError

__all__ = [
    "direction_cosines",
    "primary_beam_pattern",
    "predict_visibilities",
    "w_term_phase",
    "PRIMARY_BEAMS",
    "AIRY_FIRST_NULL",
    "GAUSSIAN_FWHM_FACTOR",
]

PRIMARY_BEAMS = ("gaussian", "airy")

# First zero of J1 (Abramowitz & Stegun 1964, table 9.5): the Airy pattern of a uniformly
# illuminated circular aperture is first zero at sin(theta) = 3.8317 / pi * lambda / D = 1.22 lambda / D.
AIRY_FIRST_NULL = 3.831705970207512

# Gaussian primary beam FWHM in units of lambda / D. 1.13 is a common-practice value for a
# dish with tapered illumination (from memory); a uniformly illuminated aperture's Airy power
# pattern is narrower, FWHM = 1.029 lambda / D (Born & Wolf, Principles of Optics, sec. 8.5.2,
# from memory). Tapering broadens the beam and lowers the sidelobes.
GAUSSIAN_FWHM_FACTOR = 1.13

# Visibilities per block of the direct transform: the phase tables of one block are at most
# _CHUNK_ELEMENTS complex numbers (about 32 MB).
_CHUNK_ELEMENTS = 1 << 21


def direction_cosines(shape, pixel_scale_rad):
    """``(l, m)`` of the pixel centres: ``l`` (nx,) toward east, ``m`` (ny,) toward north, radians.

    Column index grows toward west on rtrace images, so ``l`` decreases with
    the column; the centre of the image (0-based ``(n - 1) / 2``, the FITS
    reference pixel) is ``l = m = 0``.
    """
    ny, nx = shape
    l = -(np.arange(nx) - (nx - 1) / 2.0) * pixel_scale_rad
    m = (np.arange(ny) - (ny - 1) / 2.0) * pixel_scale_rad
    return l, m


def primary_beam_pattern(kind, diameter_m, wavelength_m, l, m, fwhm_factor=GAUSSIAN_FWHM_FACTOR):
    """Power pattern of one dish at the pixels (ny, nx), 1 at the pointing centre (image centre).

    Parameters
    ----------
    kind : {"gaussian", "airy"}
        ``gaussian``: ``exp(-4 ln 2 theta^2 / FWHM^2)``, ``FWHM = fwhm_factor
        lambda / D`` (a common-practice approximation to a tapered dish).
        ``airy``: ``(2 J1(x) / x)^2``, ``x = pi D sin(theta) / lambda``, the
        power pattern of a uniformly illuminated circular aperture
        (Born & Wolf, sec. 8.5.2, from memory).
    diameter_m, wavelength_m : float
    l, m : ndarray
        Direction cosines of the columns and rows (radians).
    fwhm_factor : float
        Gaussian FWHM in units of lambda / D.
    """
    rho2 = l[None, :] ** 2 + m[:, None] ** 2  # sin^2(theta) for direction cosines
    if kind == "gaussian":
        fwhm = fwhm_factor * wavelength_m / diameter_m
        return np.exp(-4.0 * math.log(2.0) * rho2 / fwhm**2)
    if kind == "airy":
        x = math.pi * diameter_m * np.sqrt(rho2) / wavelength_m
        out = np.ones_like(x)
        nz = x > 0
        out[nz] = (2.0 * j1(x[nz]) / x[nz]) ** 2
        return out
    raise InputError(f"primary_beam: expected one of {', '.join(PRIMARY_BEAMS)}, got {kind!r}")


def _chunks(n, per_item):
    step = max(64, _CHUNK_ELEMENTS // max(1, per_item))
    for a in range(0, n, step):
        yield slice(a, min(n, a + step))


def predict_visibilities(model, l, m, uu, vv):
    """Exact direct Fourier transform of a pixel model at (u, v) samples.

    Parameters
    ----------
    model : ndarray (ny, nx)
        Flux per pixel (Jy), already multiplied by any primary beam.
    l, m : ndarray (nx,), (ny,)
        Direction cosines of the columns and rows (:func:`direction_cosines`).
    uu, vv : ndarray (nvis,)
        Sample coordinates in wavelengths.

    Returns
    -------
    ndarray (nvis,) complex
        ``sum S exp(-2 pi i (u l + v m))``, Jy.
    """
    model = np.asarray(model, float)
    out = np.empty(len(uu), complex)
    ny, nx = model.shape
    for sl in _chunks(len(uu), nx + ny):
        el = np.exp(-2j * math.pi * np.outer(uu[sl], l))  # (k, nx)
        em = np.exp(-2j * math.pi * np.outer(vv[sl], m))  # (k, ny)
        partial = model @ el.T  # (ny, k): sum over columns
        out[sl] = np.einsum("kr,rk->k", em, partial)  # sum over rows
    return out


def w_term_phase(w_max, l, m):
    """Largest phase (rad) the neglected ``w`` term would add in the image: ``pi |w|max (l^2 + m^2)max``.

    The exact phase is ``2 pi w (sqrt(1 - l^2 - m^2) - 1)`` (TMS 2017, ch. 3,
    from memory), ``~ -pi w (l^2 + m^2)`` for small fields.
    """
    rho2 = float(np.max(np.abs(l))) ** 2 + float(np.max(np.abs(m))) ** 2
    return math.pi * float(w_max) * rho2
