"""Optical-depth diagnostics and cuts against closed-form results for uniform media.

References: Rybicki & Lightman (1979), "Radiative Processes in
Astrophysics": eq. 1.30 (uniform slab, I = S (1 - e^{-tau})), the optically
thin limit I = j L (eq. 1.29 with alpha -> 0), eq. 5.18b (absorption
coefficient, through rtrace.physics.absorption_coefficient) and eq. 5.14b
(emission coefficient). Data are invented uniform test media.
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord

import rtrace
from rtrace import physics
from rtrace.errors import InputError

N = 24
CELL = 0.01 * u.pc
T_E = 8000.0
N_E = 3000.0
FREQS = [0.2, 0.5, 1.4, 5.0, 20.0] * u.GHz  # tau of the 0.24 pc slab from ~30 down to ~0.01


@pytest.fixture(scope="module")
def slab():
    t = np.full((N, N, N), T_E)
    ne = np.full((N, N, N), N_E)
    return rtrace.Snapshot.from_arrays(
        temperature=t * u.K, electron_density=ne * u.cm**-3, cell_size=CELL, dtype=np.float64
    )


def _alpha():
    return physics.absorption_coefficient(FREQS, T_E * u.K, N_E * u.cm**-3).to_value(u.cm**-1)


@pytest.fixture(scope="module")
def axis_result(slab):
    view = rtrace.View(
        los=(0, 0, 1),
        north=(0, 1, 0),
        npix=N,
        distance=1 * u.kpc,
        sky_position=SkyCoord(ra=150 * u.deg, dec=-30 * u.deg),
    )
    return rtrace.trace(slab, view, FREQS)


def test_tau_unity_depth_is_one_over_alpha_in_a_uniform_slab(axis_result):
    # R&L 1979 eq. 5.18b: tau grows as alpha s, so tau = 1 at s = 1 / alpha
    depth = axis_result.tau_unity_depth().to_value(u.cm)
    alpha = _alpha()
    length = (N * CELL).to_value(u.cm)
    for k, a in enumerate(alpha):
        if a * length > 1.0:
            np.testing.assert_allclose(depth[k], 1.0 / a, rtol=2e-6)  # table Gaunt factor to 5e-7
        else:
            assert np.all(np.isnan(depth[k]))
    assert np.any(alpha * length > 1) and np.any(alpha * length < 1)


@pytest.mark.parametrize("los", [(0.3, 0.4, 0.866), (-0.6, 0.1, -0.79)])
def test_tau_unity_depth_along_oblique_rays(slab, los):
    view = rtrace.View(los=los, north=(0, 1, 0), npix=16, width=0.1 * u.pc, distance=1 * u.kpc)
    res = rtrace.trace(slab, view, FREQS[:2])
    depth = res.tau_unity_depth().to_value(u.cm)
    # central pixels: rays well inside the cube, path longer than 1/alpha
    expected = np.broadcast_to((1.0 / _alpha()[:2])[:, None, None], (2, 4, 4))
    np.testing.assert_allclose(depth[:, 6:10, 6:10], expected, rtol=2e-6)


def test_full_over_unabsorbed_is_the_slab_escape_factor(axis_result):
    # R&L 1979 eq. 1.30: I = S (1 - e^{-tau}); thin limit I = j L, so I / I_thin = (1 - e^{-tau}) / tau
    full = axis_result.intensity.value
    thin = axis_result.unabsorbed_intensity.value
    tau = axis_result.tau
    np.testing.assert_allclose(full / thin, -np.expm1(-tau) / tau, rtol=1e-5)
    # and the unabsorbed intensity is j L with j from R&L eq. 5.14b (Kirchhoff-consistent)
    j = physics.emission_coefficient(FREQS, T_E * u.K, N_E * u.cm**-3).to_value(u.erg / (u.s * u.cm**3 * u.Hz * u.sr))
    length = (N * CELL).to_value(u.cm)
    np.testing.assert_allclose(thin, np.broadcast_to((j * length)[:, None, None], thin.shape), rtol=2e-6)


def test_absorption_off_ignores_tau_but_keeps_the_background(slab):
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=N, distance=1 * u.kpc)
    full = rtrace.trace(slab, view, FREQS, background="cmb")
    thin = rtrace.trace(slab, view, FREQS, background="cmb", absorption=False)
    assert np.all(thin.tau == 0)
    # emission only: the background passes unattenuated, so the flux above it is sum (int j ds) Omega_pix
    expected = (full.unabsorbed_intensity.sum(axis=(1, 2)) * full.pixel_solid_angle).to(u.Jy)
    np.testing.assert_allclose(thin.flux_density().to_value(u.Jy), expected.value, rtol=1e-6)
    np.testing.assert_allclose(thin.intensity.value, full.unabsorbed_intensity.value, rtol=1e-6)
    np.testing.assert_allclose(thin.emission_measure.value, full.emission_measure.value, rtol=1e-12)


def test_cut_across_a_uniform_slab_has_constant_tau(axis_result):
    c = axis_result.cut((2, 3), (20, 18))
    assert c.tau.shape == (len(FREQS), c.columns.size)
    np.testing.assert_allclose(c.tau, c.tau[:, :1] * np.ones_like(c.tau), rtol=1e-10)
    np.testing.assert_allclose(c.tau[:, 0], axis_result.tau[:, 12, 12], rtol=1e-10)
    # thick end: Planck T_b -> T_e (R&L 1979 eq. 1.30 with tau >> 1)
    assert abs(c.brightness_temperature[0, 0].to_value(u.K) - T_E) < 1e-6 * T_E
    # length: hypot(18, 15) pixels of 0.01 pc
    np.testing.assert_allclose(c.distance[-1].to_value(u.pc), np.hypot(18, 15) * 0.01, rtol=1e-9)
    # full over unabsorbed along the cut, as for the images
    np.testing.assert_allclose(c.intensity / c.unabsorbed_intensity, -np.expm1(-c.tau) / c.tau, rtol=1e-5)


def test_cut_table_round_trips_as_ecsv_with_units(axis_result, tmp_path):
    from astropy.table import Table

    c = axis_result.cut((2, 3), (20, 18))
    path = c.write(tmp_path / "cut.ecsv")
    # astropy's ECSV reader (astropy proposal APE 6, from memory): units, descriptions and meta come back
    t = Table.read(path)
    assert len(t) == c.columns.size and t.meta["background"] == c.describe_background()
    np.testing.assert_array_equal(t["offset"].quantity, c.offset)
    np.testing.assert_array_equal(t["distance"].quantity, c.distance)
    np.testing.assert_array_equal(
        t["emission_measure"].quantity.to_value(u.pc * u.cm**-6), c.emission_measure.to_value(u.pc * u.cm**-6)
    )
    for k, f in enumerate(FREQS.to_value(u.GHz)):
        tag = f"{f:.6g}GHz"
        np.testing.assert_array_equal(t[f"I_{tag}"].quantity, c.intensity[k])
        np.testing.assert_array_equal(t[f"Tb_{tag}"].quantity, c.brightness_temperature[k])
        np.testing.assert_array_equal(t[f"tau_{tag}"], c.tau[k])
        assert t[f"tau_{tag}"].unit is None and "optical depth" in t[f"tau_{tag}"].description
    assert [p.name for p in tmp_path.iterdir()] == ["cut.ecsv"]


def test_cut_spectral_index_in_thick_and_thin_limits(axis_result):
    c = axis_result.cut((4, 4), (19, 19))
    alpha = c.spectral_index[:, 5]
    # thick Rayleigh-Jeans: I = B ~ nu^2 (spectral index -> 2); thin: I = j L ~ g_ff(nu) e^{-h nu/kT}, index ~ -0.1
    # (R&L 1979 eqs. 1.30, 5.14b; the -0.1 of a thin HII region is common practice)
    assert 1.9 < alpha[0] < 2.0
    assert -0.2 < alpha[-1] < 0.0


def test_cut_endpoints_from_sky_coordinates(axis_result):
    from rtrace.io.fits import sky_wcs

    wcs = sky_wcs(axis_result.shape[1:], axis_result.pixel_scale, axis_result.sky_position)
    a = wcs.pixel_to_world(3.0, 5.0)
    b = wcs.pixel_to_world(17.5, 9.0)
    sky = axis_result.cut(a, b, num=30)
    pix = axis_result.cut((3.0, 5.0), (17.5, 9.0), num=30)
    np.testing.assert_allclose(sky.columns, pix.columns, atol=1e-6)
    np.testing.assert_allclose(sky.rows, pix.rows, atol=1e-6)
    with pytest.raises(InputError, match="zero length"):
        axis_result.cut((3, 3), (3, 3))


def test_contribution_function_sums_to_the_traced_intensity(slab):
    view = rtrace.View(los=(0.2, 0.1, 0.97), north=(0, 1, 0), npix=12, width=0.08 * u.pc, distance=1 * u.kpc)
    res = rtrace.trace(slab, view, FREQS)
    ray = res.contribution((6, 5))
    # sum of dI_k = S(1 - e^{-dtau_k}) e^{-tau_k} is the formal solution (R&L 1979 eq. 1.29); for a
    # uniform medium it is S (1 - e^{-tau}) (eq. 1.30)
    dtau_last = ray.tau_front[:, -1] - ray.tau_front[:, -2] if ray.tau_front.shape[1] > 1 else 0
    alpha = _alpha()
    tau_ray = alpha * ray.path_length.to_value(u.cm).sum()
    np.testing.assert_allclose(ray.tau_front[:, -1] + alpha * ray.path_length[-1].to_value(u.cm), tau_ray, rtol=1e-5)
    assert np.all(dtau_last > 0)
    s = physics.planck(FREQS, T_E * u.K).to_value(res.intensity.unit)
    np.testing.assert_allclose(ray.intensity.value, s * -np.expm1(-tau_ray), rtol=1e-5)
    # the central pixel of a uniform medium: the ray equals the pixel mean
    np.testing.assert_allclose(ray.intensity.value, res.intensity.value[:, 5, 6], rtol=1e-5)
    assert np.all(np.diff(ray.depth.value) > 0)
    # cumulative fraction down to the far edge of segment k: (1 - e^{-tau_{k+1}}) / (1 - e^{-tau}) (eq. 1.30)
    frac = ray.cumulative_fraction()
    tau_far = np.concatenate([ray.tau_front[:, 1:], tau_ray[:, None]], axis=1)
    np.testing.assert_allclose(frac, -np.expm1(-tau_far) / -np.expm1(-tau_ray)[:, None], rtol=1e-5)


def test_diagnostics_need_a_traced_result():
    from rtrace.transfer.result import Result

    res = Result(
        np.zeros((1, 2, 2)),
        np.zeros((1, 2, 2)),
        np.zeros((2, 2)),
        np.array([1e9]),
        rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=2, distance=1 * u.kpc),
        1.0,
        np.zeros(3),
        {"source": "x"},
    )
    with pytest.raises(InputError, match="snapshot"):
        res.tau_unity_depth()


def test_pickled_result_leaves_its_snapshot_behind(axis_result):
    import pickle

    copy = pickle.loads(pickle.dumps(axis_result))
    np.testing.assert_array_equal(copy.intensity.value, axis_result.intensity.value)
    assert copy._snapshot is None and axis_result._snapshot is not None
    assert len(pickle.dumps(axis_result)) < 5 * axis_result.intensity.nbytes  # not the 24^3 snapshot
    with pytest.raises(InputError, match="snapshot"):
        copy.tau_unity_depth()
