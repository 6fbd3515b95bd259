"""SEDs, spectral indices and the tau = 1 frequency against analytic free-free spectra."""

import csv
import math
import types

import astropy.units as u
import numpy as np
import pytest
import regions
from astropy.table import Table
from conftest import uniform_snapshot
from radio_beam import Beam
from scipy.optimize import brentq

import rtrace
from rtrace import demo
from rtrace.analysis import (
    SED_COLUMNS,
    aperture_mask,
    sed,
    sed_metadata,
    sed_table,
    spectral_index,
    spectral_index_map,
    tau_unity_frequency,
    write_sed_table,
)
from rtrace.errors import InputError, PhysicsRangeWarning
from rtrace.physics import absorption_coefficient, planck

T_SLAB = 8000.0  # K
NE_SLAB = 2000.0  # cm-3
CELL_PC = 0.01
N_ALONG = 40  # cells along the line of sight
L_SLAB = N_ALONG * CELL_PC * u.pc


@pytest.fixture(scope="module")
def tiny():
    return rtrace.trace(demo.scenario(32), rtrace.View(npix=48, distance=2 * u.kpc), [0.3, 1, 3, 10, 30] * u.GHz)


def trace_slab(freqs, ne=NE_SLAB):
    snap = uniform_snapshot((4, 4, N_ALONG), T_SLAB, ne, cell_pc=CELL_PC)
    view = rtrace.View(npix=4, width=4 * CELL_PC * u.pc, distance=1 * u.kpc)
    return rtrace.trace(snap, view, freqs)


def slab_tau(nu_hz, ne=NE_SLAB, length=L_SLAB):
    # tau = alpha_nu L for a uniform slab (Rybicki & Lightman 1979, eq. 1.30 setting)
    return float((absorption_coefficient(nu_hz * u.Hz, T_SLAB * u.K, ne * u.cm**-3) * length).decompose())


def slab_intensity(nu_hz, ne=NE_SLAB):
    # I = B_nu(T) (1 - e^-tau) (Rybicki & Lightman 1979, eq. 1.30)
    return float(planck(nu_hz * u.Hz, T_SLAB * u.K).value) * -math.expm1(-slab_tau(nu_hz, ne))


# --- SED -------------------------------------------------------------------------------------


def test_sed_of_whole_image_equals_flux_density(tiny):
    nu, flux = sed(tiny)
    assert nu.unit == u.Hz and flux.unit == u.Jy
    assert np.allclose(nu.value, tiny.frequencies.to_value(u.Hz), rtol=0)
    assert np.allclose(flux.value, tiny.flux_density().to_value(u.Jy), rtol=1e-12, atol=0)


def test_circle_aperture_counts_pixel_centres_inside(tiny):
    # Pixel (row, col) centred at (col, row); a brute-force loop is the reference.
    col0, row0, radius = 20.3, 25.7, 9.5
    per_pixel = tiny.intensity.value * tiny.pixel_solid_angle.to_value(u.sr) * 1e23  # Jy (1 Jy = 1e-23 cgs)
    expected = np.zeros(len(tiny.frequencies))
    count = 0
    for row in range(48):
        for col in range(48):
            if (col - col0) ** 2 + (row - row0) ** 2 <= radius**2:
                expected += per_pixel[:, row, col]
                count += 1
    _, flux = sed(tiny, (col0, row0, radius))
    assert np.allclose(flux.value, expected, rtol=1e-12)
    assert aperture_mask((48, 48), (col0, row0, radius)).sum() == count
    # radius 1 around a pixel centre takes it and its four neighbours (hand count)
    assert aperture_mask((48, 48), (2, 3, 1.0)).sum() == 5


def test_mask_aperture_and_its_complement_add_up(tiny):
    rows, cols = np.mgrid[0:48, 0:48]
    mask = cols < 20
    _, inside = sed(tiny, mask)
    _, outside = sed(tiny, ~mask)
    _, whole = sed(tiny)
    assert np.allclose(inside.value + outside.value, whole.value, rtol=1e-12)
    assert np.all(inside.value > 0) and np.all(outside.value > 0)
    # a list of lists works like the array
    _, listed = sed(tiny, mask.tolist())
    assert np.array_equal(listed.value, inside.value)


def _centres_within(shape, col0, row0, radius):
    """Pixels whose centres lie within ``radius`` of ``(col0, row0)``, edge included (the definition)."""
    rows, cols = np.mgrid[0 : shape[0], 0 : shape[1]]
    return (cols - col0) ** 2 + (rows - row0) ** 2 <= radius**2


def test_regions_apertures_select_the_same_pixels_as_the_circle_tuple(tiny):
    # regions (Astropy Regions package) gives the masks; the sums must be those of the written-out rule
    rng = np.random.default_rng(7)
    per_pixel = tiny.intensity.value * tiny.pixel_solid_angle.to_value(u.sr) * 1e23  # Jy (1 Jy = 1e-23 cgs)
    circles = [(24, 24, 12), (2, 3, 1.0), (0, 0, 5), (47, 10, 3), (23.5, 23.5, 2.0), (10, 40, 0.5)]
    circles += [tuple(rng.uniform(-3, 50, 2)) + (float(rng.uniform(0.3, 30)),) for _ in range(40)]
    circles += [(float(c), float(r), float(rad)) for c, r, rad in rng.integers(0, 48, (20, 3)) + (0, 0, 1)]
    for col0, row0, radius in circles:
        expected = _centres_within((48, 48), col0, row0, radius)
        if not expected.any():
            continue
        region = regions.CirclePixelRegion(regions.PixCoord(col0, row0), radius)
        assert np.array_equal(aperture_mask((48, 48), (col0, row0, radius)), expected), (col0, row0, radius)
        assert np.array_equal(aperture_mask((48, 48), region), expected), (col0, row0, radius)
        want = per_pixel[:, expected].sum(axis=1)
        for aperture in ((col0, row0, radius), region):
            _, flux = sed(tiny, aperture)
            np.testing.assert_allclose(flux.value, want, rtol=1e-12, atol=0)


def test_sky_region_aperture_is_placed_with_the_image_wcs(tiny):
    from rtrace.io.fits import sky_wcs

    wcs = sky_wcs((48, 48), tiny.pixel_scale, tiny.sky_position)
    pix = tiny.pixel_scale.to_value(u.arcsec)
    circle = regions.CircleSkyRegion(tiny.sky_position, 9.3 * pix * u.arcsec)
    # the image centre is pixel (23.5, 23.5); the radius in pixels is the angle over the pixel scale
    expected = _centres_within((48, 48), 23.5, 23.5, 9.3)
    assert np.array_equal(aperture_mask((48, 48), circle, wcs), expected)
    _, flux = sed(tiny, circle)
    _, by_pixels = sed(tiny, (23.5, 23.5, 9.3))
    np.testing.assert_allclose(flux.value, by_pixels.value, rtol=1e-12, atol=0)
    assert "circle centre RA" in sed_metadata(tiny, circle)["aperture"]
    with pytest.raises(InputError, match="sky region .* needs the image's WCS"):
        aperture_mask((48, 48), circle)
    box = regions.RectanglePixelRegion(regions.PixCoord(10, 20), width=5, height=3)
    assert aperture_mask((48, 48), box).sum() == 15  # 5 x 3 pixel centres


@pytest.mark.parametrize(
    "aperture, words",
    [
        (np.ones((47, 48), bool), "shape"),
        (np.ones((48, 48), int), "boolean"),
        (np.zeros((48, 48), bool), "selects none"),
        ((10, 10, 0), "radius"),
        ((10, 10, -2), "radius"),
        ((500, 500, 3), "selects none"),
        ((10, 10), "three"),
        ((10, np.nan, 3), "three"),
        ("centre", "aperture"),
    ],
)
def test_bad_apertures_raise(tiny, aperture, words):
    with pytest.raises(InputError, match="aperture") as info:
        sed(tiny, aperture)
    assert words in str(info.value)


def skymap_standin(res, beams, noise=None, model=None):
    """A SkyMap look-alike: the Result's intensity times each beam's solid angle, in Jy/beam, unconvolved."""
    jy_per_sr = res.intensity.value * 1e23  # 1 Jy = 1e-23 erg s-1 cm-2 Hz-1 (definition)
    data = np.stack([jy_per_sr[i] * b.sr.to_value(u.sr) for i, b in enumerate(beams)]) * u.Jy / u.beam
    return types.SimpleNamespace(
        data=data,
        model=data if model is None else model,
        beam=beams[0],
        beams=beams,
        frequencies=res.frequencies,
        pixel_scale=res.pixel_scale,
        pixel_size=res.pixel_size,
        distance=res.view.distance,
        noise_rms=noise,
        result=res,
    )


def test_skymap_sed_converts_with_the_beam_area(tiny):
    beams = [Beam(major=(20 / f) * u.arcsec, minor=(12 / f) * u.arcsec, pa=30 * u.deg) for f in (0.3, 1, 3, 10, 30)]
    # The Gaussian beam solid angle pi theta_maj theta_min / (4 ln 2) (Condon & Ransom 2016, from memory)
    omega = math.pi * (20 * u.arcsec) * (12 * u.arcsec) / (4 * math.log(2))
    assert math.isclose(beams[1].sr.to_value(u.sr), omega.to_value(u.sr), rel_tol=1e-10)
    sky = skymap_standin(tiny, beams)
    _, flux = sed(sky)
    assert np.allclose(flux.value, tiny.flux_density().to_value(u.Jy), rtol=1e-10)
    _, part = sed(sky, (24, 24, 10))
    _, part_res = sed(tiny, (24, 24, 10))
    assert np.allclose(part.value, part_res.value, rtol=1e-10)


def test_sed_of_an_observed_skymap_matches_its_flux_density(tiny):
    from rtrace.observe import observe

    sky = observe(tiny, Beam(major=15 * u.arcsec, minor=10 * u.arcsec, pa=20 * u.deg), noise=1 * u.mJy / u.beam, seed=3)
    _, flux = sed(sky)
    assert np.allclose(flux.to_value(u.Jy), sky.flux_density().to_value(u.Jy), rtol=1e-10)


# --- spectral indices --------------------------------------------------------------------------


def test_spectral_index_of_a_power_law():
    nu = [1, 2, 8, 10] * u.GHz
    flux = 3.0 * (nu / u.GHz).value ** 1.3 * u.mJy
    assert np.allclose(spectral_index(nu, flux), 1.3, rtol=1e-12)
    # the same spectrum given in wavelength (c / nu) has the same index
    assert np.allclose(spectral_index(nu.to(u.cm, equivalencies=u.spectral()), flux), 1.3, rtol=1e-10)
    with_zero = spectral_index([1, 2, 4] * u.GHz, [1.0, 0.0, 2.0] * u.Jy)
    assert np.all(np.isnan(with_zero))
    with pytest.raises(InputError, match="flux"):
        spectral_index([1, 2] * u.GHz, [1, 2, 3] * u.Jy)
    with pytest.raises(InputError, match="frequencies"):
        spectral_index([1, 2] * u.kg, [1, 2] * u.Jy)


def test_uniform_slab_thick_and_thin_indices():
    freqs = np.array([0.01, 0.0105, 20.0, 30.0]) * 1e9
    res = trace_slab(freqs * u.Hz)
    assert res.tau[0].min() > 100 and res.tau[-1].max() < 1e-2  # really thick / really thin
    alpha = spectral_index(*sed(res))
    # Rayleigh-Jeans thick limit S ~ nu^2 (Rybicki & Lightman 1979, eq. 1.54)
    assert abs(alpha[0] - 2.0) < 1e-3
    # thin free-free alpha ~ -0.1 (Condon & Ransom 2016, from memory): the Gaunt factor's slow fall
    assert -0.2 < alpha[2] < -0.05
    # and exactly the index of B_nu(T)(1 - e^-tau) with tau from the absorption coefficient
    exact = [
        math.log(slab_intensity(b) / slab_intensity(a)) / math.log(b / a)
        for a, b in zip(freqs[:-1], freqs[1:], strict=True)
    ]
    assert np.allclose(alpha, exact, rtol=1e-6, atol=1e-8)


def test_spectral_index_map_of_a_slab_matches_the_sed_index():
    res = trace_slab([0.5, 1, 3] * u.GHz)
    amap = spectral_index_map(res, 1 * u.GHz, 3 * u.GHz)
    expected = spectral_index(*sed(res))[1]
    assert amap.shape == (4, 4)
    assert np.allclose(amap, expected, rtol=1e-10)
    # planes found within 1 % of the request, or by index
    assert np.array_equal(spectral_index_map(res, 1.005 * u.GHz, 2.98 * u.GHz), amap)
    assert np.array_equal(spectral_index_map(res, 1, 2), amap)
    for nu1, nu2, name in (
        (1.02 * u.GHz, 3 * u.GHz, "nu1"),
        (1 * u.GHz, 5 * u.GHz, "nu2"),
        (1 * u.GHz, 1 * u.GHz, "nu2"),
        (1 * u.kg, 3 * u.GHz, "nu1"),
        (0, 7, "nu2"),
    ):
        with pytest.raises(InputError, match=name):
            spectral_index_map(res, nu1, nu2)


def test_spectral_index_map_is_nan_where_there_is_no_emission(tiny):
    amap = spectral_index_map(tiny, 10 * u.GHz, 30 * u.GHz, peak_fraction=0)
    i = tiny.intensity.value
    empty = (i[3] <= 0) | (i[4] <= 0)
    assert empty.any() and (~empty).any()
    assert np.array_equal(np.isnan(amap), empty)
    # by default also blank below 1e-3 of either plane's peak
    faint = empty | (i[3] < 1e-3 * i[3].max()) | (i[4] < 1e-3 * i[4].max())
    assert np.array_equal(np.isnan(spectral_index_map(tiny, 10 * u.GHz, 30 * u.GHz)), faint)
    # by hand on the emitting pixels: alpha = ln(I2/I1) / ln(nu2/nu1)
    assert np.allclose(amap[~empty], np.log(i[4][~empty] / i[3][~empty]) / math.log(3.0), rtol=1e-12)


def test_spectral_index_map_snr_cut_uses_model_over_noise(tiny):
    beams = [Beam(major=10 * u.arcsec, minor=10 * u.arcsec, pa=0 * u.deg)] * 5
    clean = skymap_standin(tiny, beams)
    noise = np.array([1e-3, 5e-3, 5e-3, 5e-3, 2e-2]) * u.Jy / u.beam
    sky = skymap_standin(tiny, beams, noise=noise, model=clean.data)
    amap = spectral_index_map(sky, 1, 4, snr_threshold=3)
    model = clean.data.value
    low = (model[1] < 3 * noise[1].value) | (model[4] < 3 * noise[4].value) | (model[1] <= 0) | (model[4] <= 0)
    assert low.any() and (~low).any()
    assert np.array_equal(np.isnan(amap), low)
    with pytest.raises(InputError, match="snr_threshold"):
        spectral_index_map(tiny, 1, 4, snr_threshold=3)  # a Result has no noise


# --- tau = 1 -----------------------------------------------------------------------------------

FINE = np.geomspace(0.1e9, 10e9, 41)  # 5 % steps in frequency


def unity_frequency(ne):
    """Frequency where alpha_nu L = 1, found independently by root finding in ln nu."""
    return math.exp(brentq(lambda x: math.log(slab_tau(math.exp(x), ne)), math.log(1e7), math.log(1e12), xtol=1e-12))


def test_tau_unity_frequency_of_a_uniform_slab():
    res = trace_slab(FINE * u.Hz)
    per_pixel, whole = tau_unity_frequency(res)
    nu1 = unity_frequency(NE_SLAB)
    assert 0.2e9 < nu1 < 5e9  # well inside the traced range
    assert per_pixel.unit == u.Hz and per_pixel.shape == (4, 4)
    assert np.allclose(per_pixel.value, nu1, rtol=0.01)
    # uniform slab: every pixel alike, so the intensity-weighted <tau> is tau itself
    assert math.isclose(whole.to_value(u.Hz), nu1, rel_tol=0.01)


def test_tau_unity_interpolates_in_log_tau_log_nu():
    # tau ~ nu^-2.1 is close to a power law (Mezger & Henderson 1967 form, from memory), so the
    # ln tau - ln nu interpolation stays accurate even with factor-of-3 steps in frequency.
    res = trace_slab([0.1, 0.3, 1, 3, 10] * u.GHz)
    per_pixel, _ = tau_unity_frequency(res)
    assert np.allclose(per_pixel.value, unity_frequency(NE_SLAB), rtol=0.005)


def test_tau_unity_frequency_per_column_and_weighted_whole():
    # Columns of the image (x) carry different densities; the last has no gas at all.
    nx, ny = 6, 2
    ne = np.empty((nx, ny, N_ALONG))
    densities = [3000.0, 3000.0, 900.0, 900.0, 900.0, 0.0]
    for i, d in enumerate(densities):
        ne[i] = d
    snap = rtrace.Snapshot.from_arrays(
        temperature=np.full(ne.shape, T_SLAB) * u.K,
        cell_size=CELL_PC * u.pc,
        electron_density=ne * u.cm**-3,
        dtype=np.float64,
    )
    view = rtrace.View(npix=(ny, nx), width=nx * CELL_PC * u.pc, distance=1 * u.kpc)
    res = rtrace.trace(snap, view, FINE[::-1] * u.Hz)  # descending order must not matter
    per_pixel, whole = tau_unity_frequency(res)
    # column axis is west = north x los = +x, so column i holds density densities[i]
    for i, d in enumerate(densities):
        if d == 0:
            assert np.all(np.isnan(per_pixel.value[:, i]))
        else:
            assert np.allclose(per_pixel.value[:, i], unity_frequency(d), rtol=0.01)

    def mean_tau(nu_hz):
        # <tau> = sum(tau I) / sum(I) over pixels (definition in tau_unity_frequency)
        taus = np.array([slab_tau(nu_hz, d) if d else 0.0 for d in densities])
        intens = np.array([slab_intensity(nu_hz, d) if d else 0.0 for d in densities])
        return (taus * intens).sum() / intens.sum()

    expected = math.exp(brentq(lambda x: math.log(mean_tau(math.exp(x))), math.log(1e8), math.log(1e10)))
    assert math.isclose(whole.to_value(u.Hz), expected, rel_tol=0.01)
    # the weighting matters: the flux-weighted turnover is not the plain pixel average
    assert not math.isclose(expected, np.nanmean(per_pixel.value), rel_tol=0.05)


def test_tau_unity_is_nan_when_never_bracketed():
    thin = trace_slab([20, 30, 40] * u.GHz)
    with pytest.warns(PhysicsRangeWarning, match="everything is optically thin"):
        per_pixel, whole = tau_unity_frequency(thin)
    assert np.all(np.isnan(per_pixel.value)) and np.isnan(whole.value)
    thick = trace_slab([0.01, 0.02] * u.GHz)
    with pytest.warns(PhysicsRangeWarning, match="everything is optically thick"):
        per_pixel, whole = tau_unity_frequency(thick)
    assert np.all(np.isnan(per_pixel.value)) and np.isnan(whole.value)
    with pytest.raises(InputError, match="two frequencies"):
        tau_unity_frequency(trace_slab([1] * u.GHz))
    with pytest.raises(InputError, match="result"):
        tau_unity_frequency(np.ones((3, 4, 4)))


def test_tau_unity_of_the_demo_lies_between_its_thick_and_thin_frequencies(tiny):
    per_pixel, whole = tau_unity_frequency(tiny)
    nu = per_pixel.to_value(u.GHz)
    bracketed = np.isfinite(nu)
    # exactly the pixels with tau >= 1 at 0.3 GHz and < 1 at 30 GHz are bracketed (tau falls with nu)
    assert np.array_equal(bracketed, (tiny.tau[0] >= 1) & (tiny.tau[-1] < 1))
    assert np.all((nu[bracketed] >= 0.3) & (nu[bracketed] <= 30))
    assert 0.3 < whole.to_value(u.GHz) < 30


# --- ECSV table ----------------------------------------------------------------------------------


def test_sed_table_round_trip(tiny, tmp_path):
    nu, flux = sed(tiny, (24, 24, 12))
    meta = sed_metadata(tiny, (24, 24, 12))
    assert meta["source"].startswith("rtrace.demo.scenario") and "circle" in meta["aperture"]
    meta["note"] = "two\nlines"
    path = tmp_path / "sed.ecsv"
    write_sed_table(path, nu, flux, meta)
    # astropy ECSV (astropy proposal APE 6, from memory) carries units, descriptions and meta;
    # Table.read is the reference reader
    table = Table.read(path)
    assert table.colnames == list(SED_COLUMNS)
    assert table["frequency"].unit == u.GHz and table["flux_density"].unit == u.Jy
    assert table["spectral_index"].unit is None and "d ln S / d ln nu" in table["spectral_index"].description
    # float64 written in full: the values come back to the last bit (up to the Hz -> GHz division)
    assert np.allclose(table["frequency"].quantity.to_value(u.Hz), nu.to_value(u.Hz), rtol=1e-15, atol=0)
    assert np.array_equal(table["flux_density"].quantity.to_value(u.Jy), flux.to_value(u.Jy))
    assert np.allclose(table["spectral_index"][:-1], spectral_index(nu, flux), rtol=1e-14)
    assert np.isnan(table["spectral_index"][-1])
    assert table.meta["note"] == "two lines" and table.meta["view"] == meta["view"]  # one line each
    assert table.meta["background"] == meta["background"]
    # below the '#' lines the file is plain CSV: names, then rows (common practice)
    rows = list(csv.reader(line for line in path.read_text().splitlines() if not line.startswith("#")))
    assert rows[0] == list(SED_COLUMNS) and len(rows) == 6 and float(rows[1][1]) == flux[0].to_value(u.Jy)
    # no temporary file is left next to it
    assert [p.name for p in tmp_path.iterdir()] == ["sed.ecsv"]


def test_sed_table_states_background_and_rejects_bad_input(tmp_path):
    table = sed_table([1, 2] * u.GHz, [1, 2] * u.Jy)
    assert table.meta["background"].startswith("not stated")
    path = tmp_path / "bad.ecsv"
    with pytest.raises(InputError, match="flux"):
        write_sed_table(path, [1, 2] * u.GHz, [1, 2] * u.K)
    with pytest.raises(InputError, match="flux"):
        write_sed_table(path, [1, 2] * u.GHz, [1, 2, 3] * u.Jy)
    with pytest.raises(InputError, match="metadata"):
        write_sed_table(path, [1, 2] * u.GHz, [1, 2] * u.Jy, metadata=["source"])
    assert list(tmp_path.iterdir()) == []


# --- spectral indices at one resolution ----------------------------------------------------------

POWER_LAW_ALPHA = -0.7
POWER_NU = [1.0, 2.0, 4.0] * u.GHz


def power_law_result(npix=96, alpha=POWER_LAW_ALPHA):
    """A Result whose every pixel has S ~ nu^alpha: two Gaussian blobs on empty sky, 1 arcsec pixels."""
    from rtrace.transfer.result import Result

    distance = 1 * u.kpc
    pix_cm = (1 * u.arcsec).to_value(u.rad) * distance.to_value(u.cm)
    view = rtrace.View(npix=npix, width=npix * pix_cm * u.cm, distance=distance)
    rows, cols = np.mgrid[0:npix, 0:npix]
    c = (npix - 1) / 2
    shape = np.exp(-((rows - c) ** 2 + (cols - c) ** 2) / (2 * 6.0**2)) + 0.5 * np.exp(
        -((rows - c - 9) ** 2 + (cols - c + 7) ** 2) / (2 * 2.0**2)
    )
    shape[:, :8] = 0.0  # empty sky: a strip with no emission at all
    nu = POWER_NU.to_value(u.Hz)
    intensity = 1e-15 * shape[None] * (nu / nu[0])[:, None, None] ** alpha
    tau = np.zeros_like(intensity)
    return Result(intensity, tau, np.zeros(shape.shape), nu, view, pix_cm, np.zeros(3), {"source": "power law"})


def test_power_law_observed_with_inverse_frequency_beams_recovers_its_index():
    # A source with S ~ nu^alpha in every pixel, observed with Gaussian beams whose FWHM scales as 1/nu
    # (diffraction, common practice). Gaussians convolve into a Gaussian whose covariance is the sum
    # (common practice; any imaging text), so smoothing the sharper map with the deconvolution kernel
    # brings both to the larger beam, where ln(S2/S1)/ln(nu2/nu1) = alpha exactly.
    from rtrace.observe import observe

    res = power_law_result()
    beam = Beam(major=12 * u.arcsec, minor=8 * u.arcsec, pa=30 * u.deg)
    sky = observe(res, beam, beam_scaling="inverse-frequency")
    amap = spectral_index_map(sky, 1 * u.GHz, 4 * u.GHz)
    good = np.isfinite(amap)
    assert good.sum() > 1000
    assert np.nanmax(np.abs(amap - POWER_LAW_ALPHA)) < 0.02
    assert amap.smoothed
    assert math.isclose(amap.beam.major.to_value(u.arcsec), 12.0, rel_tol=1e-9)  # the 1 GHz beam
    assert "peak" in amap.masking
    # the same division at the two native resolutions is wrong by far more (what this fixes)
    raw = spectral_index_map(sky, 1 * u.GHz, 4 * u.GHz, match_beams=False)
    assert np.nanmax(np.abs(raw[good] - POWER_LAW_ALPHA)) > 0.5
    assert raw.beam is None and not raw.smoothed


def test_beams_that_do_not_contain_each_other_meet_at_a_common_beam():
    # Two elliptical beams at right angles: neither contains the other, so both are smoothed to
    # the smallest beam containing both (radio-beam's common_beam), and the power law still holds.
    from rtrace.observe import observe

    res = power_law_result(alpha=1.3)
    sky = observe(res, Beam(major=9 * u.arcsec, minor=5 * u.arcsec, pa=0 * u.deg))
    other = observe(res, Beam(major=9 * u.arcsec, minor=5 * u.arcsec, pa=90 * u.deg))
    mixed = types.SimpleNamespace(
        data=u.Quantity([sky.data[0], other.data[2]]),
        model=u.Quantity([sky.model[0], other.model[2]]),
        beams=[sky.beams[0], other.beams[2]],
        frequencies=POWER_NU[[0, 2]],
        pixel_scale=res.pixel_scale,
        noise_rms=None,
        result=res,
    )
    amap = spectral_index_map(mixed, 0, 1)
    assert amap.smoothed and amap.beam.minor > 5 * u.arcsec
    assert np.nanmax(np.abs(amap - 1.3)) < 0.02


def test_empty_sky_is_masked_without_and_with_noise():
    from rtrace.observe import observe

    res = power_law_result()
    empty = np.zeros((96, 96), bool)
    empty[:, :2] = True  # far from the emission: only FFT round-off or noise there
    # a model Result: the strip has exactly zero intensity
    assert np.all(np.isnan(spectral_index_map(res, 0, 2)[empty]))
    beam = Beam(major=6 * u.arcsec, minor=6 * u.arcsec, pa=0 * u.deg)
    clean = observe(res, beam, beam_scaling="inverse-frequency")
    # FFT round-off leaves tiny non-zero values (of either sign) on empty sky; unmasked they
    # would give meaningless indices
    raw = clean.data.value[:, empty]
    assert np.any(raw != 0)
    amap = spectral_index_map(clean, 0, 2)
    assert np.all(np.isnan(amap[empty]))
    assert np.isfinite(amap).sum() > 1000
    # a fraction of 0 keeps every positive pixel; a bad fraction is refused by name
    assert np.isfinite(spectral_index_map(clean, 0, 2, peak_fraction=0)).sum() > np.isfinite(amap).sum()
    for bad in (-0.1, 1.0, float("nan"), "1e-3"):
        with pytest.raises(InputError, match="peak_fraction"):
            spectral_index_map(clean, 0, 2, peak_fraction=bad)
    noisy = observe(res, beam, noise=1e-4 * u.Jy / u.beam, seed=5, beam_scaling="inverse-frequency")
    amap = spectral_index_map(noisy, 0, 2)  # the S/N cut (3 rms) applies by default
    assert np.all(np.isnan(amap[empty]))
    assert "rms" in amap.masking
    assert np.isfinite(amap).sum() > 500


def test_noise_rms_after_smoothing_to_the_common_beam_is_measured_rms():
    # The S/N cut of a smoothed plane uses the rms that the map's beam-correlated noise has after
    # smoothing. Checked against the sample rms of pure noise smoothed the same way (a statistical
    # check: 16 maps of ~50 independent 16" beams each give the rms to a few per cent).
    from rtrace.analysis.spectra import _to_beam
    from rtrace.observe import observe

    res = power_law_result()
    res._intensity = np.zeros_like(res._intensity)  # empty sky: data = noise
    sky = observe(
        res,
        Beam(major=4 * u.arcsec, minor=3 * u.arcsec, pa=10 * u.deg),
        noise=1.0 * u.mJy / u.beam,
        seed=11,
        beam_scaling="inverse-frequency",
        reference_frequency=4 * u.GHz,
    )
    target = sky.beams[0]  # 16" x 12" at 1 GHz
    measured, predicted = [], []
    for seed in range(16):
        sky = observe(
            res,
            sky.beam,
            noise=1.0 * u.mJy / u.beam,
            seed=seed,
            beam_scaling="inverse-frequency",
            reference_frequency=4 * u.GHz,
        )
        (smoothed,), factor = _to_beam(sky, [sky.data.value[2]], 2, target)
        measured.append(np.mean(smoothed[24:-24, 24:-24] ** 2))  # away from the zero-padded edges
        predicted.append(1e-3 * factor)
    # about sqrt(A_c / A_i) = 4 for beams 4x larger in each axis (Jy per common beam)
    assert 3.5 < predicted[0] / 1e-3 < 4.5
    assert math.sqrt(np.mean(measured)) == pytest.approx(predicted[0], rel=0.1)
