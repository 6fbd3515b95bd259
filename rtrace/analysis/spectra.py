"""Spectra of traced or observed images: SEDs, spectral indices, the tau = 1 frequency.

Works on a :class:`~rtrace.Result` (the sky-plane model) and on a SkyMap (an
image in Jy/beam with a beam, optionally with noise); the two are told apart
by their attributes, so this module does not import the observing code.

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

from ..errors import InputError
from ..transfer.background import check_convention, describe

__all__ = ["sed", "sed_metadata", "describe_background", "write_sed_csv", "spectral_index", "spectral_index_map",
           "tau_unity_frequency", "frequency_index", "pixel_flux", "aperture_mask",
           "FREQUENCY_TOLERANCE", "THIN_SPECTRAL_INDEX", "SED_COLUMNS"]

# Columns of the SED CSV file, in order
SED_COLUMNS = ("frequency_GHz", "flux_density_Jy", "spectral_index")

# Spectral index of optically thin free-free emission at radio frequencies (the Gaunt
# factor's slow decline makes S ~ nu^-0.1; Condon & Ransom 2016, from memory).
THIN_SPECTRAL_INDEX = -0.1

# A requested frequency must lie within this fraction of a traced one: close enough that
# a typed-in "5 GHz" finds the 4.99 GHz plane, tight enough that a neighbouring plane never is.
FREQUENCY_TOLERANCE = 0.01


def _is_skymap(obj):
    """True for an image in Jy/beam (duck-typed: it has ``data`` and a beam)."""
    return hasattr(obj, "data") and (hasattr(obj, "beam") or hasattr(obj, "beams"))


def _is_result(obj):
    return hasattr(obj, "intensity") and hasattr(obj, "tau") and hasattr(obj, "pixel_solid_angle")


def _check_image(obj, name="obj"):
    if not (_is_skymap(obj) or _is_result(obj)):
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
    q = u.Quantity(value)
    for unit in (u.Jy / u.beam, u.Jy):
        if q.unit.is_equivalent(unit):
            return q.to_value(unit)
    raise InputError(f"{name}: expected a surface brightness in Jy/beam, got unit '{q.unit}'")


def _convention(obj, background):
    """The background convention asked for: a Result's default is subtracted, a SkyMap's its own."""
    if background is not None:
        return check_convention(background)
    return getattr(obj, "background", "subtracted") if _is_skymap(obj) else "subtracted"


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
    if _is_skymap(obj):
        data = _jy_per_beam(obj.data, "obj.data")
        own = getattr(obj, "background", "subtracted")
        wanted = _convention(obj, background)
        if wanted != own and hasattr(obj, "background_per_beam"):
            level = _jy_per_beam(obj.background_per_beam, "obj.background_per_beam")[:, None, None]
            data = data + level if wanted == "included" else data - level
        omega_pix = _pixel_solid_angle_sr(obj)
        ratio = np.array([omega_pix / _beam_solid_angle_sr(obj, i) for i in range(data.shape[0])])
        return data * ratio[:, None, None] * u.Jy
    if hasattr(obj, "specific_intensity"):
        intensity = obj.specific_intensity(_convention(obj, background))
    else:
        intensity = obj.intensity
    intensity = intensity.to_value(u.erg / (u.s * u.cm**2 * u.Hz * u.sr))
    flux_cgs = intensity * obj.pixel_solid_angle.to_value(u.sr)
    return (flux_cgs * u.erg / (u.s * u.cm**2 * u.Hz)).to(u.Jy)


def aperture_mask(shape, aperture):
    """Boolean mask ``(ny, nx)`` of the pixels an aperture selects.

    Parameters
    ----------
    shape : tuple of int
        Image shape ``(ny, nx)``.
    aperture : None, ndarray of bool (ny, nx), or (float, float, float)
        ``None``: the whole image. A boolean mask of the image shape. A circle
        ``(center_col, center_row, radius)`` in pixels: every pixel whose
        centre lies within ``radius`` of the centre counts (pixel
        ``(row, col)`` has its centre at ``(col, row)``).

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
    if not isinstance(aperture, tuple) and np.ndim(aperture) == 2:
        aperture = np.asarray(aperture)
        if aperture.dtype != bool:
            # integer or float masks are refused: 0/1 weights and pixel values look alike.
            raise InputError(f"aperture: a mask must be boolean, got dtype {aperture.dtype}")
        if aperture.shape != (ny, nx):
            raise InputError(f"aperture: mask shape {aperture.shape} does not match the image shape {(ny, nx)}")
        mask = aperture.copy()
    else:
        try:
            values = np.asarray(aperture, dtype=float).reshape(-1)
        except (TypeError, ValueError):
            raise InputError(f"aperture: expected None, a boolean mask or (center_col, center_row, radius), "
                             f"got {aperture!r}") from None
        if values.shape != (3,) or not np.all(np.isfinite(values)):
            raise InputError(f"aperture: a circle is three finite numbers (center_col, center_row, radius) "
                             f"in pixels, got {aperture!r}")
        col0, row0, radius = values
        if not radius > 0:
            raise InputError(f"aperture: the circle radius must be positive, got {radius:g} pixels")
        rows, cols = np.mgrid[0:ny, 0:nx]
        mask = (cols - col0) ** 2 + (rows - row0) ** 2 <= radius**2
    if not mask.any():
        raise InputError(f"aperture: selects none of the {ny}x{nx} pixels")
    return mask


def sed(obj, aperture=None, background=None):
    """Spectral energy distribution: the flux density in an aperture at every frequency.

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
        A traced Result (background subtracted, as in ``flux_density()``) or a
        SkyMap (its observed ``data`` in Jy/beam, converted with each plane's
        beam area).
    aperture : None, ndarray of bool (ny, nx), or (float, float, float), optional
        See :func:`aperture_mask`; default the whole image.
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
    mask = aperture_mask(flux.shape[1:], aperture)
    total = flux.value[:, mask].sum(axis=1)
    return _frequencies_hz(obj) * u.Hz, total * u.Jy


def _describe_aperture(aperture, shape):
    if aperture is None:
        return f"whole image ({shape[0]}x{shape[1]} pixels)"
    if not isinstance(aperture, tuple) and np.ndim(aperture) == 2:
        aperture = np.asarray(aperture)
        return f"mask of {int(np.count_nonzero(aperture))} of {aperture.size} pixels"
    col, row, radius = (float(v) for v in np.asarray(aperture, float).reshape(-1))
    return f"circle centre (col {col:g}, row {row:g}) radius {radius:g} pixels"


def sed_metadata(obj, aperture=None, background=None):
    """Header lines describing where an SED came from, for :func:`write_sed_csv`.

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
    result = obj if _is_result(obj) else getattr(obj, "result", None)
    provenance = getattr(result, "provenance", {}) if result is not None else {}
    shape = np.shape(obj.data if _is_skymap(obj) else obj.tau)[1:]
    meta = {"source": str(provenance.get("source", "unknown")),
            "view": str(provenance.get("view", "unknown"))}
    distance = getattr(obj, "distance", None)
    if distance is None and result is not None:
        distance = result.view.distance
    if distance is not None:
        meta["distance"] = f"{u.Quantity(distance).to_value(u.pc):.6g} pc"
    meta["aperture"] = _describe_aperture(aperture, shape)
    meta["background"] = describe_background(obj, background)
    if _is_skymap(obj):
        beam = _beam_at(obj, 0)
        meta["beam"] = (f"{beam.major.to_value(u.arcsec):.4g} x {beam.minor.to_value(u.arcsec):.4g} arcsec, "
                        f"PA {beam.pa.to_value(u.deg):.4g} deg (first plane)")
    return meta


def describe_background(obj, background=None):
    """One line for a file header: the background convention of ``obj``'s fluxes (see :func:`pixel_flux`)."""
    _check_image(obj)
    return describe(_convention(obj, background), obj)


def _spectrum_arrays(frequencies, flux):
    try:
        nu = u.Quantity(frequencies).to_value(u.Hz, equivalencies=u.spectral())
    except (u.UnitsError, TypeError):
        raise InputError(f"frequencies: expected a Quantity with a spectral unit, got {frequencies!r}") from None
    flux_q = u.Quantity(flux)
    nu = np.atleast_1d(np.asarray(nu, float))
    values = np.atleast_1d(np.asarray(flux_q.value, float))
    if nu.ndim != 1 or values.shape != nu.shape:
        raise InputError(f"flux: shape {values.shape} does not match frequencies shape {nu.shape}")
    if not np.all(np.isfinite(nu) & (nu > 0)):
        raise InputError("frequencies: must be finite and positive")
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
    nu, s, _ = _spectrum_arrays(frequencies, flux)
    if np.any(np.diff(nu) == 0):
        raise InputError("frequencies: consecutive frequencies must differ")
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = np.log(s[1:] / s[:-1]) / np.log(nu[1:] / nu[:-1])
    alpha[(s[1:] <= 0) | (s[:-1] <= 0)] = np.nan
    return alpha


def _clean_header(text):
    # one metadata item must stay on one '#' line, or loadtxt would read the rest as data
    return " ".join(str(text).split())


def write_sed_csv(path, frequencies, flux, metadata=None):
    """Write an SED as CSV, atomically.

    Every line before the data starts with ``#``: first the column names
    ``# frequency_GHz,flux_density_Jy,spectral_index``, then a title, each
    metadata item as ``# key: value`` and the column meanings; then one row
    per frequency. ``spectral_index`` is the index from this frequency to the
    next (``nan`` on the last row). Both ``numpy.loadtxt(path, delimiter=",")``
    and ``numpy.genfromtxt(path, delimiter=",", names=True)`` read it back
    (the commented names line keeps plain ``loadtxt`` working).

    Parameters
    ----------
    path : str or path-like
        Destination; written to a temporary file and renamed onto it.
    frequencies : `~astropy.units.Quantity` (n,)
        Spectral unit.
    flux : `~astropy.units.Quantity` (n,)
        Flux density (convertible to Jy).
    metadata : dict, optional
        Header items, e.g. from :func:`sed_metadata`; its ``background``
        item (:func:`describe_background`) says whether the fluxes include
        the background.
    """
    # imported here: rtrace.io gathers the file formats, none of which is needed until a write
    from ..io.atomic import atomic_path

    nu, _, _ = _spectrum_arrays(frequencies, flux)
    try:
        s_jy = np.atleast_1d(u.Quantity(flux).to_value(u.Jy))
    except u.UnitsError:
        raise InputError(f"flux: expected a flux density (Jy), got unit '{u.Quantity(flux).unit}'") from None
    if metadata is not None and not hasattr(metadata, "items"):
        raise InputError(f"metadata: expected a mapping of header items, got {type(metadata).__name__}")
    alpha = np.full(nu.shape, np.nan)
    if nu.size > 1:
        alpha[:-1] = spectral_index(nu * u.Hz, s_jy)
    lines = ["# " + ",".join(SED_COLUMNS), "# rtrace spectral energy distribution"]
    for key, value in (metadata or {}).items():
        lines.append(f"# {_clean_header(key)}: {_clean_header(value)}")
    if "background" not in (metadata or {}):
        lines.append("# background: not stated by the writer (see rtrace.analysis.spectra.describe_background)")
    lines.append("# spectral_index: d ln S / d ln nu from this frequency to the next (nan on the last row)")
    for f, s, a in zip(nu / 1e9, s_jy, alpha):
        # 17 significant digits round-trip a float64 exactly
        lines.append(f"{f:.17g},{s:.17g},{a:.17g}")
    with atomic_path(path) as tmp:
        with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
            fh.write("\n".join(lines) + "\n")


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
    nu = u.Quantity(obj).to_value(u.Hz, equivalencies=u.spectral()) if isinstance(obj, u.Quantity) \
        else _frequencies_hz(obj)
    nu = np.atleast_1d(nu)
    if isinstance(frequency, (int, np.integer)) and not isinstance(frequency, bool):
        if not -nu.size <= frequency < nu.size:
            raise InputError(f"{name}: index {frequency} is out of range for {nu.size} frequencies")
        return int(frequency) % nu.size
    try:
        want = u.Quantity(frequency).to_value(u.Hz, equivalencies=u.spectral())
    except (u.UnitsError, TypeError):
        raise InputError(f"{name}: expected a spectral Quantity or a plane index, got {frequency!r}") from None
    if np.ndim(want) != 0 or not np.isfinite(want) or want <= 0:
        raise InputError(f"{name}: expected one positive frequency, got {frequency!r}")
    index = int(np.argmin(np.abs(nu - want)))
    if abs(nu[index] - want) > FREQUENCY_TOLERANCE * want:
        traced = ", ".join(f"{v / 1e9:.6g}" for v in nu)
        raise InputError(f"{name}: {want / 1e9:.6g} GHz is not within {FREQUENCY_TOLERANCE:.0%} of a "
                         f"traced frequency (traced: {traced} GHz)")
    return index


def _intensity_plane(obj, index):
    """A plane proportional to specific intensity (units cancel in ratios)."""
    if _is_skymap(obj):
        # Jy/beam / beam area: planes with different beams become comparable
        return _jy_per_beam(obj.data[index], "obj.data") / _beam_solid_angle_sr(obj, index)
    return pixel_flux(obj).value[index]


def spectral_index_map(obj, nu1, nu2, snr_threshold=None):
    """Per-pixel spectral index between two image planes.

    ``alpha = ln(I2 / I1) / ln(nu2 / nu1)`` with ``I`` the background-subtracted
    intensity of a Result, or for a SkyMap its observed data divided by each
    plane's beam area (so maps with different beams still compare intensities).

    Parameters
    ----------
    obj : `~rtrace.Result` or SkyMap
    nu1, nu2 : `~astropy.units.Quantity` or int
        The two planes, by frequency (within 1 % of a traced one) or index.
    snr_threshold : float, optional
        SkyMap with noise only: NaN where either plane's noiseless ``model``
        divided by its ``noise_rms`` is below this.

    Returns
    -------
    ndarray (ny, nx)
        NaN where either intensity is <= 0 or the SNR cut removes the pixel.
    """
    _check_image(obj)
    i1 = frequency_index(obj, nu1, "nu1")
    i2 = frequency_index(obj, nu2, "nu2")
    if i1 == i2:
        raise InputError(f"nu2: selects the same plane as nu1 (index {i1}); the index needs two frequencies")
    nu = _frequencies_hz(obj)
    a, b = _intensity_plane(obj, i1), _intensity_plane(obj, i2)
    with np.errstate(divide="ignore", invalid="ignore"):
        alpha = np.log(b / a) / math.log(nu[i2] / nu[i1])
    alpha[~((a > 0) & (b > 0))] = np.nan
    if snr_threshold is not None:
        threshold = float(snr_threshold)
        if not np.isfinite(threshold):
            raise InputError(f"snr_threshold: must be a finite number, got {snr_threshold!r}")
        noise = getattr(obj, "noise_rms", None) if _is_skymap(obj) else None
        if noise is None:
            raise InputError("snr_threshold: needs a SkyMap with noise (noise_rms is not set)")
        noise = np.broadcast_to(_jy_per_beam(noise, "obj.noise_rms"), (len(nu),))
        model = _jy_per_beam(obj.model, "obj.model")
        if getattr(obj, "background", "subtracted") == "included":
            # signal to noise of the source, not of the uniform background level
            model = model - _jy_per_beam(obj.background_per_beam, "obj.background_per_beam")[:, None, None]
        for i in (i1, i2):
            # written as a product so a zero rms (a noiseless plane) needs no division
            alpha[model[i] < threshold * noise[i]] = np.nan
    return alpha


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
    bracket = above & below                                  # (nfreq - 1, npix)
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
        range.
    whole_source : `~astropy.units.Quantity`
        Hz. The frequency where the intensity-weighted mean optical depth
        ``<tau>(nu) = sum(tau w) / sum(w)`` falls through 1, with weights
        ``w = max(I - I_background, 0)`` over all pixels: the optical depth of
        the gas that makes the flux, so ``<tau> = 1`` marks the turnover of
        the integrated spectrum. Same interpolation; NaN if not bracketed.
    """
    if not _is_result(result) and hasattr(result, "result"):
        result = result.result
    if not _is_result(result):
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
    return per_pixel * u.Hz, whole * u.Hz
