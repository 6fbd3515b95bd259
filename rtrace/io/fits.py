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
* Spectral axis in Hz. ``SPECSYS = 'SOURCE'``: a model has no
  velocity relative to any observer, the frequencies are those emitted in
  the rest frame of the snapshot, which is the "source rest frame" of
  Greisen et al. 2006, A&A 446, 747, table 12 (from memory). How the axis
  is written depends on the frequency list (:func:`spectral_layout`), so
  that every client reads it from the primary header alone:

  - evenly spaced (and a single frequency): linear ``FREQ`` (``CDELT3`` the
    spacing; a single plane gets ``CDELT3 = 1 Hz`` because a monochromatic
    plane has no width and ``CDELTi`` must not be zero);
  - geometric: logarithmic ``FREQ-LOG`` (Greisen et al. 2006, algorithm
    ``-LOG``, formula from memory: ``nu = CRVAL3 * exp(w / CRVAL3)`` with
    ``w = CDELT3 * (p - CRPIX3)``), so ``CDELT3 = nu_1 ln(nu_2 / nu_1)``;
  - any other list: one file per plane by default (:func:`plane_paths`
    names them ``<stem>_<k>_<nu>GHz.fits``, ``k`` the 1-based plane number
    zero-padded so that the names sort in plane order; each file holds a
    one-plane ``FREQ`` axis and keywords ``RTPLANE``/``RTNPLANE``), or, with
    ``spectral_axis="tabular"``, the tabular algorithm ``FREQ-TAB``
    (Greisen et al. 2006, sec. 6, from memory): a binary table extension
    ``WCS-TAB`` holds every plane's frequency. Such a file needs
    ``astropy.wcs.WCS(header, fobj=hdulist)``; clients that read only the
    header (spectral-cube 0.7 among them) cannot open it.

  A list counts as even or geometric when the axis reproduces every
  frequency to :data:`AXIS_RTOL` (1e-10) relative.
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
  ``BEAM``, ``NOISE``, ``RTPIXERR`` and ``RTPIXSS`` (a trace's estimated
  largest relative pixel error and its lattice's rays per cell side, see
  :class:`rtrace.transfer.result.PixelError`; on sky maps and interferometer images, those of the
  traced model before the beam) (strings longer than one card continue on
  ``CONTINUE`` cards, announced by ``LONGSTRN = 'OGIP 1.0'``, the
  convention's keyword in the FITS standard's appendix on long strings,
  Pence et al. 2010, from memory); any other provenance entry becomes a
  ``HISTORY`` line.

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
from ..observe.beam import beam_cards, same_beam
from ..quantities import parse_frequencies, positive_scalar
from ..transfer.background import header_cards, resolve_convention
from ..transfer.result import QUANTITIES
from .atomic import atomic_path

__all__ = [
    "sky_wcs",
    "wcs_header",
    "write_cube",
    "write_result",
    "write_skymap",
    "spectral_layout",
    "pixel_error_cards",
    "plane_paths",
    "output_paths",
    "split_suffix",
    "RESULT_QUANTITIES",
    "SPECTRAL_AXES",
    "AXIS_RTOL",
]

RESULT_QUANTITIES = QUANTITIES

# EXTNAME and column name of the -TAB frequency table.
_TAB_EXTNAME = "WCS-TAB"
_TAB_COLUMN = "COORDS"
#: Largest relative difference between a frequency and the value a linear or
#: logarithmic axis gives its plane for the list to be written with that axis.
#: Lists typed with few digits (e.g. 1, 1.778, 3.162 GHz) are not geometric to
#: this tolerance and are written one file per plane: a header never misstates
#: a traced frequency by more than this.
AXIS_RTOL = 1e-10

#: Values of the writers' ``spectral_axis`` option (see the module notes).
SPECTRAL_AXES = ("auto", "tabular")

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
    return None if frequencies is None else parse_frequencies(frequencies, name)


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


def _check_spectral_axis(spectral_axis):
    if spectral_axis not in SPECTRAL_AXES:
        raise InputError(
            f"spectral_axis: expected one of {', '.join(repr(a) for a in SPECTRAL_AXES)}, got {spectral_axis!r}"
        )
    return spectral_axis


def _linear_step(nu):
    """Spacing of ``nu`` if it is even to AXIS_RTOL (1 Hz for a single plane), else None."""
    if nu.size == 1:
        return 1.0
    step = (nu[-1] - nu[0]) / (nu.size - 1)
    if step == 0:
        return None
    linear = nu[0] + step * np.arange(nu.size)
    return step if np.all(np.abs(linear - nu) <= AXIS_RTOL * nu) else None


def _log_step(nu):
    """``CDELT`` of a FREQ-LOG axis with ``CRVAL = nu[0]`` if ``nu`` is geometric to AXIS_RTOL, else None."""
    if nu.size < 2:
        return None
    # Greisen et al. 2006, -LOG algorithm (from memory): nu = nu_r exp(w / nu_r), w = CDELT (p - CRPIX)
    log_ratio = (np.log(nu[-1]) - np.log(nu[0])) / (nu.size - 1)
    if log_ratio == 0:
        return None
    step = nu[0] * log_ratio
    axis = nu[0] * np.exp(step * np.arange(nu.size) / nu[0])
    return step if np.all(np.abs(axis - nu) <= AXIS_RTOL * nu) else None


def spectral_layout(frequencies):
    """How a cube with these frequencies describes its spectral axis.

    Parameters
    ----------
    frequencies : `~astropy.units.Quantity` (nfreq,)
        Frequencies (or wavelengths) of the planes, in cube order.

    Returns
    -------
    str
        ``"linear"`` for evenly spaced frequencies and for a single one (a
        ``FREQ`` axis), ``"log"`` for a geometric list (``FREQ-LOG``),
        ``"irregular"`` for any other list (one file per plane, or
        ``FREQ-TAB`` on request). Two frequencies are always ``"linear"``.
    """
    nu = _frequencies_hz(frequencies)
    if _linear_step(nu) is not None:
        return "linear"
    if _log_step(nu) is not None:
        return "log"
    return "irregular"


def _frequency_text(nu_hz):
    """Each frequency in GHz, positional, 4 significant digits or as many more as tell it from the others."""
    ghz = np.asarray(nu_hz, float) / 1e9
    digits = np.full(ghz.size, 4)

    def render():
        return [
            np.format_float_positional(v, precision=int(d), unique=False, fractional=False, trim="-")
            for v, d in zip(ghz, digits, strict=True)
        ]

    text = render()
    while True:
        clash = [i for i in range(ghz.size) if any(text[i] == text[j] and ghz[i] != ghz[j] for j in range(ghz.size))]
        if not clash or digits[clash].min() >= 17:
            return text
        digits[clash] += 1
        text = render()


def split_suffix(name):
    """``(stem, suffix)`` of a file name; ``.fits.gz`` (and ``.fit.gz``, ``.fts.gz``) count as one suffix."""
    lower = name.lower()
    for compound in (".fits.gz", ".fit.gz", ".fts.gz"):
        if lower.endswith(compound) and len(name) > len(compound):
            return name[: -len(compound)], name[-len(compound) :]
    stem, suffix = os.path.splitext(name)
    return stem, suffix


def plane_paths(path, frequencies):
    """The files of a cube written one file per frequency plane.

    ``<stem>_<k>_<nu>GHz<suffix>`` next to ``path``: ``k`` is the 1-based
    plane number, zero-padded to the same width for every plane (at least
    two digits) so that sorting the names sorts the planes; ``nu`` is the
    plane's frequency in GHz with at least 4 significant digits (more where
    two planes would otherwise read alike). E.g. ``a_intensity.fits`` at
    0.3, 1 and 3.162 GHz gives ``a_intensity_01_0.3GHz.fits``,
    ``a_intensity_02_1GHz.fits``, ``a_intensity_03_3.162GHz.fits``.

    Parameters
    ----------
    path : str or os.PathLike
        The file a single cube would have been written to.
    frequencies : `~astropy.units.Quantity` (nfreq,)

    Returns
    -------
    list of pathlib.Path
    """
    path = Path(path)
    nu = _frequencies_hz(frequencies)
    width = max(2, len(str(nu.size)))
    stem, suffix = split_suffix(path.name)
    return [path.with_name(f"{stem}_{k + 1:0{width}d}_{text}GHz{suffix}") for k, text in enumerate(_frequency_text(nu))]


def output_paths(path, frequencies, spectral_axis="auto"):
    """Every file a writer makes for ``path`` with these frequencies.

    Parameters
    ----------
    path : str or os.PathLike
    frequencies : `~astropy.units.Quantity` (nfreq,) or None
        The cube's frequencies; None for a map without a frequency axis.
    spectral_axis : {"auto", "tabular"}
        The writer's option.

    Returns
    -------
    list of pathlib.Path
        ``[path]``, or the :func:`plane_paths` when an irregular list is
        written one file per plane.
    """
    _check_spectral_axis(spectral_axis)
    if frequencies is None or spectral_axis == "tabular" or spectral_layout(frequencies) != "irregular":
        return [Path(path)]
    return plane_paths(path, frequencies)


# --------------------------------------------------------------------------------------------
# WCS
# --------------------------------------------------------------------------------------------


def wcs_header(shape, pixel_scale, sky_position, frequencies=None):
    """WCS keywords of an rtrace image and, for an irregular frequency list, the -TAB table.

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
        The ``WCS-TAB`` extension the header refers to (irregular
        frequency lists only: a single header can describe them only with
        a table; the writers split such lists into one file per plane
        unless asked for the table).
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
        step = _linear_step(nu)
        log_step = None if step is not None else _log_step(nu)
        hdr["CUNIT3"] = "Hz"
        if step is not None:
            hdr["CTYPE3"] = ("FREQ", "frequency, linear")
            hdr["CRPIX3"] = 1.0
            hdr["CRVAL3"] = (float(nu[0]), "[Hz] frequency of plane 1")
            hdr["CDELT3"] = (float(step), "[Hz] plane spacing")
        elif log_step is not None:
            # Greisen et al. 2006, -LOG algorithm (from memory): nu = CRVAL3 exp(w / CRVAL3),
            # w = CDELT3 (p - CRPIX3); a geometric list of ratio r has CDELT3 = nu_1 ln r.
            hdr["CTYPE3"] = ("FREQ-LOG", "frequency, logarithmic: geometric planes")
            hdr["CRPIX3"] = 1.0
            hdr["CRVAL3"] = (float(nu[0]), "[Hz] frequency of plane 1")
            hdr["CDELT3"] = (float(log_step), "[Hz] CRVAL3 * ln(ratio of planes)")
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
            column = fits.Column(
                name=_TAB_COLUMN, format=f"{nu.size}D", dim=f"(1,{nu.size})", unit="Hz", array=nu.reshape(1, nu.size, 1)
            )
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
        Hz, linear for evenly spaced frequencies, ``FREQ-LOG`` for
        geometric ones, ``FREQ-TAB`` with the table attached otherwise; the
        pixel shape is set.
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


def header_ascii(text):
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


def _announce_long_strings(header):
    """Add ``LONGSTRN = 'OGIP 1.0'`` before the first value continued on CONTINUE cards, if any.

    The long-string convention asks for this keyword in any header that uses
    it (Pence et al. 2010, appendix on the CONTINUE convention, from memory).
    """
    if "LONGSTRN" in header:
        return
    for index, card in enumerate(header.cards):
        if len(card.image) > 80:  # astropy renders a continued value as several cards
            header.insert(index, ("LONGSTRN", "OGIP 1.0", "long strings continue on CONTINUE cards"))
            return


def add_provenance(hdr, provenance):
    from .._version import __version__

    hdr["ORIGIN"] = ("rtrace", "software that wrote this file")
    hdr["DATE"] = (datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%dT%H:%M:%S"), "UTC date the file was written")
    hdr["RTVERS"] = (__version__, "rtrace version")
    for key, value in (provenance or {}).items():
        if value is None:
            continue
        if key in _PROVENANCE_KEYWORDS:
            keyword, comment = _PROVENANCE_KEYWORDS[key]
            text = header_ascii(value)
            hdr[keyword] = (text, comment) if _comment_fits(text, comment) else text
        else:
            hdr.add_history(header_ascii(f"{key}: {value}"))
    _announce_long_strings(hdr)


def _beam_values(beam, name):
    try:
        major = float(u.Quantity(beam.major).to_value(u.deg))
        minor = float(u.Quantity(beam.minor).to_value(u.deg))
        pa = float(u.Quantity(beam.pa).to_value(u.deg))
    except (AttributeError, u.UnitsError, TypeError):
        raise InputError(f"{name}: expected a radio_beam.Beam (major, minor, pa angles)") from None
    if not (np.isfinite(major) and np.isfinite(minor) and np.isfinite(pa) and major > 0 and minor > 0):
        raise InputError(
            f"{name}: beam axes must be finite and positive, got major={major} deg, minor={minor} deg, pa={pa} deg"
        )
    if minor > major:
        raise InputError(f"{name}: the minor axis ({minor} deg) exceeds the major axis ({major} deg)")
    return major, minor, pa


def _as_beam(values):
    """A `radio_beam.Beam` from checked ``(major, minor, pa)`` degrees."""
    import radio_beam

    return radio_beam.Beam(major=values[0] * u.deg, minor=values[1] * u.deg, pa=values[2] * u.deg)


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


def write_cube(
    path,
    data,
    frequencies,
    pixel_scale,
    sky_position,
    beams=None,
    provenance=None,
    overwrite=True,
    *,
    reference_beam=None,
    quantity=None,
    spectral_axis="auto",
    background=None,
):
    """Write an image or cube with its WCS, beam and provenance to FITS.

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
        Replace existing files (default True).
    reference_beam : `radio_beam.Beam`, optional
        Beam for the ``BMAJ``/``BMIN``/``BPA`` keywords when the beams differ
        by plane; default: the one of largest area.
    quantity : str, optional
        Name of the quantity, written as ``RTQUANT``.
    spectral_axis : {"auto", "tabular"}, optional
        For a frequency list that is neither even nor geometric (see
        :func:`spectral_layout`): ``"auto"`` (default) writes one file per
        plane, named by :func:`plane_paths`; ``"tabular"`` writes one file
        with a ``FREQ-TAB`` axis. Even and geometric lists are always one
        file with a ``FREQ`` or ``FREQ-LOG`` axis.
    background : list of (keyword, value, comment), optional
        Cards declaring the background convention, from
        :func:`rtrace.transfer.background.header_cards`.

    Returns
    -------
    pathlib.Path or list of pathlib.Path
        The written file; the list of files (in plane order) when the cube
        was written one file per plane (:func:`output_paths` tells which in
        advance).
    """
    path = os.fspath(path)
    _check_spectral_axis(spectral_axis)
    values, nu = _cube_values(data, _frequencies_hz(frequencies))
    nplanes = 1 if values.ndim == 2 else values.shape[0]
    beam_values, ref = _plane_beams(beams, reference_beam, nplanes)
    # checked before any file is written (and before the header work)
    _image_shape(values.shape[-2:])
    _pixel_scale_deg(pixel_scale)
    _icrs(sky_position)
    targets = _writable_targets(path, nu, spectral_axis, overwrite)
    cube = _CubeHeader(
        values.shape[-2:], pixel_scale, sky_position, _bunit(data.unit), quantity, provenance, background or []
    )

    if len(targets) == 1:
        header, tab = cube.header(nu, ref)
        if tab is not None:
            # Readers that ignore -TAB would otherwise fail without a hint.
            header.add_comment("Irregular frequencies: FREQ-TAB, listed in extension WCS-TAB.")
            header.add_comment("astropy: WCS(header, fobj=hdulist).")
        hdus = [_primary(values, header)]
        if tab is not None:
            hdus.append(tab)
        if beam_values is not None and not all(same_beam(_as_beam(b), _as_beam(beam_values[0])) for b in beam_values):
            hdus.append(_beams_table(beam_values))
        _write(path, hdus)
        return Path(path)

    # one file per plane: each a one-plane FREQ cube with its own beam
    for k, target in enumerate(targets):
        header, _ = cube.header(nu[k : k + 1], None if beam_values is None else beam_values[k], plane=(k + 1, nplanes))
        header.add_comment(f"Plane {k + 1} of {nplanes}: the frequencies are neither evenly spaced nor")
        header.add_comment("geometric, so each plane is a file of its own (RTPLANE, RTNPLANE).")
        _write(target, [_primary(values[k : k + 1], header)])
    return targets


def _cube_values(data, nu):
    """``(values, nu)``: the data as a (nfreq, ny, nx) array (or (ny, nx) without frequencies), checked."""
    if not isinstance(data, u.Quantity):
        raise InputError("data: expected an astropy Quantity (the unit becomes BUNIT)")
    if data.ndim == 2:
        values = data.value if nu is None else data.value[None]
        nu = None if nu is None else nu[:1]
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
    return values, nu


def _plane_beams(beams, reference_beam, nplanes):
    """``(beam of each plane or None, reference beam or None)`` as (major, minor, pa) in degrees."""
    beam_values = None
    if beams is not None:
        seq = list(beams) if isinstance(beams, (list, tuple)) or _is_beams(beams) else [beams]
        beam_values = [_beam_values(b, "beams") for b in seq]
        if len(beam_values) == 1:
            beam_values = beam_values * nplanes
        if len(beam_values) != nplanes:
            raise InputError(f"beams: {len(beam_values)} beams given for {nplanes} planes")
    if reference_beam is not None:
        return beam_values, _beam_values(reference_beam, "reference_beam")
    if beam_values is not None:
        return beam_values, max(beam_values, key=lambda b: b[0] * b[1])
    return None, None


def _writable_targets(path, nu, spectral_axis, overwrite):
    """The files :func:`write_cube` will write; InputError if their folder is missing or they exist unwanted."""
    directory = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(directory):
        raise InputError(f"path: directory '{directory}' does not exist")
    targets = output_paths(path, None if nu is None else nu * u.Hz, spectral_axis)
    if not overwrite:
        existing = [str(t) for t in targets if t.exists()]
        if existing and len(targets) == 1:
            raise InputError(f"path: '{path}' exists and overwrite=False")
        if existing:
            raise InputError(
                f"path: {len(existing)} of the {len(targets)} plane files exist and "
                f"overwrite=False ('{existing[0]}'{', ...' if len(existing) > 1 else ''})"
            )
    return targets


class _CubeHeader:
    """The header cards every file of one :func:`write_cube` call shares, and a plane's header from them."""

    def __init__(self, image_shape, pixel_scale, sky_position, bunit, quantity, provenance, background):
        self.image_shape, self.pixel_scale, self.sky_position = image_shape, pixel_scale, sky_position
        self.bunit, self.quantity, self.provenance, self.background = bunit, quantity, provenance, background

    def header(self, nu, beam, plane=None):
        """``(primary header, WCS-TAB extension or None)`` for frequencies ``nu`` (Hz) and ``beam`` (deg)."""
        hdr, tab = wcs_header(self.image_shape, self.pixel_scale, self.sky_position, None if nu is None else nu * u.Hz)
        primary = fits.Header()
        primary.extend(hdr, update=True)
        if self.bunit is not None:
            primary["BUNIT"] = (self.bunit, "unit of the data")
        if self.quantity is not None:
            primary["RTQUANT"] = (str(self.quantity), "rtrace quantity in the data")
        if beam is not None:
            for key, value, comment in beam_cards(_as_beam(beam)):
                primary[key] = (value, comment)
        if plane is not None:
            primary["RTPLANE"] = (plane[0], "plane number in the full frequency list")
            primary["RTNPLANE"] = (plane[1], "number of planes (one file each)")
        add_provenance(primary, self.provenance)
        primary.extend(self.background)
        return primary, tab


def _primary(values, header):
    primary = fits.PrimaryHDU(np.ascontiguousarray(values, dtype=np.float32))
    primary.header.extend(header, update=True)
    return primary


def _write(path, hdus):
    with atomic_path(path) as tmp:
        fits.HDUList(hdus).writeto(tmp, output_verify="exception")


def _is_beams(obj):
    """True for a ``radio_beam.Beams`` (a sequence of beams), False for a single Beam."""
    try:
        from radio_beam import Beams
    except ImportError:  # radio_beam is a dependency, but a duck-typed Beam needs no import
        return False
    return isinstance(obj, Beams)


def write_result(
    result,
    path,
    quantity="intensity",
    unit=None,
    *,
    kind="planck",
    background=None,
    overwrite=True,
    subtract_background=None,
    spectral_axis="auto",
):
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
        Replace existing files (default True).
    subtract_background : bool, optional
        Deprecated spelling of ``background``.
    spectral_axis : {"auto", "tabular"}, optional
        How an irregular frequency list is written: one file per plane
        (default) or a ``FREQ-TAB`` axis; see :func:`write_cube`.

    Returns
    -------
    pathlib.Path or list of pathlib.Path
        The written file, or the files of the planes (see :func:`write_cube`).
    """
    _check_spectral_axis(spectral_axis)
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
            per_pixel = result.jy_per_pixel(convention) / u.pix
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
    return write_cube(
        path,
        data,
        frequencies,
        result.pixel_scale,
        result.sky_position,
        provenance=result.provenance,
        overwrite=overwrite,
        quantity=quantity,
        spectral_axis=spectral_axis,
        background=header_cards(
            convention if quantity in ("intensity", "brightness_temperature") else "subtracted", result
        )
        + pixel_error_cards(result)
        + (_em_cards(result) if quantity == "emission_measure" else []),
    )


#: ``EMDEF`` card values: which emission measure a file holds.
EM_CARD_VALUES = {"electrons": "int n_e^2 dl", "ion_term": "int n_e sum Z^2 n_i dl"}


def _em_cards(result):
    """``EMDEF``: the emission measure's definition (observers' ``n_e^2`` or the free-free ion term)."""
    definition = getattr(result, "em_definition", "ion_term")
    return [("EMDEF", EM_CARD_VALUES[definition], "emission measure definition")]


def pixel_error_cards(result, model=False):
    """``RTPIXERR`` (estimated max relative pixel error) and ``RTPIXSS`` (rays per cell), for traces given a tolerance.

    With ``model`` the cards describe the traced model a sky map was made from (before the beam,
    noise or interferometer), and their comments say so: convolution averages pixel errors, so the
    model's figure is an upper estimate for the map's pixels, not their error.
    """
    pe = getattr(result, "pixel_error", None)
    view = getattr(result, "view", None)
    if pe is None or pe.tolerance is None or view is None or view.los_axis() is not None:
        return []
    of = "model " if model else ""
    cards = [("RTPIXSS", int(pe.supersample), f"rays per cell side of the {of}oblique lattice")]
    if np.isfinite(pe.max_relative):
        cards.insert(0, ("RTPIXERR", float(pe.max_relative), f"estimated max relative {of}pixel error"))
    return cards


def write_skymap(skymap, path, overwrite=True, *, spectral_axis="auto"):
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
        Replace existing files (default True).
    spectral_axis : {"auto", "tabular"}, optional
        How an irregular frequency list is written: one file per plane
        (default; each carries its plane's beam as ``BMAJ``/``BMIN``/``BPA``)
        or a ``FREQ-TAB`` axis; see :func:`write_cube`.

    Returns
    -------
    pathlib.Path or list of pathlib.Path
        The written file, or the files of the planes (see :func:`write_cube`).
    """
    data = skymap.data
    if not isinstance(data, u.Quantity) or not data.unit.is_equivalent(u.Jy / u.beam):
        unit = getattr(data, "unit", None)
        raise InputError(f"skymap.data: expected a Quantity in Jy/beam, got unit '{unit}'")
    return write_cube(
        path,
        data,
        skymap.frequencies,
        skymap.pixel_scale,
        skymap.sky_position,
        beams=skymap.beams,
        provenance=skymap.provenance,
        overwrite=overwrite,
        reference_beam=skymap.beam,
        quantity="sky map",
        spectral_axis=spectral_axis,
        background=header_cards(getattr(skymap, "background", "subtracted"), skymap)
        + pixel_error_cards(getattr(skymap, "result", None), model=True),
    )
