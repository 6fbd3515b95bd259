"""Beam convolution, noise and SkyMap against analytic Gaussians, scipy and astropy."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
import radio_beam
from scipy import signal
from scipy.special import erf

import rtrace
from rtrace import demo
from rtrace.errors import InputError
from rtrace.observe import SkyMap, observe
from rtrace.observe import skymap as skymap_module
from rtrace.observe.beam import BeamKernel
from rtrace.physics.planck import planck_cgs
from rtrace.transfer.result import Result

PIX = 1.0 * u.arcsec  # pixel scale of the synthetic Results
DIST = 1.0 * u.kpc
JYB = u.Jy / u.beam
FWHM_PER_SIGMA = np.sqrt(8 * np.log(2))  # Gaussian FWHM = sqrt(8 ln 2) sigma (standard identity)


def make_result(intensity, nu_hz, background=None):
    """A Result from an intensity array (nfreq, ny, nx) in cgs, 1 arcsec pixels at 1 kpc."""
    intensity = np.asarray(intensity, float)
    nf, ny, nx = intensity.shape
    view = rtrace.View(npix=(ny, nx), distance=DIST)
    pix_cm = PIX.to_value(u.rad) * DIST.to_value(u.cm)
    return Result(
        intensity,
        np.zeros_like(intensity),
        np.zeros((ny, nx)),
        np.asarray(nu_hz, float),
        view,
        pix_cm,
        np.zeros(3),
        {"source": "test"},
        background=background,
    )


def point_source(shape, row, col, flux_jy, nu_hz=(1e9,)):
    """One bright pixel of the given flux (Jy) at every frequency."""
    img = np.zeros((len(nu_hz),) + shape)
    pix_sr = PIX.to_value(u.rad) ** 2
    img[:, row, col] = flux_jy * 1e-23 / pix_sr  # 1 Jy = 1e-23 erg s-1 cm-2 Hz-1 (definition)
    return make_result(img, nu_hz)


def beam(major_pix, minor_pix=None, pa_deg=0.0):
    minor_pix = major_pix if minor_pix is None else minor_pix
    return radio_beam.Beam(major=major_pix * PIX, minor=minor_pix * PIX, pa=pa_deg * u.deg)


# -- the kernel ----------------------------------------------------------------------------------


def test_beam_area_in_pixels():
    # Gaussian beam solid angle pi bmaj bmin / (4 ln 2), Condon & Ransom 2016 (from memory)
    k = BeamKernel(beam(6.0, 3.0, 20.0), PIX, (32, 32))
    assert k.area_pixels == pytest.approx(np.pi * 6.0 * 3.0 / (4 * np.log(2)), rel=1e-12)
    assert k.kernel.sum() == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize("pa", [0.0, 30.0, 90.0, 135.0])
def test_kernel_second_moments(pa):
    # Covariance of a rotated Gaussian: R diag(s_maj^2, s_min^2) R^T (standard), with the major
    # axis along (column, row) = (-sin pa, cos pa): pa from north (+row) through east (-column),
    # the position-angle convention of radio astronomy (common practice).
    k = BeamKernel(beam(8.0, 4.0, pa), PIX, (16, 16))
    h = k.half
    r, c = np.mgrid[-h : h + 1, -h : h + 1]
    w = k.kernel
    smaj, smin = 8.0 / FWHM_PER_SIGMA, 4.0 / FWHM_PER_SIGMA
    t = np.radians(pa)
    expect_rr = smaj**2 * np.cos(t) ** 2 + smin**2 * np.sin(t) ** 2
    expect_cc = smaj**2 * np.sin(t) ** 2 + smin**2 * np.cos(t) ** 2
    expect_rc = -(smaj**2 - smin**2) * np.sin(t) * np.cos(t)
    assert np.sum(w * r * r) == pytest.approx(expect_rr, rel=1e-3)
    assert np.sum(w * c * c) == pytest.approx(expect_cc, rel=1e-3)
    assert np.sum(w * r * c) == pytest.approx(expect_rc, rel=1e-3, abs=1e-6)


def test_small_beam_is_integrated_over_pixels():
    # Integral of a Gaussian over a pixel: (erf((i+1/2)/(sqrt2 s)) - erf((i-1/2)/(sqrt2 s)))/2
    # per axis (A&S 7.1.1 definition of erf); pa = 0 makes the beam separable in (row, column).
    for major in (0.3, 1.2, 2.0):
        k = BeamKernel(beam(major, 0.7 * major, 0.0), PIX, (8, 8))
        assert k.supersample > 1
        i = np.arange(-k.half, k.half + 1)

        def cell(s, i=i):
            return 0.5 * (erf((i + 0.5) / (np.sqrt(2) * s)) - erf((i - 0.5) / (np.sqrt(2) * s)))

        ref = np.outer(cell(major / FWHM_PER_SIGMA), cell(0.7 * major / FWHM_PER_SIGMA))
        ref /= ref.sum()
        assert np.max(np.abs(k.kernel - ref)) < 5e-3 * ref.max()


def test_convolution_matches_scipy_and_does_not_wrap(rng):
    # Zero-padded linear convolution: compare to scipy.signal.convolve2d(mode="same") (reference
    # library), with sources on the edges where any wrap-around would show.
    img = np.zeros((40, 50))
    img[0, 0], img[39, 49], img[0, 49], img[20, 25] = 3.0, 5.0, 7.0, 1.0
    img += rng.random(img.shape) * 0.1
    for b in (beam(5.0, 2.5, 37.0), beam(60.0, 30.0, 120.0)):  # kernel smaller / larger than the image
        k = BeamKernel(b, PIX, img.shape)
        ref = signal.convolve2d(img, k.kernel, mode="same")
        assert np.allclose(k.convolve(img), ref, rtol=0, atol=1e-12 * img.sum())


# -- flux ----------------------------------------------------------------------------------------


def test_point_source_peak_equals_flux():
    # A point source seen through a beam peaks at its flux density in Jy/beam (definition of the
    # unit Jy/beam, Condon & Ransom 2016, from memory); beams >= 2 pixels FWHM are point-sampled.
    res = point_source((64, 64), 30, 33, 2.5, nu_hz=(1e9, 5e9))
    for b in (beam(5.0, 5.0), beam(9.0, 4.0, 62.0)):
        sky = observe(res, b)
        assert sky.model.unit == JYB
        peak = sky.model.to_value(JYB)[:, 30, 33]
        assert np.allclose(peak, 2.5, rtol=5e-3)
        assert np.unravel_index(np.argmax(sky.model[0].value), (64, 64)) == (30, 33)


@pytest.mark.parametrize("major", [0.4, 3.0, 8.0])
def test_flux_conserved(major):
    # Total flux of a source well inside the field is unchanged by a unit-sum kernel (common practice).
    ny, nx = 80, 90
    r, c = np.mgrid[:ny, :nx]
    img = np.exp(-((r - 38.0) ** 2 / 30.0 + (c - 47.0) ** 2 / 60.0))[None] * np.array([1e-15, 3e-16])[:, None, None]
    res = make_result(img, [1e9, 4e9])
    sky = observe(res, beam(major, 0.6 * major, 25.0))
    assert np.allclose(sky.flux_density().to_value(u.Jy), res.flux_density().to_value(u.Jy), rtol=5e-3)
    assert np.allclose(sky.to_jy_per_pixel().sum(axis=(1, 2)).value, sky.flux_density().value, rtol=1e-12)


def test_flux_conserved_on_traced_demo():
    # The same on a real trace, with the beam shrinking with frequency (both subsampled and resolved).
    res = rtrace.trace(demo.scenario(24), rtrace.View(npix=48, distance=2 * u.kpc), [1, 10] * u.GHz)
    b = radio_beam.Beam(major=4 * res.pixel_scale, minor=3 * res.pixel_scale, pa=10 * u.deg)
    sky = observe(res, b, beam_scaling="inverse-frequency")
    assert sky.beams[1].major.to_value(u.arcsec) == pytest.approx(0.4 * res.pixel_scale.to_value(u.arcsec))
    assert np.allclose(sky.flux_density().to_value(u.Jy), res.flux_density().to_value(u.Jy), rtol=5e-3)


@pytest.mark.parametrize(
    "pa, bright, faint",
    [
        (0.0, (4, 0), (0, 4)),  # pa 0: along north = +row
        (90.0, (0, -4), (4, 0)),  # pa 90: along east = -column
        (45.0, (3, -3), (3, 3)),  # pa 45: along north-east (+row, -column), not north-west
        (-45.0, (3, 3), (3, -3)),  # pa -45: along north-west (+row, +column)
    ],
)
def test_position_angle_east_of_north(pa, bright, faint):
    # Position angle from north through east (common practice); on rtrace images row grows
    # north and column grows west, so east is decreasing column.
    res = point_source((41, 41), 20, 20, 1.0)
    m = observe(res, beam(8.0, 2.0, pa)).model.value[0]
    assert m[20 + bright[0], 20 + bright[1]] > 5 * m[20 + faint[0], 20 + faint[1]]


def test_background_is_removed_before_convolving():
    # A differential measurement sees no uniform background (same convention as Result.flux_density).
    nu = np.array([1e9])
    bg = planck_cgs(nu, np.array([2.7255]))
    res = point_source((32, 32), 16, 16, 0.7)
    res2 = make_result(res.intensity.value + bg[:, None, None], nu, background=bg)
    sky = observe(res2, beam(4.0))
    assert sky.flux_density(noiseless=True).to_value(u.Jy) == pytest.approx([0.7], rel=5e-3)
    kept = observe(res2, beam(4.0), background="included")
    # included, it adds I_bg Omega_beam to every pixel (a uniform sky through a normalised beam), edges too
    extra = (kept.model - sky.model).to_value(JYB)[0]
    np.testing.assert_allclose(extra, bg[0] * kept.beams[0].sr.to_value(u.sr) / 1e-23, rtol=1e-9)


# -- noise ---------------------------------------------------------------------------------------


def blank(shape=(384, 384), nu_hz=(1e9, 2e9)):
    return make_result(np.zeros((len(nu_hz),) + shape), nu_hz)


def test_noise_rms_and_correlation():
    # Expected variance of white noise convolved with kernel k is sigma^2 sum k^2 (standard), so the
    # requested rms is met in expectation; the autocorrelation of a Gaussian beam of sigma s is a
    # Gaussian of variance 2 s^2 (standard), giving exp(-1 / (4 s^2)) at a lag of one pixel.
    rms = [30e-6, 80e-6] * JYB
    sky = observe(blank(), beam(4.0), noise=rms, seed=11)
    noise = (sky.data - sky.model).to_value(JYB)
    measured = np.sqrt(np.mean(noise**2, axis=(1, 2)))
    assert np.allclose(measured, rms.value, rtol=0.03)
    assert np.allclose(sky.noise_rms.to_value(JYB), rms.value)
    s = 4.0 / FWHM_PER_SIGMA
    n = noise[0] / measured[0]
    lag_row = np.mean(n[1:, :] * n[:-1, :])
    lag_col = np.mean(n[:, 1:] * n[:, :-1])
    assert lag_row == pytest.approx(np.exp(-1 / (4 * s**2)), abs=0.03)
    assert lag_col == pytest.approx(np.exp(-1 / (4 * s**2)), abs=0.03)
    # bands are independent
    assert abs(np.mean(noise[0] * noise[1]) / (measured[0] * measured[1])) < 0.05
    # the edges are as noisy as the centre (noise drawn on the padded grid)
    edge = np.concatenate([noise[0, :8].ravel(), noise[0, -8:].ravel()])
    assert np.sqrt(np.mean(edge**2)) == pytest.approx(rms.value[0], rel=0.1)


def test_noise_reproducible_with_seed():
    res = blank((64, 64))
    a = observe(res, beam(3.0), noise=1e-4 * JYB, seed=5)
    b = observe(res, beam(3.0), noise=1e-4 * JYB, seed=5)
    c = observe(res, beam(3.0), noise=1e-4 * JYB, seed=6)
    assert np.array_equal(a.data.value, b.data.value)
    assert not np.allclose(a.data.value, c.data.value)
    # without a seed one is drawn and recorded, and it reproduces the map
    d = observe(res, beam(3.0), noise=1e-4 * JYB)
    assert isinstance(d.seed, int) and f"seed={d.seed}" in d.provenance["noise"]
    assert np.array_equal(observe(res, beam(3.0), noise=1e-4 * JYB, seed=d.seed).data.value, d.data.value)


def test_snr_mask():
    res = point_source((48, 48), 24, 24, 1e-3)
    sky = observe(res, beam(4.0), noise=1e-4 * JYB, seed=1)
    mask = sky.snr_mask(5.0)
    assert np.array_equal(mask, sky.model.to_value(JYB) / 1e-4 >= 5.0)
    assert mask[0, 24, 24] and not mask[0, 0, 0]
    assert observe(res, beam(4.0)).snr_mask().all()


# -- brightness temperature ----------------------------------------------------------------------


def test_rayleigh_jeans_temperature_matches_astropy():
    # astropy's brightness_temperature(nu, beam_area) equivalency (reference library), and
    # T_b = c^2 S / (2 k nu^2 Omega_beam), Rybicki & Lightman 1979 eq. 1.60 with I = S / Omega.
    res = point_source((40, 40), 20, 20, 0.01, nu_hz=(1e9, 8e9))
    sky = observe(res, beam(6.0, 3.0, 40.0), beam_scaling="inverse-frequency", reference_frequency=2 * u.GHz)
    tb = sky.brightness_temperature("rayleigh-jeans")
    for i, nu in enumerate(sky.frequencies):
        ref = sky.data[i].to(u.K, u.brightness_temperature(nu, beam_area=sky.beams[i].sr))
        assert np.allclose(tb[i].value, ref.value, rtol=1e-10)
        omega = np.pi * sky.beams[i].major * sky.beams[i].minor / (4 * np.log(2))
        formula = (const.c**2 * sky.data[i] * u.beam / (2 * const.k_B * nu**2 * omega)).to(
            u.K, u.dimensionless_angles()
        )
        assert np.allclose(tb[i].value, formula.value, rtol=1e-6)


def test_emission_at_the_image_edge_is_reported():
    # A field-filling image loses flux to the beam convolution at its edges (common practice: a
    # convolution cannot keep flux it spreads beyond the image); a compact source far from the edges
    # says nothing.
    nu = np.array([1e9])
    with pytest.warns(UserWarning, match=r"observe: emission reaches the image edge \(6\.6% of the flux"):
        observe(make_result(np.ones((1, 60, 60)), nu), beam(3.0))
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        observe(point_source((60, 60), 30, 30, 1.0), beam(3.0))


def test_planck_temperature_of_a_blackbody_field():
    # A field at B_nu(T) everywhere: the mean intensity in any beam away from the edges is B_nu(T),
    # and its Planck inversion gives T back (Rybicki & Lightman 1979 eq. 1.51).
    nu = np.array([1e9, 300e9])
    temp = 8000.0
    img = np.broadcast_to(planck_cgs(nu, np.full(2, temp))[:, None, None], (2, 60, 60))
    with pytest.warns(UserWarning, match="emission reaches the image edge"):  # field-filling on purpose
        sky = observe(make_result(img, nu), beam(4.0, 3.0, 15.0))
    centre = sky.brightness_temperature("planck")[:, 30, 30].to_value(u.K)
    assert np.allclose(centre, temp, rtol=1e-9)
    rj = sky.brightness_temperature("rayleigh-jeans")[:, 30, 30].to_value(u.K)
    expect_rj = (
        const.c**2 * img[:, 0, 0] * u.erg / u.s / u.cm**2 / u.Hz / (2 * const.k_B * (nu * u.Hz) ** 2)
    ).to_value(u.K)
    assert np.allclose(rj, expect_rj, rtol=1e-9)


# -- the SkyMap as a whole -----------------------------------------------------------------------


def test_skymap_attributes_and_provenance():
    res = point_source((32, 32), 16, 16, 1.0, nu_hz=(1e9, 2e9, 4e9))
    b = beam(4.0, 2.0, 10.0)
    sky = observe(res, b, noise=[1, 2, 3] * u.mJy / u.beam, seed=2, beam_scaling="inverse-frequency")
    assert isinstance(sky, SkyMap)
    assert sky.data.shape == sky.model.shape == (3, 32, 32)
    assert sky.beam is b and len(sky.beams) == 3
    # FWHM proportional to 1 / nu from the first frequency (diffraction limit, common practice)
    assert [bb.major.to_value(u.arcsec) for bb in sky.beams] == pytest.approx([4.0, 2.0, 1.0])
    assert all(bb.pa == b.pa for bb in sky.beams)
    assert sky.reference_frequency.to_value(u.Hz) == 1e9
    assert np.allclose(sky.noise_rms.to_value(JYB), [1e-3, 2e-3, 3e-3])
    assert sky.pixel_scale.to_value(u.arcsec) == pytest.approx(1.0)
    assert sky.pixel_size.unit == u.cm and sky.distance == res.view.distance
    assert sky.sky_position == res.sky_position and sky.result is res
    assert sky.frequencies.unit == u.Hz
    assert sky.provenance["source"] == "test"
    assert "major=4 arcsec" in sky.provenance["beam"] and "1/nu" in sky.provenance["beam"]
    assert "seed=2" in sky.provenance["noise"]
    assert observe(res, b).provenance["noise"] == "none"
    assert observe(res, b).noise_rms is None


def test_one_kernel_per_distinct_beam(monkeypatch):
    built = []

    class Counting(BeamKernel):
        def __init__(self, *a, **k):
            built.append(a[0])
            super().__init__(*a, **k)

    monkeypatch.setattr(skymap_module, "BeamKernel", Counting)
    res = point_source((16, 16), 8, 8, 1.0, nu_hz=(1e9, 2e9, 3e9, 2e9))
    observe(res, beam(3.0))
    assert len(built) == 1
    built.clear()
    observe(res, beam(3.0), beam_scaling="inverse-frequency")
    assert len(built) == 3  # 2 GHz appears twice and shares its kernel


@pytest.mark.parametrize(
    "kwargs, name",
    [
        ({"beam": 3 * u.arcsec}, "beam"),
        ({"beam": radio_beam.Beam(major=-1 * u.arcsec, minor=-1 * u.arcsec)}, "beam"),
        ({"noise": -1 * JYB}, "noise"),
        ({"noise": [1, 2, 3] * JYB}, "noise"),
        ({"noise": 1e-3}, "noise"),
        ({"noise": 1e-3 * u.K}, "noise"),
        ({"beam_scaling": "linear"}, "beam_scaling"),
        ({"reference_frequency": 1 * u.GHz}, "reference_frequency"),
        ({"beam_scaling": "inverse-frequency", "reference_frequency": -1 * u.GHz}, "reference_frequency"),
        ({"noise": 1e-3 * JYB, "seed": 1.5}, "seed"),
    ],
)
def test_bad_input_names_the_parameter(kwargs, name):
    res = point_source((16, 16), 8, 8, 1.0, nu_hz=(1e9, 2e9))
    kw = {"beam": beam(3.0), **kwargs}
    with pytest.raises(InputError, match=name):
        observe(res, **kw)


def test_bad_method_arguments():
    sky = observe(point_source((16, 16), 8, 8, 1.0), beam(3.0))
    with pytest.raises(InputError, match="kind"):
        sky.brightness_temperature("wien")
    with pytest.raises(InputError, match="threshold"):
        sky.snr_mask("high")
    with pytest.raises(InputError, match="result"):
        observe(np.zeros((1, 4, 4)), beam(3.0))
