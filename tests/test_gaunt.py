"""The thermally averaged free-free Gaunt factor against published forms and independent integrals."""

import math

import numpy as np
import pytest
from scipy import integrate, special

from rtrace.physics import gaunt
from rtrace.physics.constants import EULER_GAMMA, H_OVER_K
from rtrace.physics.gaunt import RY_OVER_K, SQRT3_PI, gaunt_factor


def test_classical_radio_value_at_1ghz_1e4k():
    # Oster (1961) / Spitzer (1978) classical radio form gives 5.96 at 1 GHz, 1e4 K, Z = 1 (REFERENCES.md).
    assert gaunt.classical_radio_gaunt(1e9, 1e4) == pytest.approx(5.96, abs=0.01)
    assert gaunt_factor(1e9, 1e4) == pytest.approx(5.96, abs=0.01)


def _soft_classical_points():
    def w(nu, t):
        return H_OVER_K * nu / t * math.sqrt(RY_OVER_K / t)

    return [(t, nu) for t in (300.0, 1e3, 3e3, 1e4, 2e4) for nu in (1e7, 1e8, 1e9, 1e10) if w(nu, t) <= 1e-4]


@pytest.mark.parametrize("temperature,nu", _soft_classical_points())
def test_classical_regime_matches_oster_form(temperature, nu):
    # Classical radio form (Oster 1961, Rev. Mod. Phys. 33, 525), valid for h nu << kT and
    # T << 1.6e5 K, and at frequencies well below the classical turnover w = u gamma << 1: the
    # classical thermal average approaches it as ~7.5 w^(2/3) (tools/gaunt_classical.py), 0.3% at w = 1e-4.
    assert gaunt_factor(nu, temperature) == pytest.approx(gaunt.classical_radio_gaunt(nu, temperature), rel=0.005)


@pytest.mark.parametrize("w", [1e-3, 0.03, 1.0, 30.0])
def test_classical_limit_at_any_frequency(w):
    # For gamma^2 -> inf at fixed w = u gamma the Gaunt factor is the classical thermal average gbar_cl(w)
    # (Coulomb-orbit result, Landau & Lifshitz, Classical Theory of Fields sec. 70; tabulated by
    # tools/gaunt_classical.py and checked there against a direct orbit integration).
    temperature = RY_OVER_K / 1e10  # gamma^2 = 1e10, so u = w / 1e5 is small
    nu = w / 1e5 * temperature / H_OVER_K
    log_w = math.log(w)
    grid, spline, _ = gaunt._classical_table()
    gbar_cl = float(spline(log_w)) + SQRT3_PI * (math.log(4 / w) - 2.5 * EULER_GAMMA)
    assert gaunt_factor(nu, temperature) == pytest.approx(gbar_cl, rel=2e-3)


@pytest.mark.parametrize("temperature", [1e7, 3e7, 1e8])
@pytest.mark.parametrize("nu", [1e7, 1e9, 1e11, 1e12])
def test_quantum_regime_matches_born_form(temperature, nu):
    # Quantum (Born) radio form (sqrt(3)/pi) ln(4kT / (zeta h nu)) (REFERENCES.md, from memory),
    # valid for h nu << kT and T >> 1.6e5 K. The Coulomb correction D(gamma^2) is what separates the two:
    # -0.6% at 1e7 K (gamma^2 = 0.016), -0.1% at 1e8 K, so we allow 1%.
    assert gaunt_factor(nu, temperature) == pytest.approx(gaunt.born_radio_gaunt(nu, temperature), rel=0.01)


@pytest.mark.parametrize("temperature", [5e3, 1e4, 2e4])
@pytest.mark.parametrize("nu_ghz", [1.0, 3.0, 10.0])
def test_draine_interpolation(temperature, nu_ghz):
    # Draine (2011), eq. 10.9 (from memory): g = ln{exp[5.960 - (sqrt3/pi) ln(Z nu_9 T_4^-1.5)] + e};
    # within ~1% of the classical form at 1-10 GHz and 5e3-2e4 K (REFERENCES.md). We allow 1.5%.
    x = 5.960 - SQRT3_PI * math.log(nu_ghz * (temperature / 1e4) ** -1.5)
    draine = math.log(math.exp(x) + math.e)
    assert gaunt_factor(nu_ghz * 1e9, temperature) == pytest.approx(draine, rel=0.015)


@pytest.mark.parametrize("u", [1e-4, 0.01, 0.3, 1.0, 5.0, 30.0])
def test_born_thermal_average_against_direct_integration(u):
    # Born Gaunt factor of one electron, g_B = (sqrt3/pi) ln[(sqrt(E_i) + sqrt(E_f)) / (sqrt(E_i) - sqrt(E_f))]
    # (Rybicki & Lightman 1979, eq. 5.19 context; from memory), averaged over a Maxwellian in the final
    # energy x = E_f/kT with weight e^{-x}; the closed form is (sqrt3/pi) e^{u/2} K_0(u/2).
    def integrand(x):
        ei, ef = x + u, x
        return SQRT3_PI * math.log((math.sqrt(ei) + math.sqrt(ef)) / (math.sqrt(ei) - math.sqrt(ef))) * math.exp(-x)

    direct = sum(integrate.quad(integrand, a, b, limit=400)[0] for a, b in ((0, u), (u, np.inf)))
    assert float(gaunt.born_thermal(u)) == pytest.approx(direct, rel=1e-7)


def test_coulomb_correction_limits():
    # Re psi(1 + iy) -> -gamma_E for y -> 0 and ln y + 1/(12 y^2) for y -> inf (Abramowitz & Stegun 6.3.19),
    # so D -> 0 in the Born limit and -(sqrt3/pi)(3 gamma_E/2 + ln gamma) in the classical limit.
    assert float(gaunt.coulomb_correction(1e-9)) == pytest.approx(0.0, abs=1e-6)
    g2 = 1e4
    classical = -SQRT3_PI * (1.5 * EULER_GAMMA + 0.5 * math.log(g2))
    assert float(gaunt.coulomb_correction(g2)) == pytest.approx(classical, abs=1e-4)
    # continuity across the tabulated range's ends
    for edge in (1e-10, 1e12):
        lo, hi = gaunt.coulomb_correction([edge * 0.999, edge * 1.001])
        assert lo == pytest.approx(hi, abs=1e-3)


@pytest.mark.parametrize("g2", [1e-3, 0.1, 1.0, 10.0, 300.0])
def test_coulomb_integral_against_quad(g2):
    # F(gamma^2) = int_0^inf Re psi(1 + i gamma / sqrt(x)) e^{-x} dx, by adaptive quadrature (scipy).
    gam = math.sqrt(g2)
    val, _ = integrate.quad(
        lambda x: special.psi(1 + 1j * gam / math.sqrt(x)).real * math.exp(-x), 0, np.inf, limit=400
    )
    assert float(-gaunt.coulomb_correction(g2) / SQRT3_PI - EULER_GAMMA) == pytest.approx(val, abs=1e-8)


def test_classical_table_limits():
    # Classical thermal Gaunt factor: soft limit (sqrt3/pi)[ln(4/w) - 5 gamma_E/2] (Oster 1961) for w -> 0,
    # Kramers plateau 1 for w -> inf (common practice; the table's last entries approach 1).
    grid, spline, g_last = gaunt._classical_table()
    assert float(gaunt.classical_correction(1e-9)) == pytest.approx(0.0, abs=1e-5)
    assert g_last == pytest.approx(1.0, abs=1e-3)
    w = np.exp(grid)
    g = spline(grid) + SQRT3_PI * (np.log(4 / w) - 2.5 * EULER_GAMMA)
    assert np.all(np.diff(g) < 0)  # falls monotonically toward the plateau


def test_gaunt_is_smooth_and_positive_over_the_plane():
    nu = np.geomspace(1e7, 1e15, 60)[:, None]
    t = np.geomspace(10.0, 1e9, 60)[None, :]
    g = gaunt_factor(nu, t)
    assert np.all(np.isfinite(g)) and np.all(g > 0)
    # the kernels' ln T tables reproduce the direct evaluation
    log_t0, dlog_t, table = gaunt.log_temperature_table(np.array([1e9, 1e12]))
    t_test = np.array([30.0, 777.0, 8123.0, 1.234e6, 5e8])
    x = (np.log(t_test) - log_t0) / dlog_t
    i = x.astype(int)
    interp = table[:, i] + (x - i) * (table[:, i + 1] - table[:, i])
    assert np.allclose(interp, gaunt_factor(np.array([[1e9], [1e12]]), t_test[None, :]), rtol=1e-6)
    # rows are kept per frequency: a later table (another frequency set) reuses them unchanged
    nodes = np.exp(np.linspace(gaunt.LOG_T_MIN, gaunt.LOG_T_MAX, table.shape[1]))
    again = gaunt.log_temperature_table(np.array([1e12, 3e10, 1e9]))[2]
    assert again.flags.writeable and np.array_equal(again[[2, 0]], table)
    assert np.array_equal(again[1], gaunt.gaunt_cgs(3e10, nodes))


def _sommerfeld_points():
    path = __import__("pathlib").Path(__file__).parent / "data" / "gaunt_sommerfeld.csv"
    lines = [ln for ln in path.read_text().splitlines() if ln and not ln.startswith("#")]
    return np.array([[float(v) for v in ln.split(",")] for ln in lines[1:]])  # after the column names


def test_against_exact_sommerfeld_thermal_averages():
    # Exact thermal averages of the Sommerfeld (1931) free-free Gaunt factor (Karzas & Latter 1961;
    # Hummer 1988 form), computed by tools/gaunt_sommerfeld.py with mpmath (our own data from the
    # published formula). Radio to THz (10 MHz - 1 THz, 300 K - 1e8 K): within 1.5% (0.9% worst seen);
    # wherever h nu < 1e-3 kT: within 0.1%; Wien side (u = 1-3): within 6%.
    rows = _sommerfeld_points()
    assert len(rows) >= 40
    radio = soft = wien = 0
    for gamma2, u, exact, err in rows:
        assert err < 1e-5 * exact
        t = RY_OVER_K / gamma2
        nu = u * t / H_OVER_K
        ours = float(gaunt_factor(nu, t))
        if u < 1e-3:
            assert ours == pytest.approx(exact, rel=1e-3), (gamma2, u)
            soft += 1
        if 1e7 <= nu <= 1.0001e12 and 299.0 <= t <= 1.0001e8:
            assert ours == pytest.approx(exact, rel=0.015), (gamma2, u)
            radio += 1
        if u >= 1:
            assert ours == pytest.approx(exact, rel=0.06), (gamma2, u)
            wien += 1
    assert radio >= 20 and soft >= 20 and wien >= 4
