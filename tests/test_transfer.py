"""The tracer against analytic solutions of the transfer equation."""

import astropy.units as u
import numpy as np
import pytest
from conftest import uniform_snapshot
from scipy import integrate

import rtrace
from rtrace.physics.constants import PC
from rtrace.physics.freefree import absorption_cgs, emission_cgs
from rtrace.physics.planck import planck_cgs

NU = np.array([0.1e9, 1e9, 5e9, 30e9])


def slab_expectation(nu, temperature, ne, length_cm):
    tau = absorption_cgs(nu, temperature, ne, ne) * length_cm
    return tau, planck_cgs(nu, np.full_like(nu, temperature)) * -np.expm1(-tau)


@pytest.mark.parametrize("axis", [0, 1, 2])
@pytest.mark.parametrize("sign", [1, -1])
def test_uniform_slab_axis_aligned(axis, sign):
    # Uniform slab: I = B_nu(T) (1 - e^{-tau}), tau = alpha_nu L (Rybicki & Lightman 1979, eq. 1.30).
    shape = [6, 6, 6]
    shape[axis] = 40
    snap = uniform_snapshot(tuple(shape), 8000.0, 500.0)
    los = np.zeros(3)
    los[axis] = sign
    north = np.zeros(3)
    north[(axis + 1) % 3] = 1
    view = rtrace.View(los=los, north=north, npix=6, width=0.06 * u.pc, distance=1 * u.kpc)
    res = rtrace.trace(snap, view, NU * u.Hz)
    tau, intensity = slab_expectation(NU, 8000.0, 500.0, 40 * 0.01 * PC)
    assert np.allclose(res.tau, tau[:, None, None], rtol=2e-6, atol=0)
    assert np.allclose(res.intensity.value, intensity[:, None, None], rtol=2e-6, atol=0)
    # Emission measure = n_e n_i L (REFERENCES.md: EM = int n_e n_i dl, pc cm-6)
    assert np.allclose(res.emission_measure.to_value(u.pc / u.cm**6), 500.0**2 * 40 * 0.01, rtol=1e-12)
    assert tau[0] > 1 > tau[-1]  # both regimes are exercised


def test_uniform_slab_oblique():
    # A thin slab seen 30 degrees from its normal: path length L / cos(30 deg), so I = B (1 - e^{-tau}).
    snap = uniform_snapshot((40, 40, 4), 8000.0, 2000.0)
    theta = np.radians(30)
    view = rtrace.View(
        los=(0, np.sin(theta), np.cos(theta)), north=(0, 1, 0), npix=4, width=0.02 * u.pc, distance=1 * u.kpc
    )
    res = rtrace.trace(snap, view, NU * u.Hz, supersample=3)
    assert res.rays_per_pixel > 2  # 3 rays per cell on each lattice axis, 2 pixels per cell
    tau, intensity = slab_expectation(NU, 8000.0, 2000.0, 4 * 0.01 * PC / np.cos(theta))
    assert np.allclose(res.tau, tau[:, None, None], rtol=2e-6)
    assert np.allclose(res.intensity.value, intensity[:, None, None], rtol=2e-6)


def test_thick_limit_brightness_temperature_equals_electron_temperature():
    # An optically thick isothermal region has Planck T_b -> T_e (REFERENCES.md, Brightness temperature).
    snap = uniform_snapshot((3, 3, 50), 9000.0, 1e5)
    view = rtrace.View(npix=3, width=0.03 * u.pc, distance=1 * u.kpc)
    res = rtrace.trace(snap, view, [0.1, 1.0] * u.GHz)
    assert res.tau.min() > 100
    assert np.allclose(res.brightness_temperature().to_value(u.K), 9000.0, rtol=1e-9)
    # Rayleigh-Jeans T_b = c^2 I / (2 k nu^2); equal to the Planck one to O(h nu / kT) here.
    assert np.allclose(res.brightness_temperature("rayleigh-jeans").to_value(u.K), 9000.0, rtol=1e-5)


def test_thick_limit_on_the_wien_side():
    # At h nu ~ kT the Planck inversion still returns T_e; Rayleigh-Jeans does not (common practice).
    snap = uniform_snapshot((2, 2, 20), 100.0, 1e9)
    view = rtrace.View(npix=2, width=0.02 * u.pc, distance=1 * u.kpc)
    res = rtrace.trace(snap, view, [1000.0] * u.GHz)
    assert res.tau.min() > 50
    assert np.allclose(res.brightness_temperature().to_value(u.K), 100.0, rtol=1e-9)
    x = 6.62607015e-27 * 1e12 / (1.380649e-16 * 100.0)  # h nu / k T (CODATA 2018 exact h, k)
    rj = 100.0 * x / np.expm1(x)  # c^2 B / (2 k nu^2) for a blackbody
    assert np.allclose(res.brightness_temperature("rayleigh-jeans").to_value(u.K), rj, rtol=1e-9)


def test_cmb_background_through_a_slab():
    # Formal solution with incident intensity: I = I_bg e^{-tau} + B (1 - e^{-tau})
    # (Rybicki & Lightman 1979, eq. 1.30); CMB at 2.7255 K (Fixsen 2009).
    snap = uniform_snapshot((4, 4, 10), 8000.0, 100.0)
    view = rtrace.View(npix=8, width=0.08 * u.pc, distance=1 * u.kpc)  # half the pixels miss the box
    res = rtrace.trace(snap, view, NU * u.Hz, background="cmb")
    tau, intensity = slab_expectation(NU, 8000.0, 100.0, 10 * 0.01 * PC)
    bg = planck_cgs(NU, np.full_like(NU, 2.7255))
    full = res.specific_intensity(background="included").value
    inside = full[:, 2:6, 2:6]
    assert np.allclose(inside, (bg * np.exp(-tau) + intensity)[:, None, None], rtol=2e-6)
    assert np.allclose(full[:, 0, :], bg[:, None], rtol=1e-12)  # outside the box: CMB only
    # the default intensity is background subtracted: empty sky reads 0
    assert np.all(res.intensity.value[:, 0, :] == 0.0)
    # The differential flux removes the background: S = sum (I - I_bg) Omega.
    expected = (intensity - bg * -np.expm1(-tau)) * 16 * res.pixel_solid_angle.to_value(u.sr)
    got = res.flux_density().to(u.erg / (u.s * u.cm**2 * u.Hz)).value
    assert np.allclose(got, expected, rtol=2e-6)


def test_uniform_sphere_against_1d_integration():
    # Uniform sphere of radius R at distance D:
    # S_nu = (2 pi / D^2) int_0^R B_nu(T) (1 - exp(-2 alpha sqrt(R^2 - p^2))) p dp (REFERENCES.md).
    n, cell = 64, 0.01 * PC
    radius = 30 * cell
    x = (np.arange(n) + 0.5 - n / 2) * cell
    r = np.sqrt(x[:, None, None] ** 2 + x[None, :, None] ** 2 + x[None, None, :] ** 2)
    ne = np.where(r < radius, 1e3, 0.0)
    t = np.full_like(ne, 1e4)
    snap = rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=cell * u.cm, electron_density=ne * u.cm**-3)
    dist = 1 * u.kpc
    nu = np.array([0.1e9, 0.3e9, 1e9, 30e9])
    res = rtrace.trace(snap, rtrace.View(npix=80, width=0.8 * u.pc, distance=dist), nu * u.Hz)
    d_cm = dist.to_value(u.cm)
    for f, nuf in enumerate(nu):
        alpha = absorption_cgs(nuf, 1e4, 1e3, 1e3)
        b = planck_cgs(nuf, 1e4)
        val, _ = integrate.quad(
            lambda p, b=b, alpha=alpha: b * -np.expm1(-2 * alpha * np.sqrt(radius**2 - p**2)) * p, 0, radius
        )
        expected = 2 * np.pi * val / d_cm**2 / 1e-23  # Jy
        assert res.flux_density()[f].to_value(u.Jy) == pytest.approx(expected, rel=0.01), nuf


def _thin_field(n, rng):
    """A smooth positive field that reaches the box edges (so edges are tested)."""
    x = np.linspace(-1, 1, n)
    X, Y, Z = np.meshgrid(x, x, x, indexing="ij")
    ne = 5.0 + 3.0 * X
    for _ in range(6):
        c = rng.uniform(-0.8, 0.8, 3)
        ne += 40 * np.exp(-((X - c[0]) ** 2 + (Y - c[1]) ** 2 + (Z - c[2]) ** 2) / 0.05)
    t = 8000.0 + 3000.0 * np.sin(3 * Y) * np.cos(2 * Z)
    return ne, t


@pytest.mark.parametrize(
    "los,north,npix",
    [
        ((0, 0, 1), (0, 1, 0), 37),
        ((-1, 0, 0), (0, 0, 1), 200),
        ((0, 1, 0), (1, 0, 0), 5),
        ((1, 1, 1), (0, 0, 1), 41),
        ((0.3, -0.5, 0.8), (0, 1, 0), 64),
        ((1, 2, 0.1), (0, 0, 1), 9),
        ((0.0, 0.01, 1.0), (0, 1, 0), 150),
        ((0, 0, 1), (1, 1, 0), 48),
    ],
)
def test_thin_flux_is_conserved_for_any_view(los, north, npix, rng):
    # Optically thin limit: total flux = sum_cells j_nu V_cell / D^2 for any viewing
    # direction and pixel size (REFERENCES.md, simple analytic checks).
    n, cell = 24, 0.05 * PC
    ne, t = _thin_field(n, rng)
    snap = rtrace.Snapshot.from_arrays(
        temperature=t * u.K, cell_size=cell * u.cm, electron_density=ne * u.cm**-3, dtype=np.float64
    )
    nu = 30e9
    dist = 2 * u.kpc
    res = rtrace.trace(snap, rtrace.View(los=los, north=north, npix=npix, distance=dist), [nu] * u.Hz)
    assert res.tau.max() < 1e-6
    expected = emission_cgs(nu, t, ne, ne).sum() * cell**3 / dist.to_value(u.cm) ** 2 / 1e-23
    assert res.flux_density()[0].to_value(u.Jy) == pytest.approx(expected, rel=0.005)


@pytest.mark.parametrize(
    "los,north,blob_x_col,blob_y_row",
    [
        ((0, 0, 1), (0, 1, 0), "high", "high"),  # west = north x los = +x
        ((0, 0, -1), (0, 1, 0), "low", "high"),  # west = +y x -z = -x
    ],
)
def test_image_orientation_convention(los, north, blob_x_col, blob_y_row):
    # DESIGN.md geometry conventions (common practice for sky images): row index grows toward
    # north, columns toward north x los (west). Cell i = 10 of 20 spans the centre line, so it
    # lands in column 10 when columns run along +x and in column 9 when they run along -x.
    n = 20
    ne = np.zeros((n, n, n))
    ne[16, 10, 10] = 100.0  # blob A on +x
    ne[10, 16, 10] = 50.0  # blob B on +y
    snap = rtrace.Snapshot.from_arrays(
        temperature=np.full((n, n, n), 1e4) * u.K, cell_size=1 * u.pc, electron_density=ne * u.cm**-3
    )
    res = rtrace.trace(snap, rtrace.View(los=los, north=north, npix=n, distance=1 * u.kpc), [5] * u.GHz)
    img = res.intensity.value[0]
    (ra, ca), (rb, cb) = [
        np.unravel_index(np.argmax(np.where(img == v, img, 0)), img.shape)
        for v in sorted(np.unique(img[img > 0]))[::-1]
    ]
    centre_col = n // 2 if blob_x_col == "high" else n // 2 - 1
    assert (ca > n // 2) == (blob_x_col == "high") and ra == n // 2
    assert (rb > n // 2) == (blob_y_row == "high") and cb == centre_col


def test_orientation_side_view():
    # los = +x, north = +z: west = z x x = +y, so a blob at +y is at high column, +z at high row.
    n = 20
    ne = np.zeros((n, n, n))
    ne[10, 16, 10] = 100.0
    ne[10, 10, 16] = 50.0
    snap = rtrace.Snapshot.from_arrays(
        temperature=np.full((n, n, n), 1e4) * u.K, cell_size=1 * u.pc, electron_density=ne * u.cm**-3
    )
    img = rtrace.trace(
        snap, rtrace.View(los=(1, 0, 0), north=(0, 0, 1), npix=n, distance=1 * u.kpc), [5] * u.GHz
    ).intensity.value[0]
    assert np.unravel_index(np.argmax(img), img.shape) == (10, 16)
    img[10, 16] = 0
    assert np.unravel_index(np.argmax(img), img.shape) == (16, 10)


def test_bricks_composite_to_the_whole_grid(rng):
    # Associative compositing of ray segments (Rybicki & Lightman 1979, eq. 1.30 applied piecewise)
    # must reproduce the single-pass result for an oblique, optically thick view.
    n = 20
    ne = 1e3 * rng.lognormal(0, 1, (n, n, n))
    t = rng.uniform(5e3, 2e4, (n, n, n))
    snap = rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=0.01 * u.pc, electron_density=ne * u.cm**-3)
    view = rtrace.View(los=(0.4, -0.7, 0.6), north=(0, 0, 1), npix=30, distance=1 * u.kpc)
    whole = rtrace.trace(snap, view, [0.3, 3, 30] * u.GHz, supersample=1)
    bricked = rtrace.trace(snap, view, [0.3, 3, 30] * u.GHz, supersample=1, brick_size=7)
    assert whole.tau.max() > 10
    assert np.allclose(bricked.intensity.value, whole.intensity.value, rtol=1e-10, atol=0)
    assert np.allclose(bricked.tau, whole.tau, rtol=1e-10, atol=0)
    assert np.allclose(bricked.emission_measure.value, whole.emission_measure.value, rtol=1e-10)


def test_axis_aligned_and_oblique_routes_agree(rng):
    # The same physics by two routes: exact column maps vs Amanatides & Woo rays nudged off-axis.
    n = 16
    ne = 1e3 * rng.lognormal(0, 0.5, (n, n, n))
    t = np.full((n, n, n), 1e4)
    snap = rtrace.Snapshot.from_arrays(temperature=t * u.K, cell_size=0.01 * u.pc, electron_density=ne * u.cm**-3)
    a = rtrace.trace(snap, rtrace.View(los=(0, 0, 1), npix=n, distance=1 * u.kpc), [1, 10] * u.GHz)
    b = rtrace.trace(snap, rtrace.View(los=(1e-9, 0, 1), npix=n, distance=1 * u.kpc), [1, 10] * u.GHz)
    assert np.allclose(a.intensity.value, b.intensity.value, rtol=1e-6)
    assert np.allclose(a.tau, b.tau, rtol=1e-6)


def test_rayleigh_jeans_matches_astropy_equivalency():
    # astropy's brightness_temperature equivalency is the Rayleigh-Jeans form (REFERENCES.md).
    snap = uniform_snapshot((3, 3, 10), 8000.0, 300.0)
    view = rtrace.View(npix=3, width=0.03 * u.pc, distance=1 * u.kpc)
    res = rtrace.trace(snap, view, [5.0] * u.GHz)
    tb = res.brightness_temperature("rayleigh-jeans")[0, 1, 1]
    surface_brightness = res.intensity[0, 1, 1].to(u.Jy / u.sr)
    via_astropy = surface_brightness.to(u.K, equivalencies=u.brightness_temperature(5 * u.GHz))
    assert tb.to_value(u.K) == pytest.approx(via_astropy.to_value(u.K), rel=1e-10)


def test_flux_density_with_and_without_background():
    # S_nu = sum_pixels I_nu Omega_pix (common practice); the background is removed by default.
    snap = uniform_snapshot((4, 4, 10), 8000.0, 100.0)
    res = rtrace.trace(
        snap, rtrace.View(npix=8, width=0.08 * u.pc, distance=1 * u.kpc), [1.0] * u.GHz, background=2.7255 * u.K
    )
    omega = res.pixel_solid_angle.to_value(u.sr)
    total = res.specific_intensity("included").value.sum() * omega * 1e23
    bg = planck_cgs(np.array([1e9]), np.array([2.7255]))[0]
    assert res.flux_density(background="included")[0].to_value(u.Jy) == pytest.approx(total, rel=1e-12)
    assert res.flux_density()[0].to_value(u.Jy) == pytest.approx(total - bg * 64 * omega * 1e23, rel=1e-9)
