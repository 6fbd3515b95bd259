"""``compare``: a model brought to an observed image's frequency, beam and pixel grid, and the residual.

Steps
-----
1. The observed image is read (:func:`~rtrace.comparison.read_observation`):
   Jy/beam pixels, celestial WCS, frequency, beam.
2. The model is taken at the observed frequency (a traced plane, or a
   per-pixel power law between the two bracketing planes) and convolved with
   the observed beam on its own grid (:class:`rtrace.observe.beam.BeamKernel`),
   which gives Jy/beam; a model already convolved with a beam is convolved
   with the difference beam (radio_beam's ``Beam.deconvolve``).
3. The convolved model is reprojected onto the observed grid with
   ``reproject.reproject_interp``. Jy/beam is a surface brightness (the
   intensity times a fixed beam solid angle), which is resampled by
   evaluating it at the new pixel centres, not by summing it; and the pixels
   of a radio image are samples of the beam-convolved sky at their centres,
   which is what interpolation gives (``reproject_exact`` would average over
   each output pixel and so add a pixel-sized box to the beam). The default
   order is bicubic: the convolved model is smooth on the beam scale and
   sampled by several pixels per beam, where a cubic spline is far more
   accurate than bilinear interpolation.
4. residual = observation - model. Totals and ratios are taken over the
   common footprint: observed pixels that are finite and that the model
   covers (finite after reprojection).
"""

import os
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord
from astropy.io import fits
from astropy.wcs.utils import pixel_to_skycoord

from ..errors import InputError
from ..observe.beam import beam_cards, describe_beam
from ..quantities import positive_scalar
from .model import model_cube, model_image
from .observation import JY_PER_BEAM, note, read_observation

__all__ = ["compare", "Comparison", "ApertureFlux", "RadialProfile", "REPROJECT_ORDERS"]

REPROJECT_ORDERS = ("bicubic", "bilinear", "biquadratic", "nearest-neighbor")


def compare(
    result, observation, *, frequency=None, beam=None, unit=None, order="bicubic", model_name="result", max_memory=None
):
    """Compare a model with an observed image, on the observed image's grid.

    Parameters
    ----------
    result : `~rtrace.Result`, SkyMap, str, path-like, HDU or list of paths
        The model: a traced Result (native resolution), a SkyMap (its
        noiseless ``model``, already convolved with a beam no larger than the
        observed one), or a model FITS cube written by ``Result.write_fits``
        (Jy/pixel) or ``SkyMap.write_fits`` (Jy/beam) with a frequency axis
        (``FREQ`` or ``FREQ-LOG``; a cube written one file per plane is given
        as the list of its files, or by the name the cube would have had).
    observation : str, path-like, HDU, HDUList or ObservedImage
        The observed image: 2D, or a cube whose frequency and Stokes axes
        have length 1; ``BUNIT`` Jy/beam (any case) or a temperature (K).
    frequency : `~astropy.units.Quantity`, optional
        Observed frequency, replacing the header's (spectral axis, RESTFRQ,
        RESTFREQ or FREQ); needed if the header has none.
    beam : `radio_beam.Beam`, optional
        Observed beam, replacing BMAJ/BMIN/BPA; needed if the header has none.
    unit : str or `~astropy.units.Unit`, optional
        Unit of the observed pixels, replacing BUNIT.
    order : {"bicubic", "bilinear", "biquadratic", "nearest-neighbor"}
        Interpolation order of ``reproject.reproject_interp``.
    model_name : str, optional
        What messages about the model call it (the command line says
        ``model``, its argument's name).
    max_memory : `~astropy.units.Quantity` or str, optional
        Bytes the beam convolution may take (``"2 GB"``); the machine's
        available memory is always checked.

    Returns
    -------
    Comparison

    Raises
    ------
    InputError
        Unreadable or incomplete observation (no frequency, no beam, unit not
        Jy/beam or K), a frequency outside the traced range, a model beam
        larger than the observed one, no overlap between the two, an observed
        beam wider than the model's field (most of the model's flux would be
        lost at its edges; see :func:`rtrace.observe.beam.check_beam_fits_field`)
        or a beam kernel that would not fit in memory (checked before it is made).
    """
    if order not in REPROJECT_ORDERS:
        raise InputError(f"order: expected one of {', '.join(REPROJECT_ORDERS)}, got {order!r}")
    from reproject import reproject_interp  # imported here: it takes a while to import

    obs = read_observation(observation, frequency=frequency, beam=beam, unit=unit)
    notes = list(obs.notes)
    cube = model_cube(result, model_name)
    _check_beam(obs, cube, model_name, max_memory)
    native = model_image(cube, obs.frequency.to_value(u.Hz), obs.beam, notes, model_name)
    on_grid, footprint = reproject_interp((native, cube.wcs), obs.wcs, shape_out=obs.shape, order=order)
    on_grid = np.where(footprint > 0, on_grid, np.nan)
    common = np.isfinite(obs.data) & np.isfinite(on_grid)
    n_common, n_obs = int(common.sum()), int(np.isfinite(obs.data).sum())
    if n_common == 0:
        raise InputError(
            "observation: the model and the observed image do not overlap on the sky "
            f"(model centre {cube.center.to_string('hmsdms')}, observed grid of {obs.shape[1]} x "
            f"{obs.shape[0]} pixels)"
        )
    if n_common < n_obs:
        note(
            notes,
            f"the model covers {n_common} of the {n_obs} observed pixels "
            f"({100.0 * n_common / n_obs:.1f} %); totals and ratios use those (the common footprint)",
        )
    return Comparison(obs, on_grid, common, cube, notes, order)


def _check_beam(obs, cube, model_name, max_memory):
    """The observed beam fits the model's field, and its kernel fits in memory (before it is made)."""
    from ..observe.skymap import check_observation

    field = f"{obs.source or 'observation'} BMAJ" if obs.beam_source == "BMAJ/BMIN/BPA" else obs.beam_source
    check_observation(
        [obs.beam],
        cube.pixel_scale,
        cube.shape,
        [obs.frequency.to_value(u.Hz)],
        max_memory=max_memory,
        beam_field=field,
        image_field=model_name,
        image="model",
    )


@dataclass(frozen=True)
class ApertureFlux:
    """Flux densities within a region (Jy), over the part of it in the common footprint.

    Attributes
    ----------
    model, observation, residual : `~astropy.units.Quantity`
        Jy.
    ratio : float
        ``model / observation``.
    pixels : float
        Pixels counted (weighted by the fraction of each inside the region).
    complete : bool
        False when part of the region lies outside the common footprint.
    """

    model: u.Quantity
    observation: u.Quantity
    residual: u.Quantity
    ratio: float
    pixels: float
    complete: bool


@dataclass(frozen=True)
class RadialProfile:
    """Azimuthal averages in rings about a centre (Jy/beam), over the common footprint.

    Attributes
    ----------
    radius, inner, outer : `~astropy.units.Quantity`
        Mid radius and edges of each ring (arcsec).
    model, observation, residual : `~astropy.units.Quantity`
        Mean Jy/beam in each ring (NaN for an empty ring).
    pixels : ndarray of int
        Pixels in each ring.
    center : `~astropy.coordinates.SkyCoord`
    """

    radius: u.Quantity
    inner: u.Quantity
    outer: u.Quantity
    model: u.Quantity
    observation: u.Quantity
    residual: u.Quantity
    pixels: np.ndarray
    center: SkyCoord


class Comparison:
    """A model and an observed image on the observed image's grid. Build one with :func:`compare`.

    Attributes
    ----------
    observation : `~astropy.units.Quantity` (ny, nx)
        Observed image, Jy/beam (converted from K if it was in K).
    model : `~astropy.units.Quantity` (ny, nx)
        Model at the observed frequency and beam, Jy/beam; NaN where the
        model does not reach.
    residual : `~astropy.units.Quantity` (ny, nx)
        ``observation - model``, Jy/beam; NaN outside the common footprint.
    footprint : ndarray of bool (ny, nx)
        The common footprint: pixels where both are finite.
    flux_ratio : float
        Model total over observed total within the common footprint.
    model_flux, observed_flux : `~astropy.units.Quantity`
        Those totals in Jy (sum of Jy/beam over the beam area in pixels).
    frequency : `~astropy.units.Quantity`
        Observed frequency (Hz) at which the model was taken.
    beam : `radio_beam.Beam`
        Observed beam, with which the model was convolved.
    wcs : `~astropy.wcs.WCS`
        Celestial WCS of the observed grid.
    notes : list of str
        Everything the comparison approximated or converted (also issued as
        ComparisonWarning).
    beam_area_pixels : float
        Observed beam solid angle over the observed pixel solid angle.
    model_center : `~astropy.coordinates.SkyCoord`
        Centre of the model's field.
    pixel_scale : `~astropy.units.Quantity`
        Observed pixel side at the reference point (arcsec).
    order : str
        The ``reproject_interp`` order used.
    model_source, observation_source, frequency_source, beam_source : str
        Where the model, the image, its frequency and its beam came from.
    """

    def __init__(self, obs, model, footprint, cube, notes, order):
        self._obs = np.asarray(obs.data, float)
        self._model = np.asarray(model, float)
        self.footprint = footprint
        self._residual = np.where(footprint, self._obs - self._model, np.nan)
        self.frequency = obs.frequency.to(u.Hz)
        self.beam = obs.beam
        self.wcs = obs.wcs
        self.notes = list(notes)
        self.order = order
        self.beam_area_pixels = obs.beam_area_pixels
        self.pixel_scale = obs.pixel_scale
        self.model_center = cube.center
        self.model_source = cube.source
        self.model_provenance = dict(cube.provenance)
        self.model_background = cube.background
        self.observation_source = obs.source
        self.frequency_source = obs.frequency_source
        self.beam_source = obs.beam_source
        self.observed_header = obs.header
        m = float(self._model[footprint].sum())
        o = float(self._obs[footprint].sum())
        self.model_flux = m / self.beam_area_pixels * u.Jy
        self.observed_flux = o / self.beam_area_pixels * u.Jy
        if o > 0:
            self.flux_ratio = m / o
        else:
            self.flux_ratio = float("nan")
            note(
                self.notes,
                f"the observed total over the common footprint is {o / self.beam_area_pixels:.4g} Jy "
                "(not positive): no flux ratio",
            )

    # -- images -----------------------------------------------------------------------------------
    @property
    def observation(self):
        """Observed image, Jy/beam ``(ny, nx)``."""
        return u.Quantity(self._obs, JY_PER_BEAM, copy=False)

    @property
    def model(self):
        """Model at the observed frequency and beam, Jy/beam ``(ny, nx)``; NaN where it does not reach."""
        return u.Quantity(self._model, JY_PER_BEAM, copy=False)

    @property
    def residual(self):
        """``observation - model``, Jy/beam ``(ny, nx)``; NaN outside the common footprint."""
        return u.Quantity(self._residual, JY_PER_BEAM, copy=False)

    @property
    def shape(self):
        """``(ny, nx)`` of the observed grid."""
        return self._obs.shape

    # -- measurements -----------------------------------------------------------------------------
    def _region_weights(self, region, mode):
        import regions

        if isinstance(region, regions.SkyRegion):
            pix = region.to_pixel(self.wcs)
        elif isinstance(region, regions.PixelRegion):
            pix = region
        else:
            raise InputError(f"region: expected a regions SkyRegion or PixelRegion, got {type(region).__name__}")
        try:
            mask = pix.to_mask(mode=mode)
        except ValueError as exc:
            raise InputError(f"mode: {exc}") from None
        if isinstance(mask, list):  # a compound region can give several masks
            raise InputError("region: give a single region (its mask must be one piece)")
        weights = mask.to_image(self.shape)
        if weights is None or not np.any(weights > 0):
            raise InputError("region: does not overlap the observed image")
        return np.asarray(weights, float), float(np.sum(mask.data))

    def aperture_flux(self, region, mode="exact"):
        """Flux densities of model, observation and residual within a region.

        Parameters
        ----------
        region : `regions.SkyRegion` or `regions.PixelRegion`
            A sky region (converted with the observed WCS) or one in pixels of
            the observed grid.
        mode : {"exact", "center", "subpixels"}
            How pixels on the boundary count (the ``regions`` mask mode):
            ``exact`` weights them by the fraction inside.

        Returns
        -------
        ApertureFlux
            ``S = sum(w * I_beam) / beam_area_pixels`` over the common
            footprint (common practice: a Jy/beam map summed over pixels and
            divided by the beam area in pixels is a flux density).
        """
        weights, full = self._region_weights(region, mode)
        w = np.where(self.footprint, weights, 0.0)
        counted = float(w.sum())
        if counted == 0:
            raise InputError("region: lies entirely outside the common footprint of model and observation")
        m = float(np.sum(w * np.nan_to_num(self._model))) / self.beam_area_pixels
        o = float(np.sum(w * np.nan_to_num(self._obs))) / self.beam_area_pixels
        complete = bool(np.isclose(counted, full, rtol=1e-9, atol=1e-9))
        return ApertureFlux(
            model=m * u.Jy,
            observation=o * u.Jy,
            residual=(o - m) * u.Jy,
            ratio=m / o if o != 0 else float("nan"),
            pixels=counted,
            complete=complete,
        )

    def flux_table(self, apertures=(), title=None):
        """Flux densities over the common footprint and in each aperture, as an astropy `~astropy.table.Table`.

        Parameters
        ----------
        apertures : sequence of region or (label, region)
            `regions.SkyRegion` / `regions.PixelRegion` (as for
            :meth:`aperture_flux`, exact mode); a bare region is labelled
            ``aperture <k>``.
        title : str, optional
            The table's ``meta["title"]``.

        Returns
        -------
        `astropy.table.Table`
            One row for the common footprint, then one per aperture: ``aperture``
            (label), ``model``, ``observed``, ``residual`` (Jy; observed -
            model), ``ratio`` (model / observed), ``pixels`` (pixels counted,
            boundary pixels by the fraction inside) and ``complete`` (False when
            part of the aperture lies outside the common footprint). ``meta``
            holds the frequency, the observation, the ``background``
            convention and the comparison's notes.
        """
        from astropy.table import Table

        rows = [
            (
                "common footprint",
                self.model_flux.to_value(u.Jy),
                self.observed_flux.to_value(u.Jy),
                (self.observed_flux - self.model_flux).to_value(u.Jy),
                self.flux_ratio,
                float(self.footprint.sum()),
                True,
            )
        ]
        for k, item in enumerate(apertures):
            label, region = item if isinstance(item, tuple) else (f"aperture {k + 1}", item)
            a = self.aperture_flux(region)
            rows.append(
                (
                    str(label),
                    a.model.to_value(u.Jy),
                    a.observation.to_value(u.Jy),
                    a.residual.to_value(u.Jy),
                    a.ratio,
                    a.pixels,
                    a.complete,
                )
            )
        columns = [
            ("aperture", None, "where the flux densities are summed"),
            ("model", u.Jy, "flux density of the model convolved with the observed beam, on the observed grid"),
            ("observed", u.Jy, "flux density of the observation"),
            ("residual", u.Jy, "observed - model"),
            ("ratio", None, "model / observed"),
            ("pixels", u.pix, "pixels counted (boundary pixels weighted by the fraction inside)"),
            ("complete", None, "False when part of the aperture lies outside the common footprint"),
        ]
        meta = {
            "title": title or f"rtrace comparison with {self.observation_source}",
            "frequency": f"{self.frequency.to_value(u.GHz):.8g} GHz",
            "observation": str(self.observation_source),
            "background": f"subtracted from the model (behind the source: {self.model_background.label()}): "
            "an observed image holds no uniform level",
            "notes": list(self.notes),
        }
        table = Table(rows=rows, names=[c[0] for c in columns], meta=meta)
        for name, unit, description in columns:
            table[name].unit, table[name].description = unit, description
        return table

    def _radii_arcsec(self, center):
        ny, nx = self.shape
        rows, cols = np.mgrid[0:ny, 0:nx]
        coords = pixel_to_skycoord(cols, rows, self.wcs)
        return center.separation(coords).to_value(u.arcsec)

    def radial_profile(self, center=None, bin_width=None, max_radius=None):
        """Azimuthal averages of model, observation and residual in rings.

        Parameters
        ----------
        center : `~astropy.coordinates.SkyCoord` or `regions.PixCoord`, optional
            Centre of the rings; default the centre of the model's field.
        bin_width : `~astropy.units.Quantity`, optional
            Ring width (angle); default half the beam's geometric-mean FWHM.
        max_radius : `~astropy.units.Quantity`, optional
            Outer edge of the last ring; default the farthest pixel of the
            common footprint.

        Returns
        -------
        RadialProfile
        """
        import regions

        if center is None:
            center = self.model_center
        elif isinstance(center, regions.PixCoord):
            center = center.to_sky(self.wcs)
        elif not isinstance(center, SkyCoord) or not center.isscalar:
            raise InputError(f"center: expected a single SkyCoord or a regions.PixCoord, got {center!r}")
        if bin_width is None:
            width = 0.5 * float(np.sqrt(self.beam.major.to_value(u.arcsec) * self.beam.minor.to_value(u.arcsec)))
        else:
            width = _angle_arcsec(bin_width, "bin_width")
        r = self._radii_arcsec(center)
        inside = self.footprint
        top = float(r[inside].max()) if max_radius is None else _angle_arcsec(max_radius, "max_radius")
        nbins = max(1, int(np.ceil(top / width)))
        edges = np.arange(nbins + 1) * width
        index = np.floor(r / width).astype(int)
        use = inside & (index < nbins) & (r <= top)
        counts = np.bincount(index[use], minlength=nbins)

        def mean(img):
            sums = np.bincount(index[use], weights=img[use], minlength=nbins)
            with np.errstate(invalid="ignore", divide="ignore"):
                return np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)

        return RadialProfile(
            radius=0.5 * (edges[:-1] + edges[1:]) * u.arcsec,
            inner=edges[:-1] * u.arcsec,
            outer=edges[1:] * u.arcsec,
            model=mean(self._model) * JY_PER_BEAM,
            observation=mean(self._obs) * JY_PER_BEAM,
            residual=mean(self._residual) * JY_PER_BEAM,
            pixels=counts,
            center=center,
        )

    # -- output -------------------------------------------------------------------------------------
    def summary(self):
        """A few lines describing the comparison: frequency, beam, totals, ratio, notes."""
        ny, nx = self.shape
        lines = [
            f"model        {self.model_source}",
            f"observation  {self.observation_source}: {nx} x {ny} pixels of {self.pixel_scale.to_value(u.arcsec):.4g}"
            f" arcsec",
            f"frequency    {self.frequency.to_value(u.GHz):.6g} GHz (from {self.frequency_source})",
            f"beam         {describe_beam(self.beam)} (from {self.beam_source})",
            f"footprint    {int(self.footprint.sum())} pixels in common",
            f"flux         model {_jy_text(self.model_flux)}, observed {_jy_text(self.observed_flux)}",
            f"flux ratio   model / observed = {self.flux_ratio:.4f}",
        ]
        resid = self._residual[self.footprint]
        worst = float(np.max(np.abs(resid)))
        peak = float(np.max(np.abs(self._obs[self.footprint])))
        text = f"residual     rms {float(np.sqrt(np.mean(resid**2))):.4g} Jy/beam, max |residual| {worst:.4g} Jy/beam"
        if peak > 0:
            text += f" ({100.0 * worst / peak:.3g} % of the observed peak)"
        lines.append(text)
        lines += [f"note         {n}" for n in self.notes]
        return "\n".join(lines)

    def figure(self, stretch="asinh", cmap=None, residual_cmap="RdBu_r", title=None):
        """Observation, model and residual side by side (see :func:`rtrace.plot.plot_comparison`).

        A convenience: the drawing lives in :mod:`rtrace.plot.comparison` (imported here, on use).
        """
        from ..plot.comparison import plot_comparison

        return plot_comparison(self, stretch=stretch, cmap=cmap, residual_cmap=residual_cmap, title=title)

    def plot(self, path=None, **kwargs):
        """:meth:`figure`, saved atomically to ``path`` when given (format from the suffix)."""
        from ..plot.comparison import plot_comparison

        return plot_comparison(self, path, **kwargs)

    def write_fits(self, path, overwrite=True):
        """Write residual, model and observation on the observed grid to one FITS file, atomically.

        The primary HDU (``EXTNAME = 'RESIDUAL'``) holds observation - model,
        extensions ``MODEL`` and ``OBSERVED`` the two images, all in Jy/beam
        with the observed celestial WCS, a degenerate ``FREQ`` axis at the
        compared frequency, the beam (BMAJ/BMIN/BPA) and ``FLUXRAT`` (model /
        observed over the common footprint); the notes are HISTORY lines.

        Returns
        -------
        pathlib.Path
        """
        from pathlib import Path

        from ..io.atomic import atomic_path
        from ..io.fits import add_provenance, header_ascii
        from ..transfer.background import header_cards

        path = os.fspath(path)
        directory = os.path.dirname(os.path.abspath(path))
        if not os.path.isdir(directory):
            raise InputError(f"path: directory '{directory}' does not exist")
        if not overwrite and os.path.exists(path):
            raise InputError(f"path: '{path}' exists and overwrite=False")
        base = self.wcs.to_header()
        base["WCSAXES"] = 3
        base["CTYPE3"] = ("FREQ", "frequency of the comparison")
        base["CUNIT3"] = "Hz"
        base["CRPIX3"] = 1.0
        base["CRVAL3"] = (float(self.frequency.to_value(u.Hz)), "[Hz] frequency")
        base["CDELT3"] = (1.0, "[Hz] a single plane")
        if "SPECSYS" in self.observed_header:
            base["SPECSYS"] = self.observed_header["SPECSYS"]
        base["BUNIT"] = ("Jy/beam", "unit of the data")
        for key, value, comment in beam_cards(self.beam):
            base[key] = (value, comment)
        ratio = self.flux_ratio if np.isfinite(self.flux_ratio) else "nan"
        base["FLUXRAT"] = (ratio, "model / observed total, common footprint")
        base["INTERP"] = (self.order, "reproject_interp order")
        hdus = []
        for kind, data, extname in (
            ("residual", self._residual, "RESIDUAL"),
            ("model", self._model, "MODEL"),
            ("observation", self._obs, "OBSERVED"),
        ):
            hdr = base.copy()
            hdr["EXTNAME"] = extname
            hdr["RTQUANT"] = (kind, "rtrace quantity in the data")
            values = np.ascontiguousarray(data[None], dtype=np.float32)
            hdu = fits.PrimaryHDU(values) if not hdus else fits.ImageHDU(values)
            hdu.header.extend(hdr, update=True)
            if not hdus:
                add_provenance(
                    hdu.header, {k: v for k, v in self.model_provenance.items() if k not in ("beam", "noise")}
                )
                hdu.header.extend(header_cards("subtracted", self.model_background))
                hdu.header.add_history(header_ascii(f"model: {self.model_source}"))
                hdu.header.add_history(header_ascii(f"observation: {self.observation_source}"))
                for text in self.notes:
                    hdu.header.add_history(header_ascii(f"note: {text}"))
            hdus.append(hdu)
        with atomic_path(path) as tmp:
            fits.HDUList(hdus).writeto(tmp, output_verify="exception")
        return Path(path)

    def __repr__(self):
        ny, nx = self.shape
        return (
            f"<Comparison {nx}x{ny} pixels at {self.frequency.to_value(u.GHz):.6g} GHz, "
            f"flux ratio {self.flux_ratio:.4f}, {len(self.notes)} note(s)>"
        )


def _angle_arcsec(value, name):
    return positive_scalar(value, u.arcsec, name, "an angle")


def _jy_text(q):
    v = float(q.to_value(u.Jy))
    for factor, prefix in ((1.0, ""), (1e-3, "m"), (1e-6, "u"), (1e-9, "n")):
        if abs(v) >= factor:
            return f"{v / factor:.4g} {prefix}Jy"
    return f"{v:.4g} Jy"
