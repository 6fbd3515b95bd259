"""Free-free coefficients per ion charge (He III with Z = 2), the emission-measure definition, range warnings.

References: Rybicki & Lightman (1979), Radiative Processes in Astrophysics, eq. 5.18b (alpha_nu, the
sum over ions of Z^2 n_e n_i) and eq. 5.14b (emission); the charge scaling of the Gaunt factor,
gbar(nu, T, Z) = gbar(nu / Z^2, T / Z^2, 1), follows from its dependence on u = h nu / kT and
gamma^2 = Z^2 Ry / kT only (Karzas & Latter 1961, ApJS 6, 167).
"""

import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits

import rtrace
from rtrace import amr, physics
from rtrace.errors import GauntRangeWarning, InputError, PhysicsRangeWarning, RelativisticWarning
from rtrace.physics import gaunt
from rtrace.physics.constants import H_OVER_K
from rtrace.physics.gaunt import RY_OVER_K, gaunt_factor
from rtrace.transfer import cell_cache

CELL_CM = 3.0e17
NU = np.array([0.5e9, 5.0e9, 30.0e9, 3.0e12])  # radio to far infrared (the last off the radio series)


def rl_prefactor():
    """R&L 1979 eq. 5.18b prefactor (4 e^6 / 3 m_e h c)(2 pi / 3 k m_e)^{1/2} from CODATA (astropy), cgs."""
    e = const.e.gauss.value
    me, h, c, k = const.m_e.cgs.value, const.h.cgs.value, const.c.cgs.value, const.k_B.cgs.value
    return 4 * e**6 / (3 * me * h * c) * math.sqrt(2 * math.pi / (3 * k * me))


def alpha_rl(nu, t, ne, n_ions):
    """sum over ion species (charge Z, density n) of R&L 5.18b with that charge's Gaunt factor (cm-1)."""
    total = 0.0
    for charge, n in n_ions:
        g = gaunt_factor(nu, t, charge=charge)
        total = total + rl_prefactor() * t**-0.5 * charge**2 * ne * n * nu**-3 * -np.expm1(-H_OVER_K * nu / t) * g
    return total


# -- the Gaunt factor per charge ---------------------------------------------------------------------


def test_charge_two_is_the_charge_one_value_at_scaled_frequency_and_temperature():
    # gbar(nu, T, Z) = gbar(nu / Z^2, T / Z^2, 1) (Karzas & Latter 1961: gbar depends on u and gamma^2 only)
    nu = np.geomspace(1e8, 1e14, 7)[:, None] * u.Hz
    t = np.geomspace(30.0, 1e9, 9)[None, :] * u.K
    np.testing.assert_allclose(gaunt_factor(nu, t, charge=2), gaunt_factor(nu / 4, t / 4, charge=1), rtol=1e-12)
    # He III's Gaunt factor is smaller: the stronger Coulomb field lowers the soft-photon logarithm
    # (Oster 1961 classical form: ln(T^{3/2} / (Z nu)))
    assert np.all(gaunt_factor(1 * u.GHz, 1e4 * u.K, charge=2) < gaunt_factor(1 * u.GHz, 1e4 * u.K))


def test_charge_two_classical_radio_form():
    # Oster (1961), Rev. Mod. Phys. 33, 525: classical radio form with Z = 2, valid for h nu << kT,
    # T << 1.6e5 Z^2 K and below the classical turnover, w = u gamma << 1 (gamma^2 = Z^2 Ry / kT); the
    # classical average approaches it as ~7.5 w^(2/3) (tools/gaunt_classical.py), 0.3% at w = 1e-4, as for Z = 1
    # in tests/test_gaunt.py.
    for nu, t in [(1e9, 1e4), (1e8, 3e3), (3e7, 1e3)]:
        w = H_OVER_K * nu / t * math.sqrt(4 * RY_OVER_K / t)
        assert w <= 1e-4
        assert float(gaunt_factor(nu, t, charge=2)) == pytest.approx(
            float(gaunt.classical_radio_gaunt(nu, t, 2)), rel=5e-3
        )


def test_charge_two_against_exact_sommerfeld_values():
    # tests/data/gaunt_sommerfeld.csv: exact thermal averages of the Sommerfeld (1931) Gaunt factor as a
    # function of (u, gamma^2) (tools/gaunt_sommerfeld.py, mpmath). For Z = 2 the same (u, gamma^2) is met at
    # T = 4 Ry / (k gamma^2), nu = u k T / h. Within 1e-4 everywhere, as for Z = 1 (tests/test_gaunt_table.py).
    path = __import__("pathlib").Path(__file__).parent / "data" / "gaunt_sommerfeld.csv"
    lines = [ln for ln in path.read_text().splitlines() if ln and not ln.startswith("#")][1:]
    checked = 0
    for gamma2, uu, exact, _ in (map(float, ln.split(",")) for ln in lines):
        t = 4.0 * RY_OVER_K / gamma2
        nu = uu * t / H_OVER_K
        ours = float(gaunt_factor(nu * u.Hz, t * u.K, charge=2))
        tol = 1e-4
        assert ours == pytest.approx(exact, rel=tol), (gamma2, uu)
        checked += 1
    assert checked >= 40


def test_charge_keyword_checks_and_old_spelling():
    with pytest.raises(InputError, match="charge: .*got 3"):
        gaunt_factor(1 * u.GHz, 1e4 * u.K, charge=3)
    with pytest.warns(DeprecationWarning, match="use charge="):
        old = gaunt_factor(1 * u.GHz, 1e4 * u.K, Z=2)
    assert old == gaunt_factor(1 * u.GHz, 1e4 * u.K, charge=2)


# -- coefficients of a doubly ionized helium plasma --------------------------------------------------


def test_helium_iii_plasma_alpha_matches_rl_518b_with_z2_gaunt():
    # Pure He III: n_e = 2 n, ion term Z^2 n = 4 n. R&L 1979 eq. 5.18b with Z = 2 and the Z = 2 Gaunt factor.
    n, t = 10.0, np.array([8e3, 1e5, 3e6])
    for nu in NU:
        expected = alpha_rl(nu, t, 2 * n, [(2, n)])
        got = physics.absorption_coefficient(nu * u.Hz, t * u.K, 2 * n * u.cm**-3, 4 * n * u.cm**-3).value
        np.testing.assert_allclose(got, expected, rtol=2e-3)  # 5.18b's constants vs ours: 0.1%
        # and not the Z = 1 value: the two differ by 1-6% at these points
        z1 = rl_prefactor() * t**-0.5 * 8 * n * n * nu**-3 * -np.expm1(-H_OVER_K * nu / t) * gaunt_factor(nu, t)
        assert np.all(np.abs(got / z1 - 1) > 0.005)


def uniform_snapshot(ne, ni, t=2.0e4, shape=(6, 5, 8), dtype=np.float64):
    return rtrace.Snapshot.from_arrays(
        temperature=np.full(shape, t) * u.K,
        cell_size=CELL_CM * u.cm,
        electron_density=np.full(shape, ne) * u.cm**-3,
        ion_density=np.full(shape, ni) * u.cm**-3,
        dtype=dtype,
    )


@pytest.mark.parametrize("los", [(0, 0, 1), (0, 1, 0), (-1, 0, 0)])
@pytest.mark.parametrize("nfreq", [1, 4])
def test_helium_iii_slab_through_trace(los, nfreq):
    # Uniform slab: tau = alpha L and I = B_nu(T)(1 - e^-tau) (R&L 1979 eq. 1.30), alpha from R&L 5.18b with Z = 2;
    # every axis route (last axis, single-frequency last axis, middle axis) is exercised.
    n, t = 200.0, 2.0e4
    snap = uniform_snapshot(2 * n, 4 * n, t)
    nu = NU[:nfreq] if nfreq > 1 else NU[1:2]
    view = rtrace.View(los=los, north=(0, 0, 1) if los[1] else (0, 1, 0), npix=4, width=4 * CELL_CM * u.cm)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhysicsRangeWarning)
        res = rtrace.trace(snap, view, nu * u.Hz)
    depth = snap.shape[int(np.argmax(np.abs(los)))] * CELL_CM
    tau = alpha_rl(nu, t, 2 * n, [(2, n)]) * depth
    np.testing.assert_allclose(res.tau[:, 1, 1], tau, rtol=2e-3)
    bb = 2 * const.h.cgs.value * nu**3 / const.c.cgs.value**2 / np.expm1(H_OVER_K * nu / t)
    np.testing.assert_allclose(res.intensity.value[:, 1, 1], bb * -np.expm1(-tau), rtol=2e-3)
    # emission measure: observers' int n_e^2 dl by default (REFERENCES.md)
    assert res.em_definition == "electrons"
    assert res.emission_measure.value[1, 1] == pytest.approx((2 * n) ** 2 * depth / 3.0857e18, rel=1e-4)


def mixed_fields(rng, shape=(5, 6, 9)):
    """H fully ionized, He partly He II and He III (Y = 0.28 by mass): (n_e, ion term, n_HII, n_HeII, n_HeIII, T)."""
    nh = rng.uniform(10.0, 500.0, shape)
    nhe = nh * 0.28 / (4 * 0.70)  # number ratio He/H for X = 0.70, Y = 0.28
    f3 = rng.uniform(0.0, 1.0, shape) * (rng.uniform(size=shape) > 0.3)
    he2, he3 = nhe * (1 - f3), nhe * f3
    ne = nh + he2 + 2 * he3
    ni = nh + he2 + 4 * he3
    t = rng.uniform(8e3, 3e5, shape)
    return ne, ni, nh, he2, he3, t


def numpy_transfer(nu, ne, nh, he2, he3, t, axis):
    """Direct per-cell formal solution along +axis (R&L 1979 eq. 1.30), alpha summed per ion species (5.18b)."""
    move = lambda a: np.moveaxis(a, axis, -1)  # noqa: E731
    ne, nh, he2, he3, t = map(move, (ne, nh, he2, he3, t))
    inten = np.zeros((len(nu),) + ne.shape[:2])
    tau = np.zeros_like(inten)
    for k in range(ne.shape[-1]):
        nuk = nu[:, None, None]
        tk = t[None, :, :, k]
        alpha = alpha_rl(nuk, tk, ne[None, :, :, k], [(1, (nh + he2)[None, :, :, k]), (2, he3[None, :, :, k])])
        dtau = alpha * CELL_CM
        bb = 2 * const.h.cgs.value * nuk**3 / const.c.cgs.value**2 / np.expm1(H_OVER_K * nuk / tk)
        inten += -np.expm1(-dtau) * (bb - inten)
        tau += dtau
    em_e = (ne**2).sum(axis=-1) * CELL_CM
    return inten, tau, em_e


@pytest.mark.parametrize("nfreq", [1, 4])
def test_mixed_hydrogen_helium_plasma_through_trace(rng, nfreq):
    # Each cell's alpha is R&L 5.18b summed over H II + He II (Z = 1) and He III (Z = 2), each with its own
    # Gaunt factor; the tracer gets only n_e and the ion term and must find the He III share itself.
    ne, ni, nh, he2, he3, t = mixed_fields(rng)
    nu = NU[:nfreq] if nfreq > 1 else NU[1:2]
    snap = rtrace.Snapshot.from_arrays(
        temperature=t * u.K,
        cell_size=CELL_CM * u.cm,
        electron_density=ne * u.cm**-3,
        ion_density=ni * u.cm**-3,
        dtype=np.float64,
    )
    nx, ny, nz = ne.shape
    # rays travel +z (the observer is at +z): cell k = 0 is the farthest; north = +y, west = north x los = +x
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=(ny, nx), width=nx * CELL_CM * u.cm)
    res = rtrace.trace(snap, view, nu * u.Hz)
    inten, tau, em_e = numpy_transfer(nu, ne, nh, he2, he3, t, 2)
    np.testing.assert_allclose(res.tau, tau.transpose(0, 2, 1), rtol=1e-6)
    np.testing.assert_allclose(res.intensity.value, inten.transpose(0, 2, 1), rtol=1e-6)
    np.testing.assert_allclose(res.emission_measure.value * 3.0856775814913673e18, em_e.T, rtol=1e-9)
    # the Z = 2 Gaunt factor matters here: with Z = 1 for all ions tau would be higher
    z1 = np.zeros_like(tau)
    for k in range(nz):
        z1 += alpha_rl(nu[:, None, None], t[None, :, :, k], ne[None, :, :, k], [(1, ni[None, :, :, k])]) * CELL_CM
    assert np.max(z1 / tau) > 1.01


def test_oblique_and_amr_routes_use_the_helium_iii_gaunt_factor():
    # Uniform He III plasma: the central pixels of a tilted view see tau = alpha L / |los_z| (rays enter and
    # leave through the z faces); alpha from R&L 5.18b with Z = 2.
    n, t = 100.0, 3.0e4
    shape = (24, 24, 6)
    snap = uniform_snapshot(2 * n, 4 * n, t, shape)
    los = np.array([0.2, 0.1, 1.0])
    view = rtrace.View(los=tuple(los), npix=4, width=4 * CELL_CM * u.cm)
    res = rtrace.trace(snap, view, NU[:3] * u.Hz, supersample=1)
    path = shape[2] * CELL_CM * np.linalg.norm(los) / los[2]
    np.testing.assert_allclose(
        res.tau[:, 1:3, 1:3], alpha_rl(NU[:3], t, 2 * n, [(2, n)])[:, None, None] * path * np.ones((1, 2, 2)), rtol=2e-3
    )
    assert res.emission_measure.value[1, 1] == pytest.approx((2 * n) ** 2 * path / 3.0856775814913673e18, rel=1e-6)
    ions = rtrace.trace(snap, view, NU[:3] * u.Hz, supersample=1, emission_measure="ion_term")
    assert ions.emission_measure.value[1, 1] == pytest.approx(8 * n * n * path / 3.0856775814913673e18, rel=1e-6)
    np.testing.assert_array_equal(ions.tau, res.tau)
    # the split route of oblique views traced to a tolerance (exact cell projections + lattice remainder)
    split = rtrace.trace(snap, view, NU[:3] * u.Hz, tolerance=1e-2)
    np.testing.assert_allclose(split.tau[:, 1:3, 1:3], res.tau[:, 1:3, 1:3], rtol=1e-6)
    assert split.emission_measure.value[1, 1] == pytest.approx(res.emission_measure.value[1, 1], rel=1e-6)
    split_i = rtrace.trace(snap, view, NU[:3] * u.Hz, tolerance=1e-2, emission_measure="ion_term")
    assert split_i.emission_measure.value[1, 1] == pytest.approx(2 * res.emission_measure.value[1, 1], rel=1e-6)
    np.testing.assert_allclose(split.intensity.value[:, 1:3, 1:3], res.intensity.value[:, 1:3, 1:3], rtol=1e-6)
    # an AMR snapshot of one level holding the same cells gives the uniform grid's image
    one = np.ones(shape)
    grid = amr.Grid(0, np.zeros(3, np.int64), np.array(shape, np.int64), 2 * n * one, 4 * n * one, t * one)
    amr_snap = amr.AMRSnapshot([grid], 2, shape, np.full(3, CELL_CM), np.zeros(3), {"source": "test"})
    for v in (view, rtrace.View(los=(0, 0, 1), npix=4, width=4 * CELL_CM * u.cm)):
        a, b = (
            rtrace.trace(amr_snap, v, NU[:3] * u.Hz, supersample=1),
            rtrace.trace(snap, v, NU[:3] * u.Hz, supersample=1),
        )
        np.testing.assert_allclose(a.tau, b.tau, rtol=1e-12)
        np.testing.assert_allclose(a.emission_measure.value, b.emission_measure.value, rtol=1e-12)


def test_single_frequency_kernel_agrees_with_the_general_one_on_helium_iii(rng):
    # The single-frequency kernel sends rays with He III cells to its cell-by-cell path; it must give what
    # the general kernel gives for the same frequency (both: R&L 5.18b per cell).
    ne, ni, *_, t = mixed_fields(rng)
    snap = rtrace.Snapshot.from_arrays(
        temperature=t * u.K, cell_size=CELL_CM * u.cm, electron_density=ne * u.cm**-3, ion_density=ni * u.cm**-3
    )
    view = rtrace.View(los=(0, 0, 1), npix=(6, 5), width=5 * CELL_CM * u.cm)
    one = rtrace.trace(snap, view, NU[1:2] * u.Hz)
    two = rtrace.trace(snap, view, NU[1:3] * u.Hz)
    np.testing.assert_allclose(one.tau[0], two.tau[0], rtol=1e-6)
    np.testing.assert_allclose(one.intensity.value[0], two.intensity.value[0], rtol=1e-6)


def test_hydrogen_snapshots_carry_no_ratio_array():
    # Ion term equal to n_e: the oblique kernel reads nothing more (no second array).
    snap = uniform_snapshot(10.0, 10.0)
    assert cell_cache.emission_ratio(snap) is None
    assert cell_cache.emission_ratio(uniform_snapshot(20.0, 40.0)) is not None


# -- emission measure definition ---------------------------------------------------------------------


def test_emission_measure_keyword_and_fits_card(tmp_path):
    n = 50.0
    snap = uniform_snapshot(2 * n, 4 * n)
    view = rtrace.View(los=(0, 0, 1), npix=4, width=4 * CELL_CM * u.cm)
    with pytest.raises(InputError, match="emission_measure: expected one of"):
        rtrace.trace(snap, view, 1 * u.GHz, emission_measure="n_e n_i")
    e = rtrace.trace(snap, view, 1 * u.GHz)
    i = rtrace.trace(snap, view, 1 * u.GHz, emission_measure="ion_term")
    # pure He III: n_e sum Z^2 n_i / n_e^2 = 4 n / 2 n = 2
    np.testing.assert_allclose(i.emission_measure.value, 2 * e.emission_measure.value, rtol=1e-12)
    assert i.em_definition == "ion_term"
    from rtrace.io.fits import write_result

    for res, text in [(e, "int n_e^2 dl"), (i, "int n_e sum Z^2 n_i dl")]:
        path = write_result(res, tmp_path / f"em_{res.em_definition}.fits", "emission_measure")
        assert fits.getheader(path)["EMDEF"] == text
    # pictures name the definition in their colour-bar label too
    from rtrace.plot.core import plane_of

    assert "n_e^2" in plane_of(e, "emission_measure", 0).label
    assert "Z^2 n_i" in plane_of(i, "emission_measure", 0).label


# -- range warnings ----------------------------------------------------------------------------------


def _warned(t_value):
    t = np.full((3, 3, 3), 1e4)
    t[0, 0, :2] = t_value
    with warnings.catch_warnings(record=True) as record:
        warnings.simplefilter("always")
        rtrace.Snapshot.from_arrays(
            temperature=t * u.K, cell_size=1 * u.pc, electron_density=np.ones((3, 3, 3)) * u.cm**-3
        )
    return {w.category: str(w.message) for w in record if issubclass(w.category, PhysicsRangeWarning)}


def test_half_a_kelvin_is_below_the_gaunt_table():
    got = _warned(0.5)
    assert set(got) == {GauntRangeWarning}
    assert "2 of 27 cell(s) lie outside the Gaunt factor table" in got[GauntRangeWarning]


def test_2e8_kelvin_warns_of_relativistic_corrections_only():
    # kT / m_e c^2 = 1.7% at 1e8 K (k / m_e c^2 = 1.686e-10 per K from CODATA): a few percent is at stake.
    assert const.k_B.value * 1e8 / (const.m_e.value * const.c.value**2) == pytest.approx(0.0169, rel=0.01)
    got = _warned(2e8)
    assert set(got) == {RelativisticWarning}
    assert "2 cell(s) at or above 1e+08 K" in got[RelativisticWarning]
    assert "electron-electron bremsstrahlung" in got[RelativisticWarning] and "%" in got[RelativisticWarning]


def test_2e10_kelvin_warns_of_both():
    got = _warned(2e10)
    assert set(got) == {RelativisticWarning, GauntRangeWarning}
    assert "2 above 1e+10 K (highest 2e+10 K)" in got[GauntRangeWarning]
