"""The synthesized image's own grid, and the default hour-angle step, chosen from the array.

The model's visibilities are its exact Fourier transform at the (u, v)
samples (:mod:`.sampling`), so the synthesized image need not share the
model's pixels. :func:`image_grid` picks them from the array:

* **Pixel**: ``PIXELS_PER_BEAM`` (5) pixels across ``lambda_min / B_max``,
  the finest resolution of the array (shortest wavelength, longest
  baseline, its full length, which bounds every projection of it). A
  synthesized beam's FWHM is of that order and, with natural or robust
  weights, somewhat wider, so the clean beam spans at least about five
  pixels: enough to sample it (Nyquist needs two) and to fit it well. One
  grid serves every frequency of a cube, so at longer wavelengths the beam
  spans proportionally more pixels.
* **Field**: the model's field, or, with a dish diameter, the primary beam's
  half-power width at the longest wavelength if that is smaller (beyond it
  the attenuated sky adds little), and never less than two synthesized
  beams at the longest wavelength (so the dirty beam's main lobe fits).
  The image is centred on the model's centre (the phase centre).

:func:`default_hour_angle_step` keeps the track sampling free of aliasing:
successive samples of a baseline with equatorial length
``B_xy = sqrt(X^2 + Y^2)`` are ``B_xy dH / lambda`` apart in the (u, v)
plane, and samples spaced ``du`` apart repeat the sky every ``1 / du``
(sampling theorem applied to the visibility function along a track:
Thompson, Moran & Swenson 2017, *Interferometry and Synthesis in Radio
Astronomy*, ch. 5, from memory; common practice). With ``dH <= margin *
lambda_min / (B_xy,max * field)`` the repeat falls outside the field.
"""

import math

import astropy.units as u
import numpy as np

from ..errors import InputError

__all__ = [
    "PIXELS_PER_BEAM",
    "MAX_IMAGE_PIXELS",
    "MIN_IMAGE_PIXELS",
    "AIRY_FWHM_FACTOR",
    "STEP_MARGIN",
    "ImageGrid",
    "image_grid",
    "default_hour_angle_step",
]

PIXELS_PER_BEAM = 5
# Largest side of a synthesized image chosen or accepted (pixels); the direct transforms and CLEAN
# cost grows as the side squared times the number of visibilities.
MAX_IMAGE_PIXELS = 1024
MIN_IMAGE_PIXELS = 32
# FWHM of the Airy power pattern of a uniformly lit circular aperture, in lambda / D
# (Born & Wolf, Principles of Optics, sec. 8.5.2, from memory).
AIRY_FWHM_FACTOR = 1.029
# Fraction of the aliasing limit used by the default hour-angle step.
STEP_MARGIN = 0.8


class ImageGrid:
    """Pixel size (rad) and side (pixels) of a synthesized image, and how they were chosen."""

    def __init__(self, pixel_rad, size, how):
        self.pixel_rad = float(pixel_rad)
        self.size = int(size)
        self.how = how

    @property
    def field_rad(self):
        """Side of the image (rad)."""
        return self.pixel_rad * self.size

    @property
    def pixel_scale(self):
        """Pixel side as a Quantity in arcsec."""
        return (self.pixel_rad * u.rad).to(u.arcsec)


def _arcsec(rad):
    return math.degrees(rad) * 3600.0


def image_grid(
    model_field_rad, longest_baseline_m, wavelengths_m, pb_fwhm_per_lambda=None, pixel_scale=None, image_size=None
):
    """The synthesized image's pixel size and side, from the array unless given.

    Parameters
    ----------
    model_field_rad : float
        Width of the model image (its larger side), radians.
    longest_baseline_m : float
        Length of the longest baseline, metres.
    wavelengths_m : array_like
        Observed wavelengths, metres.
    pb_fwhm_per_lambda : float, optional
        Primary-beam half-power width in radians per metre of wavelength
        (``factor / D``); None without a primary beam.
    pixel_scale : `~astropy.units.Quantity`, optional
        Pixel size to use instead (an angle).
    image_size : int, optional
        Side in pixels to use instead.

    Returns
    -------
    ImageGrid

    Raises
    ------
    InputError
        Bad ``pixel_scale`` / ``image_size``, or a chosen image larger than
        ``MAX_IMAGE_PIXELS`` on a side (raised before any transform).
    """
    lam = np.asarray(wavelengths_m, float)
    lam_min, lam_max = float(lam.min()), float(lam.max())
    resolution = lam_min / longest_baseline_m
    if pixel_scale is not None:
        if (
            not isinstance(pixel_scale, u.Quantity)
            or not pixel_scale.unit.is_equivalent(u.rad)
            or pixel_scale.ndim != 0
        ):
            raise InputError(f"pixel_scale: expected one angle, e.g. 0.5 * u.arcsec, got {pixel_scale!r}")
        pix = float(pixel_scale.to_value(u.rad))
        if not (np.isfinite(pix) and pix > 0):
            raise InputError(f"pixel_scale: must be a positive angle, got {pixel_scale}")
        how_pix = "pixel_scale given"
    else:
        pix = resolution / PIXELS_PER_BEAM
        how_pix = f"{PIXELS_PER_BEAM} pixels across lambda_min / B_max = {_arcsec(resolution):.4g} arcsec"
    if image_size is not None:
        if isinstance(image_size, bool) or not isinstance(image_size, (int, np.integer)) or image_size < 8:
            raise InputError(f"image_size: expected an integer number of pixels >= 8, got {image_size!r}")
        size = int(image_size)
        how_field = "image_size given"
    else:
        field = model_field_rad
        how_field = f"the model's field ({_arcsec(field):.4g} arcsec)"
        if pb_fwhm_per_lambda is not None and pb_fwhm_per_lambda * lam_max < field:
            field = pb_fwhm_per_lambda * lam_max
            how_field = f"the primary beam's half-power width ({_arcsec(field):.4g} arcsec)"
        least = 2.0 * lam_max / longest_baseline_m
        if field < least:
            field = least
            how_field = f"two synthesized beams at the longest wavelength ({_arcsec(field):.4g} arcsec)"
        size = max(MIN_IMAGE_PIXELS, int(math.ceil(field / pix - 1e-9)))
    if size > MAX_IMAGE_PIXELS:
        raise InputError(
            f"image_size: the synthesized image would be {size} x {size} pixels of "
            f"{_arcsec(pix):.4g} arcsec ({how_pix}; field: {how_field}), more than "
            f"{MAX_IMAGE_PIXELS} on a side; give a dish_diameter (the field then follows the "
            f"primary beam), a narrower frequency range, or set image_size / pixel_scale"
        )
    return ImageGrid(pix, size, f"{size} x {size} pixels of {_arcsec(pix):.4g} arcsec: {how_pix}; field {how_field}")


def default_hour_angle_step(equatorial_baseline_m, wavelength_min_m, field_rad):
    """Largest hour-angle step (rad) whose track samples do not alias inside ``field_rad``.

    ``STEP_MARGIN * lambda_min / (B_xy,max * field)`` (see the module notes).
    """
    if not equatorial_baseline_m > 0:
        return math.inf  # baselines along the polar axis do not move
    return STEP_MARGIN * wavelength_min_m / (equatorial_baseline_m * field_rad)
