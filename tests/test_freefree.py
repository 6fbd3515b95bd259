"""Free-free coefficients against published formulas, constants and astropy's blackbody."""

import contextlib
import math
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.modeling.physical_models import BlackBody

from rtrace import physics
from rtrace.errors import PhysicsRangeWarning, RelativisticWarning
from rtrace.physics import constants as k
from rtrace.physics.gaunt import gaunt_factor

CGS_INTENSITY = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)


def test_prefactors_from_constants():
    # Rybicki & Lightman (1979) eq. 5.18b prints 3.7e8; computed from CODATA constants 3.692e8.
    assert k.ALPHA_FF_PREFACTOR == pytest.approx(3.692e8, rel=1e-3)
    # Rybicki & Lightman (1979) eq. 5.14b prints 6.8e-38; computed from constants 6.84e-38.
    assert k.EMISSIVITY_FF_PREFACTOR == pytest.approx(6.84e-38, rel=1e-3)
    # Independent evaluation of the 5.18b prefactor through astropy Quantities.
    e2 = const.e.gauss**2
    pref = (4 * e2**3 / (3 * const.m_e * const.h * const.c) * np.sqrt(2 * np.pi / (3 * const.k_B * const.m_e))).cgs
    assert pref.value == pytest.approx(k.ALPHA_FF_PREFACTOR, rel=1e-12)


@pytest.mark.parametrize("temperature", [3e3, 1e4, 1e5])
@pytest.mark.parametrize("nu_ghz", [0.1, 1.0, 30.0])
def test_radio_limit_eq_5_19b(temperature, nu_ghz):
    # Rybicki & Lightman (1979) eq. 5.19b: for h nu << kT,
    # alpha = 0.018 T^-3/2 Z^2 n_e n_i nu^-2 g_ff; from constants the coefficient is 0.01772.
    nu = nu_ghz * 1e9
    ne = 1e3
    alpha = physics.absorption_coefficient(nu * u.Hz, temperature * u.K, ne * u.cm**-3).to_value(1 / u.cm)
    g = gaunt_factor(nu, temperature)
    coeff = alpha * temperature**1.5 * nu**2 / (ne * ne * g)
    assert coeff == pytest.approx(k.ALPHA_FF_PREFACTOR * k.H_OVER_K, rel=1e-3)
    assert coeff == pytest.approx(0.01772, rel=2e-3)
    assert coeff == pytest.approx(0.018, rel=0.02)


@pytest.mark.parametrize("temperature", [30.0, 8e3, 1e6, 5e8])
@pytest.mark.parametrize("nu", [1e7, 1e9, 1e11, 1e12, 1e14])
def test_kirchhoff_against_astropy_blackbody(temperature, nu):
    # Kirchhoff's law in LTE: j_nu / alpha_nu = B_nu(T) (Rybicki & Lightman 1979, eq. 1.37),
    # with the two coefficients from eqs. 5.14b and 5.18b computed independently.
    args = (nu * u.Hz, temperature * u.K, 1.0 * u.cm**-3, 1.2 * u.cm**-3)
    hot = temperature >= physics.RELATIVISTIC_TEMPERATURE  # an identity even where the model warns
    with pytest.warns(RelativisticWarning) if hot else contextlib.nullcontext():
        j = physics.emission_coefficient(*args).to_value(u.erg / (u.s * u.cm**3 * u.Hz * u.sr))
        a = physics.absorption_coefficient(*args).to_value(1 / u.cm)
    bb = BlackBody(temperature=temperature * u.K, scale=1.0 * CGS_INTENSITY)(nu * u.Hz).to_value(CGS_INTENSITY)
    if bb == 0:
        pytest.skip("astropy's blackbody underflows here")
    assert j / a == pytest.approx(bb, rel=1e-10)


def test_planck_against_astropy_and_high_precision():
    # Planck's law (Rybicki & Lightman 1979, eq. 1.51) over h nu / kT from 1e-8 to 700.
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 40
    t = 1e4
    for x in [1e-8, 1e-5, 1e-3, 0.3, 1.0, 5.0, 50.0, 300.0, 700.0]:
        nu = x * t / k.H_OVER_K
        ours = physics.planck(nu * u.Hz, t * u.K).to_value(CGS_INTENSITY)
        mx = mpmath.mpf(k.H) * mpmath.mpf(nu) / (mpmath.mpf(k.K_B) * t)
        exact = 2 * mpmath.mpf(k.H) * mpmath.mpf(nu) ** 3 / mpmath.mpf(k.C) ** 2 / mpmath.expm1(mx)
        assert ours == pytest.approx(float(exact), rel=1e-13), x
        if x <= 300:
            bb = BlackBody(temperature=t * u.K, scale=1.0 * CGS_INTENSITY)(nu * u.Hz).to_value(CGS_INTENSITY)
            assert ours == pytest.approx(bb, rel=1e-9), x


def test_absorption_exact_stimulated_factor_on_wien_side():
    # Rybicki & Lightman (1979) eq. 5.18b keeps (1 - e^{-h nu/kT}); at h nu = 20 kT it is ~1.
    t, nu = 1e4, 20 * 1e4 / k.H_OVER_K
    a = physics.absorption_coefficient(nu * u.Hz, t * u.K, 1 * u.cm**-3).to_value(1 / u.cm)
    expected = k.ALPHA_FF_PREFACTOR / math.sqrt(t) / nu**3 * (-math.expm1(-20.0)) * gaunt_factor(nu, t)
    assert a == pytest.approx(float(expected), rel=1e-12)


def test_ion_density_defaults_to_electron_density():
    a1 = physics.absorption_coefficient(1 * u.GHz, 1e4 * u.K, 10 * u.cm**-3)
    a2 = physics.absorption_coefficient(1 * u.GHz, 1e4 * u.K, 10 * u.cm**-3, 10 * u.cm**-3)
    a3 = physics.absorption_coefficient(1 * u.GHz, 1e4 * u.K, 10 * u.cm**-3, 20 * u.cm**-3)
    assert a1 == a2
    assert a3.value == pytest.approx(2 * a1.value, rel=1e-14)


@pytest.mark.parametrize("temperature", [5e3, 1e4, 2e4])
@pytest.mark.parametrize("nu_ghz", [0.3, 1.0, 3.0, 10.0, 30.0])
def test_mezger_henderson_optical_depth(temperature, nu_ghz):
    # Mezger & Henderson (1967), ApJ 147, 471: tau = 8.235e-2 T^-1.35 nu_GHz^-2.1 EM (EM in pc cm-6);
    # the same as Condon & Ransom (2016) eq. 4.60. It is a power-law fit that approximates the exact
    # expression to ~5-7% over 0.3-30 GHz and 5e3-2e4 K (REFERENCES.md); the worst case we see is 8.7%
    # at the 5000 K / 30 GHz corner (the fit's own error: our Gaunt factor there matches Oster's
    # classical form to 0.1%, see test_gaunt.py), so we allow 10%.
    em_pc = 1e6
    length = 1.0 * u.pc
    ne = np.sqrt(em_pc / length.to_value(u.pc)) * u.cm**-3
    alpha = physics.absorption_coefficient(nu_ghz * u.GHz, temperature * u.K, ne)
    tau = (alpha * length).decompose().value
    approx = 8.235e-2 * temperature**-1.35 * nu_ghz**-2.1 * em_pc
    assert tau == pytest.approx(approx, rel=0.10)


def test_warning_above_relativistic_temperature():
    with pytest.warns(PhysicsRangeWarning, match="1 cell"):
        physics.absorption_coefficient(1 * u.GHz, [1e4, 2e9] * u.K, 1 * u.cm**-3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        physics.absorption_coefficient(1 * u.GHz, 9e7 * u.K, 1 * u.cm**-3)
