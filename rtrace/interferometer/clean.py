"""Deconvolution: Högbom CLEAN, the Gaussian clean beam fitted to the dirty beam, restoration.

* CLEAN (Högbom 1974, A&AS 15, 417): find the pixel of largest absolute
  residual, add ``gain`` times its value to the clean components there and
  subtract the dirty beam, centred on that pixel and scaled likewise, from
  the residual; repeat until the largest residual is at most ``threshold``
  or ``niter`` components have been taken. The dirty beam is known at every
  offset between two pixels of the image (it is ``(2 ny, 2 nx)``), so the
  subtraction is exact everywhere in the image. Loop gain 0.1 is the common
  practice default.
* Clean beam (the method of this module): an elliptical Gaussian of peak 1
  fitted by least squares to the dirty beam's main lobe down to its
  half-power contour, i.e. to the pixels connected to the centre where the
  beam is at least half its peak (``MAIN_LOBE_LEVEL``). The half-power
  contour is what a beam's FWHM describes, so the clean beam reproduces the
  dirty beam's width where it is defined, whatever the shape of the lobe
  below it; sidelobes and the skirt of the lobe do not pull the fit. The
  fit starts from the linear solution of ``ln B = -(a dr^2 + 2 b dr dc +
  c dc^2)`` (least squares with weights ``B^2``) and is then refined by
  ``scipy.optimize.least_squares`` on ``B`` itself over ``(a, b, c)``. Both
  recover a sampled Gaussian exactly.
* Restored image: the clean components convolved with the clean beam (peak
  1), plus the residual: Jy per clean beam (common practice). The
  convolution uses :class:`rtrace.observe.beam.BeamKernel` times the beam
  area in pixels, exactly as :func:`rtrace.observe.observe` makes Jy/beam,
  so ``SkyMap.flux_density`` returns the clean-component flux plus the
  residual's sum over the beam area.
"""

import math

import astropy.units as u
import numba
import numpy as np
import radio_beam
from scipy import ndimage, optimize

from ..errors import InputError
from ..observe.beam import BeamKernel

__all__ = ["hogbom", "fit_clean_beam", "restore", "MAIN_LOBE_LEVEL", "DEFAULT_GAIN"]

MAIN_LOBE_LEVEL = 0.5
DEFAULT_GAIN = 0.1
_FWHM_PER_SIGMA = math.sqrt(8.0 * math.log(2.0))  # Gaussian FWHM / sigma (standard identity)


@numba.njit(cache=True)
def _hogbom_loop(residual, psf, components, gain, threshold, niter):  # pragma: no cover - numba
    ny, nx = residual.shape
    best = -1.0
    br = 0
    bc = 0
    for r in range(ny):
        for c in range(nx):
            a = abs(residual[r, c])
            if a > best:
                best = a
                br = r
                bc = c
    n = 0
    while n < niter and best > threshold:
        f = gain * residual[br, bc]
        components[br, bc] += f
        r0 = ny - br
        c0 = nx - bc
        best = -1.0
        nbr = 0
        nbc = 0
        # subtract the shifted beam and find the next peak in the same pass
        for r in range(ny):
            for c in range(nx):
                val = residual[r, c] - f * psf[r0 + r, c0 + c]
                residual[r, c] = val
                a = abs(val)
                if a > best:
                    best = a
                    nbr = r
                    nbc = c
        br = nbr
        bc = nbc
        n += 1
    return n, best


def hogbom(dirty, psf, gain=DEFAULT_GAIN, threshold=0.0, niter=10000):
    """Högbom CLEAN of one dirty image.

    Parameters
    ----------
    dirty : ndarray (ny, nx)
        Dirty image (Jy per dirty beam).
    psf : ndarray (2 ny, 2 nx)
        Dirty beam with its peak of 1 at index ``(ny, nx)``.
    gain : float
        Loop gain, ``0 < gain <= 1``.
    threshold : float
        Stop when the largest absolute residual is at most this (Jy/beam).
    niter : int
        Most components to take.

    Returns
    -------
    components : ndarray (ny, nx)
        Clean components, Jy per pixel.
    residual : ndarray (ny, nx)
    n_iter : int
        Components taken.
    peak_residual : float
        Largest absolute residual at the end.
    """
    dirty = np.asarray(dirty, float)
    psf = np.asarray(psf, float)
    ny, nx = dirty.shape
    if psf.shape != (2 * ny, 2 * nx):
        raise InputError(f"psf: expected shape {(2 * ny, 2 * nx)} for a {dirty.shape} image, got {psf.shape}")
    if not abs(psf[ny, nx] - 1.0) < 1e-9:
        raise InputError(f"psf: the dirty beam must be 1 at its centre (index {(ny, nx)}), got {psf[ny, nx]}")
    gain = float(gain)
    if not (0.0 < gain <= 1.0):
        raise InputError(f"gain: the loop gain must lie in (0, 1], got {gain}")
    if not (np.isfinite(threshold) and threshold >= 0):
        raise InputError(f"threshold: must be finite and non-negative, got {threshold}")
    if isinstance(niter, bool) or int(niter) != niter or niter < 0:
        raise InputError(f"niter: expected a non-negative integer, got {niter!r}")
    residual = dirty.copy()
    components = np.zeros_like(residual)
    n, peak = _hogbom_loop(residual, np.ascontiguousarray(psf), components, gain, float(threshold), int(niter))
    return components, residual, int(n), float(peak)


def fit_clean_beam(psf, pixel_scale, level=MAIN_LOBE_LEVEL):
    """Gaussian fitted to the main lobe of a dirty beam.

    Parameters
    ----------
    psf : ndarray (2 ny, 2 nx)
        Dirty beam, peak 1 at index ``(ny, nx)``; rows toward north, columns
        toward west.
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a pixel.
    level : float
        Lowest part of the main lobe used, as a fraction of the peak
        (default 0.5: the half-power contour).

    Returns
    -------
    `radio_beam.Beam`
        FWHM axes and position angle (north through east).
    """
    psf = np.asarray(psf, float)
    cy, cx = psf.shape[0] // 2, psf.shape[1] // 2
    pix = u.Quantity(pixel_scale).to(u.arcsec)
    labels, _ = ndimage.label(psf >= level)
    lobe = labels == labels[cy, cx]
    rows, cols = np.nonzero(lobe)
    if rows.size < 6:
        raise InputError(
            f"pixel_scale: the dirty beam's main lobe covers only {rows.size} pixel(s) "
            f"above {level:g} of its peak; the pixels ({pix:.4g}) are too coarse for the "
            f"synthesized beam, give synthesize() a smaller pixel_scale"
        )
    if rows.min() == 0 or cols.min() == 0 or rows.max() == psf.shape[0] - 1 or cols.max() == psf.shape[1] - 1:
        raise InputError(
            "antennas: the dirty beam's main lobe reaches the edge of the image; the "
            "(u, v) coverage does not resolve the field (one-dimensional tracks, e.g. an "
            "east-west array at declination 0, or baselines too short for the image)"
        )
    dr = (rows - cy).astype(float)
    dc = (cols - cx).astype(float)
    val = psf[rows, cols]
    design = np.stack([dr * dr, 2.0 * dr * dc, dc * dc], axis=1)
    sw = val  # sqrt of the weights B^2
    coef, *_ = np.linalg.lstsq(design * sw[:, None], -np.log(val) * sw, rcond=None)
    # refine: least squares in B itself over the half-power lobe
    fit = optimize.least_squares(
        lambda p: np.exp(-(design @ p)) - val, coef, method="lm", xtol=1e-14, ftol=1e-14, gtol=1e-14
    )
    if fit.success and np.all(np.isfinite(fit.x)):
        coef = fit.x
    quad = np.array([[coef[0], coef[1]], [coef[1], coef[2]]])
    evals, evecs = np.linalg.eigh(quad)  # ascending: evals[0] belongs to the major axis
    if not evals[0] > 0:
        raise InputError(
            "antennas: the dirty beam's main lobe is not closed (the fitted Gaussian "
            "does not fall off in every direction); the (u, v) coverage is too "
            "one-dimensional for a clean beam"
        )
    sig_major, sig_minor = np.sqrt(0.5 / evals)  # exp(-x^2 / (2 sigma^2)) = exp(-lambda x^2)
    e_row, e_col = evecs[:, 0]
    # position angle from north (+row) through east (-column)
    pa = math.degrees(math.atan2(-e_col, e_row)) % 180.0
    return radio_beam.Beam(
        major=sig_major * _FWHM_PER_SIGMA * pix, minor=sig_minor * _FWHM_PER_SIGMA * pix, pa=pa * u.deg
    )


def restore(components, residual, beam, pixel_scale):
    """Clean components (Jy/pixel) convolved with ``beam`` (peak 1), plus the residual: Jy/beam."""
    comps = np.asarray(components, float)
    kernel = BeamKernel(beam, pixel_scale, comps.shape)
    return kernel.convolve(comps) * kernel.area_pixels + np.asarray(residual, float)
