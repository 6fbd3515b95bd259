"""SkyMap: a traced Result seen through a beam, with noise, in Jy/beam; and ``observe``."""

import astropy.units as u
import numpy as np

from ..errors import InputError
from ..memory import check_memory, format_bytes, observe_bytes
from ..physics.constants import JANSKY
from ..quantities import finite_number, parse_frequencies
from ..transfer.background import brightness_temperature_cgs, check_convention, resolve_convention
from ..transfer.result import Result
from .beam import (
    BeamKernel,
    beams_for_frequencies,
    check_beam_fits_field,
    describe_beam,
    kernel_geometry,
    validate_beam,
)
from .edges import warn_if_emission_at_edge
from .noise import JY_PER_BEAM, correlated_noise, make_rng, noise_rms_per_frequency

__all__ = ["SkyMap", "observe", "check_observation"]


def _reference_frequency(reference_frequency, scaling):
    if reference_frequency is None:
        return None
    if scaling is None:
        raise InputError("reference_frequency: only used with beam_scaling='inverse-frequency'")
    return parse_frequencies(reference_frequency, "reference_frequency", scalar=True)


def observe(
    result,
    beam,
    noise=None,
    seed=None,
    beam_scaling=None,
    reference_frequency=None,
    *,
    background=None,
    subtract_background=None,
    max_memory=None,
):
    """Convolve a traced Result with a beam and add beam-correlated noise.

    Parameters
    ----------
    result : `~rtrace.Result`
        The traced intensity images.
    beam : `radio_beam.Beam`
        Beam at the reference frequency: FWHM axes, position angle of the
        major axis from north through east (on the image: toward +row for
        0 deg, toward -column for 90 deg).
    noise : None or `~astropy.units.Quantity`, optional
        rms per beam in Jy/beam, a scalar or one per frequency. The noise is
        white Gaussian noise convolved with the beam and scaled so that its
        expected rms is exactly this value.
    seed : None or int, optional
        Seed of the noise; ``None`` draws one and records it in the provenance.
    beam_scaling : {None, "inverse-frequency"}, optional
        ``None``: the same beam at every frequency. ``"inverse-frequency"``:
        FWHM proportional to ``reference_frequency / nu``.
    reference_frequency : `~astropy.units.Quantity`, optional
        Frequency at which ``beam`` applies when scaling; defaults to the
        first frequency. Only allowed with a scaling.
    background : {"subtracted", "included"}, optional
        Convention of the map's ``data`` and ``model`` (see
        :mod:`rtrace.transfer.background`). ``subtracted`` (default): the
        uniform background intensity (e.g. the CMB) that the trace let in
        from behind is removed, as a differential measurement does; empty
        sky reads 0. ``included``: the background is in the map, as
        ``I_bg Omega_beam`` per beam (a uniform sky seen through any
        normalised beam is uniform, so it is added after convolving, with no
        loss at the image edges). Without a background both are the same.
    subtract_background : bool, optional
        Deprecated spelling of ``background``.
    max_memory : `~astropy.units.Quantity` or str, optional
        Bytes the observation may take (``2 * u.GB``, ``"500 MB"``); the
        machine's available memory is always checked.

    Returns
    -------
    `SkyMap`

    Raises
    ------
    InputError
        Bad arguments; a beam wider than the image (see
        :func:`rtrace.observe.beam.check_beam_fits_field`); images and beam
        kernels that would not fit in memory (both checked before any
        kernel or image is made).
    """
    if not isinstance(result, Result):
        raise InputError(f"result: expected an rtrace Result, got {type(result).__name__}")
    validate_beam(beam)
    if beam_scaling not in (None, "inverse-frequency"):
        raise InputError(f"beam_scaling: expected None or 'inverse-frequency', got {beam_scaling!r}")
    convention = resolve_convention(background, subtract_background)
    ref_hz = _reference_frequency(reference_frequency, beam_scaling)
    nu = result.frequencies.to_value(u.Hz)
    rms = noise_rms_per_frequency(noise, len(nu))
    budget = None
    if max_memory is not None:
        from ..transfer.bricks import parse_memory

        budget = parse_memory(max_memory)
    beams = beams_for_frequencies(beam, nu, beam_scaling, ref_hz)
    image_shape = tuple(result.shape[1:])
    check_observation(beams, result.pixel_scale, image_shape, nu, noise=rms is not None, max_memory=budget)

    # always convolved without the background: a uniform level is added back (exactly) on request
    jy_per_pixel = result.jy_per_pixel("subtracted", require_finite=True).value
    warn_if_emission_at_edge(jy_per_pixel, nu, "observe")

    kernels = {}  # one kernel (and one kernel FFT) per distinct beam
    per_freq = []
    for b in beams:
        key = (b.major.to_value(u.arcsec), b.minor.to_value(u.arcsec), b.pa.to_value(u.deg))
        if key not in kernels:
            kernels[key] = BeamKernel(b, result.pixel_scale, image_shape, max_memory=budget)
        per_freq.append(kernels[key])

    model = np.empty_like(jy_per_pixel)
    for i, k in enumerate(per_freq):
        # Jy/pixel through a unit-sum kernel is still Jy/pixel; times the beam area in
        # pixels it becomes the flux a beam centred on each pixel collects (Jy/beam).
        model[i] = k.convolve(jy_per_pixel[i]) * k.area_pixels

    data = model
    used_seed = None
    if rms is not None:
        rng, used_seed = make_rng(seed)
        data = model.copy()
        for i, k in enumerate(per_freq):
            data[i] += correlated_noise(k, rms[i : i + 1], rng)[0]

    scaling_txt = (
        "same at all frequencies"
        if beam_scaling is None
        else f"FWHM ~ 1/nu from {(ref_hz if ref_hz is not None else nu[0]) / 1e9:.6g} GHz"
    )
    beam_txt = f"gaussian {describe_beam(beam)}, {scaling_txt}"
    if rms is None:
        noise_txt = "none"
    else:
        noise_txt = (
            "gaussian, correlated over the beam, rms="
            + ",".join(f"{r:.6g}" for r in rms)
            + f" Jy/beam, seed={used_seed}"
        )
    provenance = dict(result.provenance, beam=beam_txt, noise=noise_txt)
    return SkyMap(
        data,
        model,
        beams,
        result,
        rms,
        provenance,
        beam=beam,
        beam_scaling=beam_scaling,
        reference_frequency=ref_hz if ref_hz is not None else nu[0],
        seed=used_seed,
        background=convention,
    )


def check_observation(
    beams,
    pixel_scale,
    image_shape,
    frequencies_hz,
    *,
    noise=False,
    max_memory=None,
    beam_field="beam",
    image_field="result",
    image="image",
):
    """Refuse a beam wider than the image or an observation that does not fit in memory.

    Checked before any kernel or image is made.

    Parameters
    ----------
    beams : list of `radio_beam.Beam`
        The beam at each frequency.
    pixel_scale : `~astropy.units.Quantity`
        Pixel side (angle).
    image_shape : (int, int)
    frequencies_hz : array-like (nfreq,)
    noise : bool
        Whether noise will be added.
    max_memory : int or `~astropy.units.Quantity` or str, optional
        Bytes allowed; the machine's available memory is always checked.
    beam_field, image_field : str
        What the messages call the beam and the images (e.g. ``"[beam].major"``, ``"[[view]] 'a' npix"``).
    image : str
        What the messages call the image whose field the beam must fit (``"image"``, ``"model"``).

    Raises
    ------
    InputError
        See :func:`rtrace.observe.beam.check_beam_fits_field` and :func:`rtrace.memory.check_memory`.
    """
    budget = max_memory
    if max_memory is not None and not isinstance(max_memory, (int, np.integer)):
        from ..transfer.bricks import parse_memory

        budget = parse_memory(max_memory)
    nu = np.atleast_1d(np.asarray(frequencies_hz, float))
    check_beam_fits_field(beams, pixel_scale, image_shape, beam_field, nu, image)
    pix = u.Quantity(pixel_scale).to_value(u.arcsec)
    geos = {}
    for b in beams:
        key = (b.major.to_value(u.arcsec), b.minor.to_value(u.arcsec), b.pa.to_value(u.deg))
        if key not in geos:
            geos[key] = kernel_geometry(b, pix, image_shape)
    kernels = [(g["half"], g["fft_shape"]) for g in geos.values()]
    need = observe_bytes(len(nu), image_shape, kernels, noise)
    images = observe_bytes(len(nu), image_shape, [], noise)
    ny, nx = image_shape
    nf, nk = len(nu), len(kernels)
    what = (
        f"observing {nf} frequenc{'y' if nf == 1 else 'ies'} of {ny} x {nx} pixels ({format_bytes(images)} of "
        f"images) through {nk} beam kernel{'' if nk == 1 else 's'} of up to "
        f"{max(2 * h + 1 for h, _ in kernels)} pixels across"
    )
    if need - images > images:
        field, hint = beam_field, "use a smaller beam, or coarser pixels (a smaller npix over the same width)"
    else:
        field, hint = (
            image_field,
            ("trace fewer pixels (npix) or fewer frequencies, or observe the frequencies in separate calls"),
        )
    check_memory(need, field=field, what=what, hint=hint, budget=budget)


class SkyMap:
    """Images in Jy/beam as a telescope records them: the Result convolved with a beam, plus noise.

    Build one with :func:`observe` (or ``Result.observe``).

    Attributes
    ----------
    data : `~astropy.units.Quantity` (nfreq, ny, nx)
        Model plus noise, Jy/beam.
    model : `~astropy.units.Quantity` (nfreq, ny, nx)
        Noiseless convolved image, Jy/beam.
    beam : `radio_beam.Beam`
        The beam as given, at the reference frequency (the first frequency
        unless ``reference_frequency`` was set).
    beams : list of `radio_beam.Beam`
        The beam at each frequency.
    frequencies : `~astropy.units.Quantity` (nfreq,)
        Hz.
    pixel_scale : `~astropy.units.Quantity`
        Angular size of a square pixel (arcsec).
    pixel_size : `~astropy.units.Quantity`
        Physical size of a pixel at the source (cm).
    distance : `~astropy.units.Quantity`
        Distance to the source.
    sky_position : `~astropy.coordinates.SkyCoord`
        Sky coordinates of the image centre.
    noise_rms : `~astropy.units.Quantity` (nfreq,) or None
        Requested noise rms, Jy/beam.
    beam_solid_angle : `~astropy.units.Quantity` (nfreq,)
        ``pi bmaj bmin / (4 ln 2)`` per frequency (sr).
    reference_frequency : `~astropy.units.Quantity`
        Frequency at which ``beam`` applies (Hz).
    beam_scaling : None or str
    seed : int or None
        Seed that reproduces the noise (None without noise).
    background : {"subtracted", "included"}
        Convention of ``data`` and ``model`` (see :mod:`rtrace.transfer.background`).
    background_subtracted : bool
        ``background == "subtracted"``.
    background_per_beam : `~astropy.units.Quantity` (nfreq,)
        The Result's background intensity times each beam's solid angle
        (Jy/beam): what ``included`` adds to every pixel.
    provenance : dict
        The Result's provenance plus ``"beam"`` and ``"noise"`` descriptions.
    result : `~rtrace.Result`
        The Result this map came from.
    """

    def __init__(
        self,
        data,
        model,
        beams,
        result,
        noise_rms,
        provenance,
        *,
        beam,
        beam_scaling,
        reference_frequency,
        seed,
        background="subtracted",
        background_subtracted=None,
    ):
        # ``data`` and ``model`` are background subtracted; ``background`` is how they are shown
        if background_subtracted is not None:
            background = "subtracted" if background_subtracted else "included"
        self.background = check_convention(background)
        self._data = np.asarray(data, float)
        self._model = np.asarray(model, float)
        self.beams = list(beams)
        self.beam = beam
        self.result = result
        self._rms = None if noise_rms is None else np.asarray(noise_rms, float)
        self.provenance = dict(provenance)
        self.beam_scaling = beam_scaling
        self.reference_frequency = float(reference_frequency) * u.Hz
        self.seed = seed
        self._beam_sr = np.array([b.sr.to_value(u.sr) for b in self.beams])
        self._pix_sr = result.pixel_solid_angle.to_value(u.sr)
        self._bg_cgs = np.asarray(result.background.value, float)
        self._bg_jyb = self._bg_cgs * self._beam_sr / JANSKY

    @property
    def background_subtracted(self):
        """True when ``data`` and ``model`` have the background subtracted."""
        return self.background == "subtracted"

    @property
    def background_per_beam(self):
        """The Result's background intensity times each beam's solid angle, Jy/beam ``(nfreq,)``."""
        return u.Quantity(self._bg_jyb, JY_PER_BEAM)

    # -- geometry, taken from the Result ---------------------------------------------------------
    @property
    def frequencies(self):
        """Frequencies of the planes (those of the Result)."""
        return self.result.frequencies

    @property
    def pixel_scale(self):
        """Angular side of a square pixel (that of the Result)."""
        return self.result.pixel_scale

    @property
    def pixel_size(self):
        """Physical side of a pixel at the source (that of the Result)."""
        return self.result.pixel_size

    @property
    def distance(self):
        """Distance to the source (that of the Result's view)."""
        return self.result.view.distance

    @property
    def sky_position(self):
        """Sky coordinates of the image centre (those of the Result)."""
        return self.result.sky_position

    @property
    def shape(self):
        """``(nfreq, ny, nx)``."""
        return self._data.shape

    # -- images --------------------------------------------------------------------------------
    @property
    def data(self):
        """Model plus noise, Jy/beam, in the map's background convention."""
        return u.Quantity(self._image(False, self.background), JY_PER_BEAM, copy=False)

    @property
    def model(self):
        """Noiseless map, Jy/beam, in the map's background convention."""
        return u.Quantity(self._image(True, self.background), JY_PER_BEAM, copy=False)

    @property
    def noise_rms(self):
        """Requested noise rms per frequency, Jy/beam; None without noise."""
        return None if self._rms is None else u.Quantity(self._rms, JY_PER_BEAM)

    @property
    def beam_solid_angle(self):
        """Solid angle of each frequency's beam, ``pi bmaj bmin / (4 ln 2)`` (sr)."""
        return u.Quantity(self._beam_sr, u.sr)

    @property
    def beam_area_pixels(self):
        """Beam solid angle over pixel solid angle, per frequency (ndarray)."""
        return self._beam_sr / self._pix_sr

    def _convention(self, background):
        return self.background if background is None else check_convention(background)

    def _image(self, noiseless, background="subtracted"):
        img = self._model if noiseless else self._data
        if background == "included" and np.any(self._bg_jyb):
            img = img + self._bg_jyb[:, None, None]
        return img

    def to_jy_per_pixel(self, noiseless=False, background=None):
        """The map in Jy/pixel: Jy/beam divided by the beam area in pixels.

        Parameters
        ----------
        noiseless : bool
            Use the model instead of the data.
        background : {"subtracted", "included"}, optional
            Convention; default the map's own (``self.background``).

        Returns
        -------
        `~astropy.units.Quantity` (nfreq, ny, nx), Jy/pixel
        """
        img = self._image(noiseless, self._convention(background)) / self.beam_area_pixels[:, None, None]
        return u.Quantity(img, u.Jy / u.pix)

    def flux_density(self, noiseless=False, background=None):
        """Total flux density per frequency: the sum over pixels of Jy/pixel (Jy).

        Parameters
        ----------
        noiseless : bool
            Use the model instead of the data.
        background : {"subtracted", "included"}, optional
            Convention; default the map's own (``self.background``).
            ``included`` adds ``I_bg Omega_pix`` per pixel (it grows with the
            field).

        Returns
        -------
        `~astropy.units.Quantity` (nfreq,), Jy
        """
        total = self._image(noiseless, self._convention(background)).sum(axis=(1, 2)) / self.beam_area_pixels
        return u.Quantity(total, u.Jy)

    def brightness_temperature(self, kind="rayleigh-jeans", noiseless=False, background=None):
        """Brightness temperature per beam (K).

        Parameters
        ----------
        kind : {"rayleigh-jeans", "planck"}
            ``rayleigh-jeans``: astropy's ``brightness_temperature(nu,
            beam_area)`` equivalency, ``T = c^2 S / (2 k nu^2 Omega_beam)``
            (linear, so noise stays Gaussian). ``planck``: from the mean
            intensity in the beam, ``I = S / Omega_beam``: in the subtracted
            convention the difference of Planck temperatures
            ``T_P(I_bg + dI) - T_P(I_bg)``, in the included one ``T_P(I)``;
            NaN where the total intensity is negative (noise).
        noiseless : bool
            Use the model instead of the data.
        background : {"subtracted", "included"}, optional
            Convention; default the map's own (``self.background``).

        Returns
        -------
        `~astropy.units.Quantity` (nfreq, ny, nx), K
        """
        convention = self._convention(background)
        img = self._image(noiseless, convention)
        nu = self.frequencies.to_value(u.Hz)
        if kind in ("rayleigh-jeans", "rj"):
            # Kelvin per Jy/beam at each frequency, straight from astropy's equivalency
            k_per_jyb = np.array(
                [
                    (1.0 * JY_PER_BEAM).to_value(
                        u.K, equivalencies=u.brightness_temperature(f * u.Hz, beam_area=sr * u.sr)
                    )
                    for f, sr in zip(nu, self._beam_sr, strict=True)
                ]
            )
            return u.Quantity(img * k_per_jyb[:, None, None], u.K)
        if kind == "planck":
            delta = self._image(noiseless) * (JANSKY / self._beam_sr[:, None, None])
            tb = brightness_temperature_cgs(nu[:, None, None], delta, self._bg_cgs[:, None, None], kind, convention)
            return u.Quantity(tb, u.K)
        raise InputError(f"kind: expected 'rayleigh-jeans' or 'planck', got {kind!r}")

    def snr_mask(self, threshold=5.0):
        """Pixels whose noiseless model reaches ``threshold`` times the noise rms.

        Parameters
        ----------
        threshold : float
            Signal-to-noise threshold.

        Returns
        -------
        ndarray of bool (nfreq, ny, nx)
            ``model / noise_rms >= threshold``; all True without noise (and
            at frequencies whose rms is zero).
        """
        thr = finite_number(threshold, "threshold")
        if self._rms is None:
            return np.ones(self.shape, dtype=bool)
        rms = self._rms[:, None, None]
        # compared as model >= thr * rms so no division by a zero rms is needed
        return (self._model >= thr * rms) | (rms == 0)

    def write_fits(self, path, spectral_axis="auto"):
        """Write the map to FITS (see `rtrace.io.fits.write_skymap`).

        A frequency list that is neither evenly spaced nor geometric is
        written one file per plane unless ``spectral_axis="tabular"``; the
        return value is then the list of files.
        """
        from ..io.fits import write_skymap

        return write_skymap(self, path, spectral_axis=spectral_axis)

    def __repr__(self):
        nf, ny, nx = self.shape
        b = self.beam
        return (
            f"<SkyMap {nf} frequencies, {ny}x{nx} pixels of {self.pixel_scale:.4g}, beam "
            f"{b.major.to(u.arcsec):.4g} x {b.minor.to(u.arcsec):.4g} pa {b.pa.to(u.deg):.4g}>"
        )
