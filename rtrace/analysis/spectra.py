"""Spectra of traced or observed images: SEDs, spectral indices, the tau = 1 frequency.

Works on a :class:`~rtrace.Result` (the sky-plane model) and on a SkyMap (an
image in Jy/beam with a beam, optionally with noise); the two are told apart
by their attributes, so any image with ``data``, ``model``, ``beams`` and
``pixel_scale`` works. Of the observing code only the beam kernel
(:class:`rtrace.observe.beam.BeamKernel`) is used, to bring two planes to one
beam before a spectral index.

Conventions
-----------
* Spectral index ``alpha = d ln S / d ln nu``, so optically thin free-free
  emission has ``alpha ~ -0.1`` and optically thick (Rayleigh-Jeans) emission
  ``alpha = +2`` (Condon & Ransom 2016, ch. 4, from memory).
* Pixel ``(row, col)`` of an image has its centre at pixel coordinates
  ``(col, row)``: the image centre is ``((nx - 1) / 2, (ny - 1) / 2)``.
* Flux and intensity of a Result are taken after subtracting the background
  that entered from the far side (zero unless one was traced), as
  :meth:`rtrace.Result.flux_density` does; a SkyMap's in its own convention.
  ``background="included"`` asks for the full intensity (see
  :mod:`rtrace.transfer.background`), and every SED file says which.
"""

import math

import astropy.units as u
import numpy as np

from ..errors import InputError, warn_user
from ..observe.beam import same_beam
from ..quantities import JY_PER_BEAM, jy_per_beam, parse_frequencies
from ..transfer.background import check_convention, describe

__all__ = [
    "sed",
    "sed_metadata",
    "describe_background",
    "sed_table",
    "write_sed_table",
    "spectral_index",
    "spectral_index_map",
    "SpectralIndexMap",
    "tau_unity_frequency",
    "middle_frequency_index",
    "frequency_index",
    "pixel_flux",
    "aperture_mask",
    "FREQUENCY_TOLERANCE",
    "THIN_SPECTRAL_INDEX",
    "SED_COLUMNS",
    "DEFAULT_PEAK_FRACTION",
    "DEFAULT_SNR_THRESHOLD",
]

# Columns of the SED CSV file, in order
SED_COLUMNS = ("frequency", "flux_density", "spectral_index")  # units GHz, Jy and none

# Spectral index of optically thin free-free emission at radio frequencies (the Gaunt
# factor's slow decline makes S ~ nu^-0.1; Condon & Ransom 2016, from memory).
THIN_SPECTRAL_INDEX = -0.1

# A requested frequency must lie within this fraction of a traced one: close enough that
# a typed-in "5 GHz" finds the 4.99 GHz plane, tight enough that a neighbouring plane never is.
FREQUENCY_TOLERANCE = 0.01


def is_skymap(obj):
    """True for an image in Jy/beam (duck-typed: it has ``data`` and a beam)."""
    return hasattr(obj, "data") and (hasattr(obj, "beam") or hasattr(obj, "beams"))


def is_result(obj):
    return hasattr(obj, "intensity") and hasattr(obj, "tau") and hasattr(obj, "pixel_solid_angle")


def _check_image(obj, name="obj"):
    if not (is_skymap(obj) or is_result(obj)):
        raise InputError(f"{name}: expected an rtrace Result or SkyMap, got {type(obj).__name__}")


def _frequencies_hz(obj):
    return u.Quantity(obj.frequencies).to_value(u.Hz, equivalencies=u.spectral())


def _beam_at(obj, index):
    """The beam of plane ``index`` of a SkyMap (per-plane ``beams`` win over a common ``beam``)."""
    beams = getattr(obj, "beams", None)
    if beams is not None:
        return beams[index]
    return obj.beam


def _pixel_solid_angle_sr(obj):
    omega = getattr(obj, "pixel_solid_angle", None)
    if omega is not None:
        return u.Quantity(omega).to_value(u.sr)
    return (u.Quantity(obj.pixel_scale).to_value(u.rad)) ** 2


def _beam_solid_angle_sr(obj, index):
    # radio_beam's Beam.sr is the Gaussian beam area pi theta_maj theta_min / (4 ln 2)
    # (Condon & Ransom 2016, from memory).
    return u.Quantity(_beam_at(obj, index).sr).to_value(u.sr)


def _jy_per_beam(value, name):
    """Values of a Jy/beam Quantity (a bare Jy unit is read as per beam, as FITS BUNIT often is)."""
    return jy_per_beam(value, name).to_value(JY_PER_BEAM)


def _convention(obj, background):
    """The background convention asked for: a Result's default is subtracted, a SkyMap's its own."""
    if background is not None:
        return check_convention(background)
    return getattr(obj, "background", "subtracted") if is_skymap(obj) else "subtracted"


def pixel_flux(obj, background=None):
    """Flux density of every pixel (Jy), shape ``(nfreq, ny, nx)``.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
        For a Result, ``(I - I_background) Omega_pixel``; for a SkyMap,
        ``S_beam Omega_pixel / Omega_beam`` (the observed ``data``, per-plane
        beam), so that sums over pixels are flux densities.
    background : {"subtracted", "included"}, optional
        Convention; default subtracted for a Result, the map's own
        (``obj.background``) for a SkyMap.

    Returns
    -------
    `~astropy.units.Quantity` (nfreq, ny, nx)
        Jy per pixel.
    """
    _check_image(obj)
    if is_skymap(obj):
        data = _jy_per_beam(obj.data, "obj.data")
        own = getattr(obj, "background", "subtracted")
        wanted = _convention(obj, background)
        if wanted != own and hasattr(obj, "background_per_beam"):
            level = _jy_per_beam(obj.background_per_beam, "obj.background_per_beam")[:, None, None]
            data = data + level if wanted == "included" else data - level
        omega_pix = _pixel_solid_angle_sr(obj)
        ratio = np.array([omega_pix / _beam_solid_angle_sr(obj, i) for i in range(data.shape[0])])
        return data * ratio[:, None, None] * u.Jy
    if hasattr(obj, "jy_per_pixel"):
        return obj.jy_per_pixel(_convention(obj, background))
    intensity = obj.intensity
    intensity = intensity.to_value(u.erg / (u.s * u.cm**2 * u.Hz * u.sr))
    flux_cgs = intensity * obj.pixel_solid_angle.to_value(u.sr)
    return (flux_cgs * u.erg / (u.s * u.cm**2 * u.Hz)).to(u.Jy)


# A pixel whose centre lies on a circular aperture's edge counts (the rule of the (col, row, radius)
# form); regions' "center" mask mode counts only centres strictly inside, so a circle's radius is
# widened by this relative amount before its mask is made (far below any pixel-scale meaning).
_ON_THE_EDGE = 1e-12


def _is_region(aperture):
    import regions

    return isinstance(aperture, (regions.PixelRegion, regions.SkyRegion))


def _region_mask(shape, region, wcs):
    """Boolean mask of the pixels whose centres a `regions` region holds (mode ``"center"``)."""
    import regions

    if isinstance(region, regions.SkyRegion):
        if wcs is None:
            raise InputError(
                f"aperture: a sky region ({type(region).__name__}) needs the image's WCS; "
                "give a pixel region or (center_col, center_row, radius)"
            )
        region = region.to_pixel(wcs)
    if isinstance(region, regions.CirclePixelRegion):
        region = regions.CirclePixelRegion(region.center, region.radius * (1 + _ON_THE_EDGE))
    mask = region.to_mask(mode="center")
    if isinstance(mask, list):  # a compound region can give several masks
        raise InputError("aperture: give a single region (its mask must be one piece)")
    image = mask.to_image(tuple(shape))
    return np.zeros(shape, bool) if image is None else image > 0


def aperture_mask(shape, aperture, wcs=None):
    """Boolean mask ``(ny, nx)`` of the pixels an aperture selects.

    Parameters
    ----------
    shape : tuple of int
        Image shape ``(ny, nx)``.
    aperture : None, ndarray of bool (ny, nx), `regions.PixelRegion`, `regions.SkyRegion` or (float, float, float)
        ``None``: the whole image. A boolean mask of the image shape. A
        region of the ``regions`` package (e.g. ``CirclePixelRegion``,
        ``CircleSkyRegion``): the pixels whose centres it holds (its mask in
        ``"center"`` mode; a circle also counts centres on its edge). A circle
        ``(center_col, center_row, radius)`` in pixels, the same as
        ``CirclePixelRegion(PixCoord(center_col, center_row), radius)``
        (pixel ``(row, col)`` has its centre at ``(col, row)``).
    wcs : `~astropy.wcs.WCS`, optional
        The image's celestial WCS, needed for a sky region
        (:func:`rtrace.io.fits.sky_wcs`; :func:`sed` makes it).

    Returns
    -------
    ndarray of bool (ny, nx)

    Raises
    ------
    InputError
        If the aperture is malformed or selects no pixel.
    """
    ny, nx = shape
    if aperture is None:
        return np.ones(shape, bool)
    if _is_region(aperture):
        mask = _region_mask((ny, nx), aperture, wcs)
    elif not isinstance(aperture, tuple) and np.ndim(aperture) == 2:
        aperture = np.asarray(aperture)
        if aperture.dtype != bool:
            # integer or float masks are refused: 0/1 weights and pixel values look alike.
            raise InputError(f"aperture: a mask must be boolean, got dtype {aperture.dtype}")
        if aperture.shape != (ny, nx):
            raise InputError(f"aperture: mask shape {aperture.shape} does not match the image shape {(ny, nx)}")
        mask = aperture.copy()
    else:
        mask = _region_mask((ny, nx), _circle(aperture), None)
    if not mask.any():
        raise InputError(f"aperture: selects none of the {ny}x{nx} pixels")
    return mask


def _circle(aperture):
    """``(center_col, center_row, radius)`` in pixels, checked, as a `regions.CirclePixelRegion`."""
    import regions

    try:
        values = np.asarray(aperture, dtype=float).reshape(-1)
    except (TypeError, ValueError):
        raise InputError(
            f"aperture: expected None, a boolean mask, a regions region or (center_col, center_row, "
            f"radius), got {aperture!r}"
        ) from None
    if values.shape != (3,) or not np.all(np.isfinite(values)):
        raise InputError(
            f"aperture: a circle is three finite numbers (center_col, center_row, radius) in pixels, got {aperture!r}"
        )
    col0, row0, radius = (float(v) for v in values)
    if not radius > 0:
        raise InputError(f"aperture: the circle radius must be positive, got {radius:g} pixels")
    return regions.CirclePixelRegion(regions.PixCoord(col0, row0), radius)


def _image_wcs(obj, aperture):
    """The celestial WCS of ``obj``'s image when ``aperture`` is a sky region (None otherwise)."""
    import regions

    if not isinstance(aperture, regions.SkyRegion):
        return None
    from ..io.fits import sky_wcs

    shape = np.shape(obj.data if is_skymap(obj) else obj.tau)[1:]
    return sky_wcs(shape, obj.pixel_scale, obj.sky_position)


def sed(obj, aperture=None, background=None):
    """Spectral energy distribution: the flux density in an aperture at every frequency.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
        A traced Result (background subtracted, as in ``flux_density()``) or a
        SkyMap (its observed ``data`` in Jy/beam, converted with each plane's
        beam area).
    aperture : None, ndarray of bool (ny, nx), `regions` region or (float, float, float), optional
        See :func:`aperture_mask`; default the whole image. A sky region is
        placed with the image's WCS (:func:`rtrace.io.fits.sky_wcs`).
    background : {"subtracted", "included"}, optional
        See :func:`pixel_flux`.

    Returns
    -------
    frequencies : `~astropy.units.Quantity` (nfreq,)
        Hz, in the order of the image planes.
    flux : `~astropy.units.Quantity` (nfreq,)
        Jy.
    """
    flux = pixel_flux(obj, background)
    mask = aperture_mask(flux.shape[1:], aperture, _image_wcs(obj, aperture))
    total = flux.value[:, mask].sum(axis=1)
    return _frequencies_hz(obj) * u.Hz, total * u.Jy


def _describe_aperture(aperture, shape):
    import regions

    if isinstance(aperture, regions.CircleSkyRegion):
        c = aperture.center.icrs
        return (
            f"circle centre RA {c.ra.deg:.8g} deg, Dec {c.dec.deg:.8g} deg (ICRS) radius "
            f"{aperture.radius.to_value(u.arcsec):g} arcsec"
        )
    if isinstance(aperture, regions.CirclePixelRegion):
        aperture = (aperture.center.x, aperture.center.y, aperture.radius)
    elif _is_region(aperture):
        return f"{type(aperture).__name__} (regions package)"
    if aperture is None:
        return f"whole image ({shape[0]}x{shape[1]} pixels)"
    if not isinstance(aperture, tuple) and np.ndim(aperture) == 2:
        aperture = np.asarray(aperture)
        return f"mask of {int(np.count_nonzero(aperture))} of {aperture.size} pixels"
    col, row, radius = (float(v) for v in np.asarray(aperture, float).reshape(-1))
    return f"circle centre (col {col:g}, row {row:g}) radius {radius:g} pixels"


def sed_metadata(obj, aperture=None, background=None):
    """Header lines describing where an SED came from, for :func:`write_sed_table`.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
    aperture, background : see :func:`sed`

    Returns
    -------
    dict of str
        ``source``, ``view``, ``distance``, ``aperture``, ``background``
        (and ``beam`` for a SkyMap).
    """
    _check_image(obj)
    result = obj if is_result(obj) else getattr(obj, "result", None)
    provenance = getattr(result, "provenance", {}) if result is not None else {}
    shape = np.shape(obj.data if is_skymap(obj) else obj.tau)[1:]
    meta = {"source": str(provenance.get("source", "unknown")), "view": str(provenance.get("view", "unknown"))}
    distance = getattr(obj, "distance", None)
    if distance is None and result is not None:
        distance = result.view.distance
    if distance is not None:
        meta["distance"] = f"{u.Quantity(distance).to_value(u.pc):.6g} pc"
    meta["aperture"] = _describe_aperture(aperture, shape)
    meta["background"] = describe_background(obj, background)
    if is_skymap(obj):
        beam = _beam_at(obj, 0)
        meta["beam"] = (
            f"{beam.major.to_value(u.arcsec):.4g} x {beam.minor.to_value(u.arcsec):.4g} arcsec, "
            f"PA {beam.pa.to_value(u.deg):.4g} deg (first plane)"
        )
    return meta


def describe_background(obj, background=None):
    """One line for a file header: the background convention of ``obj``'s fluxes (see :func:`pixel_flux`)."""
    _check_image(obj)
    return describe(_convention(obj, background), obj)


def spectrum_arrays(frequencies, flux):
    nu = parse_frequencies(frequencies, "frequencies")
    flux_q = u.Quantity(flux)
    values = np.atleast_1d(np.asarray(flux_q.value, float))
    if values.shape != nu.shape:
        raise InputError(f"flux: shape {values.shape} does not match frequencies shape {nu.shape}")
    return nu, values, flux_q.unit


def spectral_index(frequencies, flux):
    """Spectral index between consecutive frequencies, ``d ln S / d ln nu``.

    Parameters
    ----------
    frequencies : `~astropy.units.Quantity` (n,)
        Spectral unit (frequency, or wavelength converted to frequency).
    flux : `~astropy.units.Quantity` or array (n,)
        Flux densities (any unit: only ratios enter).

    Returns
    -------
    ndarray (n - 1,)
        ``alpha_i = ln(S_{i+1} / S_i) / ln(nu_{i+1} / nu_i)``; NaN where
        either flux is <= 0 (no power law through it).
    """
    nu, s, _ = spectrum_arrays(frequencies, flux)
    if np.any(np.diff(nu) == 0):
        raise InputError("frequencies: consecutive frequencies must differ")
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = np.log(s[1:] / s[:-1]) / np.log(nu[1:] / nu[:-1])
    alpha[(s[1:] <= 0) | (s[:-1] <= 0)] = np.nan
    return alpha


def _one_line(text):
    # a metadata item stays on one line of the file's header
    return " ".join(str(text).split())


def sed_table(frequencies, flux, metadata=None):
    """An SED as an astropy `~astropy.table.Table` with units and column descriptions.

    Columns: ``frequency`` (GHz), ``flux_density`` (Jy) and
    ``spectral_index`` (``d ln S / d ln nu`` from this frequency to the next,
    NaN on the last row). ``meta`` holds a ``title``, the ``metadata`` items
    (strings, each on one line: runs of white space become one space) and
    always a ``background`` item: the fluxes' background convention, or a
    note that the writer did not state it.

    Parameters
    ----------
    frequencies : `~astropy.units.Quantity` (n,)
        Spectral unit.
    flux : `~astropy.units.Quantity` (n,)
        Flux density (convertible to Jy).
    metadata : dict, optional
        Header items, e.g. from :func:`sed_metadata`; its ``background``
        item (:func:`describe_background`) says whether the fluxes include
        the background.

    Returns
    -------
    `astropy.table.Table`
    """
    from astropy.table import Table

    nu, _, _ = spectrum_arrays(frequencies, flux)
    try:
        s_jy = np.atleast_1d(u.Quantity(flux).to_value(u.Jy))
    except u.UnitsError:
        raise InputError(f"flux: expected a flux density (Jy), got unit '{u.Quantity(flux).unit}'") from None
    if metadata is not None and not hasattr(metadata, "items"):
        raise InputError(f"metadata: expected a mapping of header items, got {type(metadata).__name__}")
    alpha = np.full(nu.shape, np.nan)
    if nu.size > 1:
        alpha[:-1] = spectral_index(nu * u.Hz, s_jy)
    meta = {"title": "rtrace spectral energy distribution"}
    meta.update({_one_line(k): _one_line(v) for k, v in (metadata or {}).items()})
    meta.setdefault("background", "not stated by the writer (see rtrace.analysis.spectra.describe_background)")
    freq, flux_col, index = SED_COLUMNS
    table = Table(meta=meta)
    table[freq] = nu / 1e9
    table[freq].unit, table[freq].description = u.GHz, "frequency"
    table[flux_col] = s_jy
    table[flux_col].unit = u.Jy
    table[flux_col].description = "flux density (background convention: see meta 'background')"
    table[index] = alpha
    table[index].description = "d ln S / d ln nu from this frequency to the next (nan on the last row)"
    return table


def write_sed_table(path, frequencies, flux, metadata=None):
    """Write an SED as an ECSV table (:func:`sed_table`), atomically.

    ``astropy.table.Table.read(path)`` gives the columns back with their
    units and the metadata in ``meta``; below the ``#`` header lines the file
    is plain CSV (a line of column names, then comma-separated rows).

    Parameters
    ----------
    path : str or path-like
        Destination (``.ecsv`` by convention); written to a temporary file and renamed onto it.
    frequencies, flux, metadata
        As for :func:`sed_table`.

    Returns
    -------
    pathlib.Path
    """
    # imported here: rtrace.io gathers the file formats, none of which is needed until a write
    from ..io.tables import write_ecsv

    return write_ecsv(path, sed_table(frequencies, flux, metadata))


def frequency_index(obj, frequency, name="frequency"):
    """Index of the image plane at ``frequency``.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap, or `~astropy.units.Quantity`
        The image (or its frequencies).
    frequency : `~astropy.units.Quantity` or int
        A spectral Quantity within :data:`FREQUENCY_TOLERANCE` (1 %) of a
        traced frequency, or a plane index (negative counts from the end).
    name : str
        Parameter name used in error messages.

    Returns
    -------
    int
    """
    nu = (
        u.Quantity(obj).to_value(u.Hz, equivalencies=u.spectral())
        if isinstance(obj, u.Quantity)
        else _frequencies_hz(obj)
    )
    nu = np.atleast_1d(nu)
    if isinstance(frequency, (int, np.integer)) and not isinstance(frequency, bool):
        if not -nu.size <= frequency < nu.size:
            raise InputError(f"{name}: index {frequency} is out of range for {nu.size} frequencies")
        return int(frequency) % nu.size
    if not isinstance(frequency, (u.Quantity, str)):
        raise InputError(f"{name}: expected a spectral Quantity or a plane index, got {frequency!r}")
    want = parse_frequencies(frequency, name, scalar=True)
    index = int(np.argmin(np.abs(nu - want)))
    if abs(nu[index] - want) > FREQUENCY_TOLERANCE * want:
        traced = ", ".join(f"{v / 1e9:.6g}" for v in nu)
        raise InputError(
            f"{name}: {want / 1e9:.6g} GHz is not within {FREQUENCY_TOLERANCE:.0%} of a "
            f"traced frequency (traced: {traced} GHz)"
        )
    return index


def middle_frequency_index(obj):
    """Index of the plane nearest the geometric middle of the traced frequency range.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap, or `~astropy.units.Quantity`
        The image (or its frequencies).

    Returns
    -------
    int
        The plane whose ``ln nu`` is closest to ``(ln nu_min + ln nu_max) / 2``
        (the lower one on a tie).
    """
    nu = (
        u.Quantity(obj).to_value(u.Hz, equivalencies=u.spectral())
        if isinstance(obj, u.Quantity)
        else _frequencies_hz(obj)
    )
    log_nu = np.log(np.atleast_1d(nu))
    middle = 0.5 * (log_nu.min() + log_nu.max())
    distance = np.abs(log_nu - middle)
    candidates = np.flatnonzero(np.isclose(distance, distance.min(), rtol=1e-12, atol=1e-12))
    return int(min(candidates, key=lambda k: nu[k]))


class SpectralIndexMap(np.ndarray):
    """A per-pixel spectral index (an ``ndarray``) that says how it was made.

    Attributes
    ----------
    beam : `radio_beam.Beam` or None
        The resolution both planes had when they were divided (for a SkyMap
        whose two beams differ, the beam both were smoothed to); None for a
        Result (pixel resolution).
    smoothed : bool
        True if at least one plane was convolved to ``beam`` first.
    masking : str
        Plain words for the rule that blanked pixels (NaN).
    frequencies : `~astropy.units.Quantity` (2,)
        The two frequencies (Hz).
    """

    def __array_finalize__(self, obj):
        self.beam = getattr(obj, "beam", None)
        self.smoothed = getattr(obj, "smoothed", False)
        self.masking = getattr(obj, "masking", "")
        self.frequencies = getattr(obj, "frequencies", None)

    def __array_wrap__(self, array, context=None, return_scalar=False):
        # arithmetic on the map (np.isnan(amap), amap - 0.1) gives plain arrays: the
        # attributes describe this index, not what is computed from it
        result = np.asarray(array).view(np.ndarray)
        return result[()] if return_scalar else result


def _common_beam(b1, b2):
    """The smallest beam that both beams can be convolved to (one of them when it contains the other)."""
    import radio_beam
    from radio_beam.utils import BeamError

    if same_beam(b1, b2):
        return b1
    big, small = (b1, b2) if b1.sr >= b2.sr else (b2, b1)
    try:
        big.deconvolve(small)  # succeeds when ``big`` contains ``small``: no need to go larger
        return big
    except BeamError:
        return radio_beam.Beams(beams=[b1, b2]).common_beam()


def _to_beam(obj, planes, index, target):
    """Planes of image ``index`` (Jy/beam in its own beam) convolved to ``target``, in Jy per ``target`` beam.

    Jy/beam_i divided by the beam area in pixels is Jy/pixel; a unit-sum kernel
    keeps it Jy/pixel; times the target beam area in pixels it is Jy/target
    beam. The kernel is the Gaussian ``target`` deconvolved by beam_i, since
    Gaussians convolve by adding their covariance matrices (common practice,
    e.g. Condon & Ransom 2016, from memory).

    Returns the convolved planes and the factor by which the rms of the map's
    beam-correlated noise changes: ``(A_t / A_i) sqrt(sum G_t^2 / sum G_i^2)``
    with ``A`` the beam areas and ``G`` the unit-sum beams on the pixel grid
    (white noise convolved with ``G_i`` then with the kernel is white noise
    convolved with ``G_t``).
    """
    from ..observe.beam import BeamKernel

    own = _beam_at(obj, index)
    if same_beam(own, target):
        return list(planes), 1.0
    shape = planes[0].shape
    kernel_beam = target.deconvolve(own, failure_returns_pointlike=True)
    kernel = BeamKernel(kernel_beam, obj.pixel_scale, shape)
    area_ratio = u.Quantity(target.sr).to_value(u.sr) / _beam_solid_angle_sr(obj, index)
    out = [kernel.convolve(p) * area_ratio for p in planes]
    g_own, g_target = BeamKernel(own, obj.pixel_scale, shape), BeamKernel(target, obj.pixel_scale, shape)
    return out, area_ratio * math.sqrt(g_target.sum_squares / g_own.sum_squares)


# Without noise, pixels fainter than this fraction of the plane's peak (at either frequency)
# are blanked: FFT round-off (~1e-16 of the peak) and the far wings of the beam would
# otherwise give meaningless indices. 1e-3 keeps three decades of real emission.
DEFAULT_PEAK_FRACTION = 1.0e-3

# With noise, pixels whose noiseless model is below this many rms in either plane are
# blanked: below ~3 sigma the index is dominated by noise (common practice).
DEFAULT_SNR_THRESHOLD = 3.0


def spectral_index_map(obj, nu1, nu2, snr_threshold=None, *, peak_fraction=DEFAULT_PEAK_FRACTION, match_beams=True):
    """Per-pixel spectral index between two image planes, at one resolution.

    ``alpha = ln(I2 / I1) / ln(nu2 / nu1)`` with ``I`` the background-subtracted
    intensity of a Result, or for a SkyMap its observed data divided by the
    beam area. When the two planes of a SkyMap have different beams (e.g.
    ``beam_scaling="inverse-frequency"`` or the per-frequency beams of a
    synthesized map), each plane is first convolved to the smallest beam
    containing both (the larger beam when it contains the other), so that
    both intensities describe the same patch of sky; without this the index
    compares a sharp map with a blurred one and is wrong wherever the
    brightness varies on the scale of the beams.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
    nu1, nu2 : `~astropy.units.Quantity` or int
        The two planes, by frequency (within 1 % of a traced one) or index.
    snr_threshold : float, optional
        SkyMap with noise: NaN where either plane's noiseless ``model`` is
        below this many times its ``noise_rms``, both taken at the resolution
        of the index (when a plane is smoothed to the common beam, its model
        is smoothed too and its rms scaled as beam-correlated noise scales:
        by ``(A_c / A_i) sqrt(sum G_c^2 / sum G_i^2)``, about
        ``sqrt(A_c / A_i)`` in Jy per common beam).
        Default :data:`DEFAULT_SNR_THRESHOLD` (3) for a noisy SkyMap. Giving
        it for an image without noise is an error.
    peak_fraction : float, optional
        Images without noise (a Result, a noiseless SkyMap, a plane with zero
        rms): NaN where either plane is below this fraction of its own peak
        (after smoothing). Default :data:`DEFAULT_PEAK_FRACTION` (1e-3); 0
        keeps every positive pixel. Faint gas more than this far below the
        peak is blanked: lower it to see it.
    match_beams : bool, optional
        Convolve both planes to a common beam first (default). False divides
        the planes as they are (only meaningful if their beams are equal).

    Returns
    -------
    `SpectralIndexMap` (ny, nx)
        An ndarray, NaN where either intensity is <= 0 or a cut removes the
        pixel; its ``beam``, ``smoothed`` and ``masking`` attributes say at
        which resolution the index holds and what was blanked.
    """
    _check_image(obj)
    i1 = frequency_index(obj, nu1, "nu1")
    i2 = frequency_index(obj, nu2, "nu2")
    if i1 == i2:
        raise InputError(f"nu2: selects the same plane as nu1 (index {i1}); the index needs two frequencies")
    fraction = (
        float(peak_fraction)
        if isinstance(peak_fraction, (int, float, np.floating, np.integer)) and not isinstance(peak_fraction, bool)
        else None
    )
    if fraction is None or not (np.isfinite(fraction) and 0.0 <= fraction < 1.0):
        raise InputError(f"peak_fraction: expected a number in [0, 1), got {peak_fraction!r}")
    nu = _frequencies_hz(obj)
    rms, threshold = _noise_threshold(obj, snr_threshold, len(nu))
    if is_skymap(obj):
        a, b, models, noise_at, beam, smoothed = _skymap_planes(obj, i1, i2, rms, threshold, match_beams)
    else:
        a, b = pixel_flux(obj).value[i1], pixel_flux(obj).value[i2]
        models, noise_at, beam, smoothed = {}, {i1: None, i2: None}, None, False

    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = np.log(b / a) / math.log(nu[i2] / nu[i1])
    alpha[~((a > 0) & (b > 0))] = np.nan
    rules = []
    for i, plane in ((i1, a), (i2, b)):
        if threshold is not None and rms[i] > 0:
            # written as a product so that no division by the rms is needed
            alpha[models[i] < threshold * noise_at[i]] = np.nan
            rule = f"model below {threshold:g} \N{MULTIPLICATION SIGN} noise rms"
        else:
            finite = plane[np.isfinite(plane)]
            peak = float(finite.max()) if finite.size else 0.0
            alpha[plane < fraction * peak] = np.nan
            rule = f"below {fraction:g} of the peak"
        if rule not in rules:
            rules.append(rule)
    out = alpha.view(SpectralIndexMap)
    out.beam, out.smoothed, out.frequencies = beam, smoothed, np.array([nu[i1], nu[i2]]) * u.Hz
    out.masking = "blank where " + " or ".join(rules) + " at either frequency"
    return out


def _noise_threshold(obj, snr_threshold, nfreq):
    """``(noise rms per frequency or None, S/N threshold or None)`` of :func:`spectral_index_map`."""
    noise = getattr(obj, "noise_rms", None) if is_skymap(obj) else None
    rms = None if noise is None else np.broadcast_to(_jy_per_beam(noise, "obj.noise_rms"), (nfreq,))
    if snr_threshold is None:
        return rms, (None if rms is None else DEFAULT_SNR_THRESHOLD)
    threshold = float(snr_threshold)
    if not np.isfinite(threshold):
        raise InputError(f"snr_threshold: must be a finite number, got {snr_threshold!r}")
    if rms is None:
        raise InputError("snr_threshold: needs a SkyMap with noise (noise_rms is not set)")
    return rms, threshold


def _skymap_planes(obj, i1, i2, rms, threshold, match_beams):
    """A sky map's two planes for :func:`spectral_index_map`, at one resolution where asked.

    Returns ``(a, b, models, noise_at, beam, smoothed)``: the planes (background removed; per steradian
    where the beams differ and are not matched), the noiseless models and the noise rms at which the S/N
    is judged (by plane index), the beam the index holds at (None for two resolutions) and whether a plane
    was smoothed to the common beam.
    """
    noise_at = {i1: None if rms is None else rms[i1], i2: None if rms is None else rms[i2]}
    a = _jy_per_beam(obj.data[i1], "obj.data")
    b = _jy_per_beam(obj.data[i2], "obj.data")
    models = {}
    if threshold is not None:
        models = {i: _jy_per_beam(obj.model[i], "obj.model") for i in (i1, i2)}
    if getattr(obj, "background", "subtracted") == "included":
        # the index and the S/N of the source, not of the uniform background level
        level = _jy_per_beam(obj.background_per_beam, "obj.background_per_beam")
        a, b = a - level[i1], b - level[i2]
        models = {i: m - level[i] for i, m in models.items()}
    beam = _beam_at(obj, i1)
    if same_beam(_beam_at(obj, i1), _beam_at(obj, i2)):
        return a, b, models, noise_at, beam, False
    if not match_beams:
        # two resolutions: the index holds at neither
        return a / _beam_solid_angle_sr(obj, i1), b / _beam_solid_angle_sr(obj, i2), models, noise_at, None, False
    beam = _common_beam(_beam_at(obj, i1), _beam_at(obj, i2))
    planes = {i1: a, i2: b}
    for i in (i1, i2):
        smoothed, factor = _to_beam(obj, [planes[i]] + ([models[i]] if models else []), i, beam)
        planes[i] = smoothed[0]
        if models:
            # the S/N is judged at the resolution the index is made at
            models[i], noise_at[i] = smoothed[1], noise_at[i] * factor
    return planes[i1], planes[i2], models, noise_at, beam, True


def _unity_crossing(log_nu, tau):
    """Frequency (Hz) where ``tau`` (nfreq, ...) falls through 1 as frequency rises.

    ``log_nu`` is ascending. Uses the highest-frequency bracket ``tau_k >= 1 >
    tau_{k+1}``, interpolated linearly in ``ln tau`` vs ``ln nu`` (exact for a
    power law ``tau ~ nu^-2.1``); NaN where no bracket exists.
    """
    tau = np.asarray(tau, float)
    flat = tau.reshape(tau.shape[0], -1)
    out = np.full(flat.shape[1], np.nan)
    above = flat[:-1] >= 1.0
    below = flat[1:] < 1.0
    bracket = above & below  # (nfreq - 1, npix)
    has = bracket.any(axis=0)
    # highest bracketing k: reverse search
    k = bracket.shape[0] - 1 - np.argmax(bracket[::-1], axis=0)
    cols = np.nonzero(has)[0]
    k = k[cols]
    t0, t1 = flat[k, cols], flat[k + 1, cols]
    x0, x1 = log_nu[k], log_nu[k + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        frac_log = (0.0 - np.log(t0)) / (np.log(t1) - np.log(t0))
        frac_lin = (1.0 - t0) / (t1 - t0)
    # tau_{k+1} = 0 has no logarithm: interpolate tau itself there
    frac = np.where(t1 > 0, frac_log, frac_lin)
    frac = np.where(t0 == 1.0, 0.0, frac)
    out[cols] = np.exp(x0 + frac * (x1 - x0))
    return out.reshape(tau.shape[1:])


def tau_unity_frequency(result):
    """Frequency at which the optical depth falls through 1.

    Free-free optical depth falls with frequency (``tau ~ nu^-2.1``), so each
    line of sight is thick below and thin above this frequency.

    Parameters
    ----------
    result : `~rtrace.Result`
        (A SkyMap is accepted for its underlying ``result``.) Needs at least
        two frequencies.

    Returns
    -------
    per_pixel : `~astropy.units.Quantity` (ny, nx)
        Hz. Interpolated in ``ln tau`` vs ``ln nu`` between the traced
        frequencies that bracket ``tau = 1``; where several brackets exist the
        highest is used (above it the pixel is thin at every traced
        frequency). NaN where ``tau`` never falls through 1 within the traced
        range; when that is every pixel a PhysicsRangeWarning says whether
        all is thin or thick over the traced range.
    whole_source : `~astropy.units.Quantity`
        Hz. The frequency where the intensity-weighted mean optical depth
        ``<tau>(nu) = sum(tau w) / sum(w)`` falls through 1, with weights
        ``w = max(I - I_background, 0)`` over all pixels: the optical depth of
        the gas that makes the flux, so ``<tau> = 1`` marks the turnover of
        the integrated spectrum. Same interpolation; NaN if not bracketed
        (with a PhysicsRangeWarning).
    """
    if not is_result(result) and hasattr(result, "result"):
        result = result.result
    if not is_result(result):
        raise InputError(f"result: expected an rtrace Result, got {type(result).__name__}")
    nu = _frequencies_hz(result)
    if nu.size < 2:
        raise InputError("result: needs at least two frequencies to bracket tau = 1")
    order = np.argsort(nu)
    if np.any(np.diff(nu[order]) == 0):
        raise InputError("result: frequencies must be distinct")
    log_nu = np.log(nu[order])
    tau = np.asarray(result.tau, float)[order]
    per_pixel = _unity_crossing(log_nu, tau)
    weight = np.clip(pixel_flux(result).value[order], 0.0, None)
    wsum = weight.sum(axis=(1, 2))
    with np.errstate(divide="ignore", invalid="ignore"):
        mean_tau = np.where(wsum > 0, (tau * weight).sum(axis=(1, 2)) / wsum, np.nan)
    whole = float(_unity_crossing(log_nu, mean_tau[:, None])[0])
    if np.all(np.isnan(per_pixel)):
        _warn_no_bracket(nu[order], tau)
    elif np.isnan(whole):
        thin = bool(np.all(mean_tau[np.isfinite(mean_tau)] < 1.0)) if np.isfinite(mean_tau).any() else None
        state = {
            True: "thin (<tau> < 1) at every traced frequency",
            False: "thick or not falling through 1 within the traced frequencies",
            None: "without flux (no weight for <tau>)",
        }[thin]
        warn_user(
            f"turnover_frequency: the whole source is {state} ({nu[order][0]:.4g} to {nu[order][-1]:.4g} "
            "Hz), so its turnover is NaN; trace a wider frequency range"
        )
    return per_pixel * u.Hz, whole * u.Hz


def _warn_no_bracket(nu, tau):
    """Warn that no pixel's tau falls through 1 between the traced frequencies ``nu`` (ascending)."""
    flat = tau.reshape(tau.shape[0], -1)
    n_thin = int(np.count_nonzero(np.all(flat < 1.0, axis=0)))
    n_thick = int(np.count_nonzero(np.all(flat >= 1.0, axis=0)))
    n_other = flat.shape[1] - n_thin - n_thick
    if n_thin == flat.shape[1]:
        state = (
            f"everything is optically thin: tau < 1 at every traced frequency in all {n_thin} pixels "
            f"(largest tau {float(flat.max()):.3g}); the turnover lies below "
            f"{nu[0]:.4g} Hz, so trace lower frequencies"
        )
    elif n_thick == flat.shape[1]:
        state = (
            f"everything is optically thick: tau >= 1 at every traced frequency in all {n_thick} pixels "
            f"(smallest tau {float(flat.min()):.3g}); the turnover lies above {nu[-1]:.4g} Hz, so trace "
            "higher frequencies"
        )
    else:
        state = (
            f"{n_thin} pixel(s) are thin at every traced frequency, {n_thick} thick at every one, "
            f"{n_other} cross 1 only while tau rises with frequency"
        )
    warn_user(
        f"turnover_frequency: no traced frequency pair ({nu[0]:.4g} to {nu[-1]:.4g} Hz) brackets tau = 1 "
        f"in any pixel, so every value is NaN: {state}"
    )
