"""The telescope beam: per-frequency beams, the pixel-grid kernel and FFT convolution.

Conventions (part of the public contract):

* A beam is a `radio_beam.Beam`: ``major`` and ``minor`` are full widths at
  half maximum, ``pa`` is the position angle of the major axis measured from
  north through east (common practice in radio astronomy).
* On rtrace images the row index grows toward north and the column index
  toward west, so east is *decreasing* column. A beam with ``pa = 0`` is
  elongated along the rows (north), ``pa = 90 deg`` along east (toward
  smaller column index), ``pa = 45 deg`` along north-east, i.e. along
  ``(+row, -column)``.
* The kernel is sampled on the image's pixel grid and normalised to unit
  sum, so convolving a Jy/pixel image with it conserves flux exactly (up
  to what spills over the image edge). A beam narrow compared with a pixel
  is integrated over each pixel (supersampled) instead of point-sampled,
  so its shape on the grid is still right.
"""

import math

import astropy.units as u
import numpy as np
import radio_beam
import scipy.fft

from ..errors import InputError

__all__ = ["BeamKernel", "describe_beam", "validate_beam", "beams_for_frequencies", "BEAM_SCALINGS",
           "KERNEL_HALF_WIDTH_SIGMA", "SUPERSAMPLE_BELOW_SIGMA"]

# FWHM = sqrt(8 ln 2) sigma for a Gaussian (standard identity).
_FWHM_PER_SIGMA = math.sqrt(8.0 * math.log(2.0))

# The kernel (and the zero padding around the image) reaches this many sigma of
# the major axis on every side; the Gaussian there is exp(-12.5) ~ 4e-6 of its peak.
KERNEL_HALF_WIDTH_SIGMA = 5.0

# Below this minor-axis sigma (in pixels) point samples misrepresent the Gaussian's
# shape on the grid, so the kernel is integrated over each pixel instead.
SUPERSAMPLE_BELOW_SIGMA = 1.0

# Sub-samples per pixel side are capped here: a beam this far below a pixel puts
# essentially all its weight in the central pixel anyway.
_MAX_SUPERSAMPLE = 65

BEAM_SCALINGS = (None, "inverse-frequency")


def validate_beam(beam, name="beam"):
    """Check that ``beam`` is a usable `radio_beam.Beam`.

    Parameters
    ----------
    beam : `radio_beam.Beam`
        The beam to check.
    name : str
        Parameter name used in error messages.

    Returns
    -------
    `radio_beam.Beam`
        The same beam.

    Raises
    ------
    InputError
        If ``beam`` is not a Beam or its axes are not finite and positive.
    """
    if not isinstance(beam, radio_beam.Beam):
        raise InputError(f"{name}: expected a radio_beam.Beam, got {type(beam).__name__}")
    major = beam.major.to_value(u.arcsec)
    minor = beam.minor.to_value(u.arcsec)
    pa = beam.pa.to_value(u.deg)
    if not (np.isfinite(major) and np.isfinite(minor) and np.isfinite(pa)):
        raise InputError(f"{name}: major, minor and pa must be finite, got {beam!r}")
    if not (major > 0 and minor > 0):
        raise InputError(f"{name}: major and minor FWHM must be positive, got {beam!r}")
    return beam


def beams_for_frequencies(beam, nu_hz, scaling=None, reference_hz=None):
    """One beam per frequency.

    Parameters
    ----------
    beam : `radio_beam.Beam`
        The beam at the reference frequency.
    nu_hz : ndarray (nfreq,)
        Frequencies in Hz.
    scaling : {None, "inverse-frequency"}
        ``None``: the same beam at every frequency. ``"inverse-frequency"``:
        both FWHM scale as ``reference / nu`` with the position angle kept
        (diffraction-limited dish or array of fixed size, common practice).
    reference_hz : float, optional
        Reference frequency in Hz for the scaling; defaults to ``nu_hz[0]``.

    Returns
    -------
    list of `radio_beam.Beam`
    """
    if scaling is None:
        return [beam] * len(nu_hz)
    if scaling != "inverse-frequency":
        raise InputError(f"beam_scaling: expected None or 'inverse-frequency', got {scaling!r}")
    ref = float(nu_hz[0]) if reference_hz is None else float(reference_hz)
    out = []
    for nu in nu_hz:
        f = ref / float(nu)
        out.append(radio_beam.Beam(major=beam.major * f, minor=beam.minor * f, pa=beam.pa))
    return out


def _supersample_factor(sigma_minor_pix):
    if sigma_minor_pix >= SUPERSAMPLE_BELOW_SIGMA:
        return 1
    # four sub-samples per minor-axis sigma: the midpoint rule's relative error on a
    # pixel integral is then ~ (1/4)^2 / 24 ~ 0.3 % at worst; odd, so one
    # sub-sample sits on the pixel centre
    s = int(math.ceil(4.0 / sigma_minor_pix))
    s += 1 - s % 2
    return min(s, _MAX_SUPERSAMPLE)


def _gaussian_on_grid(half, sigma_major, sigma_minor, pa_rad, supersample):
    """Unit-sum elliptical Gaussian on a (2 half + 1)^2 pixel grid, (row, column) order."""
    offs = np.arange(-half, half + 1, dtype=float)
    # major-axis direction in (column, row): east is -column, so (-sin pa, cos pa)
    s, c = math.sin(pa_rad), math.cos(pa_rad)
    kernel = np.zeros((2 * half + 1, 2 * half + 1))
    sub = (np.arange(supersample) + 0.5) / supersample - 0.5      # sub-pixel offsets
    for dr_sub in sub:
        dr = (offs + dr_sub)[:, None]
        for dc_sub in sub:
            dc = (offs + dc_sub)[None, :]
            along = dr * c - dc * s         # projection on the major axis
            across = dr * s + dc * c        # projection on the minor axis
            kernel += np.exp(-0.5 * ((along / sigma_major) ** 2 + (across / sigma_minor) ** 2))
    return kernel / kernel.sum()


class BeamKernel:
    """A beam sampled on an image's pixel grid, ready for FFT convolution.

    Parameters
    ----------
    beam : `radio_beam.Beam`
        The beam (FWHM axes, position angle from north through east).
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a (square) pixel.
    image_shape : (int, int)
        ``(ny, nx)`` of the images to convolve.

    Attributes
    ----------
    kernel : ndarray (2 half + 1, 2 half + 1)
        The unit-sum kernel, rows toward north, columns toward west, centred.
    half : int
        Kernel half width in pixels (``ceil(5 sigma_major)``, at least 1).
    fft_shape : (int, int)
        Padded grid, at least ``image + 2 half`` on each axis (no wrap-around).
    area_pixels : float
        Beam solid angle over pixel solid angle, ``pi bmaj bmin / (4 ln 2) / pix^2``.
    sum_squares : float
        ``sum(kernel**2)``: the variance of unit white noise after convolution.
    supersample : int
        Sub-samples per pixel side used to build the kernel (1: point-sampled).
    """

    def __init__(self, beam, pixel_scale, image_shape):
        validate_beam(beam)
        pix = u.Quantity(pixel_scale).to_value(u.arcsec)
        if not (np.isfinite(pix) and pix > 0):
            raise InputError(f"pixel_scale: must be a positive angle, got {pixel_scale}")
        self.beam = beam
        self.image_shape = tuple(int(n) for n in image_shape)
        sig_maj = beam.major.to_value(u.arcsec) / pix / _FWHM_PER_SIGMA
        sig_min = beam.minor.to_value(u.arcsec) / pix / _FWHM_PER_SIGMA
        self.sigma_pixels = (sig_maj, sig_min)
        self.supersample = _supersample_factor(sig_min)
        self.half = max(1, int(math.ceil(KERNEL_HALF_WIDTH_SIGMA * sig_maj)))
        self.kernel = _gaussian_on_grid(self.half, sig_maj, sig_min, beam.pa.to_value(u.rad),
                                        self.supersample)
        self.sum_squares = float(np.sum(self.kernel**2))
        # radio_beam's sr is the Gaussian solid angle pi bmaj bmin / (4 ln 2)
        self.area_pixels = float(beam.sr.to_value(u.sr) / ((pix * u.arcsec).to_value(u.rad)) ** 2)
        ny, nx = self.image_shape
        self.fft_shape = (scipy.fft.next_fast_len(ny + 2 * self.half, real=True),
                          scipy.fft.next_fast_len(nx + 2 * self.half, real=True))
        # The kernel's centre goes to index (0, 0) with negative offsets wrapped to the far
        # end: the product of transforms is then the centred convolution, and the padding
        # of at least 2 half keeps the image's own wrap-around out of the first ny x nx.
        wrapped = np.zeros(self.fft_shape)
        h = self.half
        idx_r = np.arange(-h, h + 1) % self.fft_shape[0]
        idx_c = np.arange(-h, h + 1) % self.fft_shape[1]
        wrapped[np.ix_(idx_r, idx_c)] = self.kernel
        self.kernel_ft = scipy.fft.rfft2(wrapped)     # the one transform of this beam's kernel

    def convolve(self, image):
        """Linear convolution of ``image`` (..., ny, nx) with the kernel, zero outside the image.

        Returns an array of the same shape; flux that the kernel spreads over
        the image edge is lost (the field of view ends there).
        """
        image = np.asarray(image, float)
        ny, nx = self.image_shape
        ft = scipy.fft.rfft2(image, s=self.fft_shape)           # zero padded
        return scipy.fft.irfft2(ft * self.kernel_ft, s=self.fft_shape)[..., :ny, :nx]

    def convolve_periodic(self, field):
        """Circular convolution of ``field`` (..., fft_shape) cropped to the image.

        For white noise drawn on the whole padded grid this gives noise that is
        statistically the same everywhere in the image, edges included.
        """
        ny, nx = self.image_shape
        ft = scipy.fft.rfft2(field)
        return scipy.fft.irfft2(ft * self.kernel_ft, s=self.fft_shape)[..., :ny, :nx]

    def describe(self):
        """One-line description of this kernel's beam for provenance."""
        return describe_beam(self.beam)


def describe_beam(beam):
    """One-line description of a beam: FWHM axes (arcsec) and position angle (deg)."""
    return (f"major={beam.major.to_value(u.arcsec):.6g} arcsec minor={beam.minor.to_value(u.arcsec):.6g} arcsec "
            f"pa={beam.pa.to_value(u.deg):.6g} deg")
