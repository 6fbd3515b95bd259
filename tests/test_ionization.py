"""Tests for rtrace.physics.ionization.

Expected values are computed here independently of the module: with
scipy.constants (SI, converted in the test) rather than the module's
astropy constants, and with closed forms or a scalar root finder rather
than the module's vectorised solver.
"""

import warnings

import astropy.units as u
import numpy as np
import pytest
import scipy.constants as sc
from scipy.optimize import brentq

from rtrace.errors import InputError, PhysicsRangeWarning
from rtrace.physics import ionization
from rtrace.physics.ionization import (
    Composition,
    FullyIonized,
    IonizationModel,
    SahaEquilibrium,
    SuppliedFraction,
    TemperatureThreshold,
    resolve_ionization,
)

# Masses in grams from scipy.constants (CODATA): hydrogen atom = m_p + m_e,
# helium = standard atomic weight 4.002602 u (IUPAC, from memory).
M_H = (sc.m_p + sc.m_e) * 1e3
M_HE = 4.002602 * sc.atomic_mass * 1e3

PURE_H = Composition(hydrogen=1.0, helium=0.0)
PURE_HE = Composition(hydrogen=0.0, helium=1.0)
MIXED = Composition()  # X = 0.70, Y = 0.28


def saha_factor(T, chi_ev, g_upper, g_lower):
    """S(T) = (2 g_{r+1}/g_r) (2 pi m_e k T / h^2)^{3/2} exp(-chi/kT) in cm^-3.

    Saha equation, e.g. Rybicki & Lightman 1979, eq. 9.45 (from memory),
    written in SI with scipy.constants, then m^-3 -> cm^-3.
    """
    T = np.asarray(T, dtype=float)
    lam = (2.0 * np.pi * sc.m_e * sc.k * T / sc.h**2) ** 1.5 * 1e-6
    return 2.0 * g_upper / g_lower * lam * np.exp(-chi_ev * sc.e / (sc.k * T))


def saha_factors(T):
    """S for H I->II, He I->II, He II->III with g = 2,1 / 1,2 / 2,1."""
    return (
        saha_factor(T, 13.598434, 1.0, 2.0),
        saha_factor(T, 24.587389, 2.0, 1.0),
        saha_factor(T, 54.417765, 1.0, 2.0),
    )


def species_given_ne(n_h, n_he, T, n_e):
    """Saha populations for a given electron density (independent of rtrace)."""
    s_h, s_1, s_2 = saha_factors(T)
    n_hii = n_h * s_h / (s_h + n_e)
    den = n_e**2 + s_1 * n_e + s_1 * s_2
    n_heii = n_he * s_1 * n_e / den
    n_heiii = n_he * s_1 * s_2 / den
    return n_hii, n_heii, n_heiii


# ---------------------------------------------------------------------------
# Composition
# ---------------------------------------------------------------------------


def test_composition_defaults_and_number_densities():
    comp = Composition()
    assert comp.hydrogen == 0.70 and comp.helium == 0.28
    assert comp.metals == pytest.approx(0.02)
    rho = np.array([1e-22, 1e-10])
    # Hand calculation: m_H = 1.00782503 u = 1.673533e-24 g, m_He = 4.002602 u
    # = 6.646477e-24 g (atomic masses from memory), so for rho = 1e-22 g cm^-3
    # n_H = 0.7e-22 / 1.673533e-24 = 41.8277 and n_He = 0.28e-22 / 6.646477e-24
    # = 4.21276 cm^-3.
    n_h = comp.hydrogen_number_density(rho)
    n_he = comp.helium_number_density(rho)
    np.testing.assert_allclose(n_h, [41.8277, 41.8277e12], rtol=1e-5)
    np.testing.assert_allclose(n_he, [4.21276, 4.21276e12], rtol=1e-5)
    assert n_h.dtype == np.float64 and n_h.shape == rho.shape
    # Quantity input in SI gives the same numbers.
    np.testing.assert_allclose(comp.hydrogen_number_density(rho * 1e3 * u.kg / u.m**3), n_h, rtol=1e-12)


@pytest.mark.parametrize(
    "kwargs, name",
    [
        ({"hydrogen": -0.1}, "hydrogen"),
        ({"helium": 1.5}, "helium"),
        ({"hydrogen": float("nan")}, "hydrogen"),
        ({"hydrogen": 0.8, "helium": 0.3}, "X + Y"),
    ],
)
def test_composition_validation(kwargs, name):
    with pytest.raises(ValueError, match=name.replace("+", r"\+")):
        Composition(**kwargs)


# ---------------------------------------------------------------------------
# Fully ionized and threshold models
# ---------------------------------------------------------------------------


def test_fully_ionized_pure_hydrogen():
    # Hand calculation: one electron and one Z=1 ion per H atom.
    rho = np.full((2, 3), 1e3 * M_H)  # n_H = 1000 cm^-3
    n_e, ion = FullyIonized(PURE_H).electron_and_ion_terms(rho, np.full((2, 3), 1e4), {})
    np.testing.assert_allclose(n_e, 1000.0, rtol=1e-9)
    np.testing.assert_allclose(ion, 1000.0, rtol=1e-9)
    assert n_e.shape == (2, 3) and n_e.dtype == np.float64 and ion.dtype == np.float64


@pytest.mark.parametrize("helium, e_per_he, ion_per_he", [("single", 1, 1), ("double", 2, 4)])
def test_fully_ionized_pure_helium(helium, e_per_he, ion_per_he):
    # Hand calculation: He II gives 1 electron and Z^2 = 1; He III gives
    # 2 electrons and Z^2 = 4 (free-free ion term sum Z_i^2 n_i, e.g.
    # Rybicki & Lightman 1979, eq. 5.14, from memory).
    rho = np.array([10.0 * M_HE])  # n_He = 10 cm^-3
    n_e, ion = FullyIonized(PURE_HE, helium=helium).electron_and_ion_terms(rho, np.array([1e5]), {})
    np.testing.assert_allclose(n_e, 10.0 * e_per_he, rtol=1e-9)
    np.testing.assert_allclose(ion, 10.0 * ion_per_he, rtol=1e-9)


def test_fully_ionized_mixed_hand_values():
    # Hand calculation with n_H = 41.8277, n_He = 4.21276 cm^-3 (see above) at
    # rho = 1e-22 g cm^-3: single -> n_e = ion = 46.0405;
    # double -> n_e = 41.8277 + 8.42552 = 50.2532, ion = 41.8277 + 16.8510 = 58.6787.
    rho, T = np.array([1e-22]), np.array([1e4])
    n_e, ion = FullyIonized(MIXED, "single").electron_and_ion_terms(rho, T, {})
    np.testing.assert_allclose([n_e[0], ion[0]], [46.0405, 46.0405], rtol=1e-5)
    n_e, ion = FullyIonized(MIXED, "double").electron_and_ion_terms(rho, T, {})
    np.testing.assert_allclose([n_e[0], ion[0]], [50.2532, 58.6787], rtol=1e-5)


def test_fully_ionized_rejects_bad_helium_mode():
    with pytest.raises(ValueError, match="helium"):
        FullyIonized(helium="triple")


def test_threshold_model():
    model = TemperatureThreshold(composition=PURE_H)
    # Default threshold is documented as 8000 K.
    assert model.threshold == ionization.DEFAULT_THRESHOLD_TEMPERATURE == 8000.0
    T = np.array([10.0, 7999.0, 8000.0, 2e4])
    rho = np.full(4, 100.0 * M_H)
    n_e, ion = model.electron_and_ion_terms(rho, T, {})
    # Hand calculation: neutral below 8000 K, n_e = n_H = 100 at and above.
    np.testing.assert_allclose(n_e, [0.0, 0.0, 100.0, 100.0], rtol=1e-9, atol=0)
    np.testing.assert_allclose(ion, [0.0, 0.0, 100.0, 100.0], rtol=1e-9, atol=0)

    # Quantity threshold and doubly ionized helium.
    model = TemperatureThreshold(5000 * u.K, composition=PURE_HE, helium="double")
    n_e, ion = model.electron_and_ion_terms(np.full(2, 3.0 * M_HE), np.array([4999.0, 5000.0]))
    np.testing.assert_allclose(n_e, [0.0, 6.0], rtol=1e-9, atol=0)
    np.testing.assert_allclose(ion, [0.0, 12.0], rtol=1e-9, atol=0)
    assert model.describe() == "threshold(T>=5000 K, X=0, Y=1, He=double)"


@pytest.mark.parametrize("bad", [0.0, -5.0, float("inf"), np.array([1e4, 2e4]), 3 * u.m])
def test_threshold_validation(bad):
    with pytest.raises(ValueError, match="threshold"):
        TemperatureThreshold(bad)


@pytest.mark.parametrize(
    "rho, T, name",
    [
        (np.array([-1e-24]), np.array([1e4]), "rho"),
        (np.array([np.nan]), np.array([1e4]), "rho"),
        (np.array([1e-24]), np.array([np.inf]), "T"),
        (np.array([1e-24]), np.array([-3.0]), "T"),
    ],
)
def test_input_validation(rho, T, name):
    with pytest.raises(ValueError, match=rf"^{name}: 1 of 1 cells"):
        FullyIonized().electron_and_ion_terms(rho, T, {})


@pytest.mark.filterwarnings("ignore::rtrace.errors.PhysicsRangeWarning")  # the equation, not its range
def test_quantity_inputs_match_cgs():
    model = SahaEquilibrium()
    rho = np.array([1e-21, 1e-15])
    T = np.array([9000.0, 3e4])
    ref = model.electron_and_ion_terms(rho, T, {})
    got = model.electron_and_ion_terms(rho * 1e3 * u.kg / u.m**3, T * u.K, {})
    np.testing.assert_allclose(got[0], ref[0], rtol=1e-12)
    np.testing.assert_allclose(got[1], ref[1], rtol=1e-12)


# ---------------------------------------------------------------------------
# Supplied fraction
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("helium", ["follow", "none", "single", "double"])
def test_supplied_fraction_counts(helium):
    x = np.array([0.0, 0.25, 1.0])
    rho = np.full(3, 1e-22)
    n_h = 0.70 * 1e-22 / M_H
    n_he = 0.28 * 1e-22 / M_HE
    # Hand bookkeeping: n_HII = x n_H; helium follows the same fraction x
    # ("follow" = "single": He II, Z = 1; "double": He III, two electrons,
    # Z^2 = 4), so a cell with x = 0 has no free electrons at all.
    he_e = {"follow": x * n_he, "none": 0 * x, "single": x * n_he, "double": 2 * x * n_he}
    he_ion = {"follow": x * n_he, "none": 0 * x, "single": x * n_he, "double": 4 * x * n_he}
    n_e, ion = SuppliedFraction(x, MIXED, helium).electron_and_ion_terms(rho, np.full(3, 1e4), {})
    np.testing.assert_allclose(n_e, x * n_h + he_e[helium], rtol=1e-9, atol=1e-300)
    np.testing.assert_allclose(ion, x * n_h + he_ion[helium], rtol=1e-9, atol=1e-300)


def test_supplied_fraction_quantity_and_field_name():
    rho = np.full(2, 50.0 * M_H)
    T = np.full(2, 1e4)
    # 40 percent is the dimensionless 0.4.
    n_e, _ = SuppliedFraction(np.array([40.0, 100.0]) * u.percent, PURE_H).electron_and_ion_terms(rho, T)
    np.testing.assert_allclose(n_e, [20.0, 50.0], rtol=1e-9)
    model = SuppliedFraction("xion", PURE_H)
    n_e, _ = model.electron_and_ion_terms(rho, T, {"xion": np.array([0.1, 0.2])})
    np.testing.assert_allclose(n_e, [5.0, 10.0], rtol=1e-9)
    with pytest.raises(ValueError, match="xion.*not found"):
        model.electron_and_ion_terms(rho, T, {})
    with pytest.raises(ValueError, match=r"'xion': 1 of 2 cells violate 0 <= fraction <= 1"):
        model.electron_and_ion_terms(rho, T, {"xion": np.array([0.1, 2.0])})


def test_supplied_fraction_validation_counts_bad_cells():
    bad = np.array([0.5, np.nan, 1.5, -0.1, 1.0, np.inf])
    with pytest.raises(ValueError) as err:
        SuppliedFraction(bad)
    msg = str(err.value)
    assert msg.startswith("fraction:")
    # one wording for every per-cell check (rtrace.quantities.CellTally): each problem with its count
    assert "2 of 6 cells are not finite (NaN or inf) and 2 violate 0 <= fraction <= 1" in msg
    assert "minimum -0.1, maximum 1.5" in msg
    with pytest.raises(ValueError, match="dimensionless"):
        SuppliedFraction(np.array([0.5]) * u.K)
    with pytest.raises(ValueError, match="helium"):
        SuppliedFraction(np.array([0.5]), helium="half")
    # Shape that cannot broadcast to the grid.
    with pytest.raises(ValueError, match="fraction: shape"):
        SuppliedFraction(np.array([0.5, 0.5])).electron_and_ion_terms(np.ones(3) * 1e-24, np.ones(3))


# ---------------------------------------------------------------------------
# Saha equilibrium
# ---------------------------------------------------------------------------


@pytest.mark.filterwarnings("ignore::rtrace.errors.PhysicsRangeWarning")  # the equation, not its range
def test_saha_pure_hydrogen_closed_form():
    # Pure hydrogen: n_e = n_HII = x n_H, so x^2 / (1 - x) = S(T) / n_H
    # (Saha equation, e.g. Rybicki & Lightman 1979, eq. 9.45, from memory),
    # solved by x = 2 / (1 + sqrt(1 + 4 n_H / S)) (stable quadratic root).
    #
    # Value derived by hand for T = 1e4 K, n_H = 1e10 cm^-3:
    # 2 pi m_e k / h^2 = 1.79987e10 cm^-2 K^-1 -> (..T)^{3/2} = 2.41468e21 cm^-3;
    # chi/k = 13.598434 eV / 8.617333e-5 eV/K = 157803 K -> exp(-15.7803)
    # = 1.40182e-7; S = 3.38494e14; S/n_H = r = 33849.4;
    # 1 - x ~ 1/r - 2/r^2 = 2.95409e-5, i.e. x = 0.9999705.
    model = SahaEquilibrium(PURE_H)
    n_h = 1e10
    T = np.array([1e4, 8000.0, 6000.0, 5000.0, 4000.0])
    rho = np.full(T.shape, n_h * M_H)
    s_h = saha_factor(T, 13.598434, 1.0, 2.0)
    x = 2.0 / (1.0 + np.sqrt(1.0 + 4.0 * n_h / s_h))
    neutral = x**2 * n_h**2 / s_h  # = (1 - x) n_H without cancellation

    n_e, ion = model.electron_and_ion_terms(rho, T, {})
    np.testing.assert_allclose(n_e, x * n_h, rtol=1e-8)
    np.testing.assert_allclose(ion, x * n_h, rtol=1e-8)
    sp = model.species_densities(rho, T)
    np.testing.assert_allclose(sp["n_HI"], neutral, rtol=1e-8)
    # Hand-derived value above.
    assert n_e[0] / n_h == pytest.approx(0.9999705, abs=2e-7)
    assert sp["n_HI"][0] / n_h == pytest.approx(2.95409e-5, rel=1e-4)
    # T = 6000 K is about a third ionized: a sensitive point for S(T).
    assert 0.2 < n_e[2] / n_h < 0.6


def _brentq_ne(n_h, n_he, T):
    """Scalar charge-conservation root, independent of rtrace's solver."""

    def f(ln_ne):
        n_e = np.exp(ln_ne)
        n_hii, n_heii, n_heiii = species_given_ne(n_h, n_he, T, n_e)
        return np.log(n_hii + n_heii + 2.0 * n_heiii) - ln_ne

    # Upper end nudged above ln(n_H + 2 n_He): at full ionization f(ln N) is 0
    # up to rounding and may come out as +1 ulp.
    return np.exp(
        brentq(f, np.log(1e-200 * (n_h + n_he)), np.log(n_h + 2 * n_he) + 1e-9, xtol=1e-14, rtol=1e-15, maxiter=500)
    )


@pytest.mark.parametrize("comp", [MIXED, PURE_HE, Composition(0.5, 0.5)])
@pytest.mark.filterwarnings("ignore::rtrace.errors.PhysicsRangeWarning")  # the equation, not its range
def test_saha_charge_conservation_and_independent_root(comp):
    # Charge conservation n_e = n_HII + n_HeII + 2 n_HeIII with Saha
    # populations (e.g. Rybicki & Lightman 1979, eq. 9.45, from memory).
    T1 = np.geomspace(4e3, 2e5, 25)
    r1 = np.array([1e-24, 1e-18, 1e-12, 1e-8])
    T, rho = (a.ravel() for a in np.meshgrid(T1, r1, indexing="ij"))
    n_h = comp.hydrogen * rho / M_H
    n_he = comp.helium * rho / M_HE
    model = SahaEquilibrium(comp)
    n_e, ion = model.electron_and_ion_terms(rho, T, {})

    n_hii, n_heii, n_heiii = species_given_ne(n_h, n_he, T, n_e)
    np.testing.assert_allclose(n_hii + n_heii + 2.0 * n_heiii, n_e, rtol=1e-8)
    np.testing.assert_allclose(ion, n_hii + n_heii + 4.0 * n_heiii, rtol=1e-8)

    expected = np.array([_brentq_ne(a, b, t) for a, b, t in zip(n_h, n_he, T, strict=True)])
    np.testing.assert_allclose(n_e, expected, rtol=1e-8)

    # The module's own species densities add up and conserve nuclei.
    sp = model.species_densities(rho, T)
    np.testing.assert_allclose(sp["n_HII"] + sp["n_HeII"] + 2 * sp["n_HeIII"], n_e, rtol=1e-8)
    np.testing.assert_allclose(sp["n_HeI"] + sp["n_HeII"] + sp["n_HeIII"], n_he, rtol=1e-10)
    np.testing.assert_allclose(sp["n_HI"] + sp["n_HII"], n_h, rtol=1e-10)
    # The grid must really include partly ionized helium in both stages.
    if comp.helium > 0:
        frac1 = sp["n_HeII"] / n_he
        assert np.any((frac1 > 0.1) & (frac1 < 0.9))
        frac2 = sp["n_HeIII"] / n_he
        assert np.any((frac2 > 0.1) & (frac2 < 0.9))


@pytest.mark.filterwarnings("ignore::rtrace.errors.PhysicsRangeWarning")  # the equation, not its range
def test_saha_hot_limit_is_fully_ionized():
    # At 1e6 K and n ~ 1 cm^-3 every Saha factor is >~1e23 cm^-3, so H and He
    # are fully stripped: n_e = n_H + 2 n_He, ion term = n_H + 4 n_He.
    rho = np.array([1e-24, 1e-22])
    T = np.full(2, 1e6)
    n_e, ion = SahaEquilibrium(MIXED).electron_and_ion_terms(rho, T, {})
    n_h, n_he = 0.7 * rho / M_H, 0.28 * rho / M_HE
    np.testing.assert_allclose(n_e, n_h + 2 * n_he, rtol=1e-10)
    np.testing.assert_allclose(ion, n_h + 4 * n_he, rtol=1e-10)


@pytest.mark.filterwarnings("ignore::rtrace.errors.PhysicsRangeWarning")  # the equation, not its range
def test_saha_cold_limit_is_neutral():
    # At 1000 K, rho = 1e-10 g cm^-3 (n_H ~ 4e13) hydrogen is nearly neutral and
    # x^2/(1-x) = S/n_H gives n_e = sqrt(n_H S_H) (weak-ionization limit of the
    # Saha equation, Rybicki & Lightman 1979, eq. 9.45, from memory); helium
    # (S ~ e^-240) adds nothing.
    rho = np.array([1e-10])
    T = np.array([1000.0])
    n_h = 0.7 * rho / M_H
    n_e, ion = SahaEquilibrium(MIXED).electron_and_ion_terms(rho, T, {})
    s_h = saha_factor(T, 13.598434, 1.0, 2.0)
    assert n_e[0] / n_h[0] < 1e-30
    np.testing.assert_allclose(n_e, np.sqrt(n_h * s_h), rtol=1e-8)
    np.testing.assert_allclose(ion, n_e, rtol=1e-8)


def test_saha_finite_over_full_range():
    # T from 1 K to 1e9 K, rho from 1e-30 to 1 g cm^-3, plus the T = 0 and
    # rho = 0 edges; no floating-point warning may escape (overflow, invalid,
    # divide). The range warning (LTE at low density) is expected here.
    T1 = np.concatenate([[0.0], np.logspace(0, 9, 181)])
    r1 = np.concatenate([[0.0], np.logspace(-30, 0, 151)])
    T, rho = np.meshgrid(T1, r1, indexing="ij")
    model = SahaEquilibrium(MIXED)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        warnings.simplefilter("ignore", PhysicsRangeWarning)
        n_e, ion = model.electron_and_ion_terms(rho, T, {})
    assert n_e.shape == T.shape
    assert np.all(np.isfinite(n_e)) and np.all(np.isfinite(ion))
    assert np.all(n_e >= 0) and np.all(ion >= 0)
    n_h, n_he = 0.7 * rho / M_H, 0.28 * rho / M_HE
    assert np.all(n_e <= (n_h + 2 * n_he) * (1 + 1e-10))
    assert np.all(ion <= (n_h + 4 * n_he) * (1 + 1e-10))
    # Edges: no gas or T = 0 -> no electrons; 1 K -> n_e underflows to exactly 0.
    assert np.all(n_e[0, :] == 0) and np.all(n_e[:, 0] == 0) and np.all(n_e[1, :] == 0)
    # Top of the range is fully ionized; at rho -> 1 g cm^-3 Saha still leaves
    # a neutral fraction ~ n_e / S_H ~ 1e-6 even at 1e9 K, hence rtol 1e-5.
    np.testing.assert_allclose(n_e[-1, 1:], (n_h + 2 * n_he)[-1, 1:], rtol=1e-5)
    low = r1 <= 1e-10
    np.testing.assert_allclose(n_e[-1, low][1:], (n_h + 2 * n_he)[-1, low][1:], rtol=1e-10)
    # Every Saha factor rises with T, so n_e cannot fall with T at fixed rho
    # (follows from the Saha equation; common practice as a check).
    assert np.all(np.diff(n_e, axis=0) >= -1e-10 * n_e[1:])


def test_saha_no_hydrogen_no_helium_gives_zero():
    model = SahaEquilibrium(Composition(0.0, 0.0))
    n_e, ion = model.electron_and_ion_terms(np.array([1e-20]), np.array([1e5]), {})
    assert n_e[0] == 0.0 and ion[0] == 0.0


def test_saha_validation():
    with pytest.raises(ValueError, match="tolerance"):
        SahaEquilibrium(tolerance=0.0)
    with pytest.raises(ValueError, match="max_iterations"):
        SahaEquilibrium(max_iterations=0)


# ---------------------------------------------------------------------------
# Dispatch and descriptions
# ---------------------------------------------------------------------------


def test_resolve_ionization_dispatch():
    model = SahaEquilibrium()
    assert resolve_ionization(model) is model
    full = resolve_ionization("full", composition=PURE_H, helium="double")
    assert isinstance(full, FullyIonized) and not isinstance(full, TemperatureThreshold)
    assert full.composition == PURE_H and full.helium == "double"
    thr = resolve_ionization("threshold")
    assert isinstance(thr, TemperatureThreshold) and thr.helium == "single"
    saha = resolve_ionization(" SAHA ")
    assert isinstance(saha, SahaEquilibrium) and saha.composition == Composition()
    sup = resolve_ionization(np.array([0.3, 0.6]))
    # helium follows the hydrogen fraction, singly ionized, by default
    assert isinstance(sup, SuppliedFraction) and sup.helium == "single"
    assert isinstance(resolve_ionization(np.array([0.3]) * u.dimensionless_unscaled, helium="none"), SuppliedFraction)
    assert all(isinstance(m, IonizationModel) for m in (full, thr, saha, sup))


def test_resolve_ionization_errors():
    with pytest.raises(ValueError) as err:
        resolve_ionization("lte")
    for name in ("full", "threshold", "saha"):
        assert name in str(err.value)
    with pytest.raises(ValueError, match="helium"):
        resolve_ionization("saha", helium="single")
    with pytest.raises(InputError, match="IonizationModel"):
        resolve_ionization(object())
    with pytest.raises(InputError, match="IonizingSources"):
        resolve_ionization("sources")


def test_describe_strings():
    assert SahaEquilibrium().describe() == "saha(X=0.7, Y=0.28)"
    assert FullyIonized().describe() == "full(X=0.7, Y=0.28, He=single)"
    assert TemperatureThreshold().describe() == "threshold(T>=8000 K, X=0.7, Y=0.28, He=single)"
    desc = SuppliedFraction(np.array([0.1, 0.9])).describe()
    assert desc.startswith("supplied(") and "min=0.1" in desc and "max=0.9" in desc
    assert "\n" not in desc


# ---------------------------------------------------------------------------
# Saha outside its range; supplied helium fractions
# ---------------------------------------------------------------------------


def test_mcwhirter_density():
    # McWhirter (1965), in the textbook form n_e >= 1.6e12 T^1/2 (Delta E/eV)^3 cm^-3 with Delta E = 10.2 eV
    # for hydrogen (from memory): 1.7e17 cm^-3 at 1e4 K, the order REFERENCES gives (~1e17).
    from rtrace.physics.ionization.saha import mcwhirter_density

    assert mcwhirter_density(1e4) == pytest.approx(1.6e12 * 100.0 * 10.2**3, rel=1e-12)
    assert 1e17 < mcwhirter_density(1e4) < 2e17


def test_saha_warns_at_interstellar_densities_and_names_the_alternatives():
    # Saha (LTE) holds only where collisions dominate radiation (McWhirter criterion, above); at
    # n_H = 100 cm^-3 it ionizes hydrogen fully at 8000-20000 K, where collisional equilibrium leaves
    # it almost neutral below 1.5e4 K.
    rho = np.full(5, 100.0 * M_H / 0.7)
    T = np.array([2000.0, 8000.0, 1e4, 1.5e4, 2e4])  # at 2000 K Saha too leaves n_e < 1e-3 n_H
    model = SahaEquilibrium()
    with pytest.warns(PhysicsRangeWarning, match=r"saha: 4 of 5 cells \(80%\).*'collisional'.*'sources'"):
        model.electron_and_ion_terms(rho, T)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        model.electron_and_ion_terms(rho, T)  # once per model, not on every evaluation


@pytest.mark.parametrize("n_h, T", [(1e20, 1e4), (1e23, 1e6), (1e19, 3000.0)])
def test_saha_is_quiet_for_dense_gas(n_h, T):
    # Stellar interiors and atmospheres: electron densities near or above the McWhirter density.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        SahaEquilibrium().electron_and_ion_terms(np.array([n_h * M_H / 0.7]), np.array([T]))


def test_supplied_helium_follows_a_switched_off_region():
    # A region the radiation-hydrodynamics run left neutral (x = 0) has no free electrons, whatever
    # the helium rule (a region switched off must not emit).
    rho = np.full(2, 1e-22)
    for helium in ("single", "double", "follow", "none"):
        n_e, ion = SuppliedFraction(np.array([0.0, 1.0]), MIXED, helium).electron_and_ion_terms(rho, np.full(2, 1e4))
        assert n_e[0] == 0.0 and ion[0] == 0.0 and n_e[1] > 0


def test_supplied_helium_fractions():
    # Hand bookkeeping: n_e = x n_H + (f2 + 2 f3) n_He; ion term = x n_H + f2 n_He + 4 f3 n_He
    # (He II has Z = 1, He III Z = 2).
    x = np.array([0.0, 0.5, 1.0])
    f2 = np.array([0.0, 0.3, 0.2])
    f3 = np.array([0.0, 0.1, 0.8])
    rho = np.full(3, 1e-22)
    n_h, n_he = 0.7 * 1e-22 / M_H, 0.28 * 1e-22 / M_HE
    model = SuppliedFraction(x, MIXED, helium_ii=f2, helium_iii=f3)
    sp = model.species_densities(rho, np.full(3, 1e4))
    np.testing.assert_allclose(sp["n_e"], x * n_h + (f2 + 2 * f3) * n_he, rtol=1e-12)
    np.testing.assert_allclose(sp["n_HeI"], (1 - f2 - f3) * n_he, rtol=1e-12, atol=1e-300)
    n_e, ion = model.electron_and_ion_terms(rho, np.full(3, 1e4))
    np.testing.assert_allclose(ion, x * n_h + (f2 + 4 * f3) * n_he, rtol=1e-12)
    # named fields, read when evaluated
    named = SuppliedFraction("xH", MIXED, helium_iii="xHe3")
    assert named.field_names() == ("xH", "xHe3")
    n_e2, _ = named.electron_and_ion_terms(rho, np.full(3, 1e4), {"xH": x, "xHe3": f3})
    np.testing.assert_allclose(n_e2, x * n_h + 2 * f3 * n_he, rtol=1e-12)
    with pytest.raises(InputError, match="helium: not used when helium_ii"):
        SuppliedFraction(x, helium="single", helium_ii=f2)
    with pytest.raises(
        InputError,
        match=r"helium_ii \+ helium_iii: 1 of 3 cells have He II \+ He III fractions "
        r"above 1 \(largest 1.2\)",
    ):
        SuppliedFraction(x, helium_ii=f2, helium_iii=np.array([0.0, 0.9, 0.8])).electron_and_ion_terms(
            rho, np.full(3, 1e4)
        )
