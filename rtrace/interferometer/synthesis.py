"""``synthesize``: a traced Result observed with an Earth-rotation synthesis array, and its map.

First the synthesized image's grid and, unless given, the hour-angle
sampling are chosen from the array (:mod:`.grid`). Then, per frequency: the
(u, v, w) tracks of every baseline over the hour-angle range (:mod:`.array`);
the model in Jy/pixel on its own pixels, optionally attenuated by the
primary beam of one dish, Fourier-sampled exactly at the tracks
(:mod:`.sampling`); weighting, dirty image and dirty beam on the
synthesized grid (:mod:`.imaging`); Högbom CLEAN, the clean beam fitted to
the dirty beam's half-power lobe and the restored image in Jy/beam
(:mod:`.clean`).

Largest angular scale: ``theta_LAS ~ 0.6 lambda / B_min`` with ``B_min`` the
shortest projected baseline over the observation (common practice for the
largest structure an array images reliably). For scale: the visibility
of a Gaussian of that FWHM on the shortest baseline is
``exp(-pi^2 0.6^2 / (4 ln 2)) ~ 28 %`` of its flux (Fourier transform of a
Gaussian); structure much larger is filtered out, because no baseline
samples the visibility near ``(u, v) = 0``.
"""

import math
from types import SimpleNamespace

import astropy.units as u
import numpy as np

from ..errors import InputError, warn_user
from ..io.fits import pixel_error_cards, write_cube
from ..memory import check_memory, format_bytes, synthesis_bytes
from ..observe.beam import describe_beam
from ..observe.noise import JY_PER_BEAM, jy_per_beam_value
from ..observe.skymap import SkyMap
from ..physics.constants import C
from ..quantities import finite_number, positive_scalar
from ..transfer.background import header_cards, resolve_convention
from ..transfer.result import Result
from .array import (
    _hour_angle_rad,
    antenna_positions,
    baseline_pairs,
    enu_to_equatorial,
    hour_angle_samples,
    source_elevation,
    uvw_tracks,
)
from .clean import DEFAULT_GAIN, fit_clean_beam, hogbom, restore
from .grid import AIRY_FWHM_FACTOR, default_hour_angle_step, image_grid
from .imaging import WEIGHTINGS, dirty_beam, dirty_image, imaging_weights, uniform_cell
from .records import ArrayTrack, Imaging, UVData
from .sampling import (
    GAUSSIAN_FWHM_FACTOR,
    PRIMARY_BEAMS,
    direction_cosines,
    predict_visibilities,
    primary_beam_pattern,
    w_term_phase,
)

__all__ = [
    "synthesize",
    "SynthesizedMap",
    "SynthesisWarning",
    "LAS_FACTOR",
    "DEFAULT_RELATIVE_THRESHOLD",
    "DEFAULT_NITER",
]


# theta_LAS ~ 0.6 lambda / B_min (common practice)
LAS_FACTOR = 0.6
# CLEAN stops at this fraction of the dirty image's peak when no threshold is given: a noiseless
# model has no noise floor, so the stop is a dynamic range of 1000 (a choice of this module; the
# residual left, kept in the restored image, then changes a total flux by well under 1 %).
DEFAULT_RELATIVE_THRESHOLD = 1e-3
# Most CLEAN components per frequency by default: extended emission imaged with several pixels per
# beam needs some 10^4 components to reach the threshold above (e.g. a 2 pc HII region at 1 kpc,
# 20 GHz, on an eight-dish array of 512 m baselines: 17 000).
DEFAULT_NITER = 100_000
# The neglected w-term phase at the image corner above which a warning is given (rad):
# 0.25 rad costs 1 - cos(0.25) ~ 3 % of a source's amplitude there.
_W_PHASE_WARN = 0.25


class SynthesisWarning(UserWarning):
    """The synthetic observation is valid but something limits it (sampling, horizon, w term, CLEAN)."""


def _angle(value, name, lo=None, hi=None):
    if not isinstance(value, u.Quantity) or not value.unit.is_equivalent(u.deg):
        raise InputError(f"{name}: expected an angle Quantity (e.g. 34 * u.deg), got {value!r}")
    if value.ndim != 0:
        raise InputError(f"{name}: expected a scalar angle, got shape {value.shape}")
    deg = float(value.to_value(u.deg))
    if not np.isfinite(deg) or (lo is not None and deg < lo) or (hi is not None and deg > hi):
        raise InputError(f"{name}: must lie in [{lo}, {hi}] deg, got {value}")
    return math.radians(deg)


def _positive_length(value, name):
    return positive_scalar(value, u.m, name, "a length (e.g. 12 * u.m)")


def _threshold_jyb(threshold):
    if threshold is None:
        return None
    t = jy_per_beam_value(threshold, "threshold", "0.1 * u.mJy / u.beam")
    if np.ndim(t) != 0 or not (np.isfinite(t) and t >= 0):
        raise InputError(f"threshold: expected one finite non-negative value, got {threshold}")
    return float(t)


def _check_size(nfreq, size, nvis, model_shape, max_memory, sample_field):
    """Refuse a synthesis whose buffers would not fit in memory, before the tracks are computed."""
    budget = None
    if max_memory is not None:
        from ..transfer.bricks import parse_memory

        budget = parse_memory(max_memory)
    from .sampling import _CHUNK_ELEMENTS

    # the Fourier sums work in chunks of at most _CHUNK_ELEMENTS complex values (fewer with few
    # samples); their peak is about one and a half such arrays (measured with tracemalloc)
    chunk = min(_CHUNK_ELEMENTS, nvis * max(sum(model_shape), 4 * size))
    images, samples = synthesis_bytes(nfreq, size, nvis, model_shape, chunk_bytes=24 * chunk)
    what = (
        f"a synthesis of {nfreq} frequencies on a {size} x {size} grid ({format_bytes(images)} of images) "
        f"from {nvis} (u, v) samples per frequency ({format_bytes(samples)})"
    )
    if images >= samples:
        field, hint = "image_size", "use a smaller image_size (or a larger pixel_scale) or fewer frequencies"
    else:
        field, hint = (
            sample_field,
            (
                "use fewer hour-angle samples (a larger hour_angle_step, fewer "
                "n_hour_angles), a shorter hour_angle_range or fewer antennas"
            ),
        )
    return check_memory(images + samples, field=field, what=what, hint=hint, budget=budget)


def synthesize(
    result,
    *,
    antennas,
    latitude,
    hour_angle_range=(-4, 4) * u.hourangle,
    hour_angle_step=None,
    n_hour_angles=None,
    antenna_unit=None,
    min_elevation=0 * u.deg,
    dish_diameter=None,
    primary_beam="gaussian",
    primary_beam_fwhm_factor=GAUSSIAN_FWHM_FACTOR,
    weighting="natural",
    robust=0.0,
    gain=DEFAULT_GAIN,
    niter=DEFAULT_NITER,
    threshold=None,
    background=None,
    subtract_background=None,
    pixel_scale=None,
    image_size=None,
    max_memory=None,
):
    """Observe a traced Result with an Earth-rotation synthesis array and image it.

    Parameters
    ----------
    result : `~rtrace.Result`
        The traced images; the image centre is the phase (and pointing)
        centre, its declination is ``result.sky_position``'s (ICRS).
    antennas : `~astropy.units.Quantity` (n, 3), str or os.PathLike
        East, north, up antenna offsets (a length), or an antenna file
        (see :func:`rtrace.interferometer.read_antennas`).
    latitude : `~astropy.units.Quantity`
        Geodetic latitude of the site.
    hour_angle_range : `~astropy.units.Quantity` (2,)
        ``(start, stop)`` of the source's hour angle, ``start <= stop``
        (angles such as ``u.hourangle``, or times).
    hour_angle_step : `~astropy.units.Quantity`, optional
        Sample spacing. A time is converted at the sidereal rate. Default:
        the largest even spacing over the range that keeps the longest
        baseline's successive samples closer than ``0.8 / field`` in the
        (u, v) plane, so the track sampling repeats no source inside the
        image (see :mod:`rtrace.interferometer.grid`).
    n_hour_angles : int, optional
        Number of evenly spaced samples instead of ``hour_angle_step``.
    antenna_unit : str, optional
        Unit of an antenna file that has no ``unit =`` line.
    min_elevation : `~astropy.units.Quantity`
        Samples with the source lower than this are dropped (default 0 deg,
        the horizon), with a :class:`SynthesisWarning`.
    dish_diameter : `~astropy.units.Quantity`, optional
        Diameter of the (identical) dishes: the model is attenuated by one
        dish's power pattern before sampling (the map is then the apparent
        sky, not corrected for the primary beam). None: no attenuation.
    primary_beam : {"gaussian", "airy"}
        Shape of that pattern (see
        :func:`rtrace.interferometer.sampling.primary_beam_pattern`).
    primary_beam_fwhm_factor : float
        Gaussian FWHM in units of ``lambda / D`` (default 1.13, common
        practice for a tapered dish; a uniformly lit one, "airy", has 1.03).
    weighting : {"natural", "uniform", "robust"}
        Imaging weights (see :mod:`rtrace.interferometer.imaging`).
    robust : float
        Briggs robustness R for ``weighting="robust"`` (-2 ~ uniform,
        +2 ~ natural).
    gain : float
        CLEAN loop gain (default 0.1).
    niter : int
        Most CLEAN components per frequency (default 100 000; CLEAN
        normally stops earlier, at ``threshold``).
    threshold : `~astropy.units.Quantity`, optional
        Stop CLEAN at this residual (Jy/beam); default 0.1 % of the dirty
        image's peak at each frequency (a noiseless model has no noise
        floor to stop at).
    background : {"subtracted", "included"}
        Convention of the map (see :mod:`rtrace.transfer.background`). The
        model is always sampled without its uniform background (an
        interferometer measures no uniform level). ``included`` adds the
        known background back as ``I_bg Omega_beam`` per clean beam: a
        level no interferometer measures, for comparison with total-power
        data only.
    subtract_background : bool
        Deprecated spelling of ``background``.
    pixel_scale : `~astropy.units.Quantity`, optional
        Pixel size of the synthesized image. Default: 5 pixels across
        ``lambda_min / B_max`` (the image grid is the array's, not the
        model's: the model is Fourier-sampled exactly at every (u, v)).
    image_size : int, optional
        Side of the synthesized image in pixels. Default: the model's field,
        or the primary beam's half-power width at the longest wavelength
        when ``dish_diameter`` is given and that is smaller; at most 1024
        pixels (a larger choice is an InputError, raised before any
        transform). See :mod:`rtrace.interferometer.grid`.
    max_memory : `~astropy.units.Quantity` or str, optional
        Bytes the synthesis may take (``"2 GB"``); the machine's available
        memory is always checked. The image buffers and the (u, v) samples
        of every frequency are estimated before the tracks are computed, and
        an InputError names what to reduce when they would not fit.

    Returns
    -------
    `SynthesizedMap`
        The restored images in Jy per clean beam (a `~rtrace.observe.SkyMap`),
        with the tracks, visibilities, dirty image and beam, residual,
        clean components and the largest angular scale.
    """
    if not isinstance(result, Result):
        raise InputError(f"result: expected an rtrace Result, got {type(result).__name__}")
    convention = resolve_convention(background, subtract_background)
    array = _Array.parse(
        antennas, antenna_unit, latitude, min_elevation, dish_diameter, primary_beam, primary_beam_fwhm_factor
    )
    if weighting not in WEIGHTINGS:
        raise InputError(f"weighting: expected one of {', '.join(WEIGHTINGS)}, got {weighting!r}")
    robust = finite_number(robust, "robust")
    thr = _threshold_jyb(threshold)
    jy_per_pixel = _model_jy_per_pixel(result)
    obs = _Observation.plan(
        result, array, hour_angle_range, hour_angle_step, n_hour_angles, pixel_scale, image_size, max_memory
    )
    planes = [
        _image_plane(f, jy_per_pixel[i], obs, array, weighting, robust, gain, niter, thr) for i, f in enumerate(obs.nu)
    ]
    w_phase = max(p.w_phase for p in planes)
    if w_phase > _W_PHASE_WARN:
        warn_user(
            f"result: the neglected w term reaches a phase of {w_phase:.3g} rad at the image "
            f"corners (non-coplanar baselines); the field is too wide for a two-dimensional "
            f"transform at these baselines",
            SynthesisWarning,
        )
    return _synthesized_map(result, convention, array, obs, planes, weighting, robust, gain, niter)


class _Array:
    """The array's settings, checked: antenna positions (m), latitude and horizon (rad), dish and primary beam."""

    def __init__(self, pos, lat, min_el, diameter, primary_beam, fwhm_factor):
        self.pos, self.lat, self.min_el = pos, lat, min_el
        self.diameter, self.primary_beam, self.fwhm_factor = diameter, primary_beam, fwhm_factor

    @classmethod
    def parse(cls, antennas, antenna_unit, latitude, min_elevation, dish_diameter, primary_beam, fwhm_factor):
        """The settings of :func:`synthesize` that describe the array; InputError naming the first bad one."""
        pos = antenna_positions(antennas, unit=antenna_unit, unit_option="antenna_unit=")
        lat = _angle(latitude, "latitude", -90.0, 90.0)
        min_el = _angle(min_elevation, "min_elevation", -90.0, 90.0)
        if dish_diameter is None:
            return cls(pos, lat, min_el, None, primary_beam, None)
        diameter = _positive_length(dish_diameter, "dish_diameter")
        if primary_beam not in PRIMARY_BEAMS:
            raise InputError(f"primary_beam: expected one of {', '.join(PRIMARY_BEAMS)}, got {primary_beam!r}")
        fwhm_factor = finite_number(fwhm_factor, "primary_beam_fwhm_factor", positive=True)
        sep = np.linalg.norm(pos[:, None, :2] - pos[None, :, :2], axis=-1)
        sep[np.diag_indices(len(pos))] = np.inf
        i, j = np.unravel_index(np.argmin(sep), sep.shape)
        if sep[i, j] < diameter:
            raise InputError(
                f"dish_diameter: antennas {min(i, j)} and {max(i, j)} stand {sep[i, j]:.4g} m "
                f"apart on the ground, closer than one dish diameter ({diameter:.4g} m)"
            )
        return cls(pos, lat, min_el, diameter, primary_beam, fwhm_factor)

    def primary_beam_per_lambda(self):
        """Primary beam FWHM times 1/wavelength (rad m), or None without a dish."""
        if self.diameter is None:
            return None
        return (self.fwhm_factor if self.primary_beam == "gaussian" else AIRY_FWHM_FACTOR) / self.diameter

    def pattern(self, lam, l, m):
        """The primary beam's power pattern at direction cosines ``l, m`` and wavelength ``lam`` (m)."""
        return primary_beam_pattern(self.primary_beam, self.diameter, lam, l, m, self.fwhm_factor)

    def describe_primary_beam(self):
        """The primary beam for provenance."""
        if self.diameter is None:
            return "none"
        return (
            f"{self.primary_beam} of a {self.diameter:.6g} m dish"
            + (f" (FWHM {self.fwhm_factor:.4g} lambda/D)" if self.primary_beam == "gaussian" else "")
            + ", applied to the model, not corrected"
        )


def _model_jy_per_pixel(result):
    """The Result's background-subtracted intensity in Jy per model pixel; InputError on non-finite pixels."""
    return result.jy_per_pixel("subtracted", require_finite=True).value


class _Observation:
    """What is observed: frequencies, the synthesized grid, hour angles above the horizon, (u, v, w) tracks."""

    @classmethod
    def plan(cls, result, array, hour_angle_range, hour_angle_step, n_hour_angles, pixel_scale, image_size, max_memory):
        """Choose the grid and the sampling, drop hour angles below the horizon, check memory, then the tracks."""
        obs = cls()
        obs.nu = result.frequencies.to_value(u.Hz)
        lam_all = C / obs.nu * 1e-2  # metres (C is cgs)
        pairs0 = baseline_pairs(len(array.pos))
        enu = array.pos[pairs0[:, 1]] - array.pos[pairs0[:, 0]]
        obs.model_shape = result.shape[1:]
        obs.model_pix = float(result.pixel_scale.to_value(u.rad))
        obs.grid = image_grid(
            max(obs.model_shape) * obs.model_pix,
            float(np.max(np.linalg.norm(enu, axis=1))),
            lam_all,
            array.primary_beam_per_lambda(),
            pixel_scale,
            image_size,
        )
        if hour_angle_step is None and n_hour_angles is None:
            n_hour_angles = _unaliased_samples(
                enu, array.lat, float(lam_all.min()), obs.grid.field_rad, hour_angle_range
            )
        sample_field = "n_hour_angles" if n_hour_angles is not None and hour_angle_step is None else "hour_angle_step"
        ha_all = hour_angle_samples(hour_angle_range, hour_angle_step, n_hour_angles)
        obs.dec = float(result.sky_position.icrs.dec.to_value(u.rad))
        if result.view.sky_position is None:
            warn_user(
                "result: the View has no sky_position, so the source is placed at the default "
                "ICRS (0, 0): declination 0 deg; give View(sky_position=...) for the real "
                "declination, which shapes the (u, v) tracks",
                SynthesisWarning,
            )
        obs.ha = _above_horizon(ha_all, obs.dec, array)
        _check_size(
            obs.nu.size, obs.grid.size, int(obs.ha.size) * len(pairs0), obs.model_shape, max_memory, sample_field
        )
        uvw3, obs.pairs, xyz = uvw_tracks(array.pos, array.lat, obs.dec, obs.ha)
        obs.uvw_half = uvw3.reshape(-1, 3)  # (nh * nb, 3) metres
        proj = np.hypot(obs.uvw_half[:, 0], obs.uvw_half[:, 1])
        obs.b_min, obs.b_max = float(proj.min()), float(proj.max())
        n = obs.grid.size
        obs.l, obs.m = direction_cosines((n, n), obs.grid.pixel_rad)  # the synthesized image's pixels
        obs.ml, obs.mm = direction_cosines(obs.model_shape, obs.model_pix)  # the model's pixels
        obs.cell = uniform_cell((n, n), obs.grid.pixel_rad)
        if obs.ha.size > 1:
            _warn_track_aliasing(ha_all, xyz, float(obs.nu.max()), n * obs.grid.pixel_rad)
        return obs


def _unaliased_samples(enu, lat, lam_min, field_rad, hour_angle_range):
    """Hour-angle samples over the range so that the tracks do not alias inside the field (default sampling)."""
    xyz0 = enu_to_equatorial(enu, lat)
    dh_max = default_hour_angle_step(float(np.max(np.hypot(xyz0[:, 0], xyz0[:, 1]))), lam_min, field_rad)
    hour_angle_samples(hour_angle_range, n_hour_angles=1)  # validates the range
    start, stop = _hour_angle_rad(hour_angle_range, "hour_angle_range").reshape(-1)
    span = float(stop - start)
    n_hour_angles = 1 if span == 0 else int(math.ceil(span / dh_max * (1.0 + 1e-9))) + 1
    if n_hour_angles > 100_000:
        raise InputError(
            f"hour_angle_step: avoiding aliasing over this range needs {n_hour_angles} "
            f"samples; give a smaller image (image_size) or a shorter hour-angle range"
        )
    return n_hour_angles


def _above_horizon(ha_all, dec, array):
    """The hour angles at which the source is above ``min_elevation``; InputError if none, a warning if some."""
    elev = source_elevation(ha_all, dec, array.lat)
    keep = elev >= array.min_el - 1e-12
    if not keep.any():
        raise InputError(
            f"hour_angle_range: the source (declination {math.degrees(dec):.6g} deg) stays below "
            f"min_elevation={math.degrees(array.min_el):.6g} deg at latitude "
            f"{math.degrees(array.lat):.6g} deg over the whole range"
        )
    if not keep.all():
        warn_user(
            f"hour_angle_range: {int((~keep).sum())} of {keep.size} hour-angle samples have the "
            f"source below min_elevation={math.degrees(array.min_el):.6g} deg and are dropped",
            SynthesisWarning,
        )
    return ha_all[keep]


def _warn_track_aliasing(ha_all, xyz, nu_max, extent_rad):
    """Warn when the longest baseline's samples are so far apart in (u, v) that sources repeat in the image.

    Successive samples of the longest equatorial baseline are ``|d(u, v)/dH| dH <= sqrt(X^2 + Y^2) dH /
    lambda`` apart, which repeats the response of each source 1 / that away (a grating response along the
    track).
    """
    dh = float(np.max(np.diff(ha_all)))
    dq_m = float(np.max(np.hypot(xyz[:, 0], xyz[:, 1]))) * dh
    lam_min = C / nu_max * 1e-2  # metres (C is cgs)
    alias_rad = lam_min / dq_m if dq_m > 0 else math.inf
    if alias_rad < extent_rad:
        warn_user(
            f"hour_angle_step: the longest baseline's samples are far apart in (u, v), "
            f"so each source repeats {math.degrees(alias_rad) * 3600:.4g} arcsec away along the "
            f"tracks, inside the {math.degrees(extent_rad) * 3600:.4g} arcsec image; use a "
            f"step below {math.degrees(dh * alias_rad / extent_rad) * 4.0:.3g} min of hour angle",
            SynthesisWarning,
        )


class _Plane(SimpleNamespace):
    """One frequency's products: restored, dirty, residual, components, dirty beam, clean beam, samples."""


def _image_plane(f, model, obs, array, weighting, robust, gain, niter, thr):
    """Sample the model at frequency ``f`` (Hz) on the tracks, image it and CLEAN it: a `_Plane`."""
    lam = C / f * 1e-2  # metres (C is cgs)
    uu, vv, ww = (obs.uvw_half[:, k] / lam for k in range(3))
    pb = None
    if array.diameter is not None:
        pb = array.pattern(lam, obs.l, obs.m)
        model = model * array.pattern(lam, obs.ml, obs.mm)
    vis = predict_visibilities(model, obs.ml, obs.mm, uu, vv)
    w_full = imaging_weights(np.concatenate([uu, -uu]), np.concatenate([vv, -vv]), weighting, obs.cell, robust=robust)
    w_half = w_full[: obs.uvw_half.shape[0]]
    n, pix_rad, pix_q = obs.grid.size, obs.grid.pixel_rad, obs.grid.pixel_scale
    dirty = dirty_image(vis, w_half, uu, vv, obs.l, obs.m)
    psf = dirty_beam(w_half, uu, vv, (n, n), pix_rad)
    beam = fit_clean_beam(psf, pix_q)
    t = thr if thr is not None else DEFAULT_RELATIVE_THRESHOLD * float(np.max(np.abs(dirty)))
    comps, resid, n_iter, peak = hogbom(dirty, psf, gain=gain, threshold=t, niter=niter)
    if n_iter >= niter and peak > t:
        warn_user(
            f"niter: CLEAN at {f / 1e9:.6g} GHz stopped after {n_iter} components with the residual "
            f"peak at {peak:.4g} Jy/beam, above the threshold {t:.4g} Jy/beam",
            SynthesisWarning,
        )
    minor_pix = beam.minor.to_value(u.rad) / pix_rad
    if minor_pix < 2.0:
        warn_user(
            f"pixel_scale: the clean beam at {f / 1e9:.6g} GHz is {minor_pix:.3g} pixels wide "
            f"(FWHM, minor axis); fewer than 2 pixels per beam make CLEAN and the beam fit "
            f"coarse, give a smaller pixel_scale",
            SynthesisWarning,
        )
    q_min = obs.b_min / lam
    return _Plane(
        restored=restore(comps, resid, beam, pix_q),
        dirty=dirty,
        residual=resid,
        components=comps,
        psf=psf,
        primary_beam=pb,
        beam=beam,
        visibilities=np.concatenate([vis, np.conj(vis)]),
        weights=w_full / w_full.sum(),
        las=LAS_FACTOR / q_min if q_min > 0 else math.inf,
        n_iter=n_iter,
        threshold=t,
        w_phase=w_term_phase(np.max(np.abs(ww)), obs.l, obs.m),
    )


def _synthesized_map(result, convention, array, obs, planes, weighting, robust, gain, niter):
    """The `SynthesizedMap` of the planes, with the provenance that says how it was made."""
    nu, ha = obs.nu, obs.ha
    las_q = ([p.las for p in planes] * u.rad).to(u.arcsec)
    beams = [p.beam for p in planes]
    n_iter = np.array([p.n_iter for p in planes], int)
    thresholds = np.array([p.threshold for p in planes])
    interferometer_txt = (
        f"{len(array.pos)} antennas, {len(obs.pairs)} baselines, latitude {math.degrees(array.lat):.6g} deg, "
        f"declination {math.degrees(obs.dec):.6g} deg, hour angle {math.degrees(ha[0]) / 15:.6g} to "
        f"{math.degrees(ha[-1]) / 15:.6g} h ({ha.size} samples), projected baselines {obs.b_min:.6g}-"
        f"{obs.b_max:.6g} m, weighting {weighting}"
        + (f" R={robust:g}" if weighting == "robust" else "")
        + f", primary beam {array.describe_primary_beam()}, Hogbom CLEAN gain {gain:g} niter {niter} threshold "
        + ",".join(f"{t:.4g}" for t in thresholds)
        + " Jy/beam, iterations "
        + ",".join(str(k) for k in n_iter)
        + f", w-term phase at corners <= {max(p.w_phase for p in planes):.3g} rad"
    )
    las_txt = (
        "0.6 lambda / B_min (common practice): "
        + ", ".join(f"{a:.6g} arcsec at {f / 1e9:.6g} GHz" for a, f in zip(las_q.value, nu, strict=True))
        + f" (B_min = {obs.b_min:.6g} m projected)"
    )
    beam_txt = "clean beam fitted to the dirty beam: " + "; ".join(
        f"{describe_beam(b)} at {f / 1e9:.6g} GHz" for b, f in zip(beams, nu, strict=True)
    )
    provenance = dict(
        result.provenance,
        beam=beam_txt,
        noise="none",
        interferometer=interferometer_txt,
        largest_angular_scale=las_txt,
        synthesized_grid=obs.grid.how,
    )
    uvw_full = np.concatenate([obs.uvw_half, -obs.uvw_half]) * u.m

    def stack(name):
        return np.array([getattr(p, name) for p in planes])

    track = ArrayTrack(
        antennas=array.pos * u.m,
        baselines=obs.pairs,
        latitude=math.degrees(array.lat) * u.deg,
        declination=math.degrees(obs.dec) * u.deg,
        hour_angles=(ha * u.rad).to(u.hourangle),
        shortest_baseline=obs.b_min * u.m,
        longest_baseline=obs.b_max * u.m,
        largest_angular_scale=las_q,
    )
    uv_data = UVData(uvw=uvw_full, visibilities=stack("visibilities"), weights=stack("weights"))
    imaging = Imaging(
        dirty_image=stack("dirty"),
        residual=stack("residual"),
        clean_components=stack("components"),
        dirty_beam=stack("psf"),
        primary_beam=None if array.diameter is None else stack("primary_beam"),
        clean_iterations=n_iter,
        clean_thresholds=thresholds,
        weighting=weighting,
        robust=robust if weighting == "robust" else None,
        pixel_scale=obs.grid.pixel_scale,
    )
    return SynthesizedMap(
        stack("restored"),
        beams,
        result,
        provenance,
        background=convention,
        track=track,
        uv_data=uv_data,
        imaging=imaging,
    )


def _field(record, name):
    """A read-only attribute of `SynthesizedMap`: field ``name`` of its record ``record``."""
    return property(
        lambda self: getattr(getattr(self, record), name),
        doc=f"``{record}.{name}`` (see :mod:`rtrace.interferometer.records`).",
    )


class SynthesizedMap(SkyMap):
    """A synthesis image in Jy per clean beam, with what made it.

    A :class:`~rtrace.observe.SkyMap` (``data``, ``beams``, ``flux_density``,
    ``write_fits``... work as there; ``beams`` are the fitted clean beams,
    one per frequency, ``beam`` the first; ``model`` is ``data``, as
    nothing adds noise here). Build one with :func:`synthesize`.

    Parameters
    ----------
    data : ndarray (nfreq, ny, nx)
        Restored image, Jy per clean beam.
    beams : list of `radio_beam.Beam`
        Fitted clean beam per frequency.
    result : `~rtrace.Result`
        The traced model.
    provenance : dict
    track : `~rtrace.interferometer.records.ArrayTrack`
        Antennas, baselines, latitude, declination, hour angles, baseline extremes, largest angular scale.
    uv_data : `~rtrace.interferometer.records.UVData`
        ``uvw``, visibilities and imaging weights.
    imaging : `~rtrace.interferometer.records.Imaging`
        Dirty image and beam, residual, components, primary beam, CLEAN and weighting settings, pixel scale.
    background : {"subtracted", "included"}

    Attributes
    ----------
    track, uv_data, imaging : records
        As given; their fields are also read-only attributes of the map, listed below.
    dirty_image, residual : `~astropy.units.Quantity` (nfreq, ny, nx)
        Jy per dirty beam.
    clean_components : `~astropy.units.Quantity` (nfreq, ny, nx)
        Jy/pixel.
    dirty_beam : ndarray (nfreq, 2 ny, 2 nx)
        Point-spread function, peak 1 at index ``[:, ny, nx]``, at every
        pixel offset (rows toward north, columns toward west).
    primary_beam : ndarray (nfreq, ny, nx) or None
        Power pattern that attenuated the model (None without ``dish_diameter``).
    uvw : `~astropy.units.Quantity` (nvis, 3)
        Baseline coordinates in metres: all samples, then their mirror
        images ``(-u, -v, -w)``.
    u, v, w : ndarray (nfreq, nvis)
        The same in wavelengths at each frequency (for uv-coverage plots).
    visibilities : ndarray (nfreq, nvis) complex
        Model visibilities (Jy), in the order of ``uvw``.
    weights : ndarray (nfreq, nvis)
        Imaging weights, normalised to sum 1 at each frequency.
    hour_angles : `~astropy.units.Quantity`
        Hour angles sampled (those above ``min_elevation``).
    baselines : ndarray (nb, 2)
        Antenna indices of each baseline; ``uvw`` runs over hour angle
        first, then baseline (sample ``h * nb + b``).
    antennas : `~astropy.units.Quantity` (n, 3)
        East, north, up positions (m).
    latitude, declination : `~astropy.units.Quantity`
    largest_angular_scale : `~astropy.units.Quantity` (nfreq,)
        ``0.6 lambda / B_min`` (arcsec, common practice).
    shortest_baseline, longest_baseline : `~astropy.units.Quantity`
        Extremes of the projected baseline length over the observation (m).
    clean_iterations : ndarray (nfreq,) of int
    clean_thresholds : ndarray (nfreq,)
        Threshold used at each frequency (Jy/beam).
    weighting : str
    robust : float or None
    """

    def __init__(self, data, beams, result, provenance, *, track, uv_data, imaging, background="subtracted"):
        """``track``, ``uv_data``, ``imaging``: the records of :mod:`rtrace.interferometer.records`."""
        nu = result.frequencies.to_value(u.Hz)
        self.track, self.uv_data, self.imaging = track, uv_data, imaging
        # the image's own grid (the array's), not the model's; set before SkyMap reads the pixel area
        self._pixel_scale = imaging.pixel_scale
        super().__init__(
            data,
            data,
            beams,
            result,
            None,
            provenance,
            beam=beams[0],
            beam_scaling=None,
            reference_frequency=nu[0],
            seed=None,
            background=background,
        )
        self._pix_sr = float(self._pixel_scale.to_value(u.rad)) ** 2

    # the records' fields, read-only, under the names the class documents
    antennas = _field("track", "antennas")
    baselines = _field("track", "baselines")
    latitude = _field("track", "latitude")
    declination = _field("track", "declination")
    hour_angles = _field("track", "hour_angles")
    shortest_baseline = _field("track", "shortest_baseline")
    longest_baseline = _field("track", "longest_baseline")
    largest_angular_scale = _field("track", "largest_angular_scale")
    uvw = _field("uv_data", "uvw")
    visibilities = _field("uv_data", "visibilities")
    weights = _field("uv_data", "weights")
    dirty_beam = _field("imaging", "dirty_beam")
    primary_beam = _field("imaging", "primary_beam")
    clean_iterations = _field("imaging", "clean_iterations")
    clean_thresholds = _field("imaging", "clean_thresholds")
    weighting = _field("imaging", "weighting")
    robust = _field("imaging", "robust")

    @property
    def pixel_scale(self):
        """Angular size of a pixel of the synthesized image (the array's grid, not the model's)."""
        return self._pixel_scale

    @property
    def pixel_size(self):
        """Pixel size at the source's distance."""
        return (self._pixel_scale.to_value(u.rad) * self.result.view.distance).to(u.pc)

    @property
    def dirty_image(self):
        """Dirty image ``(nfreq, ny, nx)``, Jy per dirty beam."""
        return u.Quantity(self.imaging.dirty_image, JY_PER_BEAM, copy=False)

    @property
    def residual(self):
        """What CLEAN left ``(nfreq, ny, nx)``, Jy per dirty beam."""
        return u.Quantity(self.imaging.residual, JY_PER_BEAM, copy=False)

    @property
    def clean_components(self):
        """CLEAN components ``(nfreq, ny, nx)``, Jy/pixel."""
        return u.Quantity(self.imaging.clean_components, u.Jy / u.pix, copy=False)

    def _wavelengths(self, k):
        lam_m = C / self.frequencies.to_value(u.Hz) * 1e-2
        return self.uvw[:, k].to_value(u.m)[None, :] / lam_m[:, None]

    @property
    def u(self):
        """``u`` of every sample in wavelengths at each frequency, ``(nfreq, nvis)``."""
        return self._wavelengths(0)

    @property
    def v(self):
        """``v`` of every sample in wavelengths at each frequency, ``(nfreq, nvis)``."""
        return self._wavelengths(1)

    @property
    def w(self):
        """``w`` of every sample in wavelengths at each frequency, ``(nfreq, nvis)``."""
        return self._wavelengths(2)

    def write_fits(self, path, image="restored", spectral_axis="auto"):
        """Write one of the images to a FITS cube.

        Parameters
        ----------
        path : str or os.PathLike
        image : {"restored", "dirty", "residual", "components"}
            ``restored`` (Jy/beam, the clean beams), ``dirty`` and
            ``residual`` (Jy per dirty beam; the header carries the clean
            beams, as usual for these images) or ``components`` (Jy/pixel,
            no beam).
        spectral_axis : {"auto", "tabular"}, optional
            How a frequency list that is neither even nor geometric is
            written: one file per plane (default) or a ``FREQ-TAB`` axis
            (see `rtrace.io.fits.write_cube`).

        Returns
        -------
        pathlib.Path or list of pathlib.Path
            The file, or the files of the planes.
        """
        if image == "restored":
            return super().write_fits(path, spectral_axis=spectral_axis)
        choices = {
            "dirty": (self.dirty_image, True),
            "residual": (self.residual, True),
            "components": (self.clean_components, False),
        }
        if image not in choices:
            raise InputError(f"image: expected 'restored', 'dirty', 'residual' or 'components', got {image!r}")
        data, with_beam = choices[image]
        return write_cube(
            path,
            data,
            self.frequencies,
            self.pixel_scale,
            self.sky_position,
            beams=self.beams if with_beam else None,
            provenance=self.provenance,
            reference_beam=self.beam if with_beam else None,
            quantity=f"synthesis {image}",
            spectral_axis=spectral_axis,
            background=header_cards("subtracted", self.result) + pixel_error_cards(self.result, model=True),
        )

    def __repr__(self):
        nf, ny, nx = self.shape
        b = self.beam
        return (
            f"<SynthesizedMap {nf} frequencies, {ny}x{nx} pixels of {self.pixel_scale:.4g}, "
            f"{len(self.antennas)} antennas, clean beam {b.major.to(u.arcsec):.4g} x "
            f"{b.minor.to(u.arcsec):.4g} pa {b.pa.to(u.deg):.4g}, largest angular scale "
            f"{self.largest_angular_scale[0]:.4g}>"
        )
