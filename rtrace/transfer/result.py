"""Result: the sky-plane product of a trace, before any instrument is applied."""

import astropy.units as u
import numpy as np
from astropy.coordinates import SkyCoord

from ..errors import InputError, PixelAccuracyWarning  # noqa: F401  (also rtrace.transfer.result.PixelAccuracyWarning)
from ..physics.constants import JANSKY, PC
from .background import Background, brightness_temperature_cgs, check_convention, resolve_convention
from .pixel_error import PixelError

__all__ = ["Result", "PixelError", "PixelAccuracyWarning", "INTENSITY_UNIT", "DEFAULT_SKY_POSITION", "QUANTITIES"]

#: The images a Result holds, by the names writers, jobs and pictures use.
QUANTITIES = ("intensity", "tau", "emission_measure", "brightness_temperature")

INTENSITY_UNIT = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)
# Where an image lands on the sky when the View gives no sky_position (written to FITS headers).
DEFAULT_SKY_POSITION = SkyCoord(ra=0.0 * u.deg, dec=0.0 * u.deg, frame="icrs")


class Result:
    """Intensity, optical depth and emission measure images of one view.

    Attributes
    ----------
    intensity : `~astropy.units.Quantity` (nfreq, ny, nx)
        Specific intensity in erg s-1 cm-2 Hz-1 sr-1, the mean over each
        pixel, background subtracted (``I - I_bg``: empty sky reads 0); the
        full intensity is ``specific_intensity(background="included")``.
        See :mod:`rtrace.transfer.background` for the convention.
    tau : ndarray (nfreq, ny, nx)
        Optical depth through the grid, the mean over each pixel.
    emission_measure : `~astropy.units.Quantity` (ny, nx)
        In pc cm-6, the mean over each pixel: ``int n_e^2 dl`` by default,
        ``int n_e (sum_i Z_i^2 n_i) dl`` when traced with
        ``emission_measure="ion_term"``; :attr:`em_definition` says which.
    frequencies : `~astropy.units.Quantity` (nfreq,)
    pixel_solid_angle : `~astropy.units.Quantity`
        Solid angle of one pixel, ``(pixel size / distance)^2`` sr.
    pixel_size : `~astropy.units.Quantity`
        Physical size of a pixel at the source (cm).
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a pixel, ``pixel_size / distance`` (arcsec).
    background : `~astropy.units.Quantity` (nfreq,)
        Intensity ``I_bg`` that entered from the far side (zero without one).
    background_info : `~rtrace.transfer.background.Background`
        What that background is (kind and blackbody temperature).
    pixel_error : `PixelError` or None
        Achieved accuracy of the pixel footprint means (see :class:`PixelError`).
    view, center, provenance
        The view, the image centre in snapshot coordinates (cm) and the
        snapshot's provenance.

    Notes
    -----
    Six conveniences hand the Result to the layers above it, each the
    same as calling the function it names: :meth:`observe`
    (:func:`rtrace.observe.observe`), :meth:`write_fits`
    (:func:`rtrace.io.fits.write_result`), :meth:`cut`
    (:func:`rtrace.analysis.cuts.cut`), :meth:`tau_unity_depth` and
    :meth:`contribution` (:mod:`rtrace.analysis.depth`) and
    :meth:`turnover_frequency`
    (:func:`rtrace.analysis.spectra.tau_unity_frequency`). They import
    those layers when called, never when this module loads; no other
    method reaches above the transfer layer (``tests/test_layers.py``).
    """

    # Results pickled before the background was described carry none of their own
    _background_info = None
    pixel_error = None

    def __init__(
        self,
        intensity,
        tau,
        em,
        nu,
        view,
        pixel_size_cm,
        center_cm,
        provenance,
        rays_per_pixel=1,
        background=None,
        background_info=None,
        pixel_error=None,
    ):
        self._intensity = intensity
        self.tau = tau
        self._em = em
        self.frequencies = u.Quantity(nu, u.Hz)
        self.view = view
        self.pixel_size = pixel_size_cm * u.cm
        self.center = center_cm * u.cm
        self.provenance = dict(provenance)
        self.rays_per_pixel = rays_per_pixel
        self.pixel_error = pixel_error
        self.background = (np.zeros_like(nu) if background is None else np.asarray(background)) * INTENSITY_UNIT
        if background_info is None:
            background_info = (
                Background("intensity", None) if np.any(self.background.value != 0) else Background("none", 0.0)
            )
        self._background_info = background_info
        ratio = pixel_size_cm / view.distance.to_value(u.cm)
        self.pixel_solid_angle = ratio**2 * u.sr
        self.pixel_scale = (ratio * u.rad).to(u.arcsec)
        self._snapshot = None  # set by from_images(): the diagnostics retrace the same rays
        self._trace_options = {}
        self._unabsorbed = None

    @classmethod
    def from_images(cls, images):
        """The Result of a trace's :class:`~rtrace.transfer.tracer.TracedImages`, able to retrace its rays."""
        res = cls(
            images.intensity,
            images.tau,
            images.em,
            images.nu,
            images.view,
            images.pixel_size_cm,
            images.center_cm,
            images.provenance,
            rays_per_pixel=images.rays_per_pixel,
            background=images.background,
            background_info=images.background_info,
            pixel_error=images.pixel_error,
        )
        res._snapshot = images.snapshot
        res._trace_options = dict(images.trace_options)
        return res

    @property
    def sky_position(self):
        """Sky coordinates of the image centre: the View's, or DEFAULT_SKY_POSITION (ICRS 0, 0)."""
        return self.view.sky_position if self.view.sky_position is not None else DEFAULT_SKY_POSITION

    @property
    def background_info(self):
        """What entered from the far side: a :class:`~rtrace.transfer.background.Background`."""
        if isinstance(self._background_info, Background):
            return self._background_info
        text = str(self.provenance.get("background", "none")).strip().lower()
        if text == "cmb":
            from .background import CMB_TEMPERATURE

            return Background("cmb", CMB_TEMPERATURE)
        return Background("none", 0.0) if not np.any(self.background.value) else Background("intensity", None)

    @property
    def intensity(self):
        """Background-subtracted specific intensity ``I - I_bg`` (Quantity (nfreq, ny, nx))."""
        return self.specific_intensity()

    def specific_intensity(self, background="subtracted"):
        """Specific intensity per pixel in a background convention.

        Parameters
        ----------
        background : {"subtracted", "included"}
            ``subtracted``: ``I - I_bg`` (empty sky reads 0; gas in
            absorption against the background is negative). ``included``:
            the full emergent intensity ``I_bg e^{-tau} + I_gas``.

        Returns
        -------
        `~astropy.units.Quantity` (nfreq, ny, nx)
            erg s-1 cm-2 Hz-1 sr-1.
        """
        if check_convention(background) == "included" or not np.any(self.background.value):
            # nothing to subtract: the stored images themselves, no copy
            return u.Quantity(self._intensity, INTENSITY_UNIT, copy=False)
        return u.Quantity(self._intensity - self.background.value[:, None, None], INTENSITY_UNIT)

    @property
    def emission_measure(self):
        """Emission measure per pixel (pc cm-6); its definition is :attr:`em_definition`."""
        return u.Quantity(self._em / PC, u.pc * u.cm**-6)

    @property
    def em_definition(self):
        """``"electrons"`` (``int n_e^2 dl``) or ``"ion_term"`` (``int n_e sum Z^2 n_i dl``).

        Read from the provenance ``trace`` writes; results made before the
        choice existed held the ion-term integral.
        """
        from .tracer import EM_DEFINITIONS

        text = self.provenance.get("emission_measure")
        for key, value in EM_DEFINITIONS.items():
            if text == value:
                return key
        return "ion_term"

    @property
    def shape(self):
        """``(nfreq, ny, nx)``: frequencies, image rows, image columns."""
        return self._intensity.shape

    def flux_density(self, background=None, *, subtract_background=None):
        """Total flux density of the image per frequency (Jy).

        Parameters
        ----------
        background : {"subtracted", "included"}, optional
            ``subtracted`` (default): ``S_nu = sum_pixels (I_nu - I_bg)
            Omega_pix``, the background that entered from the far side
            (e.g. the CMB) removed first, as in any differential
            measurement, so gas seen in absorption against it gives negative
            flux. ``included``: the sum of the total intensity (it grows
            with the field of view). Without a background both are the same.
        subtract_background : bool, optional
            Deprecated spelling of ``background``.
        """
        per_pixel = self.jy_per_pixel(resolve_convention(background, subtract_background))
        return per_pixel.sum(axis=(1, 2))

    def jy_per_pixel(self, background="subtracted", *, require_finite=False):
        """Flux density of each pixel, ``S = I Omega_pix`` (Jy per pixel), shape ``(nfreq, ny, nx)``.

        The one conversion of the images to flux densities: sums over pixels
        are flux densities (:meth:`flux_density`), and ``observe``, the
        interferometer, the comparison and the FITS writer start from it.

        Parameters
        ----------
        background : {"subtracted", "included"}
            Convention of :meth:`specific_intensity` (default subtracted).
        require_finite : bool
            Raise an InputError counting the non-finite pixels, if any (for
            the steps that convolve or Fourier-transform the image, where
            one NaN would spread over the whole map).

        Returns
        -------
        `~astropy.units.Quantity` (nfreq, ny, nx)
            Jy (per pixel), float64.
        """
        intensity = np.asarray(self.specific_intensity(background).value, float)
        if require_finite:
            bad = ~np.isfinite(intensity)
            if bad.any():
                raise InputError(f"result: intensity has {int(bad.sum())} non-finite pixel value(s)")
        return u.Quantity(intensity * (self.pixel_solid_angle.to_value(u.sr) / JANSKY), u.Jy, copy=False)

    def brightness_temperature(self, kind="planck", background="subtracted"):
        """Brightness temperature of each pixel (K).

        Parameters
        ----------
        kind : {"planck", "rayleigh-jeans"}
            ``planck``: the temperature of a blackbody of the same intensity,
            ``T_P(I) = (h nu/k) / ln(1 + 2 h nu^3 / (c^2 I))``, which tends
            to ``T_e`` for optically thick isothermal gas (0 where I = 0).
            ``rayleigh-jeans``: ``T_b = c^2 I / (2 k nu^2)``, linear in I
            (the convention of astropy's ``brightness_temperature``
            equivalency and of most radio work).
        background : {"subtracted", "included"}
            ``subtracted`` (default): Planck gives the difference of Planck
            temperatures ``T_P(I) - T_P(I_bg)`` (thick isothermal gas reads
            ``T_e - T_bg``, empty sky 0), Rayleigh-Jeans that of
            ``I - I_bg``. ``included``: ``T_P(I)`` and ``c^2 I / (2 k nu^2)``
            of the full intensity (empty sky reads the background's
            temperature, 2.7255 K for the CMB with Planck).
        """
        convention = check_convention(background)
        if kind not in ("planck", "rayleigh-jeans", "rj"):
            raise InputError(f"kind: expected 'planck' or 'rayleigh-jeans', got {kind!r}")
        nu = self.frequencies.to_value(u.Hz)[:, None, None]
        bg = self.background.value[:, None, None]
        tb = brightness_temperature_cgs(nu, self._intensity - bg, bg, kind, convention)
        return u.Quantity(tb, u.K)

    def __getstate__(self):
        # a pickled Result carries its images, not the snapshot they came from (which may be
        # large or file-backed); the diagnostics that retrace need the original object
        state = dict(self.__dict__)
        state["_snapshot"] = None
        return state

    # -- optical-depth diagnostics -----------------------------------------------------------

    @property
    def snapshot(self):
        """The snapshot this Result was traced from (None when it was not made by :func:`rtrace.trace`).

        Kept so that the diagnostics (:attr:`unabsorbed_intensity`, :meth:`tau_unity_depth`,
        :meth:`contribution`) can march the same rays again.
        """
        return self._snapshot

    def _require_snapshot(self, what):
        if self._snapshot is None:
            raise InputError(f"{what}: this Result does not carry its snapshot (it was not made by rtrace.trace)")
        return self._snapshot

    @property
    def unabsorbed_intensity(self):
        """``int j_nu ds`` per pixel: the same emission with no absorption (Quantity (nfreq, ny, nx)).

        Traced on first use over exactly the rays of this result (same
        lattice, same pixel footprints; background excluded, i.e. in the
        subtracted convention, where ``I_bg`` would pass unattenuated), so
        ``intensity / unabsorbed_intensity`` is the absorption loss per pixel,
        ``(1 - e^{-tau}) / tau`` for a uniform column. The Result keeps a
        reference to its snapshot for this.
        """
        if self._unabsorbed is None:
            from .tracer import trace_images

            snap = self._require_snapshot("unabsorbed_intensity")
            thin = trace_images(snap, self.view, self.frequencies, absorption=False, **self._trace_options)
            self._unabsorbed = thin.intensity
        return u.Quantity(self._unabsorbed, INTENSITY_UNIT, copy=False)

    def tau_unity_depth(self):
        """Depth (pc) from the observer-side grid boundary where tau reaches 1, per pixel (nfreq, ny, nx).

        Along the ray through each pixel centre; NaN where tau never reaches 1.
        See :mod:`rtrace.analysis.depth`.
        """
        from ..analysis.depth import tau_unity_depth

        self._require_snapshot("tau_unity_depth")
        return tau_unity_depth(self)

    def contribution(self, pixel):
        """Contribution function along the ray through the centre of ``pixel = (column, row)``.

        Returns a :class:`~rtrace.analysis.depth.RayContribution`: where along
        the line of sight the emergent intensity comes from.
        """
        from ..analysis.depth import contribution

        self._require_snapshot("contribution")
        return contribution(self, pixel)

    def turnover_frequency(self):
        """Frequency (Hz) per pixel where tau falls through 1, and for the whole source.

        See :func:`rtrace.analysis.spectra.tau_unity_frequency`.
        """
        from ..analysis.spectra import tau_unity_frequency

        return tau_unity_frequency(self)

    def cut(self, start, end, num=None, order=1, background="subtracted"):
        """Profiles along a straight cut; see :func:`rtrace.analysis.cuts.cut`."""
        from ..analysis.cuts import cut

        return cut(self, start, end, num=num, order=order, background=background)

    def observe(self, beam, noise=None, **kwargs):
        """Convolve with a telescope beam (and add noise): a :class:`~rtrace.observe.SkyMap` in Jy/beam.

        See :func:`rtrace.observe.observe` for the parameters.
        """
        from ..observe import observe

        return observe(self, beam=beam, noise=noise, **kwargs)

    def write_fits(self, path, quantity="intensity", **kwargs):
        """Write a (RA, Dec, FREQ) FITS cube of this result (Jy/pixel by default), atomically.

        Background subtracted unless ``background="included"`` is passed on.

        See :func:`rtrace.io.fits.write_result` for the options.
        """
        from ..io.fits import write_result

        return write_result(self, path, quantity=quantity, **kwargs)

    def __repr__(self):
        nf, ny, nx = self.shape
        return f"<Result {nf} frequencies, {ny}x{nx} pixels of {self.pixel_size.to(u.pc):.4g}>"
