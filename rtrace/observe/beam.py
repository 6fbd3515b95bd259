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
* The kernel is radio-beam's ``Beam.as_kernel``, sampled on the image's
  pixel grid and normalised to unit sum, so convolving a Jy/pixel image
  with it conserves flux exactly (up to what spills over the image edge). A beam narrow compared with a pixel
  is integrated over each pixel (supersampled) instead of point-sampled,
  so its shape on the grid is still right.
* A beam whose FWHM major axis is wider than the image's narrower side is
  refused (:func:`check_beam_fits_field`): even a point source at the centre
  would keep under 58% of its flux on the image (the share inside a square of
  side FWHM is ``erf(sqrt(ln 2))^2 = 0.579`` for a circular Gaussian), and
  diffuse emission far less. Above half that side a warning says so (a
  central point source then keeps ``erf(2 sqrt(ln 2))^2 = 96.4%`` at best).
* The kernel's bytes and those of its padded FFT are known before either is
  made (:func:`kernel_geometry`, :func:`rtrace.memory.fft_kernel_bytes`): a
  kernel that would not fit in memory is an InputError naming the beam.
"""

import math

import astropy.units as u
import numpy as np
import radio_beam
import scipy.fft

from ..errors import InputError, warn_user
from ..memory import check_memory, fft_kernel_bytes

__all__ = [
    "BeamKernel",
    "describe_beam",
    "validate_beam",
    "beams_for_frequencies",
    "BEAM_SCALINGS",
    "KERNEL_HALF_WIDTH_SIGMA",
    "SUPERSAMPLE_BELOW_SIGMA",
    "kernel_geometry",
    "check_beam_fits_field",
    "BEAM_FIELD_ERROR",
    "BEAM_FIELD_WARNING",
    "same_beam",
    "SAME_BEAM_RTOL",
    "beam_cards",
]

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

#: Two beams whose axes (and, when elliptical, position angles in radians) agree to this relative
#: tolerance are the same beam (:func:`same_beam`): no convolution between them, one ``BMAJ`` for a cube.
SAME_BEAM_RTOL = 1e-6

#: A beam FWHM (major axis) above this fraction of the image's narrower side is an InputError.
BEAM_FIELD_ERROR = 1.0
#: Above this fraction, a warning: a point source at the centre loses more than 3.6% of its flux.
BEAM_FIELD_WARNING = 0.5


def kernel_geometry(beam, pixel_arcsec, image_shape):
    """Sizes of the kernel a `BeamKernel` would build, computed without allocating anything.

    Parameters
    ----------
    beam : `radio_beam.Beam`
    pixel_arcsec : float
        Pixel side in arcsec.
    image_shape : (int, int)

    Returns
    -------
    dict
        ``sigma_pixels`` (major, minor), ``supersample``, ``half`` and ``fft_shape``.
    """
    sig_maj = beam.major.to_value(u.arcsec) / pixel_arcsec / _FWHM_PER_SIGMA
    sig_min = beam.minor.to_value(u.arcsec) / pixel_arcsec / _FWHM_PER_SIGMA
    half = max(1, int(math.ceil(KERNEL_HALF_WIDTH_SIGMA * sig_maj)))
    ny, nx = (int(n) for n in image_shape)
    fft_shape = (scipy.fft.next_fast_len(ny + 2 * half, real=True), scipy.fft.next_fast_len(nx + 2 * half, real=True))
    return dict(
        sigma_pixels=(sig_maj, sig_min), supersample=_supersample_factor(sig_min), half=half, fft_shape=fft_shape
    )


def check_beam_fits_field(beams, pixel_scale, image_shape, name="beam", frequencies_hz=None, image="image"):
    """Refuse a beam wider than the image; warn when it is wider than half of it.

    Parameters
    ----------
    beams : list of `radio_beam.Beam`
        The beam at each frequency (the widest is checked).
    pixel_scale : `~astropy.units.Quantity`
        Pixel side (angle).
    image_shape : (int, int)
        ``(ny, nx)``.
    name : str
        The field named by the message (``"beam"``, ``"[beam].major"``, ``"BMAJ"``).
    frequencies_hz : array-like, optional
        The frequency of each beam, to say where the widest one applies.
    image : str
        What the messages call the image (``"image"``, ``"model"``).

    Raises
    ------
    InputError
        If the widest beam's FWHM major axis exceeds ``BEAM_FIELD_ERROR`` times
        the image's narrower side (see the module docstring for why there).
    """
    pix = u.Quantity(pixel_scale).to_value(u.arcsec)
    field = min(int(n) for n in image_shape) * pix
    majors = [b.major.to_value(u.arcsec) for b in beams]
    k = int(np.argmax(majors))
    major = majors[k]
    at = "" if frequencies_hz is None else f" at {float(frequencies_hz[k]) / 1e9:.4g} GHz"
    ny, nx = (int(n) for n in image_shape)
    if major > BEAM_FIELD_ERROR * field:
        raise InputError(
            f"{name}: the beam's FWHM ({major:.6g} arcsec{at}) is wider than the {image} "
            f"({ny} x {nx} pixels of {pix:.4g} arcsec, {field:.6g} arcsec across its narrower "
            f"side): most of the flux would be spread outside the {image} (a point source at its "
            "centre would keep under 58%); widen the view (a larger width at the same or a larger "
            "npix) or use a smaller beam"
        )
    if major > BEAM_FIELD_WARNING * field:
        warn_user(
            f"{name}: the beam's FWHM ({major:.6g} arcsec{at}) is more than half the {image}'s narrower "
            f"side ({field:.6g} arcsec): convolution spreads a noticeable share of the flux outside "
            f"the {image} (over 3.6% even for a point source at the centre); widen the view for fluxes "
            "and SEDs",
            UserWarning,
        )


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


def _gaussian_on_grid(beam, pixel_scale, half, supersample):
    """Unit-sum elliptical Gaussian of ``beam`` on a (2 half + 1)^2 pixel grid, (row, column) order.

    The Gaussian is radio-beam's ``Beam.as_kernel(pixel_scale)`` (an astropy
    ``Gaussian2D`` with x along columns and y along rows and its major axis
    ``pa + 90 deg`` from +x, which is the orientation of the module docstring:
    ``pa = 0`` along +row, ``pa = 90 deg`` along -column). With ``supersample == 1`` its
    point-sampled array is used as is; otherwise the same model is averaged
    over ``supersample^2`` sub-pixel centres (the midpoint rule of astropy's
    ``mode="oversample"``), one sub-grid at a time so the memory stays that of
    the kernel.
    """
    side = 2 * half + 1
    sampled = beam.as_kernel(pixel_scale, x_size=side, y_size=side)
    if supersample == 1:
        kernel = np.array(sampled.array, dtype=float)
    else:
        model = sampled.model
        params = model.parameters  # the model's own evaluate: no input checks in the sub-pixel loop
        offs = np.arange(-half, half + 1, dtype=float)
        kernel = np.zeros((side, side))
        sub = (np.arange(supersample) + 0.5) / supersample - 0.5  # sub-pixel offsets
        for dr_sub in sub:
            rows = (offs + dr_sub)[:, None]
            for dc_sub in sub:
                kernel += model.evaluate((offs + dc_sub)[None, :], rows, *params)
    return kernel / kernel.sum()


def same_beam(a, b):
    """Whether two beams are the same to the package's one tolerance, `SAME_BEAM_RTOL`.

    Major and minor axes must agree to a relative ``SAME_BEAM_RTOL``; for an
    elliptical beam (axes differing by more than that) the position angles
    must agree, modulo 180 deg, to ``SAME_BEAM_RTOL`` radians (a round beam's
    angle is immaterial). Arcsecond-sized beams that radio-beam's
    ``Beam.__eq__`` calls equal (to an absolute 1e-10 deg) are equal here too;
    the relative rule keeps the same meaning for milliarcsecond and degree beams.

    Parameters
    ----------
    a, b : `radio_beam.Beam`

    Returns
    -------
    bool
    """
    ma, mb = a.major.to_value(u.arcsec), b.major.to_value(u.arcsec)
    na, nb = a.minor.to_value(u.arcsec), b.minor.to_value(u.arcsec)
    if not (math.isclose(ma, mb, rel_tol=SAME_BEAM_RTOL) and math.isclose(na, nb, rel_tol=SAME_BEAM_RTOL)):
        return False
    if math.isclose(ma, na, rel_tol=SAME_BEAM_RTOL):
        return True
    dpa = (a.pa.to_value(u.deg) - b.pa.to_value(u.deg)) % 180.0
    return math.radians(min(dpa, 180.0 - dpa)) <= SAME_BEAM_RTOL


_BEAM_CARD_COMMENTS = {
    "BMAJ": "[deg] beam major axis (FWHM)",
    "BMIN": "[deg] beam minor axis (FWHM)",
    "BPA": "[deg] beam position angle, north through east",
}


def beam_cards(beam):
    """The ``BMAJ``, ``BMIN``, ``BPA`` header cards of ``beam`` (degrees), with comments.

    The values are radio-beam's ``Beam.to_header_keywords()`` (what
    ``Beam.attach_to_header`` writes and ``Beam.from_fits_header`` reads back).

    Parameters
    ----------
    beam : `radio_beam.Beam`

    Returns
    -------
    list of (str, float, str)
        ``(keyword, value, comment)``, ready for ``header.extend`` or ``header[key] = (value, comment)``.
    """
    return [(key, float(value), _BEAM_CARD_COMMENTS[key]) for key, value in beam.to_header_keywords().items()]


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
    name : str, optional
        The field named by errors (default ``"beam"``).
    max_memory : int, optional
        Bytes the kernel and its FFT may take; the machine's available memory
        is always checked.

    Raises
    ------
    InputError
        A bad beam or pixel scale; a kernel and padded FFT that would not fit
        in memory (checked before either is made).

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

    def __init__(self, beam, pixel_scale, image_shape, *, name="beam", max_memory=None):
        validate_beam(beam, name)
        pix = u.Quantity(pixel_scale).to_value(u.arcsec)
        if not (np.isfinite(pix) and pix > 0):
            raise InputError(f"pixel_scale: must be a positive angle, got {pixel_scale}")
        self.beam = beam
        self.image_shape = tuple(int(n) for n in image_shape)
        geo = kernel_geometry(beam, pix, self.image_shape)
        self.sigma_pixels = geo["sigma_pixels"]
        self.supersample = geo["supersample"]
        self.half = geo["half"]
        held, transient = fft_kernel_bytes(self.half, geo["fft_shape"])
        side = 2 * self.half + 1
        check_memory(
            held + transient,
            field=name,
            budget=max_memory,
            what=(
                f"a beam kernel of {side} x {side} pixels (FWHM {beam.major.to_value(u.arcsec):.6g} "
                f"arcsec on {pix:.4g} arcsec pixels) and its padded FFT of {geo['fft_shape'][0]} x "
                f"{geo['fft_shape'][1]}"
            ),
            hint="use a smaller beam, or coarser pixels (a smaller npix over the same width)",
        )
        self.kernel = _gaussian_on_grid(beam, pix * u.arcsec, self.half, self.supersample)
        self.sum_squares = float(np.sum(self.kernel**2))
        # radio_beam's sr is the Gaussian solid angle pi bmaj bmin / (4 ln 2)
        self.area_pixels = float(beam.sr.to_value(u.sr) / ((pix * u.arcsec).to_value(u.rad)) ** 2)
        self.fft_shape = geo["fft_shape"]
        # The kernel's centre goes to index (0, 0) with negative offsets wrapped to the far
        # end: the product of transforms is then the centred convolution, and the padding
        # of at least 2 half keeps the image's own wrap-around out of the first ny x nx.
        wrapped = np.zeros(self.fft_shape)
        h = self.half
        idx_r = np.arange(-h, h + 1) % self.fft_shape[0]
        idx_c = np.arange(-h, h + 1) % self.fft_shape[1]
        wrapped[np.ix_(idx_r, idx_c)] = self.kernel
        self.kernel_ft = scipy.fft.rfft2(wrapped)  # the one transform of this beam's kernel

    def convolve(self, image):
        """Linear convolution of ``image`` (..., ny, nx) with the kernel, zero outside the image.

        Returns an array of the same shape; flux that the kernel spreads over
        the image edge is lost (the field of view ends there).
        """
        image = np.asarray(image, float)
        ny, nx = self.image_shape
        ft = scipy.fft.rfft2(image, s=self.fft_shape)  # zero padded
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
    return (
        f"major={beam.major.to_value(u.arcsec):.6g} arcsec minor={beam.minor.to_value(u.arcsec):.6g} arcsec "
        f"pa={beam.pa.to_value(u.deg):.6g} deg"
    )
