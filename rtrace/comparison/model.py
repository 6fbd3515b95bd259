"""The model side of a comparison: a traced cube at the observed frequency, seen through the observed beam.

A model is a :class:`ModelCube`: planes on rtrace's own sky grid (rows toward
north, columns toward west, square pixels) that are either at native
resolution in Jy/pixel (a :class:`~rtrace.Result`, or a FITS cube written by
:func:`rtrace.io.fits.write_result`) or already convolved with a beam in
Jy/beam (a :class:`~rtrace.observe.SkyMap`, or a FITS cube written by
:func:`rtrace.io.fits.write_skymap`). A cube whose frequencies were written
one file per plane (neither evenly spaced nor geometric, see
:func:`rtrace.io.fits.plane_paths`) is read from the list of its files, or
from the name the whole cube would have had when only its plane files exist.

Between traced frequencies each pixel is interpolated as a power law through
the two bracketing planes, ``log I`` linear in ``log nu``; that is exact for a
spectrum ``I ~ nu^alpha`` and free-free spectra are close to one over a
factor of a few in frequency (thin ``alpha ~ -0.1``, thick ``+2``; Condon &
Ransom 2016, ch. 4, from memory). A pixel whose two values are not both of
one sign (e.g. zero at one frequency) has no power law through them and is
interpolated linearly in ``log nu`` instead.
"""

import math
import os
import re
from dataclasses import dataclass, field

import astropy.units as u
import numpy as np
import radio_beam
from astropy.io import fits
from astropy.wcs.utils import pixel_to_skycoord, proj_plane_pixel_scales

from ..errors import InputError
from ..io.fits import sky_wcs, split_suffix
from ..observe.beam import BeamKernel, describe_beam, same_beam
from ..observe.skymap import SkyMap
from ..transfer.background import Background, background_in_header, background_of
from ..transfer.result import Result
from .observation import _wcs, header_beam, header_frequencies, note, open_image_hdu, parse_bunit

__all__ = ["ModelCube", "model_cube", "model_image", "plane_files", "FREQUENCY_MATCH_RTOL"]

# A requested frequency within this fraction of a traced one uses that plane as it is.
FREQUENCY_MATCH_RTOL = 1e-6

# A beam difference narrower than this (FWHM, in model pixels) along an axis is
# below what the grid can represent: it is widened to this much (and a difference
# narrower along both axes is no convolution at all).
_MIN_DIFFERENCE_FWHM_PIX = 0.25

# Below this many model pixels across the observed beam's minor FWHM the
# convolved model is too coarsely sampled for interpolation onto another grid.
_MIN_PIXELS_PER_BEAM = 3.0


@dataclass
class ModelCube:
    """Model planes on rtrace's sky grid.

    Attributes
    ----------
    data : ndarray (nfreq, ny, nx)
        Jy/pixel (``beams`` None) or Jy/beam.
    frequencies : ndarray (nfreq,)
        Hz.
    wcs : `~astropy.wcs.WCS`
        Celestial WCS of a plane.
    pixel_scale : `~astropy.units.Quantity`
        Side of a square pixel (arcsec).
    beams : list of `radio_beam.Beam` or None
        Beam of each plane for beam-convolved planes.
    source : str
        Description of where the model came from.
    provenance : dict
    background : `~rtrace.transfer.background.Background`
        What was behind the model; ``data`` is always background
        subtracted (what a differenced or interferometric image measures).
    """

    data: np.ndarray
    frequencies: np.ndarray
    wcs: object
    pixel_scale: u.Quantity
    beams: list = None
    source: str = ""
    provenance: dict = field(default_factory=dict)
    background: Background = field(default_factory=Background)

    @property
    def shape(self):
        """``(ny, nx)`` of one plane."""
        return self.data.shape[1:]

    @property
    def center(self):
        """Sky position of the image centre."""
        ny, nx = self.shape
        return pixel_to_skycoord((nx - 1) / 2, (ny - 1) / 2, self.wcs)


def _finite(data, name):
    bad = ~np.isfinite(data)
    if bad.any():
        raise InputError(f"{name}: {int(bad.sum())} non-finite model pixel value(s)")
    return data


def _from_result(result):
    data = _finite(result.jy_per_pixel("subtracted").value, "result")
    ny, nx = data.shape[1:]
    return ModelCube(
        data=data,
        frequencies=result.frequencies.to_value(u.Hz),
        wcs=sky_wcs((ny, nx), result.pixel_scale, result.sky_position),
        pixel_scale=result.pixel_scale.to(u.arcsec),
        beams=None,
        source=f"traced Result ({result.provenance.get('source', 'snapshot')})",
        provenance=dict(result.provenance),
        background=background_of(result),
    )


def _from_skymap(sky):
    data = np.asarray(sky.model.to_value(u.Jy / u.beam), float)
    if getattr(sky, "background", "subtracted") == "included":
        data = data - sky.background_per_beam.to_value(u.Jy / u.beam)[:, None, None]
    data = _finite(data, "result")
    ny, nx = data.shape[1:]
    return ModelCube(
        data=data,
        frequencies=sky.frequencies.to_value(u.Hz),
        wcs=sky_wcs((ny, nx), sky.pixel_scale, sky.sky_position),
        pixel_scale=u.Quantity(sky.pixel_scale).to(u.arcsec),
        beams=list(sky.beams),
        source="noiseless model of a SkyMap",
        provenance=dict(sky.provenance),
        background=background_of(sky),
    )


def _grid_scale(wcs, name):
    """Pixel side (arcsec) of a celestial WCS that is north up, east left, square (rtrace's grid)."""
    scales = proj_plane_pixel_scales(wcs) * 3600.0
    if not np.isclose(scales[0], scales[1], rtol=1e-6, atol=0):
        raise InputError(f"{name}: model pixels must be square, got {scales[0]:.6g} x {scales[1]:.6g} arcsec")
    m = wcs.pixel_scale_matrix * 3600.0 / scales[0]
    if not np.allclose(m, [[-1.0, 0.0], [0.0, 1.0]], atol=1e-6):
        raise InputError(
            f"{name}: the model grid must have north up and east left (column index toward "
            f"west, as rtrace writes it); its pixel matrix is {m.tolist()}"
        )
    return scales[0] * u.arcsec


def _from_fits(obj, name):
    header, data, tables, source = open_image_hdu(obj, name)
    wcs = _wcs(header, tables, name)
    if not wcs.has_celestial:
        raise InputError(f"{name}: the model header has no celestial axes")
    nu, _ = header_frequencies(header, wcs, name)
    if nu is None:
        raise InputError(f"{name}: the model has no frequency: no FREQ axis and none of RESTFRQ, RESTFREQ, FREQ")
    if data.ndim == 2:
        data = data[None]
    elif data.ndim != 3:
        raise InputError(f"{name}: expected a (FREQ, DEC, RA) cube or an image, got {data.ndim} axes")
    if wcs.naxis == 3 and (wcs.wcs.lng, wcs.wcs.lat, wcs.wcs.spec) != (0, 1, 2):
        raise InputError(f"{name}: expected axes RA, DEC, FREQ in this order, as rtrace writes them")
    if data.shape[0] != nu.size:
        raise InputError(f"{name}: {data.shape[0]} planes but {nu.size} frequencies")
    cwcs = wcs.celestial
    scale = _grid_scale(cwcs, name)
    if "BUNIT" not in header:
        raise InputError(f"{name}: the model header has no BUNIT (expected Jy/pixel or Jy/beam)")
    unit = parse_bunit(header["BUNIT"], name)
    beams = None
    if unit.is_equivalent(u.Jy / u.pix):
        data = data * unit.to(u.Jy / u.pix)
    elif unit.is_equivalent(u.Jy / u.beam):
        data = data * unit.to(u.Jy / u.beam)
        table = None
        if tables is not None and "BEAMS" in tables:
            table = tables["BEAMS"]
        if table is not None:
            beams = list(radio_beam.Beams.from_fits_bintable(table))
        else:
            beam = header_beam(header, name)
            if beam is None:
                raise InputError(f"{name}: a Jy/beam model needs BMAJ and BMIN (degrees) in its header")
            beams = [beam] * nu.size
        if len(beams) != nu.size:
            raise InputError(f"{name}: the BEAMS table has {len(beams)} rows for {nu.size} planes")
    else:
        raise InputError(
            f"{name}: model BUNIT is '{header['BUNIT']}'; expected Jy/pixel (as written by "
            "Result.write_fits) or Jy/beam (SkyMap.write_fits)"
        )
    per_sr = (scale.to_value(u.rad)) ** 2 if beams is None else np.array([b.sr.to_value(u.sr) for b in beams])
    data = data - background_in_header(header, nu, per_sr, name)[:, None, None]
    kind = str(header.get("BKGKIND", "none")).strip().lower()
    bg = (
        Background(kind, float(header["BKGTEMP"]))
        if kind in ("cmb", "blackbody") and "BKGTEMP" in header
        else Background()
    )
    return ModelCube(
        data=_finite(data, name),
        frequencies=np.asarray(nu, float),
        wcs=cwcs,
        pixel_scale=scale,
        beams=beams,
        source=f"model FITS {source}",
        provenance={"source": header.get("SNAPSRC")},
        background=bg,
    )


def plane_files(path):
    """The per-plane files rtrace wrote instead of the cube ``path``, in plane order; [] if there are none.

    They are ``<stem>_<k>_<nu>GHz<suffix>`` (see `rtrace.io.fits.plane_paths`)
    in the same folder.
    """
    path = os.fspath(path)
    folder, base = os.path.split(os.path.abspath(path))
    stem, suffix = split_suffix(base)
    pattern = re.compile(re.escape(stem) + r"_(\d+)_[0-9.]+GHz" + re.escape(suffix) + "$")
    try:
        names = os.listdir(folder)
    except OSError:
        return []
    found = sorted((int(m.group(1)), n) for n in names if (m := pattern.match(n)))
    return [os.path.join(folder, n) for _, n in found]


def _same_grid(a, b):
    keys = ("CTYPE1", "CTYPE2", "CRVAL1", "CRVAL2", "CRPIX1", "CRPIX2", "CDELT1", "CDELT2")
    ha, hb = a.to_header(), b.to_header()
    return all(
        ha.get(k) == hb.get(k)
        if isinstance(ha.get(k), str)
        else np.isclose(ha.get(k, 0.0), hb.get(k, 0.0), rtol=1e-12, atol=0)
        for k in keys
    )


def _from_planes(paths, name):
    """One ModelCube from the files of a cube written one file per plane (in plane order)."""
    if not paths:
        raise InputError(f"{name}: an empty list of model files")
    parts = [_from_fits(p, f"{name}[{k}]") for k, p in enumerate(paths)]
    first = parts[0]
    for k, part in enumerate(parts[1:], start=1):
        if part.data.shape[1:] != first.data.shape[1:] or not _same_grid(part.wcs, first.wcs):
            raise InputError(
                f"{name}[{k}]: '{os.fspath(paths[k])}' is not on the sky grid of "
                f"'{os.fspath(paths[0])}'; the planes of one cube share their grid"
            )
        if (part.beams is None) != (first.beams is None):
            raise InputError(f"{name}[{k}]: mixes Jy/pixel and Jy/beam planes")
    nu = np.concatenate([p.frequencies for p in parts])
    if np.unique(nu).size != nu.size:
        raise InputError(f"{name}: {nu.size - np.unique(nu).size} plane(s) repeat a frequency")
    beams = None if first.beams is None else [b for p in parts for b in p.beams]
    return ModelCube(
        data=np.concatenate([p.data for p in parts]),
        frequencies=nu,
        wcs=first.wcs,
        pixel_scale=first.pixel_scale,
        beams=beams,
        source=f"model FITS planes {', '.join(os.path.basename(os.fspath(p)) for p in paths)}",
        provenance=first.provenance,
    )


def model_cube(result, name="result"):
    """A :class:`ModelCube` from a Result, a SkyMap, or a model FITS file / HDU.

    A list or tuple of files is read as the planes of one cube (as rtrace
    writes a cube whose frequencies are neither evenly spaced nor geometric);
    a file name that does not exist, but whose plane files do, reads those.
    """
    if isinstance(result, ModelCube):
        return result
    if isinstance(result, Result):
        return _from_result(result)
    if isinstance(result, SkyMap):
        return _from_skymap(result)
    if isinstance(result, (list, tuple)) and all(isinstance(p, (str, os.PathLike)) for p in result):
        return _from_planes(list(result), name)
    if isinstance(result, (str, os.PathLike)) and not os.path.exists(result):
        planes = plane_files(result)
        if planes:
            return _from_planes(planes, name)
    if isinstance(result, (str, os.PathLike, fits.HDUList, fits.PrimaryHDU, fits.ImageHDU, fits.CompImageHDU)):
        return _from_fits(result, name)
    raise InputError(
        f"{name}: expected an rtrace Result, a SkyMap, a model FITS file / HDU or a list of the "
        f"plane files of one cube, got {type(result).__name__}"
    )


# --------------------------------------------------------------------------------------------
# frequency
# --------------------------------------------------------------------------------------------


def _bracket(nu_hz, frequencies):
    """``(k, None, 0)`` for a traced plane, else ``(lo, hi, w)`` with log-frequency weight w."""
    rel = np.abs(frequencies - nu_hz) / nu_hz
    k = int(np.argmin(rel))
    if rel[k] <= FREQUENCY_MATCH_RTOL:
        return k, None, 0.0
    lo_f, hi_f = frequencies.min(), frequencies.max()
    if nu_hz < lo_f or nu_hz > hi_f:
        traced = ", ".join(f"{f / 1e9:.6g}" for f in np.sort(frequencies))
        raise InputError(
            f"frequency: the observed {nu_hz / 1e9:.6g} GHz lies outside the traced frequencies "
            f"({traced} GHz); trace the model at it or at frequencies around it"
        )
    below = np.where(frequencies < nu_hz)[0]
    above = np.where(frequencies > nu_hz)[0]
    lo = int(below[np.argmax(frequencies[below])])
    hi = int(above[np.argmin(frequencies[above])])
    w = math.log(nu_hz / frequencies[lo]) / math.log(frequencies[hi] / frequencies[lo])
    return lo, hi, w


def power_law_between(a, b, w):
    """Per-pixel ``a^(1-w) b^w`` (a power law in frequency), linear where a and b differ in sign or vanish.

    Returns ``(image, n_linear)``, ``n_linear`` the number of nonzero pixels
    that had to be interpolated linearly.
    """
    a = np.asarray(a, float)
    b = np.asarray(b, float)
    same = (a * b) > 0
    out = a + w * (b - a)
    out[same] = np.sign(a[same]) * np.exp((1.0 - w) * np.log(np.abs(a[same])) + w * np.log(np.abs(b[same])))
    n_linear = int(np.count_nonzero(~same & ((a != 0) | (b != 0))))
    return out, n_linear


# --------------------------------------------------------------------------------------------
# beam
# --------------------------------------------------------------------------------------------


def difference_beam(target, own, pixel_arcsec, name="result"):
    """The beam that takes an image at ``own`` resolution to ``target``, or None if they are the same.

    Uses radio_beam's ``Beam.deconvolve``; raises InputError when ``own`` is
    larger than ``target`` along some direction (no such beam exists).
    """
    if same_beam(target, own):
        return None
    try:
        diff = target.deconvolve(own)
    except Exception:  # radio_beam raises BeamError (not a ValueError) when it cannot
        raise InputError(
            f"{name}: the model's beam ({describe_beam(own)}) is larger than the observed beam "
            f"({describe_beam(target)}) along some direction, so it cannot be brought to the "
            "observed resolution; use a model at native resolution or a smaller beam"
        ) from None
    floor = _MIN_DIFFERENCE_FWHM_PIX * pixel_arcsec
    major, minor = diff.major.to_value(u.arcsec), diff.minor.to_value(u.arcsec)
    if major < floor:
        return None
    if minor < floor:
        diff = radio_beam.Beam(major=major * u.arcsec, minor=floor * u.arcsec, pa=diff.pa)
    return diff


def _to_beam(plane, own_beam, target, scale, shape, name):
    """One plane (Jy/pixel if own_beam is None, else Jy/beam at own_beam) in Jy/beam at ``target``."""
    pix = scale.to_value(u.arcsec)
    pix_sr = (pix * u.arcsec).to_value(u.rad) ** 2
    target_pixels = target.sr.to_value(u.sr) / pix_sr
    if own_beam is None:
        kernel = BeamKernel(target, scale, shape)
        return kernel.convolve(plane) * kernel.area_pixels
    per_pixel = plane / (own_beam.sr.to_value(u.sr) / pix_sr)
    diff = difference_beam(target, own_beam, pix, name)
    if diff is not None:
        per_pixel = BeamKernel(diff, scale, shape).convolve(per_pixel)
    return per_pixel * target_pixels


def model_image(cube, nu_hz, beam, notes, name="result"):
    """The model at ``nu_hz`` in Jy/beam at ``beam`` on the model's own grid.

    Parameters
    ----------
    cube : ModelCube
    nu_hz : float
        Observed frequency (Hz).
    beam : `radio_beam.Beam`
        Observed beam.
    notes : list
        Receives a note (and a ComparisonWarning) for every approximation made.

    Returns
    -------
    ndarray (ny, nx)
    """
    lo, hi, w = _bracket(nu_hz, cube.frequencies)
    beams = cube.beams
    if beam.minor.to_value(u.arcsec) < _MIN_PIXELS_PER_BEAM * cube.pixel_scale.to_value(u.arcsec):
        note(
            notes,
            f"the model's {cube.pixel_scale.to_value(u.arcsec):.4g} arcsec pixels sample the observed "
            f"beam ({describe_beam(beam)}) with fewer than {_MIN_PIXELS_PER_BEAM:g} pixels across its "
            "minor axis; the interpolation onto the observed grid may be inaccurate",
            stacklevel=4,
        )
    if hi is None:
        return _to_beam(cube.data[lo], None if beams is None else beams[lo], beam, cube.pixel_scale, cube.shape, name)
    f_lo, f_hi = cube.frequencies[lo], cube.frequencies[hi]
    if beams is None or same_beam(beams[lo], beams[hi]):
        # interpolate at the model's own resolution, then convolve once
        plane, n_linear = power_law_between(cube.data[lo], cube.data[hi], w)
        image = _to_beam(plane, None if beams is None else beams[lo], beam, cube.pixel_scale, cube.shape, name)
        where = "pixel by pixel at the model's resolution"
    else:
        # the two planes have different beams: bring both to the observed beam first
        a = _to_beam(cube.data[lo], beams[lo], beam, cube.pixel_scale, cube.shape, name)
        b = _to_beam(cube.data[hi], beams[hi], beam, cube.pixel_scale, cube.shape, name)
        image, n_linear = power_law_between(a, b, w)
        where = "pixel by pixel after bringing both planes to the observed beam"
    text = (
        f"model at {nu_hz / 1e9:.6g} GHz interpolated between the traced {f_lo / 1e9:.6g} and "
        f"{f_hi / 1e9:.6g} GHz planes, log I linear in log nu (a power law), {where}"
    )
    if n_linear:
        text += (
            f"; {n_linear} pixel(s) with a zero or a change of sign between the planes interpolated "
            "linearly in log nu instead"
        )
    note(notes, text, stacklevel=4)
    return image
