"""Synthetic aperture synthesis: (u, v, w) geometry, Fourier sampling, weighting, CLEAN, flux recovery.

Geometry is checked against Thompson, Moran & Swenson, "Interferometry and Synthesis in Radio
Astronomy", 3rd ed. (2017), ch. 4 (TMS; equation numbers from memory) and against astropy's own
hour-angle -> horizon transformation; imaging against the Fourier shift and convolution
theorems and a Bessel-function beam; CLEAN against Högbom (1974, A&AS 15, 417). All antenna
layouts here are invented.
"""

import math
import warnings

import astropy.units as u
import numpy as np
import pytest
import radio_beam
from astropy.coordinates import AltAz, EarthLocation, HADec, SkyCoord
from astropy.io import fits
from astropy.time import Time
from astropy.utils import iers
from scipy import signal
from scipy.special import j0

import rtrace
from rtrace.errors import InputError
from rtrace.interferometer import SynthesisWarning, read_antennas, synthesize
from rtrace.interferometer.array import (
    enu_to_equatorial,
    equatorial_to_uvw,
    hour_angle_samples,
    source_elevation,
    uvw_tracks,
)
from rtrace.interferometer.clean import fit_clean_beam, hogbom
from rtrace.interferometer.imaging import imaging_weights
from rtrace.interferometer.sampling import primary_beam_pattern
from rtrace.physics.constants import C
from rtrace.transfer.result import Result

AU_CM = 1.495978707e13  # IAU 2012 Resolution B2 (exact)
DIST = 1.0 * u.kpc
PIX = 1.0 * u.arcsec  # 1 arcsec at 1 kpc is 1000 au (definition of the parsec)
NU = 5.0 * u.GHz
LAM_M = C / NU.to_value(u.Hz) / 100.0
N = 128
SKY = SkyCoord(ra=150 * u.deg, dec=40 * u.deg)
LAT = 35 * u.deg
HA = (-4, 4) * u.hourangle
STEP = 4 * u.min  # a time: converted at the sidereal rate

# An invented 10-dish layout, 0.44-3.2 km projected baselines: beam ~ 3.5", LAS ~ 17".
ANTENNAS = (
    np.array(
        [
            [0, 0, 0],
            [610, 140, 1],
            [-380, 520, 2],
            [150, -700, 0],
            [-900, -300, 1],
            [1200, 800, 3],
            [-200, 1500, 2],
            [1700, -600, 0],
            [-1500, 1100, 1],
            [500, 1900, 2],
        ],
        float,
    )
    * u.m
)

# Source positions on the image, arcsec from the centre along the snapshot's x (column, west)
# and y (row, north) axes
COMPACT_XY = (30.0, 25.0)
COMPACT_SIGMA = 1.5  # arcsec
DISK_XY = (-20.0, -10.0)
DISK_RADIUS = 35.0  # arcsec
# Checks that compare image pixels with model pixels image on the model's own grid
MODEL_GRID = dict(pixel_scale=PIX, image_size=N)
POINT_GRID = dict(pixel_scale=PIX, image_size=64)


# -- helpers -------------------------------------------------------------------------------------


def _traced(ne2d):
    """Trace a 4-cell-thick slab of 10^4 K gas with the given column profile n_e(x, y) (cm-3)."""
    ne = np.repeat(ne2d[:, :, None], 4, axis=2)
    snap = rtrace.Snapshot.from_arrays(
        temperature=np.full(ne.shape, 1e4) * u.K,
        electron_density=ne * u.cm**-3,
        cell_size=1000 * AU_CM * u.cm,
        dtype=np.float64,
    )
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=N, distance=DIST, sky_position=SKY)
    return rtrace.trace(snap, view, [NU.to_value(u.GHz)] * u.GHz)


def _offsets():
    x = np.arange(N) - (N - 1) / 2.0  # cell centres, arcsec (1 cell = 1 pixel)
    return np.meshgrid(x, x, indexing="ij")  # (x, y) arrays indexed [i, j]


def _compact_ne():
    X, Y = _offsets()
    return 30.0 * np.exp(-((X - COMPACT_XY[0]) ** 2 + (Y - COMPACT_XY[1]) ** 2) / (2 * COMPACT_SIGMA**2))


def _disk_ne():
    X, Y = _offsets()
    return np.where((X - DISK_XY[0]) ** 2 + (Y - DISK_XY[1]) ** 2 < DISK_RADIUS**2, 3.0, 0.0)


def _aperture_flux(sm, xy, radius):
    """Sum of Jy/pixel within ``radius`` (arcsec) of the source at snapshot offset ``xy``."""
    r, c = np.mgrid[0:N, 0:N]
    centre = (N - 1) / 2.0
    inside = (c - (centre + xy[0])) ** 2 + (r - (centre + xy[1])) ** 2 < radius**2
    return float(sm.data[0].value[inside].sum() / sm.beam_area_pixels[0])


def _true_aperture_flux(res, xy, radius):
    r, c = np.mgrid[0:N, 0:N]
    centre = (N - 1) / 2.0
    inside = (c - (centre + xy[0])) ** 2 + (r - (centre + xy[1])) ** 2 < radius**2
    jy = res.intensity[0].value * res.pixel_solid_angle.to_value(u.sr) / 1e-23
    return float(jy[inside].sum())


def _point_result(row, col, flux_jy, sky=SKY, npix=64, nu_hz=(5e9,)):
    """A Result whose only emission is one pixel of the given flux density (Jy)."""
    img = np.zeros((len(nu_hz), npix, npix))
    img[:, row, col] = flux_jy * 1e-23 / PIX.to_value(u.rad) ** 2  # 1 Jy = 1e-23 cgs (definition)
    view = rtrace.View(npix=npix, distance=DIST, sky_position=sky)
    pix_cm = PIX.to_value(u.rad) * DIST.to_value(u.cm)
    return Result(
        img,
        np.zeros_like(img),
        np.zeros((npix, npix)),
        np.asarray(nu_hz, float),
        view,
        pix_cm,
        np.zeros(3),
        {"source": "test"},
    )


@pytest.fixture(scope="module")
def compact_result():
    return _traced(_compact_ne())


@pytest.fixture(scope="module")
def both_result():
    return _traced(_compact_ne() + _disk_ne())


@pytest.fixture(scope="module")
def maps(compact_result):
    return {
        w: synthesize(
            compact_result,
            **MODEL_GRID,
            antennas=ANTENNAS,
            latitude=LAT,
            hour_angle_range=HA,
            hour_angle_step=STEP,
            weighting=w,
        )
        for w in ("natural", "uniform")
    }


# -- geometry ------------------------------------------------------------------------------------


@pytest.mark.parametrize("lat_deg, dec_deg", [(35.0, 40.0), (-30.0, -60.0), (52.0, 10.0), (0.0, 75.0)])
def test_east_west_baseline_tracks(lat_deg, dec_deg):
    # TMS 2017, eq. 4.1 with X = Z = 0, Y = b: u = (b/lambda) cos H, v = (b/lambda) sin(dec) sin H,
    # w = -(b/lambda) cos(dec) sin H, at any latitude (an east-west baseline lies in the equatorial
    # plane). Convention: u toward east, v toward north, w toward the source.
    b = 1500.0
    ha = hour_angle_samples((-6, 6) * u.hourangle, n_hour_angles=49)
    uvw, pairs, _ = uvw_tracks(np.array([[0.0, 0, 0], [b, 0, 0]]), math.radians(lat_deg), math.radians(dec_deg), ha)
    d = math.radians(dec_deg)
    np.testing.assert_allclose(uvw[:, 0, 0], b * np.cos(ha), atol=1e-9)
    np.testing.assert_allclose(uvw[:, 0, 1], b * math.sin(d) * np.sin(ha), atol=1e-9)
    np.testing.assert_allclose(uvw[:, 0, 2], -b * math.cos(d) * np.sin(ha), atol=1e-9)
    assert pairs.tolist() == [[0, 1]]


def test_east_west_tracks_in_wavelengths_through_synthesize():
    # the same formula end to end: SynthesizedMap.u, .v in wavelengths, lambda = c / nu
    b = 900.0
    res = _point_result(32, 32, 1.0)
    sm = synthesize(
        res,
        **POINT_GRID,
        antennas=np.array([[0, 0, 0], [b, 0, 0]]) * u.m,
        latitude=LAT,
        hour_angle_range=(-6, 6) * u.hourangle,
        n_hour_angles=145,
    )
    h = sm.hour_angles.to_value(u.rad)
    d = SKY.dec.to_value(u.rad)
    q = b / LAM_M
    half = h.size
    np.testing.assert_allclose(sm.u[0, :half], q * np.cos(h), rtol=1e-12, atol=1e-9 * q)
    np.testing.assert_allclose(sm.v[0, :half], q * math.sin(d) * np.sin(h), rtol=1e-12, atol=1e-9 * q)
    # both (u, v) and (-u, -v) are in the coverage
    np.testing.assert_allclose(sm.u[0, half:], -sm.u[0, :half])
    np.testing.assert_allclose(sm.v[0, half:], -sm.v[0, :half])


def test_uvw_against_astropy_horizon_frame():
    # Independent of TMS's rotation matrices: the source's direction s in local east-north-up
    # coordinates from astropy's HADec -> AltAz transformation (no refraction), the sky's east
    # axis e = P x s / |P x s| (P the celestial pole) and north n = s x e; then u = b.e, v = b.n,
    # w = b.s (TMS 2017, ch. 4: u, v in the plane of the sky toward east and north, w toward
    # the source).
    lat, dec = 35.0, 40.0
    loc = EarthLocation.from_geodetic(0 * u.deg, lat * u.deg, 0 * u.m)
    t = Time("2020-01-01T00:00:00", scale="utc")

    def enu(ha_h, dec_deg):
        c = SkyCoord(
            ha=ha_h * u.hourangle, dec=dec_deg * u.deg, frame=HADec(location=loc, obstime=t, pressure=0 * u.hPa)
        )
        # offline: astropy's bundled Earth-orientation table covers 2020 (no download of the newer one)
        with iers.conf.set_temp("auto_download", False):
            a = c.transform_to(AltAz(location=loc, obstime=t, pressure=0 * u.hPa))
        alt, az = a.alt.to_value(u.rad), a.az.to_value(u.rad)
        return np.stack([np.cos(alt) * np.sin(az), np.cos(alt) * np.cos(az), np.sin(alt)], axis=-1)

    ha_h = np.array([-5.0, -2.5, 0.0, 1.0, 4.0])
    s = enu(ha_h, dec)
    pole = enu(np.zeros(1), 90.0)[0]
    e = np.cross(pole, s)
    e /= np.linalg.norm(e, axis=1, keepdims=True)
    n = np.cross(s, e)
    rng = np.random.default_rng(7)
    base = rng.uniform(-2000, 2000, (4, 3))
    uvw = equatorial_to_uvw(enu_to_equatorial(base, math.radians(lat)), np.radians(15 * ha_h), math.radians(dec))
    np.testing.assert_allclose(uvw[..., 0], e @ base.T, atol=1e-6)
    np.testing.assert_allclose(uvw[..., 1], n @ base.T, atol=1e-6)
    np.testing.assert_allclose(uvw[..., 2], s @ base.T, atol=1e-6)
    # and the elevation: sin e = sin(lat) sin(dec) + cos(lat) cos(dec) cos H against astropy
    np.testing.assert_allclose(
        source_elevation(np.radians(15 * ha_h), math.radians(dec), math.radians(lat)), np.arcsin(s[:, 2]), atol=1e-10
    )


def test_polar_axis_baseline_does_not_rotate():
    # A baseline parallel to the Earth's axis (north = b cos(lat), up = b sin(lat)) has X = Y = 0,
    # Z = b: u = 0, v = b cos(dec), w = b sin(dec) at every hour angle (TMS 2017, eq. 4.1).
    lat, dec, b = math.radians(-25.0), math.radians(-50.0), 800.0
    enu = np.array([[0.0, 0, 0], [0.0, b * math.cos(lat), b * math.sin(lat)]])
    uvw, _, xyz = uvw_tracks(enu, lat, dec, np.linspace(-2, 2, 9))
    np.testing.assert_allclose(xyz[0], [0, 0, b], atol=1e-9)
    np.testing.assert_allclose(uvw[:, 0, 0], 0.0, atol=1e-9)
    np.testing.assert_allclose(uvw[:, 0, 1], b * math.cos(dec), atol=1e-9)
    np.testing.assert_allclose(uvw[:, 0, 2], b * math.sin(dec), atol=1e-9)


def test_time_step_uses_the_sidereal_rate():
    # 1 h of clock time is 86400 / 86164.0905 h of hour angle (mean sidereal day, from memory)
    h = hour_angle_samples((0, 3) * u.hourangle, hour_angle_step=1 * u.h)
    assert np.diff(h)[0] == pytest.approx(math.radians(15.0) * 86400.0 / 86164.0905, rel=1e-12)
    assert h.size == 3  # 0, 1.0027, 2.0055 h; 3.008 h is past the end


# -- sampling ------------------------------------------------------------------------------------


def test_point_source_visibilities_follow_the_shift_theorem():
    # A point of flux S at (l0, m0): V(u, v) = S exp(-2 pi i (u l0 + v m0)) (Fourier shift theorem;
    # TMS 2017, ch. 3). l toward east = toward smaller column index on rtrace images.
    row, col, s = 40, 21, 0.37
    res = _point_result(row, col, s)
    sm = synthesize(res, **POINT_GRID, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP)
    pix = PIX.to_value(u.rad)
    l0 = -(col - 31.5) * pix
    m0 = (row - 31.5) * pix
    expect = s * np.exp(-2j * np.pi * (sm.u[0] * l0 + sm.v[0] * m0))
    np.testing.assert_allclose(sm.visibilities[0], expect, rtol=0, atol=1e-12 * s)


def test_dirty_image_is_model_convolved_with_dirty_beam(compact_result):
    # The dirty image is the sky convolved with the synthesized (dirty) beam: convolution
    # theorem applied to sampled visibilities (TMS 2017, ch. 5, from memory).
    sm = synthesize(
        compact_result,
        **MODEL_GRID,
        antennas=ANTENNAS,
        latitude=LAT,
        hour_angle_range=HA,
        hour_angle_step=STEP,
        weighting="uniform",
    )
    jy = compact_result.intensity[0].value * compact_result.pixel_solid_angle.to_value(u.sr) / 1e-23
    full = signal.fftconvolve(jy, sm.dirty_beam[0], mode="full")
    # model pixel q and image pixel p: dirty[p] = sum_q jy[q] psf[N + p - q]
    expect = full[N : 2 * N, N : 2 * N]
    np.testing.assert_allclose(sm.dirty_image[0].value, expect, atol=1e-9 * np.abs(expect).max())


def test_bessel_beam_of_a_circular_track():
    # One east-west baseline seen from the pole traces a circle of radius q = b / lambda; the
    # beam of a uniformly sampled ring is J0(2 pi q theta) (Hankel transform of a ring,
    # Bracewell, "The Fourier Transform and Its Applications", 3rd ed. 2000, ch. 12, from memory).
    # Its shortest projected baseline is b, so theta_LAS = 0.6 lambda / b (common practice).
    b, n = 2000.0, 360
    res = _point_result(32, 32, 1.0, sky=SkyCoord(ra=0 * u.deg, dec=90 * u.deg))
    sm = synthesize(
        res,
        **POINT_GRID,
        antennas=np.array([[0, 0, 0], [b, 0, 0]]) * u.m,
        latitude=50 * u.deg,
        hour_angle_range=(-12, 12 - 24 / n) * u.hourangle,
        hour_angle_step=(24 / n) * u.hourangle,
    )
    theta = np.arange(-64, 64) * PIX.to_value(u.rad)
    q = b / LAM_M
    np.testing.assert_allclose(sm.dirty_beam[0][:, 64], j0(2 * np.pi * q * theta), atol=1e-10)
    np.testing.assert_allclose(sm.dirty_beam[0][64, :], j0(2 * np.pi * q * theta), atol=1e-10)
    assert sm.shortest_baseline.to_value(u.m) == pytest.approx(b, rel=1e-12)
    assert sm.largest_angular_scale[0].to_value(u.rad) == pytest.approx(0.6 * LAM_M / b, rel=1e-12)


def test_primary_beam_patterns():
    d, lam = 12.0, 0.06
    # Gaussian: half power at half the FWHM, FWHM = 1.13 lambda / D (definition of the FWHM;
    # the factor is common practice for a tapered dish, from memory)
    half = 0.5 * 1.13 * lam / d
    assert primary_beam_pattern("gaussian", d, lam, np.array([half]), np.array([0.0]))[0, 0] == pytest.approx(0.5)
    # Airy (uniformly illuminated aperture): (2 J1(x)/x)^2, x = pi D sin(theta)/lambda; first
    # null at x = 3.8317 (Abramowitz & Stegun 1964, table 9.5), half power at FWHM = 1.029
    # lambda / D (Born & Wolf, Principles of Optics, sec. 8.5.2, from memory)
    null = 3.8317059702 / np.pi * lam / d
    assert primary_beam_pattern("airy", d, lam, np.array([null]), np.array([0.0]))[0, 0] < 1e-18
    hp = primary_beam_pattern("airy", d, lam, np.array([0.5 * 1.029 * lam / d]), np.array([0.0]))[0, 0]
    assert hp == pytest.approx(0.5, abs=2e-3)
    assert primary_beam_pattern("airy", d, lam, np.zeros(1), np.zeros(1))[0, 0] == 1.0


def test_primary_beam_attenuates_an_offset_source():
    # every visibility of a point source carries S A(theta): the attenuation is applied to the
    # model before sampling
    res = _point_result(32, 50, 1.0)
    d = 25.0
    sm = synthesize(
        res,
        **POINT_GRID,
        antennas=ANTENNAS,
        latitude=LAT,
        hour_angle_range=HA,
        hour_angle_step=STEP,
        dish_diameter=d * u.m,
    )
    theta = (50 - 31.5) * PIX.to_value(u.rad)
    fwhm = 1.13 * LAM_M / d
    a = math.exp(-4 * math.log(2) * (theta**2 + (0.5 * PIX.to_value(u.rad)) ** 2) / fwhm**2)
    np.testing.assert_allclose(np.abs(sm.visibilities[0]), a, rtol=1e-10)
    assert sm.primary_beam[0].max() < 1.0 and sm.primary_beam.shape == (1, 64, 64)


# -- weighting and beams -------------------------------------------------------------------------


def test_dirty_beam_peak_and_natural_broader_than_uniform(maps):
    # The dirty beam is sum w cos(...) / sum w: exactly 1 at zero offset and never above
    # (|cos| <= 1). Natural weighting lets the many short spacings dominate, so its beam is
    # broader than the uniformly weighted one (common practice).
    for sm in maps.values():
        psf = sm.dirty_beam[0]
        assert psf[N, N] == pytest.approx(1.0, abs=1e-12)
        assert psf.max() <= 1.0 + 1e-12
        assert np.unravel_index(np.argmax(psf), psf.shape) == (N, N)
    nat, uni = maps["natural"].beam, maps["uniform"].beam
    assert nat.sr > 1.1 * uni.sr
    assert nat.major > uni.major and nat.minor > uni.minor


def test_robust_weighting_limits():
    # Briggs (1995, PhD thesis, ch. 3): large positive R tends to natural weighting, large
    # negative R to uniform weighting (weights then proportional to 1 / W_cell).
    rng = np.random.default_rng(2)
    uu, vv = rng.normal(0, 50, 400), rng.normal(0, 50, 400)
    uu, vv = np.concatenate([uu, -uu]), np.concatenate([vv, -vv])
    cell = (10.0, 10.0)
    nat = imaging_weights(uu, vv, "natural", cell)
    uni = imaging_weights(uu, vv, "uniform", cell)
    assert len(np.unique(uni)) > 3  # the density does vary
    for r, ref in ((8.0, nat), (-8.0, uni)):
        w = imaging_weights(uu, vv, "robust", cell, robust=r)
        np.testing.assert_allclose(w / w.sum(), ref / ref.sum(), rtol=1e-4)
    mid = imaging_weights(uu, vv, "robust", cell, robust=0.0)
    assert not np.allclose(mid / mid.sum(), nat / nat.sum(), rtol=1e-2)
    assert not np.allclose(mid / mid.sum(), uni / uni.sum(), rtol=1e-2)


@pytest.mark.parametrize("pa", [0.0, 35.0, 120.0])
def test_clean_beam_fit_recovers_a_gaussian(pa):
    # An elliptical Gaussian with FWHM = sqrt(8 ln 2) sigma (standard identity) and the major axis
    # along (row, column) = (cos pa, -sin pa) (pa north through east; north = +row, east =
    # -column on rtrace images, common practice for the position angle) is recovered exactly.
    n = 32
    r, c = np.mgrid[-n:n, -n:n].astype(float)
    smaj, smin = 6.0 / np.sqrt(8 * np.log(2)), 3.5 / np.sqrt(8 * np.log(2))
    t = np.radians(pa)
    along = r * np.cos(t) - c * np.sin(t)
    across = r * np.sin(t) + c * np.cos(t)
    psf = np.exp(-0.5 * ((along / smaj) ** 2 + (across / smin) ** 2))
    b = fit_clean_beam(psf, 0.5 * u.arcsec)
    assert b.major.to_value(u.arcsec) == pytest.approx(3.0, rel=1e-9)
    assert b.minor.to_value(u.arcsec) == pytest.approx(1.75, rel=1e-9)
    assert b.pa.to_value(u.deg) == pytest.approx(pa, abs=1e-7)


def test_clean_beam_fit_matches_the_half_power_width_of_an_airy_beam():
    # The clean beam is fitted to the main lobe down to half power, so for a lobe that is not a
    # Gaussian its FWHM is the beam's own half-power width. Reference: the Airy pattern
    # (2 J1(x) / x)^2 (Born & Wolf, sec. 8.5.2, from memory), whose half-power point is found here
    # with scipy's Bessel function and root finder.
    from scipy.optimize import brentq
    from scipy.special import j1

    def airy(x):
        x = np.asarray(x, float)
        out = np.ones_like(x)
        nz = x > 0
        out[nz] = (2 * j1(x[nz]) / x[nz]) ** 2
        return out

    x_half = brentq(lambda x: airy(np.array([x]))[0] - 0.5, 0.5, 3.0)
    n, scale = 48, 0.25  # x per pixel: about 13 pixels across the FWHM
    r, c = np.mgrid[-n:n, -n:n].astype(float)
    psf = airy(np.hypot(r, c) * scale)
    b = fit_clean_beam(psf, 1.0 * u.arcsec)
    fwhm = 2 * x_half / scale
    assert b.major.to_value(u.arcsec) == pytest.approx(fwhm, rel=0.02)
    assert b.minor.to_value(u.arcsec) == pytest.approx(fwhm, rel=0.02)


def test_hogbom_on_a_lone_point_source():
    # Högbom (1974): on an isolated point of flux S each iteration removes the fraction g of the
    # peak at the same pixel, so after n iterations the components hold S (1 - (1 - g)^n) there
    # and the residual is S (1 - g)^n times the beam.
    n = 24
    rr, cc = np.mgrid[-n:n, -n:n]
    psf = np.exp(-(rr**2 + cc**2) / 8.0) * np.cos(0.6 * rr)
    psf /= psf[n, n]
    s, g, k = 2.5, 0.2, 17
    dirty = s * psf[n - 10 : 2 * n - 10, n - 7 : 2 * n - 7]  # source at pixel (10, 7)
    comps, resid, it, peak = hogbom(dirty, psf, gain=g, threshold=0.0, niter=k)
    assert it == k
    assert comps[10, 7] == pytest.approx(s * (1 - (1 - g) ** k), rel=1e-12)
    assert np.count_nonzero(comps) == 1
    np.testing.assert_allclose(resid, s * (1 - g) ** k * psf[n - 10 : 2 * n - 10, n - 7 : 2 * n - 7], atol=1e-12)
    assert peak == pytest.approx(s * (1 - g) ** k, rel=1e-12)


# -- flux recovery -------------------------------------------------------------------------------


def test_compact_source_keeps_its_flux(maps, compact_result):
    # a source much smaller than the largest angular scale is sampled at all spatial frequencies
    # that matter: CLEAN recovers its flux density (common practice)
    true = compact_result.flux_density()[0].to_value(u.Jy)
    for w, sm in maps.items():
        assert sm.largest_angular_scale[0].to_value(u.arcsec) > 3 * 2.355 * COMPACT_SIGMA
        assert sm.flux_density()[0].to_value(u.Jy) == pytest.approx(true, rel=0.03), w
        assert sm.clean_components[0].value.sum() == pytest.approx(true, rel=0.03), w
        # the peak of the restored image sits on the source
        r, c = np.unravel_index(np.argmax(sm.data[0].value), (N, N))
        assert abs(c - (63.5 + COMPACT_XY[0])) <= 1 and abs(r - (63.5 + COMPACT_XY[1])) <= 1
        assert sm.clean_iterations[0] < 10000


def test_extended_disk_is_filtered_compact_source_survives(both_result):
    # A uniform disk much larger than theta_LAS = 0.6 lambda / B_min (common practice) has almost
    # all its visibility inside the central hole of the (u, v) coverage, so the array misses
    # most of its flux; the compact source in the same image is still recovered.
    sm = synthesize(
        both_result,
        **MODEL_GRID,
        antennas=ANTENNAS,
        latitude=LAT,
        hour_angle_range=HA,
        hour_angle_step=STEP,
        weighting="natural",
    )
    las = sm.largest_angular_scale[0].to_value(u.arcsec)
    assert 2 * DISK_RADIUS > 3 * las
    disk_true = _true_aperture_flux(both_result, DISK_XY, DISK_RADIUS + 5)
    compact_true = _true_aperture_flux(both_result, COMPACT_XY, 8.0)
    assert disk_true > 3 * compact_true  # the disk holds most of the true flux
    disk_seen = _aperture_flux(sm, DISK_XY, DISK_RADIUS + 5)
    compact_seen = _aperture_flux(sm, COMPACT_XY, 8.0)
    assert abs(disk_seen) < 0.2 * disk_true
    assert compact_seen == pytest.approx(compact_true, rel=0.05)


# -- products --------------------------------------------------------------------------------------


def test_map_is_a_skymap_and_writes_fits(maps, tmp_path):
    sm = maps["natural"]
    assert isinstance(sm, rtrace.observe.SkyMap)
    assert isinstance(sm.beam, radio_beam.Beam) and sm.beams == [sm.beam]
    assert sm.data.unit == u.Jy / u.beam and sm.clean_components.unit == u.Jy / u.pix
    assert sm.uvw.shape == (2 * sm.hour_angles.size * 45, 3)
    assert "largest_angular_scale" in sm.provenance and "interferometer" in sm.provenance
    path = sm.write_fits(tmp_path / "synth.fits")
    with fits.open(path) as hdul:
        h = hdul[0].header
        assert h["BUNIT"] == "Jy/beam"
        assert h["BMAJ"] == pytest.approx(sm.beam.major.to_value(u.deg), rel=1e-12)
        assert any("largest_angular_scale" in str(x) for x in h["HISTORY"])
        np.testing.assert_allclose(hdul[0].data, sm.data.value, rtol=1e-6, atol=1e-6 * np.abs(sm.data.value).max())
    path = sm.write_fits(tmp_path / "dirty.fits", image="dirty")
    with fits.open(path) as hdul:
        np.testing.assert_allclose(
            hdul[0].data[0], sm.dirty_image[0].value, rtol=1e-6, atol=1e-6 * np.abs(sm.dirty_image.value).max()
        )


# -- antenna files -------------------------------------------------------------------------------


def test_read_antennas_file(tmp_path):
    p = tmp_path / "ants.txt"
    p.write_text("# invented\n\nunit = km\n 0 0 0\n1.5 -0.25 0.002  # east\n-0.5 2 0\n")
    a = read_antennas(p)
    assert a.unit == u.km
    np.testing.assert_allclose(a.to_value(u.m), [[0, 0, 0], [1500, -250, 2], [-500, 2000, 0]])
    q = tmp_path / "nounit.txt"
    q.write_text("0 0 0\n10 0 0\n")
    np.testing.assert_allclose(read_antennas(q, unit="m").to_value(u.m), [[0, 0, 0], [10, 0, 0]])
    with pytest.raises(InputError, match="no 'unit =' line"):
        read_antennas(q)
    with pytest.raises(InputError, match="says 'km'"):
        read_antennas(p, unit="m")
    bad = tmp_path / "bad.txt"
    bad.write_text("unit = m\n0 0 0\n1 2\n")
    with pytest.raises(InputError, match="line 3: expected three numbers"):
        read_antennas(bad)
    bad.write_text("unit = s\n0 0 0\n")
    with pytest.raises(InputError, match="length unit"):
        read_antennas(bad)


@pytest.mark.parametrize("name, n", [("compact_y8.txt", 8), ("ring12.txt", 12)])
def test_example_layouts_load(name, n):
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "examples" / "antennas" / name
    a = read_antennas(path)
    assert a.shape == (n, 3)
    d = np.linalg.norm((a[:, None, :] - a[None, :, :]).to_value(u.m), axis=-1)
    assert d[np.triu_indices(n, 1)].min() > 25.0  # no two dishes overlap


def test_synthesize_reads_a_layout_file(tmp_path):
    p = tmp_path / "ants.txt"
    p.write_text("\n".join(" ".join(str(x) for x in row) for row in ANTENNAS.to_value(u.m)) + "\n")
    res = _point_result(32, 32, 1.0)
    a = synthesize(res, antennas=p, antenna_unit="m", latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP)
    b = synthesize(res, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP)
    np.testing.assert_array_equal(a.data.value, b.data.value)


# -- bad input -----------------------------------------------------------------------------------


def _call(**kw):
    args = dict(antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP)
    args.update(kw)
    return synthesize(_point_result(32, 32, 1.0), **args)


@pytest.mark.parametrize(
    "kw, match",
    [
        (dict(antennas=np.zeros((4, 2)) * u.m), r"antennas: expected shape \(n, 3\)"),
        (dict(antennas=np.zeros((3, 3, 1)) * u.m), r"antennas: expected shape \(n, 3\)"),
        (dict(antennas=np.array([[0.0, 0, 0]]) * u.m), "at least 2 antennas, got 1"),
        (dict(antennas=np.array([[0.0, 0, 0], [1, 0, 0]]) * u.s), "expected lengths"),
        (dict(antennas=np.array([[0.0, 0, 0], [1, 0, 0]])), "expected a Quantity"),
        (dict(antennas=np.array([[0.0, 0, 0], [5, 5, 0], [0, 0, 0]]) * u.m), "antennas 0 and 2 are at the same"),
        (dict(antennas=np.array([[0.0, 0, 0], [np.nan, 0, 0]]) * u.m), "not finite"),
        (dict(hour_angle_range=(4, -4) * u.hourangle), "hour_angle_range: start .* is after stop"),
        (dict(hour_angle_range=(-13, 13) * u.hourangle), "more than the 24 h"),
        (dict(hour_angle_range=(-4, 4) * u.m), "hour_angle_range: expected an angle"),
        (dict(hour_angle_step=-1 * u.min), "hour_angle_step: must be positive"),
        (dict(n_hour_angles=10), "give one of them, not both"),
        (dict(latitude=95 * u.deg), r"latitude: must lie in \[-90.0, 90.0\]"),
        (dict(latitude=35), "latitude: expected an angle"),
        (dict(latitude=-80 * u.deg), "stays below min_elevation"),
        (dict(weighting="briggs"), "weighting: expected one of natural, uniform, robust"),
        (dict(dish_diameter=2000 * u.m), "dish_diameter: antennas .* closer than one dish diameter"),
        (dict(dish_diameter=10 * u.m, primary_beam="cosine"), "primary_beam: expected one of"),
        (dict(gain=1.5), r"gain: the loop gain must lie in \(0, 1\]"),
        (dict(threshold=1.0), "threshold: expected a Quantity"),
        (dict(antennas="/nonexistent/antennas.txt"), "does not exist"),
    ],
)
def test_bad_input(kw, match):
    with pytest.raises(InputError, match=match):
        _call(**kw)


def test_bad_result():
    with pytest.raises(InputError, match="result: expected an rtrace Result"):
        synthesize(np.zeros((1, 8, 8)), antennas=ANTENNAS, latitude=LAT)


def test_warnings_for_horizon_and_coarse_track_sampling():
    # a source at dec +40 seen from latitude -35 is up only within |H| < ~3.6 h
    # (cos H = -tan(lat) tan(dec)), so part of a +-6 h range is dropped
    with pytest.warns(SynthesisWarning, match="below min_elevation"):
        sm = _call(latitude=-35 * u.deg, hour_angle_range=(-6, 6) * u.hourangle)
    h_max = math.degrees(math.acos(-math.tan(math.radians(-35)) * math.tan(math.radians(40)))) / 15
    assert np.all(np.abs(sm.hour_angles.to_value(u.hourangle)) <= h_max)
    # 60 min steps put the grating response of the longest tracks inside the image
    with pytest.warns(SynthesisWarning, match="hour_angle_step: the longest baseline"):
        _call(hour_angle_step=60 * u.min)
    with warnings.catch_warnings():
        warnings.simplefilter("error", SynthesisWarning)
        _call()  # the defaults used above are fine


def test_two_frequencies_scale_as_one_over_nu(tmp_path):
    # (u, v) in wavelengths grow as nu, so theta_LAS = 0.6 lambda / B_min goes exactly as 1 / nu
    # (common practice) and the synthesized beam, the transform of the same coverage, shrinks as
    # 1 / nu up to its sampling on the pixel grid
    res = _point_result(32, 32, 1.0, nu_hz=(4e9, 8e9))
    sm = synthesize(res, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP)
    las = sm.largest_angular_scale.to_value(u.arcsec)
    assert las[0] / las[1] == pytest.approx(2.0, rel=1e-12)
    np.testing.assert_allclose(sm.u[1], 2.0 * sm.u[0], rtol=1e-12)
    ratio = sm.beams[0].major.to_value(u.arcsec) / sm.beams[1].major.to_value(u.arcsec)
    assert ratio == pytest.approx(2.0, rel=0.05)
    np.testing.assert_allclose(sm.flux_density().to_value(u.Jy), 1.0, rtol=0.01)
    path = sm.write_fits(tmp_path / "two.fits")
    with fits.open(path) as hdul:
        assert "BEAMS" in hdul  # one clean beam per plane
        np.testing.assert_allclose(hdul["BEAMS"].data["BMAJ"], [b.major.to_value(u.arcsec) for b in sm.beams])


def test_warns_without_sky_position():
    res = _point_result(32, 32, 1.0)
    res.view.sky_position = None
    with pytest.warns(SynthesisWarning, match="no sky_position"):
        sm = synthesize(res, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP)
    assert sm.declination.to_value(u.deg) == 0.0


# -- the synthesized image's own grid ------------------------------------------------------------


def test_default_grid_follows_the_array_and_keeps_the_flux(compact_result):
    # 5 pixels across lambda_min / B_max (a choice documented in rtrace.interferometer.grid), over the
    # model's field; lambda = c / nu (C, cgs) and B_max the longest antenna separation
    with warnings.catch_warnings():
        warnings.simplefilter("error", SynthesisWarning)
        sm = synthesize(compact_result, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, weighting="uniform")
    pos = ANTENNAS.to_value(u.m)
    bmax = max(np.linalg.norm(a - b) for a in pos for b in pos)
    pix = LAM_M / bmax / 5
    assert sm.pixel_scale.to_value(u.rad) == pytest.approx(pix, rel=1e-12)
    field = N * PIX.to_value(u.rad)
    assert sm.shape[1] == sm.shape[2] == math.ceil(field / pix - 1e-9)
    assert sm.beam.minor.to_value(u.rad) / pix >= 4
    # the compact source's flux and position on the new grid (common practice: CLEAN of a source
    # much smaller than the largest angular scale recovers its flux density)
    true = compact_result.flux_density()[0].to_value(u.Jy)
    assert sm.flux_density()[0].to_value(u.Jy) == pytest.approx(true, rel=0.03)
    r, c = np.unravel_index(np.argmax(sm.data[0].value), sm.shape[1:])
    centre = (sm.shape[1] - 1) / 2
    off_arcsec = np.array([c - centre, r - centre]) * sm.pixel_scale.to_value(u.arcsec)
    np.testing.assert_allclose(off_arcsec, COMPACT_XY, atol=sm.pixel_scale.to_value(u.arcsec))
    # the pixel area is the synthesized grid's: Jy/beam -> Jy uses the clean beam over that pixel
    assert sm.beam_area_pixels[0] == pytest.approx(sm.beam.sr.to_value(u.sr) / pix**2, rel=1e-9)


def test_default_hour_angle_step_does_not_alias(compact_result):
    # Samples spaced du along a track repeat the sky every 1 / du (sampling theorem applied along
    # the track: TMS 2017, ch. 5, from memory; common practice). The default keeps du < 1 / field
    # for every baseline, so the repeat lies outside the image.
    with warnings.catch_warnings():
        warnings.simplefilter("error", SynthesisWarning)
        sm = synthesize(compact_result, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA)
    nb = len(sm.baselines)
    nh = sm.hour_angles.size
    half = sm.uvw.shape[0] // 2
    uu = sm.u[0][:half].reshape(nh, nb)
    vv = sm.v[0][:half].reshape(nh, nb)
    step = np.hypot(np.diff(uu, axis=0), np.diff(vv, axis=0)).max()
    field = sm.shape[-1] * sm.pixel_scale.to_value(u.rad)
    assert step * field < 1.0
    # and the samples are evenly spaced over the whole range, ends included
    ha = sm.hour_angles.to_value(u.hourangle)
    assert ha[0] == pytest.approx(-4) and ha[-1] == pytest.approx(4)
    np.testing.assert_allclose(np.diff(ha), ha[1] - ha[0], rtol=1e-9)


def test_primary_beam_bounds_the_field_and_large_images_are_refused():
    # with dishes, the field is the primary beam's half-power width at the longest wavelength when
    # that is smaller than the model: FWHM = 1.13 lambda / D (the Gaussian default, common practice)
    res = _point_result(32, 32, 1.0, npix=64)
    d = 300.0  # invented large dishes: a beam narrower than the model
    sm = synthesize(
        res, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP, dish_diameter=d * u.m
    )
    hpbw = 1.13 * LAM_M / d
    assert hpbw < 64 * PIX.to_value(u.rad)
    assert sm.shape[-1] == max(32, math.ceil(hpbw / sm.pixel_scale.to_value(u.rad) - 1e-9))
    assert sm.primary_beam.shape == sm.shape
    # a grid of more than 1024 pixels on a side is an InputError before any transform
    with pytest.raises(InputError, match="image_size: the synthesized image would be"):
        synthesize(
            res, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP, pixel_scale=0.01 * u.arcsec
        )
    with pytest.raises(InputError, match="image_size: expected an integer"):
        synthesize(res, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP, image_size=4)
    with pytest.raises(InputError, match="pixel_scale: expected one angle"):
        synthesize(res, antennas=ANTENNAS, latitude=LAT, hour_angle_range=HA, hour_angle_step=STEP, pixel_scale=2)
