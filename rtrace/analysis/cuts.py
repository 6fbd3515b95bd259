"""Cuts through an image: profiles of intensity, optical depth, T_b, EM and spectral index.

Pixel coordinates are ``(column, row)`` with ``(0, 0)`` the centre of the
first pixel (astropy's 0-based pixel convention, so sky positions convert
with the image's WCS, ``world_to_pixel``). Profiles are interpolated in the
images (bilinear by default); brightness temperatures and spectral indices
are computed from the interpolated intensities. The unabsorbed profile
(``int j ds``, see :attr:`rtrace.Result.unabsorbed_intensity`) is traced on
first use, so full and unabsorbed profiles can be overlaid to show where
absorption matters. Both profiles are in one background convention
(:mod:`rtrace.transfer.background`): ``subtracted`` (default) gives
``I - I_bg`` and ``int j ds``; ``included`` gives ``I`` and
``I_bg + int j ds`` (the background unattenuated). Either way the gap
between them is the absorption alone.
"""

import math

import astropy.units as u
import numpy as np
from scipy import ndimage

from ..errors import InputError
from ..transfer.background import brightness_temperature_cgs, check_convention, describe

__all__ = ["Cut", "cut"]


def _endpoint(result, point, name):
    from astropy.coordinates import SkyCoord

    if isinstance(point, SkyCoord):
        from ..io.fits import sky_wcs

        wcs = sky_wcs(result.shape[1:], result.pixel_scale, result.sky_position)
        col, row = wcs.world_to_pixel(point)
        return float(col), float(row)
    try:
        col, row = (float(v) for v in point)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected (column, row) pixel coordinates or a SkyCoord, got {point!r}") from None
    if not (math.isfinite(col) and math.isfinite(row)):
        raise InputError(f"{name}: pixel coordinates must be finite, got {point!r}")
    return col, row


def _sample(planes, rows, cols, order):
    """Interpolate each plane of ``planes`` (..., ny, nx) at the points; NaN outside the image."""
    lead = planes.shape[:-2]
    flat = planes.reshape((-1,) + planes.shape[-2:])
    out = np.array([ndimage.map_coordinates(p, [rows, cols], order=order, mode="constant", cval=np.nan) for p in flat])
    return out.reshape(lead + (len(rows),))


def cut(result, start, end, num=None, order=1, background="subtracted"):
    """Profiles along the straight line from ``start`` to ``end``.

    Parameters
    ----------
    result : `~rtrace.Result`
    start, end : (column, row) or `~astropy.coordinates.SkyCoord`
    num : int, optional
        Number of samples (default: one per pixel of length, at least 2).
    order : int, optional
        Spline order of the interpolation (1: bilinear, 0: nearest pixel).
    background : {"subtracted", "included"}, optional
        Convention of the intensity, unabsorbed intensity and brightness
        temperature profiles (see the module notes).

    Returns
    -------
    `Cut`
    """
    convention = check_convention(background)
    c0, r0 = _endpoint(result, start, "start")
    c1, r1 = _endpoint(result, end, "end")
    length = math.hypot(c1 - c0, r1 - r0)
    if length == 0.0:
        raise InputError("start, end: the cut has zero length")
    num = max(int(math.ceil(length)) + 1, 2) if num is None else int(num)
    if num < 2:
        raise InputError(f"num: need at least 2 samples, got {num}")
    if order not in (0, 1, 3):
        raise InputError(f"order: expected 0, 1 or 3, got {order}")
    frac = np.linspace(0.0, 1.0, num)
    cols = c0 + frac * (c1 - c0)
    rows = r0 + frac * (r1 - r0)
    return Cut(result, cols, rows, frac * length, order, convention)


class Cut:
    """Profiles along a cut.

    Attributes
    ----------
    columns, rows : ndarray (num,)
        Sample positions (pixel coordinates).
    offset : Quantity (num,)
        Angular distance from the start (arcsec).
    distance : Quantity (num,)
        Physical distance from the start at the source (pc).
    frequencies : Quantity (nfreq,)
    intensity, tau, emission_measure, brightness_temperature, spectral_index
        Profiles, ``(nfreq, num)`` except EM ``(num,)``. Intensity and the
        Planck brightness temperature are in the cut's ``background``
        convention (subtracted: ``T_P(I) - T_P(I_bg)``); the spectral index
        is that of the intensity profile.
    unabsorbed_intensity : Quantity (nfreq, num)
        ``int j ds`` along the same samples (traced on first use), plus the
        unattenuated background ``I_bg`` in the ``included`` convention.
    background : {"subtracted", "included"}
    """

    def __init__(self, result, cols, rows, offset_pix, order, background="subtracted"):
        self.result = result
        self.columns, self.rows = cols, rows
        self.order = order
        self.background = check_convention(background)
        self._bg = np.asarray(result.background.value, float)[:, None]
        self.offset = offset_pix * result.pixel_scale.to(u.arcsec)
        self.distance = (offset_pix * result.pixel_size).to(u.pc)
        self.frequencies = result.frequencies
        subtracted = result.specific_intensity("subtracted")
        delta = _sample(subtracted.value, rows, cols, order)
        self._i = delta if self.background == "subtracted" else delta + self._bg
        self.intensity = u.Quantity(self._i, subtracted.unit)
        self.tau = _sample(result.tau, rows, cols, order)
        self.emission_measure = u.Quantity(
            _sample(result.emission_measure.value, rows, cols, order), result.emission_measure.unit
        )
        nu = self.frequencies.to_value(u.Hz)[:, None]
        self.brightness_temperature = u.Quantity(
            brightness_temperature_cgs(nu, delta, self._bg, "planck", self.background), u.K
        )
        self._unabsorbed = None

    @property
    def spectral_index(self):
        """``d ln I / d ln nu`` at each traced frequency (second-order differences; NaN with one frequency)."""
        nu = self.frequencies.to_value(u.Hz)
        if len(nu) < 2:
            return np.full_like(self._i, np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.gradient(np.log(self._i), np.log(nu), axis=0)

    @property
    def unabsorbed_intensity(self):
        """``int j ds`` along the cut's samples, ``(nfreq, num)`` (traced on first use, then kept)."""
        if self._unabsorbed is None:
            thin = self.result.unabsorbed_intensity
            values = _sample(thin.value, self.rows, self.columns, self.order)
            if self.background == "included":
                values = values + self._bg
            self._unabsorbed = u.Quantity(values, thin.unit)
        return self._unabsorbed

    def describe_background(self):
        """One line saying the profiles' background convention (for file headers)."""
        return describe(self.background, self.result)

    def to_table(self):
        """The profiles as an astropy `~astropy.table.Table`, one row per sample, with units.

        Columns ``offset`` (arcsec), ``distance`` (pc), ``column``, ``row``
        (pixels), ``emission_measure`` (pc cm-6), then for each frequency
        ``<f>GHz`` tag: ``I_<tag>`` and ``I_unabsorbed_<tag>`` (erg s-1
        cm-2 Hz-1 sr-1), ``tau_<tag>``, ``Tb_<tag>`` (Planck brightness
        temperature, K) and ``alpha_<tag>``. Each column has a description;
        ``meta`` holds the title, the source and the ``background`` convention
        (:meth:`describe_background`).
        """
        from astropy.table import Table

        meta = {
            "title": "rtrace cut",
            "source": str(self.result.provenance.get("source", "unknown")),
            "background": self.describe_background(),
        }
        table = Table(meta=meta)

        def add(name, values, description, unit=None):
            table[name] = np.asarray(values, float)
            table[name].unit, table[name].description = unit, description

        add("offset", self.offset.to_value(u.arcsec), "angular distance from the start of the cut", u.arcsec)
        add("distance", self.distance.to_value(u.pc), "distance from the start at the source", u.pc)
        add("column", self.columns, "pixel column of the sample", u.pix)
        add("row", self.rows, "pixel row of the sample", u.pix)
        add("emission_measure", self.emission_measure.to_value(u.pc * u.cm**-6), "emission measure", u.pc * u.cm**-6)
        unit = self.intensity.unit
        thin = self.unabsorbed_intensity.to_value(unit)
        tb = self.brightness_temperature.to_value(u.K)
        alpha = self.spectral_index
        for k, f in enumerate(self.frequencies.to_value(u.GHz)):
            tag = f"{f:.6g}GHz"
            add(
                f"I_{tag}",
                self.intensity.value[k],
                f"specific intensity at {tag} (background: {self.background})",
                unit,
            )
            add(f"I_unabsorbed_{tag}", thin[k], f"unabsorbed intensity, int j ds, at {tag}", unit)
            add(f"tau_{tag}", self.tau[k], f"optical depth at {tag}")
            add(f"Tb_{tag}", tb[k], f"Planck brightness temperature at {tag}", u.K)
            add(f"alpha_{tag}", alpha[k], f"spectral index d ln I / d ln nu at {tag}")
        return table

    def write(self, path):
        """Write :meth:`to_table` as an ECSV file (``.ecsv`` by convention), atomically; returns the path."""
        from ..io.tables import write_ecsv

        return write_ecsv(path, self.to_table())

    def plot(self, path=None, frequencies=None):
        """Figure: full (solid) and unabsorbed (dashed) intensity profiles, and tau, along the cut.

        ``frequencies``: indices of the traced frequencies to show (default all).
        Saved atomically to ``path`` if given; returns the matplotlib Figure.
        A convenience for :func:`rtrace.plot.plot_cut` (imported here, on use: plot is a layer above).
        """
        from ..plot.cuts import plot_cut

        return plot_cut(self, path, frequencies)
