"""FITS images and cubes of rtrace results and sky maps, with a celestial + frequency WCS.

Layout and header conventions
-----------------------------
* The data array is ``(nfreq, ny, nx)`` in memory, i.e. FITS ``NAXIS1 = nx``
  (columns, toward west), ``NAXIS2 = ny`` (rows, toward north),
  ``NAXIS3 = nfreq``; stored as 32-bit floats (``BITPIX = -32``).
* Celestial axes ``RA---SIN`` / ``DEC--SIN``: an rtrace view is an
  orthographic (parallel-ray) projection, which is what the SIN projection
  with ``PV2_1 = PV2_2 = 0`` describes (Calabretta & Greisen 2002, A&A 395,
  1077, sec. 5.1.5). ``CDELT1 = -pixel scale`` because the column index
  grows toward west; ``CRPIX = n/2 + 0.5`` puts the reference point on the
  image centre (pixel centres at integer 1-based coordinates, Greisen &
  Calabretta 2002, A&A 395, 1061, sec. 2.1). ``RADESYS = 'ICRS'`` and
  ``CRVAL1/2`` are the ICRS coordinates of the view's sky position; no
  ``EQUINOX``, which ICRS does not use.
* Spectral axis ``FREQ`` in Hz. ``SPECSYS = 'SOURCE'``: a model has no
  velocity relative to any observer, the frequencies are those emitted in
  the rest frame of the snapshot, which is the "source rest frame" of
  Greisen et al. 2006, A&A 446, 747, table 12 (from memory). Uniformly spaced
  frequencies are written as a linear axis (``CDELT3`` the spacing; a
  single plane gets ``CDELT3 = 1 Hz`` because a monochromatic plane has no
  width and ``CDELTi`` must not be zero). Non-uniform frequencies use the
  tabular algorithm ``FREQ-TAB`` (Greisen et al. 2006, sec. 6, from
  memory): a binary table extension ``WCS-TAB`` holds every plane's
  frequency, so the world coordinate of every plane is exact. Read such a
  file with ``astropy.wcs.WCS(header, fobj=hdulist)``; without ``fobj``
  astropy refuses (a loud error rather than silently wrong frequencies).
* ``BUNIT`` in the units syntax of the FITS standard (Pence et al. 2010,
  A&A 524, A42, sec. 4.3). ``pixel`` and ``beam`` are in that standard's
  table of additional allowed units (from memory; astropy's FITS unit
  parser accepts both), so per-pixel and per-beam flux densities are
  written as ``'Jy/pixel'`` and ``'Jy/beam'``, the spelling radio software
  reads. Units are case-sensitive, so the upper-case ``'JY/PIXEL'`` would
  not be standard. Dimensionless data (optical depth) carry no ``BUNIT``.
  ``RTQUANT`` names the quantity.
* Beam-convolved data: ``BMAJ``, ``BMIN``, ``BPA`` in degrees (common
  practice in radio astronomy). If the beam changes from plane to plane a
  binary table extension ``BEAMS`` lists one row per plane (``BMAJ``,
  ``BMIN`` in arcsec, ``BPA`` in deg, ``CHAN``, ``POL``), the common
  practice for radio cubes that ``radio_beam.Beams.from_fits_bintable``
  reads; the header keywords then hold the reference beam.
* Background convention (:mod:`rtrace.transfer.background`): ``BKGSUB``
  (T: no background in the data, empty sky reads 0; F: the background
  intensity is included), ``BKGKIND`` (``NONE``, ``CMB``, ``BLACKBODY``,
  ``INTENSITY``) and ``BKGTEMP`` (K) on every file rtrace writes.
* Provenance: ``ORIGIN = 'rtrace'``, ``DATE`` (UTC, when written),
  ``RTVERS``, ``SNAPSRC``, ``SNAPSHA``, ``VIEW``, ``IONIZ``, ``BKGND``,
  ``BEAM``, ``NOISE`` (strings longer than one card continue on
  ``CONTINUE`` cards); any other provenance entry becomes a ``HISTORY`` line.

Section and table numbers of the papers above are cited from memory.
All writes go through :func:`rtrace.io.atomic.atomic_path`.
"""

import datetime
import os
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs import WCS

from ..errors import InputError
from ..quantities import positive_scalar
from ..transfer.background import header_cards, resolve_convention
from .atomic import atomic_path

__all__ = ["sky_wcs", "wcs_header", "write_cube", "write_result", "write_skymap",
           "RESULT_QUANTITIES"]

RESULT_QUANTITIES = ("intensity", "tau", "emission_measure", "brightness_temperature")

# EXTNAME and column name of the -TAB frequency table.
_TAB_EXTNAME = "WCS-TAB"
_TAB_COLUMN = "COORDS"
# Relative tolerance below which a frequency list counts as uniformly spaced:
# the linear axis then reproduces every frequency to ~float64 rounding.
_UNIFORM_RTOL = 1e-12

# Provenance keys -> header keywords (8 characters at most: plain cards, so
# long values can use CONTINUE).
_PROVENANCE_KEYWORDS = {
    "source": ("SNAPSRC", "snapshot source"),
    "checksum": ("SNAPSHA", "SHA-256 of the traced snapshot fields"),
    "view": ("VIEW", "view geometry"),
    "ionization": ("IONIZ", "ionization model"),
    "background": ("BKGND", "background entering the far side"),
    "beam": ("BEAM", "beam applied"),
    "noise": ("NOISE", "noise added"),
}

# Preferred BUNIT spellings for the units radio software expects to see
# written this way; everything else uses astropy's FITS-standard string.
_PREFERRED_BUNIT = (
    (u.Jy / u.beam, "Jy/beam"),
    (u.Jy / u.pix, "Jy/pixel"),
    (u.Jy / u.sr, "Jy/sr"),
)


# --------------------------------------------------------------------------------------------
# argument checks
# --------------------------------------------------------------------------------------------

def _frequencies_hz(frequencies, name="frequencies"):
    if frequencies is None:
        return None
    q = u.Quantity(frequencies)
    if not q.unit.is_equivalent(u.Hz, equivalencies=u.spectral()):
        raise InputError(f"{name}: expected a frequency (or wavelength), got unit '{q.unit}'")
    nu = np.atleast_1d(q.to_value(u.Hz, equivalencies=u.spectral())).astype(float)
    if nu.ndim != 1 or nu.size == 0 or not np.all(np.isfinite(nu) & (nu > 0)):
        raise InputError(f"{name}: must be a non-empty 1D sequence of finite positive frequencies")
    return nu


def _pixel_scale_deg(pixel_scale):
    return positive_scalar(pixel_scale, u.deg, "pixel_scale", "an angle (square pixels)")


def _icrs(sky_position):
    if not isinstance(sky_position, SkyCoord):
        raise InputError("sky_position: expected an astropy SkyCoord")
    if not sky_position.isscalar:
        raise InputError(f"sky_position: expected a single position, got shape {sky_position.shape}")
    return sky_position.icrs


def _image_shape(shape):
    try:
        ny, nx = (int(v) for v in shape)
    except (TypeError, ValueError):
        raise InputError(f"shape: expected (ny, nx), got {shape!r}") from None
    if ny < 1 or nx < 1:
        raise InputError(f"shape: image size must be positive, got {shape!r}")
    return ny, nx


def _uniform_step(nu):
    """Spacing of ``nu`` if it is uniform (1 Hz for a single plane), else None."""
    if nu.size == 1:
        return 1.0
    step = (nu[-1] - nu[0]) / (nu.size - 1)
    if step == 0:
        return None
    linear = nu[0] + step * np.arange(nu.size)
    if np.max(np.abs(linear - nu)) <= _UNIFORM_RTOL * np.max(np.abs(nu)):
        return step
    return None


# --------------------------------------------------------------------------------------------
# WCS
# --------------------------------------------------------------------------------------------

def wcs_header(shape, pixel_scale, sky_position, frequencies=None):
    """WCS keywords of an rtrace image and, for non-uniform frequencies, the -TAB table.

    Parameters
    ----------
    shape : tuple of int
        Image size ``(ny, nx)``.
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a (square) pixel.
    sky_position : `~astropy.coordinates.SkyCoord`
        Sky position of the image centre (any frame; written in ICRS).
    frequencies : `~astropy.units.Quantity` (nfreq,), optional
        Frequency of each plane; ``None`` gives a purely celestial header.

    Returns
    -------
    header : `~astropy.io.fits.Header`
        ``NAXIS*`` and WCS keywords.
    table : `~astropy.io.fits.BinTableHDU` or None
        The ``WCS-TAB`` extension the header refers to (non-uniform
        frequencies only).
    """
    ny, nx = _image_shape(shape)
    scale = _pixel_scale_deg(pixel_scale)
    pos = _icrs(sky_position)
    nu = _frequencies_hz(frequencies)
    naxis = 2 if nu is None else 3

    hdr = fits.Header()
    hdr["NAXIS"] = naxis
    hdr["NAXIS1"] = nx
    hdr["NAXIS2"] = ny
    if naxis == 3:
        hdr["NAXIS3"] = nu.size
    hdr["WCSAXES"] = (naxis, "number of WCS axes")
    hdr["CTYPE1"] = ("RA---SIN", "orthographic projection: parallel rays")
    hdr["CTYPE2"] = ("DEC--SIN", "orthographic projection: parallel rays")
    hdr["CUNIT1"] = "deg"
    hdr["CUNIT2"] = "deg"
    # 1-based FITS pixel centres are integers; the image centre lies at
    # 0-based continuous coordinate n/2 from the corner, i.e. at n/2 + 0.5.
    hdr["CRPIX1"] = (nx / 2 + 0.5, "image centre")
    hdr["CRPIX2"] = (ny / 2 + 0.5, "image centre")
    hdr["CDELT1"] = (-scale, "[deg] negative: column index grows toward west")
    hdr["CDELT2"] = (scale, "[deg] row index grows toward north")
    hdr["CRVAL1"] = (float(pos.ra.to_value(u.deg)), "[deg] RA of the image centre")
    hdr["CRVAL2"] = (float(pos.dec.to_value(u.deg)), "[deg] Dec of the image centre")
    hdr["RADESYS"] = ("ICRS", "celestial reference system")
    table = None
    if naxis == 3:
        step = _uniform_step(nu)
        hdr["CUNIT3"] = "Hz"
        if step is not None:
            hdr["CTYPE3"] = ("FREQ", "frequency, linear")
            hdr["CRPIX3"] = 1.0
            hdr["CRVAL3"] = (float(nu[0]), "[Hz] frequency of plane 1")
            hdr["CDELT3"] = (float(step), "[Hz] plane spacing")
        else:
            # Tabular axis (Greisen et al. 2006, sec. 6): with CRPIX3 = CDELT3 =
            # CRVAL3 = 1 the intermediate coordinate of plane p is p itself,
            # which indexes the coordinate array (default index vector 1..K).
            hdr["CTYPE3"] = ("FREQ-TAB", "frequency, tabulated in WCS-TAB")
            hdr["CRPIX3"] = 1.0
            hdr["CRVAL3"] = 1.0
            hdr["CDELT3"] = 1.0
            hdr["PS3_0"] = (_TAB_EXTNAME, "EXTNAME of the frequency table")
            hdr["PS3_1"] = (_TAB_COLUMN, "column of the frequency array")
            hdr["PV3_1"] = (1, "EXTVER of the frequency table")
            hdr["PV3_2"] = (1, "EXTLEVEL of the frequency table")
            hdr["PV3_3"] = (1, "axis number in the coordinate array")
            column = fits.Column(name=_TAB_COLUMN, format=f"{nu.size}D", dim=f"(1,{nu.size})",
                                 unit="Hz", array=nu.reshape(1, nu.size, 1))
            table = fits.BinTableHDU.from_columns([column], name=_TAB_EXTNAME)
            table.header["EXTVER"] = 1
            table.header["EXTLEVEL"] = 1
        # A model has no velocity relative to any observer: the frequencies
        # are rest-frame (emitted) frequencies of the snapshot.
        hdr["SPECSYS"] = ("SOURCE", "source rest frame: a model has no velocity")
    return hdr, table


def sky_wcs(shape, pixel_scale, sky_position, frequencies=None):
    """World coordinate system of an rtrace image or cube.

    Parameters
    ----------
    shape : tuple of int
        Image size ``(ny, nx)``.
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a (square) pixel.
    sky_position : `~astropy.coordinates.SkyCoord`
        Sky position of the image centre (converted to ICRS).
    frequencies : `~astropy.units.Quantity` (nfreq,), optional
        Frequencies of the planes. ``None`` gives a 2-axis celestial WCS.

    Returns
    -------
    `~astropy.wcs.WCS`
        Axes ``RA---SIN``, ``DEC--SIN`` and (with frequencies) ``FREQ`` in
        Hz, linear for uniformly spaced frequencies, ``FREQ-TAB`` with the
        table attached otherwise; the pixel shape is set.
    """
    hdr, table = wcs_header(shape, pixel_scale, sky_position, frequencies)
    if table is None:
        return WCS(hdr)
    return WCS(hdr, fobj=fits.HDUList([fits.PrimaryHDU(), table]))


# --------------------------------------------------------------------------------------------
# header pieces
# --------------------------------------------------------------------------------------------

def _bunit(unit):
    """FITS-standard BUNIT string for ``unit``; None for dimensionless."""
    unit = u.Unit(unit)
    if unit == u.dimensionless_unscaled:
        return None
    for ref, text in _PREFERRED_BUNIT:
        if unit == ref:
            return text
    try:
        return unit.to_string(format="fits")
    except (ValueError, u.UnitsError) as exc:
        raise InputError(f"data: unit '{unit}' cannot be written in FITS syntax ({exc})") from None


def _ascii(text):
    """FITS header strings are printable ASCII (Pence et al. 2010, sec. 4.2.1)."""
    return "".join(ch if 32 <= ord(ch) <= 126 else "?" for ch in str(text))


def _comment_fits(text, comment):
    """Whether a string card keeps its comment without truncation (no VerifyWarning).

    A value of up to 68 characters (quotes doubled) sits on one 80-character
    card after ``KEYWORD = `` and needs ``' / '`` plus the comment to fit;
    a longer value continues on CONTINUE cards, where astropy places the
    comment on a card of its own.
    """
    quoted = max(len(text.replace("'", "''")) + 2, 10)
    return quoted > 70 or 10 + quoted + 3 + len(comment) <= 80


def _add_provenance(hdr, provenance):
    from .. import __version__

    hdr["ORIGIN"] = ("rtrace", "software that wrote this file")
    hdr["DATE"] = (datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S"),
                   "UTC date the file was written")
    hdr["RTVERS"] = (__version__, "rtrace version")
    for key, value in (provenance or {}).items():
        if value is None:
            continue
        if key in _PROVENANCE_KEYWORDS:
            keyword, comment = _PROVENANCE_KEYWORDS[key]
            text = _ascii(value)
            hdr[keyword] = (text, comment) if _comment_fits(text, comment) else text
        else:
            hdr.add_history(_ascii(f"{key}: {value}"))


def _beam_values(beam, name):
    try:
        major = float(u.Quantity(beam.major).to_value(u.deg))
        minor = float(u.Quantity(beam.minor).to_value(u.deg))
        pa = float(u.Quantity(beam.pa).to_value(u.deg))
    except (AttributeError, u.UnitsError, TypeError):
        raise InputError(f"{name}: expected a radio_beam.Beam (major, minor, pa angles)") from None
    if not (np.isfinite(major) and np.isfinite(minor) and np.isfinite(pa) and major > 0 and minor > 0):
        raise InputError(f"{name}: beam axes must be finite and positive, got major={major} deg, "
                         f"minor={minor} deg, pa={pa} deg")
    return major, minor, pa


def _same_beam(a, b):
    """Equal within float64 rounding; the PA of a circular beam is irrelevant."""
    close = np.isclose(a[0], b[0], rtol=1e-12, atol=0) and np.isclose(a[1], b[1], rtol=1e-12, atol=0)
    if not close:
        return False
    if np.isclose(a[0], a[1], rtol=1e-12, atol=0):
        return True
    dpa = (a[2] - b[2]) % 180.0
    return min(dpa, 180.0 - dpa) <= 1e-10


def _beams_table(values):
    """Per-plane beam table, read by ``radio_beam.Beams.from_fits_bintable``."""
    arr = np.asarray(values, float)
    n = len(arr)
    columns = [
        # float64 columns: radio_beam compares beams to 1e-10 deg, which
        # float32 arcsec values would not reproduce.
        fits.Column(name="BMAJ", format="D", unit="arcsec", array=arr[:, 0] * 3600.0),
        fits.Column(name="BMIN", format="D", unit="arcsec", array=arr[:, 1] * 3600.0),
        fits.Column(name="BPA", format="D", unit="deg", array=arr[:, 2]),
        fits.Column(name="CHAN", format="J", array=np.arange(n, dtype=np.int32)),
        fits.Column(name="POL", format="J", array=np.zeros(n, dtype=np.int32)),
    ]
    table = fits.BinTableHDU.from_columns(columns, name="BEAMS")
    table.header["NCHAN"] = (n, "number of planes")
    table.header["NPOL"] = (1, "number of polarizations")
    return table


# --------------------------------------------------------------------------------------------
# writers
# --------------------------------------------------------------------------------------------

def write_cube(path, data, frequencies, pixel_scale, sky_position, beams=None, provenance=None,
               overwrite=True, *, reference_beam=None, quantity=None, background=None):
    """Write an image or cube with its WCS, beam and provenance to a FITS file.

    Parameters
    ----------
    path : str or os.PathLike
        Output file; written atomically.
    data : `~astropy.units.Quantity` (nfreq, ny, nx) or (ny, nx)
        The planes; stored as float32 with ``BUNIT`` from ``data.unit``. A
        2D map gets a degenerate frequency axis of length 1 at
        ``frequencies[0]``, or no frequency axis if ``frequencies`` is None.
    frequencies : `~astropy.units.Quantity` (nfreq,) or None
        Frequency of each plane. None only for 2D data (a frequency-
        independent map such as the emission measure).
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a pixel.
    sky_position : `~astropy.coordinates.SkyCoord`
        Sky position of the image centre.
    beams : `radio_beam.Beam` or sequence of `radio_beam.Beam`, optional
        Beam of the data, one for all planes or one per plane.
    provenance : dict, optional
        Provenance entries (keys ``source``, ``checksum``, ``view``,
        ``ionization``, ``background``, ``beam``, ``noise`` get their own
        keywords; others become HISTORY lines).
    overwrite : bool, optional
        Replace an existing file (default True).
    reference_beam : `radio_beam.Beam`, optional
        Beam for the ``BMAJ``/``BMIN``/``BPA`` keywords when the beams differ
        by plane; default: the one of largest area.
    quantity : str, optional
        Name of the quantity, written as ``RTQUANT``.
    background : list of (keyword, value, comment), optional
        Cards declaring the background convention, from
        :func:`rtrace.transfer.background.header_cards`.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    path = os.fspath(path)
    if not isinstance(data, u.Quantity):
        raise InputError("data: expected an astropy Quantity (the unit becomes BUNIT)")
    nu = _frequencies_hz(frequencies)
    if data.ndim == 2:
        if nu is not None:
            nu = nu[:1]
            values = data.value[None]
        else:
            values = data.value
    elif data.ndim == 3:
        if nu is None:
            raise InputError("frequencies: required for a 3D cube")
        if data.shape[0] != nu.size:
            raise InputError(f"frequencies: {nu.size} given for a cube of {data.shape[0]} planes")
        values = data.value
    else:
        raise InputError(f"data: expected a (nfreq, ny, nx) cube or a (ny, nx) map, got shape {data.shape}")
    if 0 in values.shape:
        raise InputError(f"data: empty array of shape {data.shape}")
    nplanes = 1 if values.ndim == 2 else values.shape[0]

    beam_values = None
    if beams is not None:
        seq = list(beams) if isinstance(beams, (list, tuple)) or _is_beams(beams) else [beams]
        beam_values = [_beam_values(b, "beams") for b in seq]
        if len(beam_values) == 1:
            beam_values = beam_values * nplanes
        if len(beam_values) != nplanes:
            raise InputError(f"beams: {len(beam_values)} beams given for {nplanes} planes")
    ref = None
    if reference_beam is not None:
        ref = _beam_values(reference_beam, "reference_beam")
    elif beam_values is not None:
        ref = max(beam_values, key=lambda b: b[0] * b[1])

    hdr, tab = wcs_header(values.shape[-2:], pixel_scale, sky_position,
                          None if nu is None else nu * u.Hz)
    directory = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(directory):
        raise InputError(f"path: directory '{directory}' does not exist")
    if not overwrite and os.path.exists(path):
        raise InputError(f"path: '{path}' exists and overwrite=False")

    primary = fits.PrimaryHDU(np.ascontiguousarray(values, dtype=np.float32))
    primary.header.extend(hdr, update=True)
    bunit = _bunit(data.unit)
    if bunit is not None:
        primary.header["BUNIT"] = (bunit, "unit of the data")
    if quantity is not None:
        primary.header["RTQUANT"] = (str(quantity), "rtrace quantity in the data")
    if ref is not None:
        primary.header["BMAJ"] = (ref[0], "[deg] beam major axis (FWHM)")
        primary.header["BMIN"] = (ref[1], "[deg] beam minor axis (FWHM)")
        primary.header["BPA"] = (ref[2], "[deg] beam position angle, north through east")
    _add_provenance(primary.header, provenance)
    primary.header.extend(background or [])
    if nu is not None and hdr["CTYPE3"] == "FREQ-TAB":
        # Readers that ignore -TAB would otherwise fail without a hint.
        primary.header.add_comment("Non-uniform frequencies: FREQ-TAB, listed in extension WCS-TAB.")
        primary.header.add_comment("astropy: WCS(header, fobj=hdulist).")

    hdus = [primary]
    if tab is not None:
        hdus.append(tab)
    if beam_values is not None and not all(_same_beam(b, beam_values[0]) for b in beam_values):
        hdus.append(_beams_table(beam_values))
    hdul = fits.HDUList(hdus)
    with atomic_path(path) as tmp:
        hdul.writeto(tmp, output_verify="exception")
    return Path(path)


def _is_beams(obj):
    """True for a ``radio_beam.Beams`` (a sequence of beams), False for a single Beam."""
    try:
        from radio_beam import Beams
    except ImportError:   # radio_beam is a dependency, but a duck-typed Beam needs no import
        return False
    return isinstance(obj, Beams)


def write_result(result, path, quantity="intensity", unit=None, *, kind="planck", background=None,
                 overwrite=True, subtract_background=None):
    """Write one quantity of a traced :class:`~rtrace.Result` to a FITS file.

    Parameters
    ----------
    result : `~rtrace.Result`
        The traced images.
    path : str or os.PathLike
        Output file; written atomically.
    quantity : {"intensity", "tau", "emission_measure", "brightness_temperature"}
        ``intensity``: cube of the specific intensity, with the background
        that entered from the far side removed (see ``background``);
        ``tau``: optical-depth cube;
        ``emission_measure``: 2D map (pc cm-6) with celestial axes only;
        ``brightness_temperature``: cube in K (see ``kind`` and ``background``).
    unit : str or `~astropy.units.Unit`, optional
        Output unit. For intensity (default ``"Jy/pixel"``): a flux density
        per pixel (``I * pixel_solid_angle``, so the pixel sum of a plane is
        ``result.flux_density()``), or an intensity
        unit such as ``"Jy/sr"`` or ``"erg/(s cm2 Hz sr)"``. For the other
        quantities: a unit equivalent to their natural one (default
        dimensionless, pc cm-6, K).
    kind : {"planck", "rayleigh-jeans"}, optional
        Definition of the brightness temperature.
    background : {"subtracted", "included"}, optional
        Intensity and brightness temperature: ``subtracted`` (default)
        removes the background intensity (e.g. the CMB), as a differential
        measurement does and as ``Result.flux_density`` does (Planck T_b is
        then ``T_P(I) - T_P(I_bg)``); ``included`` writes the total. Optical
        depth and emission measure hold no background either way. The
        header says which (``BKGSUB``, ``BKGKIND``, ``BKGTEMP``).
    overwrite : bool, optional
        Replace an existing file (default True).
    subtract_background : bool, optional
        Deprecated spelling of ``background``.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    if quantity not in RESULT_QUANTITIES:
        raise InputError(f"quantity: expected one of {', '.join(RESULT_QUANTITIES)}, got {quantity!r}")
    try:
        out_unit = None if unit is None else u.Unit(unit)
    except ValueError:
        raise InputError(f"unit: cannot parse {unit!r} as a unit") from None
    convention = resolve_convention(background, subtract_background)
    frequencies = result.frequencies
    if quantity == "intensity":
        out_unit = u.Jy / u.pix if out_unit is None else out_unit
        intensity = result.specific_intensity(convention)
        if out_unit.is_equivalent(u.Jy / u.pix):
            per_pixel = (intensity * result.pixel_solid_angle).to(u.Jy) / u.pix
            data = per_pixel.to(out_unit)
        elif out_unit.is_equivalent(intensity.unit):
            data = intensity.to(out_unit)
        else:
            raise InputError(f"unit: '{out_unit}' is neither a flux density per pixel nor an intensity")
    elif quantity == "tau":
        data = u.Quantity(result.tau, u.dimensionless_unscaled)
    elif quantity == "emission_measure":
        data = result.emission_measure
        frequencies = None
    else:
        data = result.brightness_temperature(kind, background=convention)
    if quantity != "intensity" and out_unit is not None:
        if not out_unit.is_equivalent(data.unit):
            raise InputError(f"unit: '{out_unit}' is not a unit of {quantity} ({data.unit})")
        data = data.to(out_unit)
    return write_cube(path, data, frequencies, result.pixel_scale, result.sky_position,
                      provenance=result.provenance, overwrite=overwrite, quantity=quantity,
                      background=header_cards(convention if quantity in ("intensity", "brightness_temperature")
                                              else "subtracted", result))


def write_skymap(skymap, path, overwrite=True):
    """Write a beam-convolved sky map (Jy/beam cube) to a FITS file.

    Parameters
    ----------
    skymap : SkyMap
        Any object with ``data`` (Quantity (nfreq, ny, nx), Jy/beam),
        ``beams`` (one `radio_beam.Beam` per plane), ``beam`` (the reference
        beam, written as ``BMAJ``/``BMIN``/``BPA``), ``frequencies``,
        ``pixel_scale``, ``sky_position`` and ``provenance``. If the beams
        differ between planes a ``BEAMS`` table extension lists them.
    path : str or os.PathLike
        Output file; written atomically.
    overwrite : bool, optional
        Replace an existing file (default True).

    Returns
    -------
    pathlib.Path
        The written file.
    """
    data = skymap.data
    if not isinstance(data, u.Quantity) or not data.unit.is_equivalent(u.Jy / u.beam):
        unit = getattr(data, "unit", None)
        raise InputError(f"skymap.data: expected a Quantity in Jy/beam, got unit '{unit}'")
    return write_cube(path, data, skymap.frequencies, skymap.pixel_scale, skymap.sky_position,
                      beams=skymap.beams, provenance=skymap.provenance, overwrite=overwrite,
                      reference_beam=skymap.beam, quantity="sky map",
                      background=header_cards(getattr(skymap, "background", "subtracted"), skymap))
