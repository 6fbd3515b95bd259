"""Reading an observed image: its pixels in Jy/beam, celestial grid, frequency and beam.

Header conventions read here (all common practice of radio FITS images):

* Frequency: a spectral axis whose ``CTYPEi`` starts with ``FREQ`` (world
  value of its single plane through astropy's WCS, so ``CRVALi``,
  ``CDELTi``, ``CRPIXi`` and ``CUNITi`` are honoured), else the keywords
  ``RESTFRQ``, ``RESTFREQ`` or ``FREQ`` (Hz), in that order.
* Beam: ``BMAJ``, ``BMIN`` (FWHM) and ``BPA`` (north through east), degrees.
* Unit: ``BUNIT`` of ``Jy/beam`` (any case) or a prefixed version of it; a
  brightness temperature (``K``, ``mK``) is converted to Jy/beam with
  astropy's Rayleigh-Jeans ``brightness_temperature(frequency, beam_area)``
  equivalency.
"""

import os
import warnings
from dataclasses import dataclass, field

import astropy.units as u
import numpy as np
import radio_beam
from astropy.io import fits
from astropy.wcs import WCS
from astropy.wcs.utils import proj_plane_pixel_area, proj_plane_pixel_scales

from ..errors import InputError
from ..observe.beam import describe_beam, validate_beam
from ..quantities import JY_PER_BEAM, parse_frequencies

__all__ = [
    "ObservedImage",
    "read_observation",
    "ComparisonWarning",
    "FREQUENCY_KEYWORDS",
    "header_frequencies",
    "open_image_hdu",
]

# Keywords tried, in this order, when the header has no spectral axis.
FREQUENCY_KEYWORDS = ("RESTFRQ", "RESTFREQ", "FREQ")


class ComparisonWarning(UserWarning):
    """Something the comparison did to the data that the user should know about."""


def note(notes, text, stacklevel=3):
    """Record ``text`` in ``notes`` and issue it as a ComparisonWarning."""
    notes.append(text)
    warnings.warn(text, ComparisonWarning, stacklevel=stacklevel)


@dataclass
class ObservedImage:
    """An observed image ready to compare: 2D Jy/beam pixels on a celestial grid.

    Attributes
    ----------
    data : ndarray (ny, nx)
        Jy/beam; NaN for blanked pixels.
    wcs : `~astropy.wcs.WCS`
        The celestial (2-axis) WCS of ``data``.
    frequency : `~astropy.units.Quantity`
        Hz.
    beam : `radio_beam.Beam`
    header : `~astropy.io.fits.Header`
        The original header.
    source : str
        Where the image came from (file name or "HDU").
    frequency_source, beam_source : str
        Where the frequency and beam were read ("FREQ axis", "RESTFRQ", "frequency=" ...).
    notes : list of str
        What was done to the data on reading (unit conversion, overrides).
    """

    data: np.ndarray
    wcs: WCS
    frequency: u.Quantity
    beam: radio_beam.Beam
    header: fits.Header
    source: str
    frequency_source: str
    beam_source: str
    notes: list = field(default_factory=list)

    @property
    def shape(self):
        """``(ny, nx)`` of the image."""
        return self.data.shape

    @property
    def pixel_solid_angle(self):
        """Solid angle of a pixel at the reference point (sr)."""
        return (proj_plane_pixel_area(self.wcs) * u.deg**2).to(u.sr)

    @property
    def pixel_scale(self):
        """Geometric-mean pixel side at the reference point (arcsec)."""
        scales = proj_plane_pixel_scales(self.wcs)
        return (float(np.sqrt(scales[0] * scales[1])) * u.deg).to(u.arcsec)

    @property
    def beam_area_pixels(self):
        """Beam solid angle over pixel solid angle."""
        return float(self.beam.sr.to_value(u.sr) / self.pixel_solid_angle.to_value(u.sr))


# --------------------------------------------------------------------------------------------
# opening
# --------------------------------------------------------------------------------------------

_IMAGE_HDUS = (fits.PrimaryHDU, fits.ImageHDU, fits.CompImageHDU)


def open_image_hdu(obj, name):
    """``(header, data, hdulist_or_None, description)`` of the first image HDU of ``obj``.

    ``obj`` is a path, an image HDU or an HDUList; the data are read into memory
    (as float64) so that no file stays open.
    """
    if isinstance(obj, (str, os.PathLike)):
        path = os.fspath(obj)
        if not os.path.isfile(path):
            raise InputError(f"{name}: file '{path}' not found")
        try:
            with fits.open(path, memmap=False) as hdul:
                header, data, tables = _first_image(hdul, name)
                return header, data, tables, os.path.basename(path)
        except OSError as exc:
            raise InputError(f"{name}: '{path}' is not a readable FITS file ({exc})") from None
    if isinstance(obj, fits.HDUList):
        header, data, tables = _first_image(obj, name)
        return header, data, tables, "HDUList"
    if isinstance(obj, _IMAGE_HDUS):
        if obj.data is None:
            raise InputError(f"{name}: the HDU holds no data")
        return obj.header.copy(), np.array(obj.data, dtype=float), None, "HDU"
    raise InputError(f"{name}: expected a FITS file path or an astropy image HDU, got {type(obj).__name__}")


def _first_image(hdul, name):
    for hdu in hdul:
        if isinstance(hdu, _IMAGE_HDUS) and hdu.data is not None and hdu.data.ndim >= 2:
            # the table extensions a -TAB axis or a BEAMS table may refer to, copied out
            tables = fits.HDUList([fits.PrimaryHDU()] + [h.copy() for h in hdul if isinstance(h, fits.BinTableHDU)])
            return hdu.header.copy(), np.array(hdu.data, dtype=float), tables
    raise InputError(f"{name}: no image extension with at least two axes")


def _wcs(header, tables, name):
    try:
        with warnings.catch_warnings():
            # informational FITSFixedWarnings about e.g. DATE-OBS are not the user's concern here
            warnings.simplefilter("ignore", category=Warning)
            return WCS(header, fobj=tables) if tables is not None else WCS(header)
    except Exception as exc:  # astropy raises several unrelated types for bad WCS
        raise InputError(f"{name}: cannot read the WCS from the header ({exc})") from None


# --------------------------------------------------------------------------------------------
# frequency
# --------------------------------------------------------------------------------------------


def _spectral_axis(header):
    """1-based number of the axis whose CTYPE starts with FREQ, or None."""
    for i in range(1, int(header.get("NAXIS", 0)) + 1):
        if str(header.get(f"CTYPE{i}", "")).strip().upper().startswith("FREQ"):
            return i
    return None


def header_frequencies(header, wcs, name):
    """Frequencies in Hz from the header, and where they came from.

    Returns ``(ndarray, source)``: one frequency per plane of the spectral
    axis ("FREQ axis"), or a single one from a keyword, or ``(None, None)``.
    """
    axis = _spectral_axis(header)
    if axis is not None:
        n = int(header.get(f"NAXIS{axis}", 1))
        try:
            sub = wcs.sub([axis])
            world = sub.wcs_pix2world(np.arange(n, dtype=float)[:, None], 0)[:, 0]
            unit = u.Unit(sub.wcs.cunit[0] or "Hz")
            nu = (world * unit).to_value(u.Hz)
        except Exception as exc:
            raise InputError(
                f"{name}: cannot evaluate the spectral axis {axis} ({header.get(f'CTYPE{axis}')}): {exc}"
            ) from None
        if not np.all(np.isfinite(nu) & (nu > 0)):
            raise InputError(f"{name}: the spectral axis gives non-positive frequencies {nu}")
        return nu, f"{str(header[f'CTYPE{axis}']).strip()} axis"
    for key in FREQUENCY_KEYWORDS:
        if key in header:
            try:
                value = float(header[key])
            except (TypeError, ValueError):
                raise InputError(f"{name}: keyword {key} = {header[key]!r} is not a number (Hz)") from None
            if not (np.isfinite(value) and value > 0):
                raise InputError(f"{name}: keyword {key} = {value!r} is not a positive frequency (Hz)")
            return np.array([value]), key
    return None, None


def check_frequency(frequency, name="frequency"):
    """A positive scalar frequency (or wavelength) in Hz."""
    return parse_frequencies(frequency, name, scalar=True)


# --------------------------------------------------------------------------------------------
# beam and unit
# --------------------------------------------------------------------------------------------


def header_beam(header, name, beam_option="beam="):
    """The beam of BMAJ/BMIN/BPA (degrees), or None when BMAJ and BMIN are both absent."""
    have = [k for k in ("BMAJ", "BMIN") if k in header]
    if not have:
        return None
    if len(have) == 1:
        missing = "BMIN" if have == ["BMAJ"] else "BMAJ"
        raise InputError(
            f"{name}: the header has {have[0]} but no {missing}; both beam axes are needed (or pass {beam_option})"
        )
    try:
        major, minor = float(header["BMAJ"]), float(header["BMIN"])
        pa = float(header.get("BPA", 0.0))
    except (TypeError, ValueError):
        raise InputError(f"{name}: BMAJ, BMIN and BPA must be numbers (degrees)") from None
    if "BPA" not in header and not np.isclose(major, minor, rtol=1e-9, atol=0):
        raise InputError(f"{name}: the beam is elliptical (BMAJ != BMIN) but the header has no BPA")
    if not (np.isfinite(major) and np.isfinite(minor) and np.isfinite(pa) and major > 0 and minor > 0):
        raise InputError(f"{name}: BMAJ = {major!r}, BMIN = {minor!r} deg are not positive beam axes")
    if minor > major:
        raise InputError(f"{name}: BMIN ({minor} deg) exceeds BMAJ ({major} deg)")
    if isinstance(header, fits.Header):
        # the cards are checked above; radio-beam reads them (BPA defaults to 0 for a round beam)
        return radio_beam.Beam.from_fits_header(header)
    return radio_beam.Beam(major=major * u.deg, minor=minor * u.deg, pa=pa * u.deg)


def parse_bunit(text, name, keyword="BUNIT"):
    """The astropy unit of a BUNIT string; ``Jy/beam`` in any case is recognised."""
    raw = str(text).strip()
    squashed = raw.replace(" ", "").lower()
    if squashed in ("jy/beam", "jy/bm", "jybeam-1", "jy.beam-1", "jy/beam)"):
        return JY_PER_BEAM
    for fmt in ("fits", None):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return u.Unit(raw, format=fmt) if fmt else u.Unit(raw)
        except ValueError:
            continue
    raise InputError(f"{name}: {keyword} = '{raw}' is not a unit astropy can read (expected Jy/beam or K)")


def _to_jy_per_beam(data, unit, frequency_hz, beam, name, notes, unit_origin, unit_text):
    if unit.is_equivalent(JY_PER_BEAM):
        return data * unit.to(JY_PER_BEAM)
    if unit.physical_type == "temperature":
        # Rayleigh-Jeans brightness temperature <-> Jy/beam through astropy's
        # brightness_temperature(frequency, beam_area) equivalency
        kelvin_to_jyb = (1.0 * unit).to_value(
            JY_PER_BEAM, equivalencies=u.brightness_temperature(frequency_hz * u.Hz, beam_area=beam.sr)
        )
        note(
            notes,
            f"observation in {unit} ({unit_origin}) converted to Jy/beam with astropy's "
            f"Rayleigh-Jeans brightness_temperature equivalency at {frequency_hz / 1e9:.6g} GHz "
            f"for the {describe_beam(beam)} beam ({kelvin_to_jyb:.6g} Jy/beam per {unit})",
            stacklevel=5,
        )
        return data * kelvin_to_jyb
    raise InputError(
        f"{name}: {unit_origin} is '{unit_text}'; expected a surface brightness in Jy/beam "
        "or a brightness temperature in K"
    )


# --------------------------------------------------------------------------------------------
# the image
# --------------------------------------------------------------------------------------------


def _celestial_plane(data, wcs, header, name):
    """Drop degenerate non-celestial axes; the remaining 2D array matches ``wcs.celestial``."""
    naxis = data.ndim
    if wcs.naxis != naxis:
        raise InputError(f"{name}: the header describes {wcs.naxis} axes but the data have {naxis}")
    if not wcs.has_celestial:
        raise InputError(f"{name}: the header has no celestial axes (CTYPE RA/DEC, GLON/GLAT, ...)")
    keep = {wcs.wcs.lng, wcs.wcs.lat}  # 0-based FITS axis numbers
    index = []
    for fits_axis in range(naxis - 1, -1, -1):  # numpy order is the reverse of FITS order
        n = data.shape[naxis - 1 - fits_axis]
        if fits_axis in keep:
            index.append(slice(None))
        elif n == 1:
            index.append(0)
        else:
            ctype = header.get(f"CTYPE{fits_axis + 1}", "?")
            raise InputError(
                f"{name}: axis {fits_axis + 1} ({ctype}) has {n} planes; compare takes one "
                "image (a 2D map, or a cube whose frequency and Stokes axes have length 1)"
            )
    plane = np.array(data[tuple(index)], dtype=float)
    if not np.isfinite(plane).any():
        raise InputError(f"{name}: every pixel is blank (NaN or infinite)")
    return plane, wcs.celestial


def read_observation(observation, frequency=None, beam=None, unit=None, name="observation", options=None):
    """Read an observed image for :func:`rtrace.compare`.

    Parameters
    ----------
    observation : str, path-like, HDU, HDUList or ObservedImage
        A FITS file or HDU: a 2D image or a cube whose non-celestial axes
        have length 1. An ObservedImage is returned unchanged (overrides are
        then not allowed).
    frequency : `~astropy.units.Quantity`, optional
        Observed frequency; replaces what the header says.
    beam : `radio_beam.Beam`, optional
        Observed beam; replaces BMAJ/BMIN/BPA.
    unit : str or `~astropy.units.Unit`, optional
        Unit of the pixels; replaces BUNIT.
    name : str, optional
        What the messages call the observation.
    options : dict, optional
        How messages name the overrides, e.g. ``{"frequency": "--frequency",
        "beam": "--beam"}`` on the command line or ``"[comparison].frequency"``
        in a job file; default the keywords (``"frequency="``, ...).

    Returns
    -------
    ObservedImage
    """
    opt = {"frequency": "frequency=", "beam": "beam=", "unit": "unit="}
    opt.update(options or {})
    if isinstance(observation, ObservedImage):
        if frequency is not None or beam is not None or unit is not None:
            raise InputError(
                f"{name}: {opt['frequency']}, {opt['beam']} and {opt['unit']} cannot override an "
                "ObservedImage "
                "(pass them to read_observation)"
            )
        return observation
    header, data, tables, source = open_image_hdu(observation, name)
    notes = []
    wcs = _wcs(header, tables, name)
    plane, cwcs = _celestial_plane(data, wcs, header, name)

    header_nu, nu_source = header_frequencies(header, wcs, name)
    if header_nu is not None and header_nu.size != 1:
        raise InputError(f"{name}: the spectral axis has {header_nu.size} planes; compare takes one")
    if frequency is not None:
        nu = check_frequency(frequency)
        if header_nu is not None and not np.isclose(nu, header_nu[0], rtol=1e-6, atol=0):
            note(
                notes,
                f"{opt['frequency']} {nu / 1e9:.6g} GHz replaces the header's {header_nu[0] / 1e9:.6g} GHz "
                f"({nu_source})",
            )
        nu_source = opt["frequency"]
    elif header_nu is None:
        raise InputError(
            f"{name}: no frequency in the header: looked for a spectral axis with CTYPE 'FREQ' "
            f"and the keywords {', '.join(FREQUENCY_KEYWORDS)}; pass {opt['frequency']}"
        )
    else:
        nu = float(header_nu[0])

    hbeam = header_beam(header, name, opt["beam"])
    if beam is not None:
        obs_beam = validate_beam(beam)
        if hbeam is not None and not hbeam == obs_beam:
            note(notes, f"{opt['beam']} ({describe_beam(obs_beam)}) replaces the header's ({describe_beam(hbeam)})")
        beam_source = opt["beam"]
    elif hbeam is None:
        raise InputError(f"{name}: no beam in the header: BMAJ and BMIN (degrees) are missing; pass {opt['beam']}")
    else:
        obs_beam, beam_source = hbeam, "BMAJ/BMIN/BPA"

    if unit is not None:
        try:
            data_unit = u.Unit(unit)
        except (TypeError, ValueError):
            raise InputError(f"unit: cannot read {unit!r} as a unit") from None
        origin, text = opt["unit"], str(unit)
    elif "BUNIT" in header and str(header["BUNIT"]).strip():
        data_unit = parse_bunit(header["BUNIT"], name)
        origin, text = "BUNIT", str(header["BUNIT"]).strip()
    else:
        raise InputError(f"{name}: the header has no BUNIT; expected Jy/beam or K (or pass {opt['unit']})")
    plane = _to_jy_per_beam(plane, data_unit, nu, obs_beam, name, notes, origin, text)
    return ObservedImage(
        data=plane,
        wcs=cwcs,
        frequency=nu * u.Hz,
        beam=obs_beam,
        header=header,
        source=source,
        frequency_source=nu_source,
        beam_source=beam_source,
        notes=notes,
    )
